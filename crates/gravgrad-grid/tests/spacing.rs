//! Line spacing, default cell and default blanking (`gravgrad_grid::spacing`).

use approx::assert_abs_diff_eq;
use gravgrad_grid::spacing::{FALLBACK_CELL_M, MIN_BLANKING_M};
use gravgrad_grid::{default_blanking, default_cell, line_spacing};

/// A line from (x0, y0) along azimuth `angle` (radians from east), `n` points `step` m apart.
fn line(x0: f64, y0: f64, angle: f64, n: usize, step: f64) -> Vec<(f64, f64)> {
    (0..n)
        .map(|k| {
            let s = k as f64 * step;
            (x0 + s * angle.cos(), y0 + s * angle.sin())
        })
        .collect()
}

#[test]
fn spacing_of_east_west_lines_flown_both_ways_with_ties() {
    // Lines 2300 m apart, alternately eastwards and westwards, wandering by a few metres; two
    // north-south tie lines across them.
    let mut lines = Vec::new();
    for k in 0..12 {
        let y = 2300.0 * k as f64;
        let mut l: Vec<(f64, f64)> = (0..800)
            .map(|i| {
                let x = 10.0 * i as f64;
                (x, y + 4.0 * (x / 700.0 + k as f64).sin())
            })
            .collect();
        if k % 2 == 1 {
            l.reverse();
        }
        lines.push(l);
    }
    lines.push(line(1000.0, 0.0, std::f64::consts::FRAC_PI_2, 2600, 10.0));
    lines.push(line(
        6000.0,
        25000.0,
        -std::f64::consts::FRAC_PI_2,
        2600,
        10.0,
    ));
    let s = line_spacing(&lines).expect("spacing");
    assert_abs_diff_eq!(s, 2300.0, epsilon = 1.0);
    assert_eq!(default_cell(Some(s)), 500.0);
    assert_abs_diff_eq!(default_blanking(Some(s)), 0.6 * s, epsilon = 1e-9);
}

#[test]
fn spacing_of_oblique_lines_with_a_repeated_and_a_missing_line() {
    // Lines at 30° north of east, 400 m apart across track; line 3 flown twice (two segments
    // of the same track), line 6 missing.
    let a = 30f64.to_radians();
    let (nx, ny) = (-a.sin(), a.cos());
    let mut lines = Vec::new();
    for k in [0, 1, 2, 3, 3, 4, 5, 7, 8, 9] {
        let off = 400.0 * k as f64;
        lines.push(line(off * nx, off * ny, a, 300, 10.0));
    }
    let s = line_spacing(&lines).expect("spacing");
    assert_abs_diff_eq!(s, 400.0, epsilon = 1e-6);
    assert_eq!(default_cell(Some(s)), 100.0);
    // 0.6 × 400 m = 240 m is under the floor.
    assert_eq!(default_blanking(Some(s)), MIN_BLANKING_M);
}

#[test]
fn no_spacing_from_one_line_or_none() {
    assert_eq!(line_spacing(&[]), None);
    assert_eq!(line_spacing(&[line(0.0, 0.0, 0.0, 100, 10.0)]), None);
    // Two segments of one track: no gap of a metre or more.
    let two = [
        line(0.0, 0.0, 0.0, 100, 10.0),
        line(0.0, 0.2, 0.0, 100, 10.0),
    ];
    assert_eq!(line_spacing(&two), None);
    assert_eq!(default_cell(None), FALLBACK_CELL_M);
    assert_eq!(default_blanking(None), MIN_BLANKING_M);
}

#[test]
fn default_cell_is_a_quarter_rounded_down_to_a_round_value() {
    for (spacing, cell) in [
        (200.0, 50.0),
        (250.0, 50.0),
        (400.0, 100.0),
        (1000.0, 250.0),
        (2300.0, 500.0),
        (3000.0, 500.0),
        (900.0, 200.0),
        (100.0, 25.0),
        (60.0, 10.0),
    ] {
        assert_eq!(default_cell(Some(spacing)), cell, "spacing {spacing}");
    }
    assert_eq!(default_cell(Some(f64::NAN)), FALLBACK_CELL_M);
    assert_eq!(default_cell(Some(-5.0)), FALLBACK_CELL_M);
}
