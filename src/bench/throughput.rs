//! Throughput of the sessions layer's per-trial work, O(N·k³): re-centring
//! (each observed block whitened by its session mean's sub-block) and
//! minimum-distance prediction (each trial's distance to every class mean on
//! its observed block), in trials per second, against the numpy reference's
//! `recentre` and `predict` modes on the same data in the same run.
//!
//! The means are random SPD matrices: the work does not depend on their
//! values, only on the sizes and the observation patterns. The whole
//! `RecentreJob` (which first solves one masked mean per session, then a
//! residual mean per session) is timed beside the whitening alone.

use std::time::Instant;

use lacuna::jobs::decoder::{MODEL_VERSION, Model, TrainingSummary};
use lacuna::jobs::recentre::whiten_by;
use lacuna::jobs::{MeanJob, RecentreJob};
use lacuna::simulate::rng::Rng;
use lacuna::simulate::stacks::random_spd;
use lacuna::spd::Mat;
use lacuna::trials::Trial;

const SESSIONS: usize = 4;
const CLASSES: usize = 2;
const REPEATS: usize = 3;

/// Best of `REPEATS` wall times of `f`, and its last value.
fn best_of<T>(mut f: impl FnMut() -> T) -> (f64, T) {
    let mut best = f64::INFINITY;
    let mut last = None;
    for _ in 0..REPEATS {
        let t = Instant::now();
        let v = f();
        best = best.min(t.elapsed().as_secs_f64());
        last = Some(v);
    }
    (best, last.expect("REPEATS > 0"))
}

fn rows_of(m: &Mat) -> Vec<Vec<Option<f64>>> {
    (0..m.nrows())
        .map(|a| (0..m.ncols()).map(|b| Some(m[(a, b)])).collect())
        .collect()
}

fn stack_of(ms: &[Mat]) -> Vec<u8> {
    let p = ms[0].nrows();
    let data: Vec<f64> = ms
        .iter()
        .flat_map(|m| (0..p).flat_map(move |a| (0..p).map(move |b| m[(a, b)])))
        .collect();
    lacuna::trials::npy::encode_f64(&[ms.len(), p, p], &data)
}

/// The reference's best time and checksum for `mode` on the files in `dir`.
fn reference(py: &str, dir: &std::path::Path, mode: &str, workers: usize) -> Option<(f64, f64)> {
    let script = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/reference/bench_reference.py"
    );
    let out = std::process::Command::new(py)
        .arg(script)
        .arg(dir)
        .arg(mode)
        .args(["--workers", &workers.to_string()])
        .output()
        .ok()?;
    if !out.status.success() {
        eprintln!("reference failed: {}", String::from_utf8_lossy(&out.stderr));
        return None;
    }
    let text = String::from_utf8_lossy(&out.stdout);
    let v: serde_json::Value = text.lines().find_map(|l| serde_json::from_str(l).ok())?;
    Some((v["seconds"].as_f64()?, v["checksum"].as_f64()?))
}

pub fn run(sizes: &[(usize, usize)], py: Option<&str>, workers: &[usize]) {
    println!(
        "| N | p | work | lacuna (s) | lacuna trials/s | reference | reference (s) | reference trials/s | lacuna faster | checksums agree |"
    );
    println!("|---|---|---|---|---|---|---|---|---|---|");
    for &(n, p) in sizes {
        let mut set = super::make_set(n, p, true, 11);
        let session: Vec<usize> = (0..n).map(|i| i * SESSIONS / n).collect();
        set.sessions = Some(session.iter().map(|s| format!("s{}", s + 1)).collect());
        let mut rng = Rng::new(5);
        let session_means: Vec<Mat> = (0..SESSIONS)
            .map(|_| random_spd(p, 100.0, &mut rng))
            .collect();
        let class_means: Vec<Mat> = (0..CLASSES)
            .map(|_| random_spd(p, 100.0, &mut rng))
            .collect();

        // Whitening by the session means.
        let members: Vec<Vec<usize>> = (0..SESSIONS)
            .map(|s| (0..n).filter(|&i| session[i] == s).collect())
            .collect();
        let (t_whiten, whitened) = best_of(|| {
            members
                .iter()
                .zip(&session_means)
                .map(|(idx, m)| whiten_by(&set, idx, m).expect("finite means"))
                .collect::<Vec<Vec<Trial>>>()
        });
        let whiten_sum: f64 = whitened.iter().flatten().map(|t| t.block.trace()).sum();

        // Prediction with a model holding the class means.
        let model = Model {
            model_version: MODEL_VERSION.into(),
            lacuna_version: env!("CARGO_PKG_VERSION").into(),
            caution: String::new(),
            channels: set.channels().to_vec(),
            scheme: "airm-observed".into(),
            classes: (0..CLASSES).map(|k| format!("class {k}")).collect(),
            means: class_means.iter().map(rows_of).collect(),
            recentred: false,
            training: TrainingSummary {
                trials: vec![0; CLASSES],
                converged: vec![true; CLASSES],
                cross_validation: None,
            },
        };
        let (t_predict, predictions) = best_of(|| model.predict(&set).expect("predict"));
        let predict_sum: f64 = predictions.iter().flat_map(|p| &p.distances).sum();

        // The whole job: session means, whitening, residual means.
        let t = Instant::now();
        let job = RecentreJob {
            mean: MeanJob::default(),
        }
        .run(&set)
        .expect("recentre");
        let t_job = t.elapsed().as_secs_f64();
        let iterations: usize = job.sessions.iter().map(|s| s.iterations).sum();

        let dir = std::env::temp_dir().join(format!("lacuna-throughput-{}", std::process::id()));
        if py.is_some() {
            std::fs::create_dir_all(&dir).unwrap();
            let write = |f: &str, b: Vec<u8>| std::fs::write(dir.join(f), b).unwrap();
            write("covs.npy", lacuna::trials::io::encode_stack_with_nan(&set));
            write("mask.npy", lacuna::trials::io::encode_mask(&set));
            write("means.npy", stack_of(&session_means));
            write("classes.npy", stack_of(&class_means));
            let s: Vec<u8> = session.iter().map(|&s| s as u8).collect();
            write("session.npy", lacuna::trials::npy::encode_u8(&[n], &s));
        }
        for (work, mode, secs, sum) in [
            ("re-centring (whitening)", "recentre", t_whiten, whiten_sum),
            ("prediction (2 classes)", "predict", t_predict, predict_sum),
        ] {
            let runs: Vec<(usize, Option<(f64, f64)>)> = match py {
                Some(py) => workers
                    .iter()
                    .map(|&w| (w, reference(py, &dir, mode, w)))
                    .collect(),
                None => vec![],
            };
            if runs.is_empty() {
                println!(
                    "| {n} | {p} | {work} | {secs:.3} | {:.0} | - | - | - | - | - |",
                    n as f64 / secs
                );
            }
            for (w, r) in runs {
                let Some((rs, rsum)) = r else { continue };
                println!(
                    "| {n} | {p} | {work} | {secs:.3} | {:.0} | numpy, {w} process{} | {rs:.3} | {:.0} | {:.1}× | {} |",
                    n as f64 / secs,
                    if w == 1 { "" } else { "es" },
                    n as f64 / rs,
                    rs / secs,
                    if ((rsum - sum) / sum).abs() < 1e-9 {
                        "yes".to_string()
                    } else {
                        format!("no ({sum:.6e} vs {rsum:.6e})")
                    }
                );
            }
        }
        println!(
            "| {n} | {p} | whole recentre job ({SESSIONS} session means, {iterations} iterations in all, + residuals) | {t_job:.3} | {:.0} | - | - | - | - | - |",
            n as f64 / t_job
        );
        let _ = std::fs::remove_dir_all(&dir);
    }
}
