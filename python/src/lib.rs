//! The compiled half of the Python package `lacuna`: thin bindings over the
//! library's jobs. Arrays arrive checked by the Python wrapper
//! (python/lacuna/__init__.py); everything numerical happens in `lacuna`,
//! with the GIL released.

use numpy::prelude::*;
use numpy::{PyArray2, PyArray3, PyReadonlyArray1, PyReadonlyArray2, PyReadonlyArray3};
use pyo3::create_exception;
use pyo3::exceptions::PyValueError;
use pyo3::prelude::*;

use lacuna::jobs::{
    CompareJob, ExtractJob, GrandWeighting, GroupBy, GroupedMeanJob, MeanJob, Model, RecentreJob,
    TrainJob,
};
use lacuna::trials::{Trial, TrialSet};

create_exception!(
    lacuna,
    LacunaError,
    PyValueError,
    "Invalid input or settings, or a computation lacuna cannot vouch for; the message names the trial, channel or setting."
);

/// The library's message, with advice phrased for Python (keyword
/// arguments, not command-line flags).
fn advice(e: &lacuna::LacunaError) -> String {
    use lacuna::LacunaError as E;
    match e {
        E::InGroup { group, source } => format!("group '{group}': {}", advice(source)),
        E::NeverObserved { .. } => format!("{e}; pass drop_unobserved=True to leave it out"),
        E::UnknownName {
            closest: Some(c), ..
        } => format!("{e} (did you mean '{c}'?)"),
        E::RankDeficient { .. } => format!(
            "{e}; regularise first (regularize=\"shrinkage:0.1\", \"loading:0.01\", or \"oas\" with samples=T), or choose a scheme that takes such windows"
        ),
        _ => e.to_string(),
    }
}

fn to_py(e: lacuna::LacunaError) -> PyErr {
    LacunaError::new_err(advice(&e))
}

/// Builds a trial set from a (N, p, p) stack and a (N, p) observation mask.
fn trial_set(
    stack: &[f64],
    shape: [usize; 3],
    observed: &[bool],
    weights: Option<Vec<f64>>,
    channels: Option<Vec<String>>,
) -> lacuna::Result<TrialSet> {
    let [n, p, _] = shape;
    let trials = (0..n)
        .map(|i| {
            let keep = (0..p).filter(|&c| observed[i * p + c]).collect();
            Trial::from_stack_row(stack, p, i, keep)
        })
        .collect();
    let channels = channels.unwrap_or_else(|| lacuna::trials::default_channel_names(p));
    TrialSet::new(channels, trials, weights, "the stack")
}

/// The arrays as owned buffers, so the computation can run without the GIL.
type Owned = (Vec<f64>, [usize; 3], Vec<bool>, Option<Vec<f64>>);

fn owned(
    stack: &PyReadonlyArray3<'_, f64>,
    mask: &PyReadonlyArray2<'_, bool>,
    weights: Option<&PyReadonlyArray1<'_, f64>>,
) -> PyResult<Owned> {
    let s = stack.shape();
    let weights = match weights {
        Some(w) => Some(w.as_slice()?.to_vec()),
        None => None,
    };
    Ok((
        stack.as_slice()?.to_vec(),
        [s[0], s[1], s[2]],
        mask.as_slice()?.to_vec(),
        weights,
    ))
}

/// mean(stack, mask, weights, channels, job_json) -> (mean, report_json)
///
/// The masked (or other) mean of a stack; `job_json` holds the settings of
/// `lacuna::jobs::MeanJob` (missing keys take the CLI's defaults). Returns
/// the mean (NaN where the scheme estimates nothing) and the report as JSON
/// text, as `lacuna mean --report` writes it (without file provenance).
#[pyfunction]
#[pyo3(signature = (stack, mask, weights, channels, job_json))]
fn mean<'py>(
    py: Python<'py>,
    stack: PyReadonlyArray3<'py, f64>,
    mask: PyReadonlyArray2<'py, bool>,
    weights: Option<PyReadonlyArray1<'py, f64>>,
    channels: Option<Vec<String>>,
    job_json: &str,
) -> PyResult<(Bound<'py, PyArray2<f64>>, String)> {
    let job: MeanJob = serde_json::from_str(job_json)
        .map_err(|e| LacunaError::new_err(format!("settings: {e}")))?;
    let (data, shape, observed, weights) = owned(&stack, &mask, weights.as_ref())?;
    let (mean, report) = py
        .detach(move || -> lacuna::Result<(lacuna::Mat, String)> {
            let set = trial_set(&data, shape, &observed, weights, channels)?;
            let run = job.run(set, None)?;
            let report = run.report(None).to_json();
            Ok((run.result.published(), report))
        })
        .map_err(to_py)?;
    let p = mean.nrows();
    let flat: Vec<f64> = (0..p)
        .flat_map(|a| (0..p).map(move |b| (a, b)))
        .map(|(a, b)| mean[(a, b)])
        .collect();
    let array = flat.into_pyarray(py).reshape([p, p])?;
    Ok((array, report))
}

/// A p×p matrix as a NumPy array.
fn to_array<'py>(py: Python<'py>, m: &lacuna::Mat) -> PyResult<Bound<'py, PyArray2<f64>>> {
    let p = m.nrows();
    let flat: Vec<f64> = (0..p)
        .flat_map(|a| (0..p).map(move |b| (a, b)))
        .map(|(a, b)| m[(a, b)])
        .collect();
    flat.into_pyarray(py).reshape([p, p])
}

/// Named means (group or grand) as NumPy arrays.
type NamedMeans<'py> = Vec<(String, Bound<'py, PyArray2<f64>>)>;

/// grouped_mean(stack, mask, weights, channels, labels, sessions, job_json, by, grand)
///     -> (group_means, grand_means, report_json)
///
/// One mean per label, session or (session, label) (`lacuna::jobs::GroupedMeanJob`,
/// the job of `lacuna mean --by`): lists of (name, mean) pairs and the
/// groups.json document as text (without file provenance).
#[pyfunction]
#[pyo3(signature = (stack, mask, weights, channels, labels, sessions, job_json, by, grand))]
#[allow(clippy::too_many_arguments)]
fn grouped_mean<'py>(
    py: Python<'py>,
    stack: PyReadonlyArray3<'py, f64>,
    mask: PyReadonlyArray2<'py, bool>,
    weights: Option<PyReadonlyArray1<'py, f64>>,
    channels: Option<Vec<String>>,
    labels: Option<Vec<String>>,
    sessions: Option<Vec<String>>,
    job_json: &str,
    by: &str,
    grand: &str,
) -> PyResult<(NamedMeans<'py>, NamedMeans<'py>, String)> {
    let mean: MeanJob = serde_json::from_str(job_json)
        .map_err(|e| LacunaError::new_err(format!("settings: {e}")))?;
    let job = GroupedMeanJob {
        mean,
        by: GroupBy::from_name(by).map_err(to_py)?,
        grand: GrandWeighting::from_name(grand).map_err(to_py)?,
    };
    let (data, shape, observed, weights) = owned(&stack, &mask, weights.as_ref())?;
    type Named = Vec<(String, lacuna::Mat)>;
    let (groups, grands, report) = py
        .detach(move || -> lacuna::Result<(Named, Named, String)> {
            let mut set = trial_set(&data, shape, &observed, weights, channels)?;
            set.labels = labels;
            set.sessions = sessions;
            let out = job.run(&set, None)?;
            let report = serde_json::to_string(&out.report(None))
                .map_err(|e| lacuna::LacunaError::Numerical(e.to_string()))?;
            let groups = out
                .groups
                .iter()
                .map(|g| (g.name.clone(), g.mean.clone()))
                .collect();
            let grands = out
                .grand
                .iter()
                .filter_map(|g| g.mean.clone().map(|m| (g.name.clone(), m)))
                .collect();
            Ok((groups, grands, report))
        })
        .map_err(to_py)?;
    let convert = |v: Named| -> PyResult<NamedMeans<'py>> {
        v.into_iter()
            .map(|(n, m)| Ok((n, to_array(py, &m)?)))
            .collect()
    };
    Ok((convert(groups)?, convert(grands)?, report))
}

/// recentre(stack, mask, weights, channels, sessions, job_json) -> (covs, sessions_json)
///
/// `lacuna::jobs::RecentreJob` (the job of `lacuna recentre`): every trial's
/// observed block whitened by its session mean's matching sub-block. Returns
/// the re-centred stack (NaN where unobserved; the mask is unchanged) and
/// the per-session record as JSON text.
#[pyfunction]
#[pyo3(signature = (stack, mask, weights, channels, sessions, job_json))]
fn recentre<'py>(
    py: Python<'py>,
    stack: PyReadonlyArray3<'py, f64>,
    mask: PyReadonlyArray2<'py, bool>,
    weights: Option<PyReadonlyArray1<'py, f64>>,
    channels: Option<Vec<String>>,
    sessions: Option<Vec<String>>,
    job_json: &str,
) -> PyResult<(Bound<'py, PyArray3<f64>>, String)> {
    let mean: MeanJob = serde_json::from_str(job_json)
        .map_err(|e| LacunaError::new_err(format!("settings: {e}")))?;
    let (data, shape, observed, weights) = owned(&stack, &mask, weights.as_ref())?;
    let (flat, record) = py
        .detach(move || -> lacuna::Result<(Vec<f64>, String)> {
            let mut set = trial_set(&data, shape, &observed, weights, channels)?;
            set.sessions = sessions;
            let out = RecentreJob { mean }.run(&set)?;
            let record = serde_json::to_string(&out.sessions)
                .map_err(|e| lacuna::LacunaError::Numerical(e.to_string()))?;
            Ok((lacuna::trials::io::nan_stack(&out.set), record))
        })
        .map_err(to_py)?;
    let [n, p, _] = shape;
    Ok((flat.into_pyarray(py).reshape([n, p, p])?, record))
}

/// train(stack, mask, weights, channels, labels, sessions, job_json) -> model_json
///
/// Runs `lacuna::jobs::TrainJob` (settings as JSON; missing keys take the
/// CLI's defaults) and returns the model as JSON text: the same document
/// `lacuna train --out` writes, readable by `lacuna classify`.
#[pyfunction]
#[pyo3(signature = (stack, mask, weights, channels, labels, sessions, job_json))]
#[allow(clippy::too_many_arguments)]
fn train<'py>(
    py: Python<'py>,
    stack: PyReadonlyArray3<'py, f64>,
    mask: PyReadonlyArray2<'py, bool>,
    weights: Option<PyReadonlyArray1<'py, f64>>,
    channels: Option<Vec<String>>,
    labels: Vec<String>,
    sessions: Option<Vec<String>>,
    job_json: &str,
) -> PyResult<String> {
    let job: TrainJob = serde_json::from_str(job_json)
        .map_err(|e| LacunaError::new_err(format!("settings: {e}")))?;
    let (data, shape, observed, weights) = owned(&stack, &mask, weights.as_ref())?;
    py.detach(move || -> lacuna::Result<String> {
        let mut set = trial_set(&data, shape, &observed, weights, channels)?;
        set.labels = Some(labels);
        set.sessions = sessions;
        let model = job.run(&set)?;
        Ok(String::from_utf8_lossy(&lacuna::output::json_bytes(&model)).into_owned())
    })
    .map_err(to_py)
}

/// classify(model_json, stack, mask, channels, sessions) -> (classes, distances)
///
/// `Model::classify`: re-centres first when the model was trained on
/// re-centred sessions, then assigns every trial to the nearest class mean
/// on its observed block. Returns the predicted class names and the
/// (N, classes) distances.
#[pyfunction]
#[pyo3(signature = (model_json, stack, mask, channels, sessions))]
fn classify<'py>(
    py: Python<'py>,
    model_json: &str,
    stack: PyReadonlyArray3<'py, f64>,
    mask: PyReadonlyArray2<'py, bool>,
    channels: Option<Vec<String>>,
    sessions: Option<Vec<String>>,
) -> PyResult<(Vec<String>, Bound<'py, PyArray2<f64>>)> {
    let model: Model = serde_json::from_str(model_json)
        .map_err(|e| LacunaError::new_err(format!("not a lacuna model: {e}")))?;
    let (data, shape, observed, _) = owned(&stack, &mask, None)?;
    let k = model.classes.len();
    let predictions = py
        .detach(
            move || -> lacuna::Result<Vec<lacuna::jobs::decoder::Prediction>> {
                let mut set = trial_set(&data, shape, &observed, None, channels)?;
                set.sessions = sessions;
                model.classify(&set)
            },
        )
        .map_err(to_py)?;
    let n = predictions.len();
    let flat: Vec<f64> = predictions
        .iter()
        .flat_map(|p| p.distances.iter().copied())
        .collect();
    let classes = predictions.into_iter().map(|p| p.class).collect();
    Ok((classes, flat.into_pyarray(py).reshape([n, k])?))
}

/// One trial set handed to `merge`: name, stack, mask, channels, labels, sessions.
type SetIn<'py> = (
    String,
    PyReadonlyArray3<'py, f64>,
    PyReadonlyArray2<'py, bool>,
    Vec<String>,
    Option<Vec<String>>,
    Option<Vec<String>>,
);

/// The merged set: stack, mask, channels, labels, sessions, record JSON.
type Merged<'py> = (
    Bound<'py, PyArray3<f64>>,
    Bound<'py, PyArray2<bool>>,
    Vec<String>,
    Option<Vec<String>>,
    Vec<String>,
    String,
);

/// merge(sets) -> (stack, mask, channels, labels, sessions, record_json)
///
/// `lacuna::trials::merge::merge_by_name` over the sets, with the record
/// `lacuna merge` writes as merge.json.
#[pyfunction]
fn merge<'py>(py: Python<'py>, sets: Vec<SetIn<'py>>) -> PyResult<Merged<'py>> {
    let mut owned_sets = Vec::new();
    for (name, stack, mask, channels, labels, sessions) in &sets {
        let (data, shape, observed, _) = owned(stack, mask, None)?;
        owned_sets.push((
            name.clone(),
            data,
            shape,
            observed,
            channels.clone(),
            labels.clone(),
            sessions.clone(),
        ));
    }
    let (merged, record) = py
        .detach(move || -> lacuna::Result<(TrialSet, String)> {
            let mut built = Vec::new();
            for (name, data, shape, observed, channels, labels, sessions) in owned_sets {
                let mut set =
                    trial_set(&data, shape, &observed, None, Some(channels)).map_err(|e| {
                        lacuna::LacunaError::InGroup {
                            group: name.clone(),
                            source: Box::new(e),
                        }
                    })?;
                set.labels = labels;
                set.sessions = sessions;
                built.push((name, set));
            }
            let merged = lacuna::trials::merge::merge_by_name(&built)?;
            let record = lacuna::trials::merge::MergeRecord::of(&built, &merged);
            let json = String::from_utf8_lossy(&lacuna::output::json_bytes(&record)).into_owned();
            Ok((merged, json))
        })
        .map_err(to_py)?;
    let (n, p) = (merged.len(), merged.n_channels());
    let stack = lacuna::trials::io::nan_stack(&merged)
        .into_pyarray(py)
        .reshape([n, p, p])?;
    let mut mask = vec![false; n * p];
    for (i, t) in merged.trials().iter().enumerate() {
        for &c in &t.observed {
            mask[i * p + c] = true;
        }
    }
    let mask = mask.into_pyarray(py).reshape([n, p])?;
    Ok((
        stack,
        mask,
        merged.channels().to_vec(),
        merged.labels.clone(),
        merged.sessions.clone().unwrap_or_default(),
        record,
    ))
}

/// Covariances (N, p, p), observation mask (N, p) and the record as JSON.
type Extracted<'py> = (
    Bound<'py, PyArray3<f64>>,
    Bound<'py, PyArray2<bool>>,
    String,
);

/// extract(job_json) -> (covs, mask, record_json)
///
/// Runs `lacuna::jobs::ExtractJob` (settings as JSON; missing keys take the
/// CLI's defaults). Returns the trials' covariances (N, p, p) with NaN where
/// a channel was masked, the (N, p) observation mask, and a JSON record:
/// channels, per-trial labels and sessions, every epoch, every masked cell
/// with its reason, unit, warnings and notes.
#[pyfunction]
fn extract<'py>(py: Python<'py>, job_json: &str) -> PyResult<Extracted<'py>> {
    let job: ExtractJob = serde_json::from_str(job_json)
        .map_err(|e| LacunaError::new_err(format!("settings: {e}")))?;
    let (covs, mask, shape, record) = py
        .detach(move || -> lacuna::Result<_> {
            let run = job.run(&|_, _| {})?;
            let set = &run.set;
            let (n, p) = (set.len(), set.n_channels());
            let covs = lacuna::trials::io::nan_stack(set);
            let x = &run.extraction;
            let mut trial = 0usize;
            let epochs: Vec<serde_json::Value> = x
                .epochs
                .iter()
                .enumerate()
                .map(|(e, info)| {
                    let index = (!x.empty_epochs.contains(&e)).then(|| {
                        trial += 1;
                        trial - 1
                    });
                    serde_json::json!({
                        "session": info.session,
                        "onset_s": info.onset,
                        "duration_s": info.duration,
                        "samples": info.samples,
                        "label": info.label,
                        "shrinkage": info.shrinkage,
                        "rank": info.rank,
                        "observed": info.observed,
                        "trial": index,
                    })
                })
                .collect();
            let masked: Vec<serde_json::Value> = x
                .masked
                .iter()
                .map(|m| serde_json::json!({"epoch": m.epoch, "channel": m.channel, "reason": m.reason.name()}))
                .collect();
            let record = serde_json::json!({
                "channels": set.channels(),
                "labels": set.labels,
                "sessions": set.sessions,
                "epochs": epochs,
                "masked": masked,
                "unit": run.unit.as_deref().map(lacuna::jobs::mean::display_unit),
                "covariance_unit": lacuna::jobs::mean::covariance_unit(run.unit.as_deref()),
                "set_aside": x.set_aside,
                "warnings": run.warnings,
                "notes": run.notes,
            });
            Ok((covs, set.mask().to_vec(), (n, p), record.to_string()))
        })
        .map_err(to_py)?;
    let (n, p) = shape;
    let covs = covs.into_pyarray(py).reshape([n, p, p])?;
    let mask = mask.into_pyarray(py).reshape([n, p])?;
    Ok((covs, mask, record))
}

/// compare(stack, mask, weights, channels, labels, sessions, job_json) -> comparison_json
///
/// Runs `lacuna::jobs::CompareJob` (settings as JSON; missing keys take the
/// CLI's defaults) and returns the typed comparison as JSON text: the same
/// document as compare.json (without file provenance).
#[pyfunction]
#[pyo3(signature = (stack, mask, weights, channels, labels, sessions, job_json))]
#[allow(clippy::too_many_arguments)]
fn compare<'py>(
    py: Python<'py>,
    stack: PyReadonlyArray3<'py, f64>,
    mask: PyReadonlyArray2<'py, bool>,
    weights: Option<PyReadonlyArray1<'py, f64>>,
    channels: Option<Vec<String>>,
    labels: Option<Vec<String>>,
    sessions: Option<Vec<String>>,
    job_json: &str,
) -> PyResult<String> {
    let job: CompareJob = serde_json::from_str(job_json)
        .map_err(|e| LacunaError::new_err(format!("settings: {e}")))?;
    let (data, shape, observed, weights) = owned(&stack, &mask, weights.as_ref())?;
    py.detach(move || -> lacuna::Result<String> {
        let mut set = trial_set(&data, shape, &observed, weights, channels)?;
        set.labels = labels;
        set.sessions = sessions;
        let result = job.run(set, None)?;
        Ok(String::from_utf8_lossy(&lacuna::output::json_bytes(&result)).into_owned())
    })
    .map_err(to_py)
}

/// The averaging schemes: a list of (name, what it assumes) pairs.
#[pyfunction]
fn schemes() -> Vec<(String, String)> {
    lacuna::all_schemes()
        .iter()
        .map(|s| (s.name().to_string(), s.summary().to_string()))
        .collect()
}

#[pymodule]
fn _lacuna(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add("LacunaError", m.py().get_type::<LacunaError>())?;
    m.add("__version__", env!("CARGO_PKG_VERSION"))?;
    m.add_function(wrap_pyfunction!(mean, m)?)?;
    m.add_function(wrap_pyfunction!(schemes, m)?)?;
    m.add_function(wrap_pyfunction!(extract, m)?)?;
    m.add_function(wrap_pyfunction!(compare, m)?)?;
    m.add_function(wrap_pyfunction!(grouped_mean, m)?)?;
    m.add_function(wrap_pyfunction!(recentre, m)?)?;
    m.add_function(wrap_pyfunction!(train, m)?)?;
    m.add_function(wrap_pyfunction!(classify, m)?)?;
    m.add_function(wrap_pyfunction!(merge, m)?)?;
    Ok(())
}
