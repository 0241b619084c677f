//! Merging a navigation table sampled at a lower rate onto the gradiometer's time base.
//!
//! Positions, heights, rates and forces are interpolated linearly in time; attitude angles along
//! the shortest arc, so that a heading crossing north (359° → 1°) passes through 0°, not 180°.
//! Nothing is extrapolated, and no interpolation spans a navigation gap longer than the stated limit.

use crate::layout::{self, Quantity};
use crate::read::Flight;
use crate::sink::Sink;
use gravgrad_core::units::wrap_deg_180;
use gravgrad_core::{Location, Problem};

/// Interpolates `nav`'s columns at `target`'s times and puts them into `target`'s table. Columns the
/// target already had are replaced (with a warning). Every sample outside the navigation table's span
/// or inside a gap longer than `max_gap_s` is an error located at the target's row; such samples
/// become NaN.
pub fn merge_navigation(target: &mut Flight, nav: &Flight, max_gap_s: f64) -> Vec<Problem> {
    let mut problems = Vec::new();
    let (Some(tt), Some(tn)) = (target.table.get("time"), nav.table.get("time")) else {
        return problems;
    };
    let tt = tt.to_vec();
    let tn = tn.to_vec();
    if tn.len() < 2 {
        problems.push(Problem::error(
            nav.source.clone(),
            "the navigation table needs at least two rows",
        ));
        return problems;
    }
    // Bracketing interval for each target time (nav time is validated as increasing).
    let mut sink = Sink::new();
    let mut idx: Vec<Option<(usize, f64)>> = Vec::with_capacity(tt.len());
    let mut j = 0usize;
    let (first, last) = (tn[0], tn[tn.len() - 1]);
    for (i, &t) in tt.iter().enumerate() {
        if !(t >= first && t <= last) {
            sink.add("nav-span", "time", i as u64, || {
                Problem::error(
                    Location::default().with_column("time"),
                    format!("time {t} is outside the navigation table's span {first} to {last}"),
                )
                .with_hint(format!(
                    "the navigation table {} must cover the whole log",
                    nav.source
                ))
            });
            idx.push(None);
            continue;
        }
        while j + 2 < tn.len() && tn[j + 1] < t {
            j += 1;
        }
        while j > 0 && tn[j] > t {
            j -= 1;
        }
        let (a, b) = (tn[j], tn[j + 1]);
        if b - a > max_gap_s && t != a && t != b {
            sink.add("nav-gap", "time", i as u64, || {
                Problem::error(
                    Location::default().with_column("time"),
                    format!("time {t} falls in a {:.3} s gap of the navigation table (from {a} to {b})", b - a),
                )
                .with_hint(format!("longer than `input.navigation_max_gap_s` = {max_gap_s} s; samples there are not interpolated"))
            });
            idx.push(None);
            continue;
        }
        idx.push(Some((j, (t - a) / (b - a))));
    }
    problems.extend(sink.into_problems(&target.source, target.first_row));

    let names: Vec<String> = nav
        .table
        .names()
        .iter()
        .filter(|n| *n != "time")
        .cloned()
        .collect();
    for name in names {
        let Some(src) = nav.table.get(&name) else {
            continue;
        };
        let quantity = layout::column_def(&name).map(|d| d.quantity);
        let compass = matches!(name.as_str(), "heading" | "ac_heading");
        let values: Vec<f64> = idx
            .iter()
            .map(|w| match w {
                None => f64::NAN,
                Some((j, f)) => {
                    let (a, b) = (src[*j], src[*j + 1]);
                    if quantity == Some(Quantity::Angle) {
                        let v = a + f * wrap_deg_180(b - a);
                        if compass {
                            v.rem_euclid(360.0)
                        } else {
                            wrap_deg_180(v)
                        }
                    } else {
                        a + f * (b - a)
                    }
                }
            })
            .collect();
        if target.table.get(&name).is_some() {
            problems.push(Problem::warning(
                target.source.clone().with_column(name.clone()),
                format!("column also in the navigation table {}; the navigation table's values are used", nav.source),
            ));
        }
        if let Err(e) = target.table.insert(&name, values) {
            problems.push(Problem::error(
                target.source.clone().with_column(name.clone()),
                e.to_string(),
            ));
        }
    }
    problems
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::columns::ReadPlan;
    use crate::read::Format;
    use approx::assert_abs_diff_eq;
    use gravgrad_core::table::FlightTable;

    fn flight(cols: &[(&str, Vec<f64>)]) -> Flight {
        let mut t = FlightTable::new();
        for (n, v) in cols {
            t.insert(n, v.clone()).unwrap();
        }
        Flight {
            source: Location::file("x"),
            format: Format::Csv,
            table: t,
            plan: ReadPlan::default(),
            first_row: 2,
        }
    }

    #[test]
    fn heading_crosses_north_by_the_short_way() {
        let nav = flight(&[
            ("time", vec![0.0, 1.0]),
            ("heading", vec![359.0, 1.0]),
            ("roll", vec![179.0, -179.0]),
            ("lat", vec![10.0, 11.0]),
        ]);
        let mut g = flight(&[("time", vec![0.25, 0.5, 0.75])]);
        let p = merge_navigation(&mut g, &nav, 2.0);
        assert!(p.is_empty(), "{p:?}");
        let h = g.table.get("heading").unwrap();
        // Shortest arc: 359.5, 0.0, 0.5 (not 269.5 / 180 / 90.5 as plain linear interpolation gives).
        assert_abs_diff_eq!(h, &[359.5, 0.0, 0.5][..], epsilon = 1e-12);
        let r = g.table.get("roll").unwrap();
        assert_abs_diff_eq!(r[1], -180.0, epsilon = 1e-12);
        assert_abs_diff_eq!(r[0], 179.5, epsilon = 1e-12);
        assert_eq!(g.table.get("lat").unwrap(), &[10.25, 10.5, 10.75]);
    }

    #[test]
    fn samples_outside_or_in_a_gap_are_errors_with_rows() {
        let nav = flight(&[
            ("time", vec![0.0, 1.0, 5.0, 6.0]),
            ("lat", vec![0.0, 1.0, 5.0, 6.0]),
        ]);
        let mut g = flight(&[("time", vec![0.5, 2.0, 5.5, 7.0])]);
        let p = merge_navigation(&mut g, &nav, 1.5);
        let rows: Vec<u64> = p.iter().filter_map(|p| p.location.row).collect();
        assert_eq!(rows, vec![3, 5]); // CSV numbering: index 1 → row 3, index 3 → row 5
        assert!(g.table.get("lat").unwrap()[1].is_nan());
    }
}
