//! The per-sample tensor solve, rotation-term removal and rotation to NED.

use crate::first_touch::filled;
use crate::gyro::angular_acceleration3;
use gravgrad_core::SymTensor;
use gravgrad_core::attitude::c_sn_degrees_span;
use gravgrad_core::mat3::{self, Mat3, Vec3};
use gravgrad_core::pairs::{AlphaSource, PairGeometry, UNKNOWNS, observability, pseudo_inverse};
use rayon::prelude::*;

/// How to solve.
#[derive(Clone, Debug, PartialEq)]
pub struct SolveSettings {
    pub alpha: AlphaSource,
    pub trace_constraint: bool,
    /// Cutoff of the gyro low-pass before differentiation, Hz.
    pub gyro_lowpass_hz: f64,
    /// Components that must come out (`Gxx` … `Gzz`); the solve refuses if one is not observable.
    pub components: Vec<String>,
}

/// Writes a span of a pair's calibrated `a` output: (the span's first sample, the logged `a` over
/// the span, the calibrated values out), m/s².
pub type SpanCorrection<'a> = dyn Fn(usize, &[f64], &mut [f64]) + Sync + 'a;

/// One pair's outputs (m/s²) with its geometry.
pub struct PairSeries<'a> {
    pub geometry: &'a PairGeometry,
    /// The `a` output: calibrated, or as logged when `correction` is given.
    pub a: &'a [f64],
    pub b: &'a [f64],
    /// The calibration of `a`, applied span by span as the solve reads it (no calibrated series is
    /// kept); `None`: `a` is calibrated already.
    pub correction: Option<&'a SpanCorrection<'a>>,
}

/// Everything the solve reads, on one time base.
pub struct Inputs<'a> {
    pub pairs: Vec<PairSeries<'a>>,
    /// Inertial angular rate, sensor axes, rad/s.
    pub omega: [&'a [f64]; 3],
    /// Attitude of the sensor frame in NED, degrees.
    pub roll_deg: &'a [f64],
    pub pitch_deg: &'a [f64],
    pub heading_deg: &'a [f64],
    pub rate_hz: f64,
    /// The gyro-derived angular acceleration (sensor axes, rad/s²) when the caller has it already
    /// (low-passed at `SolveSettings::gyro_lowpass_hz`); `None`: computed here.
    pub alpha_gyro: Option<[&'a [f64]; 3]>,
}

/// Why a solve cannot be done.
#[derive(Debug, thiserror::Error, PartialEq)]
pub enum RotationError {
    #[error("the pair set cannot observe {} (blind combinations: {})", .missing.join(", "), .blind.join("; "))]
    Unobservable {
        missing: Vec<String>,
        blind: Vec<String>,
    },
    #[error("`{name}` has {got} samples where the angular rates have {want}")]
    Length {
        name: String,
        got: usize,
        want: usize,
    },
    #[error("no pairs to solve from")]
    NoPairs,
}

/// The solved tensor per sample, and the QC series.
#[derive(Clone, Debug)]
pub struct Solution {
    /// Gradient tensor in NED, s⁻²; NaN in components the pair set does not observe.
    pub tensor_ned: Vec<SymTensor>,
    /// What the pairs give, sensor frame, s⁻²: S = sym(G_s − ΩΩ), formed as G_s less ΩΩ with
    /// G_s = S + ΩΩ (ΩΩ = ωωᵀ − |ω|²I).
    pub measured: Vec<SymTensor>,
    /// Angular acceleration from the pairs, rad/s², when they see it.
    pub alpha_pairs: Option<Vec<Vec3>>,
    /// Trace of G from the solve without the trace constraint (QC), s⁻²; NaN where not observable.
    pub trace: Vec<f64>,
    /// Which of Gxx Gxy Gxz Gyy Gyz Gzz are given.
    pub observed: [bool; 6],
    /// True when only the heading rotates the tensor into NED (partial instruments; the error this
    /// leaves is at most |Gxz, Gyz|·max(|roll|, |pitch|)).
    pub heading_only: bool,
}

/// Solves every sample.
pub fn solve(inp: &Inputs<'_>, s: &SolveSettings) -> Result<Solution, RotationError> {
    if inp.pairs.is_empty() {
        return Err(RotationError::NoPairs);
    }
    let n = inp.omega[0].len();
    let mut series: Vec<(String, usize)> = vec![
        ("wy".into(), inp.omega[1].len()),
        ("wz".into(), inp.omega[2].len()),
        ("roll".into(), inp.roll_deg.len()),
        ("pitch".into(), inp.pitch_deg.len()),
        ("heading".into(), inp.heading_deg.len()),
    ];
    for p in &inp.pairs {
        series.push((format!("{}_a", p.geometry.id), p.a.len()));
        series.push((format!("{}_b", p.geometry.id), p.b.len()));
    }
    if let Some((name, got)) = series.into_iter().find(|x| x.1 != n) {
        return Err(RotationError::Length { name, got, want: n });
    }
    let geoms: Vec<PairGeometry> = inp.pairs.iter().map(|p| p.geometry.clone()).collect();
    let obs = observability(&geoms, s.alpha, s.trace_constraint);
    let missing: Vec<String> = s
        .components
        .iter()
        .filter(|c| !obs.sees(c))
        .cloned()
        .collect();
    if !missing.is_empty() {
        return Err(RotationError::Unobservable {
            missing,
            blind: obs.blind_combinations.clone(),
        });
    }
    let observed: [bool; 6] = std::array::from_fn(|i| obs.sees(UNKNOWNS[i]));

    let with_alpha = s.alpha == AlphaSource::Pairs;
    let k_full = if with_alpha { 9 } else { 6 };
    let rows: Vec<[f64; 9]> = geoms.iter().map(PairGeometry::design_row).collect();
    // Constrained design: Szz eliminated by Szz = 2|ω|² − Sxx − Syy.
    let reduce = |r: &[f64; 9]| -> Vec<f64> {
        let mut v: Vec<f64> = r[..k_full].to_vec();
        if s.trace_constraint {
            v[0] -= r[5];
            v[3] -= r[5];
            v.remove(5);
        }
        v
    };
    let op = pseudo_inverse(
        &rows.iter().map(reduce).collect::<Vec<_>>(),
        if s.trace_constraint {
            k_full - 1
        } else {
            k_full
        },
    );
    let op_free = s.trace_constraint.then(|| {
        pseudo_inverse(
            &rows
                .iter()
                .map(|r| r[..k_full].to_vec())
                .collect::<Vec<_>>(),
            k_full,
        )
    });

    let computed: [Vec<f64>; 3];
    let alpha_g: [&[f64]; 3] = match inp.alpha_gyro {
        Some(a) => a,
        None => {
            computed = angular_acceleration3(inp.omega, inp.rate_hz, s.gyro_lowpass_hz);
            [&computed[0], &computed[1], &computed[2]]
        }
    };
    if let Some((name, got)) = alpha_g
        .iter()
        .map(|a| ("alpha_gyro", a.len()))
        .find(|x| x.1 != n)
    {
        return Err(RotationError::Length {
            name: name.into(),
            got,
            want: n,
        });
    }
    let full_rotation = observed.iter().all(|o| *o);

    // The samples go in spans: the pair values and the unknowns of a span are kept pair by pair
    // and unknown by unknown, so that the products P·y run across the span's samples at once
    // (vectorised) while every sample's sum still adds its terms in pair order, as a sample-by-sample
    // sum would. Per-worker scratch, reused; the four results go straight into their own series.
    const SPAN: usize = 256;
    let np = inp.pairs.len();
    let nu = op.p.len();
    let nf = op_free.as_ref().map_or(0, |f| f.p.len());
    let mut tensor_ned = filled(n, SymTensor::default());
    let mut measured = filled(n, SymTensor::default());
    let mut alpha_pairs = filled(if with_alpha { n } else { 0 }, [f64::NAN; 3]);
    let mut trace = filled(n, 0.0);
    let mut alpha_chunks: Vec<&mut [Vec3]> = alpha_pairs.chunks_mut(SPAN).collect();
    alpha_chunks.resize_with(n.div_ceil(SPAN), Default::default);
    tensor_ned
        .par_chunks_mut(SPAN)
        .zip(measured.par_chunks_mut(SPAN))
        .zip(alpha_chunks)
        .zip(trace.par_chunks_mut(SPAN))
        .enumerate()
        .for_each_init(
            || {
                (
                    vec![0.0; SPAN],
                    vec![0.0; np * SPAN],
                    vec![0.0; np * SPAN],
                    vec![0.0; nu * SPAN],
                    vec![0.0; nf * SPAN],
                    vec![0.0; SPAN],
                    vec![[[0.0; 3]; 3]; if full_rotation { SPAN } else { 0 }],
                    vec![0.0; 6 * SPAN],
                    vec![0.0; 6 * SPAN],
                    vec![0.0; 6 * SPAN],
                )
            },
            |(w2s, ys, ycons, us, ufs, cas, cs, wws, svs, gss),
             (q, (((ned_out, sensor_out), alpha_out), trace_out))| {
                let i0 = q * SPAN;
                let m = ned_out.len();
                for (k, w2) in w2s[..m].iter_mut().enumerate() {
                    let i = i0 + k;
                    let w = [inp.omega[0][i], inp.omega[1][i], inp.omega[2][i]];
                    *w2 = w[0] * w[0] + w[1] * w[1] + w[2] * w[2];
                }
                for (p, (ps, r)) in inp.pairs.iter().zip(&rows).enumerate() {
                    let (y, y_con) = (
                        &mut ys[p * SPAN..p * SPAN + m],
                        &mut ycons[p * SPAN..p * SPAN + m],
                    );
                    let a: &[f64] = match ps.correction {
                        Some(correct) => {
                            correct(i0, &ps.a[i0..i0 + m], &mut cas[..m]);
                            &cas[..m]
                        }
                        None => &ps.a[i0..i0 + m],
                    };
                    // Term by term across the span (vectorised).
                    for ((yk, ak), bk) in y.iter_mut().zip(a).zip(&ps.b[i0..i0 + m]) {
                        *yk = -(ak - bk);
                    }
                    if !with_alpha {
                        let al = [
                            &alpha_g[0][i0..i0 + m],
                            &alpha_g[1][i0..i0 + m],
                            &alpha_g[2][i0..i0 + m],
                        ];
                        for (k, yk) in y.iter_mut().enumerate() {
                            *yk -= r[6] * al[0][k] + r[7] * al[1][k] + r[8] * al[2][k];
                        }
                    }
                    if s.trace_constraint {
                        for ((c, v), w2) in y_con.iter_mut().zip(y.iter()).zip(&w2s[..m]) {
                            *c = v - r[5] * 2.0 * w2;
                        }
                    }
                }
                // u_j = Σ_p P_jp·y_p, the terms added in pair order from −0 (as `Iterator::sum`);
                // entries of P that are exactly zero (most, for pairs along the sensor axes) are
                // skipped.
                let product = |pm: &[Vec<f64>], y: &[f64], u: &mut [f64]| {
                    for (j, row) in pm.iter().enumerate() {
                        let uj = &mut u[j * SPAN..j * SPAN + m];
                        uj.fill(-0.0);
                        for (p, pj) in row.iter().enumerate().filter(|(_, pj)| **pj != 0.0) {
                            for (a, yv) in uj.iter_mut().zip(&y[p * SPAN..p * SPAN + m]) {
                                *a += pj * yv;
                            }
                        }
                    }
                };
                if full_rotation {
                    let r = i0..i0 + m;
                    c_sn_degrees_span(
                        &inp.roll_deg[r.clone()],
                        &inp.pitch_deg[r.clone()],
                        &inp.heading_deg[r],
                        &mut cs[..m],
                    );
                }
                // Without the trace constraint the constrained values are the values themselves.
                product(&op.p, if s.trace_constraint { ycons } else { ys }, us);
                if let Some(f) = &op_free {
                    product(&f.p, ys, ufs);
                }
                // Component by component across the span (vectorised): ΩΩ = ωωᵀ − |ω|²I; S with
                // NaN where not observed (Szz = 2|ω|² − Sxx − Syy under the trace constraint);
                // G_s = S + ΩΩ.
                let w = [
                    &inp.omega[0][i0..i0 + m],
                    &inp.omega[1][i0..i0 + m],
                    &inp.omega[2][i0..i0 + m],
                ];
                let w2 = &w2s[..m];
                for (c, (a, b)) in [(0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2)]
                    .into_iter()
                    .enumerate()
                {
                    let out = &mut wws[c * SPAN..c * SPAN + m];
                    let (wa, wb) = (w[a], w[b]);
                    if a == b {
                        for k in 0..m {
                            out[k] = wa[k] * wb[k] - w2[k];
                        }
                    } else {
                        for k in 0..m {
                            out[k] = wa[k] * wb[k];
                        }
                    }
                }
                let given = if s.trace_constraint { 5 } else { 6 };
                for c in 0..given {
                    let out = &mut svs[c * SPAN..c * SPAN + m];
                    if op.observed[c] {
                        out.copy_from_slice(&us[c * SPAN..c * SPAN + m]);
                    } else {
                        out.fill(f64::NAN);
                    }
                }
                if s.trace_constraint {
                    let (head, zz) = svs.split_at_mut(5 * SPAN);
                    let (xx, yy) = (&head[..m], &head[3 * SPAN..3 * SPAN + m]);
                    for k in 0..m {
                        zz[k] = 2.0 * w2[k] - xx[k] - yy[k];
                    }
                }
                for c in 0..6 {
                    let (sv, ww) = (&svs[c * SPAN..c * SPAN + m], &wws[c * SPAN..c * SPAN + m]);
                    let g = &mut gss[c * SPAN..c * SPAN + m];
                    for k in 0..m {
                        g[k] = sv[k] + ww[k];
                    }
                }
                let comp = |v: &[f64], c: usize, k: usize| v[c * SPAN + k];
                match &op_free {
                    Some(f) if f.observed[0] && f.observed[3] && f.observed[5] => {
                        for (k, t) in trace_out.iter_mut().enumerate() {
                            *t = comp(ufs, 0, k) + comp(ufs, 3, k) + comp(ufs, 5, k) - 2.0 * w2[k];
                        }
                    }
                    Some(_) => trace_out.fill(f64::NAN),
                    None => {
                        for (k, t) in trace_out.iter_mut().enumerate() {
                            *t = comp(gss, 0, k) + comp(gss, 3, k) + comp(gss, 5, k);
                        }
                    }
                }
                for (k, out) in sensor_out.iter_mut().enumerate() {
                    *out = SymTensor::from_array(std::array::from_fn(|c| {
                        comp(gss, c, k) - comp(wws, c, k)
                    }));
                }
                for (k, out) in ned_out.iter_mut().enumerate() {
                    let gs = SymTensor::from_array(std::array::from_fn(|c| comp(gss, c, k)));
                    *out = if full_rotation {
                        gs.congruence(&cs[k])
                    } else {
                        rotate_heading_only(&gs, inp.heading_deg[i0 + k].to_radians())
                    };
                }
                if with_alpha {
                    let first = if s.trace_constraint { 5 } else { 6 };
                    for (k, out) in alpha_out.iter_mut().enumerate() {
                        *out = std::array::from_fn(|a| {
                            let j = first + a;
                            if op.observed[j] {
                                comp(us, j, k)
                            } else {
                                f64::NAN
                            }
                        });
                    }
                }
            },
        );
    Ok(Solution {
        tensor_ned,
        measured,
        alpha_pairs: with_alpha.then_some(alpha_pairs),
        trace,
        observed,
        heading_only: !full_rotation,
    })
}

/// Rz(ψ)·G·Rz(ψ)ᵀ, keeping the horizontal block (xx, xy, yy), the vertical pair (xz, yz) and zz
/// apart so that an unobserved component spoils only its own block.
fn rotate_heading_only(g: &SymTensor, heading: f64) -> SymTensor {
    let (s, c) = heading.sin_cos();
    let r: Mat3 = [[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]];
    let horiz = SymTensor {
        xz: 0.0,
        yz: 0.0,
        zz: 0.0,
        ..*g
    }
    .rotated(&r);
    let vert_in = mat3::mul_vec(&r, &[g.xz, g.yz, 0.0]);
    SymTensor {
        xx: horiz.xx,
        xy: horiz.xy,
        yy: horiz.yy,
        xz: vert_in[0],
        yz: vert_in[1],
        zz: g.zz,
    }
}
