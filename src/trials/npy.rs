//! A small, strict NPY (format versions 1–3) reader and writer.
//!
//! Why our own: lacuna needs exactly four dtypes (`<f8`, `<f4`, `|u1`, `|b1`),
//! must refuse hostile or truncated files with a message that says what is
//! wrong, and must never allocate more than the file actually holds. Doing that
//! on top of a general NPY crate took as much code as the format itself
//! (a magic string, a length, a Python-literal header, raw little-endian data).
//! Specification: the NumPy Enhancement Proposal NEP 1 ("A simple file format
//! for NumPy arrays").

use std::path::Path;

use crate::error::{LacunaError, Result};

/// Element data of an NPY array, converted to the nearest Rust type.
#[derive(Debug, Clone, PartialEq)]
pub enum NpyData {
    /// `<f8` or `<f4` (widened).
    Float(Vec<f64>),
    /// `|u1` or `|b1`.
    Byte(Vec<u8>),
}

/// An NPY array in C (row-major) order, whatever order the file used.
#[derive(Debug, Clone, PartialEq)]
pub struct NpyArray {
    /// Shape as written in the header.
    pub shape: Vec<usize>,
    /// The dtype string from the header (for messages).
    pub descr: String,
    /// Elements in C order.
    pub data: NpyData,
}

const MAGIC: &[u8] = b"\x93NUMPY";

fn format_err(path: &Path, message: impl Into<String>) -> LacunaError {
    LacunaError::Format {
        path: path.to_path_buf(),
        message: message.into(),
    }
}

/// Reads an NPY file from disk.
pub fn read_npy(path: &Path) -> Result<NpyArray> {
    let bytes = crate::trials::io::read_regular_file(path)?;
    parse_npy(&bytes, path)
}

/// What an NPY header says.
#[derive(Debug, Clone)]
pub struct NpyHeader {
    /// Shape as written.
    pub shape: Vec<usize>,
    /// dtype string.
    pub descr: String,
    /// Column-major data.
    pub fortran: bool,
    /// Bytes per element.
    pub width: usize,
    /// 'f' for floats, 'u' for bytes.
    pub kind: char,
    /// Offset of the first data byte.
    pub data_start: usize,
    /// Number of elements.
    pub count: usize,
}

/// Length of the prefix (magic, version, header length, header) given its
/// first 12 bytes, so a streaming reader knows how much to read first.
pub fn header_extent(first: &[u8], path: &Path) -> Result<usize> {
    if first.len() < 10 || &first[..6] != MAGIC {
        return Err(format_err(
            path,
            "not an NPY file (missing the \\x93NUMPY magic string)",
        ));
    }
    match first[6] {
        1 => Ok(10 + u16::from_le_bytes([first[8], first[9]]) as usize),
        2 | 3 if first.len() >= 12 => {
            Ok(12 + u32::from_le_bytes([first[8], first[9], first[10], first[11]]) as usize)
        }
        2 | 3 => Err(format_err(path, "truncated NPY header")),
        v => Err(format_err(
            path,
            format!("unsupported NPY format version {v}"),
        )),
    }
}

/// Parses the header at the start of `bytes` (which must hold at least the
/// whole header).
pub fn parse_header(bytes: &[u8], path: &Path) -> Result<NpyHeader> {
    let data_start = header_extent(bytes, path)?;
    let header_start = if bytes[6] == 1 { 10 } else { 12 };
    if data_start > bytes.len() {
        return Err(format_err(path, "truncated NPY header"));
    }
    let header = std::str::from_utf8(&bytes[header_start..data_start])
        .map_err(|_| format_err(path, "NPY header is not text"))?;
    for key in ["descr", "fortran_order", "shape"] {
        let n = header.matches(&format!("'{key}'")).count()
            + header.matches(&format!("\"{key}\"")).count();
        if n > 1 {
            return Err(format_err(
                path,
                format!("NPY header names '{key}' {n} times; a header holds each key once"),
            ));
        }
    }
    let descr = dict_value(header, "descr")
        .map(|v| v.trim_matches(|c| c == '\'' || c == '"').to_string())
        .ok_or_else(|| format_err(path, "NPY header has no 'descr'"))?;
    let fortran = match dict_value(header, "fortran_order").as_deref() {
        Some("False") => false,
        Some("True") => true,
        _ => return Err(format_err(path, "NPY header has no valid 'fortran_order'")),
    };
    let shape =
        parse_shape(header).ok_or_else(|| format_err(path, "NPY header has no valid 'shape'"))?;
    let count = shape
        .iter()
        .try_fold(1usize, |acc, &d| acc.checked_mul(d))
        .ok_or_else(|| format_err(path, "NPY shape is too large"))?;
    let (width, kind) = match descr.as_str() {
        "<f8" => (8, 'f'),
        "<f4" => (4, 'f'),
        "|u1" | "<u1" | "u1" => (1, 'u'),
        "|b1" | "<b1" | "b1" => (1, 'u'),
        other => {
            return Err(format_err(
                path,
                format!(
                    "dtype {other} is not supported (use float64 for matrices, uint8 or bool for masks)"
                ),
            ));
        }
    };
    count
        .checked_mul(width)
        .ok_or_else(|| format_err(path, "NPY shape is too large"))?;
    Ok(NpyHeader {
        shape,
        descr,
        fortran,
        width,
        kind,
        data_start,
        count,
    })
}

/// Parses NPY bytes; `path` is used only in error messages.
pub fn parse_npy(bytes: &[u8], path: &Path) -> Result<NpyArray> {
    let NpyHeader {
        shape,
        descr,
        fortran,
        width,
        kind,
        data_start,
        count,
    } = parse_header(bytes, path)?;
    let payload = &bytes[data_start..];
    let need = count * width;
    if payload.len() < need {
        return Err(format_err(
            path,
            format!(
                "truncated NPY data: shape {:?} needs {need} bytes, the file holds {}",
                shape,
                payload.len()
            ),
        ));
    }
    if payload.len() > need {
        return Err(format_err(
            path,
            format!(
                "{} bytes follow the array of shape {:?}: the data must be exactly what the shape says",
                payload.len() - need,
                shape
            ),
        ));
    }
    let payload = &payload[..need];
    let mut data = match (kind, width) {
        ('f', 8) => NpyData::Float(
            payload
                .chunks_exact(8)
                .map(|c| f64::from_le_bytes(c.try_into().expect("chunk of 8")))
                .collect(),
        ),
        ('f', _) => NpyData::Float(
            payload
                .chunks_exact(4)
                .map(|c| f32::from_le_bytes(c.try_into().expect("chunk of 4")) as f64)
                .collect(),
        ),
        _ => NpyData::Byte(payload.to_vec()),
    };
    if fortran && shape.len() > 1 {
        data = match data {
            NpyData::Float(v) => NpyData::Float(fortran_to_c(&v, &shape)),
            NpyData::Byte(v) => NpyData::Byte(fortran_to_c(&v, &shape)),
        };
    }
    Ok(NpyArray { shape, descr, data })
}

fn fortran_to_c<T: Copy>(v: &[T], shape: &[usize]) -> Vec<T> {
    let mut out = Vec::with_capacity(v.len());
    let nd = shape.len();
    let mut idx = vec![0usize; nd];
    for _ in 0..v.len() {
        // Fortran offset of the C-order multi-index `idx`.
        let mut off = 0;
        let mut stride = 1;
        for d in 0..nd {
            off += idx[d] * stride;
            stride *= shape[d];
        }
        out.push(v[off]);
        for d in (0..nd).rev() {
            idx[d] += 1;
            if idx[d] < shape[d] {
                break;
            }
            idx[d] = 0;
        }
    }
    out
}

/// Value text of `'key': value` in the header dict (up to the next comma at depth 0).
fn dict_value(header: &str, key: &str) -> Option<String> {
    let pat_single = format!("'{key}'");
    let pat_double = format!("\"{key}\"");
    let start = header
        .find(&pat_single)
        .map(|i| i + pat_single.len())
        .or_else(|| header.find(&pat_double).map(|i| i + pat_double.len()))?;
    let rest = header[start..].trim_start().strip_prefix(':')?.trim_start();
    let mut depth = 0i32;
    let mut end = rest.len();
    for (i, ch) in rest.char_indices() {
        match ch {
            '(' => depth += 1,
            ')' => depth -= 1,
            ',' | '}' if depth == 0 => {
                end = i;
                break;
            }
            _ => {}
        }
    }
    Some(rest[..end].trim().to_string())
}

fn parse_shape(header: &str) -> Option<Vec<usize>> {
    let v = dict_value(header, "shape")?;
    let inner = v.strip_prefix('(')?.strip_suffix(')')?;
    inner
        .split(',')
        .map(str::trim)
        .filter(|s| !s.is_empty())
        .map(|s| s.trim_end_matches('L').parse::<usize>().ok())
        .collect()
}

fn header_bytes(descr: &str, shape: &[usize]) -> Vec<u8> {
    let shape_txt = match shape.len() {
        1 => format!("({},)", shape[0]),
        _ => format!(
            "({})",
            shape
                .iter()
                .map(|d| d.to_string())
                .collect::<Vec<_>>()
                .join(", ")
        ),
    };
    let mut dict =
        format!("{{'descr': '{descr}', 'fortran_order': False, 'shape': {shape_txt}, }}");
    // Pad with spaces so that magic + 4 + header is a multiple of 64, ending in \n.
    let total = MAGIC.len() + 4 + dict.len() + 1;
    dict.push_str(&" ".repeat((64 - total % 64) % 64));
    dict.push('\n');
    let mut out = Vec::with_capacity(dict.len() + 10);
    out.extend_from_slice(MAGIC);
    out.extend_from_slice(&[1, 0]);
    out.extend_from_slice(&(dict.len() as u16).to_le_bytes());
    out.extend_from_slice(dict.as_bytes());
    out
}

/// Serialises a float64 array in C order.
pub fn encode_f64(shape: &[usize], data: &[f64]) -> Vec<u8> {
    let mut out = header_bytes("<f8", shape);
    out.reserve(data.len() * 8);
    for v in data {
        out.extend_from_slice(&v.to_le_bytes());
    }
    out
}

/// Serialises a uint8 array in C order.
pub fn encode_u8(shape: &[usize], data: &[u8]) -> Vec<u8> {
    let mut out = header_bytes("|u1", shape);
    out.extend_from_slice(data);
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    // Common practice, no source: what we write we read back, bit for bit.
    #[test]
    fn round_trip_f64_and_u8() {
        let p = Path::new("mem");
        let data: Vec<f64> = (0..24).map(|i| i as f64 * 0.25 - 1.0).collect();
        let a = parse_npy(&encode_f64(&[2, 3, 4], &data), p).unwrap();
        assert_eq!(a.shape, vec![2, 3, 4]);
        assert_eq!(a.data, NpyData::Float(data));
        let b = parse_npy(&encode_u8(&[5], &[1, 0, 1, 1, 0]), p).unwrap();
        assert_eq!(b.shape, vec![5]);
        assert_eq!(b.data, NpyData::Byte(vec![1, 0, 1, 1, 0]));
    }

    // NEP 1: the header block (magic + lengths + dict) is padded to a multiple of 64 bytes.
    #[test]
    fn header_is_aligned() {
        let bytes = encode_f64(&[3, 3], &[0.0; 9]);
        assert_eq!((bytes.len() - 72) % 64, 0);
    }

    #[test]
    fn refuses_truncated_and_foreign() {
        let p = Path::new("x.npy");
        let full = encode_f64(&[4, 4], &[1.0; 16]);
        let err = parse_npy(&full[..full.len() - 3], p)
            .unwrap_err()
            .to_string();
        assert!(err.contains("truncated"), "{err}");
        assert!(parse_npy(b"hello world, not npy", p).is_err());
        let mut bad = full.clone();
        let pos = bad.windows(3).position(|w| w == b"<f8").unwrap();
        bad[pos..pos + 3].copy_from_slice(b"<i8");
        assert!(
            parse_npy(&bad, p)
                .unwrap_err()
                .to_string()
                .contains("not supported")
        );
    }

    // NEP 1: fortran_order True stores the array in column-major order.
    #[test]
    fn reads_fortran_order() {
        let mut bytes = encode_f64(&[2, 3], &[1.0, 4.0, 2.0, 5.0, 3.0, 6.0]);
        let pos = bytes.windows(5).position(|w| w == b"False").unwrap();
        bytes.splice(pos..pos + 5, b"True ".iter().copied());
        let a = parse_npy(&bytes, Path::new("f")).unwrap();
        assert_eq!(a.data, NpyData::Float(vec![1.0, 2.0, 3.0, 4.0, 5.0, 6.0]));
    }
}
