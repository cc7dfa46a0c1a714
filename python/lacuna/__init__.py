"""lacuna: Riemannian means of channel covariance matrices when trials lose channels.

The Python face of the lacuna command-line tool and Rust library: the same
computations (bit for bit), called on NumPy arrays.

    >>> import numpy as np, lacuna
    >>> stack = np.load("trials/covs.npy")          # (N, p, p), NaN where unobserved
    >>> mean, report = lacuna.mean(stack)           # the masked Riemannian mean
    >>> report["converged"], report["iterations"]

Research software, not a medical device: results inform analysis; they do
not diagnose. Follow local rules and licensed clinical practice.
"""

from __future__ import annotations

import json
import os
from typing import Any, Dict, List, Mapping, Optional, Sequence, Tuple, Union

import numpy as np

from . import _lacuna
from ._lacuna import LacunaError, __version__

__all__ = [
    "mean", "means_by", "recentre", "train", "classify", "merge", "compare", "extract",
    "schemes", "MaskedMean", "LacunaError", "__version__",
]


def _as_stack(stack: Any) -> np.ndarray:
    a = np.asarray(stack)
    if a.dtype.kind not in "fiu":
        raise TypeError(
            f"stack must hold real numbers (float or int), got dtype {a.dtype}"
        )
    if a.ndim != 3 or a.shape[1] != a.shape[2]:
        raise LacunaError(
            f"stack must have shape (trials, channels, channels), got {a.shape}"
        )
    if a.shape[0] == 0 or a.shape[1] == 0:
        raise LacunaError(f"stack is empty: shape {a.shape}")
    return np.ascontiguousarray(a, dtype=np.float64)


def _as_mask(mask: Any, stack: np.ndarray) -> np.ndarray:
    n, p = stack.shape[:2]
    if mask is None:
        # Without a mask, a channel is unobserved where its variance is NaN.
        return np.ascontiguousarray(~np.isnan(np.diagonal(stack, axis1=1, axis2=2)))
    m = np.asarray(mask)
    if m.dtype.kind not in "biu":
        raise TypeError(f"mask must be boolean or 0/1 integers, got dtype {m.dtype}")
    if m.shape != (n, p):
        raise LacunaError(f"mask must have shape {(n, p)} to match the stack, got {m.shape}")
    if m.dtype.kind != "b":
        bad = np.argwhere((m != 0) & (m != 1))
        if bad.size:
            i, c = bad[0]
            raise LacunaError(
                f"mask holds {m[i, c]} at trial {i}, channel {c}; use 1 (observed) or 0"
            )
    return np.ascontiguousarray(m.astype(bool))


def _as_weights(weights: Any, n: int) -> Optional[np.ndarray]:
    if weights is None:
        return None
    w = np.asarray(weights)
    if w.dtype.kind not in "fiu":
        raise TypeError(f"weights must be real numbers, got dtype {w.dtype}")
    if w.shape != (n,):
        raise LacunaError(f"weights must have shape {(n,)} to match the stack, got {w.shape}")
    return np.ascontiguousarray(w, dtype=np.float64)


def mean(
    stack: Any,
    mask: Any = None,
    *,
    scheme: str = "airm-observed",
    weights: Any = None,
    channels: Optional[Sequence[str]] = None,
    tol: float = 1e-10,
    max_iter: Optional[int] = None,
    init: str = "available-case",
    starts: int = 1,
    seed: int = 0,
    loading: float = 1e-2,
    shrinkage: float = 0.1,
    samples: Optional[int] = None,
    rank: Optional[int] = None,
    positions: Optional[Mapping[str, Sequence[float]]] = None,
    correct_scale: bool = False,
    effective_samples: Optional[float] = None,
    regularize: Optional[str] = None,
    drop_unobserved: bool = False,
    precondition: bool = True,
    huber: float = 1.5,
    unit: Optional[str] = None,
) -> Tuple[np.ndarray, Dict[str, Any]]:
    """The mean of a stack of covariance matrices whose trials lost channels.

    Runs the same job as ``lacuna mean`` with the same defaults, so the mean
    is bit for bit the command line's on the same data.

    Parameters
    ----------
    stack : array (N, p, p)
        Trial covariances. Rows and columns of unobserved channels may be NaN.
    mask : array (N, p) of bool or 0/1, optional
        True/1 where the trial observed the channel. Default: observed where
        the diagonal entry is not NaN.
    scheme : str
        Averaging scheme (see :func:`schemes`); default the masked Riemannian
        mean ``"airm-observed"``, fitted to each trial's observed sub-block.
    weights : array (N,), optional
        Non-negative trial weights (default equal).
    channels : list of str, optional
        Channel names (default ch0, ch1, ...); used in messages and the report.
    tol, max_iter : float, int
        Stop when the whitened Riemannian gradient norm is at or below
        ``tol``; give up after ``max_iter`` iterations (default: the scheme's
        own cap, 500, or 5000 for ``"gaussian-em"``; ``report["converged"]``
        is then False and the advice says why).
    init, starts, seed :
        Starting point of airm-observed (``"available-case"``, ``"diagonal"``,
        ``"scaled-identity"``), number of starts of the multi-start check and
        the seed of the random ones.
    loading, shrinkage, samples, rank, positions :
        Settings of diagonal-loading (λ), shrinkage (α; with ``samples`` each
        trial's OAS intensity), subspace (rank) and spherical-spline
        (``{channel: (x, y, z)}`` on the unit sphere).
    correct_scale, effective_samples :
        Remove the Riemannian mean's short-window scale bias (needs
        ``samples`` or ``effective_samples``).
    regularize : str, optional
        Regularise every block first: ``"shrinkage:0.1"``, ``"loading:0.01"``
        or ``"oas"`` (with ``samples``), for rank-deficient windows.
    drop_unobserved : bool
        Leave out channels no trial observed instead of raising.
    precondition : bool
        Precondition airm-observed's solver when channels are covered
        unequally, and eliminate rarely observed channels' rows exactly
        (default); False runs plain L-BFGS (same mean, usually more
        iterations).
    huber : float
        Threshold of ``"airm-observed-huber"`` as a multiple of the median
        distance of the trials to the masked mean (default 1.5).
    unit : str, optional
        Physical unit of the data (e.g. ``"uV"``); the report gives
        covariances in its square.

    Returns
    -------
    mean : array (p, p)
        The mean, NaN where the scheme estimates nothing (common-channels).
    report : dict
        The report ``lacuna mean --report`` writes: convergence, trace,
        coverage, co-observation, identifiability, ranks, notes and advice.

    Raises
    ------
    LacunaError
        Invalid input or settings (the message names trial, channel or
        setting). A mean that did not converge is returned, not raised:
        check ``report["converged"]``.
    TypeError
        Arrays of a non-numeric dtype.
    """
    s = _as_stack(stack)
    m = _as_mask(mask, s)
    w = _as_weights(weights, s.shape[0])
    job = _mean_job(
        scheme=scheme, tol=tol, max_iter=max_iter, init=init, starts=starts, seed=seed,
        loading=loading, shrinkage=shrinkage, samples=samples, rank=rank, positions=positions,
        correct_scale=correct_scale, effective_samples=effective_samples, regularize=regularize,
        drop_unobserved=drop_unobserved, precondition=precondition, huber=huber, unit=unit,
    )
    names = _names(channels, s)
    result, report = _lacuna.mean(s, m, w, names, json.dumps(job, allow_nan=False))
    return result, json.loads(report)


def _mean_job(
    *,
    scheme: str = "airm-observed",
    tol: float = 1e-10,
    max_iter: Optional[int] = None,
    init: str = "available-case",
    starts: int = 1,
    seed: int = 0,
    loading: float = 1e-2,
    shrinkage: float = 0.1,
    samples: Optional[int] = None,
    rank: Optional[int] = None,
    positions: Optional[Mapping[str, Sequence[float]]] = None,
    correct_scale: bool = False,
    effective_samples: Optional[float] = None,
    regularize: Optional[str] = None,
    drop_unobserved: bool = False,
    precondition: bool = True,
    huber: float = 1.5,
    unit: Optional[str] = None,
) -> Dict[str, Any]:
    """The settings of the library's MeanJob, checked for signs and finiteness."""
    job = {
        "scheme": scheme,
        "tol": float(tol),
        "max_iter": None if max_iter is None else int(max_iter),
        "init": init,
        "starts": int(starts),
        "seed": int(seed),
        "loading": float(loading),
        "shrinkage": float(shrinkage),
        "samples": None if samples is None else int(samples),
        "rank": None if rank is None else int(rank),
        "positions": None
        if positions is None
        else {str(k): [float(x) for x in v] for k, v in positions.items()},
        "correct_scale": bool(correct_scale),
        "effective_samples": None if effective_samples is None else float(effective_samples),
        "regularize": regularize,
        "drop_unobserved": bool(drop_unobserved),
        "no_precondition": not precondition,
        "huber": float(huber),
        "unit": unit,
    }
    for key in ("max_iter", "starts", "samples", "rank"):
        if job[key] is not None and job[key] < 0:
            raise LacunaError(f"{key} must not be negative, got {job[key]}")
    for key in ("tol", "loading", "shrinkage", "effective_samples", "huber"):
        if job[key] is not None and not np.isfinite(job[key]):
            raise LacunaError(f"{key} must be a finite number, got {job[key]}")
    return job


def _names(channels: Optional[Sequence[str]], s: np.ndarray) -> Optional[List[str]]:
    names: Optional[List[str]] = None if channels is None else [str(c) for c in channels]
    if names is not None and len(names) != s.shape[1]:
        raise LacunaError(f"channels names {len(names)} channels, the stack has {s.shape[1]}")
    return names


def _per_trial(values: Optional[Sequence[Any]], what: str, n: int) -> Optional[List[str]]:
    if values is None:
        return None
    v = [str(x) for x in values]
    if len(v) != n:
        raise LacunaError(f"{what} has {len(v)} entries for {n} trials")
    return v


def means_by(
    stack: Any,
    mask: Any = None,
    *,
    by: str,
    labels: Optional[Sequence[Any]] = None,
    sessions: Optional[Sequence[Any]] = None,
    grand: str = "trials",
    weights: Any = None,
    channels: Optional[Sequence[str]] = None,
    **settings: Any,
) -> Tuple[Dict[str, np.ndarray], Dict[str, np.ndarray], Dict[str, Any]]:
    """One mean per condition, per session or per (session, condition): the
    job of ``lacuna mean --by``.

    Parameters
    ----------
    stack, mask, weights, channels :
        As in :func:`mean`.
    by : ``"label"``, ``"session"`` or ``"session+label"``
        What the trials are grouped by.
    labels, sessions : sequences of length N
        Each trial's label (condition) and session; ``by`` says which are needed.
    grand : ``"trials"`` or ``"equal"``
        With sessions, the grand mean of the session means weighs each
        session by its trial count, or all alike.
    **settings :
        Any setting of :func:`mean` (``scheme``, ``tol``, ``drop_unobserved``, …),
        applied within every group.

    Returns
    -------
    means : dict
        Group name (``label``, ``session`` or ``session/label``) to its mean
        (p, p), NaN for channels the group left out. Each is exactly
        :func:`mean` on that group's trials.
    grand_means : dict
        Name to grand mean (``"all sessions"``, or one per label with
        ``by="session+label"``); empty for ``by="label"``.
    report : dict
        The groups.json document: every group's mean report, the distances
        between group means, the grand means' sessions and weights.
    """
    s = _as_stack(stack)
    m = _as_mask(mask, s)
    w = _as_weights(weights, s.shape[0])
    job = _mean_job(**settings)
    groups, grands, report = _lacuna.grouped_mean(
        s,
        m,
        w,
        _names(channels, s),
        _per_trial(labels, "labels", s.shape[0]),
        _per_trial(sessions, "sessions", s.shape[0]),
        json.dumps(job, allow_nan=False),
        str(by),
        str(grand),
    )
    return dict(groups), dict(grands), json.loads(report)


def recentre(
    stack: Any,
    mask: Any = None,
    *,
    sessions: Optional[Sequence[Any]] = None,
    weights: Any = None,
    channels: Optional[Sequence[str]] = None,
    **settings: Any,
) -> Tuple[np.ndarray, List[Dict[str, Any]]]:
    """Re-centre each session at the identity: the job of ``lacuna recentre``.

    Every trial's observed block C becomes M[o,o]^{-1/2} C M[o,o]^{-1/2}, M
    its session's mean (the masked mean unless ``scheme`` says otherwise;
    any setting of :func:`mean` may be given). Without ``sessions`` all
    trials form one session.

    Returns
    -------
    stack : array (N, p, p)
        The re-centred trials, NaN where unobserved (the mask is unchanged).
    sessions : list of dict
        Per session: ``session``, ``trials``, ``converged``, ``iterations``,
        ``left_out`` (channels it never observed) and ``residual`` (distance
        of the re-centred session's masked mean from the identity: 0 up to
        rounding with complete trials, small with masks).
    """
    s = _as_stack(stack)
    m = _as_mask(mask, s)
    w = _as_weights(weights, s.shape[0])
    job = _mean_job(**settings)
    out, record = _lacuna.recentre(
        s, m, w, _names(channels, s), _per_trial(sessions, "sessions", s.shape[0]),
        json.dumps(job, allow_nan=False),
    )
    return out, json.loads(record)


def train(
    stack: Any,
    mask: Any = None,
    *,
    labels: Sequence[Any],
    sessions: Optional[Sequence[Any]] = None,
    folds: Optional[int] = 5,
    by_session: bool = False,
    recentre: bool = False,
    seed: int = 0,
    weights: Any = None,
    channels: Optional[Sequence[str]] = None,
    **settings: Any,
) -> Dict[str, Any]:
    """Train a minimum-distance-to-mean decoder: the job of ``lacuna train``.

    One mean per label (the masked mean unless ``scheme`` says otherwise; any
    setting of :func:`mean` may be given); a trial is later assigned to the
    class whose mean is nearest on its observed channels.

    Parameters
    ----------
    labels : sequence of length N
        Each trial's class; two or more classes.
    sessions : sequence of length N, optional
        Each trial's session (needed for ``by_session`` and ``recentre``).
    folds : int or None
        k-fold cross-validation (k >= 2), or None for none.
    by_session : bool
        Leave one session out instead of k folds.
    recentre : bool
        Re-centre every session at its own mean first; the model records it
        and :func:`classify` re-centres new data the same way.

    Returns
    -------
    dict
        The model: the same document ``lacuna train --out`` writes (save it
        with ``json.dump`` and ``lacuna classify --model`` reads it):
        channels, classes, class means (None where not estimated), scheme,
        ``training`` with the per-fold accuracy, balanced accuracy and the
        confusion matrix. Decoding accuracy on research data says nothing
        about clinical use.
    """
    s = _as_stack(stack)
    m = _as_mask(mask, s)
    w = _as_weights(weights, s.shape[0])
    if folds is not None and (int(folds) < 2):
        raise LacunaError(f"folds must be None (no cross-validation) or 2 and more, got {folds}")
    job = {
        "mean": _mean_job(**settings),
        "folds": None if folds is None else int(folds),
        "by_session": bool(by_session),
        "recentre": bool(recentre),
        "seed": int(seed),
    }
    if seed < 0:
        raise LacunaError(f"seed must not be negative, got {seed}")
    lab = _per_trial(labels, "labels", s.shape[0])
    model = _lacuna.train(
        s, m, w, _names(channels, s), lab, _per_trial(sessions, "sessions", s.shape[0]),
        json.dumps(job, allow_nan=False),
    )
    return json.loads(model)


def classify(
    model: Union[Mapping[str, Any], str, "os.PathLike[str]"],
    stack: Any,
    mask: Any = None,
    *,
    sessions: Optional[Sequence[Any]] = None,
    channels: Optional[Sequence[str]] = None,
) -> Tuple[List[str], np.ndarray]:
    """Classify trials with a model of :func:`train` (a dict, or the path of
    a model file written by ``lacuna train``): the job of ``lacuna classify``.

    Channels are matched to the model's by name (``channels`` names the
    stack's; without it they are ``ch1``, ``ch2``, …); a channel the model
    does not know is refused. A model trained on re-centred sessions
    re-centres the data first (per session when ``sessions`` is given).

    Returns
    -------
    classes : list of str
        The predicted class of every trial.
    distances : array (N, classes)
        Affine-invariant distance of each trial's observed block to each
        class mean's matching block, in the order of ``model["classes"]``.
    """
    if isinstance(model, (str, os.PathLike)):
        with open(model, "r", encoding="utf-8") as f:
            text = f.read()
    else:
        text = json.dumps(dict(model), allow_nan=False)
    s = _as_stack(stack)
    m = _as_mask(mask, s)
    classes, distances = _lacuna.classify(
        text, s, m, _names(channels, s), _per_trial(sessions, "sessions", s.shape[0])
    )
    return list(classes), distances


def merge(*sets: Mapping[str, Any]) -> Dict[str, Any]:
    """Pool trial sets recorded with different electrode lists: the job of
    ``lacuna merge``.

    Each set is a mapping with ``stack`` (N, p, p), ``channels`` (p names),
    and optionally ``mask``, ``labels``, ``sessions`` and ``name`` (used as
    the session of a set without sessions; default ``set1``, ``set2``, …).
    Channels are matched by name; the result runs over their union, and a
    channel a set lacks is unobserved in all its trials.

    Returns
    -------
    dict with ``stack`` (NaN where unobserved), ``mask``, ``channels``,
    ``labels`` (None when no set has labels), ``sessions`` and ``record``
    (the merge.json document: each set's missing channels and the channel
    pairs no trial observes together, whose covariance the masked mean
    keeps at the maximum-determinant completion).
    """
    if len(sets) < 1:
        raise LacunaError("nothing to merge: give two or more trial sets")
    args = []
    for k, st in enumerate(sets):
        if not isinstance(st, Mapping):
            raise TypeError(f"set {k + 1} must be a mapping with 'stack' and 'channels'")
        unknown = set(st) - {"stack", "mask", "channels", "labels", "sessions", "name"}
        if unknown:
            raise LacunaError(f"set {k + 1}: unknown keys {sorted(unknown)}")
        if "stack" not in st or "channels" not in st:
            raise LacunaError(f"set {k + 1} needs 'stack' and 'channels'")
        s = _as_stack(st["stack"])
        m = _as_mask(st.get("mask"), s)
        names = _names(st["channels"], s)
        args.append((
            str(st.get("name", f"set{k + 1}")), s, m, names,
            _per_trial(st.get("labels"), "labels", s.shape[0]),
            _per_trial(st.get("sessions"), "sessions", s.shape[0]),
        ))
    stack, mask, channels, labels, sessions, record = _lacuna.merge(args)
    return {
        "stack": stack,
        "mask": mask,
        "channels": list(channels),
        "labels": None if labels is None else list(labels),
        "sessions": list(sessions),
        "record": json.loads(record),
    }


def extract(
    recordings: Union[str, "os.PathLike[str]", Sequence[Union[str, "os.PathLike[str]"]]] = (),
    *,
    epochs: Optional[str] = None,
    events: Sequence[str] = (),
    rate: Optional[float] = None,
    offset: float = 0.0,
    length: Optional[float] = None,
    window: Optional[float] = None,
    step: Optional[float] = None,
    labels: Sequence[str] = (),
    band: Optional[Union[str, Tuple[float, float]]] = None,
    order: int = 4,
    estimator: str = "oas",
    detect: bool = True,
    amplitude_z: float = 6.0,
    broadband_z: float = 7.0,
    min_correlation: float = 0.5,
    flat_ratio: float = 0.1,
    rail_fraction: float = 0.05,
    channels: Sequence[str] = (),
    bad: Sequence[str] = (),
    mask: Optional[str] = None,
    skip_annotations: bool = False,
    unit: Optional[str] = None,
) -> Dict[str, Any]:
    """Recordings to masked covariances: the job of ``lacuna extract``.

    Cuts each recording (EDF/EDF+, BDF/BDF+, or CSV with ``rate``; one per
    session) into epochs at its events (EDF+/BDF+ annotations, or ``events``
    CSVs) or into fixed ``window``s, band-passes them, masks every channel
    that was missing, saturated, flat, an amplitude outlier, broadband-noisy
    or isolated in an epoch (with the reason), and estimates each epoch's
    covariance on the channels it kept. Same defaults and same numbers as
    the command line.

    Returns
    -------
    dict with
        ``covs`` (N, p, p) float64, NaN where a channel was masked;
        ``mask`` (N, p) bool, True where observed;
        ``channels``, ``labels`` and ``sessions`` (per trial);
        ``epochs``: every epoch (session, onset_s, label, samples, shrinkage,
        rank, observed channels, and its trial index or None when it lost
        every channel); ``masked``: every masked cell (epoch, channel,
        reason); ``unit``, ``covariance_unit``, ``set_aside``, ``warnings``,
        ``notes``.

    Feed ``covs`` and ``mask`` to :func:`mean`.
    """
    if isinstance(recordings, (str, os.PathLike)):
        recordings = [recordings]
    if isinstance(band, tuple):
        band = f"{band[0]}-{band[1]}"
    job = {
        "recordings": [os.fspath(r) for r in recordings],
        "epochs": None if epochs is None else os.fspath(epochs),
        "events": [os.fspath(e) for e in events],
        "rate": None if rate is None else float(rate),
        "offset": float(offset),
        "length": None if length is None else float(length),
        "window": None if window is None else float(window),
        "step": None if step is None else float(step),
        "labels": [str(x) for x in labels],
        "band": band,
        "order": int(order),
        "estimator": estimator,
        "no_detect": not detect,
        "amplitude_z": float(amplitude_z),
        "broadband_z": float(broadband_z),
        "min_correlation": float(min_correlation),
        "flat_ratio": float(flat_ratio),
        "rail_fraction": float(rail_fraction),
        "channels": [str(c) for c in channels],
        "bad": [str(c) for c in bad],
        "mask": None if mask is None else os.fspath(mask),
        "skip_annotations": bool(skip_annotations),
        "unit": unit,
    }
    if job["order"] < 0:
        raise LacunaError(f"order must be between 1 and 10, got {job['order']}")
    for key, value in job.items():
        if isinstance(value, float) and not np.isfinite(value):
            raise LacunaError(f"{key} must be a finite number, got {value}")
    covs, observed, record = _lacuna.extract(json.dumps(job))
    out = json.loads(record)
    out["covs"] = covs
    out["mask"] = observed
    return out


def compare(
    stack: Any,
    mask: Any = None,
    *,
    weights: Any = None,
    channels: Optional[Sequence[str]] = None,
    labels: Optional[Sequence[Any]] = None,
    sessions: Optional[Sequence[Any]] = None,
    target: str = "centre",
    schemes: Sequence[str] = (),
    samples: Optional[int] = None,
    effective_samples: Optional[float] = None,
    positions: Optional[Mapping[str, Sequence[float]]] = None,
    repeats: int = 20,
    folds: int = 5,
    bootstrap: int = 10,
    leave_out: bool = True,
    leave_out_trials: int = 2000,
    validation: bool = True,
    seed: int = 0,
    tol: float = 1e-10,
    loading_grid: Sequence[float] = (1e-4, 1e-3, 1e-2, 1e-1),
    shrinkage: float = 0.1,
    drop_unobserved: bool = False,
    unit: Optional[str] = None,
) -> Dict[str, Any]:
    """Every scheme side by side, with the evidence for choosing one: the job
    of ``lacuna compare``.

    Runs every averaging scheme that accepts missing channels (or those in
    ``schemes``) on the same trials, the distances between their means, the
    selection protocols (simulated dropout, held-out fit, and — with
    ``labels`` — minimum-distance decoding), the recommendation for
    ``target`` (``"centre"`` or ``"population"``) and the per-channel
    contributions to the masked mean. Same defaults and numbers as the
    command line; ``positions`` maps channel names to (x, y, z) on the unit
    sphere (spherical-spline), ``loading_grid`` holds the λ values of
    diagonal-loading and ``shrinkage`` the α of the shrinkage scheme;
    beyond ``leave_out_trials`` trials the leave-one-channel-out influence is
    measured on one seeded random subset of that size.

    Returns
    -------
    dict
        The comparison, field for field as ``compare.json`` (see
        docs/formats.md), except that each ok scheme's ``mean`` is a
        (p, p) float64 array with NaN outside the channels it estimates.
        ``result["recommendation"]["scheme"]`` names the recommended one.
    """
    s = _as_stack(stack)
    m = _as_mask(mask, s)
    w = _as_weights(weights, s.shape[0])
    n = s.shape[0]

    def per_trial(values: Optional[Sequence[Any]], what: str) -> Optional[List[str]]:
        if values is None:
            return None
        v = [str(x) for x in values]
        if len(v) != n:
            raise LacunaError(f"{what} has {len(v)} entries for {n} trials")
        return v

    if target not in ("centre", "population"):
        raise LacunaError(f"target must be 'centre' or 'population', got {target!r}")
    job = {
        "target": target,
        "effective_samples": None if effective_samples is None else float(effective_samples),
        "unit": unit,
        "samples": None if samples is None else int(samples),
        "schemes": [str(x) for x in schemes],
        "positions": None
        if positions is None
        else {str(k): [float(x) for x in v] for k, v in positions.items()},
        "repeats": int(repeats),
        "folds": int(folds),
        "bootstrap": int(bootstrap),
        "no_leave_out": not leave_out,
        "leave_out_trials": int(leave_out_trials),
        "no_validation": not validation,
        "seed": int(seed),
        "tol": float(tol),
        "loading_grid": [float(x) for x in loading_grid],
        "shrinkage": float(shrinkage),
        "drop_unobserved": bool(drop_unobserved),
    }
    for key in ("samples", "repeats", "folds", "bootstrap", "seed", "leave_out_trials"):
        if job[key] is not None and job[key] < 0:
            raise LacunaError(f"{key} must not be negative, got {job[key]}")
    for key in ("tol", "effective_samples", "shrinkage"):
        if job[key] is not None and not np.isfinite(job[key]):
            raise LacunaError(f"{key} must be a finite number, got {job[key]}")
    if not all(np.isfinite(job["loading_grid"])):
        raise LacunaError(f"loading_grid must hold finite numbers, got {job['loading_grid']}")
    names: Optional[List[str]] = None if channels is None else [str(c) for c in channels]
    if names is not None and len(names) != s.shape[1]:
        raise LacunaError(f"channels names {len(names)} channels, the stack has {s.shape[1]}")
    text = _lacuna.compare(
        s,
        m,
        w,
        names,
        per_trial(labels, "labels"),
        per_trial(sessions, "sessions"),
        json.dumps(job, allow_nan=False),
    )
    out = json.loads(text)
    for row in out["schemes"]:
        if row.get("status") == "ok":
            row["mean"] = np.array(
                [[np.nan if x is None else x for x in r] for r in row["mean"]], dtype=np.float64
            )
    return out


def schemes() -> List[Tuple[str, str]]:
    """The averaging schemes, as (name, what it assumes) pairs."""
    return _lacuna.schemes()


class MaskedMean:
    """Estimator-style wrapper of :func:`mean`.

    >>> est = MaskedMean(scheme="airm-observed").fit(stack, mask)
    >>> est.mean_, est.report_["converged"]

    Settings are the keyword arguments of :func:`mean`; ``fit`` stores the
    mean in ``mean_``, the report in ``report_`` and the channel names in
    ``channels_``.
    """

    def __init__(self, **settings: Any) -> None:
        self.settings = dict(settings)

    def fit(self, stack: Any, mask: Any = None, weights: Any = None) -> "MaskedMean":
        settings = dict(self.settings)
        if weights is not None:
            settings["weights"] = weights
        self.mean_, self.report_ = mean(stack, mask, **settings)
        self.channels_ = list(self.report_["channels"])
        return self

    def __repr__(self) -> str:
        args = ", ".join(f"{k}={v!r}" for k, v in self.settings.items())
        return f"MaskedMean({args})"
