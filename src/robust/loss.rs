//! Loss functions for M-estimation: one trait, least squares, Huber and bisquare, and tuning constants
//! solved from a requested normal efficiency.
//!
//! Owns the losses and the normal-theory integrals they need (private Φ, φ via `libm`; this module does
//! not call `crate::dist`). Knows nothing of designs or scales.
//!
//! ## Conventions (read before using ψ)
//! * ρ is the loss; for bounded losses it is normalised to sup ρ = 1 (Maronna, Martin & Yohai 2006,
//!   §2.2.4 and §5.5, from memory), which is the form the M-scale equation and the robust BIC use.
//! * ψ is scaled so that the IRLS weight ψ(z)/z equals 1 at z = 0 for every loss here. For Huber and
//!   least squares this is ψ = ρ' exactly; for the normalised bisquare ψ = (c²/6)·ρ'. The factor is
//!   reported by [`Loss::psi_scale`]: dρ/dz = ψ(z) / psi_scale.
//! * Multiplying ψ by a constant changes neither the M-estimate (the estimating equation Σψ(r/s)x = 0
//!   is homogeneous in ψ) nor Huber's sandwich covariance (it depends on ψ only through the ratio
//!   E[ψ²] / (E[ψ'])², in which the constant cancels).

// `!(a > b)` is used on purpose: it is true when a is NaN, so an unusable value takes the safe branch.
#![allow(clippy::neg_cmp_op_on_partial_ord)]

use std::f64::consts::{FRAC_1_SQRT_2, PI};

/// A loss ρ with its derivative ψ, weight ψ(z)/z and ψ'.
pub trait Loss: Sync {
    fn name(&self) -> &'static str;
    /// The tuning constant (Huber k, bisquare c; 0 for least squares).
    fn tuning(&self) -> f64;
    fn rho(&self, z: f64) -> f64;
    fn psi(&self, z: f64) -> f64;
    /// ψ(z)/z, with the limit at z = 0.
    fn weight(&self, z: f64) -> f64;
    fn psi_prime(&self, z: f64) -> f64;
    fn is_bounded(&self) -> bool;
    /// sup ρ (infinite for unbounded losses).
    fn rho_max(&self) -> f64;
    /// The constant linking ψ to the derivative of ρ: dρ/dz = ψ(z) / psi_scale (see the module
    /// conventions). 1 unless a loss says otherwise.
    fn psi_scale(&self) -> f64 {
        1.0
    }
    /// (ψ'(z), ψ(z), ρ(z)) together, as a Newton step needs them; a loss may share the work between
    /// the three, but each value must be exactly that of its own method.
    fn newton_terms(&self, z: f64) -> (f64, f64, f64) {
        (self.psi_prime(z), self.psi(z), self.rho(z))
    }
}

/// Least squares: ρ(z) = z²/2, ψ(z) = z, weight 1, ψ' = 1 (Huber 1981, §7.1, from memory).
///
/// The robust BIC of DESIGN.md §4.5 reduces to the classical BIC when ρ(t) = t², i.e. 2·`Squared.rho`;
/// the factor 2 is the caller's to apply (it shifts every criterion value by log 2, not the choice).
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct Squared;

impl Loss for Squared {
    fn name(&self) -> &'static str {
        "least squares"
    }
    fn tuning(&self) -> f64 {
        0.0
    }
    fn rho(&self, z: f64) -> f64 {
        0.5 * z * z
    }
    fn psi(&self, z: f64) -> f64 {
        z
    }
    fn weight(&self, _z: f64) -> f64 {
        1.0
    }
    fn psi_prime(&self, _z: f64) -> f64 {
        1.0
    }
    fn is_bounded(&self) -> bool {
        false
    }
    fn rho_max(&self) -> f64 {
        f64::INFINITY
    }
}

/// Huber's loss (Huber 1964; Huber 1981, *Robust Statistics*, §4.5, from memory):
/// ρ(z) = z²/2 for |z| ≤ k, k|z| − k²/2 otherwise; ψ(z) = clamp(z, −k, k);
/// weight = min(1, k/|z|); ψ'(z) = 1 for |z| ≤ k, else 0. Unbounded.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Huber {
    pub k: f64,
}

impl Huber {
    /// k = 1.345, 95% efficiency at the normal (Huber 1981).
    pub fn standard() -> Self {
        Huber { k: 1.345 }
    }
    /// k solved for the requested normal efficiency by [`huber_tuning`].
    pub fn with_efficiency(efficiency: f64) -> Self {
        Huber { k: huber_tuning(efficiency) }
    }
}

impl Loss for Huber {
    fn name(&self) -> &'static str {
        "Huber"
    }
    fn tuning(&self) -> f64 {
        self.k
    }
    fn rho(&self, z: f64) -> f64 {
        let a = z.abs();
        if a <= self.k {
            0.5 * z * z
        } else {
            self.k * a - 0.5 * self.k * self.k
        }
    }
    fn psi(&self, z: f64) -> f64 {
        z.clamp(-self.k, self.k)
    }
    fn weight(&self, z: f64) -> f64 {
        let a = z.abs();
        if a <= self.k {
            1.0
        } else {
            self.k / a
        }
    }
    fn psi_prime(&self, z: f64) -> f64 {
        if z.abs() <= self.k {
            1.0
        } else {
            0.0
        }
    }
    fn is_bounded(&self) -> bool {
        false
    }
    fn rho_max(&self) -> f64 {
        f64::INFINITY
    }
}

/// Tukey's bisquare (biweight) loss, normalised to sup ρ = 1 (Beaton & Tukey 1974; normalisation as
/// in Maronna, Martin & Yohai 2006, §2.2.4, from memory). With u = (z/c)²:
/// ρ(z) = 1 − (1 − u)³ for |z| ≤ c, else 1;
/// ψ(z) = z (1 − u)² for |z| ≤ c, else 0 (so weight(0) = 1; ψ = (c²/6)·ρ');
/// weight(z) = (1 − u)²; ψ'(z) = (1 − u)(1 − 5u).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Bisquare {
    pub c: f64,
}

impl Bisquare {
    /// c = 4.685, 95% efficiency at the normal (Yohai 1987; Maronna et al. 2006, from memory).
    pub fn efficient_95() -> Self {
        Bisquare { c: 4.685 }
    }
    /// c solved for the requested normal efficiency by [`bisquare_tuning`].
    pub fn with_efficiency(efficiency: f64) -> Self {
        Bisquare { c: bisquare_tuning(efficiency) }
    }
}

impl Loss for Bisquare {
    fn name(&self) -> &'static str {
        "bisquare"
    }
    fn tuning(&self) -> f64 {
        self.c
    }
    fn rho(&self, z: f64) -> f64 {
        // `!(a <= c)` also sends NaN to the bounded branch: an unusable residual counts as an outlier.
        let a = z.abs();
        if a <= self.c {
            let v = 1.0 - (z / self.c) * (z / self.c);
            1.0 - v * v * v
        } else {
            1.0
        }
    }
    fn psi(&self, z: f64) -> f64 {
        if z.abs() <= self.c {
            let v = 1.0 - (z / self.c) * (z / self.c);
            z * v * v
        } else {
            0.0
        }
    }
    fn weight(&self, z: f64) -> f64 {
        if z.abs() <= self.c {
            let v = 1.0 - (z / self.c) * (z / self.c);
            v * v
        } else {
            0.0
        }
    }
    fn psi_prime(&self, z: f64) -> f64 {
        if z.abs() <= self.c {
            let u = (z / self.c) * (z / self.c);
            (1.0 - u) * (1.0 - 5.0 * u)
        } else {
            0.0
        }
    }
    fn is_bounded(&self) -> bool {
        true
    }
    fn rho_max(&self) -> f64 {
        1.0
    }
    fn psi_scale(&self) -> f64 {
        self.c * self.c / 6.0
    }
    fn newton_terms(&self, z: f64) -> (f64, f64, f64) {
        // The expressions of psi_prime, psi and rho above, with their common square computed once.
        if z.abs() <= self.c {
            let q = (z / self.c) * (z / self.c);
            let v = 1.0 - q;
            ((1.0 - q) * (1.0 - 5.0 * q), z * v * v, 1.0 - v * v * v)
        } else {
            (0.0, 0.0, 1.0)
        }
    }
}

// ---------------------------------------------------------------------------------------------------
// Normal-theory integrals (private; `crate::dist` is owned elsewhere).

/// φ(x) = exp(−x²/2)/√(2π).
pub(crate) fn normal_pdf(x: f64) -> f64 {
    libm::exp(-0.5 * x * x) / (2.0 * PI).sqrt()
}

/// P(|Z| ≤ c) = erf(c/√2) for Z ~ N(0, 1).
fn central_prob(c: f64) -> f64 {
    libm::erf(c * FRAC_1_SQRT_2)
}

/// P(|Z| > c) = erfc(c/√2).
fn tail_prob(c: f64) -> f64 {
    libm::erfc(c * FRAC_1_SQRT_2)
}

/// Truncated even moments M_{2m} = E[Z^{2m} 1{|Z| ≤ c}], m = 0..=5, by the recursion
/// M_{2m} = (2m − 1) M_{2m−2} − 2 c^{2m−1} φ(c) (integration by parts of z^{2m−1}·zφ(z)).
pub(crate) fn truncated_moments(c: f64) -> [f64; 6] {
    let phi = normal_pdf(c);
    let mut m = [0.0; 6];
    m[0] = central_prob(c);
    let mut cpow = c; // c^{2k-1}
    for k in 1..6 {
        m[k] = (2 * k - 1) as f64 * m[k - 1] - 2.0 * cpow * phi;
        cpow *= c * c;
    }
    m
}

/// Normal efficiency of the Huber M-estimate of location/regression:
/// (E ψ')² / E ψ² with E ψ' = P(|Z| ≤ k) and E ψ² = M₂(k) + k² P(|Z| > k) (Huber 1981, §4.5).
pub fn huber_efficiency(k: f64) -> f64 {
    if !(k > 0.0) {
        return 2.0 / PI; // the limit k → 0 (the median)
    }
    let m = truncated_moments(k);
    let epp = m[0];
    let epsi2 = m[1] + k * k * tail_prob(k);
    epp * epp / epsi2
}

/// Normal efficiency of the bisquare M-estimate with constant c (ψ scale irrelevant):
/// E ψ' = M₀ − 6M₂/c² + 5M₄/c⁴, E ψ² = M₂ − 4M₄/c² + 6M₆/c⁴ − 4M₈/c⁶ + M₁₀/c⁸, with the truncated
/// moments of [`truncated_moments`] (expanding (1 − u)(1 − 5u) and z²(1 − u)⁴, u = z²/c²).
pub fn bisquare_efficiency(c: f64) -> f64 {
    if !(c > 0.0) {
        return 0.0;
    }
    let m = truncated_moments(c);
    let c2 = c * c;
    let epp = m[0] - 6.0 * m[1] / c2 + 5.0 * m[2] / (c2 * c2);
    let epsi2 =
        m[1] - 4.0 * m[2] / c2 + 6.0 * m[3] / (c2 * c2) - 4.0 * m[4] / (c2 * c2 * c2) + m[5] / (c2 * c2 * c2 * c2);
    if !(epsi2 > 0.0) {
        return 0.0;
    }
    epp * epp / epsi2
}

/// E[ρ_c(Z)] for the normalised bisquare ρ and Z ~ N(0, 1):
/// 3M₂/c² − 3M₄/c⁴ + M₆/c⁶ + P(|Z| > c) (expanding 1 − (1 − u)³ = 3u − 3u² + u³).
pub(crate) fn bisquare_expected_rho(c: f64) -> f64 {
    if !(c > 0.0) {
        return 1.0;
    }
    let m = truncated_moments(c);
    let c2 = c * c;
    3.0 * m[1] / c2 - 3.0 * m[2] / (c2 * c2) + m[3] / (c2 * c2 * c2) + tail_prob(c)
}

/// Bisection for an increasing function f on [lo, hi]: the root of f(t) = target, clamped to the
/// bracket when the target lies outside f's range there. Stops at a bracket width of 1e-13 relative
/// (or 200 halvings), so the result is a deterministic function of the inputs.
pub(crate) fn solve_increasing(f: impl Fn(f64) -> f64, target: f64, mut lo: f64, mut hi: f64) -> f64 {
    if !target.is_finite() {
        return lo;
    }
    if f(lo) >= target {
        return lo;
    }
    if f(hi) <= target {
        return hi;
    }
    for _ in 0..200 {
        let mid = 0.5 * (lo + hi);
        if f(mid) < target {
            lo = mid;
        } else {
            hi = mid;
        }
        if hi - lo <= 1e-13 * hi {
            break;
        }
    }
    0.5 * (lo + hi)
}

/// Huber k giving the requested normal efficiency (1.345 at 0.95; Huber 1981). The efficiency is
/// clamped to [2/π, 0.9999] (2/π is the k → 0 limit, the median); never panics.
pub fn huber_tuning(efficiency: f64) -> f64 {
    let e = if efficiency.is_finite() { efficiency.clamp(2.0 / PI, 0.9999) } else { 0.95 };
    solve_increasing(huber_efficiency, e, 1e-6, 20.0)
}

/// Bisquare c giving the requested normal efficiency (4.685 at 0.95, 3.4437 at 0.85; Yohai 1987,
/// Maronna et al. 2006, from memory). The efficiency is clamped to [0.01, 0.9999]; never panics.
pub fn bisquare_tuning(efficiency: f64) -> f64 {
    let e = if efficiency.is_finite() { efficiency.clamp(0.01, 0.9999) } else { 0.95 };
    solve_increasing(bisquare_efficiency, e, 0.05, 100.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn check_invariants(loss: &dyn Loss) {
        let t = loss.tuning();
        for z in [0.0, -0.0, 1e-300, t, -t, t * (1.0 + f64::EPSILON), 2.5, -7.0, f64::INFINITY, f64::NAN] {
            let (d, p, r) = loss.newton_terms(z);
            let want = (loss.psi_prime(z), loss.psi(z), loss.rho(z));
            assert_eq!((d.to_bits(), p.to_bits(), r.to_bits()), (want.0.to_bits(), want.1.to_bits(), want.2.to_bits()));
        }
        assert_eq!(loss.rho(0.0), 0.0, "{}", loss.name());
        assert_eq!(loss.weight(0.0), 1.0, "{}", loss.name());
        let h = 1e-5;
        for i in -80..=80 {
            let z = i as f64 * 0.0731 + 0.0017;
            let w = loss.weight(z) * z;
            assert!((w - loss.psi(z)).abs() <= 1e-14 * (1.0 + z.abs()), "{} weight·z at {z}", loss.name());
            // Skip points within h of a kink (Huber at ±k, bisquare at ±c for ψ').
            let t = loss.tuning();
            if t > 0.0 && (z.abs() - t).abs() < 2.0 * h {
                continue;
            }
            let drho = (loss.rho(z + h) - loss.rho(z - h)) / (2.0 * h);
            assert!((drho * loss.psi_scale() - loss.psi(z)).abs() < 1e-7, "{} ψ vs ρ' at {z}", loss.name());
            let dpsi = (loss.psi(z + h) - loss.psi(z - h)) / (2.0 * h);
            assert!((dpsi - loss.psi_prime(z)).abs() < 1e-7, "{} ψ' at {z}", loss.name());
        }
    }

    #[test]
    fn invariants() {
        check_invariants(&Squared);
        check_invariants(&Huber::standard());
        check_invariants(&Bisquare::efficient_95());
        check_invariants(&Bisquare { c: 1.5476 });
    }

    #[test]
    fn tabulated_values() {
        let h = Huber { k: 1.345 };
        assert_eq!(h.rho(1.0), 0.5);
        assert!((h.rho(3.0) - (1.345 * 3.0 - 0.5 * 1.345 * 1.345)).abs() < 1e-15);
        assert_eq!(h.psi(-5.0), -1.345);
        assert!((h.weight(2.69) - 0.5).abs() < 1e-15);
        let b = Bisquare { c: 2.0 };
        // z = 1: u = 1/4, 1 − (3/4)³ = 37/64; ψ = 1·(3/4)² = 9/16; ψ' = (3/4)(−1/4) = −3/16.
        assert!((b.rho(1.0) - 37.0 / 64.0).abs() < 1e-15);
        assert!((b.psi(1.0) - 9.0 / 16.0).abs() < 1e-15);
        assert!((b.psi_prime(1.0) + 3.0 / 16.0).abs() < 1e-15);
        assert_eq!(b.rho(2.5), 1.0);
        assert_eq!(b.psi(-2.5), 0.0);
        assert_eq!(b.rho(f64::NAN), 1.0);
    }

    #[test]
    fn tuning_constants() {
        // Huber (1981): 1.345 at 95% (the tabled value is rounded to 3 decimals).
        assert!((huber_tuning(0.95) - 1.345).abs() < 1e-3, "{}", huber_tuning(0.95));
        // Yohai (1987) / Maronna et al. (2006): 4.685 at 95%, 3.4437 at 85%.
        assert!((bisquare_tuning(0.95) - 4.685).abs() < 1e-3, "{}", bisquare_tuning(0.95));
        assert!((bisquare_tuning(0.85) - 3.4437).abs() < 1e-4, "{}", bisquare_tuning(0.85));
        assert!((huber_efficiency(huber_tuning(0.9)) - 0.9).abs() < 1e-10);
        // Cross-check against independent quadrature (scipy.integrate.quad + scipy.optimize.brentq on
        // the defining integrals, run by hand when this was written): 1.3449975085, 4.6850649485,
        // 3.4436897847.
        assert!((huber_tuning(0.95) - 1.3449975085).abs() < 1e-8);
        assert!((bisquare_tuning(0.95) - 4.6850649485).abs() < 1e-8);
        assert!((bisquare_tuning(0.85) - 3.4436897847).abs() < 1e-8);
        // Clamped, never a panic.
        assert!(huber_tuning(0.1).is_finite() && bisquare_tuning(f64::NAN).is_finite());
        assert!(bisquare_tuning(1.5).is_finite());
    }

    #[test]
    fn truncated_moments_limit() {
        // Large c: the full normal moments 1, 1, 3, 15, 105, 945.
        let m = truncated_moments(40.0);
        let want = [1.0, 1.0, 3.0, 15.0, 105.0, 945.0];
        for (a, b) in m.iter().zip(want.iter()) {
            assert!((a - b).abs() < 1e-9 * b);
        }
    }
}
