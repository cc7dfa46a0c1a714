"""lacuna.train / lacuna.classify / lacuna.merge against the command line
(`lacuna train`, `lacuna classify`, `lacuna merge`) and against bad input.
Common practice, no source: both sides run the same library code
(lacuna::jobs::TrainJob, Model::classify, trials::merge::merge_by_name), so
models and merged sets must agree exactly and distances to the printed
precision (10 significant digits).
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
    with open(DEMO / "mask.csv", newline="") as f:
        channels = next(csv.reader(f))
    with open(DEMO / "labels.csv", newline="") as f:
        rows = list(csv.DictReader(f))
    return stack, mask, channels, [r["label"] for r in rows], [r["session"] for r in rows]


def cli_args():
    return ["--covs", str(DEMO / "covs.npy"), "--mask", str(DEMO / "mask.csv")]


def read_predictions(path):
    with open(path, newline="") as f:
        rows = list(csv.reader(f))
    return [r[1] for r in rows[1:]], np.array([[float(x) for x in r[2:]] for r in rows[1:]])


@pytest.mark.parametrize("recentre", [False, True])
def test_train_and_classify_match_the_command_line(demo, recentre):
    # The demo's sessions each lose one electrode for a whole session: the
    # per-session re-centring needs drop_unobserved.
    stack, mask, channels, labels, sessions = demo
    extra = ["--recentre", "--by-session", "--drop-unobserved"] if recentre else []
    model = lacuna.train(
        stack, mask, labels=labels, sessions=sessions, channels=channels,
        recentre=recentre, by_session=recentre, drop_unobserved=recentre, seed=2,
    )
    with tempfile.TemporaryDirectory() as d:
        path = os.path.join(d, "model.json")
        code, err = run_cli(
            "train", *cli_args(), "--labels", str(DEMO / "labels.csv"), "--out", path,
            "--seed", "2", "--quiet", *extra,
        )
        assert code == 0, err
        with open(path) as f:
            cli_model = json.load(f)
        assert model == cli_model
        assert model["recentred"] == recentre
        cv = model["training"]["cross_validation"]
        assert cv["scheme"] == ("leave-one-session-out" if recentre else "k-fold")
        assert sum(map(sum, cv["confusion"])) == stack.shape[0]

        # Python's model dict and the CLI's file classify alike.
        classes, distances = lacuna.classify(model, stack, mask, channels=channels, sessions=sessions)
        from_file, _ = lacuna.classify(path, stack, mask, channels=channels, sessions=sessions)
        assert classes == from_file
        pred = os.path.join(d, "pred.csv")
        code, err = run_cli(
            "classify", "--model", path, *cli_args(), "--labels", str(DEMO / "labels.csv"),
            "--out", pred, "--quiet",
        )
        assert code == 0, err
        cli_classes, cli_distances = read_predictions(pred)
        assert classes == cli_classes
        np.testing.assert_allclose(distances, cli_distances, rtol=1e-9, atol=0)
    assert distances.shape == (stack.shape[0], len(model["classes"]))
    # Each prediction is the nearest class.
    assert classes == [model["classes"][k] for k in np.argmin(distances, axis=1)]


def test_classify_refuses_unknown_channels_and_broken_models(demo):
    stack, mask, channels, labels, _ = demo
    model = lacuna.train(stack, mask, labels=labels, channels=channels, folds=None)
    renamed = list(channels)
    renamed[3] = "Xq9"
    with pytest.raises(lacuna.LacunaError, match="Xq9"):
        lacuna.classify(model, stack, mask, channels=renamed)
    broken = dict(model, model_version="99")
    with pytest.raises(lacuna.LacunaError, match="model_version"):
        lacuna.classify(broken, stack, mask, channels=channels)
    with pytest.raises(lacuna.LacunaError, match="not a lacuna model"):
        lacuna.classify({"classes": ["a"]}, stack, mask, channels=channels)
    with pytest.raises(ValueError):
        lacuna.classify(dict(model, means=[[[float("nan")]]]), stack, mask, channels=channels)


@pytest.mark.parametrize("folds", [0, 1, -3])
def test_train_refuses_bad_settings(demo, folds):
    stack, mask, channels, labels, _ = demo
    with pytest.raises(lacuna.LacunaError, match="folds"):
        lacuna.train(stack, mask, labels=labels, folds=folds)


def test_train_refuses_bad_labels_and_sessions(demo):
    stack, mask, _, labels, _ = demo
    with pytest.raises(lacuna.LacunaError, match="labels"):
        lacuna.train(stack, mask, labels=labels[:-1])
    with pytest.raises(lacuna.LacunaError, match="two or more classes"):
        lacuna.train(stack, mask, labels=["a"] * stack.shape[0])
    with pytest.raises(lacuna.LacunaError, match="session"):
        lacuna.train(stack, mask, labels=labels, recentre=True)
    with pytest.raises(lacuna.LacunaError, match="tol"):
        lacuna.train(stack, mask, labels=labels, tol=float("nan"))


def halves(demo):
    """The demo split in two recordings with different electrode sets: the
    first lacks channels 0 and 5, the second channel 10 (its own order)."""
    stack, mask, channels, labels, sessions = demo
    n = stack.shape[0] // 2
    keep_a = [c for c in range(len(channels)) if c not in (0, 5)]
    keep_b = [c for c in range(len(channels)) if c != 10][::-1]
    part = lambda rows, keep: (  # noqa: E731
        stack[np.ix_(rows, keep, keep)], mask[np.ix_(rows, keep)],
        [channels[c] for c in keep],
    )
    a = part(np.arange(n), keep_a)
    b = part(np.arange(n, stack.shape[0]), keep_b)
    return (
        dict(name="a", stack=a[0], mask=a[1], channels=a[2], labels=labels[:n], sessions=sessions[:n]),
        dict(name="b", stack=b[0], mask=b[1], channels=b[2], labels=labels[n:], sessions=sessions[n:]),
    )


def write_set(d, s):
    os.makedirs(d)
    np.save(os.path.join(d, "covs.npy"), np.where(s["mask"][:, :, None] & s["mask"][:, None, :], s["stack"], np.nan))
    with open(os.path.join(d, "mask.csv"), "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(s["channels"])
        w.writerows(s["mask"].astype(int).tolist())
    with open(os.path.join(d, "labels.csv"), "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(["label", "session"])
        w.writerows(zip(s["labels"], s["sessions"]))


def test_merge_matches_the_command_line_and_the_hand_built_union(demo):
    a, b = halves(demo)
    merged = lacuna.merge(a, b)
    stack, mask, channels, labels, sessions = demo
    # Union in order of first appearance: a's channels, then b's new ones (0, 5).
    assert merged["channels"] == a["channels"] + [channels[5], channels[0]]
    # Hand-built: each trial's observed entries where they were, by name.
    idx = [merged["channels"].index(c) for c in channels]
    n = stack.shape[0] // 2
    expect_mask = mask.astype(bool)
    expect_mask[:n, [0, 5]] = False
    expect_mask[n:, 10] = False
    np.testing.assert_array_equal(merged["mask"][:, idx], expect_mask)
    got = merged["stack"][:, idx][:, :, idx]
    both = expect_mask[:, :, None] & expect_mask[:, None, :]
    np.testing.assert_array_equal(got[both], stack[both])
    assert np.isnan(got[~both]).all()
    assert merged["labels"] == labels and merged["sessions"] == sessions
    assert merged["record"]["sets"][1]["missing"] == [channels[10]]
    # The pairs (0 or 5, 10) are never observed together in the union.
    never = set(merged["record"]["pairs_never_observed_together"])
    assert {f"{channels[10]}–{channels[5]}", f"{channels[10]}–{channels[0]}"} <= never

    with tempfile.TemporaryDirectory() as d:
        write_set(os.path.join(d, "a"), a)
        write_set(os.path.join(d, "b"), b)
        out = os.path.join(d, "m")
        code, err = run_cli("merge", os.path.join(d, "a"), os.path.join(d, "b"), "--out", out, "--quiet")
        assert code == 0, err
        np.testing.assert_array_equal(np.load(os.path.join(out, "covs.npy")), merged["stack"])
        with open(os.path.join(out, "merge.json")) as f:
            assert json.load(f) == merged["record"]


def test_merge_refuses_bad_sets(demo):
    a, b = halves(demo)
    with pytest.raises(lacuna.LacunaError, match="nothing to merge"):
        lacuna.merge()
    with pytest.raises(TypeError):
        lacuna.merge(a, [1, 2])
    with pytest.raises(lacuna.LacunaError, match="unknown keys"):
        lacuna.merge(a, dict(b, colour="red"))
    with pytest.raises(lacuna.LacunaError, match="channels"):
        lacuna.merge(a, {"stack": b["stack"]})
    with pytest.raises(lacuna.LacunaError, match="labels"):
        lacuna.merge(a, {k: v for k, v in b.items() if k != "labels"})
    dup = dict(b, channels=[b["channels"][0]] * len(b["channels"]))
    with pytest.raises(lacuna.LacunaError, match="b"):
        lacuna.merge(a, dup)
    bad = dict(b, stack=np.where(np.eye(b["stack"].shape[1], dtype=bool), np.inf, b["stack"]))
    with pytest.raises(lacuna.LacunaError):
        lacuna.merge(a, bad)
