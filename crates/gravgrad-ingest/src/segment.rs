//! Cutting a flight into survey lines: from the `line` column when the log has one, else found
//! from heading and straightness. Gaps always split a line into parts.

use gravgrad_core::table::FlightTable;
use gravgrad_core::units::wrap_deg_180;
use serde::{Deserialize, Serialize};

/// Mean Earth radius used only for the local metric of segmentation, m (IUGG mean radius R1,
/// Moritz 2000).
const EARTH_RADIUS_M: f64 = 6_371_008.8;

/// Settings of the automatic line finder (recipe `[input.line_finder]`).
#[derive(Clone, Copy, Debug, PartialEq, Deserialize, Serialize)]
#[serde(deny_unknown_fields, default)]
pub struct LineRules {
    /// A straight stretch shorter than this is not a line, s.
    pub min_duration_s: f64,
    /// Heading changing faster than this (averaged over `window_s`) is a turn, °/s.
    pub max_turn_rate_deg_s: f64,
    /// Averaging window of the turn rate, s.
    pub window_s: f64,
    /// A stretch whose path strays farther than this from its end-to-end chord is not straight, m.
    pub max_deviation_m: f64,
}

impl Default for LineRules {
    fn default() -> Self {
        Self {
            min_duration_s: 60.0,
            max_turn_rate_deg_s: 0.5,
            window_s: 10.0,
            max_deviation_m: 100.0,
        }
    }
}

/// A contiguous stretch of one line with no gap inside.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Segment {
    /// Line number (from the log, or 1, 2, … in time order when found automatically).
    pub line: i64,
    /// 1 for the first stretch of a line; 2, 3, … when gaps or turns split it.
    pub part: u32,
    /// Table indices `start..end`.
    pub start: usize,
    pub end: usize,
    pub start_s: f64,
    pub end_s: f64,
    /// Direction of the chord from first to last position, degrees clockwise from true north.
    pub track_deg: f64,
    /// Length of that chord, m.
    pub length_m: f64,
    /// Largest distance of the path from the chord, m.
    pub max_deviation_m: f64,
    pub found_automatically: bool,
}

/// Cuts the flight into line segments; `breaks` are table indices where a gap ends.
pub fn segment_lines(table: &FlightTable, breaks: &[usize], rules: &LineRules) -> Vec<Segment> {
    let (Some(t), Some(lat), Some(lon)) = (table.get("time"), table.get("lat"), table.get("lon"))
    else {
        return vec![];
    };
    let n = t.len();
    let mut is_break = vec![false; n + 1];
    for &b in breaks {
        if b <= n {
            is_break[b] = true;
        }
    }
    let geo = Geometry::new(t, lat, lon);
    let mut out = Vec::new();
    if let Some(lines) = &table.line {
        let mut start = 0;
        for i in 1..=n {
            if i == n || lines[i] != lines[start] || is_break[i] {
                if lines[start] > 0 && i - start >= 2 {
                    let part = out
                        .iter()
                        .filter(|s: &&Segment| s.line == lines[start])
                        .count() as u32
                        + 1;
                    out.push(geo.segment(lines[start], part, start, i, false));
                }
                start = i;
            }
        }
        return out;
    }
    let Some(heading) = table.get("heading") else {
        return vec![];
    };
    let rate_hz = if n > 1 {
        (n - 1) as f64 / (t[n - 1] - t[0]).max(1e-9)
    } else {
        1.0
    };
    let half = ((rules.window_s * rate_hz / 2.0).round() as usize).max(1);
    let mut unwrapped = Vec::with_capacity(n);
    let mut acc = 0.0;
    for i in 0..n {
        if i == 0 || is_break[i] {
            acc = heading[i];
        } else {
            acc += wrap_deg_180(heading[i] - heading[i - 1]);
        }
        unwrapped.push(acc);
    }
    // Pieces between breaks; inside each, the straight runs.
    let mut bounds: Vec<usize> = std::iter::once(0)
        .chain((1..n).filter(|&i| is_break[i]))
        .chain(std::iter::once(n))
        .collect();
    bounds.dedup();
    let mut number = 0i64;
    for w in bounds.windows(2) {
        let (a, b) = (w[0], w[1]);
        let straight: Vec<bool> = (a..b)
            .map(|i| {
                let j1 = i.saturating_sub(half).max(a);
                let j2 = (i + half).min(b - 1);
                let dt = t[j2] - t[j1];
                dt > 0.0
                    && ((unwrapped[j2] - unwrapped[j1]) / dt).abs() <= rules.max_turn_rate_deg_s
            })
            .collect();
        let mut k = 0;
        while k < straight.len() {
            if !straight[k] {
                k += 1;
                continue;
            }
            let s = k;
            while k < straight.len() && straight[k] {
                k += 1;
            }
            let (i0, i1) = (a + s, a + k);
            if t[i1 - 1] - t[i0] >= rules.min_duration_s {
                let seg = geo.segment(0, 1, i0, i1, true);
                if seg.max_deviation_m <= rules.max_deviation_m {
                    number += 1;
                    out.push(Segment {
                        line: number,
                        ..seg
                    });
                }
            }
        }
    }
    out
}

/// Local flat-earth coordinates for the geometry of segments.
struct Geometry<'a> {
    t: &'a [f64],
    north: Vec<f64>,
    east: Vec<f64>,
}

impl<'a> Geometry<'a> {
    fn new(t: &'a [f64], lat: &[f64], lon: &[f64]) -> Self {
        let lat0 = lat.first().copied().unwrap_or(0.0);
        let lon0 = lon.first().copied().unwrap_or(0.0);
        let k = EARTH_RADIUS_M * std::f64::consts::PI / 180.0;
        let c = lat0.to_radians().cos();
        let north = lat.iter().map(|v| (v - lat0) * k).collect();
        let east = lon.iter().map(|v| wrap_deg_180(v - lon0) * k * c).collect();
        Self { t, north, east }
    }

    fn segment(&self, line: i64, part: u32, start: usize, end: usize, auto: bool) -> Segment {
        let (n0, e0) = (self.north[start], self.east[start]);
        let (dn, de) = (self.north[end - 1] - n0, self.east[end - 1] - e0);
        let len = (dn * dn + de * de).sqrt();
        let max_dev = if len > 0.0 {
            (start..end)
                .map(|i| ((self.north[i] - n0) * de - (self.east[i] - e0) * dn).abs() / len)
                .fold(0.0, f64::max)
        } else {
            0.0
        };
        Segment {
            line,
            part,
            start,
            end,
            start_s: self.t[start],
            end_s: self.t[end - 1],
            track_deg: de.atan2(dn).to_degrees().rem_euclid(360.0),
            length_m: len,
            max_deviation_m: max_dev,
            found_automatically: auto,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_abs_diff_eq;

    /// A flight at 10 Hz and 60 m/s: east for 120 s, a 180° turn at 3°/s, west for 120 s.
    fn racetrack() -> FlightTable {
        let (mut t, mut lat, mut lon, mut hdg) = (vec![], vec![], vec![], vec![]);
        let k = 1.0 / (EARTH_RADIUS_M * std::f64::consts::PI / 180.0);
        let (mut n, mut e, mut h) = (0.0, 0.0, 90.0f64);
        for i in 0..3000 {
            let time = i as f64 * 0.1;
            let turning = (120.0..180.0).contains(&time);
            if turning {
                h += 0.3;
            }
            n += 6.0 * h.to_radians().cos();
            e += 6.0 * h.to_radians().sin();
            t.push(1.4e9 + time);
            lat.push(-30.0 + n * k);
            lon.push(135.0 + e * k / (-30f64).to_radians().cos());
            hdg.push(h.rem_euclid(360.0));
        }
        let mut tab = FlightTable::new();
        tab.insert("time", t).unwrap();
        tab.insert("lat", lat).unwrap();
        tab.insert("lon", lon).unwrap();
        tab.insert("heading", hdg).unwrap();
        tab
    }

    #[test]
    fn finds_two_lines_around_a_turn() {
        let segs = segment_lines(&racetrack(), &[], &LineRules::default());
        assert_eq!(segs.len(), 2, "{segs:?}");
        // Geometry known from construction: about 120 s east (track 90°), then west (270°).
        assert_abs_diff_eq!(segs[0].track_deg, 90.0, epsilon = 1.0);
        assert_abs_diff_eq!(segs[1].track_deg, 270.0, epsilon = 1.0);
        assert!(segs[0].end_s - segs[0].start_s > 110.0);
        assert_abs_diff_eq!(
            segs[0].length_m,
            6.0 * 10.0 * (segs[0].end_s - segs[0].start_s),
            epsilon = 60.0
        );
    }

    #[test]
    fn gaps_split_a_numbered_line() {
        let mut tab = racetrack();
        tab.line = Some(
            (0..3000)
                .map(|i| {
                    if i < 1200 {
                        101
                    } else if i < 1800 {
                        0
                    } else {
                        102
                    }
                })
                .collect(),
        );
        let segs = segment_lines(&tab, &[600], &LineRules::default());
        let ids: Vec<(i64, u32)> = segs.iter().map(|s| (s.line, s.part)).collect();
        assert_eq!(ids, vec![(101, 1), (101, 2), (102, 1)]);
        assert_eq!((segs[0].start, segs[0].end, segs[1].start), (0, 600, 600));
    }
}
