//! Several stack files (shards) as one trial set for `lacuna mean`.
//! Common practice, no source: concatenating the shards gives the same trial
//! set as one stack holding all trials in that order, so the mean must be
//! the same bit for bit.

mod common;

use common::{Dir, lacuna, read_json, s};
use lacuna::simulate::rng::Rng;
use lacuna::simulate::stacks::{masked_set, random_dropout, random_spd, sample_covariance};
use lacuna::trials::TrialSet;
use lacuna::trials::io::{encode_mask, encode_mask_csv, encode_stack_with_nan};

fn simulated(n: usize, p: usize, seed: u64) -> TrialSet {
    let mut rng = Rng::new(seed);
    let sigma = random_spd(p, 20.0, &mut rng);
    let full: Vec<_> = (0..n)
        .map(|_| sample_covariance(&sigma, 40, &mut rng))
        .collect();
    let set = masked_set(&full, random_dropout(n, p, 0.4, 2, &mut rng));
    let names = ["Fz", "Cz", "Pz", "Oz", "C3", "C4"][..p]
        .iter()
        .map(|c| c.to_string())
        .collect();
    set.with_channel_names(names, "test").unwrap()
}

/// The set split at `cuts` into shard files `shard-K.npy` and `mask-K.csv`.
fn write_shards(d: &Dir, set: &TrialSet, cuts: &[usize]) -> (Vec<String>, Vec<String>) {
    let mut bounds = vec![0];
    bounds.extend_from_slice(cuts);
    bounds.push(set.len());
    let mut covs = Vec::new();
    let mut masks = Vec::new();
    for (k, w) in bounds.windows(2).enumerate() {
        let part = set
            .select_trials(&(w[0]..w[1]).collect::<Vec<_>>())
            .unwrap();
        covs.push(
            s(&d.write(&format!("shard-{k}.npy"), &encode_stack_with_nan(&part))).to_string(),
        );
        masks.push(s(&d.write(&format!("mask-{k}.csv"), &encode_mask_csv(&part))).to_string());
    }
    (covs, masks)
}

fn mean_args<'a>(covs: &'a [String], masks: &'a [String]) -> Vec<&'a str> {
    let mut args = vec!["mean", "--covs"];
    args.extend(covs.iter().map(String::as_str));
    if !masks.is_empty() {
        args.push("--mask");
        args.extend(masks.iter().map(String::as_str));
    }
    args
}

#[test]
fn shards_give_the_mean_of_the_whole_stack_bit_for_bit() {
    let d = Dir::new("shards-same");
    let set = simulated(90, 6, 3);
    let whole = d.write("whole.npy", &encode_stack_with_nan(&set));
    let whole_mask = d.write("whole.csv", &encode_mask_csv(&set));
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        s(&whole),
        "--mask",
        s(&whole_mask),
        "--out",
        s(&d.path("whole-mean.npy")),
        "--quiet",
    ]);
    assert_eq!(code, 0, "{err}");
    let (covs, masks) = write_shards(&d, &set, &[25, 61]);

    // As a list.
    let out = d.path("list-mean.npy");
    let report = d.path("list.json");
    let mut args = mean_args(&covs, &masks);
    args.extend(["--out", s(&out), "--report", s(&report), "--quiet"]);
    let (code, _, err) = lacuna(&args);
    assert_eq!(code, 0, "{err}");
    assert_eq!(
        std::fs::read(&out).unwrap(),
        std::fs::read(d.path("whole-mean.npy")).unwrap()
    );
    let r = read_json(&report);
    let extents: Vec<(u64, u64)> = r["shards"]
        .as_array()
        .unwrap()
        .iter()
        .map(|e| {
            (
                e["first_trial"].as_u64().unwrap(),
                e["trials"].as_u64().unwrap(),
            )
        })
        .collect();
    assert_eq!(extents, vec![(0, 25), (25, 36), (61, 29)]);
    assert_eq!(r["n_trials"], 90);
    assert_eq!(r["channels"][1], "Cz");
    // Every shard file is in the provenance.
    assert_eq!(r["provenance"]["inputs"].as_array().unwrap().len(), 6);

    // As patterns, expanded in name order.
    let out = d.path("glob-mean.npy");
    let (pc, pm) = (
        s(&d.path("shard-*.npy")).to_string(),
        s(&d.path("mask-?.csv")).to_string(),
    );
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        &pc,
        "--mask",
        &pm,
        "--out",
        s(&out),
        "--quiet",
    ]);
    assert_eq!(code, 0, "{err}");
    assert_eq!(
        std::fs::read(&out).unwrap(),
        std::fs::read(d.path("whole-mean.npy")).unwrap()
    );

    // NaN-encoded shards need no masks (channel names then ch1, ch2, …).
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        &pc,
        "--out",
        s(&d.path("nomask.npy")),
        "--quiet",
    ]);
    assert_eq!(code, 0, "{err}");
}

#[test]
fn per_shard_weights_are_the_concatenated_weights() {
    let d = Dir::new("shards-weights");
    let set = simulated(40, 4, 5);
    let (covs, masks) = write_shards(&d, &set, &[15]);
    let w: Vec<f64> = (0..40).map(|i| 0.5 + (i % 3) as f64).collect();
    let csv = |v: &[f64]| v.iter().map(|x| format!("{x}\n")).collect::<String>();
    let w0 = d.write("w0.csv", format!("weight\n{}", csv(&w[..15])).as_bytes());
    let w1 = d.write("w1.csv", format!("weight\n{}", csv(&w[15..])).as_bytes());
    let wall = d.write("wall.csv", format!("weight\n{}", csv(&w)).as_bytes());
    let whole = d.write("whole.npy", &encode_stack_with_nan(&set));
    let whole_mask = d.write("whole-mask.npy", &encode_mask(&set));
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        s(&whole),
        "--mask",
        s(&whole_mask),
        "--weights",
        s(&wall),
        "--out",
        s(&d.path("a.npy")),
        "--quiet",
    ]);
    assert_eq!(code, 0, "{err}");
    let b = d.path("b.npy");
    let mut args = mean_args(&covs, &masks);
    args.extend(["--weights", s(&w0), s(&w1), "--out", s(&b), "--quiet"]);
    let (code, _, err) = lacuna(&args);
    assert_eq!(code, 0, "{err}");
    assert_eq!(
        std::fs::read(d.path("a.npy")).unwrap(),
        std::fs::read(d.path("b.npy")).unwrap()
    );
}

// Hostile shard lists: each refused with a message naming the culprit, a
// non-zero exit, and no output written.
#[test]
fn bad_shard_lists_are_refused_and_write_nothing() {
    let d = Dir::new("shards-bad");
    let set = simulated(30, 6, 7);
    let (covs, masks) = write_shards(&d, &set, &[10, 20]);
    let out = d.path("mean.npy");

    // A shard with other channels: exit 3, naming that shard.
    let other = simulated(10, 5, 8);
    let odd = d.write("odd.npy", &encode_stack_with_nan(&other));
    let odd_mask = d.write("odd.csv", &encode_mask_csv(&other));
    let c2 = vec![covs[0].clone(), s(&odd).to_string()];
    let m2 = vec![masks[0].clone(), s(&odd_mask).to_string()];
    let mut args = mean_args(&c2, &m2);
    args.extend(["--out", s(&out)]);
    let (code, _, err) = lacuna(&args);
    assert_eq!(code, 3, "{err}");
    assert!(
        err.contains("odd.npy") && err.contains("lacuna merge"),
        "{err}"
    );
    assert!(!out.exists());

    // Same channels in another order: also refused (positions would mix).
    let names = ["Cz", "Fz", "Pz", "Oz", "C3", "C4"]
        .map(String::from)
        .to_vec();
    let perm: Vec<usize> = vec![1, 0, 2, 3, 4, 5];
    let swapped: Vec<_> = set.trials()[..10]
        .iter()
        .map(|t| t.remapped(&perm))
        .collect();
    let swapped = TrialSet::new(names, swapped, None, "t").unwrap();
    let sw = d.write("swapped.npy", &encode_stack_with_nan(&swapped));
    let swm = d.write("swapped.csv", &encode_mask_csv(&swapped));
    let c2 = vec![covs[0].clone(), s(&sw).to_string()];
    let m2 = vec![masks[0].clone(), s(&swm).to_string()];
    let mut args = mean_args(&c2, &m2);
    args.extend(["--out", s(&out)]);
    let (code, _, err) = lacuna(&args);
    assert_eq!(code, 3, "{err}");
    assert!(err.contains("swapped.npy"), "{err}");

    // Masks and stacks do not pair up.
    let mut args = mean_args(&covs, &masks[..2]);
    args.extend(["--out", s(&out)]);
    let (code, _, err) = lacuna(&args);
    assert_ne!(code, 0);
    assert!(err.contains("3 stack file(s) and 2 --mask"), "{err}");

    // The same shard twice.
    let c2 = vec![covs[0].clone(), covs[0].clone()];
    let m2 = vec![masks[0].clone(), masks[1].clone()];
    let mut args = mean_args(&c2, &m2);
    args.extend(["--out", s(&out)]);
    let (code, _, err) = lacuna(&args);
    assert_ne!(code, 0);
    assert!(err.contains("given twice"), "{err}");

    // A pattern that matches nothing.
    let none = s(&d.path("nothing-*.npy")).to_string();
    let (code, _, err) = lacuna(&["mean", "--covs", &none, "--out", s(&out)]);
    assert_ne!(code, 0);
    assert!(
        err.contains("nothing-*.npy") && err.contains("no file matches"),
        "{err}"
    );

    // The output is one of the shards.
    let mut args = mean_args(&covs, &masks);
    args.extend(["--out", &covs[2]]);
    let before = std::fs::read(&covs[2]).unwrap();
    let (code, _, err) = lacuna(&args);
    assert_ne!(code, 0, "{err}");
    assert_eq!(std::fs::read(&covs[2]).unwrap(), before);

    // A non-finite value in the second shard names that file.
    let mut bytes = std::fs::read(&covs[1]).unwrap();
    let at = bytes.len() - 8;
    bytes[at..].copy_from_slice(&f64::INFINITY.to_le_bytes());
    let bad = d.write("bad.npy", &bytes);
    let c2 = vec![covs[0].clone(), s(&bad).to_string(), covs[2].clone()];
    let mut args = mean_args(&c2, &masks);
    args.extend(["--out", s(&out)]);
    let (code, _, err) = lacuna(&args);
    assert_eq!(code, 3, "{err}");
    assert!(err.contains("bad.npy"), "{err}");
    assert!(!out.exists());
}
