"""lacuna.compare against the command line and against bad input.

Checks are common practice, no source: the package and `lacuna compare`
both run lacuna::jobs::CompareJob, so every mean must agree bit for bit and
every number of compare.json field for field (wall times and file
provenance aside).
"""

import json
import os
import tempfile

import numpy as np
import pytest

import lacuna
from test_mean import DEMO, run_cli

FAST = dict(repeats=3, folds=3, bootstrap=2, leave_out=False, seed=5)


def strip(doc):
    """compare.json without what legitimately differs between two runs."""
    doc = json.loads(json.dumps(doc, default=lambda a: a.tolist()))
    for key in ("seconds", "stage_seconds", "provenance"):
        doc.pop(key, None)
    for row in doc["schemes"]:
        row.pop("seconds", None)
        if "mean" in row:
            row["mean"] = [[None if (x is None or x != x) else x for x in r] for r in row["mean"]]
    return doc


def test_same_comparison_as_the_command_line():
    stack = np.load(DEMO / "covs.npy")
    mask = np.load(DEMO / "mask.npy")
    labels = [line.split(",")[0] for line in (DEMO / "labels.csv").read_text().splitlines()[1:]]
    with tempfile.TemporaryDirectory() as d:
        out = os.path.join(d, "cmp")
        code, err = run_cli(
            "compare", "--covs", str(DEMO / "covs.npy"), "--mask", str(DEMO / "mask.npy"),
            "--labels", str(DEMO / "labels.csv"), "--out", out, "--quiet",
            "--repeats", "3", "--folds", "3", "--bootstrap", "2", "--no-leave-out", "--seed", "5",
        )
        assert code == 0, err
        with open(os.path.join(out, "compare.json")) as f:
            from_cli = json.load(f)
        got = lacuna.compare(stack, mask, labels=labels, **FAST)
        for row in got["schemes"]:
            if row["status"] == "ok":
                npy = np.load(os.path.join(out, row["mean_file"]))
                np.testing.assert_array_equal(row["mean"], npy)
    assert strip(got) == strip(from_cli)
    assert got["recommendation"]["scheme"] is not None
    assert got["caution"].startswith("Research software")


def test_bad_settings_raise():
    stack = np.load(DEMO / "covs.npy")[:20]
    with pytest.raises(lacuna.LacunaError, match="folds must be between 2 and 100"):
        lacuna.compare(stack, folds=1)
    with pytest.raises(lacuna.LacunaError, match="did you mean 'airm-observed'"):
        lacuna.compare(stack, schemes=["airm-observd"])
    with pytest.raises(lacuna.LacunaError, match="labels has 3 entries for 20 trials"):
        lacuna.compare(stack, labels=["a", "b", "c"])
    with pytest.raises(lacuna.LacunaError, match="tol must be a finite number"):
        lacuna.compare(stack, tol=float("nan"))
    with pytest.raises(lacuna.LacunaError, match="target must be"):
        lacuna.compare(stack, target="middle")


def test_leave_out_on_a_seeded_subset():
    # Beyond leave_out_trials the influence comes from a seeded subset of
    # that size, and every channel's row says how many trials it used.
    stack = np.load(DEMO / "covs.npy")
    mask = np.load(DEMO / "mask.npy")
    n = stack.shape[0]
    opts = dict(FAST, leave_out=True, schemes=["airm-observed"], validation=False)
    got = lacuna.compare(stack, mask, leave_out_trials=100, **opts)
    assert n > 100
    assert {c["leave_out_trials"] for c in got["contributions"]} == {100}
    assert all(c["leave_out_influence"] > 0 for c in got["contributions"])
    whole = lacuna.compare(stack, mask, leave_out_trials=n, **opts)
    assert {c["leave_out_trials"] for c in whole["contributions"]} == {n}
    with pytest.raises(lacuna.LacunaError, match="leave_out_trials must be between 100"):
        lacuna.compare(stack, mask, leave_out_trials=99, **opts)
    with pytest.raises(lacuna.LacunaError, match="leave_out_trials must not be negative"):
        lacuna.compare(stack, mask, leave_out_trials=-1, **opts)
