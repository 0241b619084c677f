//! Why a line operation cannot be done. Every check on user data returns one of these; nothing in
//! this crate panics on its input.

/// What was wrong with the input of a line operation.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum LinesError {
    #[error("`{name}` has {got} samples where the line has {want}")]
    Length {
        name: String,
        got: usize,
        want: usize,
    },
    #[error("`{name}` is not finite at sample {index}")]
    NotFinite { name: String, index: usize },
    #[error("{what} needs at least {need} samples, got {got}")]
    TooShort {
        what: String,
        got: usize,
        need: usize,
    },
    #[error("setting `{name}` = {value} is out of range: {why}")]
    Setting {
        name: String,
        value: f64,
        why: String,
    },
    #[error(
        "cutoff wavelength {cutoff_m} m is not longer than two sample spacings ({spacing_m:.3} m each)"
    )]
    CutoffTooShort { cutoff_m: f64, spacing_m: f64 },
    #[error("crossover {index} refers to {role} line {line}, but there are only {count}")]
    LineIndex {
        index: usize,
        role: &'static str,
        line: usize,
        count: usize,
    },
}

/// Checks that `values` has `want` samples.
pub(crate) fn check_len(name: &str, values: &[f64], want: usize) -> Result<(), LinesError> {
    if values.len() == want {
        Ok(())
    } else {
        Err(LinesError::Length {
            name: name.into(),
            got: values.len(),
            want,
        })
    }
}

/// Checks that every value is finite.
pub(crate) fn check_finite(name: &str, values: &[f64]) -> Result<(), LinesError> {
    match values.iter().position(|v| !v.is_finite()) {
        None => Ok(()),
        Some(index) => Err(LinesError::NotFinite {
            name: name.into(),
            index,
        }),
    }
}

/// Checks that a setting is finite and strictly positive.
pub(crate) fn check_positive(name: &str, value: f64) -> Result<(), LinesError> {
    if value.is_finite() && value > 0.0 {
        Ok(())
    } else {
        Err(LinesError::Setting {
            name: name.into(),
            value,
            why: "must be a positive number".into(),
        })
    }
}
