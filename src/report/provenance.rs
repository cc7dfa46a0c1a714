//! Where an output came from: program version, command line, each input
//! file's name, size and SHA-256, and the time (UTC). Every JSON output
//! carries one, so a result can be traced to the exact bytes it was made from.

use std::io::Read;
use std::path::Path;

use serde::Serialize;
use sha2::{Digest, Sha256};

use crate::error::{LacunaError, Result};

/// One input file.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct InputFile {
    /// The path as given.
    pub path: String,
    /// Size in bytes.
    pub bytes: u64,
    /// SHA-256 of the content, lowercase hex.
    pub sha256: String,
}

/// The provenance block of an output.
#[derive(Debug, Clone, Serialize, serde::Deserialize)]
pub struct Provenance {
    pub lacuna_version: String,
    /// The command line, one element per argument.
    pub command_line: Vec<String>,
    pub inputs: Vec<InputFile>,
    /// When the output was made, RFC 3339 UTC (seconds).
    pub created_utc: String,
}

/// SHA-256 of a file, read in 1 MiB blocks.
pub fn sha256_file(path: &Path) -> Result<InputFile> {
    let err = |source| LacunaError::Read {
        path: path.to_path_buf(),
        source,
    };
    let mut f = std::fs::File::open(path).map_err(err)?;
    let mut h = Sha256::new();
    let mut buf = vec![0u8; 1 << 20];
    let mut bytes = 0u64;
    loop {
        let n = f.read(&mut buf).map_err(err)?;
        if n == 0 {
            break;
        }
        bytes += n as u64;
        h.update(&buf[..n]);
    }
    let digest = h.finalize();
    Ok(InputFile {
        path: path.display().to_string(),
        bytes,
        sha256: digest.iter().map(|b| format!("{b:02x}")).collect(),
    })
}

/// Provenance of this run for the given input files.
pub fn provenance(inputs: &[&Path]) -> Result<Provenance> {
    Ok(Provenance {
        lacuna_version: env!("CARGO_PKG_VERSION").into(),
        command_line: std::env::args().collect(),
        inputs: inputs
            .iter()
            .map(|p| sha256_file(p))
            .collect::<Result<_>>()?,
        created_utc: rfc3339_now(),
    })
}

/// The current time as `YYYY-MM-DDThh:mm:ssZ` (days to civil date by
/// Hinnant's algorithm, "chrono-Compatible Low-Level Date Algorithms", 2013).
fn rfc3339_now() -> String {
    let secs = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map_or(0, |d| d.as_secs()) as i64;
    rfc3339(secs)
}

fn rfc3339(secs: i64) -> String {
    let days = secs.div_euclid(86_400);
    let rem = secs.rem_euclid(86_400);
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    let y = yoe + era * 400 + i64::from(m <= 2);
    format!(
        "{y:04}-{m:02}-{d:02}T{:02}:{:02}:{:02}Z",
        rem / 3600,
        rem % 3600 / 60,
        rem % 60
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    // FIPS 180-2, appendix B.1: SHA-256("abc"); and dates from the Unix epoch
    // (common practice: 0 is 1970-01-01, 951782400 is 2000-02-29, from memory).
    #[test]
    fn digest_and_dates() {
        let dir = std::env::temp_dir().join(format!("lacuna-prov-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let f = dir.join("abc.txt");
        std::fs::write(&f, b"abc").unwrap();
        let i = sha256_file(&f).unwrap();
        assert_eq!(
            i.sha256,
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
        assert_eq!(i.bytes, 3);
        let _ = std::fs::remove_dir_all(&dir);
        assert_eq!(rfc3339(0), "1970-01-01T00:00:00Z");
        assert_eq!(rfc3339(951_782_400), "2000-02-29T00:00:00Z");
    }
}
