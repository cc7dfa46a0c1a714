"""lacuna.means_by against the command line (`lacuna mean --by`) and against
bad input. Common practice, no source: both run lacuna::jobs::GroupedMeanJob,
so the means must agree bit for bit; each group's mean must be lacuna.mean
on that group's trials.
"""

import csv
import json
import os
import tempfile

import numpy as np
import pytest

import lacuna
from test_mean import DEMO, run_cli


@pytest.fixture(scope="module")
def demo():
    stack = np.load(DEMO / "covs.npy")
    mask = np.load(DEMO / "mask.npy")
    with open(DEMO / "labels.csv", newline="") as f:
        rows = list(csv.DictReader(f))
    return stack, mask, [r["label"] for r in rows], [r["session"] for r in rows]


@pytest.mark.parametrize("by", ["label", "session", "session+label"])
def test_same_means_as_the_command_line(demo, by):
    # The demo's sessions each lose one electrode for the whole session: the
    # session means leave it out (drop_unobserved); the grand means still
    # estimate it from the other sessions.
    stack, mask, labels, sessions = demo
    means, grands, report = lacuna.means_by(
        stack, mask, by=by, labels=labels, sessions=sessions, drop_unobserved=True
    )
    with tempfile.TemporaryDirectory() as d:
        out = os.path.join(d, "g")
        code, err = run_cli(
            "mean", "--covs", str(DEMO / "covs.npy"), "--mask", str(DEMO / "mask.npy"),
            "--labels", str(DEMO / "labels.csv"), "--by", by, "--out", out, "--quiet",
            "--drop-unobserved",
        )
        assert code == 0, err
        with open(os.path.join(out, "groups.json")) as f:
            cli_report = json.load(f)
        assert [g["name"] for g in cli_report["groups"]] == list(means)
        for g in cli_report["groups"]:
            np.testing.assert_array_equal(np.load(os.path.join(out, g["files"][0])), means[g["name"]])
        for g in cli_report["grand"]:
            np.testing.assert_array_equal(np.load(os.path.join(out, g["files"][0])), grands[g["name"]])
    assert report["distances"] == cli_report["distances"]
    assert len(grands) == {"label": 0, "session": 1, "session+label": 2}[by]
    for g in grands.values():
        assert np.isfinite(g).all()


def test_each_group_is_the_mean_of_its_trials(demo):
    stack, mask, labels, _ = demo
    means, _, _ = lacuna.means_by(stack, mask, by="label", labels=labels)
    for name, m in means.items():
        keep = np.array([l == name for l in labels])
        direct, _ = lacuna.mean(stack[keep], mask[keep])
        np.testing.assert_array_equal(direct, m)


def test_bad_grouping_input_raises(demo):
    stack, mask, labels, sessions = demo
    with pytest.raises(lacuna.LacunaError, match="labels"):
        lacuna.means_by(stack, mask, by="label")
    with pytest.raises(lacuna.LacunaError, match="session"):
        lacuna.means_by(stack, mask, by="colour", labels=labels)
    with pytest.raises(lacuna.LacunaError, match="entries"):
        lacuna.means_by(stack, mask, by="label", labels=labels[:-1])
    with pytest.raises(lacuna.LacunaError, match="equal"):
        lacuna.means_by(stack, mask, by="session", sessions=sessions, labels=labels, grand="median")
    with pytest.raises(lacuna.LacunaError, match="tol"):
        lacuna.means_by(stack, mask, by="label", labels=labels, tol=float("nan"))
    bad = list(labels)
    bad[3] = ""
    with pytest.raises(lacuna.LacunaError, match="trial 3"):
        lacuna.means_by(stack, mask, by="label", labels=bad)


def test_recentre_matches_the_command_line(demo):
    stack, mask, labels, sessions = demo
    out, record = lacuna.recentre(stack, mask, sessions=sessions, drop_unobserved=True)
    assert [r["session"] for r in record] == ["session-1", "session-2", "session-3"]
    assert record[1]["left_out"] == ["ch15"]
    with tempfile.TemporaryDirectory() as d:
        o = os.path.join(d, "c")
        code, err = run_cli(
            "recentre", "--covs", str(DEMO / "covs.npy"), "--mask", str(DEMO / "mask.npy"),
            "--labels", str(DEMO / "labels.csv"), "--out", o, "--quiet", "--drop-unobserved",
        )
        assert code == 0, err
        np.testing.assert_array_equal(np.load(os.path.join(o, "covs.npy")), out)
    # Masks kept: NaN exactly where the input was unobserved.
    diag = np.diagonal(out, axis1=1, axis2=2)
    np.testing.assert_array_equal(np.isnan(diag), ~mask.astype(bool))
    with pytest.raises(lacuna.LacunaError, match="entries"):
        lacuna.recentre(stack, mask, sessions=sessions[:-1])
