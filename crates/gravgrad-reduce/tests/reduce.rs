//! The terrain engines against things outside them: the all-exact prism sum (itself checked
//! against harmonica in gravgrad-forward's tests), the simulator's terrain truth and its
//! `terrain_tensor`, one prism of Nagy et al., superposition, and the field's trace in air.

use approx::assert_abs_diff_eq;
use gravgrad_core::SymTensor;
use gravgrad_core::ellipsoid::GRS80;
use gravgrad_core::mat3::Mat3;
use gravgrad_core::projection::TransverseMercator;
use gravgrad_core::raster::Raster;
use gravgrad_core::units::EOTVOS;
use gravgrad_forward::prism::Prism;
use gravgrad_reduce::terrain::multipole::Moments;
use gravgrad_reduce::terrain::{TerrainError, TerrainModel, TerrainSettings};
use gravgrad_sim::noise::Rng;
use gravgrad_sim::scenario::Scenario;
use gravgrad_sim::terrain::{Surface, terrain_prisms, terrain_tensor};
use parquet::file::reader::{FileReader, SerializedFileReader};
use parquet::record::Field;
use std::path::{Path, PathBuf};

fn repo(rel: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("../..")
        .join(rel)
}

/// Named f64 columns of a Parquet file, by the record API (independent of gravgrad's readers).
fn parquet_columns(path: &Path, names: &[&str]) -> Vec<Vec<f64>> {
    let file = std::fs::File::open(path).expect("truth file opens");
    let reader = SerializedFileReader::new(file).expect("truth file is Parquet");
    let mut out = vec![Vec::new(); names.len()];
    for row in reader.get_row_iter(None).expect("rows") {
        let row = row.expect("row decodes");
        for (name, field) in row.get_column_iter() {
            if let Some(k) = names.iter().position(|n| n == name)
                && let Field::Double(v) = field
            {
                out[k].push(*v);
            }
        }
    }
    out
}

/// Per-component max and RMS of a − b, Eötvös.
fn error_stats(a: &[SymTensor], b: &[SymTensor]) -> ([f64; 6], [f64; 6]) {
    let mut max = [0.0f64; 6];
    let mut ss = [0.0f64; 6];
    for (x, y) in a.iter().zip(b) {
        for (k, (u, v)) in x.to_array().iter().zip(y.to_array()).enumerate() {
            let d = (u - v) / EOTVOS;
            max[k] = max[k].max(d.abs());
            ss[k] += d * d;
        }
    }
    let n = a.len().max(1) as f64;
    (max, ss.map(|s| (s / n).sqrt()))
}

/// Six values for a message, in E.
fn show(v: &[f64; 6]) -> String {
    let parts: Vec<String> = v.iter().map(|x| format!("{x:.1e}")).collect();
    parts.join(" ")
}

fn demo_dem() -> Raster {
    gravgrad_ingest::geotiff_reader::read_geotiff(&repo("data/demo/dem.tif")).expect("demo DEM")
}

/// Every `step`-th point of the demo truth: (easting, northing, height) and the terrain truth
/// (true-north NED, s⁻²).
fn demo_truth(step: usize) -> (Vec<[f64; 3]>, Vec<SymTensor>) {
    let names = [
        "easting",
        "northing",
        "height",
        "terrain_xx",
        "terrain_xy",
        "terrain_xz",
        "terrain_yy",
        "terrain_yz",
        "terrain_zz",
    ];
    let c = parquet_columns(&repo("data/demo/truth/lines.parquet"), &names);
    assert!(c[0].len() > 1000, "the demo truth has its points");
    let idx: Vec<usize> = (0..c[0].len()).step_by(step).collect();
    let pts = idx.iter().map(|&i| [c[0][i], c[1][i], c[2][i]]).collect();
    let truth = idx
        .iter()
        .map(|&i| SymTensor::from_array(std::array::from_fn(|k| c[3 + k][i] * EOTVOS)))
        .collect();
    (pts, truth)
}

fn rz(g: f64) -> Mat3 {
    let (s, c) = g.sin_cos();
    [[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]]
}

#[test]
fn fast_engine_matches_exact_sum_on_the_demo_survey() {
    let dem = demo_dem();
    let model = TerrainModel::new(&dem, &TerrainSettings::default()).unwrap();
    let (pts, _) = demo_truth(10);
    let fast = model.tensor(&pts);
    let exact = model.tensor_exact(&pts);
    let (max, rms) = error_stats(&fast, &exact);
    eprintln!(
        "demo, {} points: max {} E, rms {} E",
        pts.len(),
        show(&max),
        show(&rms)
    );
    for k in 0..6 {
        assert!(max[k] <= 0.1, "component {k}: max error {} E", max[k]);
        assert!(rms[k] <= 0.02, "component {k}: RMS error {} E", rms[k]);
    }
}

#[test]
fn engines_reproduce_the_stored_demo_truth() {
    // The simulator's truth is the all-exact sum over its f64 DEM about that DEM's mean, turned to
    // true north by the meridian convergence; dem.tif stores the same DEM in float32, whose
    // rounding (≤ 4e-6 m at these heights, and as much in the mean) moved the field by 1.5e-5 E at
    // most when this test was written; 1e-4 E leaves room for that and nothing else.
    let dem = demo_dem();
    assert_eq!(dem.epsg, Some(32753));
    let model = TerrainModel::new(&dem, &TerrainSettings::default()).unwrap();
    let (pts, truth) = demo_truth(20);
    let tm = TransverseMercator::utm(&GRS80, 53, true).unwrap();
    let to_true = |ts: Vec<SymTensor>| -> Vec<SymTensor> {
        ts.into_iter()
            .zip(&pts)
            .map(|(t, p)| {
                let (lat, lon) = tm.inverse(p[0], p[1]);
                let (_, _, gamma, _) = tm.forward(lat, lon);
                t.rotated(&rz(gamma))
            })
            .collect()
    };
    let exact = to_true(model.tensor_exact(&pts));
    let fast = to_true(model.tensor(&pts));
    let (max_exact, _) = error_stats(&exact, &truth);
    let (max_fast, rms_fast) = error_stats(&fast, &truth);
    eprintln!(
        "demo truth: exact max {} E; fast max {} E, rms {} E",
        show(&max_exact),
        show(&max_fast),
        show(&rms_fast)
    );
    for k in 0..6 {
        assert!(max_exact[k] <= 1e-4, "component {k}: {} E", max_exact[k]);
        assert!(max_fast[k] <= 0.1 && rms_fast[k] <= 0.02, "component {k}");
    }
}

/// The demo scenario's terrain surface and a DEM of it, as the simulator builds them.
fn sim_dem() -> gravgrad_sim::terrain::Dem {
    let text = std::fs::read_to_string(repo("data/demo/scenario.toml")).unwrap();
    let s: Scenario = toml::from_str(&text).unwrap();
    let surface = Surface::new(&s.area, &s.terrain, s.seed);
    surface.dem([-1500.0, 2100.0], [-1500.0, 4500.0])
}

fn raster_of(dem: &gravgrad_sim::terrain::Dem) -> Raster {
    Raster::new(
        dem.ncol,
        dem.nrow,
        (dem.east_min, dem.north_max),
        (dem.cell_m, dem.cell_m),
        dem.values.clone(),
    )
    .unwrap()
}

#[test]
fn exact_mode_equals_the_simulators_terrain_tensor_bit_for_bit() {
    let dem = sim_dem();
    let reference = dem.mean();
    let prisms = terrain_prisms(&dem, reference, 2670.0);
    // Points along the demo's first line, 100 m over the mean ground, and two off the grid.
    let mut sim_points: Vec<[f64; 3]> = (0..25)
        .map(|i| {
            [
                5.0 + 3.7 * i as f64,
                120.0 * i as f64,
                100.0 + reference + i as f64,
            ]
        })
        .collect();
    sim_points.push([-3000.0, 8000.0, 600.0]);
    sim_points.push([1000.0, 1000.0, 260.0]);
    let truth = terrain_tensor(&prisms, &sim_points);
    let settings = TerrainSettings {
        reference_m: Some(reference),
        ..TerrainSettings::default()
    };
    let model = TerrainModel::new(&raster_of(&dem), &settings).unwrap();
    assert_eq!(model.reference_m(), reference);
    // Our points are (easting, northing, height); the simulator's (north, east, height).
    let pts: Vec<[f64; 3]> = sim_points.iter().map(|p| [p[1], p[0], p[2]]).collect();
    let exact = model.tensor_exact(&pts);
    assert_eq!(exact, truth, "all-exact sum differs from the simulator's");
    // The default reference level is the same mean.
    let default = TerrainModel::new(&raster_of(&dem), &TerrainSettings::default()).unwrap();
    assert_eq!(default.reference_m(), reference);
    // And the fast engine is within the accuracy of it.
    let (max, rms) = error_stats(&model.tensor(&pts), &truth);
    for k in 0..6 {
        assert!(
            max[k] <= 0.1 && rms[k] <= 0.02,
            "component {k}: {max:?} {rms:?}"
        );
    }
}

/// Rough, steep invented terrain: `n` × `n` cells of 25 m, a 300 m plain with Gaussian hills of
/// 100–300 m (150–500 m wide) and 6 m RMS of rough ground; and `k` points 80–120 m above the cell
/// they lie over, away from the edges.
fn rough_case(n: usize, k: usize, seed: u64) -> (Raster, Vec<[f64; 3]>) {
    let cell = 25.0;
    let span = n as f64 * cell;
    let mut rng = Rng::new(seed, 77);
    let hills: Vec<[f64; 4]> = (0..(n * n / 4000).max(4))
        .map(|_| {
            [
                span * rng.uniform(),
                span * rng.uniform(),
                100.0 + 200.0 * rng.uniform(),
                150.0 + 350.0 * rng.uniform(),
            ]
        })
        .collect();
    let waves: Vec<[f64; 3]> = (0..32)
        .map(|_| {
            let kk = 2.0 * std::f64::consts::PI / (60.0 + 400.0 * rng.uniform());
            let az = 2.0 * std::f64::consts::PI * rng.uniform();
            [
                kk * az.cos(),
                kk * az.sin(),
                std::f64::consts::TAU * rng.uniform(),
            ]
        })
        .collect();
    let mut values = Vec::with_capacity(n * n);
    for row in 0..n {
        for col in 0..n {
            let (x, y) = ((col as f64 + 0.5) * cell, span - (row as f64 + 0.5) * cell);
            let mut h = 300.0;
            for [hx, hy, hh, w] in &hills {
                h += hh * (-((x - hx).powi(2) + (y - hy).powi(2)) / (w * w)).exp();
            }
            for [kx, ky, ph] in &waves {
                h += 6.0 * 0.25 * (kx * x + ky * y + ph).cos();
            }
            values.push(h);
        }
    }
    let dem = Raster::new(n, n, (400_000.0, 6_000_000.0), (cell, cell), values)
        .unwrap()
        .with_epsg(32753);
    let pts = (0..k)
        .map(|_| {
            let (col, row) = (
                n / 5 + (rng.uniform() * (3 * n / 5) as f64) as usize,
                n / 5 + (rng.uniform() * (3 * n / 5) as f64) as usize,
            );
            let (e, no) = dem.cell_centre(col, row);
            let jitter = (rng.uniform() - 0.5) * cell * 0.9;
            let ground = dem.values[row * n + col];
            [
                e + jitter,
                no - jitter,
                ground + 80.0 + 40.0 * rng.uniform(),
            ]
        })
        .collect();
    (dem, pts)
}

#[test]
fn fast_engine_matches_exact_sum_on_rough_steep_terrain() {
    let (dem, pts) = rough_case(400, 40, 5);
    let model = TerrainModel::new(&dem, &TerrainSettings::default()).unwrap();
    let fast = model.tensor_with_bound(&pts);
    let exact = model.tensor_exact(&pts);
    let ft: Vec<SymTensor> = fast.iter().map(|f| f.0).collect();
    let (max, rms) = error_stats(&ft, &exact);
    let big = exact
        .iter()
        .flat_map(|t| t.to_array())
        .fold(0.0f64, |m, v| m.max(v.abs()));
    eprintln!(
        "rough: max {} E, rms {} E; largest component {:.0} E",
        show(&max),
        show(&rms),
        big / EOTVOS
    );
    assert!(
        big > 100.0 * EOTVOS,
        "the case is rough: components of hundreds of E"
    );
    for k in 0..6 {
        assert!(max[k] <= 0.1, "component {k}: max error {} E", max[k]);
        assert!(rms[k] <= 0.02, "component {k}: RMS error {} E", rms[k]);
    }
    // The stated bound holds: each point's error is within the sum of its blocks' bounds (plus the
    // prism kernel's own relative error, 2.3e-11, on the largest component).
    for ((t, b), e) in fast.iter().zip(&exact) {
        for (u, v) in t.to_array().iter().zip(e.to_array()) {
            assert!(
                (u - v).abs() <= b + 1e-10 * big,
                "{} > bound {}",
                (u - v).abs(),
                b
            );
        }
    }
}

#[test]
fn results_do_not_depend_on_the_thread_count() {
    let (dem, pts) = rough_case(200, 64, 9);
    let model = TerrainModel::new(&dem, &TerrainSettings::default()).unwrap();
    let run = |threads: usize| {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap();
        pool.install(|| (model.tensor(&pts), model.tensor_exact(&pts[..8])))
    };
    let one = run(1);
    assert_eq!(one, run(2));
    assert_eq!(one, run(3));
}

#[test]
fn the_trace_vanishes_in_air() {
    let (dem, pts) = rough_case(200, 20, 3);
    let model = TerrainModel::new(&dem, &TerrainSettings::default()).unwrap();
    for (label, ts) in [
        ("fast", model.tensor(&pts)),
        ("exact", model.tensor_exact(&pts)),
    ] {
        for t in ts {
            let scale = t.to_array().iter().fold(0.0f64, |m, v| m.max(v.abs()));
            // Laplace's equation in air; every term (prism, point mass, multipole) is trace-free
            // analytically, so only rounding remains.
            assert!(
                t.trace().abs() <= 1e-9 * scale,
                "{label}: trace {:e} of {scale:e}",
                t.trace()
            );
        }
    }
}

#[test]
fn a_flat_dem_at_the_reference_level_has_no_effect() {
    let dem = Raster::new(
        64,
        48,
        (300_000.0, 5_000_000.0),
        (30.0, 30.0),
        vec![250.0; 64 * 48],
    )
    .unwrap();
    let model = TerrainModel::new(&dem, &TerrainSettings::default()).unwrap();
    assert_eq!(model.reference_m(), 250.0);
    let pts = [
        [300_500.0, 4_999_500.0, 350.0],
        [299_000.0, 5_001_000.0, 251.0],
    ];
    for t in model
        .tensor(&pts)
        .into_iter()
        .chain(model.tensor_exact(&pts))
    {
        assert_eq!(t, SymTensor::default());
    }
}

#[test]
fn a_single_raised_cell_is_one_prism() {
    let (nx, ny) = (40, 30);
    let mut values = vec![100.0; nx * ny];
    values[7 * nx + 11] = 160.0; // column 11, row 7
    let dem = Raster::new(nx, ny, (500_000.0, 7_000_000.0), (20.0, 25.0), values).unwrap();
    let settings = TerrainSettings {
        reference_m: Some(100.0),
        density_kg_m3: 2200.0,
        ..TerrainSettings::default()
    };
    let model = TerrainModel::new(&dem, &settings).unwrap();
    // The cell spans easting 500 220–500 240 and northing 6 999 800–6 999 825 (cells are areas).
    let prism = Prism::new(
        [6_999_800.0, 6_999_825.0],
        [500_220.0, 500_240.0],
        [-160.0, -100.0],
        2200.0,
    );
    let pts = [
        [500_230.0, 6_999_812.5, 200.0],
        [500_100.0, 6_999_700.0, 130.0],
        [503_000.0, 7_004_000.0, 900.0],
        [520_000.0, 6_990_000.0, 500.0],
    ];
    let exact = model.tensor_exact(&pts);
    let fast = model.tensor_with_bound(&pts);
    for (k, p) in pts.iter().enumerate() {
        let want = prism.tensor([p[1], p[0], -p[2]]);
        let scale = want.to_array().iter().fold(0.0f64, |m, v| m.max(v.abs()));
        for (u, v) in exact[k].to_array().iter().zip(want.to_array()) {
            assert!((u - v).abs() <= 1e-12 * scale, "exact, point {k}");
        }
        for (u, v) in fast[k].0.to_array().iter().zip(want.to_array()) {
            assert!(
                (u - v).abs() <= fast[k].1 + 1e-12 * scale,
                "fast, point {k}"
            );
        }
        // Near the cell the prism itself is summed.
        if k < 2 {
            assert_eq!(fast[k].1, 0.0);
        }
    }
}

#[test]
fn water_adds_the_sea_as_a_prism() {
    // One cell 50 m below sea level, the rest at 20 m; reference 10 m. With water the sea
    // (ρ_w between −50 and 0 m) is added to the dry model.
    let (nx, ny) = (20, 20);
    let mut values = vec![20.0; nx * ny];
    values[5 * nx + 6] = -50.0;
    let dem = Raster::new(nx, ny, (0.0, 1000.0), (50.0, 50.0), values).unwrap();
    let dry = TerrainSettings {
        reference_m: Some(10.0),
        ..TerrainSettings::default()
    };
    let wet = TerrainSettings {
        water_density_kg_m3: Some(1030.0),
        ..dry
    };
    let (m_dry, m_wet) = (
        TerrainModel::new(&dem, &dry).unwrap(),
        TerrainModel::new(&dem, &wet).unwrap(),
    );
    // Cell (6, 5): easting 300–350, northing 700–750.
    let sea = Prism::new([700.0, 750.0], [300.0, 350.0], [0.0, 50.0], 1030.0);
    let pts = [[325.0, 725.0, 120.0], [600.0, 300.0, 150.0]];
    let (d, w) = (m_dry.tensor_exact(&pts), m_wet.tensor_exact(&pts));
    for k in 0..pts.len() {
        let want = d[k] + sea.tensor([pts[k][1], pts[k][0], -pts[k][2]]);
        let scale = want.to_array().iter().fold(0.0f64, |m, v| m.max(v.abs()));
        for (u, v) in w[k].to_array().iter().zip(want.to_array()) {
            assert!((u - v).abs() <= 1e-12 * scale, "point {k}: {u} vs {v}");
        }
    }
    // Water as dense as rock fills the sea with rock: the cell is then at 0 m, dry.
    let mut filled = dem.clone();
    filled.values[5 * nx + 6] = 0.0;
    let rock_sea = TerrainSettings {
        water_density_kg_m3: Some(2670.0),
        ..dry
    };
    assert_eq!(
        TerrainModel::new(&dem, &rock_sea)
            .unwrap()
            .tensor_exact(&pts),
        TerrainModel::new(&filled, &dry).unwrap().tensor_exact(&pts)
    );
}

#[test]
fn missing_cells_carry_no_mass() {
    let (nx, ny) = (16, 16);
    let mut values = vec![100.0; nx * ny];
    values[3 * nx + 4] = 180.0;
    values[9 * nx + 9] = -9999.0;
    values[10 * nx + 2] = f64::NAN;
    let dem = Raster::new(nx, ny, (0.0, 800.0), (50.0, 50.0), values)
        .unwrap()
        .with_nodata(-9999.0);
    let settings = TerrainSettings {
        reference_m: Some(100.0),
        ..TerrainSettings::default()
    };
    let model = TerrainModel::new(&dem, &settings).unwrap();
    assert_eq!(model.missing_cells(), 2);
    // Only the raised cell (4, 3) remains: easting 200–250, northing 600–650.
    let prism = Prism::new([600.0, 650.0], [200.0, 250.0], [-180.0, -100.0], 2670.0);
    let p = [460.0, 330.0, 210.0];
    let want = prism.tensor([p[1], p[0], -p[2]]);
    assert_eq!(model.tensor_exact(&[p])[0], want);
}

#[test]
fn a_block_expansion_approaches_its_prisms_within_the_bound() {
    // Two prisms of opposite density about a centre: the expansion against the prisms' own field
    // (Nagy et al. / Gauss–Legendre) at growing distance, within 20·G·Σ|m|·a³/(r − a)⁶.
    let a = Prism::new([0.0, 50.0], [0.0, 50.0], [-120.0, -40.0], 2670.0);
    let b = Prism::new([50.0, 100.0], [0.0, 50.0], [-40.0, 0.0], -2670.0);
    let centre = [50.0, 25.0, -60.0];
    let mut m = Moments::of_prism(&a, centre);
    m.add(&Moments::of_prism(&b, centre));
    // Moments about another centre, moved back, are the same moments.
    let other = [10.0, -5.0, 3.0];
    let mut m2 = Moments::of_prism(&a, other);
    m2.add(&Moments::of_prism(&b, other));
    let moved = m2.shifted([
        centre[0] - other[0],
        centre[1] - other[1],
        centre[2] - other[2],
    ]);
    assert_abs_diff_eq!(moved.q[..], m.q[..], epsilon = 1e-9 * m.abs_m * 1e4);
    let radius = (50.0f64 * 50.0 + 25.0 * 25.0 + 60.0 * 60.0).sqrt();
    let g = m.times_g();
    let mut last = f64::INFINITY;
    for dist in [300.0, 600.0, 1200.0, 2400.0] {
        let obs = [
            centre[0] + 0.6 * dist,
            centre[1] + 0.48 * dist,
            centre[2] - 0.64 * dist,
        ];
        let r = [obs[0] - centre[0], obs[1] - centre[1], obs[2] - centre[2]];
        let got = g.tensor_g(r);
        let want = a.tensor(obs) + b.tensor(obs);
        let err = got
            .iter()
            .zip(want.to_array())
            .fold(0.0f64, |e, (u, v)| e.max((u - v).abs()));
        let bound = 20.0 * g.abs_m * radius.powi(3) / (dist - radius).powi(6);
        assert!(
            err <= bound,
            "r = {dist}: error {err:e} above bound {bound:e}"
        );
        assert!(
            err < last / 4.0,
            "the error falls at least as fast as (a/r)³"
        );
        last = err;
    }
}

#[test]
fn coverage_reports_the_short_sides() {
    let dem = Raster::new(100, 80, (10_000.0, 20_000.0), (25.0, 25.0), vec![5.0; 8000]).unwrap();
    let model = TerrainModel::new(&dem, &TerrainSettings::default()).unwrap();
    // The DEM spans easting 10 000–12 500, northing 18 000–20 000.
    let pts = [[11_000.0, 19_000.0, 100.0], [11_500.0, 18_600.0, 100.0]];
    let c = model.covers(&pts, 500.0);
    assert!(c.covered);
    assert_eq!(c.needed, Some([10_500.0, 12_000.0, 18_100.0, 19_500.0]));
    let c = model.covers(&pts, 1000.0);
    assert!(!c.covered);
    assert_eq!(c.shortfall, [0.0, 0.0, 400.0, 0.0]);
    assert!(model.covers(&[], 1000.0).covered);
}

#[test]
fn bad_inputs_are_refused_or_marked_without_panics() {
    let flat = |epsg: Option<u32>, values: Vec<f64>| {
        let mut r = Raster::new(4, 4, (0.0, 100.0), (25.0, 25.0), values).unwrap();
        r.epsg = epsg;
        r
    };
    let s = TerrainSettings::default();
    assert_eq!(
        TerrainModel::new(&flat(Some(4326), vec![1.0; 16]), &s).unwrap_err(),
        TerrainError::Geographic(4326)
    );
    assert!(matches!(
        TerrainModel::new(&flat(None, vec![f64::NAN; 16]), &s),
        Err(TerrainError::NoValidCell)
    ));
    for bad in [0.0, -1.0, f64::NAN] {
        let s = TerrainSettings {
            accuracy_e: bad,
            ..TerrainSettings::default()
        };
        assert!(TerrainModel::new(&flat(None, vec![1.0; 16]), &s).is_err());
        let s = TerrainSettings {
            density_kg_m3: bad,
            ..TerrainSettings::default()
        };
        assert!(TerrainModel::new(&flat(None, vec![1.0; 16]), &s).is_err());
    }
    let mut broken = flat(None, vec![1.0; 16]);
    broken.values.pop();
    assert!(matches!(
        TerrainModel::new(&broken, &s),
        Err(TerrainError::Raster(_))
    ));
    let mut values = vec![1.0; 16];
    values[5] = 30.0;
    let model = TerrainModel::new(&flat(Some(32753), values), &s).unwrap();
    let out = model.tensor(&[[f64::NAN, 50.0, 100.0], [50.0, 50.0, f64::INFINITY]]);
    assert!(out.iter().all(|t| t.xx.is_nan() && t.zz.is_nan()));
}

/// Holes under the survey: the demo DEM with a block of 2 × 2 cells removed under every fourth
/// of the points (NaN). Left as holes they carry no mass and change the terrain effect by
/// tens of E; filled by the run's preflight (`gravgrad_ingest::dem::prepare_window`: eight-
/// direction inverse-distance fill) the effect is back within a few E of the intact DEM's, and a
/// warning names the cells.
#[test]
fn holes_in_the_dem_under_the_survey_are_filled_not_left_massless() {
    let dem = demo_dem();
    let (pts, _) = demo_truth(50);
    let mut holed = dem.clone();
    let mut removed = 0;
    for p in pts.iter().step_by(4) {
        let col = ((p[0] - dem.x_min) / dem.dx) as usize;
        let row = ((dem.y_max - p[1]) / dem.dy) as usize;
        for r in row.saturating_sub(1)..(row + 1).min(dem.ny) {
            for c in col.saturating_sub(1)..(col + 1).min(dem.nx) {
                let v = &mut holed.values[r * dem.nx + c];
                if !v.is_nan() {
                    *v = f64::NAN;
                    removed += 1;
                }
            }
        }
    }
    assert!(removed > 50, "{removed} cells removed");
    let whole = [
        dem.x_min,
        dem.x_min + dem.nx as f64 * dem.dx,
        dem.y_max - dem.ny as f64 * dem.dy,
        dem.y_max,
    ];
    let key = gravgrad_core::Location::file("recipe.toml").with_key("terrain.dem");
    let w = gravgrad_ingest::dem::prepare_window(&holed, whole, Path::new("dem.tif"), &key)
        .expect("a few holes are filled");
    assert_eq!(w.filled, removed);
    let text = w.warnings[0].to_string();
    assert!(
        text.contains(&format!("{removed} cells")) && text.contains("inverse-distance"),
        "{text}"
    );
    // The same reference level for all three, so that only the holes differ.
    let settings = TerrainSettings {
        reference_m: Some(100.0),
        ..TerrainSettings::default()
    };
    let intact = TerrainModel::new(&dem, &settings).unwrap().tensor(&pts);
    let massless = TerrainModel::new(&holed, &settings).unwrap().tensor(&pts);
    let filled = TerrainModel::new(&w.raster, &settings)
        .unwrap()
        .tensor(&pts);
    let (max_holes, rms_holes) = error_stats(&massless, &intact);
    let (max_filled, rms_filled) = error_stats(&filled, &intact);
    eprintln!(
        "{} points, {removed} cells removed: massless holes max {} rms {} E; filled max {} rms {} E",
        pts.len(),
        show(&max_holes),
        show(&rms_holes),
        show(&max_filled),
        show(&rms_filled)
    );
    // Gzz (component 5): the holes matter, the fill restores it to a tenth of their effect.
    assert!(
        rms_holes[5] > 1.0,
        "holes change Gzz by {} E RMS",
        rms_holes[5]
    );
    assert!(
        rms_filled[5] < 0.1 * rms_holes[5],
        "filled: {} E RMS against {} E with massless holes",
        rms_filled[5],
        rms_holes[5]
    );
}
