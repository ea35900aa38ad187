//! Huber's (1981) sandwich covariance with small-sample correction.
// Placeholder items (replaced by the robust module's implementation).
#[allow(clippy::too_many_arguments)]
pub fn huber_sandwich(
    _x: &[f64],
    _n: usize,
    _p: usize,
    _r: &[f64],
    _s: f64,
    _l: &dyn super::loss::Loss,
    _i: &[f64],
) -> Vec<f64> {
    todo!()
}
