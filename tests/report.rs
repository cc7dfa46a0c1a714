//! The HTML report: rendered from the demo, checked as a document, and
//! rendered by a real browser when one is installed (`.ci/run` installs
//! Debian's chromium). Checks are common practice, no source.

mod common;

use common::lacuna;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::OnceLock;

fn demo(f: &str) -> String {
    format!("{}/demo-data/recording/{f}", env!("CARGO_MANIFEST_DIR"))
}

/// Extract + compare + report on the demo once per test binary; returns
/// the report's path (its folder also holds trials/ and cmp/) and text.
fn demo_report() -> &'static (PathBuf, String) {
    static REPORT: OnceLock<(PathBuf, String)> = OnceLock::new();
    REPORT.get_or_init(|| {
        let dir = std::env::temp_dir().join(format!("lacuna-report-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&dir);
        std::fs::create_dir_all(&dir).unwrap();
        let trials = dir.join("trials");
        let s = |p: &Path| p.to_str().unwrap().to_string();
        let (code, _, err) = common::extract_demo(&trials, &["--quiet"]);
        assert_eq!(code, 0, "{err}");
        let cmp = dir.join("cmp");
        let (code, _, err) = lacuna(&[
            "compare",
            "--covs",
            &s(&trials.join("covs.npy")),
            "--mask",
            &s(&trials.join("mask.csv")),
            "--labels",
            &s(&trials.join("labels.csv")),
            "--positions",
            &demo("positions.csv"),
            "--repeats",
            "6",
            "--bootstrap",
            "4",
            "--out",
            &s(&cmp),
            "--quiet",
        ]);
        assert_eq!(code, 0, "{err}");
        let html = dir.join("report.html");
        let (code, _, err) = lacuna(&[
            "report",
            "--compare",
            &s(&cmp),
            "--epochs",
            &s(&trials.join("epochs.json")),
            "--out",
            &s(&html),
        ]);
        assert_eq!(code, 0, "{err}");
        let text = std::fs::read_to_string(&html).unwrap();
        (html, text)
    })
}

#[test]
fn report_is_well_formed_and_self_contained() {
    let (_, html) = demo_report();
    // Well-formed: the markup (minus the HTML5 doctype line) parses as XML.
    let body = html
        .strip_prefix("<!DOCTYPE html>\n")
        .expect("doctype first");
    let doc = roxmltree::Document::parse(body).expect("well-formed markup");
    let svgs: Vec<_> = doc
        .descendants()
        .filter(|n| n.has_tag_name(("http://www.w3.org/2000/svg", "svg")))
        .collect();
    assert!(
        svgs.len() >= 8,
        "expected the charts, found {} svg elements",
        svgs.len()
    );
    for svg in &svgs {
        // Every chart has a title, and every chart with axes names them.
        let title = svg
            .children()
            .find(|c| c.has_tag_name(("http://www.w3.org/2000/svg", "title")))
            .and_then(|t| t.text())
            .unwrap_or("");
        assert!(!title.is_empty(), "an svg without a title");
        let labels: Vec<&str> = svg
            .descendants()
            .filter(|n| n.attribute("class") == Some("axis-label"))
            .filter_map(|n| n.text())
            .collect();
        assert!(
            labels.len() >= 2,
            "{title}: axis labels missing ({labels:?})"
        );
        // Units: every chart names a unit in parentheses or a unit word.
        assert!(
            labels
                .iter()
                .any(|l| l.contains('(') || *l == "trials" || l.contains("channel")),
            "{title}: no unit in {labels:?}"
        );
    }
    // Self-contained: no scripts, no external resources.
    assert!(
        doc.descendants().all(|n| !n.has_tag_name("script")
            && !n.has_tag_name("link")
            && !n.has_tag_name("img"))
    );
    let without_ns = html.replace("xmlns=\"http://www.w3.org/2000/svg\"", "");
    assert!(
        !without_ns.contains("http://")
            && !without_ns.contains("https://")
            && !without_ns.contains("url(")
    );
    // The caution, the print CSS, reasons as letters as well as colours.
    assert!(html.contains("Research software, not a medical device"));
    assert!(html.contains("@media print"));
    assert!(
        html.contains("class=\"cell-code\">S</text>")
            || html.contains("class=\"cell-code\">A</text>")
    );
    assert!(html.contains("Recommended: airm-observed"));
}

// Every column of every table compare writes, and every validation protocol,
// is defined in the one glossary that --help and the page print; the page
// shows it with the data's unit (µV² for the demo's EDF in µV).
#[test]
fn every_column_is_defined_on_the_page_and_in_help() {
    use lacuna::report::glossary::{COMPARE, defines};
    let (path, html) = demo_report();
    let cmp = path.parent().unwrap().join("cmp");
    for file in ["comparison.csv", "validation.csv", "contributions.csv"] {
        let text = std::fs::read_to_string(cmp.join(file)).unwrap();
        for col in text.lines().next().unwrap().split(',') {
            assert!(defines(COMPARE, col), "{file}: column {col} is not defined");
        }
        if file == "validation.csv" {
            for row in text.lines().skip(1) {
                let protocol = row.split(',').next().unwrap();
                assert!(
                    defines(COMPARE, protocol),
                    "protocol {protocol} is not defined"
                );
            }
        }
    }
    assert!(html.contains("What the numbers mean"));
    for t in COMPARE {
        assert!(
            html.contains(&format!("<code>{}</code>", t.column)),
            "{} not on the page",
            t.column
        );
    }
    assert!(html.contains(
        "variance_q05, variance_q95</code> <span class=\"where\">(contributions.csv; µV²)"
    ));
    let (code, help, _) = lacuna(&["compare", "--help"]);
    assert_eq!(code, 0);
    for t in COMPARE {
        assert!(
            help.contains(&format!("    {} [", t.column)),
            "{} not in --help",
            t.column
        );
    }
}

fn find_browser() -> Option<String> {
    ["chromium", "chromium-browser", "google-chrome"]
        .iter()
        .find_map(|b| {
            Command::new(b)
                .arg("--version")
                .output()
                .ok()
                .filter(|o| o.status.success())
                .map(|_| b.to_string())
        })
}

// A real browser renders the page: the screenshot is not blank and the
// console reports no errors. `.ci/run` installs chromium; without one (and
// without LACUNA_REQUIRE_BROWSER=1) the test says so and passes.
#[test]
fn browser_renders_the_report() {
    let Some(browser) = find_browser() else {
        assert!(
            std::env::var("LACUNA_REQUIRE_BROWSER").is_err(),
            "LACUNA_REQUIRE_BROWSER is set but no chromium was found"
        );
        eprintln!("SKIPPED: no chromium on this machine (.ci/run installs it)");
        return;
    };
    let (html, _) = demo_report();
    let shot = html.with_extension("png");
    let out = Command::new(&browser)
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-dev-shm-usage",
            "--hide-scrollbars",
            "--enable-logging=stderr",
            "--v=0",
            "--window-size=1280,2400",
            &format!("--screenshot={}", shot.display()),
            &format!("file://{}", html.display()),
        ])
        .output()
        .expect("run the browser");
    let log = String::from_utf8_lossy(&out.stderr);
    assert!(shot.exists(), "no screenshot; browser said:\n{log}");
    // Console messages from the page are logged as "CONSOLE" lines.
    let console_errors: Vec<&str> = log
        .lines()
        .filter(|l| l.contains("CONSOLE") && (l.contains("ERROR") || l.contains("Uncaught")))
        .collect();
    assert!(
        console_errors.is_empty(),
        "console errors: {console_errors:?}"
    );
    // Not blank: many distinct colours, and plenty of non-background pixels.
    let decoder = png::Decoder::new(std::fs::File::open(&shot).unwrap());
    let mut reader = decoder.read_info().unwrap();
    let mut buf = vec![0; reader.output_buffer_size()];
    let info = reader.next_frame(&mut buf).unwrap();
    assert_eq!(info.width, 1280);
    let channels = info.line_size / info.width as usize;
    let bytes = &buf[..info.buffer_size()];
    let mut colours = std::collections::HashSet::new();
    let mut ink = 0usize;
    for px in bytes.chunks(channels) {
        colours.insert((px[0], px[1], px[2]));
        if (px[0] as i32 - 251).abs() + (px[1] as i32 - 250).abs() + (px[2] as i32 - 247).abs() > 30
        {
            ink += 1;
        }
    }
    let total = (info.width * info.height) as usize;
    assert!(
        colours.len() > 50,
        "only {} colours: blank page?",
        colours.len()
    );
    assert!(
        ink > total / 50,
        "only {ink} of {total} pixels differ from the page background"
    );
}

/// Every path written in `doc` (see docs/report-schema.md for the notation).
fn paths(
    v: &serde_json::Value,
    prefix: &str,
    maps: &[&str],
    out: &mut std::collections::BTreeSet<String>,
) {
    match v {
        serde_json::Value::Object(m) => {
            for (k, x) in m {
                let key = if maps.contains(&prefix) {
                    "*"
                } else {
                    k.as_str()
                };
                let p = if prefix.is_empty() {
                    key.to_string()
                } else {
                    format!("{prefix}.{key}")
                };
                paths(x, &p, maps, out);
            }
        }
        serde_json::Value::Array(a) => {
            let p = format!("{prefix}[]");
            if a.is_empty() {
                out.insert(p.clone());
            }
            for x in a {
                paths(x, &p, maps, out);
            }
        }
        _ => {
            out.insert(prefix.to_string());
        }
    }
}

fn schema(name: &str) -> Vec<String> {
    let doc = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/docs/report-schema.md"
    ))
    .unwrap();
    let start = doc
        .find(&format!("```schema {name}\n"))
        .expect("schema block");
    let block = &doc[start..];
    let block = &block[block.find('\n').unwrap() + 1..];
    let block = &block[..block.find("```").unwrap()];
    block
        .lines()
        .filter_map(|l| l.split_whitespace().next())
        .map(str::to_string)
        .collect()
}

fn check(name: &str, json: &serde_json::Value, maps: &[&str]) {
    let listed = schema(name);
    let mut written = std::collections::BTreeSet::new();
    paths(json, "", maps, &mut written);
    for p in &written {
        // An empty array ("x[]") is covered by any listed path under it.
        let ok = listed
            .iter()
            .any(|l| l == p || (p.ends_with("[]") && l.starts_with(p.as_str())));
        assert!(
            ok,
            "{name}: field {p} is written but not in docs/report-schema.md"
        );
    }
    assert!(written.len() > 10);
}

// Every field of every JSON output is in the versioned schema document.
#[test]
fn every_json_field_is_in_the_schema() {
    let (html, _) = demo_report();
    let dir = html.parent().unwrap();
    let read = |p: &Path| -> serde_json::Value {
        serde_json::from_str(&std::fs::read_to_string(p).unwrap()).unwrap()
    };
    let compare = read(&dir.join("cmp/compare.json"));
    assert_eq!(compare["compare_version"], "1");
    check("compare", &compare, &["stage_seconds"]);
    let epochs = read(&dir.join("trials/epochs.json"));
    assert_eq!(epochs["lacuna_epochs_version"], "2");
    check("epochs", &epochs, &["summary.reasons"]);
    let report = dir.join("mean-report.json");
    let trials = dir.join("trials");
    let (code, _, err) = lacuna(&[
        "mean",
        "--covs",
        trials.join("covs.npy").to_str().unwrap(),
        "--mask",
        trials.join("mask.csv").to_str().unwrap(),
        "--starts",
        "2",
        "--out",
        dir.join("m.csv").to_str().unwrap(),
        "--report",
        report.to_str().unwrap(),
        "--quiet",
    ]);
    assert_eq!(code, 0, "{err}");
    let mean = read(&report);
    assert_eq!(mean["report_version"], "1");
    check("mean", &mean, &[]);
}

// Common practice, no source: every exporter is a function of the typed
// result alone. compare.json read back into `Comparison` (and epochs.json
// into `ExtractionRecord`) re-creates every file the commands wrote, byte
// for byte: the JSON itself, each CSV table, each mean, and the page.
#[test]
fn exporters_read_only_the_typed_result() {
    use lacuna::jobs::{Comparison, ExtractionRecord};
    use lacuna::report::tables;
    let (html_path, html) = demo_report();
    let dir = html_path.parent().unwrap();
    let cmp = dir.join("cmp");
    let json = std::fs::read(cmp.join("compare.json")).unwrap();
    let c: Comparison = serde_json::from_slice(&json).unwrap();
    assert_eq!(
        lacuna::output::json_bytes(&c),
        json,
        "compare.json round trip"
    );
    let read = |f: &str| std::fs::read(cmp.join(f)).unwrap();
    assert_eq!(tables::comparison(&c), read("comparison.csv"));
    assert_eq!(tables::distances(&c), read("distances.csv"));
    assert_eq!(tables::validation(&c).unwrap(), read("validation.csv"));
    assert_eq!(
        tables::contributions(c.contributions.as_ref().unwrap()),
        read("contributions.csv")
    );
    let mut means = 0;
    for m in c.schemes.iter().filter_map(|r| r.ok()) {
        for ext in ["npy", "csv"] {
            let path = cmp.join("means").join(format!("{}.{ext}", m.file_stem()));
            let bytes = lacuna::trials::io::encode_matrix(&path, &m.mean_matrix(), &c.channels);
            assert_eq!(bytes, std::fs::read(&path).unwrap(), "{}", path.display());
            means += 1;
        }
    }
    assert!(means >= 2 * 8, "{means}");
    let epochs: ExtractionRecord =
        serde_json::from_slice(&std::fs::read(dir.join("trials/epochs.json")).unwrap()).unwrap();
    assert_eq!(&lacuna::report::html::render(&c, Some(&epochs)), html);
}
