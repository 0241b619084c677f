//! `gravgrad manual --out DIR`: manual pages in roff for `man`, generated from the same argument
//! definitions as `--help` (crate `clap_mangen`): `gravgrad.1` and one page per command
//! (`gravgrad-run.1`, `gravgrad-check.1`, …). The pages carry no date, so the same binary always
//! writes the same bytes.

use crate::{EXIT_BAD_INPUT, EXIT_FAILURE};
use clap::{Args, CommandFactory};
use std::path::{Path, PathBuf};

#[derive(Args, Debug)]
pub struct ManualArgs {
    /// Folder for the pages (created; pages in it are replaced), e.g. ~/.local/share/man/man1.
    #[arg(long, value_name = "DIR")]
    pub out: PathBuf,
}

pub fn run(args: &ManualArgs, log: &crate::logging::Log) -> u8 {
    let dir = &args.out;
    if dir.exists() && !dir.is_dir() {
        eprintln!(
            "error: {}: is a file (--out); expected a folder for the manual pages, or nothing",
            dir.display()
        );
        return EXIT_BAD_INPUT;
    }
    if let Err(e) = std::fs::create_dir_all(dir) {
        eprintln!(
            "error: {}: cannot make the folder for the manual pages (--out): {e}",
            dir.display()
        );
        return EXIT_FAILURE;
    }
    let mut cmd = crate::Cli::command().disable_help_subcommand(true);
    cmd.build();
    let mut written = Vec::new();
    if let Err(e) = write_pages(&cmd, dir, &mut written) {
        eprintln!("error: {e}");
        return EXIT_FAILURE;
    }
    log.info(&format!(
        "{} manual pages written to {} (read one with `man -l {}`)",
        written.len(),
        dir.display(),
        dir.join("gravgrad.1").display()
    ));
    0
}

/// Writes the page of `cmd` and of each of its visible commands, depth first; `written` collects
/// the files.
fn write_pages(cmd: &clap::Command, dir: &Path, written: &mut Vec<PathBuf>) -> Result<(), String> {
    let man = clap_mangen::Man::new(cmd.clone())
        .source(format!("gravgrad {}", env!("CARGO_PKG_VERSION")))
        .manual("gravgrad");
    let path = dir.join(man.get_filename());
    let mut page = Vec::new();
    man.render(&mut page)
        .and_then(|()| std::fs::write(&path, &page))
        .map_err(|e| format!("{}: cannot write the manual page: {e}", path.display()))?;
    written.push(path);
    for sub in cmd.get_subcommands().filter(|s| !s.is_hide_set()) {
        write_pages(sub, dir, written)?;
    }
    Ok(())
}
