"""Reference fixtures for lacuna's tests, computed with numpy/scipy.

Run from the repository root:
    python3 -m venv /tmp/lacuna-ref && /tmp/lacuna-ref/bin/pip install -r tests/reference/requirements.txt
    /tmp/lacuna-ref/bin/python tests/reference/make_fixtures.py [NAME ...]

Writes tests/reference/fixtures/*.json. The fixtures are committed, so
`cargo test` needs no Python. Versions are pinned in requirements.txt.

The methods here are deliberately different from lacuna's: symmetric square
roots and scipy's generalized eigensolver instead of Cholesky whitening,
scipy.linalg.logm/expm/sqrtm (Schur/Pade based) for the matrix functions,
LAPACK eigh (numpy) with symmetric square roots in the iterations,
and L-BFGS-B over a Cholesky parametrisation for the masked mean
instead of Riemannian L-BFGS.
"""
import json
import os
import sys

import numpy as np
import scipy
import scipy.linalg as sla
import scipy.optimize as sopt

OUT = os.path.join(os.path.dirname(__file__), "fixtures")
RNG = np.random.default_rng(20261201)


def random_spd(p, cond, rng=RNG):
    q, r = np.linalg.qr(rng.standard_normal((p, p)))
    q = q * np.sign(np.diag(r))
    ev = np.logspace(-0.5, 0.5, p) ** np.log10(cond)
    a = (q * ev) @ q.T
    return 0.5 * (a + a.T)


def sym(a):
    return 0.5 * (a + a.T)


def airm(a, b):
    lam = sla.eigh(b, a, eigvals_only=True)
    return float(np.sqrt(np.sum(np.log(lam) ** 2)))


def eig_fn(a, f):
    ev, u = np.linalg.eigh(sym(a))
    return sym((u * f(ev)) @ u.T)


def meta():
    return {"numpy": np.__version__, "scipy": scipy.__version__, "script": "tests/reference/make_fixtures.py"}


def matrix_functions():
    cases = []
    for p, cond in [(3, 10.0), (8, 1e4), (16, 1e8), (64, 1e8)]:
        a = random_spd(p, cond)
        s = sym(RNG.standard_normal((p, p)))
        # b near a: the distance is then well conditioned (kappa(a^-1 b) small),
        # as for trials near their mean; far-apart ill-conditioned pairs have
        # generalized eigenvalues that no method gets to full accuracy.
        ah = np.real(sla.sqrtm(a))
        b = sym(ah @ sla.expm(sym(RNG.standard_normal((p, p))) * (0.5 / np.sqrt(p))) @ ah)
        cases.append({
            "p": p, "cond": cond,
            "a": a.tolist(), "b": b.tolist(), "s": s.tolist(),
            "logm_a": sym(np.real(sla.logm(a))).tolist(),
            "sqrtm_a": sym(np.real(sla.sqrtm(a))).tolist(),
            "expm_s": sym(sla.expm(s)).tolist(),
            "airm_ab": airm(a, b),
            "logeuclid_ab": float(np.linalg.norm(np.real(sla.logm(a)) - np.real(sla.logm(b)))),
        })
    return {"meta": meta(), "cases": cases}


def karcher_reference(mats, w, tol=1e-14, max_iter=10000):
    """Plain fixed-point (unit step) iteration with symmetric square roots
    (numpy.linalg.eigh), started from the log-Euclidean mean (scipy logm/expm)."""
    w = np.asarray(w) / np.sum(w)
    x = sla.expm(sum(wi * np.real(sla.logm(c)) for wi, c in zip(w, mats)))
    for _ in range(max_iter):
        xs = eig_fn(x, np.sqrt)
        xis = eig_fn(x, lambda v: 1.0 / np.sqrt(v))
        s = sum(wi * eig_fn(xis @ c @ xis, np.log) for wi, c in zip(w, mats))
        x = sym(xs @ eig_fn(s, np.exp) @ xs)
        if np.linalg.norm(s) < tol:
            break
    return x


def karcher_cases():
    cases = []
    for p, n, cond, spread in [(4, 6, 10.0, 0.5), (8, 10, 1e3, 0.4), (32, 20, 1e8, 0.2), (64, 12, 1e8, 0.15)]:
        center = random_spd(p, cond)
        cs = np.real(sla.sqrtm(center))
        mats = []
        for _ in range(n):
            z = sym(RNG.standard_normal((p, p))) * spread / np.sqrt(p)
            mats.append(sym(cs @ sla.expm(z) @ cs))
        w = RNG.uniform(0.5, 2.0, n)
        g = karcher_reference(mats, w)
        cases.append({"p": p, "n": n, "cond": cond, "mats": [m.tolist() for m in mats], "weights": w.tolist(), "mean": g.tolist()})
    return {"meta": meta(), "cases": cases}


def masked_cost_grad(theta, p, blocks, obs, w):
    l = np.zeros((p, p))
    il = np.tril_indices(p)
    l[il] = theta
    d = np.diag_indices(p)
    l[d] = np.exp(l[d])
    x = l @ l.T
    f = 0.0
    ge = np.zeros((p, p))
    for c, o, wi in zip(blocks, obs, w):
        a = x[np.ix_(o, o)]
        ahi = eig_fn(a, lambda v: 1.0 / np.sqrt(v))
        lg = eig_fn(ahi @ c @ ahi, np.log)
        f += 0.5 * wi * np.sum(lg * lg)
        ge[np.ix_(o, o)] -= wi * sym(ahi @ lg @ ahi)
    gl = 2.0 * ge @ l
    gl[d] *= l[d]
    return f, gl[il]


def pairwise_start(blocks, obs, p):
    """Pairwise (available-case) average of the observed entries, its
    spectrum floored at 1e-3 of the mean variance: an SPD starting point."""
    s = np.zeros((p, p))
    cnt = np.zeros((p, p))
    for c, o in zip(blocks, obs):
        s[np.ix_(o, o)] += c
        cnt[np.ix_(o, o)] += 1
    x0 = s / cnt
    ev, u = np.linalg.eigh(x0)
    return (u * np.maximum(ev, 1e-3 * np.trace(x0) / p)) @ u.T


def masked_cases():
    cases = []
    for p, n, frac, max_lost in [(5, 40, 0.4, 2), (10, 60, 0.3, 3), (16, 80, 0.3, 4)]:
        sigma = random_spd(p, 50.0)
        ls = np.linalg.cholesky(sigma)
        blocks, obs, fulls = [], [], []
        for _ in range(n):
            xsamp = ls @ RNG.standard_normal((p, 3 * p))
            c = sym(xsamp @ xsamp.T / (3 * p))
            o = list(range(p))
            if RNG.uniform() < frac:
                lost = RNG.choice(p, size=RNG.integers(1, max_lost + 1), replace=False)
                o = [k for k in o if k not in set(lost.tolist())]
            blocks.append(c[np.ix_(o, o)])
            obs.append(o)
            fulls.append(c)
        w = np.ones(n) / n
        # Start from the complete-trial Karcher-free guess: pairwise average.
        l0 = np.linalg.cholesky(pairwise_start(blocks, obs, p))
        l0[np.diag_indices(p)] = np.log(np.diag(l0))
        theta0 = l0[np.tril_indices(p)]
        res = sopt.minimize(masked_cost_grad, theta0, args=(p, blocks, obs, w), jac=True, method="L-BFGS-B",
                            options={"maxiter": 20000, "maxcor": 30, "ftol": 1e-16, "gtol": 1e-13})
        l = np.zeros((p, p))
        l[np.tril_indices(p)] = res.x
        l[np.diag_indices(p)] = np.exp(np.diag(l))
        x = l @ l.T
        cases.append({
            "p": p, "n": n,
            "observed": obs,
            "blocks": [b.tolist() for b in blocks],
            "mean": x.tolist(), "cost": float(res.fun), "optimizer_message": str(res.message),
            "optimizer_iterations": int(res.nit),
        })
    return {"meta": meta(), "cases": cases}


def masked_rare_cases():
    """Masked sets where channel 0 survives in a handful of trials (a failed
    electrode): the cost is nearly flat along that channel's entries, the
    case lacuna preconditions. Own seed, so the other fixtures stay as they are."""
    rng = np.random.default_rng(20261203)
    cases = []
    for p, n, kept in [(8, 300, 8), (16, 300, 10)]:
        sigma = random_spd(p, 1e3, rng)
        ls = np.linalg.cholesky(sigma)
        keep = set(np.linspace(0, n - 1, kept).round().astype(int).tolist())
        blocks, obs = [], []
        for i in range(n):
            xsamp = ls @ rng.standard_normal((p, 3 * p))
            gain = np.exp(0.3 * rng.standard_normal(p))
            c = sym((gain[:, None] * (xsamp @ xsamp.T / (3 * p))) * gain[None, :])
            lost = set(rng.choice(np.arange(1, p), size=rng.integers(0, 3), replace=False).tolist())
            if i not in keep:
                lost.add(0)
            o = [k for k in range(p) if k not in lost]
            blocks.append(c[np.ix_(o, o)])
            obs.append(o)
        w = np.ones(n) / n
        l0 = np.linalg.cholesky(pairwise_start(blocks, obs, p))
        l0[np.diag_indices(p)] = np.log(np.diag(l0))
        # Cost-based stopping would end ~1e-7 from the optimum along the
        # rare channel's flat direction (sqrt(eps·F / curvature)); ftol = 0
        # runs L-BFGS-B on the gradient until its line search gives out,
        # then a root finder polishes the gradient (reported as gradient_norm).
        res = sopt.minimize(masked_cost_grad, l0[np.tril_indices(p)], args=(p, blocks, obs, w), jac=True,
                            method="L-BFGS-B",
                            options={"maxiter": 50000, "maxcor": 50, "ftol": 0.0, "gtol": 1e-15, "maxls": 100})
        # Polish: solve gradient = 0 by MINPACK's hybrid Powell method
        # (finite-difference Jacobian of the analytic gradient), which
        # converges fast near the optimum where the cost is nearly flat.
        root = sopt.root(lambda th: masked_cost_grad(th, p, blocks, obs, w)[1], res.x, method="hybr",
                         options={"xtol": 1e-15})
        if np.linalg.norm(masked_cost_grad(root.x, p, blocks, obs, w)[1]) < np.linalg.norm(
                masked_cost_grad(res.x, p, blocks, obs, w)[1]):
            res.x, res.fun = root.x, masked_cost_grad(root.x, p, blocks, obs, w)[0]
        l = np.zeros((p, p))
        l[np.tril_indices(p)] = res.x
        l[np.diag_indices(p)] = np.exp(np.diag(l))
        x = l @ l.T
        cases.append({
            "p": p, "n": n, "rare_channel_trials": kept,
            "gradient_norm": float(np.linalg.norm(masked_cost_grad(res.x, p, blocks, obs, w)[1])),
            "observed": obs,
            "blocks": [b.tolist() for b in blocks],
            "mean": x.tolist(), "cost": float(res.fun), "optimizer_message": str(res.message),
            "optimizer_iterations": int(res.nit),
        })
    return {"meta": meta(), "cases": cases}


def decoder_cases():
    """Minimum distance to mean on observed blocks: two class means, trials
    with masks, the affine-invariant distance of each trial's observed block
    to each mean's matching sub-block by scipy's generalized symmetric
    eigensolver, and the nearest class. Own seed."""
    rng = np.random.default_rng(20261204)
    p, n = 6, 24
    means = [random_spd(p, 10.0, rng), random_spd(p, 30.0, rng)]
    trials, obs, dist, pred = [], [], [], []
    for i in range(n):
        m = means[i % 2]
        ls = np.linalg.cholesky(m)
        x = ls @ rng.standard_normal((p, 3 * p))
        c = sym(x @ x.T / (3 * p))
        lost = set(rng.choice(p, size=rng.integers(0, 3), replace=False).tolist())
        o = [k for k in range(p) if k not in lost]
        b = c[np.ix_(o, o)]
        d = [airm(mk[np.ix_(o, o)], b) for mk in means]
        trials.append(b.tolist())
        obs.append(o)
        dist.append(d)
        pred.append(int(np.argmin(d)))
    return {"meta": meta(), "p": p, "means": [m.tolist() for m in means], "observed": obs,
            "blocks": trials, "distances": dist, "predicted": pred}


def max_det_fill(x, free):
    """Maximum-determinant completion by scipy over the free entries
    (Dempster 1972): maximise log det with the pinned entries fixed."""
    if not free:
        return x

    def neg(v):
        y = x.copy()
        for k, (a, b) in enumerate(free):
            y[a, b] = y[b, a] = v[k]
        sgn, ld = np.linalg.slogdet(y)
        if sgn <= 0:
            return 1e300, np.zeros(len(free))
        s = np.linalg.inv(y)
        return -ld, np.array([-2.0 * s[a, b] for a, b in free])

    v0 = np.array([x[a, b] for a, b in free])
    res = sopt.minimize(neg, v0, jac=True, method="BFGS", options={"gtol": 1e-14, "maxiter": 10000})
    y = x.copy()
    for k, (a, b) in enumerate(free):
        y[a, b] = y[b, a] = res.x[k]
    return y


def masked_free_cases():
    """Pairs never observed together, no complete trial, strongly correlated
    channels (the flat-direction case of the masked cost)."""
    rng = np.random.default_rng(20261203)
    cases = []
    for p, n in [(4, 40), (8, 60), (16, 120)]:
        rho = 0.9
        d = np.exp(rng.uniform(-1, 1, p))
        sigma = (rho * np.ones((p, p)) + (1 - rho) * np.eye(p)) * np.outer(d, d)
        ls = np.linalg.cholesky(sigma)
        pair_a, pair_b = 1, p - 1
        blocks, obs = [], []
        for i in range(n):
            xs = ls @ rng.standard_normal((p, 3 * p))
            c = sym(xs @ xs.T / (3 * p))
            lost = {pair_a if i % 2 == 0 else pair_b}
            others = [k for k in range(p) if k not in (pair_a, pair_b)]
            extra = rng.integers(0, min(3, len(others)))
            lost |= set(rng.choice(others, size=extra, replace=False).tolist())
            o = [k for k in range(p) if k not in lost]
            blocks.append(c[np.ix_(o, o)])
            obs.append(o)
        w = np.ones(n) / n
        co = np.zeros((p, p), dtype=int)
        for o in obs:
            co[np.ix_(o, o)] += 1
        free = [(a, b) for a in range(p) for b in range(a + 1, p) if co[a, b] == 0]
        x0 = np.diag(np.exp([np.mean([np.log(bl[o.index(k), o.index(k)]) for bl, o in zip(blocks, obs) if k in o]) for k in range(p)]))
        l0 = np.linalg.cholesky(x0)
        l0[np.diag_indices(p)] = np.log(np.diag(l0))
        res = sopt.minimize(masked_cost_grad, l0[np.tril_indices(p)], args=(p, blocks, obs, w), jac=True,
                            method="L-BFGS-B", options={"maxiter": 50000, "maxcor": 30, "ftol": 1e-16, "gtol": 1e-13})
        l = np.zeros((p, p))
        l[np.tril_indices(p)] = res.x
        l[np.diag_indices(p)] = np.exp(np.diag(l))
        x = max_det_fill(l @ l.T, free)
        cases.append({
            "p": p, "n": n, "observed": obs, "blocks": [b.tolist() for b in blocks],
            "free_pairs": [list(f) for f in free],
            "mean": x.tolist(), "cost": float(res.fun), "optimizer_message": str(res.message),
        })
    return {"meta": meta(), "cases": cases}


def main():
    os.makedirs(OUT, exist_ok=True)
    only = set(sys.argv[1:])  # fixture names to (re)write; all when empty
    for name, fn in [("matrix_functions", matrix_functions), ("karcher", karcher_cases), ("masked", masked_cases),
                     ("masked_free", masked_free_cases), ("masked_rare", masked_rare_cases),
                     ("decoder", decoder_cases)]:
        if only and name not in only:
            continue
        with open(os.path.join(OUT, name + ".json"), "w") as f:
            json.dump(fn(), f)
        print("wrote", name)


if __name__ == "__main__":
    main()
