//! The calibration of a whole instrument, fitted where the solve will use it.
//!
//! Each pair's difference is d_k = κ_k·f + c_k(t) − A_k·u with u = [S; α] the unknowns of the
//! solve (`docs/physics.md`), c_k bias, drift, temperature and self-gradient terms. The solve forms
//! û = P·(−d) with P the pseudo-inverse of A; a calibration error δκ reaches the tensor only as
//! P·δκ·f. So κ is estimated as K = P·κ, one regression per unknown on û, plus (I − A·P)·κ from
//! the pairs' residuals r = −d − A·û; per pair κ = A·K + (I − A·P)·κ. When the pairs determine α
//! themselves, the tensor rows of û do not contain α at all: their regression needs no gyro
//! regressor, and the gyros' differentiated noise, which dominates a single cross pair's fit, stays
//! out of the tensor's calibration. The α rows are regressed after the gyro α is subtracted.
//! Standard errors combine the rows' errors as if independent.
//!
//! Units: m/s² for differences, s⁻² for S, rad/s² for α.

use crate::crossings::Crossing;
use crate::estimate::{
    Coefficient, Design, HeldTerm, PRODUCTS, PairCalibration, PairData, Settings, fit_with_band,
};
use gravgrad_core::SymTensor;
use gravgrad_core::attitude::{c_sn_degrees, c_sn_degrees_span};
use gravgrad_core::pairs::UNKNOWNS;
use gravgrad_core::pairs::{PairGeometry, pseudo_inverse};
use rayon::prelude::*;

/// The known gravitational field along a flight, whose part −nᵀ·G_s·b every pair difference carries
/// and which comes off before the fit: the tensor in NED (s⁻², normal field plus the terrain's when
/// modelled) and the attitude that turns it into the sensor frame, G_s = C_snᵀ·G·C_sn. The fit forms
/// C_sn and G_s sample by sample as it reads them, instead of keeping a series of either.
#[derive(Clone, Copy)]
pub struct KnownField<'a> {
    /// Normal gravitational tensor, NED, s⁻².
    pub normal: &'a [SymTensor],
    /// Terrain tensor, NED, s⁻², when modelled.
    pub terrain: Option<&'a [SymTensor]>,
    /// Roll, pitch and heading of the sensor frame, degrees (C_sn as in
    /// [`gravgrad_core::attitude`]).
    pub attitude_deg: [&'a [f64]; 3],
}

/// One flight of a whole instrument, on one time base.
pub struct FlightData<'a> {
    /// The pairs' samples: what the block means are formed from.
    pub samples: PairSamples<'a>,
    /// Specific force, sensor axes, m/s².
    pub f: [&'a [f64]; 3],
    /// Angular acceleration from the gyros, sensor axes, rad/s².
    pub alpha: [&'a [f64]; 3],
    pub time: &'a [f64],
    pub temperature: Option<&'a [f64]>,
    pub usable: Option<&'a [bool]>,
    pub relative_attitude: Option<[&'a [f64]; 2]>,
    /// True when the solve takes α from the pairs; false: from the gyros.
    pub alpha_from_pairs: bool,
    /// Where a survey line and a tie line of this flight cross: the sample of each pass. With
    /// them the tensor's drift and temperature terms are fitted to the passes' differences in NED
    /// ([`crate::crossings`]), so that a regional is not taken for drift; `None` or empty: those
    /// terms are held at their prior and left to levelling.
    pub crossings: Option<&'a [(usize, usize)]>,
}

/// Σ w·c over the parts, errors combined as independent; a part of weight zero contributes
/// nothing (not 0 × ∞ when its term was not resolved).
fn combine(parts: &[(f64, Coefficient)]) -> Coefficient {
    Coefficient {
        value: parts.iter().map(|(w, c)| w * c.value).sum(),
        std_error: parts
            .iter()
            .filter(|(w, _)| *w != 0.0)
            .map(|(w, c)| (w * c.std_error).powi(2))
            .sum::<f64>()
            .sqrt(),
    }
}

/// A band term of a pair (κ, quadratic, axis error, any unit): Σ w·c over its `parts`, (weight,
/// target) — the tensor rows with w = A_pj and the pair's own residual row with w = 1 — of the
/// term `get` reads from each target's fit, `held` listing per target the terms it held with their
/// estimates then. A part held at zero is applied as zero (the tensor gets exactly the rows' kept
/// terms: P·A = I), but what holding it costs the pair's coefficient is its estimate: the rows'
/// parts carry A·P·q of every pair's term q, and only all parts together are the pair's own. So a
/// held part's error counts as √(σ² + e²), e and σ its estimate and standard error when held, not σ
/// alone (a cross pair's fz² was 3.75 of the old errors from the truth this way, over eight
/// seeds). `None` when no part has the term.
fn band_term(
    parts: impl Iterator<Item = (f64, usize)>,
    fits: &[Option<PairCalibration>],
    held: &[Vec<(String, Coefficient)>],
    name: &str,
    get: &dyn Fn(&PairCalibration) -> Option<Coefficient>,
) -> Option<Coefficient> {
    let v: Vec<(f64, Coefficient)> = parts
        .filter_map(|(w, t)| {
            let x = get(fits[t].as_ref()?)?;
            let std_error = match held[t].iter().find(|(n, _)| n == name) {
                Some((_, e)) => e.std_error.hypot(e.value),
                None => x.std_error,
            };
            Some((
                w,
                Coefficient {
                    value: x.value,
                    std_error,
                },
            ))
        })
        .collect();
    (!v.is_empty()).then(|| combine(&v))
}

/// Every pair's samples over a flight, as the first stage of the fit reads them: the outputs, the
/// angular rate and the known field. Nothing else of the flight is needed to form the block means
/// ([`PairBlocks`]), so a caller can form them while it is still computing the rest.
pub struct PairSamples<'a> {
    pub pairs: &'a [PairGeometry],
    /// Each pair's outputs a and b, m/s², in the order of `pairs`.
    pub a: Vec<&'a [f64]>,
    pub b: Vec<&'a [f64]>,
    /// The known field to take off every difference; `None`: nothing taken off.
    pub known: Option<KnownField<'a>>,
    /// Angular rate, sensor axes, rad/s.
    pub omega: [&'a [f64]; 3],
}

/// The block means the fit works on: of each pair's difference d_p = a_p − b_p (m/s²) and of the
/// six components xx xy xz yy yz zz of M = ΩΩ − G_s (s⁻²; the centrifugal term and the known field,
/// sensor frame, ΩΩ = ωωᵀ − |ω|²I), over blocks of `block` samples.
pub struct PairBlocks {
    block: usize,
    m: Vec<Vec<f64>>,
    d: Vec<Vec<f64>>,
}

/// One span's block means: of M's six components, and of each pair's difference.
type SpanMeans = (Vec<Vec<f64>>, Vec<Vec<f64>>);

impl PairBlocks {
    /// The block length for settings `s`: a quarter of the band's top period, in samples. Blocks of
    /// it carry the whole band and make the fits that many times cheaper.
    pub fn block_length(s: &Settings) -> usize {
        ((s.rate_hz / (4.0 * s.band_hz[1])).floor() as usize).max(1)
    }

    /// Reads every sample once, in spans of whole blocks: per span M's six components sample by
    /// sample (once for all pairs), then the block means of each, then of each pair's difference
    /// (one subtraction per sample and pair). Each block is summed in sample order whatever the
    /// thread count.
    pub fn of(x: &PairSamples<'_>, s: &Settings) -> Self {
        let block = Self::block_length(s);
        let np = x.pairs.len();
        let n = x.omega[0].len();
        let sum_blocks = |v: &[f64], out: &mut Vec<f64>| push_block_means(v, block, out);
        let span = block * 256;
        let parts: Vec<SpanMeans> = (0..n.div_ceil(span))
            .into_par_iter()
            .map_init(
                || {
                    (
                        std::array::from_fn::<_, 6, _>(|_| vec![0.0; span]),
                        vec![0.0; span],
                        vec![[[0.0; 3]; 3]; span],
                    )
                },
                |(ms, ds, cs), q| {
                    let r = q * span..((q + 1) * span).min(n);
                    let len = r.len();
                    if let Some(kf) = &x.known {
                        let [roll, pitch, heading] = kf.attitude_deg;
                        c_sn_degrees_span(
                            &roll[r.clone()],
                            &pitch[r.clone()],
                            &heading[r.clone()],
                            &mut cs[..len],
                        );
                    }
                    let w = [
                        &x.omega[0][r.clone()],
                        &x.omega[1][r.clone()],
                        &x.omega[2][r.clone()],
                    ];
                    // Every series cut to the span first, so that the loop's indexing needs no checks.
                    let [m0, m1, m2, m3, m4, m5] = ms.each_mut().map(|v| &mut v[..len]);
                    let cs = &cs[..len];
                    let known = x
                        .known
                        .as_ref()
                        .map(|kf| (&kf.normal[r.clone()], kf.terrain.map(|t| &t[r.clone()])));
                    for k in 0..len {
                        let (wx, wy, wz) = (w[0][k], w[1][k], w[2][k]);
                        let w2 = wx * wx + wy * wy + wz * wz;
                        let mut m = [
                            wx * wx - w2,
                            wx * wy,
                            wx * wz,
                            wy * wy - w2,
                            wy * wz,
                            wz * wz - w2,
                        ];
                        if let Some((normal, terrain)) = known {
                            let mut g = normal[k];
                            if let Some(t) = terrain {
                                g = g + t[k];
                            }
                            let g = g.congruence_transposed(&cs[k]).to_array();
                            for (mc, gc) in m.iter_mut().zip(g) {
                                *mc -= gc;
                            }
                        }
                        (m0[k], m1[k], m2[k], m3[k], m4[k], m5[k]) =
                            (m[0], m[1], m[2], m[3], m[4], m[5]);
                    }
                    let m_means: Vec<Vec<f64>> = ms
                        .iter()
                        .map(|mc| {
                            let mut v = Vec::with_capacity(len.div_ceil(block));
                            sum_blocks(&mc[..len], &mut v);
                            v
                        })
                        .collect();
                    let ds = &mut ds[..len];
                    let d_means = (0..np)
                        .map(|p| {
                            let (pa, pb) = (&x.a[p][r.clone()], &x.b[p][r.clone()]);
                            for ((dk, ak), bk) in ds.iter_mut().zip(pa).zip(pb) {
                                *dk = ak - bk;
                            }
                            let mut v = Vec::with_capacity(len.div_ceil(block));
                            sum_blocks(ds, &mut v);
                            v
                        })
                        .collect();
                    (m_means, d_means)
                },
            )
            .collect();
        // The spans joined into whole series.
        let joined = |pick: &(dyn Fn(&SpanMeans) -> &Vec<f64> + Sync)| {
            parts
                .iter()
                .flat_map(|part| pick(part).iter().copied())
                .collect::<Vec<f64>>()
        };
        let (m, d) = rayon::join(
            || {
                (0..6)
                    .into_par_iter()
                    .map(|c| joined(&|part| &part.0[c]))
                    .collect()
            },
            || {
                (0..np)
                    .into_par_iter()
                    .map(|p| joined(&|part| &part.1[p]))
                    .collect()
            },
        );
        Self { block, m, d }
    }
}

/// What a flight's calibration could and could not determine, for the log, `gravgrad calibrate`'s
/// report and QC.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Health {
    /// Terms held at their prior, per fitted series: the tensor's unknowns (`Gxx` … `αz`) and each
    /// pair's own residual (`pair xy`).
    pub held: Vec<(String, HeldTerm)>,
    /// Condition number estimates of the band fit's and the whole-band fit's scaled regressors
    /// (no fit: 0).
    pub condition: [f64; 2],
    /// Band the coupling was fitted in, Hz.
    pub band_hz: [f64; 2],
    /// RMS of the band-limited residual of each unknown's fit, s⁻² (`Gxx` … in the solve's order).
    pub band_residual: Vec<(String, f64)>,
    /// What the user should know of how the flight was calibrated (e.g. drift fitted against time
    /// for want of crossings).
    pub notes: Vec<String>,
    /// With a calibration file: every coefficient the flight estimated a change of, as (pair index,
    /// term as [`crate::stability`] names it, change in standard errors of the difference,
    /// δ / √(σ_file² + σ_flight²)). Empty without a file.
    pub file_change: Vec<(usize, String, f64)>,
}

/// Every pair's calibration from one flight, and what the flight could not determine.
#[derive(Clone, Debug, PartialEq)]
pub struct FlightCalibration {
    pub pairs: Vec<PairCalibration>,
    pub health: Health,
}

/// Block means of the force's three components (m/s²) and, with an origin `f0`, of the six products
/// (f_a − f0_a)(f_b − f0_b) of its deviations (m²/s⁴), in the order of [`PRODUCTS`], over blocks of
/// `block` samples: one pass over the force in spans (in parallel), each span's products formed in a
/// buffer of the span's length and summed while the span is in cache. Each block is summed in sample
/// order, so the means are the same bits as [`block_means`] of each series alone.
fn force_block_means(
    f: [&[f64]; 3],
    f0: Option<[f64; 3]>,
    block: usize,
) -> ([Vec<f64>; 3], Option<[Vec<f64>; 6]>) {
    let n = f[0].len();
    let span = block * 1024;
    type Part = ([Vec<f64>; 3], [Vec<f64>; 6]);
    let parts: Vec<Part> = (0..n.div_ceil(span))
        .into_par_iter()
        .map_init(
            || vec![0.0; span],
            |prod, q| {
                let r = q * span..((q + 1) * span).min(n);
                let nb = r.len().div_ceil(block);
                let means = f.map(|x| {
                    let mut out = Vec::with_capacity(nb);
                    push_block_means(&x[r.clone()], block, &mut out);
                    out
                });
                let products = match f0 {
                    Some(f0) => PRODUCTS.map(|(a, b)| {
                        let prod = &mut prod[..r.len()];
                        for ((p, x), y) in
                            prod.iter_mut().zip(&f[a][r.clone()]).zip(&f[b][r.clone()])
                        {
                            *p = (x - f0[a]) * (y - f0[b]);
                        }
                        let mut out = Vec::with_capacity(nb);
                        push_block_means(prod, block, &mut out);
                        out
                    }),
                    None => Default::default(),
                };
                (means, products)
            },
        )
        .collect();
    let means =
        std::array::from_fn(|c| parts.iter().flat_map(|p| p.0[c].iter().copied()).collect());
    let products = f0.map(|_| {
        std::array::from_fn(|c| parts.iter().flat_map(|p| p.1[c].iter().copied()).collect())
    });
    (means, products)
}

/// Estimates every pair's calibration from one flight. With `fixed` (a calibration flight's
/// coefficients, one per pair in order), κ, temperature and self-gradient are kept and only bias and
/// drift are fitted, also in the space of the unknowns.
pub fn estimate_flight(
    d: &FlightData<'_>,
    s: &Settings,
    fixed: Option<&[PairCalibration]>,
) -> FlightCalibration {
    estimate_from_blocks(d, &PairBlocks::of(&d.samples, s), s, fixed)
}

/// [`estimate_flight`] from the block means of `d`'s pair samples formed already (with the same
/// settings). `d`'s pair samples are not read again, only their geometry.
pub fn estimate_from_blocks(
    d: &FlightData<'_>,
    blocks: &PairBlocks,
    s: &Settings,
    fixed: Option<&[PairCalibration]>,
) -> FlightCalibration {
    let pairs = d.samples.pairs;
    let np = pairs.len();
    let alpha_from_pairs = d.alpha_from_pairs;
    let k = if alpha_from_pairs { 9 } else { 6 };
    let rows: Vec<[f64; 9]> = pairs.iter().map(PairGeometry::design_row).collect();
    let a: Vec<Vec<f64>> = rows.iter().map(|r| r[..k].to_vec()).collect();
    let op = pseudo_inverse(&a, k);
    // z_p = −(d_p − n_pᵀ·M·b_p − fixed part), less the gyro α term when the solve uses it.
    // Everything here is linear in the samples, so the model holds as well for block means as for
    // samples; and z is linear in d_p and in M's components, so its block means come from theirs.
    let block = blocks.block;
    let mean = |x: &[f64]| block_means(x, block);
    // The fixed part (κ·f, temperature and self-gradient terms; bias and drift are fitted) is linear
    // too: taken off at block level, from the block means of its regressors.
    let fixed_parts: Option<Vec<PairCalibration>> = fixed.map(|fx| {
        fx.iter()
            .map(|c| {
                let mut c = c.clone();
                c.polynomial.clear();
                // Taken off below from the products' block means.
                c.quadratic = None;
                c
            })
            .collect()
    });
    let m_b = &blocks.m;
    // The block means of what the fits read: force, gyro α, time, temperature, relative attitude.
    let ab: Vec<Vec<f64>> = d.alpha.iter().map(|v| mean(v)).collect();
    // The angular rate's block means: the regressors of the gyro bias's trace.
    let wb: Vec<Vec<f64>> = d.samples.omega.iter().map(|v| mean(v)).collect();
    // The axis errors' regressors: the gyro α's block means, and M = ΩΩ − G's (formed already for
    // the known part of every difference; the G part is m̄ᵀ·G·b, the normal gradient times 1e-5).
    let use_rotation = s.rotation_coupling;
    let tb = mean(d.time);
    // The quadratic terms' regressors: block means of the products of the force's deviations from
    // its mean over the lines (products of block means would miss the power inside a block).
    // With a file whose quadratic terms are centred on its own force origin, the products are
    // formed about that origin, so that the flight's refinement of them adds to the file's.
    let fixed_quadratic = fixed.is_some_and(|fx| fx.iter().any(|c| c.quadratic.is_some()));
    let f0 = match fixed.and_then(|fx| fx.iter().find(|c| c.quadratic.is_some())) {
        Some(c) => c.force_mean,
        None => crate::estimate::force_mean(d.f, d.usable),
    };
    let (fb, pb) = force_block_means(d.f, (s.quadratic || fixed_quadratic).then_some(f0), block);
    let temp_b = d.temperature.map(mean);
    let rel_b: Option<Vec<Vec<f64>>> = d
        .relative_attitude
        .map(|r| r.iter().map(|v| mean(v)).collect());
    let usable_b: Option<Vec<bool>> = d
        .usable
        .map(|u| u.chunks(block).map(|c| c.iter().all(|x| *x)).collect());
    // A series at block level with the regressors' block means (pair geometry not read by the fits
    // or the corrections).
    let block_series = |y| PairData {
        geometry: &pairs[0],
        difference: y,
        omega: [&wb[0], &wb[1], &wb[2]],
        f: [&fb[0], &fb[1], &fb[2]],
        alpha: [&ab[0], &ab[1], &ab[2]],
        time: &tb,
        temperature: temp_b.as_deref(),
        usable: usable_b.as_deref(),
        expected: None,
        relative_attitude: rel_b.as_ref().map(|r| [&r[0][..], &r[1][..]]),
    };
    // z_p per block: the pair's difference less n_pᵀ·M·b_p, M's components one at a time across
    // the blocks (vectorised), less the gyro α term when the solve takes α from the gyros. The
    // coefficients of n_pᵀ·M·b_p on M's components xx xy xz yy yz zz are those of S in the pair's
    // design row.
    let z: Vec<Vec<f64>> = (0..np)
        .into_par_iter()
        .map(|p| {
            let (cp, rw) = (&rows[p][..6], &rows[p]);
            let db = &blocks.d[p];
            let mut known = vec![-0.0; db.len()];
            for (cc, mc) in cp.iter().zip(m_b) {
                for (kv, m) in known.iter_mut().zip(mc) {
                    *kv += cc * m;
                }
            }
            let mut zp: Vec<f64> = match &fixed_parts {
                None => db.iter().zip(&known).map(|(v, k)| -(v - k)).collect(),
                Some(c) => {
                    let bd = block_series(&[]);
                    // The file's quadratic part about its own origin m, from the products about
                    // this flight's f0: (f_a − m_a)(f_b − m_b) = P_ab + δ_a(f_b − f0_b) +
                    // δ_b(f_a − f0_a) + δ_a·δ_b with δ = f0 − m.
                    let quad = |i: usize| -> f64 {
                        match (fixed.and_then(|fx| fx[p].quadratic), &pb) {
                            (Some(q), Some(pb)) => {
                                let m = fixed.map_or([0.0; 3], |fx| fx[p].force_mean);
                                let dl: [f64; 3] = std::array::from_fn(|k| f0[k] - m[k]);
                                let dev: [f64; 3] = std::array::from_fn(|k| fb[k][i] - f0[k]);
                                PRODUCTS
                                    .iter()
                                    .zip(q)
                                    .enumerate()
                                    .map(|(j, ((a, b), qm))| {
                                        qm.value
                                            * (pb[j][i]
                                                + dl[*a] * dev[*b]
                                                + dl[*b] * dev[*a]
                                                + dl[*a] * dl[*b])
                                    })
                                    .sum()
                            }
                            _ => 0.0,
                        }
                    };
                    db.iter()
                        .zip(&known)
                        .enumerate()
                        .map(|(i, (v, k))| -((v - c[p].correction_at(&bd, i) - quad(i)) - k))
                        .collect()
                }
            };
            if !alpha_from_pairs {
                for (i, zv) in zp.iter_mut().enumerate() {
                    *zv -= rw[6] * ab[0][i] + rw[7] * ab[1][i] + rw[8] * ab[2][i];
                }
            }
            zp
        })
        .collect();
    // The gyro bias is fitted once for the instrument (below), not per row.
    let fit_gyro_bias = s.gyro_rate;
    let settings_b = Settings {
        rate_hz: s.rate_hz / block as f64,
        gyro_rate: false,
        ..s.clone()
    };
    let s = &settings_b;
    let n = tb.len();
    // PA, to predict the α the unknown rows carry from the gyros.
    let pa: Vec<Vec<f64>> = (0..k)
        .map(|j| {
            (0..k)
                .map(|m| (0..np).map(|p| op.p[j][p] * a[p][m]).sum())
                .collect()
        })
        .collect();
    // The residual projector I − A·P; rows that vanish carry nothing.
    let has_residual: Vec<bool> = (0..np)
        .map(|p| {
            (0..np).any(|q| {
                let ap: f64 = (0..k).map(|j| a[p][j] * op.p[j][q]).sum();
                let v = if p == q { 1.0 - ap } else { -ap };
                v.abs() > 1e-9
            })
        })
        .collect();
    // The fits' regressors (the force band-passed, the polynomial and temperature columns) and
    // their normal equations, formed once for all targets, beside the targets: −û_j (+ the gyro
    // prediction of its α content) and −r_p.
    let (design, mut targets) = rayon::join(
        || {
            // With a file, the flight refines what its own data see: coupling, quadratic and
            // temperature terms, bias and drift (the file's self-gradient is kept).
            let products = if s.quadratic { pb.as_ref() } else { None };
            let mut series = block_series(&tb);
            if fixed.is_some() {
                series.relative_attitude = None;
            }
            let rotation: Option<[&[f64]; 9]> = use_rotation.then(|| {
                [
                    &ab[0][..],
                    &ab[1][..],
                    &ab[2][..],
                    &m_b[0][..],
                    &m_b[1][..],
                    &m_b[2][..],
                    &m_b[3][..],
                    &m_b[4][..],
                    &m_b[5][..],
                ]
            });
            Some(Design::new(
                &series,
                false,
                products.map(|p| (p, f0)),
                rotation,
                s,
            ))
        },
        || {
            // û_j = Σ_p P_jp·z_p, whole series at a time (vectorised), terms added in pair order.
            let u: Vec<Vec<f64>> = (0..k)
                .into_par_iter()
                .map(|j| {
                    let mut uj = vec![-0.0; n];
                    for (pjp, zp) in op.p[j].iter().zip(&z) {
                        for (x, zv) in uj.iter_mut().zip(zp) {
                            *x += pjp * zv;
                        }
                    }
                    uj
                })
                .collect();
            let mut targets: Vec<Vec<f64>> = (0..k)
                .into_par_iter()
                .map(|j| {
                    let mut t: Vec<f64> = u[j].iter().map(|v| -v).collect();
                    if alpha_from_pairs {
                        for (i, tv) in t.iter_mut().enumerate() {
                            *tv += (0..3).map(|m| pa[j][6 + m] * ab[m][i]).sum::<f64>();
                        }
                    }
                    t
                })
                .collect();
            targets.par_extend((0..np).into_par_iter().map(|p| {
                if has_residual[p] {
                    (0..n)
                        .map(|i| -(z[p][i] - (0..k).map(|j| a[p][j] * u[j][i]).sum::<f64>()))
                        .collect()
                } else {
                    Vec::new()
                }
            }));
            targets
        },
    );
    // Every target band-passed once, for the gyro bias and the rows' band fits.
    let mut band_targets: Vec<Vec<f64>> = match design.as_ref() {
        Some(g) => targets
            .par_iter()
            .map(|t| {
                if t.is_empty() {
                    Vec::new()
                } else {
                    g.band_pass(t)
                }
            })
            .collect(),
        None => Vec::new(),
    };
    // The gyros' bias from the tensor rows, jointly; its trace taken off every unknown's target.
    let gyro_bias = match design.as_ref() {
        Some(g) if fit_gyro_bias => Some(crate::gyro_bias::take_off(
            g,
            &pa,
            [&wb[0], &wb[1], &wb[2]],
            (&mut targets, &mut band_targets),
            s.min_significance,
        )),
        _ => None,
    };
    // Fit each target: the full model, or bias and drift only.
    let products = if s.quadratic { pb.as_ref() } else { None };
    let fitted: Vec<Option<(PairCalibration, Vec<HeldTerm>)>> = targets
        .par_iter()
        .zip(&band_targets)
        .map(|(y, y_band)| {
            if y.is_empty() {
                return None;
            }
            let mut data = block_series(y);
            if fixed.is_some() {
                data.relative_attitude = None;
            }
            // With a file in force the targets have the file's parts taken off already: what is
            // fitted here is the flight's change to them, combined with the file below.
            design
                .as_ref()
                .map(|g| fit_with_band(g, y, y_band, &data, products, s))
        })
        .collect();
    // The series' names: the unknowns, then each pair's own residual.
    let target_name = |t: usize| -> String {
        if t < k {
            UNKNOWNS[t].to_string()
        } else {
            format!("pair {}", pairs[t - k].id)
        }
    };
    // The tensor's drift and temperature terms from crossings, not from time (a regional across
    // the lines reads like a drift in time); the bias and self-gradient refitted after them.
    let mut fitted = fitted;
    let crossing_note = match design.as_ref() {
        Some(g)
            if (s.drift_order >= 1 || temp_b.is_some())
                && !(fixed.is_some() && s.drift_order == 0) =>
        {
            drift_from_crossings(
                &CrossingInputs {
                    design: g,
                    flight: d,
                    block,
                    targets: &targets,
                    force: &fb,
                    products,
                    time: &tb,
                    temperature: temp_b.as_deref(),
                    usable: usable_b.as_deref(),
                    with_file: fixed.is_some(),
                },
                s,
                &mut fitted,
            )
        }
        _ => None,
    };
    let mut notes: Vec<String> = crossing_note.into_iter().collect();
    notes.extend(gyro_bias.as_ref().and_then(crate::gyro_bias::note));
    let mut health = Health {
        notes,
        condition: design.as_ref().map_or([0.0; 2], Design::conditions),
        band_hz: s.band_hz,
        ..Health::default()
    };
    for (t, f) in fitted.iter().enumerate() {
        if let Some((c, held)) = f {
            health
                .held
                .extend(held.iter().map(|h| (target_name(t), h.clone())));
            if t < k {
                health
                    .band_residual
                    .push((target_name(t), c.band_residual_rms));
            }
        }
    }
    if let Some(gb) = &gyro_bias {
        health
            .held
            .extend(gb.held.iter().map(|h| ("gyros".to_string(), h.clone())));
    }
    // What each target held, by term, with the estimate it had when held.
    let held_estimates: Vec<Vec<(String, Coefficient)>> = fitted
        .iter()
        .map(|f| {
            f.as_ref().map_or(Vec::new(), |(_, held)| {
                held.iter()
                    .filter_map(|h| h.estimate.map(|e| (h.term.clone(), e)))
                    .collect()
            })
        })
        .collect();
    let fits: Vec<Option<PairCalibration>> = fitted.into_iter().map(|f| f.map(|x| x.0)).collect();
    let band_term = |p: usize,
                     rows: &[(f64, usize)],
                     name: &str,
                     get: &dyn Fn(&PairCalibration) -> Option<Coefficient>| {
        let parts = rows.iter().copied().chain(std::iter::once((1.0, k + p)));
        band_term(parts, &fits, &held_estimates, name, get)
    };
    let pair_cals = (0..np)
        .map(|p| {
            // Weights: A_pj for the unknown rows, 1 for the pair's own residual row.
            let mut parts: Vec<(f64, &PairCalibration)> = (0..k)
                .filter_map(|j| fits[j].as_ref().map(|c| (a[p][j], c)))
                .collect();
            if let Some(c) = &fits[k + p] {
                parts.push((1.0, c));
            }
            let pick =
                |get: &dyn Fn(&PairCalibration) -> Option<Coefficient>| -> Option<Coefficient> {
                    let v: Vec<(f64, Coefficient)> = parts
                        .iter()
                        .filter_map(|(w, c)| get(c).map(|x| (*w, x)))
                        .collect();
                    (!v.is_empty()).then(|| combine(&v))
                };
            let zero = Coefficient {
                value: 0.0,
                std_error: 0.0,
            };
            let first = parts.first().map(|x| x.1);
            let n_poly = first.map_or(0, |c| c.polynomial.len());
            let polynomial: Vec<Coefficient> = (0..n_poly)
                .map(|q| pick(&|c| c.polynomial.get(q).copied()).unwrap_or(zero))
                .collect();
            // The band residual the pair's calibration leaves in the tensor: its tensor rows'
            // (weighted by A_pj) and its own residual row. The α rows' residual is the gyros'
            // differentiated noise, not a misfit of the pair, and stays out.
            let band = (0..6)
                .filter_map(|j| fits[j].as_ref().map(|c| (a[p][j], c)))
                .chain(fits[k + p].as_ref().map(|c| (1.0, c)))
                .map(|(w, c)| (w * c.band_residual_rms).powi(2))
                .sum::<f64>()
                .sqrt();
            let unknown_rows: Vec<(f64, usize)> = (0..k).map(|j| (a[p][j], j)).collect();
            let estimated = PairCalibration {
                kappa: std::array::from_fn(|m| {
                    let name = ["κx", "κy", "κz"][m];
                    band_term(p, &unknown_rows, name, &|c| Some(c.kappa[m])).unwrap_or(zero)
                }),
                rotation: [zero; 3],
                polynomial: vec![],
                temperature: pick(&|c| c.temperature),
                quadratic: first.and_then(|c| c.quadratic).map(|_| {
                    std::array::from_fn(|m| {
                        let name = crate::estimate::PRODUCT_NAMES[m];
                        band_term(p, &unknown_rows, name, &|c| c.quadratic.map(|q| q[m]))
                            .unwrap_or(zero)
                    })
                }),
                force_mean: f0,
                gyro_rate: gyro_bias
                    .as_ref()
                    .and_then(|gb| crate::gyro_bias::pair_correction(&pairs[p], &gb.beta)),
                // From the tensor rows and the pair's own residual row only: an α row's coefficient
                // of the gyro α is the gyros' differentiated noise against the pairs', not an axis
                // error, and would put that noise into the pair.
                rotation_coupling: first.and_then(|c| c.rotation_coupling).map(|_| {
                    let tensor_rows: Vec<(f64, usize)> = (0..6).map(|j| (a[p][j], j)).collect();
                    std::array::from_fn(|m| {
                        let name = format!("axis error: {}", crate::estimate::ROTATION_NAMES[m]);
                        band_term(p, &tensor_rows, &name, &|c| {
                            c.rotation_coupling.map(|r| r[m])
                        })
                        .unwrap_or(zero)
                    })
                }),
                self_gradient: {
                    let r = pick(&|c| c.self_gradient.map(|x| x[0]));
                    let q = pick(&|c| c.self_gradient.map(|x| x[1]));
                    r.zip(q).map(|(r, q)| [r, q])
                },
                t_mid: 0.0,
                temperature_mean: first.map_or(0.0, |c| c.temperature_mean),
                band_residual_rms: band,
            };
            let (base, bias_shift, change) = match fixed {
                Some(fx) => {
                    let change = change_from_file(&fx[p], &estimated);
                    let (base, shift) = refine(&fx[p], &estimated);
                    (base, shift, change)
                }
                None => (estimated, 0.0, Vec::new()),
            };
            let mut polynomial = polynomial;
            if let Some(b) = polynomial.first_mut() {
                b.value += bias_shift;
            }
            // The rotation term is geometry: d carries (b × n)·α.
            let rotation = std::array::from_fn(|m| Coefficient {
                value: -rows[p][6 + m],
                std_error: 0.0,
            });
            let cal = PairCalibration {
                rotation,
                polynomial,
                t_mid: first.map_or(0.0, |c| c.t_mid),
                ..base
            };
            (cal, change)
        })
        .collect::<Vec<_>>();
    let mut pairs = Vec::with_capacity(pair_cals.len());
    for (p, (cal, change)) in pair_cals.into_iter().enumerate() {
        pairs.push(cal);
        health
            .file_change
            .extend(change.into_iter().map(|(term, z)| (p, term, z)));
    }
    FlightCalibration { pairs, health }
}

/// The flight's estimated change `delta` to each of the file's coefficients an instrument keeps (κ,
/// temperature, quadratic), in standard errors of the difference, δ / √(σ_file² + σ_flight²): the
/// flight's own estimate of the coefficient is file + δ, independent of the file. Held changes
/// (zero) and coefficients without a finite, positive standard error on both sides are left out.
fn change_from_file(file: &PairCalibration, delta: &PairCalibration) -> Vec<(String, f64)> {
    let z = |f: Coefficient, d: Coefficient| -> Option<f64> {
        let ok = |e: f64| e.is_finite() && e > 0.0;
        (d.value != 0.0 && ok(d.std_error) && ok(f.std_error))
            .then(|| d.value / f.std_error.hypot(d.std_error))
    };
    let mut out = Vec::new();
    for m in 0..3 {
        if let Some(v) = z(file.kappa[m], delta.kappa[m]) {
            out.push((format!("kappa[{m}]"), v));
        }
    }
    if let (Some(f), Some(d)) = (file.temperature, delta.temperature)
        && let Some(v) = z(f, d)
    {
        out.push(("temperature_m_s2_per_c".into(), v));
    }
    if let (Some(f), Some(d)) = (file.quadratic, delta.quadratic) {
        for m in 0..6 {
            if let Some(v) = z(f[m], d[m]) {
                out.push((format!("quadratic_per_m_s2[{m}]"), v));
            }
        }
    }
    out
}

/// What [`drift_from_crossings`] reads: the flight, its block series and the shared design.
struct CrossingInputs<'a> {
    design: &'a Design,
    flight: &'a FlightData<'a>,
    /// Samples per block.
    block: usize,
    /// The fitted series (the unknowns first), block means.
    targets: &'a [Vec<f64>],
    /// Force, sensor axes, m/s², block means.
    force: &'a [Vec<f64>],
    /// Products of the force's deviations, block means, when the quadratic terms are fitted.
    products: Option<&'a [Vec<f64>; 6]>,
    /// Time, s, block means.
    time: &'a [f64],
    /// Temperature, °C, block means, when used.
    temperature: Option<&'a [f64]>,
    usable: Option<&'a [bool]>,
    /// True when a calibration file is in force (its temperature and self-gradient are kept).
    with_file: bool,
}

/// The tensor's drift and temperature terms from the flight's crossings ([`crate::crossings`]),
/// replacing the six tensor rows' fit against time in `fitted`, then their bias and self-gradient
/// refitted on the line samples. Returns a note for the log when the flight has too few crossings
/// (the time fit then stands).
fn drift_from_crossings(
    x: &CrossingInputs<'_>,
    s: &Settings,
    fitted: &mut [Option<(PairCalibration, Vec<HeldTerm>)>],
) -> Option<String> {
    let (g, block, tb) = (x.design, x.block, x.time);
    let xs = x.flight.crossings.unwrap_or(&[]);
    let crossings: Vec<Crossing> = match x.flight.samples.known.as_ref() {
        Some(kf) => {
            let [roll, pitch, heading] = kf.attitude_deg;
            let c = |i: usize| c_sn_degrees(roll[i], pitch[i], heading[i]);
            xs.iter()
                .filter(|(a, b)| *a < roll.len() && *b < roll.len())
                .map(|&(a, b)| Crossing {
                    blocks: (a / block, b / block),
                    c_sn: (c(a), c(b)),
                })
                .collect()
        }
        None => Vec::new(),
    };
    // Each tensor row with its coupling and quadratic parts taken off (with a file, the file's came
    // off with its other fixed parts already; these are the flight's changes).
    let rest: Vec<Vec<f64>> = (0..6)
        .map(|j| match &fitted[j] {
            Some((c, _)) => x.targets[j]
                .iter()
                .enumerate()
                .map(|(i, y)| {
                    let mut v = y
                        - (0..3)
                            .map(|m| c.kappa[m].value * x.force[m][i])
                            .sum::<f64>();
                    if let (Some(q), Some(p)) = (c.quadratic, x.products) {
                        v -= (0..6).map(|m| q[m].value * p[m][i]).sum::<f64>();
                    }
                    v
                })
                .collect(),
            None => vec![0.0; tb.len()],
        })
        .collect();
    let r6: [&[f64]; 6] = std::array::from_fn(|j| &rest[j][..]);
    let t_mid = fitted[0].as_ref().map_or(0.0, |c| c.0.t_mid);
    let temp_mean = fitted[0].as_ref().map_or(0.0, |c| c.0.temperature_mean);
    // A file's temperature term is the calibration flight's: not refitted here.
    let temp_fit = if x.with_file {
        None
    } else {
        x.temperature.map(|t| (t, temp_mean))
    };
    let Some(cf) = crate::crossings::fit_drift(
        &r6,
        tb,
        t_mid,
        temp_fit,
        x.usable,
        s.drift_order,
        &crossings,
        (0.5 * s.rate_hz).ceil() as usize,
        s.min_significance,
    ) else {
        // Too few crossings: the time fit stands, and the log says what it cannot tell apart.
        return Some(format!(
            "{} crossings of survey and tie lines in the flight ({} needed to fit the tensor's \
             drift{} from them): fitted against time instead, where a regional across lines \
             flown in order cannot be told from drift",
            crossings.len(),
            2 * (2 + s.drift_order + usize::from(temp_fit.is_some())),
            if temp_fit.is_some() {
                " and temperature term"
            } else {
                ""
            }
        ));
    };
    for (j, comp) in cf.components.iter().enumerate() {
        let Some((c, held)) = fitted[j].as_mut() else {
            continue;
        };
        // The time fit's drift, temperature, bias and self-gradient verdicts are replaced.
        held.retain(|h| {
            !(h.term.starts_with("drift")
                || h.term == "temperature"
                || h.term.starts_with("self-gradient"))
        });
        let level: Vec<f64> = g
            .line_rows()
            .iter()
            .map(|&i| {
                let dt = tb[i] - t_mid;
                let mut v = rest[j][i]
                    - comp
                        .drift
                        .iter()
                        .enumerate()
                        .map(|(q, co)| co.value * dt.powi(q as i32 + 1))
                        .sum::<f64>();
                if let (Some(tc), Some(t)) = (comp.temperature, x.temperature) {
                    v -= tc.value * (t[i] - temp_mean);
                }
                v
            })
            .collect();
        let (bias, sg, held_level) = g.refit_level(&level, !x.with_file, s.min_significance);
        held.extend(held_level);
        c.polynomial = std::iter::once(bias)
            .chain(comp.drift.iter().copied())
            .collect();
        if !x.with_file {
            if c.temperature.is_some() {
                c.temperature = comp.temperature;
            }
            c.self_gradient = sg;
        }
        held.extend(
            cf.held
                .iter()
                .filter(|(name, _)| name == UNKNOWNS[j])
                .map(|(_, h)| h.clone()),
        );
    }
    None
}

/// A file's coefficient updated by a flight's estimate of its change (`delta`, zero where held):
/// the file as prior N(value, σ_f²), the flight's change as a measurement with σ_s, so the
/// posterior moves by delta·σ_f²/(σ_f² + σ_s²) with σ² = σ_f²σ_s²/(σ_f² + σ_s²). A file value the
/// calibration flight could not resolve (σ_f infinite) takes the flight's estimate; one without a
/// usable standard error (zero or NaN) is kept as it is.
fn posterior(file: Coefficient, delta: Coefficient) -> Coefficient {
    let (sf, ss) = (file.std_error, delta.std_error);
    if delta.value == 0.0 || !(ss.is_finite() && ss > 0.0) {
        return file;
    }
    if sf == f64::INFINITY {
        return Coefficient {
            value: file.value + delta.value,
            std_error: ss,
        };
    }
    if !(sf.is_finite() && sf > 0.0) {
        return file;
    }
    let w = sf * sf / (sf * sf + ss * ss);
    Coefficient {
        value: file.value + w * delta.value,
        std_error: (sf * sf * ss * ss / (sf * sf + ss * ss)).sqrt(),
    }
}

/// The file's calibration `file` refined by the flight's estimated changes `delta` to its coupling,
/// quadratic (the products about the file's origin) and temperature terms; a term the file lacks
/// comes from the flight alone; the self-gradient stays the file's. Returns the calibration and the
/// shift of the bias (m/s²) that keeps the temperature term's constant part where the flight's bias
/// fit put it, the term now being counted from the file's mean temperature.
fn refine(file: &PairCalibration, delta: &PairCalibration) -> (PairCalibration, f64) {
    let mut c = file.clone();
    let mut bias_shift = 0.0;
    c.temperature = match (file.temperature, delta.temperature) {
        (Some(f), Some(d)) => {
            let t = posterior(f, d);
            // τ_f(T − m_f) + Δτ(T − m_s) = (τ_f + Δτ)(T − m_f) + Δτ(m_f − m_s).
            bias_shift = (t.value - f.value) * (file.temperature_mean - delta.temperature_mean);
            Some(t)
        }
        (None, Some(d)) => {
            c.temperature_mean = delta.temperature_mean;
            Some(d)
        }
        (f, None) => f,
    };
    c.kappa = std::array::from_fn(|m| posterior(file.kappa[m], delta.kappa[m]));
    c.quadratic = match (file.quadratic, delta.quadratic) {
        (Some(f), Some(d)) => Some(std::array::from_fn(|m| posterior(f[m], d[m]))),
        (None, Some(d)) => {
            c.force_mean = delta.force_mean;
            Some(d)
        }
        (f, None) => f,
    };
    c.rotation_coupling = match (file.rotation_coupling, delta.rotation_coupling) {
        (Some(f), Some(d)) => Some(std::array::from_fn(|m| posterior(f[m], d[m]))),
        (None, Some(d)) => Some(d),
        (f, None) => f,
    };
    // The flight's own gyro bias: the file holds none to refine (a gyro's bias is per switch-on).
    c.gyro_rate = delta.gyro_rate;
    c.band_residual_rms = delta.band_residual_rms;
    (c, bias_shift)
}

/// Means of consecutive blocks of `block` samples (the last block may be shorter), spans of blocks
/// in parallel.
fn block_means(x: &[f64], block: usize) -> Vec<f64> {
    let span = block * 1024;
    let parts: Vec<Vec<f64>> = x
        .par_chunks(span)
        .map(|c| {
            let mut out = Vec::with_capacity(c.len().div_ceil(block));
            push_block_means(c, block, &mut out);
            out
        })
        .collect();
    parts.concat()
}

/// Appends the means of consecutive blocks of `block` samples of `x` (the last may be shorter) to
/// `out`. Each block is summed in sample order from −0 (as `Iterator::sum`), but four blocks at a
/// time in one loop: one sum's additions wait on each other, four independent sums keep the core
/// busy. The same bits as summing each block alone.
fn push_block_means(x: &[f64], block: usize, out: &mut Vec<f64>) {
    let groups = x.len() / (4 * block);
    for g in x[..groups * 4 * block].chunks_exact(4 * block) {
        let (b0, rest) = g.split_at(block);
        let (b1, rest) = rest.split_at(block);
        let (b2, b3) = rest.split_at(block);
        let mut s = [-0.0f64; 4];
        for i in 0..block {
            s[0] += b0[i];
            s[1] += b1[i];
            s[2] += b2[i];
            s[3] += b3[i];
        }
        out.extend(s.iter().map(|v| v / block as f64));
    }
    out.extend(
        x[groups * 4 * block..]
            .chunks(block)
            .map(|c| c.iter().sum::<f64>() / c.len() as f64),
    );
}

#[cfg(test)]
mod tests {

    /// A fit with κx = `value` ± `se` and nothing else.
    fn fit_with_kappa_x(value: f64, se: f64) -> PairCalibration {
        let c = |value, std_error| Coefficient { value, std_error };
        PairCalibration {
            kappa: [c(value, se), c(0.0, 0.0), c(0.0, 0.0)],
            rotation: [c(0.0, 0.0); 3],
            polynomial: Vec::new(),
            temperature: None,
            self_gradient: None,
            quadratic: None,
            force_mean: [0.0; 3],
            gyro_rate: None,
            rotation_coupling: None,
            t_mid: 0.0,
            temperature_mean: 0.0,
            band_residual_rms: 0.0,
        }
    }

    #[test]
    fn a_part_its_row_held_adds_its_estimate_to_the_error_not_to_the_value() {
        // Two parts: a row that kept κx = 3 ± 1 (weight 0.5) and the pair's residual row, which
        // held it at zero after estimating 4 ± 2 (weight 1). Value: 0.5·3 + 0 = 1.5; error, the
        // held part counted as √(2² + 4²): √((0.5·1)² + 2² + 4²) = √20.25 = 4.5.
        let fits = vec![
            Some(fit_with_kappa_x(3.0, 1.0)),
            Some(fit_with_kappa_x(0.0, 2.0)),
        ];
        let held = vec![
            Vec::new(),
            vec![(
                "κx".to_string(),
                Coefficient {
                    value: 4.0,
                    std_error: 2.0,
                },
            )],
        ];
        let parts = [(0.5, 0), (1.0, 1)];
        let got = band_term(parts.into_iter(), &fits, &held, "κx", &|c| {
            Some(c.kappa[0])
        })
        .expect("both parts have κx");
        assert_eq!(got.value, 1.5);
        assert!((got.std_error - 4.5).abs() < 1e-12, "{}", got.std_error);
        // Not held anywhere: the parts' own errors, √(0.5² + 2²).
        let none: Vec<Vec<(String, Coefficient)>> = vec![Vec::new(), Vec::new()];
        let plain = band_term(parts.into_iter(), &fits, &none, "κx", &|c| {
            Some(c.kappa[0])
        })
        .expect("both parts have κx");
        assert!((plain.std_error - 4.25f64.sqrt()).abs() < 1e-12);
        // No part has the term: none.
        assert!(
            band_term(parts.into_iter(), &fits, &held, "fz²", &|c| c
                .quadratic
                .map(|q| q[2]))
            .is_none()
        );
    }
    use super::*;

    #[test]
    fn block_means_four_at_a_time_give_each_block_alone_bit_for_bit() {
        let x: Vec<f64> = (0..10_007)
            .map(|i| ((i * 7919) % 1000) as f64 * 1.3e-3 - 0.4)
            .collect();
        for block in [1, 5, 12, 13] {
            let mut got = Vec::new();
            push_block_means(&x, block, &mut got);
            let want: Vec<f64> = x
                .chunks(block)
                .map(|c| c.iter().sum::<f64>() / c.len() as f64)
                .collect();
            assert_eq!(got.len(), want.len());
            assert!(
                got.iter()
                    .zip(&want)
                    .all(|(a, b)| a.to_bits() == b.to_bits())
            );
            let par = block_means(&x, block);
            assert!(
                par.iter()
                    .zip(&want)
                    .all(|(a, b)| a.to_bits() == b.to_bits())
            );
        }
    }

    #[test]
    fn a_flights_change_from_its_file_is_in_standard_errors_of_the_difference() {
        let c = |value: f64, std_error: f64| Coefficient { value, std_error };
        let blank = PairCalibration {
            kappa: [c(0.0, 0.0); 3],
            rotation: [c(0.0, 0.0); 3],
            polynomial: vec![],
            temperature: None,
            self_gradient: None,
            quadratic: None,
            gyro_rate: None,
            rotation_coupling: None,
            force_mean: [0.0; 3],
            t_mid: 0.0,
            temperature_mean: 0.0,
            band_residual_rms: 0.0,
        };
        let mut file = PairCalibration {
            kappa: [c(1e-5, 3e-7), c(2e-5, 3e-7), c(3e-5, 0.0)],
            ..blank.clone()
        };
        file.temperature = Some(c(1e-9, 1e-10));
        let mut delta = PairCalibration {
            // κx moved by 5e-7 (σ 4e-7: z = 1); κy held (zero change); κz's file error is zero.
            kappa: [c(5e-7, 4e-7), c(0.0, 4e-7), c(1e-6, 1e-7)],
            ..blank
        };
        delta.temperature = Some(c(-1e-9, f64::INFINITY));
        let z = change_from_file(&file, &delta);
        assert_eq!(z.len(), 1, "{z:?}");
        assert_eq!(z[0].0, "kappa[0]");
        assert!((z[0].1 - 1.0).abs() < 1e-12, "{z:?}");
    }

    #[test]
    fn the_posterior_weighs_the_file_and_the_flight_by_their_variances() {
        let c = |value: f64, std_error: f64| Coefficient { value, std_error };
        // Equal errors: halfway, error / √2 (inverse-variance weighting, textbook).
        let p = posterior(c(1.0, 2.0), c(4.0, 2.0));
        assert!((p.value - 3.0).abs() < 1e-15);
        assert!((p.std_error - 2f64.sqrt()).abs() < 1e-15);
        // A held change (zero) leaves the file as it is.
        assert_eq!(posterior(c(1.0, 2.0), c(0.0, 1.0)), c(1.0, 2.0));
        // A file term not resolved by its flight takes the flight's estimate.
        let p = posterior(c(0.0, f64::INFINITY), c(3.0, 0.5));
        assert_eq!(p, c(3.0, 0.5));
    }
}
