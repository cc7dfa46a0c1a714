//! One mean per condition or session (`lacuna mean --by …`,
//! `jobs::GroupedMeanJob`): the grouping, the grand mean of session means,
//! sessions with a channel missing throughout, hostile group names, and the
//! command line's refusals.

mod common;

use common::{Dir, demo, lacuna, lacuna_on_demo, read_json, s, spd};
use lacuna::jobs::{GrandWeighting, GroupBy, GroupedMeanJob, MeanJob};
use lacuna::simulate::rng::Rng;
use lacuna::simulate::stacks::{masked_set, random_dropout, sample_covariance};
use lacuna::spd::functions::{invsqrtm_spd, powm_spd, sqrtm_spd};
use lacuna::spd::{Mat, airm_distance, symmetrize};
use lacuna::trials::TrialSet;

/// Two sessions × two labels, `n` trials each cell, masked.
fn sessions_set(n: usize, p: usize, drop_in_session_2: Option<usize>) -> TrialSet {
    let mut rng = Rng::new(3);
    let mut full = Vec::new();
    let (mut labels, mut sessions) = (Vec::new(), Vec::new());
    let mut observed = Vec::new();
    for (si, sess) in ["s1", "s2"].iter().enumerate() {
        for (li, lab) in ["rest", "task"].iter().enumerate() {
            let sigma = spd(p, 10.0, 10 + (2 * si + li) as u64);
            let dropout = random_dropout(n, p, 0.3, 2, &mut rng);
            for o in dropout {
                full.push(sample_covariance(&sigma, 3 * p, &mut rng));
                let o: Vec<usize> = match drop_in_session_2 {
                    Some(c) if si == 1 => o.into_iter().filter(|&k| k != c).collect(),
                    _ => o,
                };
                observed.push(o);
                labels.push(lab.to_string());
                sessions.push(sess.to_string());
            }
        }
    }
    let mut set = masked_set(&full, observed);
    set.labels = Some(labels);
    set.sessions = Some(sessions);
    set
}

fn job(by: GroupBy) -> GroupedMeanJob {
    GroupedMeanJob {
        mean: MeanJob::default(),
        by,
        grand: GrandWeighting::Trials,
    }
}

// Common practice, no source: a group's mean is the mean job run on exactly
// that group's trials — bit for bit, whatever else is in the set.
#[test]
fn each_group_mean_is_the_mean_of_its_trials() {
    let set = sessions_set(30, 6, None);
    let out = job(GroupBy::SessionLabel).run(&set, None).unwrap();
    assert_eq!(out.groups.len(), 4);
    let names: Vec<&str> = out.groups.iter().map(|g| g.name.as_str()).collect();
    assert_eq!(names, ["s1/rest", "s1/task", "s2/rest", "s2/task"]);
    for g in &out.groups {
        let idx: Vec<usize> = (0..set.len())
            .filter(|&i| {
                Some(&set.labels.as_ref().unwrap()[i]) == g.label.as_ref()
                    && Some(&set.sessions.as_ref().unwrap()[i]) == g.session.as_ref()
            })
            .collect();
        assert_eq!(idx, g.trials);
        let direct = MeanJob::default()
            .run(set.select_trials(&idx).unwrap(), None)
            .unwrap();
        assert_eq!(direct.result.mean, g.mean, "group {}", g.name);
        assert!(g.run.converged());
    }
    // Distances: symmetric, zero on the diagonal, and equal to a direct
    // affine-invariant distance.
    for i in 0..4 {
        assert_eq!(out.distances[i][i], Some(0.0));
        for j in 0..4 {
            assert_eq!(out.distances[i][j], out.distances[j][i]);
        }
    }
    let d01 = airm_distance(&out.groups[0].mean, &out.groups[1].mean);
    assert!((out.distances[0][1].unwrap() - d01).abs() < 1e-12);
}

/// A #_t B = A^{1/2} (A^{-1/2} B A^{-1/2})^t A^{1/2}.
fn geodesic(a: &Mat, b: &Mat, t: f64) -> Mat {
    let ah = sqrtm_spd(a);
    let aih = invsqrtm_spd(a);
    symmetrize(&(&ah * powm_spd(&symmetrize(&(&aih * b * &aih)), t) * &ah))
}

// Bhatia 2007 (Positive Definite Matrices, ch. 6): the weighted Riemannian
// mean of two SPD matrices with weights 1 − t and t is the point A #_t B of
// the geodesic between them. The grand mean of two session means must be it,
// with t = n₂/(n₁+n₂) weighted by trials and t = ½ weighted equally.
#[test]
fn grand_mean_of_two_sessions_is_the_weighted_geodesic_point() {
    let mut set = sessions_set(20, 5, None);
    // Uneven sessions: drop every fourth trial of s1 (30 of 40 left), keep all 40 of s2.
    let keep: Vec<usize> = (0..set.len()).filter(|&i| i % 4 != 3 || i >= 40).collect();
    set = set.select_trials(&keep).unwrap();
    for (weighting, expect_t) in [
        (GrandWeighting::Equal, None),
        (GrandWeighting::Trials, Some(())),
    ] {
        let j = GroupedMeanJob {
            grand: weighting,
            ..job(GroupBy::Session)
        };
        let out = j.run(&set, None).unwrap();
        assert_eq!(out.groups.len(), 2);
        let (n1, n2) = (out.groups[0].trials.len(), out.groups[1].trials.len());
        assert_ne!(n1, n2);
        let t = match expect_t {
            None => 0.5,
            Some(()) => n2 as f64 / (n1 + n2) as f64,
        };
        let g = &out.grand[0];
        assert!(g.converged);
        let expected = geodesic(&out.groups[0].mean, &out.groups[1].mean, t);
        let d = airm_distance(g.mean.as_ref().unwrap(), &expected);
        assert!(d < 1e-9, "{weighting:?}: distance to A #_t B = {d}");
    }
}

// A channel no trial of session 2 observed: without --drop-unobserved the
// group is refused, naming the group and the channel; with it, session 2's
// means leave the channel out (NaN) and the grand mean still estimates it
// from session 1 alone.
#[test]
fn a_channel_missing_from_a_whole_session() {
    let set = sessions_set(25, 5, Some(2));
    let err = job(GroupBy::Session).run(&set, None).err().unwrap();
    let msg = err.to_string();
    assert!(msg.contains("group 's2'") && msg.contains("ch2"), "{msg}");
    let mut j = job(GroupBy::Session);
    j.mean.drop_unobserved = true;
    let out = j.run(&set, None).unwrap();
    assert!(out.groups[1].mean[(2, 2)].is_nan());
    assert!(out.groups[0].mean[(2, 2)].is_finite());
    let grand = out.grand[0].mean.as_ref().unwrap();
    assert!(grand.iter().all(|v| v.is_finite()));
    // Distances use the channels both groups estimated.
    let shared = [0usize, 1, 3, 4];
    let a = lacuna::spd::sub_block(&out.groups[0].mean, &shared);
    let b = lacuna::spd::sub_block(&out.groups[1].mean, &shared);
    assert!((out.distances[0][1].unwrap() - airm_distance(&a, &b)).abs() < 1e-12);
}

#[test]
fn labels_and_sessions_are_required_and_complete() {
    let mut set = sessions_set(10, 4, None);
    let sessions = set.sessions.take();
    let e = job(GroupBy::Session).run(&set, None).err().unwrap();
    assert!(e.to_string().contains("labels"), "{e}");
    set.sessions = sessions;
    set.labels.as_mut().unwrap()[7] = " ".into();
    let e = job(GroupBy::Label).run(&set, None).err().unwrap();
    assert!(e.to_string().contains("trial 7"), "{e}");
}

// File names come from labels the user wrote: path separators, dots,
// empty names, names differing only in case, and our own file names must
// all give safe, distinct stems.
#[test]
fn hostile_group_names_give_safe_distinct_files() {
    let mut set = sessions_set(15, 3, None);
    let n = set.len();
    let names = ["../evil", "a/b", "A/B", ".hidden", "groups", "é"];
    set.labels = Some((0..n).map(|i| names[i % names.len()].to_string()).collect());
    let mut j = job(GroupBy::Label);
    j.mean.drop_unobserved = true;
    let out = j.run(&set, None).unwrap();
    let (stems, _) = out.file_stems();
    assert_eq!(stems.len(), names.len());
    for s in &stems {
        assert!(
            s.chars()
                .all(|c| c.is_ascii_alphanumeric() || "-_.".contains(c)),
            "{s}"
        );
        assert!(!s.starts_with('.'), "{s}");
    }
    let mut lower: Vec<String> = stems.iter().map(|s| s.to_ascii_lowercase()).collect();
    lower.sort();
    lower.dedup();
    assert_eq!(lower.len(), stems.len(), "{stems:?}");
}

#[test]
fn per_label_means_of_the_demo_from_the_command_line() {
    let d = Dir::new("grouped-demo");
    let out = d.path("by-label");
    let (code, stdout, stderr) = lacuna_on_demo("mean", &["--by", "label", "--out", s(&out)]);
    assert_eq!(code, 0, "{stdout}{stderr}");
    assert!(
        stdout.contains("rest") && stdout.contains("task"),
        "{stdout}"
    );
    let report = read_json(out.join("groups.json"));
    assert_eq!(report["groups_version"], "1");
    assert_eq!(report["by"], "label");
    let groups = report["groups"].as_array().unwrap();
    assert_eq!(groups.len(), 2);
    for g in groups {
        for f in g["files"].as_array().unwrap() {
            assert!(out.join(f.as_str().unwrap()).is_file(), "{f}");
        }
        assert_eq!(g["report"]["converged"], true);
    }
    assert!(out.join("distances.csv").is_file());
    // The per-label mean is the pooled mean job on that label's trials:
    // compare with `lacuna mean --weights` (1 for the label, 0 otherwise).
    let labels = std::fs::read_to_string(demo("labels.csv")).unwrap();
    let w: Vec<&str> = labels
        .lines()
        .skip(1)
        .map(|l| if l.starts_with("rest") { "1" } else { "0" })
        .collect();
    let wpath = d.write("w.csv", format!("weight\n{}\n", w.join("\n")).as_bytes());
    let single = d.path("rest.npy");
    let (code, _, e) = lacuna(&[
        "mean",
        "--covs",
        &demo("covs.npy"),
        "--mask",
        &demo("mask.csv"),
        "--weights",
        s(&wpath),
        "--out",
        s(&single),
    ]);
    assert_eq!(code, 0, "{e}");
    let a = lacuna::trials::io::read_matrix(&single).unwrap();
    let b = lacuna::trials::io::read_matrix(&out.join("mean-rest.npy")).unwrap();
    assert!(airm_distance(&a, &b) < 1e-9);
}

#[test]
fn grouped_mean_refusals_name_the_flag_and_write_nothing() {
    let d = Dir::new("grouped-refusals");
    let out = d.path("g");
    let base = [
        "mean",
        "--covs",
        &demo("covs.npy"),
        "--mask",
        &demo("mask.csv"),
    ]
    .map(String::from);
    let run = |extra: &[&str]| {
        let mut args: Vec<&str> = base.iter().map(String::as_str).collect();
        args.extend_from_slice(extra);
        lacuna(&args)
    };
    let labels = demo("labels.csv");
    for (extra, code, needle) in [
        (vec!["--by", "label", "--out", s(&out)], 2, "--labels"),
        (
            vec!["--by", "condition", "--labels", &labels, "--out", s(&out)],
            2,
            "session+label",
        ),
        (
            vec![
                "--by",
                "session",
                "--grand",
                "median",
                "--labels",
                &labels,
                "--out",
                s(&out),
            ],
            2,
            "equal",
        ),
        (
            vec!["--by", "label", "--labels", &labels, "--out", "m.npy"],
            2,
            "folder",
        ),
        (
            vec![
                "--by",
                "label",
                "--labels",
                &labels,
                "--out",
                s(&out),
                "--report",
                "r.json",
            ],
            2,
            "groups.json",
        ),
        (vec!["--labels", &labels, "--out", "m.npy"], 2, "--by"),
    ] {
        let (c, o, e) = run(&extra);
        assert_eq!(c, code, "{extra:?}: {o}{e}");
        assert!(e.contains(needle), "{extra:?}: {e}");
        assert!(!out.exists());
    }
    // A labels file with a row too few: exit 3, naming the file.
    let text = std::fs::read_to_string(&labels).unwrap();
    let short: Vec<&str> = text.lines().collect();
    let bad = d.write("short.csv", short[..short.len() - 1].join("\n").as_bytes());
    let (c, _, e) = run(&["--by", "label", "--labels", s(&bad), "--out", s(&out)]);
    assert_eq!(c, 3, "{e}");
    assert!(e.contains("short.csv"), "{e}");
    assert!(!out.exists());
    // The output folder may not be an input.
    let (c, _, e) = run(&["--by", "label", "--labels", &labels, "--out", &demo("")]);
    assert_ne!(c, 0, "{e}");
}
