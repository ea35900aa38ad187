//! How an iterative computation stopped. Stored on every fit and shown to the user; never a bare bool.

use serde::Serialize;

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(tag = "status", rename_all = "kebab-case")]
pub enum Termination {
    /// A closed-form solve (least squares): nothing iterated.
    Direct,
    /// The iteration met its tolerance.
    Converged { iterations: usize },
    /// The iteration stopped at its limit without meeting the tolerance.
    IterationLimit { iterations: usize },
    /// The scale estimate went to zero (more than half the rows fitted exactly).
    ScaleCollapsed { iterations: usize },
}

impl Termination {
    /// True for `Direct` and `Converged`.
    pub fn is_ok(&self) -> bool {
        matches!(self, Termination::Direct | Termination::Converged { .. })
    }

    /// Plain words for the report.
    pub fn describe(&self) -> String {
        match self {
            Termination::Direct => "solved directly".into(),
            Termination::Converged { iterations } => format!("converged in {iterations} iterations"),
            Termination::IterationLimit { iterations } => {
                format!("did NOT converge: stopped at the limit of {iterations} iterations")
            }
            Termination::ScaleCollapsed { iterations } => {
                format!("did NOT converge: the scale collapsed to zero after {iterations} iterations")
            }
        }
    }
}
