//! `lacuna-bench --mode compare`: the whole `compare` pipeline (all schemes,
//! 20 simulated-dropout repeats, 5-fold held-out fit, contributions with
//! leave-one-out and 10 bootstrap resamples) on N = 2000, p = 32, timed per
//! stage. The in-run reference is one airm-observed solve on the same data:
//! the ratio says what the whole comparison costs in masked means.

use std::time::Instant;

use lacuna::diagnose::{ContributionOptions, contributions};
use lacuna::select::{
    LOADING_GRID, SelectOptions, decoding, default_candidates, held_out_fit, simulated_dropout,
};
use lacuna::simulate::rng::Rng;
use lacuna::simulate::stacks::{masked_set, random_dropout, random_spd, sample_covariance};
use lacuna::{AveragingScheme, SchemeOptions};
use rayon::prelude::*;

pub fn run(n: usize, p: usize) {
    let mut rng = Rng::new(7);
    let sigma = random_spd(p, 100.0, &mut rng);
    let full: Vec<_> = (0..n)
        .map(|_| sample_covariance(&sigma, 4 * p, &mut rng))
        .collect();
    let mut set = masked_set(&full, random_dropout(n, p, 0.3, 4, &mut rng));
    set.labels = Some(
        (0..n)
            .map(|i| if i % 2 == 0 { "a" } else { "b" }.to_string())
            .collect(),
    );
    let base = SchemeOptions {
        stop: lacuna::solve::StopRule {
            tol: 1e-8,
            max_iter: 500,
        },
        ..SchemeOptions::default()
    };
    let t = Instant::now();
    let one = lacuna::schemes::AirmObserved.average(&set, &base).unwrap();
    let reference = t.elapsed().as_secs_f64();
    let total = Instant::now();
    let cands = default_candidates(&base, &[], &LOADING_GRID);
    let t = Instant::now();
    let _means: Vec<_> = cands.par_iter().map(|c| c.run(&set).ok()).collect();
    let schemes = t.elapsed().as_secs_f64();
    let opts = SelectOptions::default();
    let t = Instant::now();
    simulated_dropout(&set, &cands, &opts).unwrap();
    let dropout = t.elapsed().as_secs_f64();
    let t = Instant::now();
    held_out_fit(&set, &cands, &opts).unwrap();
    let fit = t.elapsed().as_secs_f64();
    let t = Instant::now();
    decoding(&set, &cands, &opts).unwrap();
    let dec = t.elapsed().as_secs_f64();
    let t = Instant::now();
    contributions(
        &set,
        &one.mean,
        &ContributionOptions {
            leave_one_out: true,
            bootstrap: 20,
            seed: 0,
            scheme_options: base.clone(),
        },
    )
    .unwrap();
    let contrib = t.elapsed().as_secs_f64();
    let all = total.elapsed().as_secs_f64();
    println!(
        "compare on N = {n}, p = {p} ({} candidates, 30% of trials missing 1-4 channels, labels in two classes), {} threads",
        cands.len(),
        rayon::current_num_threads()
    );
    println!("| stage | seconds |\n|---|---|");
    for (k, v) in [
        ("all schemes once", schemes),
        ("simulated dropout, 20 repeats", dropout),
        ("held-out fit, 5 folds", fit),
        ("decoding, 5 folds", dec),
        ("contributions (leave-one-out + 10 bootstrap)", contrib),
        ("**total**", all),
        ("reference: one airm-observed solve", reference),
    ] {
        println!("| {k} | {v:.2} |");
    }
    println!("total / reference = {:.0} masked means", all / reference);
}
