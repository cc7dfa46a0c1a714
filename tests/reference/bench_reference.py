"""Reference solvers for lacuna's benchmark, written the way most people would
in numpy (batched numpy.linalg.eigh over the stack).

    python bench_reference.py DIR full|masked

DIR holds covs.npy (N, p, p) and mask.npy (N, p) written by lacuna-bench.
Prints one JSON line: method, iterations, seconds, gradient_norm (the same
whitened gradient norm lacuna reports, weights 1/N). Threads: numpy's BLAS
uses what the environment allows; the benchmark docs say what was set.

full:   the fixed unit-step Karcher flow X <- X^1/2 exp(mean log(X^-1/2 C X^-1/2)) X^1/2
        from the arithmetic mean, until ||mean log|| <= 1e-10 (max 500 iterations).
masked: Riemannian gradient descent on the masked cost with Armijo backtracking,
        trials batched by observation pattern, from the available-case mean.
"""
import json
import sys
import time

import numpy as np


def eig_fn(a, f):
    w, v = np.linalg.eigh(a)
    return (v * f(w)[..., None, :]) @ np.swapaxes(v, -1, -2)


def sym(a):
    return 0.5 * (a + np.swapaxes(a, -1, -2))


def full(covs, tol=1e-10, max_iter=500):
    n = covs.shape[0]
    t = time.perf_counter()
    x = covs.mean(axis=0)
    it = 0
    g = np.inf
    while it < max_iter:
        xs = eig_fn(x, np.sqrt)
        xis = eig_fn(x, lambda v: 1.0 / np.sqrt(v))
        m = sym(xis @ covs @ xis)
        s = eig_fn(m, np.log).sum(axis=0) / n
        g = np.linalg.norm(s)
        if g <= tol:
            break
        x = sym(xs @ eig_fn(sym(s), np.exp) @ xs)
        it += 1
    return {"method": "numpy unit-step flow", "iterations": it, "seconds": time.perf_counter() - t, "gradient_norm": float(g)}


def masked(covs, mask, tol=1e-10, max_iter=2000):
    n, p, _ = covs.shape
    t = time.perf_counter()
    patterns = {}
    for i in range(n):
        patterns.setdefault(tuple(np.flatnonzero(mask[i])), []).append(i)
    groups = [(np.array(o), covs[np.ix_(idx, o, o)]) for o, idx in patterns.items()]
    s = np.zeros((p, p))
    c = np.zeros((p, p))
    for o, blocks in groups:
        s[np.ix_(o, o)] += blocks.sum(axis=0)
        c[np.ix_(o, o)] += blocks.shape[0]
    x = np.where(c > 0, s / np.maximum(c, 1), 0.0)
    w, v = np.linalg.eigh(x)
    x = (v * np.maximum(w, 1e-3 * np.trace(x) / p)) @ v.T

    def cost_grad(x, need_grad=True):
        f = 0.0
        ge = np.zeros((p, p))
        for o, blocks in groups:
            a = x[np.ix_(o, o)]
            ev, u = np.linalg.eigh(a)
            if ev[0] <= 0:
                return np.inf, None
            ahi = (u / np.sqrt(ev)) @ u.T
            m = sym(ahi @ blocks @ ahi)
            lw, lv = np.linalg.eigh(m)
            lg = np.log(lw)
            f += 0.5 * np.sum(lg * lg) / n
            if need_grad:
                lm = ((lv * lg[:, None, :]) @ np.swapaxes(lv, -1, -2)).sum(axis=0)
                ge[np.ix_(o, o)] -= ahi @ lm @ ahi / n
        return f, ge

    f, ge = cost_grad(x)
    it = 0
    gnorm = np.inf
    while it < max_iter:
        xs = eig_fn(x, np.sqrt)
        xis = eig_fn(x, lambda v: 1.0 / np.sqrt(v))
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
    return {"method": "numpy Armijo gradient descent", "iterations": it, "seconds": time.perf_counter() - t, "gradient_norm": float(gnorm)}


def main():
    d, mode = sys.argv[1], sys.argv[2]
    covs = np.load(d + "/covs.npy")
    if mode == "full":
        print(json.dumps(full(covs)))
    else:
        mask = np.load(d + "/mask.npy").astype(bool)
        print(json.dumps(masked(np.nan_to_num(covs), mask)))


if __name__ == "__main__":
    main()
