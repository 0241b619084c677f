//! Timing of one flight's calibration, solve and rotation (issue 5), in process: the recipe and its
//! flight are read once, then `gravgrad_survey::pipeline::process_flight` — the function `gravgrad run`
//! calls — runs `repeat` times on `threads` threads. Each run's stage times are the pipeline's own;
//! the medians are printed with the throughput, and a fingerprint of the results (a hash of every
//! output number's bits) shows whether a change or the thread count altered them.

use gravgrad_core::SymTensor;
use gravgrad_ingest::check::load_recipe;
use gravgrad_survey::pipeline::{self, CalibrationSource, FlightResult};
use std::path::Path;

/// FNV-1a (one 64-bit word at a time) over the bits of every number the stage produces (tensors, trace, calibration).
fn fingerprint(r: &FlightResult) -> u64 {
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    let mut eat = |v: f64| {
        h ^= v.to_bits();
        h = h.wrapping_mul(0x0000_0100_0000_01b3);
    };
    let tensors = |t: &[SymTensor], eat: &mut dyn FnMut(f64)| {
        for x in t {
            x.to_array().into_iter().for_each(&mut *eat);
        }
    };
    tensors(&r.rotated, &mut eat);
    tensors(&r.measured, &mut eat);
    tensors(&r.normal, &mut eat);
    r.trace.iter().for_each(|v| eat(*v));
    for a in r.alpha_difference.iter().flatten() {
        a.iter().for_each(|v| eat(*v));
    }
    for (_, c) in &r.calibration {
        for k in c.kappa.iter().chain(&c.rotation).chain(&c.polynomial) {
            eat(k.value);
            eat(k.std_error);
        }
        for k in c.temperature.iter().chain(c.self_gradient.iter().flatten()) {
            eat(k.value);
            eat(k.std_error);
        }
        eat(c.t_mid);
        eat(c.temperature_mean);
        eat(c.band_residual_rms);
    }
    h
}

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    let n = v.len();
    if n % 2 == 1 {
        v[n / 2]
    } else {
        0.5 * (v[n / 2 - 1] + v[n / 2])
    }
}

/// Runs the pipeline of every flight of `recipe` `repeat` times on `threads` threads and prints the
/// median time of each stage, s, and of calibration + solve + rotation with samples per second.
pub fn run(recipe: &Path, threads: usize, repeat: usize) -> Result<(), Box<dyn std::error::Error>> {
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()?;
    let survey = load_recipe(recipe);
    let (Some(rc), Some(instrument)) = (&survey.recipe, &survey.instrument) else {
        return Err(format!(
            "{}: the recipe or its instrument did not load",
            recipe.display()
        )
        .into());
    };
    if survey.has_errors() {
        return Err(format!(
            "{}: the recipe has errors (gravgrad check)",
            recipe.display()
        )
        .into());
    }
    let frame = pipeline::map_frame(rc, recipe, &survey.flights).map_err(|p| p.to_string())?;
    for flight in &survey.flights {
        let mut stages: Vec<(&'static str, Vec<f64>)> = Vec::new();
        let mut sums = Vec::new();
        let mut prints = Vec::new();
        let mut n = 0;
        for _ in 0..repeat.max(1) {
            let r = pool
                .install(|| {
                    pipeline::process_flight(
                        rc,
                        instrument,
                        flight,
                        &frame,
                        CalibrationSource::Estimate,
                        |_| Ok(None),
                    )
                })
                .map_err(|p| p.to_string())?;
            n = r.time.len();
            let mut sum = 0.0;
            for (name, t) in &r.timings {
                match stages.iter_mut().find(|s| s.0 == *name) {
                    Some(s) => s.1.push(*t),
                    None => stages.push((name, vec![*t])),
                }
                if *name == "calibration" || *name == "solve and rotation" {
                    sum += t;
                }
            }
            sums.push(sum);
            prints.push(fingerprint(&r));
        }
        println!(
            "{}: {n} samples, {threads} threads, {} runs (median s)",
            flight.flight.source,
            sums.len()
        );
        for (name, t) in stages {
            let m = median(t);
            if m > 0.0005 {
                println!(
                    "  {name:<32} {m:>8.3}  {:>6.2} M samples/s",
                    n as f64 / m / 1e6
                );
            } else {
                println!("  {name:<32} {m:>8.3}");
            }
        }
        let m = median(sums);
        println!(
            "  {:<32} {m:>8.3}  {:>6.2} M samples/s",
            "calibration + solve + rotation",
            n as f64 / m / 1e6
        );
        prints.dedup();
        let p: Vec<String> = prints.iter().map(|p| format!("{p:016x}")).collect();
        println!("  fingerprint {}", p.join(" "));
    }
    Ok(())
}
