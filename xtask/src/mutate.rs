//! `xtask mutate`: the long run of the readers' mutation tests (`docs/reliability.md`).
//!
//! Mutated copies of the repository's valid binary files ([`gravgrad_ingest::mutate`]) are read,
//! a batch at a time, by a child process (`xtask mutate-child`) started under an address-space
//! limit (`prlimit --as`), so that an allocation sized from a declared count aborts the child
//! instead of passing unseen. Before each case the child resets its peak resident size
//! (`/proc/self/clear_refs`, value 5) and after it reports the peak (`VmHWM` of
//! `/proc/self/status`) above the resident size at the case's start, plus the child's resident
//! size before its first case (the baseline), and the time taken. The parent counts, per format: cases read, cases
//! refused with problems, problems not located at the file, panics, panics of a third-party
//! decoder the reader contained and reported as a problem (counted apart, and failures too: the
//! reader's checks should have refused the file first), aborts or kills, cases over the time
//! limit, and cases whose peak resident size exceeds twice the file plus the fixed allowance; it
//! prints the worst peak and the worst time, and keeps every failing case's file.

use gravgrad_ingest::mutate::{BinaryFormat, Damage, Rng, mutate, read_as};
use std::io::{BufRead, BufReader, Write};
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::sync::mpsc;
use std::time::{Duration, Instant};

/// Settings of a long run.
pub struct Options {
    pub formats: Vec<BinaryFormat>,
    pub cases: usize,
    pub seed: u64,
    /// Fixed allowance of resident memory over twice the file, MiB.
    pub allowance_mb: u64,
    /// Address-space limit of the child, MiB.
    pub address_space_mb: u64,
    /// Time limit per case, s.
    pub timeout_s: f64,
    /// Cases per child process.
    pub batch: usize,
    /// Folder that receives the failing cases' files.
    pub keep: PathBuf,
    /// Cases slower than this, ms, are kept too (not failures).
    pub keep_slower_ms: u64,
}

#[derive(Default)]
struct Tally {
    cases: usize,
    by_damage: [usize; 3],
    read: usize,
    refused: usize,
    unlocated: usize,
    panics: usize,
    contained: usize,
    crashes: usize,
    timeouts: usize,
    over_memory: usize,
    worst_kb: u64,
    worst_kb_case: String,
    worst_us: u64,
    worst_us_case: String,
    baseline_kb: u64,
    failures: Vec<String>,
}

/// One case's report from the child.
struct CaseReport {
    items: usize,
    errors: usize,
    unlocated: usize,
    contained: bool,
    panicked: bool,
    hwm_kb: u64,
    micros: u64,
}

fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("..")
}

/// Runs the long mutation test and prints its table; fails when any case failed.
pub fn run(o: &Options) -> Result<(), Box<dyn std::error::Error>> {
    let exe = std::env::current_exe()?;
    let work = std::env::temp_dir().join(format!("gravgrad-mutate-{}", std::process::id()));
    std::fs::create_dir_all(&o.keep)?;
    let mut all_ok = true;
    println!(
        "format    cases  flip trunc infl   read refused unlocated panics contained crashes \
         timeouts over_mem  worst_RSS_MiB  worst_ms  baseline_MiB"
    );
    for (fi, &format) in o.formats.iter().enumerate() {
        let seeds: Vec<Vec<u8>> = format
            .seed_files()
            .iter()
            .map(|p| std::fs::read(root().join(p)))
            .collect::<Result<_, _>>()?;
        let dir = work.join(format.name());
        std::fs::create_dir_all(&dir)?;
        let mut rng = Rng::new(o.seed.wrapping_mul(0x100).wrapping_add(fi as u64));
        let mut t = Tally::default();
        let mut i = 0;
        while i < o.cases {
            let n = o.batch.min(o.cases - i);
            let mut batch = Vec::with_capacity(n);
            for k in 0..n {
                let seed = &seeds[rng.below(seeds.len())];
                let (bytes, damage) = mutate(format, seed, &mut rng);
                let path = dir.join(format!("case{:06}.{}", i + k, format.extension()));
                std::fs::write(&path, &bytes)?;
                t.by_damage[damage as usize] += 1;
                batch.push((path, bytes.len() as u64, damage));
            }
            run_batch(o, &exe, format, &batch, &mut t)?;
            for (p, _, _) in &batch {
                let _ = std::fs::remove_file(p);
            }
            i += n;
        }
        let mib = |kb: u64| kb as f64 / 1024.0;
        println!(
            "{:<8} {:>6} {:>5} {:>5} {:>5} {:>6} {:>7} {:>9} {:>6} {:>9} {:>7} {:>8} {:>8}  {:>13.1}  {:>8.1}  {:>12.1}",
            format.name(),
            t.cases,
            t.by_damage[Damage::Flip as usize],
            t.by_damage[Damage::Truncate as usize],
            t.by_damage[Damage::Inflate as usize],
            t.read,
            t.refused,
            t.unlocated,
            t.panics,
            t.contained,
            t.crashes,
            t.timeouts,
            t.over_memory,
            mib(t.worst_kb),
            t.worst_us as f64 / 1000.0,
            mib(t.baseline_kb),
        );
        println!(
            "          worst RSS: {}; worst time: {}",
            t.worst_kb_case, t.worst_us_case
        );
        for f in &t.failures {
            println!("          FAILED {f}");
        }
        all_ok &= t.failures.is_empty();
        let _ = std::fs::remove_dir_all(&dir);
    }
    let _ = std::fs::remove_dir_all(&work);
    if all_ok {
        Ok(())
    } else {
        Err(format!("failing cases kept in {}", o.keep.display()).into())
    }
}

fn spawn(
    o: &Options,
    exe: &Path,
    format: BinaryFormat,
    files: &[(PathBuf, u64, Damage)],
) -> std::io::Result<(Child, mpsc::Receiver<String>)> {
    let mut cmd = Command::new("prlimit");
    cmd.arg(format!("--as={}", o.address_space_mb << 20))
        .arg("--")
        .arg(exe)
        .arg("mutate-child")
        .arg("--format")
        .arg(format.name());
    for (p, _, _) in files {
        cmd.arg(p);
    }
    let mut child = cmd
        .stdout(Stdio::piped())
        .stderr(Stdio::null())
        .stdin(Stdio::null())
        .spawn()?;
    let out = child
        .stdout
        .take()
        .ok_or("no stdout")
        .map_err(std::io::Error::other)?;
    let (tx, rx) = mpsc::channel();
    std::thread::spawn(move || {
        for line in BufReader::new(out).lines() {
            let Ok(line) = line else { break };
            if tx.send(line).is_err() {
                break;
            }
        }
    });
    Ok((child, rx))
}

fn run_batch(
    o: &Options,
    exe: &Path,
    format: BinaryFormat,
    batch: &[(PathBuf, u64, Damage)],
    t: &mut Tally,
) -> Result<(), Box<dyn std::error::Error>> {
    let limit = Duration::from_secs_f64(o.timeout_s);
    let mut next = 0;
    while next < batch.len() {
        let (mut child, rx) = spawn(o, exe, format, &batch[next..])?;
        let mut current: Option<usize> = None;
        loop {
            // The child's own timer decides the time limit; the parent kills it only when a case
            // has run twice as long without a word.
            match rx.recv_timeout(limit * 2 + Duration::from_secs(2)) {
                Ok(line) => {
                    let mut w = line.split_whitespace();
                    match w.next() {
                        Some("baseline") => {
                            let kb = w.next().and_then(|x| x.parse().ok()).unwrap_or(0);
                            t.baseline_kb = t.baseline_kb.max(kb);
                        }
                        Some("begin") => {
                            current = w.next().and_then(|x| x.parse::<usize>().ok());
                        }
                        Some("end") => {
                            let f: Vec<u64> = w.filter_map(|x| x.parse().ok()).collect();
                            let (
                                Some(k),
                                [
                                    items,
                                    errors,
                                    unlocated,
                                    contained,
                                    panicked,
                                    hwm_kb,
                                    micros,
                                ],
                            ) = (current, f.get(1..8).unwrap_or(&[]))
                            else {
                                return Err(format!("bad report from the child: {line}").into());
                            };
                            let r = CaseReport {
                                items: *items as usize,
                                errors: *errors as usize,
                                unlocated: *unlocated as usize,
                                contained: *contained != 0,
                                panicked: *panicked != 0,
                                hwm_kb: *hwm_kb,
                                micros: *micros,
                            };
                            record(o, &batch[next + k], &r, t);
                            current = None;
                        }
                        _ => {}
                    }
                }
                Err(mpsc::RecvTimeoutError::Timeout) => {
                    let _ = child.kill();
                    let _ = child.wait();
                    let k = current.unwrap_or(0);
                    fail(o, &batch[next + k], "timeout (killed)", t);
                    t.cases += 1;
                    t.timeouts += 1;
                    next += k + 1;
                    break;
                }
                Err(mpsc::RecvTimeoutError::Disconnected) => {
                    let status = child.wait()?;
                    match current {
                        Some(k) => {
                            fail(o, &batch[next + k], &format!("child died: {status}"), t);
                            t.cases += 1;
                            t.crashes += 1;
                            next += k + 1;
                        }
                        None if status.success() => next = batch.len(),
                        None => return Err(format!("the child failed: {status}").into()),
                    }
                    break;
                }
            }
        }
    }
    Ok(())
}

fn record(o: &Options, case: &(PathBuf, u64, Damage), r: &CaseReport, t: &mut Tally) {
    t.cases += 1;
    let name = format!(
        "{} ({}, {} bytes)",
        case.0.file_name().and_then(|n| n.to_str()).unwrap_or("?"),
        case.2.name(),
        case.1
    );
    if r.hwm_kb > t.worst_kb {
        t.worst_kb = r.hwm_kb;
        t.worst_kb_case = name.clone();
    }
    if r.micros > t.worst_us {
        t.worst_us = r.micros;
        t.worst_us_case = name.clone();
    }
    if r.micros / 1000 > o.keep_slower_ms {
        let _ = std::fs::copy(&case.0, o.keep.join(case.0.file_name().unwrap_or_default()));
    }
    if r.contained {
        // The reader caught a third-party decoder's panic and reported it as a problem: located,
        // but a check that should have refused the file first is missing.
        t.contained += 1;
        fail(o, case, "a decoder panic, contained", t);
    }
    if r.panicked {
        t.panics += 1;
        fail(o, case, "panic", t);
        return;
    }
    if r.errors > 0 {
        t.refused += 1;
    } else if r.items > 0 {
        t.read += 1;
    }
    if r.errors == 0 && r.items == 0 {
        fail(o, case, "neither data nor an error", t);
    }
    if r.unlocated > 0 {
        t.unlocated += 1;
        fail(o, case, "a problem not located at the file", t);
    }
    let bound_kb = ((2 * case.1) >> 10) + (o.allowance_mb << 10);
    if r.hwm_kb > bound_kb {
        t.over_memory += 1;
        fail(
            o,
            case,
            &format!("peak {} KiB over {} KiB", r.hwm_kb, bound_kb),
            t,
        );
    }
    if r.micros as f64 > o.timeout_s * 1e6 {
        t.timeouts += 1;
        fail(o, case, &format!("{} ms", r.micros / 1000), t);
    }
}

fn fail(o: &Options, case: &(PathBuf, u64, Damage), why: &str, t: &mut Tally) {
    let name = case
        .0
        .file_name()
        .and_then(|n| n.to_str())
        .unwrap_or("case");
    let kept = o.keep.join(name);
    let _ = std::fs::copy(&case.0, &kept);
    t.failures
        .push(format!("{} ({}): {why}", kept.display(), case.2.name()));
}

fn status_kb(field: &str) -> u64 {
    std::fs::read_to_string("/proc/self/status")
        .ok()
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with(field))
                .and_then(|l| l.split_whitespace().nth(1))
                .and_then(|v| v.parse().ok())
        })
        .unwrap_or(0)
}

/// The child: reads each file with the format's reader and reports one line per case.
pub fn child(format: BinaryFormat, files: &[PathBuf]) -> Result<(), Box<dyn std::error::Error>> {
    // Panics are counted, not printed, unless GRAVGRAD_MUTATE_VERBOSE is set (to reproduce one).
    if std::env::var_os("GRAVGRAD_MUTATE_VERBOSE").is_none() {
        std::panic::set_hook(Box::new(|_| {}));
    }
    let stdout = std::io::stdout();
    let mut out = stdout.lock();
    let baseline_kb = status_kb("VmRSS:");
    writeln!(out, "baseline {baseline_kb}")?;
    for (k, path) in files.iter().enumerate() {
        writeln!(out, "begin {k}")?;
        out.flush()?;
        std::fs::write("/proc/self/clear_refs", "5")?;
        // Memory an earlier case left resident (allocators keep freed pages a while) is not this
        // case's: the case's peak is counted from the resident size at its start.
        let start_kb = status_kb("VmRSS:");
        let t0 = Instant::now();
        let r = std::panic::catch_unwind(|| read_as(format, path));
        let micros = t0.elapsed().as_micros() as u64;
        let hwm = status_kb("VmHWM:").saturating_sub(start_kb) + baseline_kb;
        let (items, errors, unlocated, contained, panicked) = match &r {
            Ok(r) => (
                r.items,
                r.problems.iter().filter(|p| p.is_error()).count(),
                r.problems
                    .iter()
                    .filter(|p| p.location.file.as_deref() != Some(path.as_path()))
                    .count(),
                u8::from(r.problems.iter().any(|p| p.message.contains("panicked"))),
                0,
            ),
            Err(_) => (0, 0, 0, 0, 1),
        };
        drop(r);
        writeln!(
            out,
            "end {k} {items} {errors} {unlocated} {contained} {panicked} {hwm} {micros}"
        )?;
        out.flush()?;
    }
    Ok(())
}
