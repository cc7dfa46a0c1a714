//! Hostile and unlucky input through the command line: every refusal has its
//! exit code (2 usage, 3 input), names what is wrong, writes nothing and
//! never panics; no output destroys an input or writes through a link.
//! Source of every expectation: common practice, no source (GUIDE §4 exit codes).

mod common;

use common::{Dir, demo_recording, extract_demo, lacuna, s};
use lacuna::trials::npy::encode_f64;

fn demo(f: &str) -> String {
    format!("{}/demo-data/{f}", env!("CARGO_MANIFEST_DIR"))
}

fn no_panic(err: &str) {
    assert!(!err.contains("panicked"), "panic: {err}");
}

#[test]
fn outputs_never_replace_inputs() {
    let d = Dir::new("same");
    let covs = d.write("covs.npy", &std::fs::read(demo("covs.npy")).unwrap());
    let before = std::fs::read(&covs).unwrap();
    let mask = demo("mask.csv");
    for args in [
        vec![
            "mean",
            "--covs",
            s(&covs),
            "--mask",
            &mask,
            "--out",
            s(&covs),
        ],
        vec!["mean", "--covs", s(&covs), "--mask", &mask, "--out", &mask],
        vec![
            "mean",
            "--covs",
            s(&covs),
            "--mask",
            &mask,
            "--out",
            "x.npy",
            "--report",
            "x.npy",
        ],
    ] {
        let (code, _, err) = lacuna(&args);
        assert_eq!(code, 2, "{args:?}: {err}");
        assert!(err.contains("--out") || err.contains("--report"), "{err}");
    }
    assert_eq!(std::fs::read(&covs).unwrap(), before);
    // extract: the mask report may not be a recording; the output folder may
    // not hold the inputs.
    let rec = demo_recording("session-1.edf");
    let (code, _, err) = lacuna(&[
        "extract",
        &rec,
        "--offset",
        "0.5",
        "--length",
        "2",
        "--out",
        s(&d.path("t")),
        "--mask-report",
        &rec,
    ]);
    assert_eq!(code, 2, "{err}");
    let (code, _, err) = lacuna(&[
        "extract",
        &rec,
        "--offset",
        "0.5",
        "--length",
        "2",
        "--out",
        &format!("{}/demo-data/recording", env!("CARGO_MANIFEST_DIR")),
    ]);
    assert_eq!(code, 2, "{err}");
    assert!(std::path::Path::new(&rec).exists());
}

#[test]
fn links_devices_and_foreign_folders_are_not_written() {
    let d = Dir::new("links");
    let victim = d.write("victim.txt", b"keep");
    let link = d.path("m.npy");
    std::os::unix::fs::symlink(&victim, &link).unwrap();
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        &demo("covs.npy"),
        "--mask",
        &demo("mask.csv"),
        "--out",
        s(&link),
    ]);
    assert_eq!(code, 2, "{err}");
    assert_eq!(std::fs::read(&victim).unwrap(), b"keep");
    assert!(
        std::fs::symlink_metadata(&link)
            .unwrap()
            .file_type()
            .is_symlink()
    );
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        &demo("covs.npy"),
        "--mask",
        &demo("mask.csv"),
        "--out",
        "/dev/null",
    ]);
    assert_eq!(code, 2, "{err}");
    // An output folder that holds someone else's file is not replaced.
    let out = d.path("busy");
    std::fs::create_dir_all(&out).unwrap();
    std::fs::write(out.join("notes.txt"), b"mine").unwrap();
    let (code, _, err) = extract_demo(&out, &[]);
    assert_eq!(code, 2, "{err}");
    assert!(err.contains("notes.txt"), "{err}");
    assert_eq!(std::fs::read(out.join("notes.txt")).unwrap(), b"mine");
    // A previous run's folder is replaced whole.
    let t = d.path("trials");
    assert_eq!(extract_demo(&t, &[]).0, 0);
    assert_eq!(extract_demo(&t, &[]).0, 0);
    let left: Vec<_> = std::fs::read_dir(&d.0)
        .unwrap()
        .filter_map(|e| e.ok())
        .filter(|e| e.file_name().to_string_lossy().contains(".partial"))
        .collect();
    assert!(left.is_empty(), "orphaned temporary files");
}

#[test]
fn non_finite_and_out_of_range_options_are_usage_errors() {
    let d = Dir::new("ranges");
    let covs = demo("covs.npy");
    let mask = demo("mask.csv");
    let out = d.path("m.npy");
    for (opt, val) in [
        ("--tol", "nan"),
        ("--tol", "inf"),
        ("--tol", "0"),
        ("--loading", "1e308"),
        ("--shrinkage", "2"),
        ("--samples", "0"),
        ("--starts", "0"),
    ] {
        let (code, _, err) = lacuna(&[
            "mean",
            "--covs",
            &covs,
            "--mask",
            &mask,
            "--out",
            s(&out),
            opt,
            val,
        ]);
        assert_eq!(code, 2, "{opt} {val}: {err}");
        assert!(err.contains(opt), "{err}");
        no_panic(&err);
    }
    assert!(!out.exists());
    let t = d.path("t");
    for (opt, val) in [
        ("--offset", "nan"),
        ("--offset", "1e17"),
        ("--amplitude-z", "nan"),
        ("--broadband-z", "-inf"),
        ("--min-correlation", "2"),
        ("--rail-fraction", "0"),
        ("--order", "0"),
    ] {
        let (code, _, err) = extract_demo(&t, &[opt, val]);
        assert_eq!(code, 2, "{opt} {val}: {err}");
        no_panic(&err);
    }
    let (code, _, err) = extract_demo(&t, &["--length", "1e17"]);
    assert_eq!(code, 2, "{err}");
    for args in [
        vec![
            "--samples",
            "15",
            "--channels",
            "16",
            "--scenario",
            "uniform",
        ],
        vec!["--condition", "1e300", "--scenario", "uniform"],
        vec!["--channels", "100000"],
        vec!["--trials", "1e12"],
        vec!["--dropout", "nan"],
    ] {
        let mut a = vec!["synth", "--out", s(&t)];
        a.extend(args.iter());
        let (code, _, err) = lacuna(&a);
        assert_eq!(code, 2, "{args:?}: {err}");
        no_panic(&err);
    }
    assert!(!t.exists());
    // Far too many threads: capped and said, not thousands spawned.
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        &covs,
        "--mask",
        &mask,
        "--out",
        s(&out),
        "--threads",
        "100000",
    ]);
    assert_eq!(code, 0, "{err}");
    assert!(err.contains("capped"), "{err}");
}

#[test]
fn huge_event_onsets_are_outside_the_recording() {
    let d = Dir::new("events");
    let ev = d.write("ev.csv", b"onset,duration,label\n1e17,2,a\n1,2,b\n");
    let rec = demo_recording("session-1.edf");
    let (code, _, err) = lacuna(&[
        "extract",
        &rec,
        "--events",
        s(&ev),
        "--length",
        "2",
        "--out",
        s(&d.path("t")),
    ]);
    assert_eq!(code, 3, "{err}");
    assert!(err.contains("outside the recording"), "{err}");
    no_panic(&err);
}

// Twenty weights of 1e308 overflow a plain sum; they are equal weights.
#[test]
fn huge_weights_are_normalised_safely() {
    let d = Dir::new("weights");
    let data: Vec<f64> = vec![1e308; 240];
    let w = d.write("w.npy", &encode_f64(&[240], &data));
    let (a, b) = (d.path("a.npy"), d.path("b.npy"));
    let (covs, mask) = (demo("covs.npy"), demo("mask.csv"));
    for (out, extra) in [(&a, vec!["--weights", s(&w)]), (&b, vec![])] {
        let mut args = vec!["mean", "--covs", &covs, "--mask", &mask, "--out", s(out)];
        args.extend(extra);
        let (code, _, err) = lacuna(&args);
        assert_eq!(code, 0, "{err}");
    }
    assert_eq!(std::fs::read(&a).unwrap(), std::fs::read(&b).unwrap());
}

#[test]
fn malformed_files_are_refused_not_misread() {
    let d = Dir::new("files");
    // NPY with the shape key twice, and NPY with bytes after the array.
    let good = encode_f64(&[1, 2, 2], &[1.0, 0.0, 0.0, 1.0]);
    let text = String::from_utf8_lossy(&good[10..]).to_string();
    let twice = text.replacen(
        "'shape': (1, 2, 2), ",
        "'shape': (1, 2, 2), 'shape': (1, 2, 2),",
        1,
    );
    assert_ne!(twice, text);
    let mut dup = good[..8].to_vec();
    let hdr = twice.trim_end_matches(|c: char| c != '}').to_string();
    let mut dict = hdr.clone();
    let total = 10 + dict.len() + 1;
    dict.push_str(&" ".repeat((64 - total % 64) % 64));
    dict.push('\n');
    dup.extend_from_slice(&(dict.len() as u16).to_le_bytes());
    dup.extend_from_slice(dict.as_bytes());
    for v in [1.0f64, 0.0, 0.0, 1.0] {
        dup.extend_from_slice(&v.to_le_bytes());
    }
    let mut trailing = good.clone();
    trailing.extend_from_slice(&[0u8; 8]);
    for (name, bytes, needle) in [
        ("dup.npy", dup, "'shape' 2 times"),
        ("trailing.npy", trailing, "bytes follow the array"),
    ] {
        let f = d.write(name, &bytes);
        let (code, _, err) = lacuna(&["mean", "--covs", s(&f), "--out", s(&d.path("m.npy"))]);
        assert_eq!(code, 3, "{name}: {err}");
        assert!(err.contains(needle), "{name}: {err}");
    }
    // A pipe or device is not read (it would block or grow without bound).
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        &demo("covs.npy"),
        "--mask",
        "/dev/zero",
        "--out",
        s(&d.path("m.npy")),
    ]);
    assert_eq!(code, 3, "{err}");
    // Repeated channel names in a mask header are refused, named.
    let mask = std::fs::read_to_string(demo("mask.csv")).unwrap();
    let first = mask.lines().next().unwrap().to_string();
    let names: Vec<&str> = first.split(',').collect();
    let dup_header = first.replacen(names[1], names[0], 1);
    let m = d.write("dup.csv", mask.replacen(&first, &dup_header, 1).as_bytes());
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        &demo("covs.npy"),
        "--mask",
        s(&m),
        "--out",
        s(&d.path("m.npy")),
    ]);
    assert_eq!(code, 3, "{err}");
    assert!(err.contains("repeated"), "{err}");
    // A compare.json whose channel list is shorter than its matrices.
    let cmp = d.path("cmp");
    std::fs::create_dir_all(&cmp).unwrap();
    let doc = serde_json::json!({"compare_version": "1", "channels": ["a"], "trials": 2,
        "coobservation": [[2, 1], [1, 2]], "unconstrained_pairs": [], "schemes": []});
    std::fs::write(cmp.join("compare.json"), doc.to_string()).unwrap();
    let (code, _, err) = lacuna(&[
        "report",
        "--compare",
        s(&cmp),
        "--out",
        s(&d.path("r.html")),
    ]);
    assert_eq!(code, 3, "{err}");
    no_panic(&err);
    assert!(!d.path("r.html").exists());
}

// Names with commas, quotes, line breaks and non-ASCII survive the CSV round
// trip (one writer, one reader).
#[test]
fn names_are_quoted_in_csv_outputs() {
    use lacuna::trials::io::encode_mask_csv;
    let names: Vec<String> = ["Fp1,Ref", "a\"b", "line\nbreak", "Ωz"]
        .iter()
        .map(|s| s.to_string())
        .collect();
    let row = lacuna::report::tables::table(&names, Vec::<Vec<String>>::new());
    let mut rdr = csv::ReaderBuilder::new()
        .has_headers(false)
        .from_reader(row.as_slice());
    let back: Vec<String> = rdr
        .records()
        .next()
        .unwrap()
        .unwrap()
        .iter()
        .map(str::to_string)
        .collect();
    assert_eq!(back, names);
    let set =
        lacuna::trials::TrialSet::from_full(names.clone(), vec![lacuna::Mat::identity(4, 4)], None)
            .unwrap();
    let d = Dir::new("quote");
    let m = d.write("mask.csv", &encode_mask_csv(&set));
    let covs = d.write("c.npy", &lacuna::trials::io::encode_stack_with_nan(&set));
    let out = d.path("m.csv");
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        s(&covs),
        "--mask",
        s(&m),
        "--scheme",
        "arithmetic",
        "--out",
        s(&out),
    ]);
    assert_eq!(code, 0, "{err}");
    let mut rdr = csv::Reader::from_path(&out).unwrap();
    let header: Vec<String> = rdr.headers().unwrap().iter().map(str::to_string).collect();
    assert_eq!(header, names);
}

// A CSV mask for extract is matched by channel name: with its columns
// reversed, the same electrode is masked.
#[test]
fn extract_mask_columns_are_matched_by_name() {
    let d = Dir::new("maskname");
    let rec = demo_recording("session-1.edf");
    let first = d.path("first");
    let base = ["--offset", "0.5", "--length", "2", "--band", "8-30"];
    let mut args = vec!["extract", rec.as_str()];
    args.extend(base);
    args.extend(["--out", s(&first)]);
    assert_eq!(lacuna(&args).0, 0);
    let written = std::fs::read_to_string(first.join("mask.csv")).unwrap();
    let header: Vec<String> = written
        .lines()
        .next()
        .unwrap()
        .split(',')
        .map(str::to_string)
        .collect();
    let n = written.lines().count() - 1;
    let p = header.len();
    // Mask only the first channel, columns written in reverse order.
    let mut rev = header.clone();
    rev.reverse();
    let mut text = rev.join(",") + "\n";
    for _ in 0..n {
        let row: Vec<&str> = (0..p).map(|k| if k == p - 1 { "0" } else { "1" }).collect();
        text.push_str(&(row.join(",") + "\n"));
    }
    let m = d.write("mask.csv", text.as_bytes());
    let out = d.path("second");
    let mut args = vec!["extract", rec.as_str()];
    args.extend(base);
    args.extend(["--mask", s(&m), "--out", s(&out)]);
    let (code, _, err) = lacuna(&args);
    assert_eq!(code, 0, "{err}");
    let got = std::fs::read_to_string(out.join("mask.csv")).unwrap();
    for line in got.lines().skip(1) {
        let cells: Vec<&str> = line.split(',').collect();
        assert_eq!(
            cells[0], "0",
            "the first channel ({}) is the one masked",
            header[0]
        );
        assert!(cells[1..].iter().all(|&c| c == "1"));
    }
}

fn edf(name: &str) -> String {
    format!(
        "{}/tests/reference/fixtures/edf/{name}",
        env!("CARGO_MANIFEST_DIR")
    )
}

// Broken copies of a pyedflib-written EDF+ (tests/reference/make_hostile_edf.py,
// pyedflib 0.1.38): each defect is refused with the field or byte named, the valid
// original reads, trailing bytes only warn, and --skip-annotations reads past a bad
// annotation signal when events come from elsewhere.
#[test]
fn malformed_edf_files_are_refused_with_the_place_named() {
    let d = Dir::new("edf");
    let run = |file: &str, extra: &[&str]| {
        let out = d.path(&format!("t-{}", file.replace('.', "-")));
        let path = edf(file);
        let mut args = vec![
            "extract",
            path.as_str(),
            "--window",
            "1",
            "--no-detect",
            "--out",
            s(&out),
        ];
        args.extend_from_slice(extra);
        let (code, _, err) = lacuna(&args);
        (code, err, out)
    };
    let (code, err, _) = run("valid.edf", &[]);
    assert_eq!(code, 0, "{err}");
    for (file, needle) in [
        ("record_size_mismatch.edf", "samples-per-record"),
        ("unterminated_annotation.edf", "not terminated"),
        ("garbage_annotation.edf", "not zero padding"),
        ("unsigned_onset.edf", "not a signed number"),
        ("huge_onset.edf", "out of range"),
    ] {
        let (code, err, out) = run(file, &[]);
        assert_eq!(code, 3, "{file}: {err}");
        assert!(err.contains(needle), "{file}: {err}");
        no_panic(&err);
        assert!(!out.exists(), "{file}: output written");
    }
    let (code, err, _) = run("trailing_bytes.edf", &[]);
    assert_eq!(code, 0, "{err}");
    assert!(err.contains("7 bytes after the last"), "{err}");
    let (code, err, _) = run("garbage_annotation.edf", &["--skip-annotations"]);
    assert_eq!(code, 0, "{err}");
}

// A real file whose first data record starts 0.3945312 s after the header's start
// time (pyEDFlib 0.1.42's test_subsecond.edf, fetched by make_hostile_edf.py):
// annotation onsets must count from the first sample, as pyedflib 0.1.38 reports
// them (subsecond.json), so the epochs are not cut 50 samples late.
#[test]
fn subsecond_start_is_honoured() {
    let info = common::read_json(edf("subsecond.json"));
    let mut f = lacuna::ingest::edf::EdfFile::open(std::path::Path::new(&edf(
        "pyedflib_test_subsecond.edf",
    )))
    .unwrap();
    let scan = f.scan_annotations().unwrap().unwrap();
    assert!((scan.first_record_onset - 0.3945312).abs() < 1e-9);
    let want = info["annotations"].as_array().unwrap();
    assert_eq!(scan.events.len(), want.len());
    for (e, w) in scan.events.iter().zip(want) {
        assert_eq!(e.label, w["label"].as_str().unwrap());
        let o = w["onset"].as_f64().unwrap();
        assert!((e.onset - o).abs() < 1e-6, "{} vs pyedflib {o}", e.onset);
    }
}

// Under `ulimit -v` a run that cannot fit is refused with its estimate before it
// allocates (an allocation failure would abort the process). The stack is a
// sparse 781 MiB file: only its header is read before the refusal.
#[test]
fn runs_that_cannot_fit_are_refused_with_the_estimate() {
    let d = Dir::new("mem");
    let (n, p) = (100_000usize, 32usize);
    let header = lacuna::trials::npy::encode_f64(&[n, p, p], &[]);
    let path = d.write("huge.npy", &header);
    let f = std::fs::OpenOptions::new().write(true).open(&path).unwrap();
    f.set_len((header.len() + n * p * p * 8) as u64).unwrap();
    let out = d.path("m.npy");
    let script = format!(
        "ulimit -v 1000000 && exec {} mean --covs {} --out {}",
        env!("CARGO_BIN_EXE_lacuna"),
        s(&path),
        s(&out)
    );
    let o = std::process::Command::new("sh")
        .arg("-c")
        .arg(&script)
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&o.stderr);
    assert_eq!(o.status.code(), Some(3), "{err}");
    assert!(
        err.contains("needs about") && err.contains("ulimit -v"),
        "{err}"
    );
    assert!(!out.exists());
}

// A temporary file left by a killed writer (its PID no longer runs) is removed
// by the next write to the same target; one of a running process is left alone.
#[test]
fn orphaned_temporary_files_are_swept() {
    let d = Dir::new("orphans");
    let out = d.path("m.npy");
    // PID 4194304 is above Linux's maximum (2^22), so it never runs.
    let orphan = d.write(".m.npy.4194304.0.partial", b"half");
    let alive = d.write(&format!(".m.npy.{}.0.partial", std::process::id()), b"mine");
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        &demo("covs.npy"),
        "--mask",
        &demo("mask.csv"),
        "--out",
        s(&out),
    ]);
    assert_eq!(code, 0, "{err}");
    assert!(!orphan.exists(), "the orphan is removed");
    assert!(alive.exists(), "a live writer's file is kept");
}

// A worker pool that cannot start (process limit) is an error with advice,
// exit 1, never a panic. Run as an unprivileged user where the limit applies.
#[test]
fn thread_pool_failure_is_reported() {
    let bin = env!("CARGO_BIN_EXE_lacuna");
    let inner = format!(
        "ulimit -u 1; exec {bin} mean --covs {} --mask {} --out {} --threads 16",
        demo("covs.npy"),
        demo("mask.csv"),
        std::env::temp_dir()
            .join("lacuna-never-written.npy")
            .display()
    );
    let root = std::process::Command::new("id")
        .arg("-u")
        .output()
        .map(|o| String::from_utf8_lossy(&o.stdout).trim() == "0")
        .unwrap_or(false);
    let mut cmd = if root {
        let mut c = std::process::Command::new("setpriv");
        c.args([
            "--reuid=65534",
            "--regid=65534",
            "--clear-groups",
            "bash",
            "-c",
            &inner,
        ]);
        c
    } else {
        let mut c = std::process::Command::new("bash");
        c.args(["-c", &inner]);
        c
    };
    let Ok(o) = cmd.output() else {
        eprintln!("SKIPPED: setpriv or bash not available");
        return;
    };
    let err = String::from_utf8_lossy(&o.stderr);
    if matches!(o.status.code(), Some(126 | 127)) || err.contains("Permission denied") {
        // The unprivileged user cannot reach the binary in this checkout.
        eprintln!("SKIPPED: {err}");
        return;
    }
    no_panic(&err);
    assert_eq!(o.status.code(), Some(1), "{err}");
    assert!(
        err.contains("cannot start") && err.contains("--threads 1"),
        "{err}"
    );
}

// Messages name the right file and say what to do (common practice, no source).
#[test]
fn messages_name_the_culprit() {
    let d = Dir::new("messages");
    let mut w = vec![1.0f64; 240];
    w[3] = f64::NAN;
    let wf = d.write("w.npy", &encode_f64(&[240], &w));
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        &demo("covs.npy"),
        "--mask",
        &demo("mask.csv"),
        "--weights",
        s(&wf),
        "--out",
        s(&d.path("m.npy")),
    ]);
    assert_eq!(code, 3);
    assert!(err.contains("w.npy") && err.contains("trial 3"), "{err}");
    assert!(!err.contains("covs.npy"), "{err}");
    // A finite but huge value is not blamed as NaN or rank.
    let mut stack = lacuna::trials::npy::read_npy(std::path::Path::new(&demo("covs.npy"))).unwrap();
    if let lacuna::trials::npy::NpyData::Float(v) = &mut stack.data {
        v[2 * 24 * 24] = 1e300;
    }
    let data = match stack.data {
        lacuna::trials::npy::NpyData::Float(v) => v,
        _ => unreachable!(),
    };
    let big = d.write("big.npy", &encode_f64(&stack.shape, &data));
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        s(&big),
        "--mask",
        &demo("mask.csv"),
        "--out",
        s(&d.path("m.npy")),
    ]);
    assert_eq!(code, 3);
    assert!(err.contains("1e300") && err.contains("rescale"), "{err}");
    // An extraction that masks everything says which rules and what to do.
    let (code, _, err) = extract_demo(
        &d.path("t"),
        &[
            "--amplitude-z",
            "0.5",
            "--broadband-z",
            "0.5",
            "--min-correlation",
            "1",
        ],
    );
    assert_eq!(code, 3);
    assert!(
        err.contains("--no-detect") && err.contains("amplitude-outlier"),
        "{err}"
    );
}

// 100 000 events on a 96-s recording would read it hundreds of times over: refused
// at once, naming the events, instead of minutes and gigabytes.
#[test]
fn too_many_events_are_refused_quickly() {
    let d = Dir::new("manyevents");
    let mut text = String::from("onset,duration,label\n");
    for k in 0..100_000 {
        text.push_str(&format!("{},2,a\n", (k % 90) as f64 + 0.5));
    }
    let ev = d.write("ev.csv", text.as_bytes());
    let start = std::time::Instant::now();
    let (code, _, err) = lacuna(&[
        "extract",
        &demo_recording("session-1.edf"),
        "--events",
        s(&ev),
        "--length",
        "2",
        "--out",
        s(&d.path("t")),
    ]);
    assert_eq!(code, 3, "{err}");
    assert!(err.contains("times over"), "{err}");
    assert!(start.elapsed().as_secs() < 20);
}

// A label with a comma stays one label through compare --labels.
#[test]
fn quoted_labels_are_one_label() {
    let d = Dir::new("labels");
    let (covs, mask) = common::write_masked_set(&d, 30, 5, 9);
    let mut text = String::from("label,session\n");
    for k in 0..30 {
        text.push_str(if k % 2 == 0 {
            "\"left, cued\",s1\n"
        } else {
            "right,s1\n"
        });
    }
    let labels = d.write("labels.csv", text.as_bytes());
    let out = d.path("cmp");
    let (code, _, err) = lacuna(&[
        "compare",
        "--covs",
        s(&covs),
        "--mask",
        s(&mask),
        "--labels",
        s(&labels),
        "--schemes",
        "airm-observed",
        "--no-leave-out",
        "--repeats",
        "2",
        "--out",
        s(&out),
        "--quiet",
    ]);
    assert_eq!(code, 0, "{err}");
    let c = common::read_json(out.join("compare.json"));
    let classes: Vec<String> = serde_json::from_value(c["decoding"]["classes"].clone()).unwrap();
    assert_eq!(classes.len(), 2, "{classes:?}");
    assert!(classes.contains(&"left, cued".to_string()));
}

// Every JSON output records its provenance; the SHA-256 of each input agrees
// with coreutils' sha256sum (a general-purpose tool) on the same file.
#[test]
fn outputs_record_provenance() {
    let d = Dir::new("prov");
    let rep = d.path("r.json");
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        &demo("covs.npy"),
        "--mask",
        &demo("mask.csv"),
        "--out",
        s(&d.path("m.npy")),
        "--report",
        s(&rep),
    ]);
    assert_eq!(code, 0, "{err}");
    let r = common::read_json(&rep);
    let inputs = r["provenance"]["inputs"].as_array().unwrap();
    assert_eq!(inputs.len(), 2);
    for i in inputs {
        let path = i["path"].as_str().unwrap();
        let Ok(o) = std::process::Command::new("sha256sum").arg(path).output() else {
            eprintln!("SKIPPED: no sha256sum");
            return;
        };
        let want = String::from_utf8_lossy(&o.stdout)
            .split_whitespace()
            .next()
            .unwrap_or("")
            .to_string();
        assert_eq!(i["sha256"].as_str().unwrap(), want, "{path}");
        assert_eq!(
            i["bytes"].as_u64().unwrap(),
            std::fs::metadata(path).unwrap().len()
        );
    }
    assert!(r["provenance"]["command_line"].as_array().unwrap().len() > 3);
    assert!(
        r["provenance"]["created_utc"]
            .as_str()
            .unwrap()
            .ends_with('Z')
    );
    let t = d.path("t");
    assert_eq!(extract_demo(&t, &[]).0, 0);
    let e = common::read_json(t.join("epochs.json"));
    assert_eq!(e["provenance"]["inputs"].as_array().unwrap().len(), 3);
}

// Repeated channel names are refused wherever they come from: --channels of
// extract and rows of --positions (the mask header is checked above).
#[test]
fn repeated_names_are_refused_everywhere() {
    let d = Dir::new("dupnames");
    let t = d.path("t");
    let (code, _, err) = extract_demo(&t, &["--channels", "Fp1,Fp1,Cz"]);
    assert_eq!(code, 3, "{err}");
    assert!(err.contains("repeated"), "{err}");
    assert!(!t.exists());
    let pos = d.write("pos.csv", b"channel,x,y,z\nFp1,1,0,0\nFp1,0,1,0\n");
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        &demo("covs.npy"),
        "--mask",
        &demo("mask.csv"),
        "--scheme",
        "spherical-spline",
        "--positions",
        s(&pos),
        "--out",
        s(&d.path("m.npy")),
    ]);
    assert_eq!(code, 3, "{err}");
    assert!(err.contains("listed twice"), "{err}");
}

// --channels names an NPY stack's channels; a wrong count, a repeat, or a
// disagreement with a CSV mask's header is refused (common practice, no source).
#[test]
fn channel_names_for_npy_stacks() {
    let d = Dir::new("chnames");
    let (covs, mask) = common::write_masked_set(&d, 30, 4, 10);
    let rep = d.path("r.json");
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        s(&covs),
        "--mask",
        s(&mask),
        "--channels",
        "Fz,Cz,Pz,Oz",
        "--out",
        s(&d.path("m.npy")),
        "--report",
        s(&rep),
    ]);
    assert_eq!(code, 0, "{err}");
    let r = common::read_json(&rep);
    assert_eq!(r["channels"], serde_json::json!(["Fz", "Cz", "Pz", "Oz"]));
    let names = d.write("names.txt", b"Fz\nCz\nPz\nOz\n");
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        s(&covs),
        "--mask",
        s(&mask),
        "--channels",
        s(&names),
        "--out",
        s(&d.path("m2.npy")),
    ]);
    assert_eq!(code, 0, "{err}");
    for (names, want) in [("Fz,Cz,Pz", 3), ("Fz,Cz,Cz,Oz", 3)] {
        let (code, _, err) = lacuna(&[
            "mean",
            "--covs",
            s(&covs),
            "--mask",
            s(&mask),
            "--channels",
            names,
            "--out",
            s(&d.path("m3.npy")),
        ]);
        assert_eq!(code, want, "{names}: {err}");
    }
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        &demo("covs.npy"),
        "--mask",
        &demo("mask.csv"),
        "--channels",
        &(0..24)
            .map(|c| format!("e{c}"))
            .collect::<Vec<_>>()
            .join(","),
        "--out",
        s(&d.path("m4.npy")),
    ]);
    assert_eq!(code, 2, "{err}");
    assert!(err.contains("disagrees"), "{err}");
}

// Units carried through: an EDF in uV gives µV² in epochs.json, compare.json
// (taken from --epochs) and on the page; a CSV-derived stack with --unit mV gives
// mV² in the mean report (common practice, no source).
#[test]
fn units_are_carried_through() {
    let d = Dir::new("units");
    let t = d.path("t");
    assert_eq!(extract_demo(&t, &[]).0, 0);
    let e = common::read_json(t.join("epochs.json"));
    assert_eq!(e["covariance_unit"], "µV²");
    let (cmp, html) = (d.path("c"), d.path("r.html"));
    let (code, _, err) = lacuna(&[
        "compare",
        "--covs",
        s(&t.join("covs.npy")),
        "--mask",
        s(&t.join("mask.csv")),
        "--epochs",
        s(&t.join("epochs.json")),
        "--schemes",
        "airm-observed",
        "--no-leave-out",
        "--repeats",
        "2",
        "--out",
        s(&cmp),
        "--html",
        s(&html),
        "--quiet",
    ]);
    assert_eq!(code, 0, "{err}");
    let c = common::read_json(cmp.join("compare.json"));
    assert_eq!(c["covariance_unit"], "µV²");
    assert!(
        std::fs::read_to_string(&html)
            .unwrap()
            .contains("covariance (µV²)")
    );
    let rep = d.path("r.json");
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        s(&t.join("covs.npy")),
        "--mask",
        s(&t.join("mask.csv")),
        "--unit",
        "mV",
        "--out",
        s(&d.path("m.npy")),
        "--report",
        s(&rep),
    ]);
    assert_eq!(code, 0, "{err}");
    let r = common::read_json(&rep);
    assert_eq!(r["covariance_unit"], "mV²");
}
