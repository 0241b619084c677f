//! The full tensor from measured components against analytic prism fields
//! (`gravgrad_forward::prism`, Nagy et al. 2000): derived components from Gzz alone and from all
//! six, gz, upward continuation, and the combination's gain when each component carries its own
//! noise.

use approx::assert_abs_diff_eq;
use gravgrad_core::Raster;
use gravgrad_forward::prism::Prism;
use gravgrad_grid::tensor_grid::{GzReference, NAMES, TensorOptions, full_tensor};
use rayon::prelude::*;

/// 256 × 256 cells of 80 m (20.48 km), north-west corner (500 000 E, 7 000 000 N).
const N: usize = 256;
const CELL: f64 = 80.0;
const X_MIN: f64 = 500_000.0;
const Y_MAX: f64 = 7_000_000.0;
const EOTVOS: f64 = 1e9;

/// Three bodies near the middle (NED: x north, y east, z down, metres relative to the grid's
/// north-west corner at z = 0; the observation plane is z = −h).
fn bodies() -> Vec<Prism> {
    let (n0, e0) = (-10_240.0, 10_240.0); // centre of the grid, north and east of the corner
    vec![
        Prism::new(
            [n0 - 600.0, n0 + 600.0],
            [e0 - 1400.0, e0 - 600.0],
            [300.0, 800.0],
            400.0,
        ),
        Prism::new(
            [n0 + 500.0, n0 + 900.0],
            [e0 + 300.0, e0 + 1500.0],
            [200.0, 450.0],
            -250.0,
        ),
        Prism::new(
            [n0 - 1800.0, n0 - 1000.0],
            [e0 + 800.0, e0 + 1300.0],
            [500.0, 1500.0],
            300.0,
        ),
    ]
}

/// Analytic grids at height `h` m: six components (E) and gz (mGal).
fn analytic(h: f64) -> ([Raster; 6], Raster) {
    let bodies = bodies();
    let cells: Vec<([f64; 6], f64)> = (0..N * N)
        .into_par_iter()
        .map(|k| {
            let (col, row) = (k % N, k / N);
            // Cell centre relative to the corner: north negative downwards in rows.
            let north = -(row as f64 + 0.5) * CELL;
            let east = (col as f64 + 0.5) * CELL;
            let mut t = [0.0; 6];
            let mut gz = 0.0;
            for b in &bodies {
                let f = b.field([north, east, -h]);
                let a = f.tensor.to_array();
                for c in 0..6 {
                    t[c] += a[c] * EOTVOS;
                }
                gz += f.g[2] * 1e5;
            }
            (t, gz)
        })
        .collect();
    let grid = |values: Vec<f64>| {
        Raster::new(N, N, (X_MIN, Y_MAX), (CELL, CELL), values)
            .unwrap()
            .with_epsg(32753)
    };
    let comps: [Raster; 6] =
        std::array::from_fn(|c| grid(cells.iter().map(|(t, _)| t[c]).collect()));
    (comps, grid(cells.iter().map(|(_, g)| *g).collect()))
}

fn rms(v: &[f64]) -> f64 {
    (v.iter().map(|x| x * x).sum::<f64>() / v.len() as f64).sqrt()
}

/// RMS of (derived − analytic) over the RMS of the analytic grid, means removed when `demean`.
fn rel_err(derived: &Raster, truth: &Raster, demean: bool) -> f64 {
    let m = |v: &[f64]| {
        if demean {
            v.iter().sum::<f64>() / v.len() as f64
        } else {
            0.0
        }
    };
    let (md, mt) = (m(&derived.values), m(&truth.values));
    let d: Vec<f64> = derived
        .values
        .iter()
        .zip(&truth.values)
        .map(|(a, b)| (a - md) - (b - mt))
        .collect();
    let t: Vec<f64> = truth.values.iter().map(|b| b - mt).collect();
    rms(&d) / rms(&t)
}

/// Deterministic Gaussian noise (splitmix64 and Box–Muller).
fn noisy(r: &Raster, sigma: f64, seed: u64) -> Raster {
    let mut s = seed;
    let mut next = || {
        s = s.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = s;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        ((z ^ (z >> 31)) >> 11) as f64 / (1u64 << 53) as f64
    };
    let mut out = r.clone();
    for v in &mut out.values {
        let (u1, u2) = (next().max(1e-300), next());
        *v += sigma * (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos();
    }
    out
}

#[test]
fn from_gzz_alone_and_from_all_six() {
    let (truth, gz_truth) = analytic(80.0);
    let opts = TensorOptions::default();
    let only_gzz = [None, None, None, None, None, Some(&truth[5])];
    let all: [Option<&Raster>; 6] = std::array::from_fn(|c| Some(&truth[c]));
    for (label, measured, limit) in [("Gzz alone", only_gzz, 0.02), ("all six", all, 0.02)] {
        let out = full_tensor(&measured, &opts).unwrap();
        for c in 0..6 {
            let e = rel_err(&out.components[c], &truth[c], false);
            eprintln!("{label}: {} relative RMS error {:.4}%", NAMES[c], 100.0 * e);
            assert!(e < limit, "{label}: {} error {e}", NAMES[c]);
        }
        let e = rel_err(&out.gz, &gz_truth, true);
        eprintln!(
            "{label}: gz relative RMS error (means removed) {:.4}%",
            100.0 * e
        );
        assert!(e < 0.02, "{label}: gz error {e}");
        let mean = out.gz.values.iter().sum::<f64>() / out.gz.values.len() as f64;
        assert_abs_diff_eq!(mean, 0.0, epsilon = 1e-9);
    }
}

/// Pairs of horizontal components alone: the odd ones (Gxz with Gyz) and the even ones (Gxx, Gyy,
/// Gxy) each give Gzz, proving their multipliers' signs and the parity of their padding.
#[test]
fn horizontal_components_give_gzz() {
    let (truth, _) = analytic(80.0);
    let opts = TensorOptions::default();
    let odd = [None, None, Some(&truth[2]), None, Some(&truth[4]), None];
    let even = [
        Some(&truth[0]),
        Some(&truth[1]),
        None,
        Some(&truth[3]),
        None,
        None,
    ];
    for (label, m) in [("Gxz+Gyz", odd), ("Gxx+Gxy+Gyy", even)] {
        let out = full_tensor(&m, &opts).unwrap();
        let e = rel_err(&out.components[5], &truth[5], true);
        eprintln!("{label}: gzz relative RMS error {:.4}%", 100.0 * e);
        assert!(e < 0.03, "{label}: {e}");
    }
}

#[test]
fn upward_continuation_matches_the_higher_plane() {
    let (low, _) = analytic(80.0);
    let (high, gz_high) = analytic(280.0);
    let opts = TensorOptions {
        upward_m: 200.0,
        gz_reference: GzReference::Mean(3.5),
        ..TensorOptions::default()
    };
    let all: [Option<&Raster>; 6] = std::array::from_fn(|c| Some(&low[c]));
    let out = full_tensor(&all, &opts).unwrap();
    for c in 0..6 {
        let e = rel_err(&out.components[c], &high[c], false);
        eprintln!(
            "up 200 m: {} relative RMS error {:.4}%",
            NAMES[c],
            100.0 * e
        );
        assert!(e < 0.02, "{}: {e}", NAMES[c]);
    }
    let e = rel_err(&out.gz, &gz_high, true);
    assert!(e < 0.02, "gz {e}");
    let mean = out.gz.values.iter().sum::<f64>() / out.gz.values.len() as f64;
    assert_abs_diff_eq!(mean, 3.5, epsilon = 1e-9);
}

#[test]
fn combination_beats_gzz_alone_with_independent_noise() {
    let (truth, gz_truth) = analytic(80.0);
    let sigma = 1.0;
    let noisy: Vec<Raster> = (0..6)
        .map(|c| noisy(&truth[c], sigma, 1000 + c as u64))
        .collect();
    let opts = TensorOptions {
        noise_e: [sigma; 6],
        ..TensorOptions::default()
    };
    let alone = full_tensor(&[None, None, None, None, None, Some(&noisy[5])], &opts).unwrap();
    let all: [Option<&Raster>; 6] = std::array::from_fn(|c| Some(&noisy[c]));
    let comb = full_tensor(&all, &opts).unwrap();
    for c in 0..6 {
        let (a, b) = (
            rel_err(&alone.components[c], &truth[c], false),
            rel_err(&comb.components[c], &truth[c], false),
        );
        eprintln!(
            "noise {sigma} E: {} error Gzz alone {:.3}%, all six {:.3}%",
            NAMES[c],
            100.0 * a,
            100.0 * b
        );
        // Six components see each wavenumber with at least 2.75 times Gzz's weight: the noise
        // variance of the estimate falls by that factor, its RMS by at least 1.6.
        assert!(b * 1.4 < a, "{}: alone {a}, combined {b}", NAMES[c]);
    }
    let (a, b) = (
        rel_err(&alone.gz, &gz_truth, true),
        rel_err(&comb.gz, &gz_truth, true),
    );
    eprintln!(
        "noise: gz error Gzz alone {:.3}%, all six {:.3}%",
        100.0 * a,
        100.0 * b
    );
    assert!(b < a);
}

#[test]
fn same_values_whatever_the_thread_count() {
    let (truth, _) = analytic(80.0);
    let all: [Option<&Raster>; 6] = std::array::from_fn(|c| Some(&truth[c]));
    let run = |n| {
        rayon::ThreadPoolBuilder::new()
            .num_threads(n)
            .build()
            .unwrap()
            .install(|| full_tensor(&all, &TensorOptions::default()).unwrap())
    };
    assert_eq!(run(1), run(2));
}

#[test]
fn refuses_missing_cells_and_mixed_geometry() {
    let (truth, _) = analytic(80.0);
    let mut holed = truth[5].clone();
    holed.values[3 * N + 7] = f64::NAN;
    let e = full_tensor(
        &[None, None, None, None, None, Some(&holed)],
        &TensorOptions::default(),
    )
    .unwrap_err();
    assert_eq!(
        e.to_string(),
        "gzz: cell (column 7, row 3) is missing or not finite; grid without blanking first"
    );
    let mut moved = truth[0].clone();
    moved.x_min += 10.0;
    assert!(
        full_tensor(
            &[Some(&moved), None, None, None, None, Some(&truth[5])],
            &TensorOptions::default()
        )
        .is_err()
    );
    assert!(full_tensor(&[None; 6], &TensorOptions::default()).is_err());
}
