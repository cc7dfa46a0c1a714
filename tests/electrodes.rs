//! Standard positions on the demo: the spherical-spline interpolation of a
//! channel from the others must use positions that agree with where the
//! demo's forward model put the electrodes.

use lacuna::Mat;
use lacuna::electrodes::{System, standard_positions};
use lacuna::schemes::spline_interpolation_matrix;

fn load(path: &str) -> Mat {
    let a = lacuna::trials::npy::read_npy(std::path::Path::new(path)).unwrap();
    let lacuna::trials::npy::NpyData::Float(data) = a.data else {
        panic!("{path}: not float")
    };
    Mat::from_row_slice(a.shape[0], a.shape[1], &data)
}

/// Mean over channels c of ‖Σ[o,c] − Σ[o,o] w_c‖ / ‖Σ[o,c]‖, where w_c
/// interpolates channel c from the other channels o by spherical splines
/// (Perrin et al. 1989): how well each channel's covariances with the rest
/// are predicted from its neighbours.
fn recovery_error(sigma: &Mat, positions: &[[f64; 3]]) -> f64 {
    let p = sigma.nrows();
    let mut total = 0.0;
    for c in 0..p {
        let others: Vec<usize> = (0..p).filter(|&j| j != c).collect();
        let w = spline_interpolation_matrix(positions, &others, &[c]).unwrap();
        let mut err = 0.0;
        let mut norm = 0.0;
        for &oa in &others {
            let predicted: f64 = others
                .iter()
                .enumerate()
                .map(|(b, &ob)| sigma[(oa, ob)] * w[(0, b)])
                .sum();
            err += (sigma[(oa, c)] - predicted).powi(2);
            norm += sigma[(oa, c)].powi(2);
        }
        total += (err / norm).sqrt();
    }
    total / p as f64
}

// Common practice, no source: with the positions the forward model used,
// each channel is predicted from its neighbours better than with the same
// positions handed to the wrong channels (a fixed shuffle). Can fail: it
// fails when the demo's positions.csv, the standard positions and the
// simulator disagree.
#[test]
fn standard_positions_fit_the_demo() {
    let dir = format!("{}/demo-data/recording", env!("CARGO_MANIFEST_DIR"));
    let names = lacuna::simulate::recording::channel_names(24);
    let positions = standard_positions(&names, System::TenTen).unwrap();
    let shuffled: Vec<[f64; 3]> = (0..24).map(|c| positions[(c * 7 + 3) % 24]).collect();
    for condition in ["rest", "task"] {
        let sigma = load(&format!("{dir}/truth-{condition}.npy"));
        let right = recovery_error(&sigma, &positions);
        let wrong = recovery_error(&sigma, &shuffled);
        eprintln!("{condition}: recovery error {right:.4} (shuffled positions {wrong:.4})");
        assert!(right < 0.5 * wrong, "{condition}: {right} vs {wrong}");
    }
    // The committed positions.csv holds the same standard positions.
    let from_file = lacuna::trials::io::read_positions(
        std::path::Path::new(&format!("{dir}/positions.csv")),
        &names,
    )
    .unwrap();
    for (a, b) in from_file.iter().zip(&positions) {
        assert!((0..3).all(|k| (a[k] - b[k]).abs() < 1e-6), "{a:?} {b:?}");
    }
}
