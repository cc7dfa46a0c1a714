//! `lacuna-bench --mode compare`: exactly what `lacuna compare` runs with its
//! defaults (every scheme, simulated dropout, held-out fit, decoding with
//! labels, contributions with leave-one-out and the bootstrap), timed per
//! stage from the job's own record. The in-run reference is what
//! `lacuna mean` runs with its defaults (airm-observed to 1e-10) on the same
//! trials: the ratio says what the whole comparison costs in masked means.

use std::collections::BTreeMap;
use std::sync::{Arc, Mutex};
use std::time::Instant;

use lacuna::jobs::{CompareJob, MeanJob};
use lacuna::simulate::rng::Rng;
use lacuna::simulate::stacks::{masked_set, random_dropout, random_spd, sample_covariance};

/// The compare bench's trials: sample covariances (4p samples) of one
/// population of condition 100, 30 % of trials missing 1–4 channels, labels
/// in two alternating classes (so the decoding check runs).
pub fn bench_set(n: usize, p: usize) -> lacuna::trials::TrialSet {
    let mut rng = Rng::new(7);
    let sigma = random_spd(p, 100.0, &mut rng);
    let full: Vec<_> = (0..n)
        .map(|_| sample_covariance(&sigma, 4 * p, &mut rng))
        .collect();
    // Only the trial set stays, as in `lacuna compare` (the full matrices
    // are dropped on return, before any heap is measured).
    let mut set = masked_set(&full, random_dropout(n, p, 0.3, 4, &mut rng));
    set.labels = Some(
        (0..n)
            .map(|i| if i % 2 == 0 { "a" } else { "b" }.to_string())
            .collect(),
    );
    set
}

pub fn run(n: usize, p: usize) {
    let set = bench_set(n, p);
    let t = Instant::now();
    let mean = MeanJob::default().run(set.clone(), None).unwrap();
    let reference = t.elapsed().as_secs_f64();
    let reference_iterations = mean.result.diagnostics.iterations;
    drop(mean);
    let job = CompareJob {
        samples: Some(4 * p),
        ..CompareJob::default()
    };
    // Heap peak per stage: the progress callback sees each stage start.
    let stack_bytes = (n * p * p * 8) as f64;
    let peaks: Arc<Mutex<(String, BTreeMap<String, usize>)>> = Arc::default();
    let before = crate::heap::in_use();
    crate::heap::reset_peak();
    let seen = peaks.clone();
    let progress: lacuna::jobs::compare::CompareProgress = Arc::new(move |stage: &str, _, _| {
        let mut g = seen.lock().unwrap();
        if g.0 != stage {
            let peak = crate::heap::reset_peak();
            let last = std::mem::replace(&mut g.0, stage.to_string());
            let e = g.1.entry(last).or_default();
            *e = (*e).max(peak);
        }
    });
    let t = Instant::now();
    let cmp = job.run(set, Some(progress)).unwrap();
    let all = t.elapsed().as_secs_f64();
    let mut g = peaks.lock().unwrap();
    let last = std::mem::take(&mut g.0);
    let peak = crate::heap::reset_peak();
    let e = g.1.entry(last).or_default();
    *e = (*e).max(peak);
    println!(
        "compare on N = {n}, p = {p} ({} candidates, 30% of trials missing 1-4 channels, labels in two classes), {} threads",
        cmp.schemes.len(),
        rayon::current_num_threads()
    );
    println!("| stage | seconds | masked means |\n|---|---|---|");
    for (k, v) in &cmp.stage_seconds {
        println!("| {k} | {v:.2} | {:.1} |", v / reference);
    }
    println!("| **total** | {all:.2} | {:.1} |", all / reference);
    println!(
        "| reference: `mean` defaults (airm-observed, tol 1e-10, {} iterations) | {reference:.2} | 1 |",
        reference_iterations
    );
    println!(
        "\nheap peak per stage (the trial set, held throughout, and the rest of the heap: {:.1} MB before the run; input stack N·p²·8 = {:.1} MB):\n| stage | peak heap (MB) | × stack |\n|---|---|---|",
        before as f64 / 1e6,
        stack_bytes / 1e6
    );
    for (stage, peak) in g.1.iter().filter(|(k, _)| !k.is_empty()) {
        println!(
            "| {stage} | {:.1} | {:.2} |",
            *peak as f64 / 1e6,
            *peak as f64 / stack_bytes
        );
    }
    println!(
        "\nper candidate (all schemes once):\n| candidate | iterations | seconds |\n|---|---|---|"
    );
    for row in &cmp.schemes {
        if let lacuna::jobs::comparison::SchemeRow::Ok(m) = row {
            println!("| {} | {} | {:.2} |", m.scheme, m.iterations, m.seconds);
        }
    }
}
