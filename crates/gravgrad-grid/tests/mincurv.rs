//! Minimum-curvature gridding against GMT `surface` and block means against GMT `blockmean`
//! (files committed under `tests/reference/grid/`, made by
//! `bench/grid.py --reference tests/reference/grid`: GMT `surface` was given our block means of the
//! same points), against analytic surfaces, blanking against a brute-force distance, and
//! thread-count independence.

use approx::assert_abs_diff_eq;
use gravgrad_grid::mincurv::{GridError, GridSpec, block_means, grid_points};
use std::path::PathBuf;

fn reference_dir() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../../tests/reference/grid")
}

/// The survey points of the small case: `tag` "n00" noise-free, "n05" with 0.5 E of noise.
fn read_points(tag: &str) -> Vec<(f64, f64, f64)> {
    let text = std::fs::read_to_string(reference_dir().join(format!("points_{tag}.csv"))).unwrap();
    text.lines()
        .map(|l| {
            let f: Vec<f64> = l.split(',').map(|s| s.parse().unwrap()).collect();
            (f[0], f[1], f[2])
        })
        .collect()
}

/// GMT's grid (rows north to south) and the convergence limit it was run with.
fn read_gmt(name: &str) -> (Vec<f64>, f64) {
    let text = std::fs::read_to_string(reference_dir().join(name)).unwrap();
    let mut limit = None;
    let mut v = Vec::new();
    for l in text.lines() {
        if let Some(c) = l.strip_prefix('#') {
            if let Some(p) = c.find("convergence ") {
                limit = Some(c[p + 12..].trim().parse::<f64>().unwrap());
            }
            continue;
        }
        v.extend(l.split_whitespace().map(|s| s.parse::<f64>().unwrap()));
    }
    (v, limit.unwrap())
}

fn spec(tension: f64, limit: f64) -> GridSpec {
    GridSpec {
        x_min: 0.0,
        y_max: 4000.0,
        nx: 80,
        ny: 80,
        cell: 50.0,
        tension,
        blanking: None,
        convergence: Some(limit),
        max_sweeps: 20000,
        epsg: None,
        block_mean: true,
    }
}

fn rms(v: impl Iterator<Item = f64>) -> f64 {
    let (mut s, mut n) = (0.0, 0usize);
    for x in v {
        s += x * x;
        n += 1;
    }
    (s / n as f64).sqrt()
}

fn against_gmt(tag: &str, tension: f64) {
    let pts = read_points(tag);
    let (gmt, limit) = read_gmt(&format!(
        "gmt_surface_{tag}_t{:02}.txt",
        (tension * 100.0_f64).round() as u32
    ));
    let g = grid_points(&pts, &spec(tension, limit)).unwrap();
    assert!(g.report.converged, "{:?}", g.report.levels);
    assert_eq!(g.surface.values.len(), gmt.len());
    let data_rms = rms(pts.iter().map(|p| p.2));
    let diff = rms(g.surface.values.iter().zip(&gmt).map(|(a, b)| a - b));
    let ratio = diff / data_rms;
    eprintln!(
        "{tag} tension {tension}: RMS difference to GMT {diff:.4} E, {:.3}% of the data's RMS",
        100.0 * ratio
    );
    assert!(
        ratio <= 0.01,
        "RMS difference {:.3}% of the data's RMS",
        100.0 * ratio
    );
}

#[test]
fn matches_gmt_surface_without_tension() {
    against_gmt("n00", 0.0);
}

#[test]
fn matches_gmt_surface_with_tension() {
    against_gmt("n00", 0.25);
}

#[test]
fn matches_gmt_surface_without_tension_noisy() {
    against_gmt("n05", 0.0);
}

#[test]
fn matches_gmt_surface_with_tension_noisy() {
    against_gmt("n05", 0.25);
}

/// Our block means are GMT `blockmean`'s (same cells, `-r`): one per occupied cell, at the same
/// mean position with the same mean value.
#[test]
fn block_means_match_gmt_blockmean() {
    for tag in ["n00", "n05"] {
        let pts = read_points(tag);
        let ours = block_means(&pts, &spec(0.0, 1e-3)).unwrap();
        let text =
            std::fs::read_to_string(reference_dir().join(format!("gmt_blockmean_{tag}.txt")))
                .unwrap();
        let mut gmt: Vec<[f64; 3]> = text
            .lines()
            .filter(|l| !l.starts_with('#'))
            .map(|l| {
                let f: Vec<f64> = l.split_whitespace().map(|s| s.parse().unwrap()).collect();
                [f[0], f[1], f[2]]
            })
            .collect();
        assert_eq!(ours.len(), gmt.len(), "{tag}: cells with data");
        // Both in cell order: rows north to south, each west to east.
        let cell = |x: f64, y: f64| {
            (
                (((4000.0 - y) / 50.0).floor()) as i64,
                (x / 50.0).floor() as i64,
            )
        };
        gmt.sort_by_key(|p| cell(p[0], p[1]));
        let mut worst = [0.0f64; 3];
        for (o, g) in ours.iter().zip(&gmt) {
            assert_eq!(cell(o.0, o.1), cell(g[0], g[1]), "{tag}");
            for (w, d) in worst.iter_mut().zip([o.0 - g[0], o.1 - g[1], o.2 - g[2]]) {
                *w = w.max(d.abs());
            }
        }
        eprintln!(
            "{tag}: {} block means, largest differences {worst:?} (m, m, E)",
            ours.len()
        );
        // GMT printed 10 decimals; both average the same 3-decimal positions, 6-decimal values.
        assert!(worst.iter().all(|&w| w < 1e-6), "{tag}: {worst:?}");
    }
}

/// With block means on, a cell's data enter only through their mean: the grid equals the one
/// made with a single datum at their mean position and value. Off, only the datum nearest the
/// node is used: the grid equals the one made without the other.
#[test]
fn block_mean_option() {
    let mut s = spec(0.0, 1e-9);
    s.nx = 20;
    s.ny = 20;
    s.y_max = 1000.0;
    let f = |x: f64, y: f64| 3.0 + 0.01 * x - 0.004 * y + 2.0 * (x / 300.0).sin();
    // A datum in every cell but (3, 4), 0.3 cell off its centre.
    let mut background = Vec::new();
    for r in 0..20 {
        for c in 0..20 {
            if (c, r) != (3, 4) {
                let (x, y) = (50.0 * c as f64 + 40.0, 1000.0 - 50.0 * r as f64 - 25.0);
                background.push((x, y, f(x, y)));
            }
        }
    }
    // Cell (3, 4), centre (175, 775): two data 7 m west and 10 m east of the centre.
    let (p1, p2) = (
        (168.0, 775.0, f(168.0, 775.0) + 1.0),
        (185.0, 775.0, f(185.0, 775.0) - 1.5),
    );
    let with = |extra: &[(f64, f64, f64)], s: &GridSpec| {
        let mut pts = background.clone();
        pts.extend_from_slice(extra);
        grid_points(&pts, s).unwrap()
    };
    let same = |a: &gravgrad_grid::Gridded, b: &gravgrad_grid::Gridded| {
        assert!(a.report.converged && b.report.converged);
        for (p, q) in a.surface.values.iter().zip(&b.surface.values) {
            assert_abs_diff_eq!(*p, *q, epsilon = 1e-7);
        }
    };
    let means = block_means(&[p1, p2], &s).unwrap();
    assert_eq!(means.len(), 1);
    let (x, y, v) = means[0];
    assert_abs_diff_eq!(x, 176.5, epsilon = 1e-9);
    assert_abs_diff_eq!(y, 775.0, epsilon = 1e-9);
    assert_abs_diff_eq!(v, 0.5 * (p1.2 + p2.2), epsilon = 1e-12);
    let a = with(&[p1, p2], &s);
    assert_eq!((a.report.data_inside, a.report.data_gridded), (401, 400));
    same(&a, &with(&[(176.5, 775.0, v)], &s));
    s.block_mean = false;
    let c = with(&[p1, p2], &s);
    assert_eq!((c.report.data_inside, c.report.data_gridded), (401, 401));
    same(&c, &with(&[p1], &s));
    // And the two differ at the cell: the mean is not the nearest datum.
    assert!((a.surface.get(3, 4).unwrap() - c.surface.get(3, 4).unwrap()).abs() > 0.1);
}

#[test]
fn same_values_whatever_the_thread_count() {
    let pts = read_points("n05");
    let mut s = spec(0.25, 1e-3);
    s.blanking = Some(120.0);
    let run = |n| {
        rayon::ThreadPoolBuilder::new()
            .num_threads(n)
            .build()
            .unwrap()
            .install(|| grid_points(&pts, &s).unwrap())
    };
    let (a, b) = (run(1), run(2));
    let bits = |g: &gravgrad_grid::Gridded| -> Vec<u64> {
        g.blanked().values.iter().map(|v| v.to_bits()).collect()
    };
    assert_eq!(bits(&a), bits(&b));
    assert_eq!(a.report, b.report);
}

/// A plane is the minimum-curvature surface for any tension: the data on a plane come back as the
/// plane at every cell, also far from the data.
#[test]
fn plane_data_give_the_plane() {
    let plane = |x: f64, y: f64| 12.5 + 0.003 * x - 0.0071 * y;
    let pts: Vec<(f64, f64, f64)> = (0..40)
        .map(|k| {
            let x = 130.0 + 37.0 * k as f64;
            let y = 900.0 + 300.0 * ((k * 7) % 5) as f64 + 3.3 * k as f64;
            (x, y, plane(x, y))
        })
        .collect();
    for t in [0.0, 0.5, 1.0] {
        let mut s = spec(t, 1e-9);
        s.nx = 40;
        s.ny = 50;
        let g = grid_points(&pts, &s).unwrap();
        for r in 0..s.ny {
            for c in 0..s.nx {
                let (x, y) = g.surface.cell_centre(c, r);
                let v = g.surface.get(c, r).unwrap();
                assert!((v - plane(x, y)).abs() < 1e-9, "T {t} cell ({c}, {r}): {v}");
            }
        }
    }
}

/// A smooth analytic field densely sampled (a datum in every cell, off the nodes) is reproduced to
/// the order of the constraint's Taylor remainder.
#[test]
fn dense_smooth_field_reproduced() {
    let f = |x: f64, y: f64| (x / 700.0).sin() * (y / 900.0).cos() * 40.0 + 0.002 * x;
    let mut pts = Vec::new();
    for j in 0..60 {
        for i in 0..60 {
            // Off-node by up to 0.4 cell, in a fixed pattern.
            let ox = 0.4 * (((i * 7 + j * 3) % 9) as f64 / 8.0 - 0.5) * 2.0;
            let oy = 0.4 * (((i * 5 + j * 11) % 7) as f64 / 6.0 - 0.5) * 2.0;
            let x = (i as f64 + 0.5 + ox) * 50.0;
            let y = 3000.0 - (j as f64 + 0.5 + oy) * 50.0;
            pts.push((x, y, f(x, y)));
        }
    }
    let mut s = spec(0.0, 1e-7);
    s.y_max = 3000.0;
    s.nx = 60;
    s.ny = 60;
    let g = grid_points(&pts, &s).unwrap();
    let err = rms((0..60 * 60).map(|k| {
        let (x, y) = g.surface.cell_centre(k % 60, k / 60);
        g.surface.values[k] - f(x, y)
    }));
    // Field amplitude 40; the second-order constraint leaves an error of order h³·f''' ≈ 0.03.
    eprintln!("dense field: RMS error {err:.4}");
    assert!(err < 0.02 * 40.0 / 10.0, "RMS error {err}");
}

#[test]
fn blanking_matches_brute_force_distance() {
    let pts = read_points("n05");
    let mut s = spec(0.0, 1e-2);
    let d = 80.0;
    s.blanking = Some(d);
    let g = grid_points(&pts, &s).unwrap();
    let b = g.blanked();
    let (mut kept, mut blanked) = (0, 0);
    for r in 0..s.ny {
        for c in 0..s.nx {
            let (x, y) = b.cell_centre(c, r);
            let near = pts
                .iter()
                .any(|p| (p.0 - x).powi(2) + (p.1 - y).powi(2) <= d * d);
            let v = b.get(c, r).unwrap();
            assert_eq!(!v.is_nan(), near, "cell ({c}, {r})");
            if near {
                kept += 1;
                assert_eq!(v, g.surface.get(c, r).unwrap());
            } else {
                blanked += 1;
            }
        }
    }
    // Lines 200 m apart with an 80 m distance: both kinds of cell occur.
    assert!(
        kept > 1000 && blanked > 1000,
        "{kept} kept, {blanked} blanked"
    );
    assert!(b.nodata.unwrap().is_nan());
}

#[test]
fn refuses_bad_specs_and_no_data() {
    let pts = vec![(100.0, 100.0, 1.0), (f64::NAN, 3.0, 1.0)];
    let mut s = spec(0.0, 1e-3);
    s.tension = 1.5;
    assert!(matches!(
        grid_points(&pts, &s),
        Err(GridError::Tension { .. })
    ));
    s.tension = 0.0;
    s.cell = -1.0;
    assert!(matches!(grid_points(&pts, &s), Err(GridError::Cell { .. })));
    s.cell = 50.0;
    s.nx = 2;
    assert!(matches!(
        grid_points(&pts, &s),
        Err(GridError::TooSmall { .. })
    ));
    s.nx = 80;
    s.blanking = Some(-3.0);
    assert!(matches!(
        grid_points(&pts, &s),
        Err(GridError::Blanking { .. })
    ));
    s.blanking = None;
    assert_eq!(
        grid_points(&[(-9e9, 0.0, 1.0)], &s).unwrap_err(),
        GridError::NoData
    );
    let g = grid_points(&pts, &s).unwrap();
    assert_eq!(g.report.data_not_finite, 1);
    for v in &g.surface.values {
        assert_abs_diff_eq!(*v, 1.0, epsilon = 1e-12);
    }
}
