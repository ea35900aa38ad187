//! The S-estimate start by random elemental subsamples (Salibián-Barrera & Yohai 2006).
// Placeholder items (replaced by the robust module's implementation).
use crate::termination::Termination;
#[derive(Debug, Clone)]
pub struct SOptions {
    pub subsamples: usize,
    pub seed: u64,
    pub refine_steps: usize,
    pub best_candidates: usize,
    pub max_iter: usize,
    pub tol: f64,
    pub search_rows: usize,
}
impl Default for SOptions {
    fn default() -> Self {
        todo!()
    }
}
#[derive(Debug, Clone)]
pub struct SEstimate {
    pub coef: Vec<f64>,
    pub scale: f64,
    pub termination: Termination,
    pub subsamples_drawn: usize,
    pub singular_redraws: usize,
    pub search_rows: usize,
}
pub fn s_estimate(
    _x: &[f64],
    _n: usize,
    _p: usize,
    _y: &[f64],
    _o: &SOptions,
) -> Result<SEstimate, super::RobustError> {
    todo!()
}
