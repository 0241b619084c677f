//! The stored result of one flight's per-flight stages (layout `flight-result/2`, HDF5):
//! `<out>/flights/<flight>.h5`, written by `gravgrad run RECIPE --flight NAME` and reused by a later
//! `gravgrad run RECIPE` when its key still matches. Every number is stored as the bits the pipeline
//! produced (no filters that could change them), so products made from a stored flight are the
//! bytes of products made from a computed one.
//!
//! The key is the SHA-256 (hex) over the tool version, the map frame (a `utm` projection depends on
//! every flight's positions), the flight's name and the SHA-256 of each input that enters the
//! per-flight stages: recipe, instrument, navigation file, DEM, calibration file and the flight's
//! own log. Any change to one of them makes the stored file stale and it is recomputed.
//!
//! Layout: root attributes `layout`, `key`, `flight`, `tool`, `alpha_source` (`pairs`/`gyros`),
//! `heading_only` (0/1), `observed` (six 0/1 for Gxx … Gzz); group `samples` with 1-D datasets
//! `time` (s), `line`, `lat_deg`, `lon_deg`, `height_m`, `easting_m`, `northing_m`,
//! `convergence_rad`, `trace` (s⁻²), the tensors `measured_*`, `rotated_*`, `normal_*` and, when
//! present, `terrain_*` (xx xy xz yy yz zz, s⁻²), `clearance` (m) and `alpha_difference_x|y|z`
//! (rad/s²); group `calibration` with one subgroup per pair (in the instrument's order, named
//! `NN-<id>`) holding `kappa`, `kappa_se` (dimensionless), `rotation`, `rotation_se` (m),
//! `polynomial`, `polynomial_se` (m/s², m/s²/sᵏ), `scalars` (t_mid s, temperature mean °C, band
//! residual RMS m/s²) and, when fitted, `temperature` (value, SE; m/s² per °C), `self_gradient`
//! (roll value, roll SE, pitch value, pitch SE; m/s² per rad), `quadratic`, `quadratic_se`
//! ((m/s²)⁻¹) with `force_mean` (m/s²), `gyro_rate`, `gyro_rate_se` (m/s² per rad/s) and `rotation_coupling`, `rotation_coupling_se`
//! (m).

use crate::tables::write_atomic;
use gravgrad_calibrate::estimate::{Coefficient, PairCalibration};
use gravgrad_core::SymTensor;
use gravgrad_core::pairs::AlphaSource;
use gravgrad_survey::pipeline::{FlightResult, Positions};
use hdf5_pure::{AttrValue, File, FileBuilder, Group};
use sha2::{Digest, Sha256};
use std::collections::HashMap;
use std::path::{Path, PathBuf};

/// The layout string of the file.
pub const LAYOUT: &str = "flight-result/2";

const COMPONENTS: [&str; 6] = ["xx", "xy", "xz", "yy", "yz", "zz"];

/// Where the stored result of flight `name` lives under the output folder `out`.
pub fn path(out: &Path, name: &str) -> PathBuf {
    out.join("flights").join(format!("{name}.h5"))
}

/// The key of a flight's stored result: SHA-256 (hex) over the tool version, the map frame's EPSG
/// code, the flight's name and `(role, SHA-256)` of each input file.
pub fn key(epsg: u32, name: &str, inputs: &[(&str, String)]) -> String {
    let mut h = Sha256::new();
    h.update(format!(
        "{LAYOUT}\ngravgrad {}\n",
        env!("CARGO_PKG_VERSION")
    ));
    h.update(format!("EPSG:{epsg}\nflight {name}\n"));
    for (role, sha) in inputs {
        h.update(format!("{role} {sha}\n"));
    }
    h.finalize().iter().map(|b| format!("{b:02x}")).collect()
}

fn string(s: &str) -> AttrValue {
    AttrValue::String(s.to_string())
}

fn tensor_columns(t: &[SymTensor]) -> [Vec<f64>; 6] {
    std::array::from_fn(|k| t.iter().map(|v| v.to_array()[k]).collect())
}

/// Writes `path` (temporary name, then renamed).
pub fn write(path: &Path, key: &str, name: &str, r: &FlightResult) -> Result<(), String> {
    let mut b = FileBuilder::new();
    b.set_attr("layout", string(LAYOUT));
    b.set_attr("key", string(key));
    b.set_attr("flight", string(name));
    b.set_attr(
        "tool",
        string(&format!("gravgrad {}", env!("CARGO_PKG_VERSION"))),
    );
    b.set_attr(
        "alpha_source",
        string(match r.alpha_source {
            AlphaSource::Pairs => "pairs",
            AlphaSource::Gyros => "gyros",
        }),
    );
    b.set_attr("heading_only", AttrValue::I64(i64::from(r.heading_only)));
    // What calibration held or dropped, one line each (empty: nothing).
    b.set_attr("calibration_notes", string(&r.calibration_notes.join("\n")));
    b.set_attr(
        "observed",
        AttrValue::I64Array(r.observed.iter().map(|o| i64::from(*o)).collect()),
    );
    let mut s = b.create_group("samples");
    let p = &r.positions;
    let mut f64s: Vec<(String, Vec<f64>)> = vec![
        ("time".into(), r.time.clone()),
        ("lat_deg".into(), p.lat_deg.clone()),
        ("lon_deg".into(), p.lon_deg.clone()),
        ("height_m".into(), p.height_m.clone()),
        ("easting_m".into(), p.easting_m.clone()),
        ("northing_m".into(), p.northing_m.clone()),
        ("convergence_rad".into(), p.convergence_rad.clone()),
        ("trace".into(), r.trace.clone()),
    ];
    let mut tensors: Vec<(&str, &[SymTensor])> = vec![
        ("measured", &r.measured),
        ("rotated", &r.rotated),
        ("normal", &r.normal),
    ];
    if let Some(t) = &r.terrain {
        tensors.push(("terrain", t));
    }
    for (label, t) in tensors {
        for (c, col) in COMPONENTS.iter().zip(tensor_columns(t)) {
            f64s.push((format!("{label}_{c}"), col));
        }
    }
    if let Some(c) = &r.clearance {
        f64s.push(("clearance".into(), c.clone()));
    }
    if let Some(a) = &r.alpha_difference {
        for (k, axis) in ["x", "y", "z"].iter().enumerate() {
            f64s.push((
                format!("alpha_difference_{axis}"),
                a.iter().map(|v| v[k]).collect(),
            ));
        }
    }
    s.create_dataset("line").with_i64_data(&r.line);
    for (n, v) in &f64s {
        s.create_dataset(n).with_f64_data(v);
    }
    b.add_group(s.finish());
    let mut cal = b.create_group("calibration");
    for (k, (id, c)) in r.calibration.iter().enumerate() {
        let mut g = cal.create_group(&format!("{k:02}-{id}"));
        let values = |x: &[Coefficient]| x.iter().map(|c| c.value).collect::<Vec<_>>();
        let errors = |x: &[Coefficient]| x.iter().map(|c| c.std_error).collect::<Vec<_>>();
        g.set_attr("id", string(id));
        g.create_dataset("kappa").with_f64_data(&values(&c.kappa));
        g.create_dataset("kappa_se")
            .with_f64_data(&errors(&c.kappa));
        g.create_dataset("rotation")
            .with_f64_data(&values(&c.rotation));
        g.create_dataset("rotation_se")
            .with_f64_data(&errors(&c.rotation));
        if !c.polynomial.is_empty() {
            g.create_dataset("polynomial")
                .with_f64_data(&values(&c.polynomial));
            g.create_dataset("polynomial_se")
                .with_f64_data(&errors(&c.polynomial));
        }
        g.create_dataset("scalars").with_f64_data(&[
            c.t_mid,
            c.temperature_mean,
            c.band_residual_rms,
        ]);
        if let Some(t) = c.temperature {
            g.create_dataset("temperature")
                .with_f64_data(&[t.value, t.std_error]);
        }
        if let Some(q) = c.quadratic {
            g.create_dataset("quadratic").with_f64_data(&values(&q));
            g.create_dataset("quadratic_se").with_f64_data(&errors(&q));
            g.create_dataset("force_mean").with_f64_data(&c.force_mean);
        }
        if let Some(r) = c.rotation_coupling {
            g.create_dataset("rotation_coupling")
                .with_f64_data(&values(&r));
            g.create_dataset("rotation_coupling_se")
                .with_f64_data(&errors(&r));
        }
        if let Some(w) = c.gyro_rate {
            g.create_dataset("gyro_rate").with_f64_data(&values(&w));
            g.create_dataset("gyro_rate_se").with_f64_data(&errors(&w));
        }
        if let Some([roll, pitch]) = c.self_gradient {
            g.create_dataset("self_gradient").with_f64_data(&[
                roll.value,
                roll.std_error,
                pitch.value,
                pitch.std_error,
            ]);
        }
        cal.add_group(g.finish());
    }
    b.add_group(cal.finish());
    write_atomic(path, |f| b.finish_to(f).map_err(|e| e.to_string())).map_err(|e| e.to_string())
}

/// What reading a stored flight gave.
pub enum Stored {
    /// The file holds the result for this key.
    Fresh(Box<FlightResult>),
    /// No file, or one made from other inputs.
    Stale,
}

fn attr_text(attrs: &HashMap<String, AttrValue>, name: &str) -> Option<String> {
    match attrs.get(name)? {
        AttrValue::String(s) => Some(s.clone()),
        AttrValue::VarLenString(s) => Some(s.clone()),
        _ => None,
    }
}

fn attr_ints(attrs: &HashMap<String, AttrValue>, name: &str) -> Option<Vec<i64>> {
    match attrs.get(name)? {
        AttrValue::I64(v) => Some(vec![*v]),
        AttrValue::I64Array(v) => Some(v.clone()),
        _ => None,
    }
}

/// Reads `path` when its key is `key`. `Err` names the file and what is wrong when the file holds
/// this key but cannot be read back.
pub fn read(path: &Path, key: &str) -> Result<Stored, String> {
    if !path.is_file() {
        return Ok(Stored::Stale);
    }
    let at = |what: String| format!("{}: {what}", path.display());
    let file = File::open(path).map_err(|e| at(format!("not readable as HDF5 ({e})")))?;
    let attrs = file
        .root()
        .attrs()
        .map_err(|e| at(format!("root attributes: {e}")))?;
    if attr_text(&attrs, "layout").as_deref() != Some(LAYOUT)
        || attr_text(&attrs, "key").as_deref() != Some(key)
    {
        return Ok(Stored::Stale);
    }
    let samples = file
        .group("samples")
        .map_err(|e| at(format!("group `samples`: {e}")))?;
    let names = samples
        .datasets()
        .map_err(|e| at(format!("group `samples`: {e}")))?;
    let has = |n: &str| names.iter().any(|x| x == n);
    let col = |n: &str| -> Result<Vec<f64>, String> {
        samples
            .dataset(n)
            .and_then(|d| d.read_f64())
            .map_err(|e| at(format!("dataset `samples/{n}`: {e}")))
    };
    let tensor = |label: &str| -> Result<Vec<SymTensor>, String> {
        let cols: Vec<Vec<f64>> = COMPONENTS
            .iter()
            .map(|c| col(&format!("{label}_{c}")))
            .collect::<Result<_, _>>()?;
        Ok((0..cols[0].len())
            .map(|i| SymTensor::from_array(std::array::from_fn(|k| cols[k][i])))
            .collect())
    };
    let line = samples
        .dataset("line")
        .and_then(|d| d.read_i64())
        .map_err(|e| at(format!("dataset `samples/line`: {e}")))?;
    let alpha_difference = if has("alpha_difference_x") {
        let [x, y, z] = [
            col("alpha_difference_x")?,
            col("alpha_difference_y")?,
            col("alpha_difference_z")?,
        ];
        Some((0..x.len()).map(|i| [x[i], y[i], z[i]]).collect())
    } else {
        None
    };
    let observed = attr_ints(&attrs, "observed")
        .filter(|v| v.len() == 6)
        .ok_or_else(|| at("attribute `observed`: expected six 0/1 values".into()))?;
    let heading_only = attr_ints(&attrs, "heading_only")
        .and_then(|v| v.first().copied())
        .ok_or_else(|| at("attribute `heading_only`: expected 0 or 1".into()))?;
    let alpha_source = match attr_text(&attrs, "alpha_source").as_deref() {
        Some("pairs") => AlphaSource::Pairs,
        Some("gyros") => AlphaSource::Gyros,
        _ => {
            return Err(at(
                "attribute `alpha_source`: expected \"pairs\" or \"gyros\"".into(),
            ));
        }
    };
    let calibration = read_calibration(&file, &at)?;
    Ok(Stored::Fresh(Box::new(FlightResult {
        positions: Positions {
            lat_deg: col("lat_deg")?,
            lon_deg: col("lon_deg")?,
            height_m: col("height_m")?,
            easting_m: col("easting_m")?,
            northing_m: col("northing_m")?,
            convergence_rad: col("convergence_rad")?,
        },
        time: col("time")?,
        line,
        clearance: if has("clearance") {
            Some(col("clearance")?)
        } else {
            None
        },
        measured: tensor("measured")?,
        rotated: tensor("rotated")?,
        normal: tensor("normal")?,
        terrain: if has("terrain_xx") {
            Some(tensor("terrain")?)
        } else {
            None
        },
        trace: col("trace")?,
        alpha_difference,
        observed: std::array::from_fn(|k| observed[k] != 0),
        heading_only: heading_only != 0,
        alpha_source,
        calibration,
        calibration_notes: attr_text(&attrs, "calibration_notes")
            .filter(|t| !t.is_empty())
            .map(|t| t.lines().map(String::from).collect())
            .unwrap_or_default(),
        calibration_held: Vec::new(),
        timings: Vec::new(),
    })))
}

fn read_calibration(
    file: &File,
    at: &dyn Fn(String) -> String,
) -> Result<Vec<(String, PairCalibration)>, String> {
    let cal = file
        .group("calibration")
        .map_err(|e| at(format!("group `calibration`: {e}")))?;
    let mut groups = cal
        .groups()
        .map_err(|e| at(format!("group `calibration`: {e}")))?;
    groups.sort();
    groups
        .iter()
        .map(|g| {
            let grp: Group = cal
                .group(g)
                .map_err(|e| at(format!("group `calibration/{g}`: {e}")))?;
            read_pair(&grp, g, at)
        })
        .collect()
}

/// The optional `N` coefficients stored as datasets `key` (values) and `key_se` (standard errors)
/// of pair group `name`: both absent is `None`; one absent or either of the wrong length an error
/// naming the group and both datasets.
fn optional_coefficients<const N: usize>(
    values: Option<Vec<f64>>,
    errors: Option<Vec<f64>>,
    name: &str,
    key: &str,
    at: &dyn Fn(String) -> String,
) -> Result<Option<[Coefficient; N]>, String> {
    match (values, errors) {
        (Some(v), Some(e)) if v.len() == N && e.len() == N => {
            Ok(Some(std::array::from_fn(|m| Coefficient {
                value: v[m],
                std_error: e[m],
            })))
        }
        (None, None) => Ok(None),
        _ => Err(at(format!(
            "group `calibration/{name}`: `{key}` and `{key}_se` must hold {N} values each"
        ))),
    }
}

fn read_pair(
    g: &Group,
    name: &str,
    at: &dyn Fn(String) -> String,
) -> Result<(String, PairCalibration), String> {
    let names = g
        .datasets()
        .map_err(|e| at(format!("group `calibration/{name}`: {e}")))?;
    let get = |n: &str| -> Result<Option<Vec<f64>>, String> {
        if !names.iter().any(|x| x == n) {
            return Ok(None);
        }
        g.dataset(n)
            .and_then(|d| d.read_f64())
            .map(Some)
            .map_err(|e| at(format!("dataset `calibration/{name}/{n}`: {e}")))
    };
    let need = |n: &str, len: Option<usize>| -> Result<Vec<f64>, String> {
        get(n)?
            .filter(|v| len.is_none_or(|l| v.len() == l))
            .ok_or_else(|| {
                at(format!(
                    "dataset `calibration/{name}/{n}`: missing or of the wrong length"
                ))
            })
    };
    let coefs = |v: &[f64], e: &[f64]| -> Vec<Coefficient> {
        v.iter()
            .zip(e)
            .map(|(value, std_error)| Coefficient {
                value: *value,
                std_error: *std_error,
            })
            .collect()
    };
    let three = |v: Vec<f64>, e: Vec<f64>| -> [Coefficient; 3] {
        std::array::from_fn(|k| Coefficient {
            value: v[k],
            std_error: e[k],
        })
    };
    let id = g
        .attrs()
        .ok()
        .and_then(|a| attr_text(&a, "id"))
        .ok_or_else(|| {
            at(format!(
                "group `calibration/{name}`: attribute `id` missing"
            ))
        })?;
    let polynomial = match (get("polynomial")?, get("polynomial_se")?) {
        (Some(v), Some(e)) if v.len() == e.len() => coefs(&v, &e),
        (None, None) => Vec::new(),
        _ => {
            return Err(at(format!(
                "group `calibration/{name}`: `polynomial` and `polynomial_se` differ"
            )));
        }
    };
    let scalars = need("scalars", Some(3))?;
    let temperature = get("temperature")?.map(|t| Coefficient {
        value: t[0],
        std_error: t.get(1).copied().unwrap_or(f64::NAN),
    });
    let self_gradient = match get("self_gradient")? {
        Some(s) if s.len() == 4 => Some([
            Coefficient {
                value: s[0],
                std_error: s[1],
            },
            Coefficient {
                value: s[2],
                std_error: s[3],
            },
        ]),
        Some(_) => {
            return Err(at(format!(
                "dataset `calibration/{name}/self_gradient`: expected 4 values"
            )));
        }
        None => None,
    };
    let quadratic = optional_coefficients::<6>(
        get("quadratic")?,
        get("quadratic_se")?,
        name,
        "quadratic",
        at,
    )?;
    let gyro_rate = optional_coefficients::<3>(
        get("gyro_rate")?,
        get("gyro_rate_se")?,
        name,
        "gyro_rate",
        at,
    )?;
    let rotation_coupling = optional_coefficients::<9>(
        get("rotation_coupling")?,
        get("rotation_coupling_se")?,
        name,
        "rotation_coupling",
        at,
    )?;
    let force_mean = match get("force_mean")? {
        Some(f) if f.len() == 3 => [f[0], f[1], f[2]],
        None => [0.0; 3],
        Some(_) => {
            return Err(at(format!(
                "dataset `calibration/{name}/force_mean`: expected 3 values"
            )));
        }
    };
    Ok((
        id,
        PairCalibration {
            quadratic,
            force_mean,
            gyro_rate,
            rotation_coupling,
            kappa: three(need("kappa", Some(3))?, need("kappa_se", Some(3))?),
            rotation: three(need("rotation", Some(3))?, need("rotation_se", Some(3))?),
            polynomial,
            temperature,
            self_gradient,
            t_mid: scalars[0],
            temperature_mean: scalars[1],
            band_residual_rms: scalars[2],
        },
    ))
}
