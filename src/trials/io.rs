//! Reading trial sets and writing means, following the interchange contract
//! (GUIDE §4, docs/formats.md).
//!
//! - covariance stack: NPY float64 `(N, p, p)`; unobserved rows/columns may
//!   hold NaN (then the mask is inferred from NaN diagonals) or anything (then
//!   a mask is required);
//! - mask: NPY uint8/bool `(N, p)` or CSV with a header of channel names;
//! - weights: NPY float64 `(N,)` or a one-column CSV;
//! - a mean: NPY float64 `(p, p)` or CSV with a header of channel names,
//!   chosen by the file extension and always written atomically.

use std::path::Path;

use super::npy::{self, NpyData};
use super::{Trial, TrialSet, default_channel_names};
use crate::error::{LacunaError, ProblemKind, Result, TrialProblem};
use crate::spd::Mat;

fn format_err(path: &Path, message: impl Into<String>) -> LacunaError {
    LacunaError::Format {
        path: path.to_path_buf(),
        message: message.into(),
    }
}

fn is_csv(path: &Path) -> bool {
    path.extension()
        .is_some_and(|e| e.eq_ignore_ascii_case("csv"))
}

/// A covariance stack as read from disk: C-order data and its shape.
pub struct Stack {
    /// `N·p·p` values in C order.
    pub data: Vec<f64>,
    /// Number of trials.
    pub n: usize,
    /// Number of channels.
    pub p: usize,
}

/// `(N, p)` of a stack shape `(N, p, p)` (or `(p, p)` as one trial), or why not.
fn stack_dims(path: &Path, shape: &[usize]) -> Result<(usize, usize)> {
    let (n, p, q) = match shape {
        [n, p, q] => (*n, *p, *q),
        [p, q] => (1, *p, *q),
        s => {
            return Err(format_err(
                path,
                format!("covariance stack must have shape (N, p, p), found {s:?}"),
            ));
        }
    };
    if p != q {
        return Err(format_err(
            path,
            format!("matrices must be square, found {p}×{q}"),
        ));
    }
    if n == 0 || p == 0 {
        return Err(format_err(path, "covariance stack is empty"));
    }
    Ok((n, p))
}

/// Reads an `(N, p, p)` float stack (a single `(p, p)` matrix is taken as N = 1).
pub fn read_stack(path: &Path) -> Result<Stack> {
    let arr = npy::read_npy(path)?;
    let data = match arr.data {
        NpyData::Float(v) => v,
        NpyData::Byte(_) => {
            return Err(format_err(
                path,
                format!(
                    "covariance stack must be float64, found dtype {}",
                    arr.descr
                ),
            ));
        }
    };
    let (n, p) = stack_dims(path, &arr.shape)?;
    Ok(Stack { data, n, p })
}

/// A mask as read from disk, with channel names when the file has them.
pub struct MaskFile {
    /// `N·p` row-major, true = observed.
    pub observed: Vec<bool>,
    /// Channel names from a CSV header.
    pub channels: Option<Vec<String>>,
}

/// Reads a mask (NPY or CSV) and checks it against `(n, p)`.
pub fn read_mask(path: &Path, n: usize, p: usize) -> Result<MaskFile> {
    if is_csv(path) {
        return read_mask_csv(path, n, p);
    }
    let arr = npy::read_npy(path)?;
    let bytes = match arr.data {
        NpyData::Byte(v) => v,
        NpyData::Float(_) => {
            return Err(format_err(
                path,
                format!("mask must be uint8 or bool, found dtype {}", arr.descr),
            ));
        }
    };
    if arr.shape != [n, p] {
        return Err(format_err(
            path,
            format!(
                "mask shape {:?} does not match the stack: expected [{n}, {p}]",
                arr.shape
            ),
        ));
    }
    let mut observed = Vec::with_capacity(bytes.len());
    for (k, &b) in bytes.iter().enumerate() {
        match b {
            0 => observed.push(false),
            1 => observed.push(true),
            v => {
                return Err(format_err(
                    path,
                    format!(
                        "trial {}, channel {}: mask value {v} is not 0 or 1",
                        k / p,
                        k % p
                    ),
                ));
            }
        }
    }
    Ok(MaskFile {
        observed,
        channels: None,
    })
}

fn read_mask_csv(path: &Path, n: usize, p: usize) -> Result<MaskFile> {
    require_regular(path)?;
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(true)
        .from_path(path)
        .map_err(|e| format_err(path, e.to_string()))?;
    let header: Vec<String> = rdr
        .headers()
        .map_err(|e| format_err(path, e.to_string()))?
        .iter()
        .map(|s| s.trim().to_string())
        .collect();
    if header.len() != p {
        return Err(format_err(
            path,
            format!(
                "mask header names {} channels, the stack has {p}",
                header.len()
            ),
        ));
    }
    let mut observed = Vec::with_capacity(n * p);
    let mut rows = 0;
    for (r, rec) in rdr.records().enumerate() {
        let rec = rec.map_err(|e| format_err(path, format!("row {}: {e}", r + 2)))?;
        if rec.len() != p {
            return Err(format_err(
                path,
                format!(
                    "trial {r} (line {}): {} cells, expected {p}",
                    r + 2,
                    rec.len()
                ),
            ));
        }
        for (c, cell) in rec.iter().enumerate() {
            match cell.trim() {
                "1" | "true" | "True" => observed.push(true),
                "0" | "false" | "False" => observed.push(false),
                other => {
                    return Err(format_err(
                        path,
                        format!(
                            "trial {r} (line {}), channel {}: '{other}' is not 0 or 1",
                            r + 2,
                            header[c]
                        ),
                    ));
                }
            }
        }
        rows += 1;
    }
    if rows != n {
        return Err(format_err(
            path,
            format!("mask has {rows} trial rows, the stack has {n} trials"),
        ));
    }
    Ok(MaskFile {
        observed,
        channels: Some(header),
    })
}

/// Reads trial weights: NPY float64 `(N,)` or a one-column CSV (header optional).
pub fn read_weights(path: &Path, n: usize) -> Result<Vec<f64>> {
    let w = if is_csv(path) {
        require_regular(path)?;
        let text = std::fs::read_to_string(path).map_err(|source| LacunaError::Read {
            path: path.to_path_buf(),
            source,
        })?;
        let mut out = Vec::new();
        for (line_no, line) in text.lines().enumerate() {
            let cell = line.trim();
            if cell.is_empty() {
                continue;
            }
            match cell.parse::<f64>() {
                Ok(v) => out.push(v),
                Err(_) if line_no == 0 => {} // header
                Err(_) => {
                    return Err(format_err(
                        path,
                        format!("line {}: '{cell}' is not a number", line_no + 1),
                    ));
                }
            }
        }
        out
    } else {
        let arr = npy::read_npy(path)?;
        match (arr.data, arr.shape.as_slice()) {
            (NpyData::Float(v), [_]) => v,
            _ => {
                return Err(format_err(
                    path,
                    format!(
                        "weights must be float64 with shape (N,), found {} {:?}",
                        arr.descr, arr.shape
                    ),
                ));
            }
        }
    };
    if w.len() != n {
        return Err(format_err(
            path,
            format!("{} weights for {n} trials", w.len()),
        ));
    }
    // Checked here so that the message names the weights file.
    if let Some((i, v)) = w
        .iter()
        .enumerate()
        .find(|(_, v)| !(v.is_finite() && **v >= 0.0))
    {
        return Err(format_err(
            path,
            format!(
                "trial {i}: weight {v} is negative or not finite; weights must be finite and ≥ 0"
            ),
        ));
    }
    if w.iter().all(|&v| v == 0.0) {
        return Err(format_err(path, "all weights are zero"));
    }
    Ok(w)
}

/// Reads the `(N, p)` shape of a stack from its header alone.
/// Trials, channels and where the data start, for a stack that can be read
/// trial by trial (little-endian float64, C order); other layouts are refused.
pub fn streamable_stack(path: &Path) -> Result<(usize, usize, usize)> {
    let (n, p, h) = stack_shape(path)?;
    if h.descr != "<f8" || h.fortran {
        return Err(format_err(
            path,
            format!(
                "reading trial by trial (--stream) needs a little-endian float64 stack in C order, found {}{}; convert it with numpy.save(path, numpy.ascontiguousarray(a, dtype='<f8'))",
                h.descr,
                if h.fortran { " in Fortran order" } else { "" }
            ),
        ));
    }
    Ok((n, p, h.data_start))
}

fn stack_shape(path: &Path) -> Result<(usize, usize, npy::NpyHeader)> {
    use std::io::Read;
    let read_err = |source| LacunaError::Read {
        path: path.to_path_buf(),
        source,
    };
    require_regular(path)?;
    let mut f = std::fs::File::open(path).map_err(read_err)?;
    let mut first = Vec::new();
    (&mut f)
        .take(12)
        .read_to_end(&mut first)
        .map_err(read_err)?;
    let extent = npy::header_extent(&first, path)?;
    let mut rest = Vec::new();
    (&mut f)
        .take((extent.saturating_sub(first.len())) as u64)
        .read_to_end(&mut rest)
        .map_err(read_err)?;
    first.extend_from_slice(&rest);
    let h = npy::parse_header(&first, path)?;
    let (n, p) = stack_dims(path, &h.shape)?;
    if h.kind != 'f' {
        return Err(format_err(
            path,
            format!("covariance stack must be float64, found dtype {}", h.descr),
        ));
    }
    let len = f.metadata().map_err(read_err)?.len() as usize;
    let need = h.data_start + h.count * h.width;
    if len > need {
        return Err(format_err(
            path,
            format!(
                "{} bytes follow the array of shape {:?}: the data must be exactly what the shape says (docs/formats.md)",
                len - need,
                h.shape
            ),
        ));
    }
    if len < need {
        return Err(format_err(
            path,
            format!(
                "truncated NPY data: shape {:?} needs {} bytes, the file holds {}",
                h.shape,
                h.count * h.width,
                len.saturating_sub(h.data_start)
            ),
        ));
    }
    Ok((n, p, h))
}

/// Reads trials one at a time from a C-order float64 stack, keeping only the
/// observed blocks: peak memory stays near the size of the blocks, not twice
/// the file. `observed_of(i, diagonal)` gives trial `i`'s observed channels.
fn stream_trials(
    path: &Path,
    n: usize,
    p: usize,
    data_start: usize,
    observed_of: impl FnMut(usize, &[f64]) -> Vec<usize>,
) -> Result<Vec<Trial>> {
    read_trial_range(path, p, data_start, 0..n, observed_of)
}

/// Reads trials `range` of a little-endian C-order float64 stack whose data
/// start at byte `data_start`; `observed_of(i, diagonal)` gets the trial's
/// index in the whole stack.
pub fn read_trial_range(
    path: &Path,
    p: usize,
    data_start: usize,
    range: std::ops::Range<usize>,
    mut observed_of: impl FnMut(usize, &[f64]) -> Vec<usize>,
) -> Result<Vec<Trial>> {
    use std::io::{BufReader, Read, Seek, SeekFrom};
    let read_err = |source| LacunaError::Read {
        path: path.to_path_buf(),
        source,
    };
    let f = std::fs::File::open(path).map_err(read_err)?;
    let mut r = BufReader::with_capacity(1 << 20, f);
    r.seek(SeekFrom::Start(
        (data_start + range.start * p * p * 8) as u64,
    ))
    .map_err(read_err)?;
    let mut raw = vec![0u8; p * p * 8];
    let mut vals = vec![0f64; p * p];
    let mut trials = Vec::with_capacity(range.len());
    for i in range {
        r.read_exact(&mut raw).map_err(read_err)?;
        for (v, c) in vals.iter_mut().zip(raw.chunks_exact(8)) {
            *v = f64::from_le_bytes(c.try_into().expect("chunk of 8"));
        }
        let diag: Vec<f64> = (0..p).map(|c| vals[c * p + c]).collect();
        let obs = observed_of(i, &diag);
        trials.push(Trial::from_stack_row(&vals, p, 0, obs));
    }
    Ok(trials)
}

/// Loads a trial set from a stack, an optional mask and optional weights.
/// Little-endian C-order float64 stacks (the contract) are streamed trial by
/// trial; other layouts are read whole.
pub fn load_trial_set(
    covs: &Path,
    mask: Option<&Path>,
    weights: Option<&Path>,
) -> Result<TrialSet> {
    let (n, p, header) = stack_shape(covs)?;
    let mask_file = match mask {
        Some(m) => Some(read_mask(m, n, p)?),
        None => None,
    };
    let pick = |i: usize, diag: &[f64]| -> Vec<usize> {
        match &mask_file {
            Some(mf) => (0..p).filter(|&c| mf.observed[i * p + c]).collect(),
            None => (0..p).filter(|&c| !diag[c].is_nan()).collect(),
        }
    };
    let trials = if header.descr == "<f8" && !header.fortran {
        stream_trials(covs, n, p, header.data_start, pick)?
    } else {
        let stack = read_stack(covs)?;
        (0..n)
            .map(|i| {
                let diag: Vec<f64> = (0..p).map(|c| stack.data[i * p * p + c * p + c]).collect();
                Trial::from_stack_row(&stack.data, p, i, pick(i, &diag))
            })
            .collect()
    };
    let channels = mask_file
        .and_then(|m| m.channels)
        .unwrap_or_else(|| default_channel_names(p));
    let w = match weights {
        Some(path) => Some(read_weights(path, trials.len())?),
        None => None,
    };
    TrialSet::new(channels, trials, w, &covs.display().to_string()).map_err(|e| match e {
        LacunaError::InvalidTrials {
            source_name,
            problems,
        } if mask.is_none() => LacunaError::InvalidTrials {
            source_name,
            problems: with_mask_hint(problems),
        },
        other => other,
    })
}

fn with_mask_hint(mut problems: Vec<TrialProblem>) -> Vec<TrialProblem> {
    if problems.iter().any(|p| p.message.contains("NaN")) {
        problems.push(TrialProblem {
                kind: ProblemKind::Other,
            trial: None,
            channel: None,
            message: "without --mask, a channel counts as unobserved only when its variance (diagonal entry) is NaN".into(),
        });
    }
    problems
}

/// Serialises a `p×p` matrix as NPY (C order) or CSV with a header of channel names.
pub fn encode_matrix(path: &Path, m: &Mat, channels: &[String]) -> Vec<u8> {
    let p = m.nrows();
    if is_csv(path) {
        crate::report::tables::matrix(m, channels)
    } else {
        let data: Vec<f64> = (0..p * p).map(|k| m[(k / p, k % p)]).collect();
        npy::encode_f64(&[p, p], &data)
    }
}

/// Writes a mean atomically, NPY or CSV by extension.
pub fn write_matrix(path: &Path, m: &Mat, channels: &[String]) -> Result<()> {
    crate::output::write_atomic(path, &encode_matrix(path, m, channels))
}

/// Reads a `(p, p)` matrix from NPY or a CSV with a header row.
pub fn read_matrix(path: &Path) -> Result<Mat> {
    if is_csv(path) {
        require_regular(path)?;
        let mut rdr = csv::Reader::from_path(path).map_err(|e| format_err(path, e.to_string()))?;
        let p = rdr
            .headers()
            .map_err(|e| format_err(path, e.to_string()))?
            .len();
        let mut vals = Vec::new();
        for (r, rec) in rdr.records().enumerate() {
            let rec = rec.map_err(|e| format_err(path, e.to_string()))?;
            for (c, cell) in rec.iter().enumerate() {
                if cell.trim().is_empty() {
                    vals.push(f64::NAN); // a cell the scheme did not estimate
                    continue;
                }
                vals.push(cell.trim().parse::<f64>().map_err(|_| {
                    format_err(
                        path,
                        format!("row {}, column {}: '{cell}' is not a number", r + 2, c + 1),
                    )
                })?);
            }
        }
        if vals.len() != p * p {
            return Err(format_err(path, "matrix CSV is not square"));
        }
        return Ok(Mat::from_row_slice(p, p, &vals));
    }
    let s = read_stack(path)?;
    if s.n != 1 {
        return Err(format_err(path, "expected a single (p, p) matrix"));
    }
    Ok(Mat::from_row_slice(s.p, s.p, &s.data))
}

/// Writes a stack `(N, p, p)` with NaN in unobserved rows/columns, plus a mask.
pub fn encode_stack_with_nan(set: &TrialSet) -> Vec<u8> {
    npy::encode_f64(
        &[set.len(), set.n_channels(), set.n_channels()],
        &nan_stack(set),
    )
}

/// The set as a C-order `(N, p, p)` stack with NaN in unobserved rows and columns.
pub fn nan_stack(set: &TrialSet) -> Vec<f64> {
    let (n, p) = (set.len(), set.n_channels());
    let mut data = vec![f64::NAN; n * p * p];
    for (i, t) in set.trials().iter().enumerate() {
        for (a, &ca) in t.observed.iter().enumerate() {
            for (b, &cb) in t.observed.iter().enumerate() {
                data[i * p * p + ca * p + cb] = t.block[(a, b)];
            }
        }
    }
    data
}

/// Serialises the mask of a set as NPY uint8 `(N, p)`.
pub fn encode_mask(set: &TrialSet) -> Vec<u8> {
    let m: Vec<u8> = set.mask().iter().map(|&b| b as u8).collect();
    npy::encode_u8(&[set.len(), set.n_channels()], &m)
}

/// Encodes a trial set's mask as CSV: a header of channel names, then one
/// row of 0/1 per trial (1 = observed).
pub fn encode_mask_csv(set: &TrialSet) -> Vec<u8> {
    crate::report::tables::mask(set.channels(), &set.mask())
}

/// Reads electrode positions (CSV with a header `channel,x,y,z`) and returns
/// them in the order of `channels`, scaled to the unit sphere. Every channel
/// must be listed; extra rows are ignored.
pub fn read_positions(path: &Path, channels: &[String]) -> Result<Vec<[f64; 3]>> {
    require_regular(path)?;
    let text = std::fs::read_to_string(path).map_err(|source| LacunaError::Read {
        path: path.to_path_buf(),
        source,
    })?;
    let mut found: std::collections::HashMap<String, [f64; 3]> = Default::default();
    for (k, line) in text.lines().enumerate().skip(1) {
        let row = k + 1;
        if line.trim().is_empty() {
            continue;
        }
        let cells: Vec<&str> = line.split(',').map(str::trim).collect();
        if cells.len() < 4 {
            return Err(format_err(
                path,
                format!(
                    "row {row}: expected channel,x,y,z, found {} cells",
                    cells.len()
                ),
            ));
        }
        let mut v = [0.0; 3];
        for d in 0..3 {
            v[d] = cells[d + 1]
                .parse::<f64>()
                .ok()
                .filter(|x| x.is_finite())
                .ok_or_else(|| {
                    format_err(
                        path,
                        format!(
                            "row {row}, column {} (channel {}): {:?} is not a number",
                            d + 2,
                            cells[0],
                            cells[d + 1]
                        ),
                    )
                })?;
        }
        let norm = (v[0] * v[0] + v[1] * v[1] + v[2] * v[2]).sqrt();
        if !(norm > 0.0) {
            return Err(format_err(
                path,
                format!("row {row} (channel {}): position at the origin", cells[0]),
            ));
        }
        if found
            .insert(
                cells[0].to_string(),
                [v[0] / norm, v[1] / norm, v[2] / norm],
            )
            .is_some()
        {
            return Err(format_err(
                path,
                format!(
                    "row {row}: channel {} is listed twice; give each electrode one position",
                    cells[0]
                ),
            ));
        }
    }
    channels
        .iter()
        .map(|c| {
            found
                .get(c)
                .copied()
                .ok_or_else(|| format_err(path, format!("no position for channel {c}")))
        })
        .collect()
}

/// Reads trial labels from CSV: a header, then one row per trial. The
/// column named `label` (or the first column) is the label; a column named
/// `session`, when present, gives the session.
pub fn read_labels(path: &Path, n: usize) -> Result<(Vec<String>, Option<Vec<String>>)> {
    require_regular(path)?;
    // Parsed with quoting (RFC 4180): a label "left, cued" is one label.
    let mut rdr = csv::ReaderBuilder::new()
        .trim(csv::Trim::All)
        .flexible(true)
        .from_path(path)
        .map_err(|e| format_err(path, e.to_string()))?;
    let header: Vec<String> = rdr
        .headers()
        .map_err(|e| format_err(path, e.to_string()))?
        .iter()
        .map(str::to_ascii_lowercase)
        .collect();
    let label_col = header.iter().position(|h| h == "label").unwrap_or(0);
    let session_col = header.iter().position(|h| h == "session");
    let mut labels = Vec::new();
    let mut sessions = Vec::new();
    for (r, rec) in rdr.records().enumerate() {
        let rec = rec.map_err(|e| format_err(path, format!("row {}: {e}", r + 2)))?;
        if rec.iter().all(str::is_empty) {
            continue;
        }
        if labels.len() >= n {
            return Err(format_err(
                path,
                format!("more label rows than the {n} trials"),
            ));
        }
        labels.push(rec.get(label_col).unwrap_or("").to_string());
        if let Some(s) = session_col {
            sessions.push(rec.get(s).unwrap_or("").to_string());
        }
    }
    if labels.len() != n {
        return Err(format_err(
            path,
            format!("{} label rows for {n} trials", labels.len()),
        ));
    }
    Ok((labels, session_col.map(|_| sessions)))
}

/// Reads a whole input file that must be a regular file (not a FIFO, device
/// or folder), so that its size is known before reading: `/dev/zero` or a
/// pipe cannot grow memory without bound.
pub fn read_regular_file(path: &Path) -> Result<Vec<u8>> {
    let read_err = |source| LacunaError::Read {
        path: path.to_path_buf(),
        source,
    };
    let meta = require_regular(path)?;
    let mut bytes = Vec::with_capacity(meta.len() as usize);
    use std::io::Read;
    std::fs::File::open(path)
        .map_err(read_err)?
        .take(meta.len())
        .read_to_end(&mut bytes)
        .map_err(read_err)?;
    Ok(bytes)
}

/// Refuses an input that is not a regular file before it is opened: opening
/// a FIFO blocks, and a device has no size to check reads against.
pub fn require_regular(path: &Path) -> Result<std::fs::Metadata> {
    let meta = std::fs::metadata(path).map_err(|source| LacunaError::Read {
        path: path.to_path_buf(),
        source,
    })?;
    if !meta.is_file() {
        return Err(format_err(
            path,
            "not a regular file (a pipe, device or folder); give lacuna a file on disk",
        ));
    }
    Ok(meta)
}
