"""Reference fixtures for lacuna's alternative schemes, made with numpy/scipy.

    /tmp/lacuna-ref/bin/python tests/reference/make_scheme_fixtures.py

Writes tests/reference/fixtures/{em,spline}.json (committed; versions pinned
in requirements.txt).

em: the Gaussian maximum-likelihood covariance with missing blocks, found
    by maximising the observed-data log-likelihood directly (L-BFGS-B over
    a Cholesky parametrisation) -- not by EM, so it checks lacuna's EM
    independently.
spline: the spherical-spline interpolation matrix of Perrin et al. (1989),
    written from the published formulas with scipy.special.eval_legendre.
"""
import json
import os

import numpy as np
import scipy
import scipy.optimize as sopt
from scipy.special import eval_legendre

OUT = os.path.join(os.path.dirname(__file__), "fixtures")
RNG = np.random.default_rng(20261203)


def meta():
    return {"numpy": np.__version__, "scipy": scipy.__version__,
            "script": "tests/reference/make_scheme_fixtures.py"}


def em_case(p, n, t, drop):
    q, _ = np.linalg.qr(RNG.standard_normal((p, p)))
    sigma = (q * np.logspace(0, 1, p)) @ q.T
    chol = np.linalg.cholesky(sigma)
    covs, obs = [], []
    for i in range(n):
        x = RNG.standard_normal((t, p)) @ chol.T
        c = x.T @ x / t
        o = np.arange(p)
        if RNG.random() < drop:
            k = RNG.integers(1, 3)
            lost = RNG.choice(p, size=k, replace=False)
            o = np.setdiff1d(o, lost)
        covs.append(c)
        obs.append(o.tolist())

    def unpack(theta):
        l = np.zeros((p, p))
        l[np.tril_indices(p)] = theta
        d = np.diag_indices(p)
        l[d] = np.exp(l[d])
        return l

    def nll(theta):
        l = unpack(theta)
        s = l @ l.T
        total = 0.0
        for c, o in zip(covs, obs):
            so = s[np.ix_(o, o)]
            sign, ld = np.linalg.slogdet(so)
            total += 0.5 * (ld + np.trace(np.linalg.solve(so, c[np.ix_(o, o)])))
        return total / n

    l0 = np.linalg.cholesky(np.mean(covs, axis=0))
    theta0 = l0[np.tril_indices(p)].copy()
    di = [k for k, (r, c) in enumerate(zip(*np.tril_indices(p))) if r == c]
    theta0[di] = np.log(theta0[di])
    res = sopt.minimize(nll, theta0, method="L-BFGS-B",
                        options={"gtol": 1e-12, "ftol": 1e-15, "maxiter": 20000, "maxfun": 200000})
    l = unpack(res.x)
    return {"p": p, "covs": [c.tolist() for c in covs], "observed": obs,
            "ml": (l @ l.T).tolist(), "nll": float(res.fun)}


def spline():
    n = 10
    v = RNG.standard_normal((n, 3))
    v[:, 2] = np.abs(v[:, 2]) + 0.3
    pos = v / np.linalg.norm(v, axis=1, keepdims=True)
    frm, to = list(range(7)), [7, 8, 9]

    def g(x):
        ns = np.arange(1, 51)
        terms = (2 * ns + 1) / (ns * (ns + 1)) ** 4
        return np.sum(terms[:, None] * np.array([eval_legendre(k, x) for k in ns]), axis=0) / (4 * np.pi)

    cos_ff = np.clip(pos[frm] @ pos[frm].T, -1, 1)
    cos_tf = np.clip(pos[to] @ pos[frm].T, -1, 1)
    gff = g(cos_ff.ravel()).reshape(cos_ff.shape)
    gtf = g(cos_tf.ravel()).reshape(cos_tf.shape)
    k = len(frm)
    a = np.zeros((k + 1, k + 1))
    a[:k, :k] = gff
    a[:k, k] = 1
    a[k, :k] = 1
    rhs = np.hstack([gtf, np.ones((len(to), 1))])
    w = (rhs @ np.linalg.inv(a))[:, :k]
    return {"positions": pos.tolist(), "from": frm, "to": to, "w": w.tolist(),
            "g_samples": [[float(x), float(g(np.array([x]))[0])] for x in [-1.0, -0.3, 0.0, 0.5, 0.9, 1.0]]}


def main():
    em = {"meta": meta(), "cases": [em_case(4, 40, 30, 0.5), em_case(6, 60, 25, 0.6)]}
    with open(os.path.join(OUT, "em.json"), "w") as f:
        json.dump(em, f)
    with open(os.path.join(OUT, "spline.json"), "w") as f:
        json.dump({"meta": meta(), **spline()}, f)
    print("wrote em.json, spline.json")


if __name__ == "__main__":
    main()
