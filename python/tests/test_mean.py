"""The Python package against the command line and against bad input.

Checks are common practice, no source: the package must give the command
line's mean bit for bit (both run lacuna::jobs::MeanJob), refuse bad arrays
with a clear error, and return plain NumPy/JSON values.
"""

import json
import os
import pathlib
import subprocess
import tempfile

import numpy as np
import pytest

import lacuna

ROOT = pathlib.Path(__file__).resolve().parents[2]
DEMO = ROOT / "demo-data"


def cli():
    """The lacuna binary: $LACUNA_BIN (tests/all.sh builds it), else cargo run."""
    b = os.environ.get("LACUNA_BIN")
    if b:
        return [str(pathlib.Path(b).resolve())]
    return ["cargo", "run", "--quiet", "--release", "--bin", "lacuna", "--"]


def run_cli(*args):
    out = subprocess.run(cli() + list(args), cwd=ROOT, capture_output=True, text=True)
    return out.returncode, out.stderr


@pytest.fixture(scope="module")
def demo():
    stack = np.load(DEMO / "covs.npy")
    mask = np.load(DEMO / "mask.npy")
    return stack, mask


@pytest.mark.parametrize(
    "scheme,extra",
    [
        ("airm-observed", []),
        ("airm-observed", ["--starts", "3", "--seed", "7"]),
        ("gaussian-em", []),
        ("diagonal-loading", ["--loading", "0.05"]),
        ("common-channels", []),
    ],
)
def test_same_mean_as_the_command_line_bit_for_bit(demo, scheme, extra):
    stack, mask = demo
    with tempfile.TemporaryDirectory() as d:
        out, rep = os.path.join(d, "m.npy"), os.path.join(d, "r.json")
        code, err = run_cli(
            "mean", "--covs", str(DEMO / "covs.npy"), "--mask", str(DEMO / "mask.npy"),
            "--scheme", scheme, "--out", out, "--report", rep, "--quiet", *extra,
        )
        assert code == 0, err
        want = np.load(out)
        want_report = json.load(open(rep))
    kwargs = {}
    if "--starts" in extra:
        kwargs = {"starts": 3, "seed": 7}
    if "--loading" in extra:
        kwargs = {"loading": 0.05}
    got, report = lacuna.mean(stack, mask, scheme=scheme, **kwargs)
    # Bit for bit, NaN where not estimated included.
    assert got.dtype == np.float64 and got.shape == want.shape
    assert np.array_equal(got, want, equal_nan=True)
    # The report equals the CLI's apart from what describes the run itself.
    for key in set(want_report) - {"provenance", "wall_time_seconds", "threads", "trace"}:
        assert report[key] == want_report[key], key
    assert report["provenance"] is None


def test_mask_from_nan_equals_explicit_mask(demo):
    stack, mask = demo
    nan_stack = stack.copy()
    for i, row in enumerate(mask):
        gone = ~row.astype(bool)
        nan_stack[i][gone, :] = np.nan
        nan_stack[i][:, gone] = np.nan
    a, _ = lacuna.mean(nan_stack)
    b, _ = lacuna.mean(stack, mask)
    assert np.array_equal(a, b)


def test_outputs_round_trip_through_numpy_and_json(demo):
    stack, mask = demo
    m, report = lacuna.mean(stack, mask, channels=[f"E{i}" for i in range(24)], unit="uV")
    assert isinstance(m, np.ndarray) and m.flags.c_contiguous
    assert np.array_equal(m, m.T)
    assert np.all(np.linalg.eigvalsh(m) > 0)
    # The report is plain JSON: it survives a dump/load unchanged.
    assert json.loads(json.dumps(report)) == report
    co = np.asarray(report["coobservation"])
    assert co.shape == (24, 24) and co.dtype.kind == "i"
    assert report["channels"][0] == "E0"
    assert report["covariance_unit"] == "µV²"
    trace = np.asarray([r["cost"] for r in report["trace"]])
    assert np.all(np.diff(trace) <= 1e-12 * trace[0])  # monotone descent
    # A saved and reloaded mean is the same array.
    with tempfile.TemporaryDirectory() as d:
        np.save(os.path.join(d, "m.npy"), m)
        assert np.array_equal(np.load(os.path.join(d, "m.npy")), m)


def test_estimator_wrapper(demo):
    stack, mask = demo
    est = lacuna.MaskedMean(scheme="airm-observed", tol=1e-9).fit(stack, mask)
    direct, _ = lacuna.mean(stack, mask, tol=1e-9)
    assert np.array_equal(est.mean_, direct)
    assert est.report_["converged"] is True
    assert est.channels_ == [f"ch{i}" for i in range(24)]
    assert "tol=1e-09" in repr(est)


def test_not_converged_is_returned_not_raised(demo):
    stack, mask = demo
    m, report = lacuna.mean(stack, mask, max_iter=1)
    assert report["converged"] is False
    assert report["advice"]
    assert m.shape == (24, 24)


def test_schemes_are_listed():
    names = [n for n, _ in lacuna.schemes()]
    assert "airm-observed" in names and "gaussian-em" in names
    assert len(names) == len(set(names))


def spd(p, rng):
    a = rng.standard_normal((p, p))
    return a @ a.T + p * np.eye(p)


@pytest.mark.parametrize(
    "make,error,words",
    [
        (lambda s: s[0], lacuna.LacunaError, "shape"),
        (lambda s: s[:, :, :3], lacuna.LacunaError, "shape"),
        (lambda s: s[:0], lacuna.LacunaError, "empty"),
        (lambda s: s.astype(complex), TypeError, "dtype"),
        (lambda s: s.astype(object), TypeError, "dtype"),
        (lambda s: np.concatenate([s[:2], -s[2:3], s[3:]]), lacuna.LacunaError, "trial 2|trial 3"),
        (lambda s: s * np.inf, lacuna.LacunaError, "trial"),
    ],
)
def test_bad_stacks_raise(make, error, words):
    rng = np.random.default_rng(1)
    stack = np.stack([spd(4, rng) for _ in range(6)])
    with pytest.raises(error, match=words):
        lacuna.mean(make(stack))


@pytest.mark.parametrize(
    "kwargs,words",
    [
        ({"mask": np.ones((6, 3), bool)}, "mask must have shape"),
        ({"mask": np.full((6, 4), 2)}, "use 1"),
        ({"mask": np.zeros((6, 4), bool)}, "no observed channel|observes no channel|observed"),
        ({"weights": np.ones(5)}, "weights must have shape"),
        ({"weights": -np.ones(6)}, "weight"),
        ({"weights": np.full(6, np.nan)}, "weight"),
        ({"tol": float("nan")}, "tol"),
        ({"tol": 5.0}, "tol"),
        ({"max_iter": -1}, "max_iter"),
        ({"scheme": "airm-observd"}, "did you mean 'airm-observed'"),
        ({"init": "middle"}, "init: .middle. is not one of"),
        ({"channels": ["a", "b", "c"]}, "channels"),
        ({"channels": ["a", "a", "b", "c"]}, "repeated"),
        ({"regularize": "shrinkage:7"}, "regularize"),
        ({"correct_scale": True}, "samples"),
    ],
)
def test_bad_settings_raise(kwargs, words):
    rng = np.random.default_rng(2)
    stack = np.stack([spd(4, rng) for _ in range(6)])
    mask = kwargs.pop("mask", None)
    with pytest.raises(lacuna.LacunaError, match=words):
        lacuna.mean(stack, mask, **kwargs)


def test_lacuna_error_is_a_value_error():
    assert issubclass(lacuna.LacunaError, ValueError)


def test_readme_python_example_runs_as_it_stands():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    block = text.split("```python\n", 1)[1].split("```", 1)[0]
    assert len(block.strip().splitlines()) <= 12
    cwd = os.getcwd()
    try:
        os.chdir(ROOT)
        scope = {}
        exec(compile(block, "README.md", "exec"), scope)
    finally:
        os.chdir(cwd)
    assert scope["report"]["converged"] is True
    assert scope["est"].report_["converged"] is True


def rare_channel_stack(seed=5, n=300, p=10, kept=10):
    """Sample covariances (18 samples) of one population, 0-2 channels lost
    per trial, channel 0 kept in only `kept` trials (a failed electrode)."""
    rng = np.random.default_rng(seed)
    a = rng.standard_normal((p, p))
    sigma = a @ a.T + p * np.eye(p)
    ls = np.linalg.cholesky(sigma)
    stack = np.empty((n, p, p))
    mask = np.ones((n, p), dtype=bool)
    keep = set(np.linspace(0, n - 1, kept).round().astype(int).tolist())
    for i in range(n):
        x = ls @ rng.standard_normal((p, 18))
        stack[i] = x @ x.T / 18
        lost = rng.choice(np.arange(1, p), size=rng.integers(0, 3), replace=False)
        mask[i, lost] = False
        if i not in keep:
            mask[i, 0] = False
        stack[i][~mask[i], :] = np.nan
        stack[i][:, ~mask[i]] = np.nan
    return stack, mask


def airm(a, b):
    """Affine-invariant distance from the generalised eigenvalues of (b, a)."""
    la = np.linalg.cholesky(a)
    m = np.linalg.solve(la, np.linalg.solve(la, b).T)
    return float(np.sqrt((np.log(np.linalg.eigvalsh((m + m.T) / 2)) ** 2).sum()))


def test_rare_channel_elimination_gives_the_plain_mean_and_the_cli_bits():
    # Common practice, no source: the default path (the rare channel's rows
    # eliminated) and plain L-BFGS minimise one cost, so at gradient 1e-12
    # their means agree far below 1e-8; and the package runs the command
    # line's job, so the default mean is the CLI's bit for bit.
    stack, mask = rare_channel_stack()
    got, report = lacuna.mean(stack, mask, tol=1e-12)
    plain, _ = lacuna.mean(stack, mask, tol=1e-12, precondition=False)
    assert report["converged"]
    assert any("fitted exactly" in n for n in report["notes"]), report["notes"]
    assert airm(got, plain) <= 1e-8
    with tempfile.TemporaryDirectory() as d:
        covs, m, out = (os.path.join(d, f) for f in ("c.npy", "m.npy", "o.npy"))
        np.save(covs, stack)
        np.save(m, mask)
        code, err = run_cli("mean", "--covs", covs, "--mask", m, "--tol", "1e-12",
                            "--out", out, "--quiet")
        assert code == 0, err
        assert np.array_equal(np.load(out), got)
