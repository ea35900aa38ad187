//! Scale estimators: MAD about zero and the bisquare M-scale.
//!
//! Owns residual scale estimation only; every estimator returns a [`ScaleEstimate`] (value and how it
//! stopped), never a bare float. No design matrices here.

// `!(a > b)` is used on purpose: it is true when a is NaN, so an unusable value takes the safe branch.
#![allow(clippy::neg_cmp_op_on_partial_ord)]

use super::loss::{bisquare_expected_rho, solve_increasing, Bisquare, Loss};
use crate::termination::Termination;

/// A scale value and how its computation stopped.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ScaleEstimate {
    pub value: f64,
    pub termination: Termination,
}

/// 1/Φ⁻¹(3/4): makes the MAD consistent for σ at the normal (Hampel 1974; Maronna et al. 2006, §2.5,
/// from memory).
pub const MAD_FACTOR: f64 = 1.482602218505602;

/// The bisquare constant c = 1.5476 with b = 0.5 for a 50%-breakdown M-scale (Rousseeuw & Yohai 1984).
pub const MSCALE_C: f64 = 1.5476;
/// b = 0.5: the right-hand side of the M-scale equation at 50% breakdown (Rousseeuw & Yohai 1984).
pub const MSCALE_B: f64 = 0.5;

/// Median of a slice (mean of the two middle values for an even count), by selection on a copy with a
/// total order (deterministic with NaN, which sorts last). 0 for an empty slice.
fn median_of(mut v: Vec<f64>) -> f64 {
    let n = v.len();
    if n == 0 {
        return 0.0;
    }
    let mid = n / 2;
    let (_, hi, _) = v.select_nth_unstable_by(mid, f64::total_cmp);
    let hi = *hi;
    if n % 2 == 1 {
        return hi;
    }
    // The lower middle is the maximum of the left part after selection.
    let lo = v[..mid].iter().copied().fold(f64::NEG_INFINITY, |a, b| if b.total_cmp(&a).is_gt() { b } else { a });
    0.5 * (lo + hi)
}

/// MAD about zero: median |r_i| × [`MAD_FACTOR`]. 0 for an empty slice.
pub fn mad_about_zero(r: &[f64]) -> f64 {
    median_of(r.iter().map(|v| v.abs()).collect()) * MAD_FACTOR
}

/// The bisquare constant c solving E[ρ_c(Z)] = b for Z ~ N(0, 1), ρ normalised to max 1, so the
/// M-scale is consistent at the normal (Rousseeuw & Yohai 1984: c = 1.5476 for b = 0.5). b is clamped
/// to [1e-6, 1 − 1e-6]; never panics.
pub fn bisquare_mscale_constant(b: f64) -> f64 {
    let b = if b.is_finite() { b.clamp(1e-6, 1.0 - 1e-6) } else { MSCALE_B };
    // E ρ_c(Z) decreases in c; solve the increasing −E ρ_c(Z) = −b.
    solve_increasing(|c| -bisquare_expected_rho(c), -b, 1e-3, 1e3)
}

/// The bisquare M-scale: s solving (1/n) Σ ρ_c(r_i/s) = b, by the fixed-point iteration
/// s² ← s² · [(1/n) Σ ρ_c(r_i/s)] / b (Maronna, Martin & Yohai 2006, §2.7.2, from memory), started at
/// `start` or, when absent or unusable, the MAD about zero.
///
/// Convention: the plain mean 1/n (no n − p correction), so with c = 1.5476 and b = 0.5 the scale is
/// consistent at the normal for large n. Stops when |s_new/s − 1| < tol (`Converged`) or after
/// `max_iter` updates (`IterationLimit`). When at most a fraction b of the residuals are non-zero the
/// equation has no positive root (the mean tends to that fraction as s → 0): the result is value 0 with
/// `ScaleCollapsed`. Non-finite residuals count as ρ = 1 (outliers), so the value stays finite.
pub fn m_scale(r: &[f64], c: f64, b: f64, start: Option<f64>, max_iter: usize, tol: f64) -> ScaleEstimate {
    let n = r.len();
    let collapsed = |iterations| ScaleEstimate { value: 0.0, termination: Termination::ScaleCollapsed { iterations } };
    if n == 0 || !(c > 0.0) || !(b > 0.0 && b < 1.0) {
        return collapsed(0);
    }
    let nonzero = r.iter().filter(|v| **v != 0.0).count();
    if nonzero as f64 <= b * n as f64 {
        return collapsed(0);
    }
    let loss = Bisquare { c };
    let mut s = match start {
        Some(s0) if s0.is_finite() && s0 > 0.0 => s0,
        _ => {
            let finite: Vec<f64> = r.iter().filter(|v| v.is_finite()).copied().collect();
            let mad = mad_about_zero(&finite);
            if mad > 0.0 && mad.is_finite() {
                mad
            } else {
                // At least half the residuals are 0 or unusable: start from the largest finite |r|,
                // from which the iteration decreases monotonically.
                let m = finite.iter().fold(0.0f64, |a, v| a.max(v.abs()));
                if m > 0.0 {
                    m
                } else {
                    return collapsed(0);
                }
            }
        }
    };
    let inv_n = 1.0 / n as f64;
    for it in 1..=max_iter {
        let sum = sum_rho(&loss, r, s);
        let ratio = sum * inv_n / b;
        let s_new = s * ratio.sqrt();
        if !(s_new > 0.0) || !s_new.is_finite() {
            return collapsed(it);
        }
        let change = (s_new / s - 1.0).abs();
        s = s_new;
        if change < tol {
            return ScaleEstimate { value: s, termination: Termination::Converged { iterations: it } };
        }
    }
    ScaleEstimate { value: s, termination: Termination::IterationLimit { iterations: max_iter } }
}

/// Mean ρ_c(r_i/s) (the left-hand side of the M-scale equation), 1/n convention.
pub fn mean_rho(r: &[f64], c: f64, s: f64) -> f64 {
    if r.is_empty() {
        return 0.0;
    }
    let loss = Bisquare { c };
    sum_rho(&loss, r, s) / r.len() as f64
}

/// Σ ρ(r_i / s) over the fixed row blocks of `linalg`, added in block order (thread-count independent).
fn sum_rho(loss: &Bisquare, r: &[f64], s: f64) -> f64 {
    crate::linalg::sum_blocks(r.len(), |lo, hi| {
        let mut sum = 0.0;
        for v in &r[lo..hi] {
            sum += loss.rho(v / s);
        }
        sum
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn mad_values() {
        assert_eq!(mad_about_zero(&[]), 0.0);
        assert_eq!(mad_about_zero(&[-3.0]), 3.0 * MAD_FACTOR);
        assert_eq!(mad_about_zero(&[1.0, -4.0, 2.0, 3.0]), 2.5 * MAD_FACTOR);
        assert_eq!(mad_about_zero(&[5.0, -1.0, 0.5]), MAD_FACTOR);
    }

    #[test]
    fn mscale_constant() {
        // Rousseeuw & Yohai (1984): 1.5476 for b = 0.5.
        let c = bisquare_mscale_constant(0.5);
        assert!((c - 1.5476).abs() < 1e-4, "{c}");
        assert!((bisquare_expected_rho(c) - 0.5).abs() < 1e-12);
        // scipy quadrature cross-check (by hand): 1.5476449809.
        assert!((c - 1.5476449809).abs() < 1e-8);
    }

    #[test]
    fn mscale_solves_equation_and_is_equivariant() {
        let r: Vec<f64> = (0..101).map(|i| ((i as f64) * 0.37).sin() * (1.0 + (i % 7) as f64)).collect();
        let s = m_scale(&r, MSCALE_C, MSCALE_B, None, 1000, 1e-14);
        assert!(matches!(s.termination, Termination::Converged { .. }));
        assert!((mean_rho(&r, MSCALE_C, s.value) - 0.5).abs() < 1e-12);
        let r3: Vec<f64> = r.iter().map(|v| -3.0 * v).collect();
        let s3 = m_scale(&r3, MSCALE_C, MSCALE_B, None, 1000, 1e-14);
        assert!((s3.value / s.value - 3.0).abs() < 1e-11);
    }

    #[test]
    fn mscale_collapses() {
        let r = [0.0, 0.0, 0.0, 1.0, -2.0];
        let s = m_scale(&r, MSCALE_C, MSCALE_B, None, 100, 1e-12);
        assert_eq!(s, ScaleEstimate { value: 0.0, termination: Termination::ScaleCollapsed { iterations: 0 } });
        // Exactly half zero with n even: still no positive root.
        let s = m_scale(&[0.0, 0.0, 1.0, 2.0], MSCALE_C, MSCALE_B, None, 100, 1e-12);
        assert_eq!(s.value, 0.0);
        // Fewer than half zero: a positive scale.
        let s = m_scale(&[0.0, 0.0, 1.0, 2.0, 3.0], MSCALE_C, MSCALE_B, None, 1000, 1e-12);
        assert!(s.value > 0.0);
    }
}
