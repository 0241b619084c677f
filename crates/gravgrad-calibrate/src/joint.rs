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

use crate::crossings::{ComponentDrift, Crossing};
use crate::estimate::{
    Coefficient, Design, HeldTerm, PRODUCTS, PairCalibration, PairData, Settings, fit_with_band,
};
use gravgrad_core::SymTensor;
use gravgrad_core::attitude::{c_sn_degrees, c_sn_degrees_span};
use gravgrad_core::pairs::UNKNOWNS;
use gravgrad_core::pairs::{Operator, PairGeometry, pseudo_inverse};
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
///
/// The steps: the solve's operator for the pair set; the regressors' block means; each pair's
/// target z_p; the unknowns' and residuals' targets beside the fits' shared design; every target
/// band-passed; the gyro bias taken off; every target fitted; the tensor's drift refitted from the
/// crossings; and every pair's calibration combined from the fits of its rows.
pub fn estimate_from_blocks(
    d: &FlightData<'_>,
    blocks: &PairBlocks,
    s: &Settings,
    fixed: Option<&[PairCalibration]>,
) -> FlightCalibration {
    let unknowns = Unknowns::of(d.samples.pairs, d.alpha_from_pairs);
    let reg = BlockRegressors::of(d, blocks, s, fixed);
    let z = pair_targets(&unknowns, blocks, &reg, fixed);
    // The gyro bias is fitted once for the instrument (below), not per row.
    let fit_gyro_bias = s.gyro_rate;
    let settings_b = Settings {
        rate_hz: s.rate_hz / reg.block as f64,
        gyro_rate: false,
        ..s.clone()
    };
    let s = &settings_b;
    let pa = unknowns.gyro_prediction();
    let has_residual = unknowns.has_residual();
    let with_file = fixed.is_some();
    let (design, mut targets) = rayon::join(
        || block_design(&reg, with_file, s),
        || solve_targets(&unknowns, &z, &pa, &has_residual, &reg),
    );
    let mut band_targets = band_pass_targets(&design, &targets);
    // The gyros' bias from the tensor rows, jointly; its trace taken off every unknown's target.
    let gyro_bias = fit_gyro_bias.then(|| {
        crate::gyro_bias::take_off(
            &design,
            &pa,
            reg.rates(),
            (&mut targets, &mut band_targets),
            s.min_significance,
        )
    });
    let mut fitted = fit_targets(&design, &targets, &band_targets, &reg, with_file, s);
    let crossing_note = tensor_drift(&design, d, &reg, &targets, with_file, s, &mut fitted);
    let mut notes: Vec<String> = crossing_note.into_iter().collect();
    notes.extend(gyro_bias.as_ref().and_then(crate::gyro_bias::note));
    let mut health = flight_health(&unknowns, &fitted, gyro_bias.as_ref(), &design, notes, s);
    let combination = PairCombination {
        unknowns: &unknowns,
        held: held_estimates(&fitted),
        fits: fitted.into_iter().map(|f| f.map(|x| x.0)).collect(),
        gyro_bias: gyro_bias.as_ref(),
        f0: reg.f0,
    };
    let np = unknowns.pairs.len();
    let mut pairs = Vec::with_capacity(np);
    for p in 0..np {
        let (cal, change) = combination.pair(p, fixed);
        pairs.push(cal);
        health
            .file_change
            .extend(change.into_iter().map(|(term, z)| (p, term, z)));
    }
    FlightCalibration { pairs, health }
}

/// A fitted series' calibration with the terms it held (with their estimates then); `None` for a
/// series that was not fitted (a pair without a residual of its own).
type Fitted = Option<(PairCalibration, Vec<HeldTerm>)>;

/// The solve's view of the pair set: each pair's design row and the pseudo-inverse P with which the
/// solve forms the unknowns û = P·(−d) (`docs/physics.md`). A pair's difference is −A·u, m/s², for
/// u = [S (s⁻², sensor frame); α (rad/s², sensor axes)], so A's entries are in m and P's in m⁻¹.
struct Unknowns<'a> {
    pairs: &'a [PairGeometry],
    /// Each pair's full design row [Sxx Sxy Sxz Syy Syz Szz αx αy αz], m.
    rows: Vec<[f64; 9]>,
    /// A: the rows cut to the `k` unknowns the solve forms, m.
    a: Vec<Vec<f64>>,
    /// P, k × pairs, m⁻¹.
    op: Operator,
    /// Number of unknowns: 9 when the pairs give α, else 6.
    k: usize,
    /// True when the solve takes α from the pairs; false: from the gyros.
    alpha_from_pairs: bool,
}

impl<'a> Unknowns<'a> {
    /// The design rows of `pairs` and their pseudo-inverse, α among the unknowns when
    /// `alpha_from_pairs`.
    fn of(pairs: &'a [PairGeometry], alpha_from_pairs: bool) -> Self {
        let k = if alpha_from_pairs { 9 } else { 6 };
        let rows: Vec<[f64; 9]> = pairs.iter().map(PairGeometry::design_row).collect();
        let a: Vec<Vec<f64>> = rows.iter().map(|r| r[..k].to_vec()).collect();
        let op = pseudo_inverse(&a, k);
        Self {
            pairs,
            rows,
            a,
            op,
            k,
            alpha_from_pairs,
        }
    }

    /// P·A (k × k, dimensionless), to predict the α the unknown rows carry from the gyros.
    fn gyro_prediction(&self) -> Vec<Vec<f64>> {
        let (k, np, op, a) = (self.k, self.pairs.len(), &self.op, &self.a);
        (0..k)
            .map(|j| {
                (0..k)
                    .map(|m| (0..np).map(|p| op.p[j][p] * a[p][m]).sum())
                    .collect()
            })
            .collect()
    }

    /// Per pair, whether its row of the residual projector I − A·P carries anything; a pair whose
    /// row vanishes has no residual of its own to fit.
    fn has_residual(&self) -> Vec<bool> {
        let (k, np, op, a) = (self.k, self.pairs.len(), &self.op, &self.a);
        (0..np)
            .map(|p| {
                (0..np).any(|q| {
                    let ap: f64 = (0..k).map(|j| a[p][j] * op.p[j][q]).sum();
                    let v = if p == q { 1.0 - ap } else { -ap };
                    v.abs() > 1e-9
                })
            })
            .collect()
    }

    /// The name of fitted series `t`: the unknowns (`Gxx` … `αz`), then each pair's own residual
    /// (`pair <id>`).
    fn target_name(&self, t: usize) -> String {
        if t < self.k {
            UNKNOWNS[t].to_string()
        } else {
            format!("pair {}", self.pairs[t - self.k].id)
        }
    }
}

/// What the fits read besides their targets, as block means over blocks of `block` samples: the
/// model is linear in the samples, so it holds as well for block means as for samples.
struct BlockRegressors<'a> {
    /// The pair set (a series' geometry, which the fits and corrections do not read).
    pairs: &'a [PairGeometry],
    /// Samples per block.
    block: usize,
    /// M = ΩΩ − G_s's components xx xy xz yy yz zz, sensor frame, s⁻² ([`PairBlocks`]).
    m: &'a [Vec<f64>],
    /// Angular acceleration from the gyros, sensor axes, rad/s².
    alpha: Vec<Vec<f64>>,
    /// Angular rate, sensor axes, rad/s: the regressors of the gyro bias's trace.
    omega: Vec<Vec<f64>>,
    /// Time, s.
    time: Vec<f64>,
    /// The origin of the force's deviations in the quadratic terms, sensor axes, m/s².
    f0: [f64; 3],
    /// Specific force, sensor axes, m/s².
    force: [Vec<f64>; 3],
    /// Products of the force's deviations from `f0`, m²/s⁴, in the order of [`PRODUCTS`], when the
    /// quadratic terms are fitted or a file's are taken off.
    products: Option<[Vec<f64>; 6]>,
    /// Sensor temperature, °C, when logged.
    temperature: Option<Vec<f64>>,
    /// Aircraft attitude relative to the platform, radians, [roll, pitch], when logged.
    relative_attitude: Option<Vec<Vec<f64>>>,
    /// True for a block whose samples are all usable; `None`: all.
    usable: Option<Vec<bool>>,
}

impl<'a> BlockRegressors<'a> {
    /// The block means of what the fits read of flight `d`, on the blocks of `blocks`.
    fn of(
        d: &FlightData<'a>,
        blocks: &'a PairBlocks,
        s: &Settings,
        fixed: Option<&[PairCalibration]>,
    ) -> Self {
        let block = blocks.block;
        let mean = |x: &[f64]| block_means(x, block);
        let alpha = d.alpha.iter().map(|v| mean(v)).collect();
        let omega = d.samples.omega.iter().map(|v| mean(v)).collect();
        let time = mean(d.time);
        // The quadratic terms' regressors: block means of the products of the force's deviations
        // from its mean over the lines (products of block means would miss the power inside a
        // block). With a file whose quadratic terms are centred on its own force origin, the
        // products are formed about that origin, so that the flight's refinement of them adds to
        // the file's.
        let fixed_quadratic = fixed.is_some_and(|fx| fx.iter().any(|c| c.quadratic.is_some()));
        let f0 = match fixed.and_then(|fx| fx.iter().find(|c| c.quadratic.is_some())) {
            Some(c) => c.force_mean,
            None => crate::estimate::force_mean(d.f, d.usable),
        };
        let (force, products) =
            force_block_means(d.f, (s.quadratic || fixed_quadratic).then_some(f0), block);
        Self {
            pairs: d.samples.pairs,
            block,
            m: &blocks.m,
            alpha,
            omega,
            time,
            f0,
            force,
            products,
            temperature: d.temperature.map(mean),
            relative_attitude: d
                .relative_attitude
                .map(|r| r.iter().map(|v| mean(v)).collect()),
            usable: d
                .usable
                .map(|u| u.chunks(block).map(|c| c.iter().all(|x| *x)).collect()),
        }
    }

    /// A series at block level with difference `y` (m/s² or s⁻², whatever the target is) and the
    /// regressors' block means; its pair geometry is not read by the fits or the corrections.
    fn series<'s>(&'s self, y: &'s [f64]) -> PairData<'s> {
        PairData {
            geometry: &self.pairs[0],
            difference: y,
            omega: self.rates(),
            f: [&self.force[0], &self.force[1], &self.force[2]],
            alpha: [&self.alpha[0], &self.alpha[1], &self.alpha[2]],
            time: &self.time,
            temperature: self.temperature.as_deref(),
            usable: self.usable.as_deref(),
            expected: None,
            relative_attitude: self
                .relative_attitude
                .as_ref()
                .map(|r| [&r[0][..], &r[1][..]]),
        }
    }

    /// The angular rate's block means, sensor axes, rad/s.
    fn rates(&self) -> [&[f64]; 3] {
        [&self.omega[0], &self.omega[1], &self.omega[2]]
    }
}

/// Each pair's target z_p per block, m/s²: z_p = −(d_p − n_pᵀ·M·b_p − fixed part), less the gyro
/// α term when the solve takes α from the gyros. z is linear in d_p and in M's components, so its
/// block means come from theirs. The fixed part (a file's κ·f, temperature and self-gradient
/// terms, and its quadratic terms from the products' block means; bias and drift are fitted) is
/// linear too and comes off at block level. Pairs in parallel.
fn pair_targets(
    u: &Unknowns<'_>,
    blocks: &PairBlocks,
    reg: &BlockRegressors<'_>,
    fixed: Option<&[PairCalibration]>,
) -> Vec<Vec<f64>> {
    let fixed_parts = fixed.map(without_fitted_terms);
    (0..u.pairs.len())
        .into_par_iter()
        .map(|p| {
            let rw = &u.rows[p];
            let db = &blocks.d[p];
            let known = known_part(&rw[..6], reg.m, db.len());
            let mut zp: Vec<f64> = match (&fixed_parts, fixed) {
                (Some(c), Some(fx)) => {
                    let bd = reg.series(&[]);
                    db.iter()
                        .zip(&known)
                        .enumerate()
                        .map(|(i, (v, k))| {
                            -((v - c[p].correction_at(&bd, i) - file_quadratic(&fx[p], reg, i)) - k)
                        })
                        .collect()
                }
                _ => db.iter().zip(&known).map(|(v, k)| -(v - k)).collect(),
            };
            if !u.alpha_from_pairs {
                let ab = &reg.alpha;
                for (i, zv) in zp.iter_mut().enumerate() {
                    *zv -= rw[6] * ab[0][i] + rw[7] * ab[1][i] + rw[8] * ab[2][i];
                }
            }
            zp
        })
        .collect()
}

/// A file's coefficients without the terms a flight with the file fits or takes off elsewhere: bias
/// and drift (fitted) and the quadratic terms ([`file_quadratic`]).
fn without_fitted_terms(fixed: &[PairCalibration]) -> Vec<PairCalibration> {
    fixed
        .iter()
        .map(|c| {
            let mut c = c.clone();
            c.polynomial.clear();
            c.quadratic = None;
            c
        })
        .collect()
}

/// n_pᵀ·M·b_p per block (m/s²) of `len` blocks: M's components (s⁻², sensor frame) one at a time
/// across the blocks (vectorised), summed from −0. `coefficients` are the S part of the pair's
/// design row (m), which are those of n_pᵀ·M·b_p on M's components xx xy xz yy yz zz.
fn known_part(coefficients: &[f64], m: &[Vec<f64>], len: usize) -> Vec<f64> {
    let mut known = vec![-0.0; len];
    for (cc, mc) in coefficients.iter().zip(m) {
        for (kv, m) in known.iter_mut().zip(mc) {
            *kv += cc * m;
        }
    }
    known
}

/// A file's quadratic part of a pair's difference at block `i`, m/s², about the file's own force
/// origin m, from the products' block means about this flight's f0 (sensor axes, m/s²):
/// (f_a − m_a)(f_b − m_b) = P_ab + δ_a(f_b − f0_b) + δ_b(f_a − f0_a) + δ_a·δ_b with δ = f0 − m.
/// Zero when the file has no quadratic terms or no products were formed.
fn file_quadratic(file: &PairCalibration, reg: &BlockRegressors<'_>, i: usize) -> f64 {
    match (file.quadratic, &reg.products) {
        (Some(q), Some(pb)) => {
            let (f0, fb, m) = (reg.f0, &reg.force, file.force_mean);
            let dl: [f64; 3] = std::array::from_fn(|k| f0[k] - m[k]);
            let dev: [f64; 3] = std::array::from_fn(|k| fb[k][i] - f0[k]);
            PRODUCTS
                .iter()
                .zip(q)
                .enumerate()
                .map(|(j, ((a, b), qm))| {
                    qm.value * (pb[j][i] + dl[*a] * dev[*b] + dl[*b] * dev[*a] + dl[*a] * dl[*b])
                })
                .sum()
        }
        _ => 0.0,
    }
}

/// The fits' regressors at block level (the force band-passed, the polynomial, temperature,
/// quadratic and axis-error columns) and their normal equations, formed once for all targets.
/// With a file (`with_file`), the flight refines what its own data see: coupling, quadratic and
/// temperature terms, bias and drift (the file's self-gradient is kept: no relative attitude).
fn block_design(reg: &BlockRegressors<'_>, with_file: bool, s: &Settings) -> Design {
    let products = if s.quadratic {
        reg.products.as_ref()
    } else {
        None
    };
    let mut series = reg.series(&reg.time);
    if with_file {
        series.relative_attitude = None;
    }
    // The axis errors' regressors: the gyro α's block means, and M = ΩΩ − G's (formed already for
    // the known part of every difference; the G part is m̄ᵀ·G·b, the normal gradient times 1e-5).
    let (ab, m_b) = (&reg.alpha, reg.m);
    let rotation: Option<[&[f64]; 9]> = s.rotation_coupling.then(|| {
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
    Design::new(&series, false, products.map(|p| (p, reg.f0)), rotation, s)
}

/// The series the fits read, per block: first −û_j for each unknown (s⁻² or rad/s²; plus the gyro
/// prediction P·A (`pa`) of its α content from the gyro α's block means, when the pairs give α),
/// then −r_p for each pair (m/s²; empty where `has_residual` is false), with û = P·z and
/// r_p = z_p − A_p·û.
fn solve_targets(
    u: &Unknowns<'_>,
    z: &[Vec<f64>],
    pa: &[Vec<f64>],
    has_residual: &[bool],
    reg: &BlockRegressors<'_>,
) -> Vec<Vec<f64>> {
    let (n, alpha) = (reg.time.len(), &reg.alpha);
    let uh = unknowns_of(&u.op, z, n);
    let mut targets: Vec<Vec<f64>> = (0..u.k)
        .into_par_iter()
        .map(|j| {
            let mut t: Vec<f64> = uh[j].iter().map(|v| -v).collect();
            if u.alpha_from_pairs {
                for (i, tv) in t.iter_mut().enumerate() {
                    *tv += (0..3).map(|m| pa[j][6 + m] * alpha[m][i]).sum::<f64>();
                }
            }
            t
        })
        .collect();
    targets.par_extend((0..u.pairs.len()).into_par_iter().map(|p| {
        if has_residual[p] {
            (0..n)
                .map(|i| -(z[p][i] - (0..u.k).map(|j| u.a[p][j] * uh[j][i]).sum::<f64>()))
                .collect()
        } else {
            Vec::new()
        }
    }));
    targets
}

/// û_j = Σ_p P_jp·z_p over `n` blocks (s⁻² or rad/s² from z in m/s²), whole series at a time
/// (vectorised), the terms added in pair order from −0.
fn unknowns_of(op: &Operator, z: &[Vec<f64>], n: usize) -> Vec<Vec<f64>> {
    op.p.par_iter()
        .map(|row| {
            let mut uj = vec![-0.0; n];
            for (pjp, zp) in row.iter().zip(z) {
                for (x, zv) in uj.iter_mut().zip(zp) {
                    *x += pjp * zv;
                }
            }
            uj
        })
        .collect()
}

/// Every target band-passed once in `design`'s band and runs, for the gyro bias and the band fits;
/// an empty target stays empty.
fn band_pass_targets(design: &Design, targets: &[Vec<f64>]) -> Vec<Vec<f64>> {
    targets
        .par_iter()
        .map(|t| {
            if t.is_empty() {
                Vec::new()
            } else {
                design.band_pass(t)
            }
        })
        .collect()
}

/// Every target fitted against `design` (the full model, or bias and drift only as the settings
/// say), in parallel; an empty target is not fitted. With a file in force (`with_file`) the targets
/// have the file's parts taken off already: what is fitted is the flight's change to them.
fn fit_targets(
    design: &Design,
    targets: &[Vec<f64>],
    band_targets: &[Vec<f64>],
    reg: &BlockRegressors<'_>,
    with_file: bool,
    s: &Settings,
) -> Vec<Fitted> {
    let products = if s.quadratic {
        reg.products.as_ref()
    } else {
        None
    };
    targets
        .par_iter()
        .zip(band_targets)
        .map(|(y, y_band)| {
            if y.is_empty() {
                return None;
            }
            let mut data = reg.series(y);
            if with_file {
                data.relative_attitude = None;
            }
            Some(fit_with_band(design, y, y_band, &data, products, s))
        })
        .collect()
}

/// The tensor's drift and temperature terms from the flight's crossings, not from time (a regional
/// across the lines reads like a drift in time), the bias and self-gradient refitted after them
/// ([`drift_from_crossings`]), when the flight has such terms to fit: a drift, or a temperature
/// term without a file, and with a file only when drift is fitted. Returns the note for the log.
fn tensor_drift(
    design: &Design,
    d: &FlightData<'_>,
    reg: &BlockRegressors<'_>,
    targets: &[Vec<f64>],
    with_file: bool,
    s: &Settings,
    fitted: &mut [Fitted],
) -> Option<String> {
    if !((s.drift_order >= 1 || reg.temperature.is_some()) && !(with_file && s.drift_order == 0)) {
        return None;
    }
    let products = if s.quadratic {
        reg.products.as_ref()
    } else {
        None
    };
    drift_from_crossings(
        &CrossingInputs {
            design,
            flight: d,
            block: reg.block,
            targets,
            force: &reg.force,
            products,
            time: &reg.time,
            temperature: reg.temperature.as_deref(),
            usable: reg.usable.as_deref(),
            with_file,
        },
        s,
        fitted,
    )
}

/// The flight's [`Health`] but for the file changes: the `notes`, the design's conditions, the band
/// (Hz), per fitted series what it held and, for the unknowns, its band residual (s⁻²), then what the
/// gyro bias held.
fn flight_health(
    u: &Unknowns<'_>,
    fitted: &[Fitted],
    gyro_bias: Option<&crate::gyro_bias::GyroBias>,
    design: &Design,
    notes: Vec<String>,
    s: &Settings,
) -> Health {
    let mut health = Health {
        notes,
        condition: design.conditions(),
        band_hz: s.band_hz,
        ..Health::default()
    };
    for (t, f) in fitted.iter().enumerate() {
        if let Some((c, held)) = f {
            health
                .held
                .extend(held.iter().map(|h| (u.target_name(t), h.clone())));
            if t < u.k {
                health
                    .band_residual
                    .push((u.target_name(t), c.band_residual_rms));
            }
        }
    }
    if let Some(gb) = gyro_bias {
        health
            .held
            .extend(gb.held.iter().map(|h| ("gyros".to_string(), h.clone())));
    }
    health
}

/// What each fitted series held, by term, with the estimate it had when held.
fn held_estimates(fitted: &[Fitted]) -> Vec<Vec<(String, Coefficient)>> {
    fitted
        .iter()
        .map(|f| {
            f.as_ref().map_or(Vec::new(), |(_, held)| {
                held.iter()
                    .filter_map(|h| h.estimate.map(|e| (h.term.clone(), e)))
                    .collect()
            })
        })
        .collect()
}

/// A coefficient of zero with no error: what a term no part has is applied as.
const ZERO: Coefficient = Coefficient {
    value: 0.0,
    std_error: 0.0,
};

/// Σ w·c of the coefficient `get` reads from each of `parts` (weight, fit) that has it, errors
/// combined as independent; `None` when none has it.
fn pick(
    parts: &[(f64, &PairCalibration)],
    get: &dyn Fn(&PairCalibration) -> Option<Coefficient>,
) -> Option<Coefficient> {
    let v: Vec<(f64, Coefficient)> = parts
        .iter()
        .filter_map(|(w, c)| get(c).map(|x| (*w, x)))
        .collect();
    (!v.is_empty()).then(|| combine(&v))
}

/// What every pair's calibration is combined from: the fits of the unknowns' rows (weight A_pj)
/// and of the pair's own residual row (weight 1), per pair κ = A·K + (I − A·P)·κ.
struct PairCombination<'a> {
    unknowns: &'a Unknowns<'a>,
    /// Each fitted series' calibration: the unknowns first, then the pairs' residuals.
    fits: Vec<Option<PairCalibration>>,
    /// What each fitted series held, with its estimate then ([`held_estimates`]).
    held: Vec<Vec<(String, Coefficient)>>,
    gyro_bias: Option<&'a crate::gyro_bias::GyroBias>,
    /// The origin of the quadratic terms' force deviations, sensor axes, m/s².
    f0: [f64; 3],
}

impl PairCombination<'_> {
    /// Pair `p`'s calibration, with the file's (`fixed`) refined by the flight's estimate when
    /// given, and the estimated changes to the file's coefficients in standard errors
    /// ([`change_from_file`]). The rotation term is geometry: d carries (b × n)·α.
    fn pair(
        &self,
        p: usize,
        fixed: Option<&[PairCalibration]>,
    ) -> (PairCalibration, Vec<(String, f64)>) {
        let parts = self.parts(p);
        let first = parts.first().map(|x| x.1);
        let n_poly = first.map_or(0, |c| c.polynomial.len());
        let mut polynomial: Vec<Coefficient> = (0..n_poly)
            .map(|q| pick(&parts, &|c| c.polynomial.get(q).copied()).unwrap_or(ZERO))
            .collect();
        let estimated = self.estimated(p, &parts);
        let (base, bias_shift, change) = match fixed {
            Some(fx) => {
                let change = change_from_file(&fx[p], &estimated);
                let (base, shift) = refine(&fx[p], &estimated);
                (base, shift, change)
            }
            None => (estimated, 0.0, Vec::new()),
        };
        if let Some(b) = polynomial.first_mut() {
            b.value += bias_shift;
        }
        let rotation = std::array::from_fn(|m| Coefficient {
            value: -self.unknowns.rows[p][6 + m],
            std_error: 0.0,
        });
        let cal = PairCalibration {
            rotation,
            polynomial,
            t_mid: first.map_or(0.0, |c| c.t_mid),
            ..base
        };
        (cal, change)
    }

    /// Pair `p`'s parts: (A_pj, fit) for each unknown row fitted, then (1, fit) of its own residual
    /// row when fitted.
    fn parts(&self, p: usize) -> Vec<(f64, &PairCalibration)> {
        let (k, a) = (self.unknowns.k, &self.unknowns.a);
        let mut parts: Vec<(f64, &PairCalibration)> = (0..k)
            .filter_map(|j| self.fits[j].as_ref().map(|c| (a[p][j], c)))
            .collect();
        if let Some(c) = &self.fits[k + p] {
            parts.push((1.0, c));
        }
        parts
    }

    /// Pair `p`'s band term `name` from `rows` (weight, unknown row) and its own residual row
    /// ([`band_term`]).
    fn band_term(
        &self,
        p: usize,
        rows: &[(f64, usize)],
        name: &str,
        get: &dyn Fn(&PairCalibration) -> Option<Coefficient>,
    ) -> Option<Coefficient> {
        let parts = rows
            .iter()
            .copied()
            .chain(std::iter::once((1.0, self.unknowns.k + p)));
        band_term(parts, &self.fits, &self.held, name, get)
    }

    /// The band residual pair `p`'s calibration leaves in the tensor, m/s²: its tensor rows'
    /// (weighted by A_pj) and its own residual row's, combined as independent. The α rows' residual
    /// is the gyros' differentiated noise, not a misfit of the pair, and stays out.
    fn band_residual(&self, p: usize) -> f64 {
        let (k, a) = (self.unknowns.k, &self.unknowns.a);
        (0..6)
            .filter_map(|j| self.fits[j].as_ref().map(|c| (a[p][j], c)))
            .chain(self.fits[k + p].as_ref().map(|c| (1.0, c)))
            .map(|(w, c)| (w * c.band_residual_rms).powi(2))
            .sum::<f64>()
            .sqrt()
    }

    /// Pair `p`'s estimate from its `parts` (bias and drift left empty, rotation zero): κ
    /// (dimensionless), temperature (m/s² per °C), quadratic terms (per m/s²), the gyro bias's
    /// correction, axis errors, self-gradient (m/s² per radian) and band residual.
    fn estimated(&self, p: usize, parts: &[(f64, &PairCalibration)]) -> PairCalibration {
        let (k, a) = (self.unknowns.k, &self.unknowns.a);
        let first = parts.first().map(|x| x.1);
        let band = self.band_residual(p);
        let unknown_rows: Vec<(f64, usize)> = (0..k).map(|j| (a[p][j], j)).collect();
        PairCalibration {
            kappa: std::array::from_fn(|m| {
                let name = ["κx", "κy", "κz"][m];
                self.band_term(p, &unknown_rows, name, &|c| Some(c.kappa[m]))
                    .unwrap_or(ZERO)
            }),
            rotation: [ZERO; 3],
            polynomial: vec![],
            temperature: pick(parts, &|c| c.temperature),
            quadratic: first.and_then(|c| c.quadratic).map(|_| {
                std::array::from_fn(|m| {
                    let name = crate::estimate::PRODUCT_NAMES[m];
                    self.band_term(p, &unknown_rows, name, &|c| c.quadratic.map(|q| q[m]))
                        .unwrap_or(ZERO)
                })
            }),
            force_mean: self.f0,
            gyro_rate: self.gyro_bias.and_then(|gb| {
                crate::gyro_bias::pair_correction(&self.unknowns.pairs[p], &gb.beta)
            }),
            // From the tensor rows and the pair's own residual row only: an α row's coefficient
            // of the gyro α is the gyros' differentiated noise against the pairs', not an axis
            // error, and would put that noise into the pair.
            rotation_coupling: first.and_then(|c| c.rotation_coupling).map(|_| {
                let tensor_rows: Vec<(f64, usize)> = (0..6).map(|j| (a[p][j], j)).collect();
                std::array::from_fn(|m| {
                    let name = format!("axis error: {}", crate::estimate::ROTATION_NAMES[m]);
                    self.band_term(p, &tensor_rows, &name, &|c| {
                        c.rotation_coupling.map(|r| r[m])
                    })
                    .unwrap_or(ZERO)
                })
            }),
            self_gradient: {
                let r = pick(parts, &|c| c.self_gradient.map(|x| x[0]));
                let q = pick(parts, &|c| c.self_gradient.map(|x| x[1]));
                r.zip(q).map(|(r, q)| [r, q])
            },
            t_mid: 0.0,
            temperature_mean: first.map_or(0.0, |c| c.temperature_mean),
            band_residual_rms: band,
        }
    }
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
    let crossings = crossings_in_blocks(x.flight, x.block);
    let rest = rows_less_coupling(x, fitted);
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
        x.time,
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
        let level = level_less_drift(x, &rest[j], comp, (t_mid, temp_mean));
        let (bias, sg, held_level) = x
            .design
            .refit_level(&level, !x.with_file, s.min_significance);
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

/// The flight's crossings (sample pairs of a survey and a tie pass) as blocks of `block` samples,
/// with the sensor attitude C_sn at each pass; none without the known field's attitude, and a
/// crossing beyond the attitude series is dropped.
fn crossings_in_blocks(flight: &FlightData<'_>, block: usize) -> Vec<Crossing> {
    let xs = flight.crossings.unwrap_or(&[]);
    match flight.samples.known.as_ref() {
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
    }
}

/// Each tensor row's target (block means, s⁻²) with its fitted coupling and quadratic parts taken
/// off (with a file, the file's came off with its other fixed parts already; these are the
/// flight's changes); zeros for a row not fitted.
fn rows_less_coupling(
    x: &CrossingInputs<'_>,
    fitted: &[Option<(PairCalibration, Vec<HeldTerm>)>],
) -> Vec<Vec<f64>> {
    (0..6)
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
            None => vec![0.0; x.time.len()],
        })
        .collect()
}

/// A tensor row's level on the design's line blocks (s⁻²): `rest` less the crossings' drift
/// polynomial in t − t_mid (s) and, when fitted, the temperature term about the mean temperature
/// (°C); `(t_mid, temp_mean)`.
fn level_less_drift(
    x: &CrossingInputs<'_>,
    rest: &[f64],
    comp: &ComponentDrift,
    (t_mid, temp_mean): (f64, f64),
) -> Vec<f64> {
    x.design
        .line_rows()
        .iter()
        .map(|&i| {
            let dt = x.time[i] - t_mid;
            let mut v = rest[i]
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
        .collect()
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
