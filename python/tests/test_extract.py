"""lacuna.extract against `lacuna extract` on the demo recordings, and on
bad input. Common practice, no source: both run lacuna::jobs::ExtractJob, so
the covariances must agree bit for bit."""

import csv
import glob
import json
import os
import subprocess
import tempfile

import numpy as np
import pytest

import lacuna
from test_mean import ROOT, run_cli

RECORDINGS = sorted(glob.glob(str(ROOT / "demo-data" / "recording" / "session-*.edf")))


@pytest.fixture(scope="module")
def demo():
    return lacuna.extract(RECORDINGS, offset=0.5, length=2, band=(8, 30))


def test_same_trials_as_the_command_line(demo):
    with tempfile.TemporaryDirectory() as d:
        out = os.path.join(d, "trials")
        code, err = run_cli(
            "extract", *RECORDINGS, "--offset", "0.5", "--length", "2", "--band", "8-30",
            "--out", out, "--quiet",
        )
        assert code == 0, err
        covs = np.load(os.path.join(out, "covs.npy"))
        mask = np.load(os.path.join(out, "mask.npy"))
        with open(os.path.join(out, "labels.csv")) as f:
            labels = [row["label"] for row in csv.DictReader(f)]
        meta = json.load(open(os.path.join(out, "epochs.json")))
    assert np.array_equal(demo["covs"], covs, equal_nan=True)
    assert np.array_equal(demo["mask"], mask.astype(bool))
    assert demo["labels"] == labels
    assert demo["channels"] == meta["channels"]
    assert demo["covariance_unit"] == "µV²"
    # Every masked cell with the same reason as epochs.json records it.
    cli_cells = {(e["epoch"], m["channel"], m["reason"]) for e in meta["epochs"] for m in e["masked"]}
    assert {(m["epoch"], m["channel"], m["reason"]) for m in demo["masked"]} == cli_cells
    assert [e["trial"] for e in demo["epochs"]] == [e["trial"] for e in meta["epochs"]]
    assert {m["reason"] for m in demo["masked"]} <= {
        "missing-samples", "saturated", "no-signal", "amplitude-outlier",
        "broadband-excess", "isolated", "user",
    }


def test_extract_then_mean(demo):
    m, report = lacuna.mean(demo["covs"], demo["mask"], channels=demo["channels"], unit=demo["unit"])
    assert report["converged"] is True
    assert report["channels"] == demo["channels"]
    assert report["covariance_unit"] == "µV²"
    assert np.all(np.linalg.eigvalsh(m) > 0)


def test_epoch_table_points_at_trials(demo):
    trials = [e["trial"] for e in demo["epochs"] if e["trial"] is not None]
    assert trials == list(range(demo["covs"].shape[0]))
    for e in demo["epochs"]:
        if e["trial"] is not None:
            assert e["observed"] == int(demo["mask"][e["trial"]].sum())


@pytest.mark.parametrize(
    "args,kwargs,words",
    [
        ([str(ROOT / "no-such-file.edf")], {"length": 2}, "no-such-file"),
        ([str(ROOT / "README.md")], {"length": 2}, "README"),
        (RECORDINGS[:1], {"length": 2, "band": "30-8"}, "band"),
        (RECORDINGS[:1], {"length": float("nan")}, "length"),
        (RECORDINGS[:1], {"length": 2, "min_correlation": 2.0}, "min_correlation"),
        (RECORDINGS[:1], {"length": 2, "estimator": "best"}, "estimator"),
        ([], {}, "recording"),
    ],
)
def test_bad_input_raises(args, kwargs, words):
    with pytest.raises(lacuna.LacunaError, match=words):
        lacuna.extract(args, **kwargs)
