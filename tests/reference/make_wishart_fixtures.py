"""Reference values of c(k, n), the log scale bias of Riemannian means of
Wishart sample covariances (see src/spd/wishart.rs), from scipy's digamma and
from a numpy Monte Carlo of ln det of Wishart draws.

Run from the repository root (see make_fixtures.py for the venv):
    /tmp/lacuna-ref/bin/python tests/reference/make_wishart_fixtures.py

Writes tests/reference/fixtures/wishart.json. For each (k, n): the closed form
(1/k) sum_j digamma((n-j+1)/2) + ln 2 - ln n, and the Monte Carlo estimate
(1/k) mean(ln det(W/n)) over 1e5 draws of W ~ Wishart(n, I) (scipy.stats),
with its standard error.
"""
import json
import os

import numpy as np
import scipy
from scipy.special import digamma
from scipy.stats import wishart

OUT = os.path.join(os.path.dirname(__file__), "fixtures")


def main():
    rng = np.random.default_rng(20261203)
    cases = []
    for k, n in [(1, 5), (4, 8), (8, 16), (8, 32), (16, 32), (16, 48), (16, 64), (24, 100)]:
        closed = float(np.mean([digamma((n - j + 1) / 2) for j in range(1, k + 1)]) + np.log(2) - np.log(n))
        draws = wishart(df=n, scale=np.eye(k)).rvs(size=100_000, random_state=rng)
        if k == 1:
            ld = np.log(draws / n)
        else:
            ld = np.linalg.slogdet(draws / n)[1]
        v = ld / k
        cases.append({"k": k, "n": n, "closed_form": closed,
                      "monte_carlo": float(v.mean()), "standard_error": float(v.std(ddof=1) / np.sqrt(len(v))),
                      "draws": len(v)})
    meta = {"numpy": np.__version__, "scipy": scipy.__version__, "script": "tests/reference/make_wishart_fixtures.py"}
    os.makedirs(OUT, exist_ok=True)
    with open(os.path.join(OUT, "wishart.json"), "w") as f:
        json.dump({"meta": meta, "cases": cases}, f, indent=1)
    print("wrote wishart")


if __name__ == "__main__":
    main()
