//! Why a survey-level step stopped, and which exit code the command gives for it.

use gravgrad_core::Problem;

/// Why a survey-level step stopped. The text of each names the file, row, column or recipe key.
#[derive(Debug)]
pub enum RunError {
    /// The input is wrong; each problem names its place (exit code 2).
    Input(Vec<Problem>),
    /// The input or a setting is refused, said in one line (exit code 2): an output folder that
    /// may not be written, an input that changed during the run.
    Refused(String),
    /// Processing or writing failed (exit code 1).
    Failed(String),
}

impl RunError {
    /// The command's exit code: 2 for bad input, 1 for a processing failure.
    pub fn exit_code(&self) -> u8 {
        match self {
            RunError::Input(_) | RunError::Refused(_) => 2,
            RunError::Failed(_) => 1,
        }
    }

    /// One problem as an input error.
    pub fn problem(p: Problem) -> Self {
        RunError::Input(vec![p])
    }
}

impl std::fmt::Display for RunError {
    /// Each problem on its own line as `Problem` shows it; otherwise `error: <text>`.
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            RunError::Input(problems) => {
                for (i, p) in problems.iter().enumerate() {
                    if i > 0 {
                        writeln!(f)?;
                    }
                    write!(f, "{p}")?;
                }
                Ok(())
            }
            RunError::Refused(e) | RunError::Failed(e) => write!(f, "error: {e}"),
        }
    }
}

impl std::error::Error for RunError {}
