//! Pooling trial sets recorded with different electrode lists
//! (`lacuna merge`, `trials::merge::merge_by_name`).

mod common;

use common::{Dir, lacuna, read_json, s, spd};
use lacuna::schemes::{AirmObserved, AveragingScheme};
use lacuna::simulate::rng::Rng;
use lacuna::simulate::stacks::sample_covariance;
use lacuna::spd::sub_block;
use lacuna::trials::merge::merge_by_name;
use lacuna::trials::{Trial, TrialSet};
use lacuna::{Mat, SchemeOptions};

const UNION: [&str; 6] = ["Fz", "Cz", "Pz", "C3", "C4", "Oz"];

/// Full covariances over UNION from one population.
fn full_trials(n: usize, seed: u64) -> Vec<Mat> {
    let sigma = spd(6, 20.0, 90);
    let mut rng = Rng::new(seed);
    (0..n)
        .map(|_| sample_covariance(&sigma, 30, &mut rng))
        .collect()
}

/// A recording of `names` (a subset of UNION, in its own order): each trial
/// the matching sub-block, its first channel lost in every third trial.
fn recording(full: &[Mat], names: &[&str]) -> TrialSet {
    let idx: Vec<usize> = names
        .iter()
        .map(|n| UNION.iter().position(|u| u == n).unwrap())
        .collect();
    let trials = full
        .iter()
        .enumerate()
        .map(|(i, c)| {
            let keep: Vec<usize> = (0..names.len()).filter(|&k| k != 0 || i % 3 != 0).collect();
            let rows: Vec<usize> = keep.iter().map(|&k| idx[k]).collect();
            Trial {
                observed: keep,
                block: sub_block(c, &rows),
            }
        })
        .collect();
    TrialSet::new(
        names.iter().map(|n| n.to_string()).collect(),
        trials,
        None,
        "rec",
    )
    .unwrap()
}

// Common practice, no source: merging two recordings with different channel
// lists by name gives the set one would build by hand over the union —
// same masks, same blocks, hence the same masked mean, bit for bit.
#[test]
fn merged_sets_equal_the_hand_built_masked_stack() {
    let (fa, fb) = (full_trials(30, 1), full_trials(40, 2));
    let a = recording(&fa, &["Fz", "Cz", "Pz", "C3"]);
    let b = recording(&fb, &["C4", "Pz", "Oz", "Cz"]);
    let merged = merge_by_name(&[("a".into(), a), ("b".into(), b)]).unwrap();
    assert_eq!(merged.channels(), UNION.map(String::from));
    // By hand: each trial's observed channels in UNION order.
    let mut hand = Vec::new();
    for (full, names) in [
        (&fa, ["Fz", "Cz", "Pz", "C3"]),
        (&fb, ["C4", "Pz", "Oz", "Cz"]),
    ] {
        for (i, c) in full.iter().enumerate() {
            let mut obs: Vec<usize> = names
                .iter()
                .enumerate()
                .filter(|(k, _)| *k != 0 || i % 3 != 0)
                .map(|(_, n)| UNION.iter().position(|u| u == n).unwrap())
                .collect();
            obs.sort_unstable();
            hand.push(Trial {
                block: sub_block(c, &obs),
                observed: obs,
            });
        }
    }
    let hand = TrialSet::new(UNION.map(String::from).to_vec(), hand, None, "hand").unwrap();
    for (m, h) in merged.trials().iter().zip(hand.trials()) {
        assert_eq!(m.observed, h.observed);
        assert_eq!(m.block, h.block);
    }
    let o = SchemeOptions::default();
    let mm = AirmObserved.average(&merged, &o).unwrap();
    let mh = AirmObserved.average(&hand, &o).unwrap();
    assert_eq!(mm.mean, mh.mean);
    // Sessions keep the sets apart.
    let sessions = merged.sessions.as_ref().unwrap();
    assert_eq!(sessions[0], "a");
    assert_eq!(sessions[30], "b");
    // Channels only one set has are never observed with those only the other has.
    let ident = lacuna::diagnose::identifiability(&merged);
    let pairs: Vec<(&str, &str)> = ident
        .unconstrained_pairs
        .iter()
        .map(|&[x, y]| (UNION[x], UNION[y]))
        .collect();
    assert_eq!(
        pairs,
        [("Fz", "C4"), ("Fz", "Oz"), ("C3", "C4"), ("C3", "Oz")]
    );
}

fn write_folder(d: &Dir, name: &str, set: &TrialSet, labels: bool) -> std::path::PathBuf {
    let dir = d.path(name);
    std::fs::create_dir_all(&dir).unwrap();
    std::fs::write(
        dir.join("covs.npy"),
        lacuna::trials::io::encode_stack_with_nan(set),
    )
    .unwrap();
    std::fs::write(
        dir.join("mask.csv"),
        lacuna::trials::io::encode_mask_csv(set),
    )
    .unwrap();
    if labels {
        let rows: String = (0..set.len())
            .map(|i| format!("{}\n", ["x", "y"][i % 2]))
            .collect();
        std::fs::write(dir.join("labels.csv"), format!("label\n{rows}")).unwrap();
    }
    dir
}

#[test]
fn merge_from_the_command_line() {
    let d = Dir::new("merge-cli");
    let a = write_folder(
        &d,
        "cap-a",
        &recording(&full_trials(20, 3), &["Fz", "Cz", "Pz", "C3"]),
        true,
    );
    let b = write_folder(
        &d,
        "cap-b",
        &recording(&full_trials(20, 4), &["Oz", "C4", "Pz", "Cz"]),
        true,
    );
    let out = d.path("pooled");
    let (code, o, e) = lacuna(&["merge", s(&a), s(&b), "--out", s(&out)]);
    assert_eq!(code, 0, "{o}{e}");
    assert!(o.contains("never observed together"), "{o}");
    let header = std::fs::read_to_string(out.join("mask.csv")).unwrap();
    assert!(header.starts_with("Fz,Cz,Pz,C3,Oz,C4\n"), "{header}");
    let rec = read_json(out.join("merge.json"));
    assert_eq!(
        rec["pairs_never_observed_together"]
            .as_array()
            .unwrap()
            .len(),
        4
    );
    let labels = std::fs::read_to_string(out.join("labels.csv")).unwrap();
    assert!(labels.starts_with("label,session\nx,cap-a\n"), "{labels}");
    // The pooled set feeds the per-session means.
    let (code, _, e) = lacuna(&[
        "mean",
        "--covs",
        s(&out.join("covs.npy")),
        "--mask",
        s(&out.join("mask.csv")),
        "--labels",
        s(&out.join("labels.csv")),
        "--by",
        "session",
        "--drop-unobserved",
        "--out",
        s(&d.path("means")),
    ]);
    assert_eq!(code, 0, "{e}");
    // Refusals: labels in one set only; a folder without a mask; output
    // folder equal to an input; a single set.
    std::fs::remove_file(b.join("labels.csv")).unwrap();
    let (code, _, e) = lacuna(&["merge", s(&a), s(&b), "--out", s(&d.path("x"))]);
    assert_eq!(code, 2, "{e}");
    assert!(e.contains("cap-b"), "{e}");
    std::fs::remove_file(b.join("mask.csv")).unwrap();
    let (code, _, e) = lacuna(&["merge", s(&a), s(&b), "--out", s(&d.path("x"))]);
    assert_eq!(code, 3, "{e}");
    assert!(e.contains("mask.csv"), "{e}");
    let (code, _, e) = lacuna(&["merge", s(&a), s(&b), "--out", s(&a)]);
    assert_ne!(code, 0, "{e}");
    let (code, _, e) = lacuna(&["merge", s(&a), "--out", s(&d.path("x"))]);
    assert_eq!(code, 2, "{e}");
    let (code, _, e) = lacuna(&["merge", s(&a), s(&a), "--out", s(&d.path("x"))]);
    assert_eq!(code, 2, "{e}");
    assert!(e.contains("twice"), "{e}");
    assert!(!d.path("x").exists());
}
