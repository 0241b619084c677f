//! `gravgrad completions SHELL`: the shell's completion script for every command and option,
//! generated from the same argument definitions as `--help` (crate `clap_complete`), on stdout.

use crate::EXIT_FAILURE;
use clap::{Args, CommandFactory};
use clap_complete::Shell;
use std::io::Write;

#[derive(Args, Debug)]
pub struct CompletionsArgs {
    /// The shell to complete in.
    #[arg(value_name = "SHELL", value_enum)]
    pub shell: Shell,
}

pub fn run(args: &CompletionsArgs) -> u8 {
    let mut cmd = crate::Cli::command();
    // Generated into memory first: the generator cannot report a failed write, and a closed pipe
    // (`gravgrad completions bash | head`) must end the command quietly, not abort it.
    let mut script = Vec::new();
    clap_complete::generate(args.shell, &mut cmd, "gravgrad", &mut script);
    let mut stdout = std::io::stdout().lock();
    match stdout.write_all(&script).and_then(|()| stdout.flush()) {
        Ok(()) => 0,
        Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => 0,
        Err(e) => {
            eprintln!("error: standard output: cannot write the completion script: {e}");
            EXIT_FAILURE
        }
    }
}
