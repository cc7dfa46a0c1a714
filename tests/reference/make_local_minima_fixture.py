"""Two local minima of the masked cost, found by scipy (versions pinned in
requirements.txt) independently of lacuna.

Run from the repository root (see make_fixtures.py for the venv):
    /tmp/lacuna-ref/bin/python tests/reference/make_local_minima_fixture.py

The set (docs/masked-mean.md, "Two local minima"): two channels; 10 trials
observe only channel 0 with variance c = 5, 10 observe only channel 1 with
variance 5, and one complete trial has covariance [[1, 0.1], [0.1, 1]].
The variance trials pin the diagonal near 5 > e, where the complete trial's
term ln²(c+b) + ln²(c−b) has a local maximum at b = 0 (second derivative
4(1 − ln c)/c²), so the mean takes a correlation of either sign; the complete
trial's small positive correlation makes the positive one cheaper.

The cost is F(X) = Σ_i ½ w_i δ²(X[o_i,o_i], C_i) / Σ_i w_i with unit weights,
δ² the affine-invariant squared distance (generalised eigenvalues of the pair
by scipy.linalg.eigvalsh). It is minimised with scipy BFGS over a Cholesky
parametrisation (log-diagonal) from 60 seeded starts; the distinct minima
(told apart by X[0,1] to 1e-3) are written with their costs to
tests/reference/fixtures/local_minima.json.
"""
import json
import os

import numpy as np
import scipy
from scipy.linalg import eigvalsh
from scipy.optimize import minimize

OUT = os.path.join(os.path.dirname(__file__), "fixtures")
C_VAR, N_EACH, RHO = 5.0, 10, 0.1


def trials():
    stack = np.full((2 * N_EACH + 1, 2, 2), np.nan)
    stack[:N_EACH, 0, 0] = C_VAR
    stack[N_EACH:2 * N_EACH, 1, 1] = C_VAR
    stack[-1] = [[1.0, RHO], [RHO, 1.0]]
    return stack


def cost(x, stack):
    total = 0.0
    for c in stack:
        o = ~np.isnan(np.diag(c))
        lam = eigvalsh(x[np.ix_(o, o)], c[np.ix_(o, o)])
        total += 0.5 * np.sum(np.log(lam) ** 2)
    return total / len(stack)


def from_params(v):
    low = np.array([[np.exp(v[0]), 0.0], [v[1], np.exp(v[2])]])
    return low @ low.T


def main():
    stack = trials()
    rng = np.random.default_rng(20261203)
    found = {}
    for _ in range(60):
        r = minimize(lambda v: cost(from_params(v), stack), rng.normal(size=3) * 1.5,
                     method="BFGS", options={"gtol": 1e-13, "maxiter": 10000})
        x = from_params(r.x)
        key = round(x[0, 1], 3)
        if key not in found or r.fun < found[key]["cost"]:
            found[key] = {"mean": x.tolist(), "cost": float(r.fun)}
    minima = sorted(found.values(), key=lambda m: m["cost"])
    with open(os.path.join(OUT, "local_minima.json"), "w") as f:
        json.dump({
            "source": f"scipy {scipy.__version__} BFGS over a Cholesky parametrisation, "
                      f"numpy {np.__version__}; tests/reference/make_local_minima_fixture.py",
            "stack": np.where(np.isnan(stack), None, stack).tolist(),
            "minima": minima,
        }, f, indent=1)
    for m in minima:
        print(m["cost"], m["mean"])


if __name__ == "__main__":
    main()
