//! Typed errors of the fitting engine and of the series readers.

use thiserror::Error;

/// Why a fit could not even be attempted. A fit that ran but did not converge is not an
/// error: it is reported in [`crate::fit::FitResult::converged`] with its reason.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum FitError {
    #[error("x has {x} values but y has {y}")]
    LengthMismatch { x: usize, y: usize },
    #[error("weights have {weights} values but there are {points} points")]
    WeightsMismatch { weights: usize, points: usize },
    #[error("{n} usable points cannot determine {p} parameters (need at least {p})")]
    TooFewPoints { n: usize, p: usize },
    #[error(
        "{n} uncensored points cannot determine {p} parameters in a censored fit (need more than {p})"
    )]
    TooFewUncensored { n: usize, p: usize },
    #[error("the censored likelihood is not a finite number at the end of the fit")]
    LikelihoodNotFinite,
    #[error("{what} at index {index} is not a finite number")]
    NonFinite { what: &'static str, index: usize },
    #[error("weight at index {index} is negative")]
    NegativeWeight { index: usize },
    #[error("start vector has {got} values, the model has {expected} parameters")]
    StartLength { got: usize, expected: usize },
    #[error("model '{model}' has no parameter '{name}' (it has: {known})")]
    UnknownParameter {
        model: String,
        name: String,
        known: String,
    },
    #[error("bounds for parameter {index} are empty or not numbers: [{lower}, {upper}]")]
    BadBounds {
        index: usize,
        lower: f64,
        upper: f64,
    },
    #[error("the model cannot be evaluated at the starting values (point {index})")]
    BadStart { index: usize },
    #[error(
        "unknown model '{0}' (known: linear, first-order, first-order-residual, second-order, power, power-residual, two-site, plateau, auto)"
    )]
    UnknownModel(String),
    #[error("start value '{0}' is not of the form name=number")]
    BadStartArg(String),
}

/// Why a two-column series could not be read; lines and columns count from 1.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum SeriesError {
    #[error("the series is empty (expected a header row and data rows)")]
    Empty,
    #[error("line {line}: expected at least 2 columns, found {found}")]
    MissingColumn { line: usize, found: usize },
    #[error("line {line}, column {column}: '{text}' is not a finite number")]
    BadNumber {
        line: usize,
        column: usize,
        text: String,
    },
    #[error("line {line}: the CSV record is malformed: {message}")]
    Malformed { line: usize, message: String },
    #[error("the series has a header but no data rows")]
    NoData,
}
