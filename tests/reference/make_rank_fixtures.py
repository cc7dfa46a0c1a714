"""Reference values for the regularisers applied to rank-deficient blocks,
computed with numpy and scikit-learn (versions pinned in requirements.txt).

Run from the repository root (see make_fixtures.py for the venv):
    /tmp/lacuna-ref/bin/python tests/reference/make_rank_fixtures.py

Writes tests/reference/fixtures/regularize.json: average-referenced
covariances (rank k-1) of zero-mean Gaussian windows, and for each
- sklearn.covariance.shrunk_covariance(C, alpha)  (fixed-intensity shrinkage),
- C + lambda * trace(C)/k * I                     (numpy, diagonal loading),
- sklearn.covariance.oas(X, assume_centered=True) (OAS from the window itself),
and the arithmetic mean of the shrunk blocks.
"""
import json
import os

import numpy as np
import sklearn
from sklearn.covariance import oas, shrunk_covariance

OUT = os.path.join(os.path.dirname(__file__), "fixtures")


def main():
    rng = np.random.default_rng(20261203)
    cases = []
    for k, t in [(4, 30), (6, 40), (9, 12)]:
        a = rng.standard_normal((k, k))
        sigma = a @ a.T + 0.5 * np.eye(k)
        h = np.eye(k) - np.ones((k, k)) / k
        blocks, shrunk, loaded, oas_blocks = [], [], [], []
        alpha, lam = 0.2, 0.05
        for _ in range(5):
            x = rng.multivariate_normal(np.zeros(k), sigma, size=t) @ h  # average reference
            c = x.T @ x / t
            blocks.append(c.tolist())
            shrunk.append(shrunk_covariance(c, shrinkage=alpha).tolist())
            loaded.append((c + lam * np.trace(c) / k * np.eye(k)).tolist())
            oas_blocks.append(oas(x, assume_centered=True)[0].tolist())
        cases.append({
            "k": k, "samples": t, "alpha": alpha, "lambda": lam,
            "blocks": blocks, "shrunk": shrunk, "loaded": loaded, "oas": oas_blocks,
            "ranks": [int(np.linalg.matrix_rank(np.array(b))) for b in blocks],
            "arithmetic_of_shrunk": np.mean(np.array(shrunk), axis=0).tolist(),
        })
    meta = {"numpy": np.__version__, "scikit-learn": sklearn.__version__,
            "script": "tests/reference/make_rank_fixtures.py"}
    os.makedirs(OUT, exist_ok=True)
    with open(os.path.join(OUT, "regularize.json"), "w") as f:
        json.dump({"meta": meta, "cases": cases}, f)
    print("wrote regularize")


if __name__ == "__main__":
    main()
