//! Crossovers: where a survey line crosses a tie line, and the difference of their values there.
//!
//! Each track is the polyline through its projected positions (m). Tie-line segments go into a
//! uniform grid of square cells (a segment is listed in every cell its bounding box touches); each
//! survey segment looks only at the tie segments listed in the cells its own bounding box touches, so
//! the cost grows with the number of segments, not with their product. Candidate pairs are tested with
//! the exact parametric segment intersection (p + t·r = q + u·s, solved with 2-D cross products;
//! parallel segments never cross). A crossing at a shared vertex is counted once (t and u are taken
//! in [0, 1), the last segment of a line closed at 1).
//!
//! At the crossing each line's value and time are interpolated linearly in the along-track parameter
//! of its segment. The crossover is survey − tie.
//!
//! A segment is not used when one of its end samples has a non-finite position, time or value, or
//! when it is longer than ten times its line's median segment length: such a segment spans a gap in
//! the data, and a value interpolated across it would be invented.

use crate::error::{LinesError, check_len};
use rayon::prelude::*;
use std::collections::HashMap;

/// One line's samples: time (s), projected position (m) and the value to compare (any unit; the
/// crossover is in the same unit).
#[derive(Clone, Copy, Debug)]
pub struct Track<'a> {
    pub time_s: &'a [f64],
    pub x_m: &'a [f64],
    pub y_m: &'a [f64],
    pub value: &'a [f64],
}

/// A crossing of survey line `survey` with tie line `tie` (indices into the slices given to
/// [`find_crossovers`]).
#[derive(Clone, Debug, PartialEq)]
pub struct Crossover {
    pub survey: usize,
    pub tie: usize,
    /// Position of the crossing, m, in the frame of the tracks.
    pub x_m: f64,
    pub y_m: f64,
    /// Fractional sample position on each line: segment index + parameter in [0, 1].
    pub survey_position: f64,
    pub tie_position: f64,
    /// Time of each line at the crossing, s.
    pub survey_time_s: f64,
    pub tie_time_s: f64,
    /// Value of each line at the crossing.
    pub survey_value: f64,
    pub tie_value: f64,
}

impl Crossover {
    /// Survey − tie, in the unit of the values.
    pub fn difference(&self) -> f64 {
        self.survey_value - self.tie_value
    }
}

const GAP_FACTOR: f64 = 10.0;

/// Usable segments of a track, as indices of their first sample.
fn usable_segments(t: &Track<'_>) -> Vec<usize> {
    let n = t.x_m.len();
    let ok = |i: usize| {
        t.x_m[i].is_finite()
            && t.y_m[i].is_finite()
            && t.time_s[i].is_finite()
            && t.value[i].is_finite()
    };
    let len = |i: usize| (t.x_m[i + 1] - t.x_m[i]).hypot(t.y_m[i + 1] - t.y_m[i]);
    let mut lengths: Vec<f64> = (0..n.saturating_sub(1))
        .filter(|&i| ok(i) && ok(i + 1))
        .map(len)
        .collect();
    if lengths.is_empty() {
        return Vec::new();
    }
    lengths.sort_by(f64::total_cmp);
    let longest = GAP_FACTOR * lengths[lengths.len() / 2];
    (0..n - 1)
        .filter(|&i| ok(i) && ok(i + 1) && len(i) <= longest)
        .collect()
}

fn median_segment(tracks: &[Track<'_>], segs: &[Vec<usize>]) -> f64 {
    let mut l: Vec<f64> = tracks
        .iter()
        .zip(segs)
        .flat_map(|(t, s)| {
            s.iter()
                .map(move |&i| (t.x_m[i + 1] - t.x_m[i]).hypot(t.y_m[i + 1] - t.y_m[i]))
        })
        .collect();
    if l.is_empty() {
        return 0.0;
    }
    l.sort_by(f64::total_cmp);
    l[l.len() / 2]
}

fn check_track(role: &str, k: usize, t: &Track<'_>) -> Result<(), LinesError> {
    let n = t.x_m.len();
    check_len(&format!("{role} line {k} y"), t.y_m, n)?;
    check_len(&format!("{role} line {k} time"), t.time_s, n)?;
    check_len(&format!("{role} line {k} value"), t.value, n)
}

/// Finds every crossing of a survey line with a tie line. The result is ordered by survey line, then
/// by position along it; it does not depend on the number of threads.
///
/// Errors: a track whose series have different lengths.
pub fn find_crossovers(
    survey: &[Track<'_>],
    ties: &[Track<'_>],
) -> Result<Vec<Crossover>, LinesError> {
    for (k, t) in survey.iter().enumerate() {
        check_track("survey", k, t)?;
    }
    for (k, t) in ties.iter().enumerate() {
        check_track("tie", k, t)?;
    }
    let tie_segs: Vec<Vec<usize>> = ties.iter().map(usable_segments).collect();
    let survey_segs: Vec<Vec<usize>> = survey.iter().map(usable_segments).collect();
    // Origin and cell size: positions are taken relative to the first usable tie sample so that
    // projected coordinates of 1e5–1e7 m do not cost precision in the cross products.
    let Some((origin_x, origin_y)) = ties
        .iter()
        .zip(&tie_segs)
        .find_map(|(t, s)| s.first().map(|&i| (t.x_m[i], t.y_m[i])))
    else {
        return Ok(Vec::new());
    };
    let typical = median_segment(ties, &tie_segs).max(median_segment(survey, &survey_segs));
    let cell = 4.0 * typical;
    if !(cell > 0.0 && cell.is_finite()) {
        return Ok(Vec::new());
    }
    let key = |v: f64, o: f64| ((v - o) / cell).floor() as i64;
    let mut index: HashMap<(i64, i64), Vec<(u32, u32)>> = HashMap::new();
    for (k, (t, segs)) in ties.iter().zip(&tie_segs).enumerate() {
        for &i in segs {
            let (x0, x1) = (t.x_m[i].min(t.x_m[i + 1]), t.x_m[i].max(t.x_m[i + 1]));
            let (y0, y1) = (t.y_m[i].min(t.y_m[i + 1]), t.y_m[i].max(t.y_m[i + 1]));
            for cx in key(x0, origin_x)..=key(x1, origin_x) {
                for cy in key(y0, origin_y)..=key(y1, origin_y) {
                    index
                        .entry((cx, cy))
                        .or_default()
                        .push((k as u32, i as u32));
                }
            }
        }
    }
    let per_line: Vec<Vec<Crossover>> = survey
        .par_iter()
        .zip(survey_segs.par_iter())
        .enumerate()
        .map(|(si, (s, segs))| {
            let mut found = Vec::new();
            let mut candidates: Vec<(u32, u32)> = Vec::new();
            for &i in segs {
                let (x0, x1) = (s.x_m[i].min(s.x_m[i + 1]), s.x_m[i].max(s.x_m[i + 1]));
                let (y0, y1) = (s.y_m[i].min(s.y_m[i + 1]), s.y_m[i].max(s.y_m[i + 1]));
                candidates.clear();
                for cx in key(x0, origin_x)..=key(x1, origin_x) {
                    for cy in key(y0, origin_y)..=key(y1, origin_y) {
                        if let Some(list) = index.get(&(cx, cy)) {
                            candidates.extend_from_slice(list);
                        }
                    }
                }
                candidates.sort_unstable();
                candidates.dedup();
                for &(tk, j) in &candidates {
                    let (tk, j) = (tk as usize, j as usize);
                    let t = &ties[tk];
                    if let Some(c) = intersect(s, i, t, j, (origin_x, origin_y)) {
                        found.push(Crossover {
                            survey: si,
                            tie: tk,
                            ..c
                        });
                    }
                }
            }
            found.sort_by(|a, b| {
                a.survey_position
                    .total_cmp(&b.survey_position)
                    .then(a.tie.cmp(&b.tie))
            });
            found
        })
        .collect();
    Ok(per_line.into_iter().flatten().collect())
}

/// Intersection of segment i of `s` with segment j of `t`, if any (line indices left at 0).
fn intersect(
    s: &Track<'_>,
    i: usize,
    t: &Track<'_>,
    j: usize,
    origin: (f64, f64),
) -> Option<Crossover> {
    let p = (s.x_m[i] - origin.0, s.y_m[i] - origin.1);
    let r = (s.x_m[i + 1] - s.x_m[i], s.y_m[i + 1] - s.y_m[i]);
    let q = (t.x_m[j] - origin.0, t.y_m[j] - origin.1);
    let sv = (t.x_m[j + 1] - t.x_m[j], t.y_m[j + 1] - t.y_m[j]);
    let cross = |a: (f64, f64), b: (f64, f64)| a.0 * b.1 - a.1 * b.0;
    let denom = cross(r, sv);
    let scale = (r.0.hypot(r.1)) * (sv.0.hypot(sv.1));
    if denom.abs() <= 1e-12 * scale || scale == 0.0 {
        return None;
    }
    let qp = (q.0 - p.0, q.1 - p.1);
    let tp = cross(qp, sv) / denom;
    let up = cross(qp, r) / denom;
    let last_s = i + 2 == s.x_m.len();
    let last_t = j + 2 == t.x_m.len();
    let inside = |v: f64, last: bool| v >= 0.0 && (v < 1.0 || (last && v <= 1.0));
    if !(inside(tp, last_s) && inside(up, last_t)) {
        return None;
    }
    let lerp = |a: &[f64], k: usize, f: f64| a[k] + f * (a[k + 1] - a[k]);
    Some(Crossover {
        survey: 0,
        tie: 0,
        x_m: origin.0 + p.0 + tp * r.0,
        y_m: origin.1 + p.1 + tp * r.1,
        survey_position: i as f64 + tp,
        tie_position: j as f64 + up,
        survey_time_s: lerp(s.time_s, i, tp),
        tie_time_s: lerp(t.time_s, j, up),
        survey_value: lerp(s.value, i, tp),
        tie_value: lerp(t.value, j, up),
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    #[test]
    fn two_diagonals_cross_at_the_centre() {
        // Segment (0,0)–(10,10) sampled every 1 m along x against (0,10)–(10,0): crossing at (5,5)
        // by symmetry; the values are linear in position, so interpolation is exact.
        let xs: Vec<f64> = (0..=10).map(|i| i as f64).collect();
        let ys = xs.clone();
        let yt: Vec<f64> = xs.iter().map(|x| 10.0 - x).collect();
        let time: Vec<f64> = xs.iter().map(|x| 100.0 + x).collect();
        let vs: Vec<f64> = xs.iter().map(|x| 2.0 * x).collect();
        let vt: Vec<f64> = xs.iter().map(|x| 3.0 * x + 1.0).collect();
        let s = Track {
            time_s: &time,
            x_m: &xs,
            y_m: &ys,
            value: &vs,
        };
        let t = Track {
            time_s: &time,
            x_m: &xs,
            y_m: &yt,
            value: &vt,
        };
        let c = find_crossovers(&[s], &[t]).unwrap();
        // The crossing falls on the shared vertex (5, 5): counted once.
        assert_eq!(c.len(), 1);
        assert_abs_diff_eq!(c[0].x_m, 5.0, epsilon = 1e-12);
        assert_abs_diff_eq!(c[0].y_m, 5.0, epsilon = 1e-12);
        assert_abs_diff_eq!(c[0].difference(), 10.0 - 16.0, epsilon = 1e-12);
        assert_abs_diff_eq!(c[0].survey_time_s, 105.0, epsilon = 1e-12);
    }
}
