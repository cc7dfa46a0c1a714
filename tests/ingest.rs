//! Ingest checks against reference fixtures: EDF/BDF files written by
//! pyedflib, scipy.signal filters, scikit-learn covariance estimators
//! (tests/reference/make_ingest_fixtures.py, versions pinned in
//! tests/reference/requirements.txt).

mod common;

use common::{fixture, mat};
use lacuna::Mat;
use lacuna::ingest::SignalSource;
use lacuna::ingest::covariance::{Estimator, estimate};
use lacuna::ingest::edf::{EdfFile, EdfVariant};
use lacuna::ingest::filter::{Band, butterworth};

fn fixture_path(name: &str) -> std::path::PathBuf {
    std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/reference/fixtures")
        .join(name)
}

// Source: pyedflib 0.1.38 wrote these files (EDF, EDF+ with two
// annotations, BDF without the "24BIT" reserved-field marker); each channel
// is a·sin(2πft) with known a and f. Read back to the format's resolution.
#[test]
fn edf_and_bdf_written_by_pyedflib_read_back() {
    let fx = fixture("edf_sines");
    let rate = fx["rate"].as_f64().unwrap();
    let secs = fx["seconds"].as_f64().unwrap();
    let amps: Vec<f64> = serde_json::from_value(fx["amplitudes"].clone()).unwrap();
    let freqs: Vec<f64> = serde_json::from_value(fx["frequencies"].clone()).unwrap();
    let names: Vec<String> = serde_json::from_value(fx["channels"].clone()).unwrap();
    for file in fx["files"].as_array().unwrap() {
        let name = file["file"].as_str().unwrap();
        let res = file["resolution"].as_f64().unwrap();
        let mut f = EdfFile::open(&fixture_path(name)).unwrap();
        let expected_variant = match name {
            "sines.bdf" => EdfVariant::Bdf,
            "sines_plus.edf" => EdfVariant::EdfPlus,
            _ => EdfVariant::Edf,
        };
        assert_eq!(f.header.variant, expected_variant, "{name}");
        assert_eq!(f.channel_names(), &names[..], "{name}");
        assert_eq!(f.set_aside.len(), 1, "{name}: AUX at 32 Hz set aside");
        assert_eq!(f.set_aside[0].0, "AUX");
        assert_eq!(f.sampling_rate(), rate);
        let n = f.n_samples();
        assert_eq!(n as f64, rate * secs);
        let mut out = vec![Vec::new(); names.len()];
        f.read(0, n, &mut out).unwrap();
        for (c, x) in out.iter().enumerate() {
            let worst = x
                .iter()
                .enumerate()
                .map(|(i, v)| {
                    let t = i as f64 / rate;
                    (v - amps[c] * (2.0 * std::f64::consts::PI * freqs[c] * t).sin()).abs()
                })
                .fold(0.0, f64::max);
            // One digital step: the writer's rounding of x to a digital
            // value (pyedflib truncates, so up to one step, not half).
            assert!(
                worst <= res * (1.0 + 1e-9),
                "{name} channel {c}: {worst} > {res}"
            );
        }
        let events = f.annotations().unwrap();
        if name == "sines_plus.edf" {
            let want: Vec<(f64, f64, String)> =
                serde_json::from_value(fx["annotations"].clone()).unwrap();
            assert_eq!(events.len(), want.len());
            for (e, (o, d, l)) in events.iter().zip(want) {
                assert!((e.onset - o).abs() < 1e-9 && (e.duration - d).abs() < 1e-9);
                assert_eq!(e.label, l);
            }
        } else {
            assert!(events.is_empty());
        }
    }
}

// Source: scipy 1.14.1 signal.butter(..., output="sos") + sosfiltfilt on the
// same inputs; our sections pair poles differently, so only rounding differs.
#[test]
fn zero_phase_butterworth_matches_scipy_sosfiltfilt() {
    let fx = fixture("filters");
    for case in fx["cases"].as_array().unwrap() {
        let order = case["order"].as_u64().unwrap() as usize;
        let fs = case["fs"].as_f64().unwrap();
        let band = match case["btype"].as_str().unwrap() {
            "bandpass" => Band::Bandpass(
                case["wn"][0].as_f64().unwrap(),
                case["wn"][1].as_f64().unwrap(),
            ),
            "lowpass" => Band::Lowpass(case["wn"].as_f64().unwrap()),
            _ => Band::Highpass(case["wn"].as_f64().unwrap()),
        };
        let sos = butterworth(order, band, fs).unwrap();
        assert_eq!(
            sos.padlen(),
            case["padlen"].as_u64().unwrap() as usize,
            "{band:?}"
        );
        let mut x: Vec<f64> = serde_json::from_value(case["x"].clone()).unwrap();
        let y: Vec<f64> = serde_json::from_value(case["y"].clone()).unwrap();
        sos.filtfilt(&mut x, &mut Vec::new()).unwrap();
        let num: f64 = x
            .iter()
            .zip(&y)
            .map(|(a, b)| (a - b) * (a - b))
            .sum::<f64>()
            .sqrt();
        let den: f64 = y.iter().map(|b| b * b).sum::<f64>().sqrt();
        assert!(
            num / den < 1e-9,
            "{band:?} order {order} fs {fs}: relative error {}",
            num / den
        );
    }
}

// Source: scikit-learn 1.5.2 covariance.empirical_covariance, ledoit_wolf and
// oas, and numpy.cov, on the same samples (including T < p).
#[test]
fn covariance_estimators_match_scikit_learn() {
    let fx = fixture("covariance");
    for case in fx["cases"].as_array().unwrap() {
        let x = mat(&case["x"]).transpose(); // p × T
        let p = x.nrows();
        let rel = |a: &Mat, b: &Mat| (a - b).norm() / b.norm();
        let sample = estimate(&x, Estimator::Sample);
        assert!(rel(&sample.cov, &mat(&case["np_cov"])) < 1e-10);
        assert_eq!(sample.rank, p.min(x.ncols() - 1));
        let lw = estimate(&x, Estimator::LedoitWolf);
        let want = case["ledoit_wolf_shrinkage"].as_f64().unwrap();
        assert!(
            (lw.shrinkage - want).abs() < 1e-10 * want.max(1e-3),
            "p {p}: {} vs {want}",
            lw.shrinkage
        );
        assert!(rel(&lw.cov, &mat(&case["ledoit_wolf"])) < 1e-10);
        let oas = estimate(&x, Estimator::Oas);
        let want = case["oas_shrinkage"].as_f64().unwrap();
        assert!(
            (oas.shrinkage - want).abs() < 1e-10 * want.max(1e-3),
            "p {p}: {} vs {want}",
            oas.shrinkage
        );
        assert!(rel(&oas.cov, &mat(&case["oas"])) < 1e-10);
    }
}
