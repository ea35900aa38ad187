//! The robust core (DESIGN.md §4.3): losses, scale estimators, the S-estimate start, IRLS for M and MM
//! fits, and Huber's sandwich covariance. Slices and matrices in, plain structs out: no YAML, CSV or HTML.

pub mod irls;
pub mod loss;
pub mod profile;
pub mod sandwich;
pub mod scale;
pub mod sest;

use crate::linalg::{LinalgError, Rows};

/// Why a robust fit could not be computed.
#[derive(Debug, Clone, PartialEq)]
pub enum RobustError {
    /// Fewer rows than columns (or than needed for a subsample).
    TooFewRows { rows: usize, columns: usize },
    /// No non-singular elemental subsample was found after `tried` draws.
    AllSubsamplesSingular { tried: usize },
    /// A non-finite value appeared in the data or the iteration.
    NonFinite,
    /// The (weighted) design is rank deficient: column `column` is a combination of `aliased_with`.
    /// In a weighted step this can happen when the robust weights zero out every row that identifies a
    /// column (e.g. all rows of a small category are outliers).
    RankDeficient { column: usize, aliased_with: Vec<usize> },
    /// Huber's sandwich needs mean ψ'(r/s) > 0; it was `mean_psi_prime` (e.g. every scaled residual
    /// beyond the Huber corner, or in the decreasing part of the bisquare).
    DegenerateCovariance { mean_psi_prime: f64 },
}

impl From<LinalgError> for RobustError {
    fn from(e: LinalgError) -> Self {
        match e {
            LinalgError::RankDeficient { column, aliased_with } => RobustError::RankDeficient { column, aliased_with },
            LinalgError::TooFewRows { rows, columns } => RobustError::TooFewRows { rows, columns },
            LinalgError::NonFinite => RobustError::NonFinite,
        }
    }
}

/// Data checks shared by every robust entry point: shapes (a programming error, so asserted), finite
/// values, and n > p.
pub(crate) fn check_data<R: Rows + ?Sized>(x: &R, y: &[f64]) -> Result<(), RobustError> {
    let (n, p) = (x.n(), x.p());
    assert_eq!(y.len(), n, "robust: y has {} entries, expected n = {n}", y.len());
    if n <= p {
        return Err(RobustError::TooFewRows { rows: n, columns: p });
    }
    if y.iter().any(|v| !v.is_finite()) || !x.finite(0, n) {
        return Err(RobustError::NonFinite);
    }
    Ok(())
}

/// A scale at or below this multiple of max |y_i| is treated as an exact fit (the residuals are then
/// rounding errors of y itself, about 1e-16 relative, amplified by the solve): the scale has collapsed.
pub const EXACT_FIT_TOL: f64 = 1e-12;

pub(crate) fn exact_fit_threshold(y: &[f64]) -> f64 {
    EXACT_FIT_TOL * y.iter().fold(0.0f64, |a, v| a.max(v.abs()))
}
