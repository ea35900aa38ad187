//! Huber's (1981) sandwich covariance with small-sample correction.
//!
//! Owns the covariance of M- and MM-estimates of regression only; the (X'X)⁻¹ it scales comes from
//! `linalg` (`LeastSquares::xtx_inverse` of the unweighted design).

// `!(a > b)` is used on purpose: it is true when a is NaN, so an unusable value takes the safe branch.
#![allow(clippy::neg_cmp_op_on_partial_ord)]

use super::loss::Loss;
use super::RobustError;

/// Huber's covariance with his small-sample correction factor (Huber 1981, *Robust Statistics*,
/// ch. 7, from memory): with z_i = r_i/s,
/// m = (1/n) Σ ψ'(z_i), v = (1/n) Σ (ψ'(z_i) − m)² (population variance),
/// K = 1 + (p/n)·v/m²,
/// Cov = K² · [Σ ψ(z_i)² / (n − p)] · s² / m² · (X'X)⁻¹.
///
/// This is the "H1" covariance, statsmodels' RLM default, and reproduces it. The result is invariant
/// to a constant factor in ψ (ψ and ψ' scale together), so the bisquare's ψ convention in
/// [`super::loss`] does not matter. `xtx_inv` is p × p row-major (of the n × p design); the result is too.
///
/// Errors: n ≤ p is `TooFewRows`; m ≤ 1e-12·max|ψ'| (no information: every scaled residual past the
/// Huber corner, or an average in the bisquare's descending part) is `DegenerateCovariance`; non-finite
/// inputs are `NonFinite`. A zero scale gives a zero matrix (an exact fit has no sampling spread under
/// this formula).
pub fn huber_sandwich(
    n: usize,
    p: usize,
    residuals: &[f64],
    scale: f64,
    loss: &dyn Loss,
    xtx_inv: &[f64],
) -> Result<Vec<f64>, RobustError> {
    assert_eq!(residuals.len(), n, "huber_sandwich: {} residuals, expected n = {n}", residuals.len());
    assert_eq!(xtx_inv.len(), p * p, "huber_sandwich: xtx_inv has {} entries, expected p²", xtx_inv.len());
    if n <= p {
        return Err(RobustError::TooFewRows { rows: n, columns: p });
    }
    if !scale.is_finite() || scale < 0.0 || residuals.iter().chain(xtx_inv.iter()).any(|v| !v.is_finite()) {
        return Err(RobustError::NonFinite);
    }
    if scale == 0.0 {
        return Ok(vec![0.0; p * p]);
    }
    let nf = n as f64;
    let mut sum_pp = 0.0;
    let mut sum_psi2 = 0.0;
    let mut max_pp = 0.0f64;
    for r in residuals {
        let z = r / scale;
        let pp = loss.psi_prime(z);
        let ps = loss.psi(z);
        sum_pp += pp;
        sum_psi2 += ps * ps;
        max_pp = max_pp.max(pp.abs());
    }
    let m = sum_pp / nf;
    if !(m > 1e-12 * max_pp) || m == 0.0 {
        return Err(RobustError::DegenerateCovariance { mean_psi_prime: m });
    }
    let mut var = 0.0;
    for r in residuals {
        let d = loss.psi_prime(r / scale) - m;
        var += d * d;
    }
    var /= nf;
    let k = 1.0 + (p as f64 / nf) * var / (m * m);
    let factor = k * k * (sum_psi2 / (nf - p as f64)) * scale * scale / (m * m);
    let out: Vec<f64> = xtx_inv.iter().map(|v| factor * v).collect();
    if out.iter().any(|v| !v.is_finite()) {
        return Err(RobustError::NonFinite);
    }
    Ok(out)
}

/// Standard errors: square roots of the diagonal of a p × p covariance (negative rounding noise on
/// the diagonal gives 0, never NaN).
pub fn std_errors(cov: &[f64], p: usize) -> Vec<f64> {
    (0..p).map(|j| cov[j * p + j].max(0.0).sqrt()).collect()
}
