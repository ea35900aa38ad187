//! Iteratively reweighted least squares for M-estimates with a fixed scale (MM) and Huber's joint
//! location-scale fixed point.
// Placeholder items (replaced by the robust module's implementation).
use super::loss::Loss;
use crate::termination::Termination;
#[derive(Debug, Clone)]
pub struct IrlsOptions {
    pub max_iter: usize,
    pub tol: f64,
}
impl Default for IrlsOptions {
    fn default() -> Self {
        todo!()
    }
}
pub struct MEstimate {
    pub coef: Vec<f64>,
    pub residuals: Vec<f64>,
    pub weights: Vec<f64>,
    pub scale: f64,
    pub termination: Termination,
}
#[allow(clippy::too_many_arguments)]
pub fn m_fixed_scale(
    _x: &[f64],
    _n: usize,
    _p: usize,
    _y: &[f64],
    _s: &[f64],
    _sc: f64,
    _l: &dyn Loss,
    _o: &IrlsOptions,
) -> Result<MEstimate, super::RobustError> {
    todo!()
}
pub fn huber_joint(
    _x: &[f64],
    _n: usize,
    _p: usize,
    _y: &[f64],
    _k: f64,
    _o: &IrlsOptions,
) -> Result<MEstimate, super::RobustError> {
    todo!()
}
