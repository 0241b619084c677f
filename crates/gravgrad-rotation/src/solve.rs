//! The per-sample tensor solve, rotation-term removal and rotation to NED.

use crate::first_touch::filled;
use crate::gyro::angular_acceleration3;
use gravgrad_core::SymTensor;
use gravgrad_core::attitude::c_sn_degrees_span;
use gravgrad_core::mat3::{self, Mat3, Vec3};
use gravgrad_core::pairs::{
    AlphaSource, Operator, PairGeometry, UNKNOWNS, observability, pseudo_inverse,
};
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
///
/// The steps: the series' lengths checked; the components asked for checked observable; the
/// pseudo-inverses of the (constrained and free) design; the gyro angular acceleration; then
/// every span of samples solved (`SpanSolver`).
pub fn solve(inp: &Inputs<'_>, s: &SolveSettings) -> Result<Solution, RotationError> {
    if inp.pairs.is_empty() {
        return Err(RotationError::NoPairs);
    }
    let n = inp.omega[0].len();
    check_lengths(inp, n)?;
    let geoms: Vec<PairGeometry> = inp.pairs.iter().map(|p| p.geometry.clone()).collect();
    let observed = observed_components(&geoms, s)?;
    let with_alpha = s.alpha == AlphaSource::Pairs;
    let rows: Vec<[f64; 9]> = geoms.iter().map(PairGeometry::design_row).collect();
    let (op, op_free) = operators(&rows, with_alpha, s.trace_constraint);
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
    let solver = SpanSolver {
        inp,
        trace_constraint: s.trace_constraint,
        with_alpha,
        rows,
        op,
        op_free,
        alpha_g,
        full_rotation,
    };
    let (tensor_ned, measured, alpha_pairs, trace) = solver.solve_all(n);
    Ok(Solution {
        tensor_ned,
        measured,
        alpha_pairs: with_alpha.then_some(alpha_pairs),
        trace,
        observed,
        heading_only: !full_rotation,
    })
}

/// Checks that every series of `inp` has the `n` samples of the angular rate's x component.
fn check_lengths(inp: &Inputs<'_>, n: usize) -> Result<(), RotationError> {
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
    match series.into_iter().find(|x| x.1 != n) {
        Some((name, got)) => Err(RotationError::Length { name, got, want: n }),
        None => Ok(()),
    }
}

/// Which of Gxx Gxy Gxz Gyy Gyz Gzz the pair set `geoms` observes under the settings; an error
/// when a component the settings ask for is not among them.
fn observed_components(
    geoms: &[PairGeometry],
    s: &SolveSettings,
) -> Result<[bool; 6], RotationError> {
    let obs = observability(geoms, s.alpha, s.trace_constraint);
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
    Ok(std::array::from_fn(|i| obs.sees(UNKNOWNS[i])))
}

/// The pseudo-inverses of the design `rows` (m; unknowns S in s⁻² and, `with_alpha`, α in rad/s²):
/// the one the solve uses (with the trace constraint, Szz eliminated by Szz = 2|ω|² − Sxx − Syy)
/// and, under the constraint, the free one whose trace is the QC series.
fn operators(
    rows: &[[f64; 9]],
    with_alpha: bool,
    trace_constraint: bool,
) -> (Operator, Option<Operator>) {
    let k_full = if with_alpha { 9 } else { 6 };
    let reduce = |r: &[f64; 9]| -> Vec<f64> {
        let mut v: Vec<f64> = r[..k_full].to_vec();
        if trace_constraint {
            v[0] -= r[5];
            v[3] -= r[5];
            v.remove(5);
        }
        v
    };
    let op = pseudo_inverse(
        &rows.iter().map(reduce).collect::<Vec<_>>(),
        if trace_constraint { k_full - 1 } else { k_full },
    );
    let op_free = trace_constraint.then(|| {
        pseudo_inverse(
            &rows
                .iter()
                .map(|r| r[..k_full].to_vec())
                .collect::<Vec<_>>(),
            k_full,
        )
    });
    (op, op_free)
}

/// Samples per span: the unit of the solve's work and scratch.
const SPAN: usize = 256;

/// The six components xx xy xz yy yz zz of a symmetric tensor as (row, column) pairs.
const COMPONENTS: [(usize, usize); 6] = [(0, 0), (0, 1), (0, 2), (1, 1), (1, 2), (2, 2)];

/// Component `c` of sample `k` in a span buffer laid out component by component, `SPAN` apart.
fn comp(v: &[f64], c: usize, k: usize) -> f64 {
    v[c * SPAN + k]
}

/// u_j = Σ_p P_jp·y_p for the first `m` samples of a span, each unknown's series `u[j·SPAN..]`
/// from the pairs' series `y[p·SPAN..]`, the terms added in pair order from −0 (as
/// `Iterator::sum`); entries of P that are exactly zero (most, for pairs along the sensor axes) are
/// skipped. Units: P in m⁻¹, y in m/s², u in s⁻² (or rad/s²).
fn product(pm: &[Vec<f64>], y: &[f64], u: &mut [f64], m: usize) {
    for (j, row) in pm.iter().enumerate() {
        let uj = &mut u[j * SPAN..j * SPAN + m];
        uj.fill(-0.0);
        for (p, pj) in row.iter().enumerate().filter(|(_, pj)| **pj != 0.0) {
            for (a, yv) in uj.iter_mut().zip(&y[p * SPAN..p * SPAN + m]) {
                *a += pj * yv;
            }
        }
    }
}

/// One worker's scratch for a span, reused from span to span. Series of several components (pairs,
/// unknowns) are laid out component by component, `SPAN` apart, so that each step runs across the
/// span's samples at once (vectorised).
struct Scratch {
    /// |ω|², rad²/s².
    w2: Vec<f64>,
    /// Per pair −d less the gyro α term when the solve uses it, m/s².
    y: Vec<f64>,
    /// The same less the trace constraint's part r_zz·2|ω|², m/s² (under the constraint).
    y_con: Vec<f64>,
    /// The unknowns of the solve, s⁻² and rad/s².
    u: Vec<f64>,
    /// The unknowns of the free solve (under the constraint), s⁻² and rad/s².
    u_free: Vec<f64>,
    /// A pair's calibrated `a` output, m/s².
    a_cal: Vec<f64>,
    /// C_sn per sample (full rotation only).
    c_sn: Vec<Mat3>,
    /// ΩΩ = ωωᵀ − |ω|²I, six components, sensor frame, s⁻².
    ww: Vec<f64>,
    /// S, six components, NaN where not observed, sensor frame, s⁻².
    sv: Vec<f64>,
    /// G_s = S + ΩΩ, six components, sensor frame, s⁻².
    gs: Vec<f64>,
}

/// The four results of a span, each a slice of its own series.
struct SpanOut<'o> {
    ned: &'o mut [SymTensor],
    sensor: &'o mut [SymTensor],
    alpha: &'o mut [Vec3],
    trace: &'o mut [f64],
}

/// The solve of every sample: the pair values and the unknowns of a span are kept pair by pair and
/// unknown by unknown, so that the products P·y run across the span's samples at once (vectorised)
/// while every sample's sum still adds its terms in pair order, as a sample-by-sample sum would.
struct SpanSolver<'s, 'a> {
    inp: &'s Inputs<'a>,
    trace_constraint: bool,
    /// True when the pairs give α.
    with_alpha: bool,
    /// Each pair's design row [Sxx Sxy Sxz Syy Syz Szz αx αy αz], m.
    rows: Vec<[f64; 9]>,
    /// The solve's pseudo-inverse ([`operators`]), m⁻¹.
    op: Operator,
    /// The free solve's, under the trace constraint, m⁻¹.
    op_free: Option<Operator>,
    /// The gyro angular acceleration, sensor axes, rad/s².
    alpha_g: [&'s [f64]; 3],
    /// True when every component is observed, so that the full attitude turns the tensor into NED;
    /// false: the heading alone.
    full_rotation: bool,
}

impl SpanSolver<'_, '_> {
    /// Every sample of `n`, in spans in parallel, with per-worker scratch: the tensor in NED and in
    /// the sensor frame (s⁻²), α from the pairs (rad/s²; empty unless the pairs give it) and the
    /// trace (s⁻²).
    fn solve_all(&self, n: usize) -> (Vec<SymTensor>, Vec<SymTensor>, Vec<Vec3>, Vec<f64>) {
        let np = self.inp.pairs.len();
        let nu = self.op.p.len();
        let nf = self.op_free.as_ref().map_or(0, |f| f.p.len());
        let mut tensor_ned = filled(n, SymTensor::default());
        let mut measured = filled(n, SymTensor::default());
        let mut alpha_pairs = filled(if self.with_alpha { n } else { 0 }, [f64::NAN; 3]);
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
                || Scratch {
                    w2: vec![0.0; SPAN],
                    y: vec![0.0; np * SPAN],
                    y_con: vec![0.0; np * SPAN],
                    u: vec![0.0; nu * SPAN],
                    u_free: vec![0.0; nf * SPAN],
                    a_cal: vec![0.0; SPAN],
                    c_sn: vec![[[0.0; 3]; 3]; if self.full_rotation { SPAN } else { 0 }],
                    ww: vec![0.0; 6 * SPAN],
                    sv: vec![0.0; 6 * SPAN],
                    gs: vec![0.0; 6 * SPAN],
                },
                |sc, (q, (((ned, sensor), alpha), trace))| {
                    let out = SpanOut {
                        ned,
                        sensor,
                        alpha,
                        trace,
                    };
                    self.span(sc, q * SPAN, out);
                },
            );
        (tensor_ned, measured, alpha_pairs, trace)
    }

    /// The span from sample `i0`, as long as `out`: pair values, unknowns, tensor components, then
    /// the four results.
    fn span(&self, sc: &mut Scratch, i0: usize, out: SpanOut<'_>) {
        let m = out.ned.len();
        let inp = self.inp;
        for (k, w2) in sc.w2[..m].iter_mut().enumerate() {
            let i = i0 + k;
            let w = [inp.omega[0][i], inp.omega[1][i], inp.omega[2][i]];
            *w2 = w[0] * w[0] + w[1] * w[1] + w[2] * w[2];
        }
        self.pair_values(sc, i0, m);
        if self.full_rotation {
            let r = i0..i0 + m;
            c_sn_degrees_span(
                &inp.roll_deg[r.clone()],
                &inp.pitch_deg[r.clone()],
                &inp.heading_deg[r],
                &mut sc.c_sn[..m],
            );
        }
        // Without the trace constraint the constrained values are the values themselves.
        let y = if self.trace_constraint {
            &sc.y_con
        } else {
            &sc.y
        };
        product(&self.op.p, y, &mut sc.u, m);
        if let Some(f) = &self.op_free {
            product(&f.p, &sc.y, &mut sc.u_free, m);
        }
        self.tensor_components(sc, i0, m);
        self.write_trace(sc, out.trace);
        for (k, out) in out.sensor.iter_mut().enumerate() {
            *out = SymTensor::from_array(std::array::from_fn(|c| {
                comp(&sc.gs, c, k) - comp(&sc.ww, c, k)
            }));
        }
        for (k, out) in out.ned.iter_mut().enumerate() {
            let gs = SymTensor::from_array(std::array::from_fn(|c| comp(&sc.gs, c, k)));
            *out = if self.full_rotation {
                gs.congruence(&sc.c_sn[k])
            } else {
                rotate_heading_only(&gs, inp.heading_deg[i0 + k].to_radians())
            };
        }
        if self.with_alpha {
            self.write_alpha(sc, out.alpha);
        }
    }

    /// Each pair's values over the span, term by term across it (vectorised): y = −(a − b), `a`
    /// calibrated as read, less the gyro α term when the solve takes α from the gyros (m/s²); and
    /// under the trace constraint y less r_zz·2|ω|².
    fn pair_values(&self, sc: &mut Scratch, i0: usize, m: usize) {
        let alpha_g = self.alpha_g;
        for (p, (ps, r)) in self.inp.pairs.iter().zip(&self.rows).enumerate() {
            let (y, y_con) = (
                &mut sc.y[p * SPAN..p * SPAN + m],
                &mut sc.y_con[p * SPAN..p * SPAN + m],
            );
            let a: &[f64] = match ps.correction {
                Some(correct) => {
                    correct(i0, &ps.a[i0..i0 + m], &mut sc.a_cal[..m]);
                    &sc.a_cal[..m]
                }
                None => &ps.a[i0..i0 + m],
            };
            for ((yk, ak), bk) in y.iter_mut().zip(a).zip(&ps.b[i0..i0 + m]) {
                *yk = -(ak - bk);
            }
            if !self.with_alpha {
                let al = [
                    &alpha_g[0][i0..i0 + m],
                    &alpha_g[1][i0..i0 + m],
                    &alpha_g[2][i0..i0 + m],
                ];
                for (k, yk) in y.iter_mut().enumerate() {
                    *yk -= r[6] * al[0][k] + r[7] * al[1][k] + r[8] * al[2][k];
                }
            }
            if self.trace_constraint {
                for ((c, v), w2) in y_con.iter_mut().zip(y.iter()).zip(&sc.w2[..m]) {
                    *c = v - r[5] * 2.0 * w2;
                }
            }
        }
    }

    /// Component by component across the span (vectorised), sensor frame, s⁻²: ΩΩ = ωωᵀ − |ω|²I;
    /// S with NaN where not observed (Szz = 2|ω|² − Sxx − Syy under the trace constraint);
    /// G_s = S + ΩΩ.
    fn tensor_components(&self, sc: &mut Scratch, i0: usize, m: usize) {
        let omega = self.inp.omega;
        let w = [
            &omega[0][i0..i0 + m],
            &omega[1][i0..i0 + m],
            &omega[2][i0..i0 + m],
        ];
        let w2 = &sc.w2[..m];
        for (c, (a, b)) in COMPONENTS.into_iter().enumerate() {
            let out = &mut sc.ww[c * SPAN..c * SPAN + m];
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
        let given = if self.trace_constraint { 5 } else { 6 };
        for c in 0..given {
            let out = &mut sc.sv[c * SPAN..c * SPAN + m];
            if self.op.observed[c] {
                out.copy_from_slice(&sc.u[c * SPAN..c * SPAN + m]);
            } else {
                out.fill(f64::NAN);
            }
        }
        if self.trace_constraint {
            let (head, zz) = sc.sv.split_at_mut(5 * SPAN);
            let (xx, yy) = (&head[..m], &head[3 * SPAN..3 * SPAN + m]);
            for k in 0..m {
                zz[k] = 2.0 * w2[k] - xx[k] - yy[k];
            }
        }
        for c in 0..6 {
            let (sv, ww) = (
                &sc.sv[c * SPAN..c * SPAN + m],
                &sc.ww[c * SPAN..c * SPAN + m],
            );
            let g = &mut sc.gs[c * SPAN..c * SPAN + m];
            for k in 0..m {
                g[k] = sv[k] + ww[k];
            }
        }
    }

    /// The trace of G over the span, s⁻²: from the free solve under the trace constraint (NaN
    /// where it does not observe the diagonal), else from G_s.
    fn write_trace(&self, sc: &Scratch, trace: &mut [f64]) {
        let w2 = &sc.w2[..trace.len()];
        match &self.op_free {
            Some(f) if f.observed[0] && f.observed[3] && f.observed[5] => {
                for (k, t) in trace.iter_mut().enumerate() {
                    *t = comp(&sc.u_free, 0, k) + comp(&sc.u_free, 3, k) + comp(&sc.u_free, 5, k)
                        - 2.0 * w2[k];
                }
            }
            Some(_) => trace.fill(f64::NAN),
            None => {
                for (k, t) in trace.iter_mut().enumerate() {
                    *t = comp(&sc.gs, 0, k) + comp(&sc.gs, 3, k) + comp(&sc.gs, 5, k);
                }
            }
        }
    }

    /// α from the pairs over the span, sensor axes, rad/s²; NaN in the axes not observed.
    fn write_alpha(&self, sc: &Scratch, alpha: &mut [Vec3]) {
        let first = if self.trace_constraint { 5 } else { 6 };
        for (k, out) in alpha.iter_mut().enumerate() {
            *out = std::array::from_fn(|a| {
                let j = first + a;
                if self.op.observed[j] {
                    comp(&sc.u, j, k)
                } else {
                    f64::NAN
                }
            });
        }
    }
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
