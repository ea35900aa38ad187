//! The robust core (DESIGN.md §4.3): losses, scale estimators, the S-estimate start, IRLS for M and MM
//! fits, and Huber's sandwich covariance. Slices and matrices in, plain structs out: no YAML, CSV or HTML.

pub mod irls;
pub mod loss;
pub mod sandwich;
pub mod scale;
pub mod sest;

/// Why a robust fit could not be computed.
#[derive(Debug, Clone, PartialEq)]
pub enum RobustError {
    /// Fewer rows than columns (or than needed for a subsample).
    TooFewRows { rows: usize, columns: usize },
    /// No non-singular elemental subsample was found after `tried` draws.
    AllSubsamplesSingular { tried: usize },
    /// A non-finite value appeared in the data or the iteration.
    NonFinite,
}
