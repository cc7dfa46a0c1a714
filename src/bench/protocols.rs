//! `lacuna-bench --mode protocols`: two savings inside `compare`'s
//! protocols, each measured against what it replaced, in one process on the
//! compare bench's trials (src/bench/compare.rs):
//! - protocol solves (held-out folds, dropout repeats, decoding folds)
//!   started from each candidate's own mean on the whole set, against cold
//!   starts; alternated twice, with the largest change of any score;
//! - trial sets derived by a selection or a channel drop, which carry the
//!   ranks over, against validating the same blocks afresh.

use std::time::Instant;

use lacuna::SchemeOptions;
use lacuna::select::{
    Candidate, FitCriterion, LOADING_GRID, Score, SelectOptions, decoding, default_candidates,
    held_out_fit, simulated_dropout,
};
use lacuna::solve::StopRule;
use lacuna::trials::TrialSet;

pub fn run(n: usize, p: usize) {
    let set = super::compare::bench_set(n, p);
    // As `lacuna compare` builds its candidates (tolerance 1e-10, 500
    // iterations, OAS shrinkage from the samples per trial).
    let base = SchemeOptions {
        stop: StopRule {
            tol: 1e-10,
            max_iter: 500,
        },
        samples: Some(4 * p),
        ..SchemeOptions::default()
    };
    let candidates = default_candidates(&base, &[], &LOADING_GRID);
    let means: Vec<_> = candidates
        .iter()
        .map(|c| c.run(&set).ok().map(|r| r.mean))
        .collect();
    let cold: Vec<Candidate> = candidates.iter().map(|c| c.warm_started(None)).collect();
    let warm: Vec<Candidate> = candidates
        .iter()
        .zip(&means)
        .map(|(c, m)| c.warm_started(m.as_ref()))
        .collect();
    let opts = SelectOptions {
        criterion: FitCriterion::AffineDistance,
        ..SelectOptions::default()
    };
    type Protocol = fn(&TrialSet, &[Candidate], &SelectOptions) -> Vec<Score>;
    let protocols: [(&str, Protocol); 3] = [
        ("held-out fit, 5 folds", |s, c, o| {
            held_out_fit(s, c, o).unwrap().scores
        }),
        ("simulated dropout, 20 repeats", |s, c, o| {
            simulated_dropout(s, c, o).unwrap().scores
        }),
        ("decoding, 5 folds", |s, c, o| {
            decoding(s, c, o).unwrap().expect("labels").scores
        }),
    ];
    println!(
        "protocol solves on N = {n}, p = {p}, {} candidates, {} threads; cold and warm alternated twice\n",
        candidates.len(),
        rayon::current_num_threads()
    );
    println!("| protocol | cold starts (s) | warm starts (s) | largest relative score change |");
    println!("|---|---|---|---|");
    for (name, protocol) in protocols {
        let (mut cold_s, mut warm_s) = (Vec::new(), Vec::new());
        let (mut cold_scores, mut warm_scores) = (Vec::new(), Vec::new());
        for _ in 0..2 {
            let t = Instant::now();
            cold_scores = protocol(&set, &cold, &opts);
            cold_s.push(t.elapsed().as_secs_f64());
            let t = Instant::now();
            warm_scores = protocol(&set, &warm, &opts);
            warm_s.push(t.elapsed().as_secs_f64());
        }
        let change = cold_scores
            .iter()
            .zip(&warm_scores)
            .filter_map(|(a, b)| Some((a.spread?.median, b.spread?.median)))
            .map(|(a, b)| (a - b).abs() / a.abs().max(1e-300))
            .fold(0.0f64, f64::max);
        let list = |v: &[f64]| {
            v.iter()
                .map(|s| format!("{s:.2}"))
                .collect::<Vec<_>>()
                .join(", ")
        };
        println!(
            "| {name} | {} | {} | {change:.1e} |",
            list(&cold_s),
            list(&warm_s)
        );
    }

    // Derived sets: what the selection or channel drop costs, and what
    // validating its blocks afresh (one Cholesky factor and one eigenvalue
    // decomposition per trial) would add.
    println!("\n| derived set | derived (ms) | validating it afresh would add (ms) | same ranks |");
    println!("|---|---|---|---|");
    let keep: Vec<usize> = (0..n * 4 / 5).collect();
    for round in 0..3 {
        for (name, make) in [
            (
                "selecting 4/5 of the trials",
                Box::new(|| set.select_trials(&keep).unwrap()) as Box<dyn Fn() -> TrialSet>,
            ),
            (
                "dropping one channel",
                Box::new(|| set.without_channels(&[0]).unwrap()),
            ),
        ] {
            let t = Instant::now();
            let derived = make();
            let derived_ms = t.elapsed().as_secs_f64() * 1e3;
            let t = Instant::now();
            let fresh = TrialSet::new(
                derived.channels().to_vec(),
                derived.trials().to_vec(),
                Some(derived.weights().to_vec()),
                "validated afresh",
            )
            .unwrap();
            let fresh_ms = t.elapsed().as_secs_f64() * 1e3;
            let same = (0..derived.len()).all(|i| derived.rank(i) == fresh.rank(i));
            println!(
                "| {name} (round {}) | {derived_ms:.1} | {fresh_ms:.1} | {same} |",
                round + 1
            );
        }
    }
}

/// `lacuna-bench --mode influence`: the leave-one-channel-out influence on
/// the whole set against the default seeded subset
/// (`contribution::LEAVE_OUT_TRIALS`), with the time of each and the
/// per-channel relative difference.
pub fn influence(n: usize, p: usize) {
    use lacuna::AveragingScheme;
    use lacuna::diagnose::contribution::{ContributionOptions, LEAVE_OUT_TRIALS, contributions};
    use lacuna::schemes::AirmObserved;
    let set = super::compare::bench_set(n, p);
    let t = Instant::now();
    let mean = AirmObserved
        .average(&set, &SchemeOptions::default())
        .unwrap()
        .mean;
    let mean_s = t.elapsed().as_secs_f64();
    let run = |cap: usize| {
        let t = Instant::now();
        let cs = contributions(
            &set,
            &mean,
            &ContributionOptions {
                leave_one_out: true,
                leave_out_trials: cap,
                bootstrap: 0,
                seed: 0,
                scheme_options: SchemeOptions::default(),
            },
        )
        .unwrap();
        let v: Vec<f64> = cs.iter().map(|c| c.leave_out_influence.unwrap()).collect();
        (v, t.elapsed().as_secs_f64())
    };
    let (whole, whole_s) = run(n);
    let (sub, sub_s) = run(LEAVE_OUT_TRIALS);
    let mut rel: Vec<f64> = whole.iter().zip(&sub).map(|(a, b)| (b - a) / a).collect();
    rel.sort_by(f64::total_cmp);
    let q = |f: f64| rel[((rel.len() - 1) as f64 * f).round() as usize];
    let mean_of = |v: &[f64]| v.iter().sum::<f64>() / v.len() as f64;
    println!("leave-one-channel-out influence on N = {n}, p = {p} (masked mean {mean_s:.2} s)\n");
    println!(
        "| trials used | seconds | mean influence | relative difference to the whole set: min / median / max |"
    );
    println!("|---|---|---|---|");
    println!("| all {n} | {whole_s:.2} | {:.4} | — |", mean_of(&whole));
    println!(
        "| seeded subset of {LEAVE_OUT_TRIALS} | {sub_s:.2} | {:.4} | {:+.3} / {:+.3} / {:+.3} |",
        mean_of(&sub),
        q(0.0),
        q(0.5),
        q(1.0)
    );
}
