//! Helpers shared by the integration tests.
#![allow(dead_code)]

use lacuna::Mat;
use lacuna::simulate::rng::Rng;

/// Reads a fixture written by tests/reference/make_fixtures.py.
pub fn fixture(name: &str) -> serde_json::Value {
    let path = format!(
        "{}/tests/reference/fixtures/{name}.json",
        env!("CARGO_MANIFEST_DIR")
    );
    serde_json::from_str(&std::fs::read_to_string(&path).expect("fixture file"))
        .expect("fixture JSON")
}

/// A JSON list of lists as a matrix.
pub fn mat(v: &serde_json::Value) -> Mat {
    let rows: Vec<Vec<f64>> = serde_json::from_value(v.clone()).expect("matrix");
    let n = rows.len();
    let m = rows.first().map_or(0, Vec::len);
    Mat::from_fn(n, m, |i, j| rows[i][j])
}

/// Relative Frobenius error.
pub fn rel_err(a: &Mat, b: &Mat) -> f64 {
    (a - b).norm() / b.norm()
}

/// An SPD matrix from a seed (random eigenvectors, log-spaced spectrum).
pub fn spd(p: usize, cond: f64, seed: u64) -> Mat {
    lacuna::simulate::stacks::random_spd(p, cond, &mut Rng::new(seed))
}

/// True when `a − b` is positive semidefinite up to `tol` relative to ‖a‖.
pub fn loewner_geq(a: &Mat, b: &Mat, tol: f64) -> bool {
    let d = lacuna::spd::kernels::sym_eigenvalues(&lacuna::spd::symmetrize(&(a - b)));
    d[0] >= -tol * a.norm()
}

/// A temporary folder removed when dropped; unique per test binary and name.
pub struct Dir(pub std::path::PathBuf);

impl Dir {
    pub fn new(name: &str) -> Dir {
        let d = std::env::temp_dir().join(format!("lacuna-test-{name}-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&d);
        std::fs::create_dir_all(&d).unwrap();
        Dir(d)
    }
    pub fn path(&self, f: &str) -> std::path::PathBuf {
        self.0.join(f)
    }
    pub fn write(&self, f: &str, bytes: &[u8]) -> std::path::PathBuf {
        let p = self.path(f);
        std::fs::write(&p, bytes).unwrap();
        p
    }
}

impl Drop for Dir {
    fn drop(&mut self) {
        let _ = std::fs::remove_dir_all(&self.0);
    }
}

/// Runs the lacuna binary: (exit code, stdout, stderr).
pub fn lacuna(args: &[&str]) -> (i32, String, String) {
    let out = std::process::Command::new(env!("CARGO_BIN_EXE_lacuna"))
        .args(args)
        .output()
        .unwrap();
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stdout).into(),
        String::from_utf8_lossy(&out.stderr).into(),
    )
}

/// A path as &str.
pub fn s(p: &std::path::Path) -> &str {
    p.to_str().unwrap()
}

/// A file of the committed demo recordings.
pub fn demo_recording(f: &str) -> String {
    format!("{}/demo-data/recording/{f}", env!("CARGO_MANIFEST_DIR"))
}

/// The README's extract command on the three demo sessions, writing to
/// `out`, with `extra` arguments appended.
pub fn extract_demo(out: &std::path::Path, extra: &[&str]) -> (i32, String, String) {
    let sessions: Vec<String> = (1..=3)
        .map(|k| demo_recording(&format!("session-{k}.edf")))
        .collect();
    let mut args: Vec<&str> = vec!["extract"];
    args.extend(sessions.iter().map(String::as_str));
    args.extend([
        "--offset",
        "0.5",
        "--length",
        "2",
        "--band",
        "8-30",
        "--out",
        s(out),
    ]);
    args.extend_from_slice(extra);
    lacuna(&args)
}

/// A small masked data set (population of condition 20, windows of 40
/// samples, 30% of trials losing up to 2 channels) written as a NaN-encoded
/// stack `covs.npy` and `mask.npy` in `d`.
pub fn write_masked_set(
    d: &Dir,
    n: usize,
    p: usize,
    seed: u64,
) -> (std::path::PathBuf, std::path::PathBuf) {
    use lacuna::simulate::stacks::{masked_set, random_dropout, random_spd, sample_covariance};
    let mut rng = Rng::new(seed);
    let sigma = random_spd(p, 20.0, &mut rng);
    let full: Vec<_> = (0..n)
        .map(|_| sample_covariance(&sigma, 40, &mut rng))
        .collect();
    let set = masked_set(&full, random_dropout(n, p, 0.3, 2, &mut rng));
    (
        d.write("covs.npy", &lacuna::trials::io::encode_stack_with_nan(&set)),
        d.write("mask.npy", &lacuna::trials::io::encode_mask(&set)),
    )
}

/// Reads and parses a JSON file written by a test run.
pub fn read_json(path: impl AsRef<std::path::Path>) -> serde_json::Value {
    serde_json::from_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

/// A file of the committed covariance-level demo study (demo-data/).
pub fn demo(f: &str) -> String {
    format!("{}/demo-data/{f}", env!("CARGO_MANIFEST_DIR"))
}

/// Runs `lacuna <command> --covs demo/covs.npy --mask demo/mask.csv
/// --labels demo/labels.csv <extra…>`.
pub fn lacuna_on_demo(command: &str, extra: &[&str]) -> (i32, String, String) {
    let (covs, mask, labels) = (demo("covs.npy"), demo("mask.csv"), demo("labels.csv"));
    let mut args = vec![
        command, "--covs", &covs, "--mask", &mask, "--labels", &labels,
    ];
    args.extend_from_slice(extra);
    lacuna(&args)
}
