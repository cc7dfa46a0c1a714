"""Reference solvers for lacuna's benchmark, written the way a skilled numpy
user would (batched numpy.linalg.eigh over the stack, trials spread over a
process pool when asked).

    python bench_reference.py DIR full|masked|recentre|predict [--workers K] [--max-seconds S]

DIR holds covs.npy (N, p, p) and mask.npy (N, p) written by lacuna-bench.
Prints one JSON line: method, workers, iterations, seconds, gradient_norm
(the same whitened gradient norm lacuna reports, weights 1/N), converged.

--workers K   splits the trials into K contiguous shares, each held by one
              forked process that evaluates its share's cost and gradient
              (one BLAS thread per process: OPENBLAS_NUM_THREADS etc. are set
              to 1 before numpy loads); the parent sums the K parts. K = 1
              (default) runs in this process with the BLAS threads the
              environment allows.
--max-seconds S  stops after S seconds of wall time and reports the state
              reached (converged: false), for sets where the method crawls.

full:   the fixed unit-step Karcher flow X <- X^1/2 exp(mean log(X^-1/2 C X^-1/2)) X^1/2
        from the arithmetic mean, until ||mean log|| <= 1e-10 (max 500 iterations).
masked: Riemannian gradient descent on the masked cost with Armijo backtracking,
        trials batched by observation pattern, from the available-case mean.
recentre: every trial's observed block whitened by its session mean's sub-block,
        M[o,o]^-1/2 C M[o,o]^-1/2 (means.npy (S, p, p), session.npy (N,));
        one eigh per (pattern, session), batched matmuls over the group.
predict: every trial's affine-invariant distance to each class mean
        (classes.npy (K, p, p)) on its observed block: per (pattern, class) one
        Cholesky, then batched triangular whitening and eigvalsh.
        recentre and predict print the best of 3 timed passes over the data
        (pattern grouping and the fork happen before the clock starts; the
        workers send back a checksum, not the arrays, which favours the reference).
"""
import json
import os
import sys
import time


def _option(name, default):
    if name in sys.argv:
        return type(default)(sys.argv[sys.argv.index(name) + 1])
    return default


WORKERS = _option("--workers", 1)
MAX_SECONDS = _option("--max-seconds", float("inf"))
if WORKERS > 1:
    for var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ[var] = "1"

import multiprocessing  # noqa: E402

import numpy as np  # noqa: E402


def eig_fn(a, f):
    w, v = np.linalg.eigh(a)
    return (v * f(w)[..., None, :]) @ np.swapaxes(v, -1, -2)


def sym(a):
    return 0.5 * (a + np.swapaxes(a, -1, -2))


# The share of the data a forked worker evaluates (set before the fork).
_SHARE = None


def _full_part(x):
    covs = _SHARE
    xis = eig_fn(x, lambda v: 1.0 / np.sqrt(v))
    m = sym(xis @ covs @ xis)
    return eig_fn(m, np.log).sum(axis=0)


def _masked_part(args):
    x, n, need_grad = args
    p = x.shape[0]
    f = 0.0
    ge = np.zeros((p, p))
    for o, blocks in _SHARE:
        a = x[np.ix_(o, o)]
        ev, u = np.linalg.eigh(a)
        if ev[0] <= 0:
            return np.inf, None
        ahi = (u / np.sqrt(ev)) @ u.T
        m = sym(ahi @ blocks @ ahi)
        lw, lv = np.linalg.eigh(m)
        if lw.min() <= 0:
            return np.inf, None
        lg = np.log(lw)
        f += 0.5 * np.sum(lg * lg) / n
        if need_grad:
            lm = ((lv * lg[:, None, :]) @ np.swapaxes(lv, -1, -2)).sum(axis=0)
            ge[np.ix_(o, o)] -= ahi @ lm @ ahi / n
    return f, ge


class Evaluator:
    """Maps a part function over the shares (in-process for one worker)."""

    def __init__(self, shares, part):
        global _SHARE
        self.part = part
        if len(shares) == 1:
            _SHARE = shares[0]
            self.pool = None
            return
        self.pool = []
        ctx = multiprocessing.get_context("fork")
        for share in shares:
            _SHARE = share
            parent, child = ctx.Pipe()
            proc = ctx.Process(target=_serve, args=(child, part), daemon=True)
            proc.start()
            self.pool.append((proc, parent))
        _SHARE = None

    def map(self, arg):
        if self.pool is None:
            return [self.part(arg)]
        for _, conn in self.pool:
            conn.send(arg)
        return [conn.recv() for _, conn in self.pool]

    def close(self):
        for proc, conn in self.pool or []:
            conn.send(None)
            proc.join()


def _serve(conn, part):
    while True:
        arg = conn.recv()
        if arg is None:
            return
        conn.send(part(arg))


def full(covs, tol=1e-10, max_iter=500):
    n = covs.shape[0]
    t = time.perf_counter()
    ev = Evaluator(np.array_split(covs, WORKERS), _full_part)
    x = covs.mean(axis=0)
    it = 0
    g = np.inf
    while it < max_iter and time.perf_counter() - t < MAX_SECONDS:
        xs = eig_fn(x, np.sqrt)
        s = sum(ev.map(x)) / n
        g = np.linalg.norm(s)
        if g <= tol:
            break
        x = sym(xs @ eig_fn(sym(s), np.exp) @ xs)
        it += 1
    ev.close()
    return {"method": "numpy unit-step flow", "workers": WORKERS, "iterations": it,
            "seconds": time.perf_counter() - t, "gradient_norm": float(g), "converged": bool(g <= tol)}


def masked(covs, mask, tol=1e-10, max_iter=2000):
    n, p, _ = covs.shape
    t = time.perf_counter()
    shares = []
    for part in np.array_split(np.arange(n), WORKERS):
        patterns = {}
        for i in part:
            patterns.setdefault(tuple(np.flatnonzero(mask[i])), []).append(i)
        shares.append([(np.array(o), covs[np.ix_(idx, o, o)]) for o, idx in patterns.items()])
    s = np.zeros((p, p))
    c = np.zeros((p, p))
    for i in range(n):
        o = np.flatnonzero(mask[i])
        s[np.ix_(o, o)] += covs[i][np.ix_(o, o)]
        c[np.ix_(o, o)] += 1
    x = np.where(c > 0, s / np.maximum(c, 1), 0.0)
    w, v = np.linalg.eigh(x)
    x = (v * np.maximum(w, 1e-3 * np.trace(x) / p)) @ v.T
    ev = Evaluator(shares, _masked_part)

    def cost_grad(x):
        parts = ev.map((x, n, True))
        if any(g is None for _, g in parts):
            return np.inf, None
        return sum(f for f, _ in parts), sum(g for _, g in parts)

    f, ge = cost_grad(x)
    it = 0
    gnorm = np.inf
    while it < max_iter and time.perf_counter() - t < MAX_SECONDS:
        xs = eig_fn(x, np.sqrt)
        gw = sym(xs @ ge @ xs)  # whitened Riemannian gradient
        gnorm = np.linalg.norm(gw)
        if gnorm <= tol:
            break
        step = 1.0
        while step > 1e-12:
            xn = sym(xs @ eig_fn(-step * gw, np.exp) @ xs)
            fn, gen = cost_grad(xn)
            if fn <= f - 1e-4 * step * gnorm ** 2 + 1e-15 * abs(f):
                break
            step *= 0.5
        if step <= 1e-12:
            break
        x, f, ge = xn, fn, gen
        it += 1
    ev.close()
    return {"method": "numpy Armijo gradient descent", "workers": WORKERS, "iterations": it,
            "seconds": time.perf_counter() - t, "gradient_norm": float(gnorm), "converged": bool(gnorm <= tol)}


def _groups(covs, mask, part, key):
    """Trials of `part` grouped by (key, observation pattern), blocks gathered."""
    groups = {}
    for i in part:
        groups.setdefault((int(key[i]), tuple(np.flatnonzero(mask[i]))), []).append(i)
    return [(k, np.array(o), covs[np.ix_(idx, o, o)]) for (k, o), idx in groups.items()]


def _recentre_part(means):
    total = 0.0
    for k, o, blocks in _SHARE:
        w = eig_fn(means[k][np.ix_(o, o)], lambda v: 1.0 / np.sqrt(v))
        out = sym(w @ blocks @ w)
        total += float(np.trace(out, axis1=1, axis2=2).sum())
    return total


def _predict_part(classes):
    total = 0.0
    for _, o, blocks in _SHARE:
        for m in classes:
            li = np.linalg.inv(np.linalg.cholesky(m[np.ix_(o, o)]))
            ev = np.linalg.eigvalsh(li @ blocks @ li.T)
            total += float(np.sqrt((np.log(ev) ** 2).sum(axis=1)).sum())
    return total


def per_trial(d, covs, mask, mode):
    n = covs.shape[0]
    if mode == "recentre":
        key, arg, part = np.load(d + "/session.npy"), np.load(d + "/means.npy"), _recentre_part
    else:
        key, arg, part = np.zeros(n, dtype=int), np.load(d + "/classes.npy"), _predict_part
    shares = [_groups(covs, mask, p, key) for p in np.array_split(np.arange(n), WORKERS)]
    ev = Evaluator(shares, part)
    best, checksum = np.inf, None
    for _ in range(3):
        t = time.perf_counter()
        checksum = sum(ev.map(arg))
        best = min(best, time.perf_counter() - t)
    ev.close()
    return {"method": f"numpy batched {mode}", "workers": WORKERS, "trials": n,
            "seconds": best, "checksum": checksum}


def main():
    d, mode = sys.argv[1], sys.argv[2]
    covs = np.load(d + "/covs.npy")
    if mode in ("recentre", "predict"):
        mask = np.load(d + "/mask.npy").astype(bool)
        print(json.dumps(per_trial(d, np.nan_to_num(covs), mask, mode)))
    elif mode == "full":
        print(json.dumps(full(covs)))
    else:
        mask = np.load(d + "/mask.npy").astype(bool)
        print(json.dumps(masked(np.nan_to_num(covs), mask)))


if __name__ == "__main__":
    main()
