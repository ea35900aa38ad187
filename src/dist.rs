//! Distribution functions needed by the statistics: standard normal cdf, density and quantile, Student t
//! quantile. Pure functions; transcendental calls go through `libm` so digests match across platforms.
//!
//! Domain conventions (no function here panics):
//! - probabilities at or outside the ends map to the ends of the support: a quantile of p ≤ 0 is −∞ and
//!   of p ≥ 1 is +∞, so a finite p never gives NaN;
//! - NaN in gives NaN out, and the t functions give NaN for df ≤ 0 (there is no such distribution);
//!   callers pass df = n − p ≥ 1.

use std::f64::consts::{FRAC_1_SQRT_2, FRAC_2_SQRT_PI, PI};

/// The rounding error of the f64 `FRAC_1_SQRT_2`: 1/√2 = FRAC_1_SQRT_2 + this, to double precision.
/// Computed with Python's `decimal` module at 50 digits (1/√2 = 0.70710678118654752440084436210485…).
const FRAC_1_SQRT_2_LO: f64 = -4.833_646_656_726_457e-17;

/// Standard normal cumulative distribution Φ(x).
///
/// Φ(x) = ½ erfc(−x/√2) (Abramowitz & Stegun 1964, 26.2.29), with `libm::erfc`. In the lower tail the
/// rounding of −x/√2 alone would cost a relative error of about 2z²·2⁻⁵³ (z = −x/√2), 1e-14 at x = −10;
/// the exact rounding error e of the product is recovered with a fused multiply-add and a two-part 1/√2,
/// and corrected to first order, erfc(z + e) ≈ erfc(z) − e·(2/√π)·exp(−z²). This keeps the relative
/// error near 1e-15 down to the underflow of Φ (x ≈ −38.5).
pub fn normal_cdf(x: f64) -> f64 {
    if x.is_nan() {
        return f64::NAN;
    }
    // Beyond |x| = 40, Φ is 0 or 1 in double precision (Φ(−38.5) is below the least subnormal).
    if x <= -40.0 {
        return 0.0;
    }
    if x >= 40.0 {
        return 1.0;
    }
    let z = -x * FRAC_1_SQRT_2;
    let e = libm::fma(-x, FRAC_1_SQRT_2, -z) + (-x) * FRAC_1_SQRT_2_LO;
    let c = libm::erfc(z);
    0.5 * (c - e * FRAC_2_SQRT_PI * libm::exp(-z * z))
}

/// Standard normal density φ(x).
pub fn normal_pdf(x: f64) -> f64 {
    libm::exp(-0.5 * x * x) / (2.0 * std::f64::consts::PI).sqrt()
}

/// P(|Z| > |z|) for a standard normal Z: the two-sided tail, i.e. the two-sided p-value of a statistic
/// z (its sign is ignored). Computed as 2Φ(−|z|), never as 1 − something, so small tails keep their
/// relative accuracy.
pub fn two_sided_normal_tail(z: f64) -> f64 {
    2.0 * normal_cdf(-z.abs())
}

/// Standard normal quantile Φ⁻¹(p), 0 < p < 1.
///
/// Wichura (1988), Algorithm AS 241, *Applied Statistics* 37(3), 477–484: PPND16, rational
/// approximations of degree 7 in three regions, relative accuracy about 1e-16. The coefficients are
/// those published there. p ≤ 0 gives −∞, p ≥ 1 gives +∞, NaN gives NaN.
// The coefficients keep all the digits printed in the paper, so they can be checked against it.
#[allow(clippy::excessive_precision)]
pub fn normal_quantile(p: f64) -> f64 {
    if p.is_nan() {
        return f64::NAN;
    }
    if p <= 0.0 {
        return f64::NEG_INFINITY;
    }
    if p >= 1.0 {
        return f64::INFINITY;
    }
    // AS 241 coefficients, lowest degree first (Wichura 1988, PPND16).
    const A: [f64; 8] = [
        3.387_132_872_796_366_608_0,
        1.331_416_678_917_843_774_5e2,
        1.971_590_950_306_551_442_7e3,
        1.373_169_376_550_946_112_5e4,
        4.592_195_393_154_987_145_7e4,
        6.726_577_092_700_870_085_3e4,
        3.343_057_558_358_812_810_5e4,
        2.509_080_928_730_122_672_7e3,
    ];
    const B: [f64; 8] = [
        1.0,
        4.231_333_070_160_091_125_2e1,
        6.871_870_074_920_579_083_0e2,
        5.394_196_021_424_751_107_7e3,
        2.121_379_430_158_659_586_7e4,
        3.930_789_580_009_271_061_0e4,
        2.872_908_573_572_194_267_4e4,
        5.226_495_278_852_854_561_0e3,
    ];
    const C: [f64; 8] = [
        1.423_437_110_749_683_577_34,
        4.630_337_846_156_545_295_90,
        5.769_497_221_460_691_405_50,
        3.647_848_324_763_204_605_04,
        1.270_458_252_452_368_382_58,
        2.417_807_251_774_506_117_70e-1,
        2.272_384_498_926_918_458_33e-2,
        7.745_450_142_783_414_076_40e-4,
    ];
    const D: [f64; 8] = [
        1.0,
        2.053_191_626_637_758_821_87,
        1.676_384_830_183_803_849_40,
        6.897_673_349_851_000_045_50e-1,
        1.481_039_764_274_800_745_90e-1,
        1.519_866_656_361_645_719_66e-2,
        5.475_938_084_995_344_946_00e-4,
        1.050_750_071_644_416_843_24e-9,
    ];
    const E: [f64; 8] = [
        6.657_904_643_501_103_777_20,
        5.463_784_911_164_114_369_90,
        1.784_826_539_917_291_335_80,
        2.965_605_718_285_048_912_30e-1,
        2.653_218_952_657_612_309_30e-2,
        1.242_660_947_388_078_438_60e-3,
        2.711_555_568_743_487_578_15e-5,
        2.010_334_399_292_288_132_65e-7,
    ];
    const F: [f64; 8] = [
        1.0,
        5.998_322_065_558_879_376_90e-1,
        1.369_298_809_227_358_053_10e-1,
        1.487_536_129_085_061_485_25e-2,
        7.868_691_311_456_132_591_00e-4,
        1.846_318_317_510_054_681_80e-5,
        1.421_511_758_316_445_888_70e-7,
        2.044_263_103_389_939_785_64e-15,
    ];
    fn horner(c: &[f64; 8], x: f64) -> f64 {
        c.iter().rev().fold(0.0, |acc, &ci| acc * x + ci)
    }

    let q = p - 0.5;
    if q.abs() <= 0.425 {
        let r = 0.180625 - q * q;
        return q * horner(&A, r) / horner(&B, r);
    }
    // Tail: r = sqrt(−ln(min(p, 1 − p))); 1 − p is exact here (p > 0.925, Sterbenz).
    let tail = if q < 0.0 { p } else { 1.0 - p };
    let r = libm::sqrt(-libm::log(tail));
    let value = if r <= 5.0 {
        let r = r - 1.6;
        horner(&C, r) / horner(&D, r)
    } else {
        let r = r - 5.0;
        horner(&E, r) / horner(&F, r)
    };
    if q < 0.0 {
        -value
    } else {
        value
    }
}

/// Student t cumulative distribution P(T ≤ t) with `df` degrees of freedom (df > 0, may be fractional;
/// df = +∞ is the normal).
///
/// For t ≥ 0 the upper tail is P(T > t) = ½ I_x(df/2, ½) with x = df/(df + t²) (Abramowitz & Stegun
/// 1964, 26.7.1 and 26.5.27), the regularized incomplete beta function evaluated by its continued
/// fraction (Press et al., *Numerical Recipes*, 3rd ed. 2007, §6.4, with the modified Lentz method).
/// Both tails are computed directly, never as 1 − (a small number), so they keep relative accuracy.
/// Where df ≥ 1e4 and t² ≤ df/100 the expansion of `cornish_fisher` is inverted instead and
/// P(T ≤ t) = Φ(x) (see `EXPANSION_MIN_DF` for why). NaN arguments or df ≤ 0 give NaN.
pub fn t_cdf(t: f64, df: f64) -> f64 {
    if t.is_nan() || df.is_nan() || df <= 0.0 {
        return f64::NAN;
    }
    if df == f64::INFINITY {
        return normal_cdf(t);
    }
    let a = t.abs();
    let upper = if uses_expansion(a, df) {
        // Invert the expansion t = x + g1(x)/df + …: t(x) is increasing and convex for x ≥ 0, so
        // Newton from x = t (above the root, as t(x) ≥ x) descends monotonically onto it.
        let mut x = a;
        for _ in 0..100 {
            let (value, slope) = cornish_fisher(x, df);
            let next = x - (value - a) / slope;
            if next.is_nan() || next >= x {
                break;
            }
            x = next;
        }
        normal_cdf(-x)
    } else {
        t_upper_tail(a, df)
    };
    if t < 0.0 {
        upper
    } else {
        1.0 - upper
    }
}

/// Student t quantile with `df` degrees of freedom (df may be fractional, > 0).
///
/// Closed forms for df = 1 (Cauchy, t = cot(π·q)) and df = 2 (t = (1 − 2q)/√(2q(1 − q))), with q the
/// smaller tail probability (both e.g. in Johnson, Kotz & Balakrishnan 1995, *Continuous Univariate
/// Distributions* vol. 2, ch. 28); the normal quantile for df = +∞; the Cornish–Fisher expansion
/// (A&S 26.7.5, see `cornish_fisher`) where df ≥ 1e4 and t² ≤ df/100. Otherwise Newton's method on the
/// upper tail of [`t_cdf`], kept inside a bracket [0, t_hi], where t_hi = √df·(q·df·B(df/2, ½))^(−1/df)
/// solves the leading tail term P(T > t) ≈ df^(df/2 − 1) t^(−df) / B(df/2, ½) and bounds the root from
/// above (the density is below its leading term). The start is the smaller of t_hi and the
/// Cornish–Fisher value; accuracy comes from the Newton steps on the exact tail. Checked against scipy
/// to 1e-10 (relative, or absolute below 1) in `tests/basis_reference.rs`.
///
/// p ≤ 0 gives −∞, p ≥ 1 gives +∞; NaN arguments or df ≤ 0 give NaN.
pub fn t_quantile(p: f64, df: f64) -> f64 {
    if p.is_nan() || df.is_nan() || df <= 0.0 {
        return f64::NAN;
    }
    if p <= 0.0 {
        return f64::NEG_INFINITY;
    }
    if p >= 1.0 {
        return f64::INFINITY;
    }
    if p == 0.5 {
        return 0.0;
    }
    if df == f64::INFINITY {
        return normal_quantile(p);
    }
    let upper = p > 0.5;
    // The smaller tail probability; 1 − p is exact for p > ½ (Sterbenz).
    let q = if upper { 1.0 - p } else { p };
    let t = if df == 1.0 {
        1.0 / libm::tan(PI * q)
    } else if df == 2.0 {
        (1.0 - 2.0 * q) / libm::sqrt(2.0 * q * (1.0 - q))
    } else {
        let (cf, _) = cornish_fisher(-normal_quantile(q), df);
        if uses_expansion(cf, df) {
            cf
        } else {
            t_upper_quantile(q, df)
        }
    };
    if upper {
        t
    } else {
        -t
    }
}

/// From this many degrees of freedom on, and while t² ≤ df/100, the t distribution is taken from its
/// normal expansion ([`cornish_fisher`]) instead of the incomplete beta function.
///
/// Why: the continued fraction for I_x(df/2, ½) with x near 1 loses about log10(df) digits to rounding
/// (3e-13 relative at df = 1e4, 6e-9 at 1e9, measured against mpmath), while the expansion's first
/// omitted term is O(t¹¹/df⁵), below 1e-15 relative in this region.
const EXPANSION_MIN_DF: f64 = 1e4;

fn uses_expansion(t: f64, df: f64) -> bool {
    df >= EXPANSION_MIN_DF && t * t <= df / 100.0
}

/// The Cornish–Fisher expansion of the t quantile in powers of 1/df about the normal deviate x
/// (Abramowitz & Stegun 1964, 26.7.5, coefficients from memory, checked against scipy's t.ppf: each
/// added term cuts the error by a factor of about df):
/// t = x + g1/df + g2/df² + g3/df³ + g4/df⁴ with
/// g1 = (x³ + x)/4, g2 = (5x⁵ + 16x³ + 3x)/96, g3 = (3x⁷ + 19x⁵ + 17x³ − 15x)/384,
/// g4 = (79x⁹ + 776x⁷ + 1482x⁵ − 1920x³ − 945x)/92160.
/// Returns the value and its derivative in x.
fn cornish_fisher(x: f64, df: f64) -> (f64, f64) {
    let x2 = x * x;
    let g1 = (x2 + 1.0) * x / 4.0;
    let g2 = ((5.0 * x2 + 16.0) * x2 + 3.0) * x / 96.0;
    let g3 = (((3.0 * x2 + 19.0) * x2 + 17.0) * x2 - 15.0) * x / 384.0;
    let g4 = ((((79.0 * x2 + 776.0) * x2 + 1482.0) * x2 - 1920.0) * x2 - 945.0) * x / 92160.0;
    let d1 = (3.0 * x2 + 1.0) / 4.0;
    let d2 = ((25.0 * x2 + 48.0) * x2 + 3.0) / 96.0;
    let d3 = (((21.0 * x2 + 95.0) * x2 + 51.0) * x2 - 15.0) / 384.0;
    let d4 = ((((711.0 * x2 + 5432.0) * x2 + 7410.0) * x2 - 5760.0) * x2 - 945.0) / 92160.0;
    let n = df;
    let value = x + (g1 + (g2 + (g3 + g4 / n) / n) / n) / n;
    let slope = 1.0 + (d1 + (d2 + (d3 + d4 / n) / n) / n) / n;
    (value, slope)
}

/// The t ≥ 0 with P(T > t) = q, for 0 < q < ½ and finite df > 0. See [`t_quantile`].
fn t_upper_quantile(q: f64, df: f64) -> f64 {
    let ln_b = ln_beta(0.5 * df, 0.5);
    // Upper bound from the leading tail term (see `t_quantile`), in logs to avoid overflow.
    let ln_hi = 0.5 * libm::log(df) - (libm::log(q) + libm::log(df) + ln_b) / df;
    if ln_hi >= 709.0 {
        // The quantile exceeds the f64 range.
        return f64::INFINITY;
    }
    let mut hi = libm::exp(ln_hi);
    let mut lo = 0.0_f64;

    let cf = cornish_fisher(-normal_quantile(q), df).0;
    let mut t = if cf.is_finite() && cf > 0.0 && cf < hi { cf } else { hi };

    for _ in 0..200 {
        let diff = t_upper_tail(t, df) - q;
        if diff == 0.0 {
            return t;
        }
        // The tail decreases in t: a tail above q means t is below the root.
        if diff > 0.0 {
            lo = t;
        } else {
            hi = t;
        }
        let mut next = t + diff / t_pdf(t, df, ln_b);
        if !(next > lo && next < hi) {
            // Newton left the bracket: bisect (geometrically when the bracket spans decades).
            next = if lo > 0.0 && hi > 4.0 * lo { libm::sqrt(lo * hi) } else { 0.5 * (lo + hi) };
        }
        if (next - t).abs() <= 2.0 * f64::EPSILON * next || hi - lo <= 2.0 * f64::EPSILON * hi {
            return next;
        }
        t = next;
    }
    t
}

/// P(T > t) for t ≥ 0, finite df > 0: ½ I_x(df/2, ½), x = df/(df + t²), 1 − x = t²/(df + t²).
fn t_upper_tail(t: f64, df: f64) -> f64 {
    let r = t * t / df;
    if r == f64::INFINITY {
        return 0.0;
    }
    let x = 1.0 / (1.0 + r);
    let y = r / (1.0 + r);
    0.5 * regularized_incomplete_beta(0.5 * df, 0.5, x, y)
}

/// Student t density, with ln B(df/2, ½) passed in: (1 + t²/df)^(−(df+1)/2) / (√df · B(df/2, ½)).
fn t_pdf(t: f64, df: f64, ln_b: f64) -> f64 {
    libm::exp(-0.5 * (df + 1.0) * libm::log1p(t * t / df) - 0.5 * libm::log(df) - ln_b)
}

/// Regularized incomplete beta I_x(a, b) for a, b > 0, with y = 1 − x given separately so that it keeps
/// its accuracy when x is near 1.
///
/// I_x(a, b) = x^a y^b / (a B(a, b)) · CF(a, b, x) when x < (a + 1)/(a + b + 2), else
/// 1 − I_y(b, a) by symmetry; this is where the continued fraction converges fast (Press et al.,
/// *Numerical Recipes*, §6.4).
fn regularized_incomplete_beta(a: f64, b: f64, x: f64, y: f64) -> f64 {
    if x <= 0.0 {
        return 0.0;
    }
    if y <= 0.0 {
        return 1.0;
    }
    let ln_x = if x > 0.5 { libm::log1p(-y) } else { libm::log(x) };
    let ln_y = if y > 0.5 { libm::log1p(-x) } else { libm::log(y) };
    let front = libm::exp(a * ln_x + b * ln_y - ln_beta(a, b));
    if x < (a + 1.0) / (a + b + 2.0) {
        front * beta_continued_fraction(a, b, x, y) / a
    } else {
        1.0 - front * beta_continued_fraction(b, a, y, x) / b
    }
}

/// The continued fraction for the incomplete beta function, evaluated by the modified Lentz method
/// (Press et al., *Numerical Recipes*, §5.2 and §6.4, `betacf`).
///
/// Terms d_{2m+1} = −(a + m)(a + b + m)x / ((a + 2m)(a + 2m + 1)), d_{2m} = m(b − m)x / ((a + 2m − 1)(a + 2m)).
/// The number of terms needed grows like √max(a, b) (Numerical Recipes §6.4), so the cap does too.
fn beta_continued_fraction(a: f64, b: f64, x: f64, y: f64) -> f64 {
    const TINY: f64 = 1e-300;
    const TOLERANCE: f64 = 4.0 * f64::EPSILON;
    let guard = |v: f64| if v.abs() < TINY { TINY } else { v };
    let max_terms = 200 + (20.0 * libm::sqrt(a.max(b))).min(1e7) as usize;
    let (qab, qap, qam) = (a + b, a + 1.0, a - 1.0);
    let mut c = 1.0;
    // First denominator 1 − (a + b)x/(a + 1) = (1 − b + (a + b)y)/(a + 1): for b ≤ 1 the second form
    // adds non-negative terms, where the first cancels when x is near 1 and a is large (the t tail at
    // large df).
    let first = if b <= 1.0 { (1.0 - b + qab * y) / qap } else { 1.0 - qab * x / qap };
    let mut d = 1.0 / guard(first);
    let mut h = d;
    for m in 1..=max_terms {
        let m = m as f64;
        let m2 = 2.0 * m;
        let aa = m * (b - m) * x / ((qam + m2) * (a + m2));
        d = 1.0 / guard(1.0 + aa * d);
        c = guard(1.0 + aa / c);
        h *= d * c;
        let aa = -(a + m) * (qab + m) * x / ((a + m2) * (qap + m2));
        d = 1.0 / guard(1.0 + aa * d);
        c = guard(1.0 + aa / c);
        let step = d * c;
        h *= step;
        if (step - 1.0).abs() <= TOLERANCE {
            break;
        }
    }
    h
}

/// ln B(a, b) = ln Γ(a) + ln Γ(b) − ln Γ(a + b) for a, b > 0.
///
/// With `libm::lgamma` while both are below 15. When the larger argument l is 15 or more, the difference
/// ln Γ(l) − ln Γ(l + s) is taken from Stirling's series instead of as a difference of two large
/// numbers (which would lose about log10(l·ln l) digits, 1e-10 relative at l = 1e5):
/// ln Γ(l) − ln Γ(l + s) = −s ln l − (l + s − ½) ln(1 + s/l) + s + δ(l) − δ(l + s), where
/// δ(z) = 1/(12z) − 1/(360z³) + 1/(1260z⁵) − 1/(1680z⁷) + 1/(1188z⁹) (Abramowitz & Stegun 1964, 6.1.41;
/// truncation error below 2.2e-16 for z ≥ 15).
fn ln_beta(a: f64, b: f64) -> f64 {
    let (s, l) = if a < b { (a, b) } else { (b, a) };
    if l < 15.0 {
        return libm::lgamma(a) + libm::lgamma(b) - libm::lgamma(a + b);
    }
    fn stirling_remainder(z: f64) -> f64 {
        let w = 1.0 / (z * z);
        (1.0 / 12.0 - w * (1.0 / 360.0 - w * (1.0 / 1260.0 - w * (1.0 / 1680.0 - w / 1188.0)))) / z
    }
    let diff =
        -s * libm::log(l) - (l + s - 0.5) * libm::log1p(s / l) + s + stirling_remainder(l) - stirling_remainder(l + s);
    libm::lgamma(s) + diff
}

#[cfg(test)]
mod tests {
    use super::*;

    fn rel(a: f64, b: f64) -> f64 {
        ((a - b) / b).abs()
    }

    // Reference values keep the 17 digits printed by mpmath.
    #[allow(clippy::excessive_precision)]
    #[test]
    fn normal_values() {
        // Φ⁻¹(0.75) and Φ(1.96): common practice, values computed with mpmath 1.3.0 at 50 digits.
        assert!(rel(normal_quantile(0.75), 0.674_489_750_196_081_7) < 2e-16);
        assert!(rel(normal_cdf(1.96), 0.975_002_104_851_779_56) < 2e-16);
        // P(|Z| > 2.5) = 0.012419330651552…, the 1.24% false-flag rate of DESIGN.md §4.4 (mpmath 1.3.0).
        assert!(rel(two_sided_normal_tail(2.5), 0.012_419_330_651_552_27) < 1e-15);
        assert_eq!(two_sided_normal_tail(-2.5), two_sided_normal_tail(2.5));
        assert_eq!(normal_cdf(0.0), 0.5);
        assert_eq!(normal_quantile(0.5), 0.0);
    }

    #[allow(clippy::excessive_precision)]
    #[test]
    fn normal_lower_tail_relative_accuracy() {
        // Φ(x) from mpmath 1.3.0 (mp.dps = 50, mpmath.ncdf), rounded to 17 significant digits.
        let cases = [
            (-1.0, 0.158_655_253_931_457_05),
            (-5.0, 2.866_515_718_791_939_1e-7),
            (-10.0, 7.619_853_024_160_526_1e-24),
            (-20.0, 2.753_624_118_606_233_7e-89),
            (-30.0, 4.906_713_927_148_187_1e-198),
            (-37.5, 4.605_353_009_581_954_8e-308),
        ];
        for (x, want) in cases {
            let got = normal_cdf(x);
            assert!(rel(got, want) < 1e-15, "Φ({x}) = {got:e}, mpmath {want:e}");
        }
        assert_eq!(normal_cdf(-41.0), 0.0);
        assert_eq!(normal_cdf(f64::INFINITY), 1.0);
        assert!(normal_cdf(f64::NAN).is_nan());
    }

    #[test]
    fn normal_quantile_round_trip_and_ends() {
        for i in 1..1000 {
            let p = f64::from(i) / 1000.0;
            let z = normal_quantile(p);
            assert!(rel(normal_cdf(z), p) < 1e-14, "p = {p}");
            // Exact symmetry where 1 − (1 − p) is exact (Sterbenz).
            let upper = 1.0 - p;
            assert_eq!(normal_quantile(upper), -normal_quantile(1.0 - upper));
        }
        // In the far tail a relative error ε in z becomes about z²ε in Φ(z), so the bound scales with z².
        for p in [1e-300, 1e-100, 1e-20, 1e-10] {
            let z = normal_quantile(p);
            let err = rel(normal_cdf(z), p);
            assert!(err < 1e-15 * z * z, "p = {p:e}: relative error {err:e}");
        }
        assert_eq!(normal_quantile(0.0), f64::NEG_INFINITY);
        assert_eq!(normal_quantile(-1.0), f64::NEG_INFINITY);
        assert_eq!(normal_quantile(1.0), f64::INFINITY);
        assert_eq!(normal_quantile(2.0), f64::INFINITY);
    }

    #[test]
    fn t_quantiles_match_the_printed_table() {
        // t_{0.975}: Abramowitz & Stegun 1964, Table 26.10, three decimals as in every textbook table
        // (common practice; values from memory).
        let table = [(1.0, 12.706), (2.0, 4.303), (5.0, 2.571), (10.0, 2.228), (30.0, 2.042), (120.0, 1.980)];
        for (df, want) in table {
            let got = t_quantile(0.975, df);
            assert!((got - want).abs() < 5e-4, "df {df}: {got}");
        }
    }

    #[test]
    fn t_quantile_inverts_t_cdf() {
        for df in [0.3, 1.0, 1.5, 2.0, 3.0, 4.5, 7.0, 30.0, 250.0, 1e4, 1e6, 1e9] {
            for p in [1e-12, 1e-6, 0.001, 0.025, 0.2, 0.45, 0.5, 0.55, 0.9, 0.975, 0.999_999] {
                let t = t_quantile(p, df);
                let back = t_cdf(t, df);
                let tail = p.min(1.0 - p);
                assert!((back - p).abs() <= 1e-13 * tail, "df {df}, p {p}: t {t}, cdf {back}");
            }
        }
    }

    #[test]
    fn t_limits_and_domain() {
        assert_eq!(t_quantile(0.0, 5.0), f64::NEG_INFINITY);
        assert_eq!(t_quantile(1.0, 5.0), f64::INFINITY);
        assert_eq!(t_quantile(0.5, 5.0), 0.0);
        assert!(t_quantile(0.9, 0.0).is_nan());
        assert!(t_quantile(0.9, -1.0).is_nan());
        assert_eq!(t_quantile(0.975, f64::INFINITY), normal_quantile(0.975));
        assert!(rel(t_quantile(0.975, 1e12), normal_quantile(0.975)) < 1e-11);
        assert_eq!(t_cdf(0.0, 3.0), 0.5);
        assert_eq!(t_cdf(f64::INFINITY, 3.0), 1.0);
        assert_eq!(t_cdf(f64::NEG_INFINITY, 3.0), 0.0);
        // Cauchy: P(T ≤ 1) = 3/4.
        assert!(rel(t_cdf(1.0, 1.0), 0.75) < 1e-15);
        // Symmetry.
        for t in [0.1, 1.0, 3.0, 20.0] {
            assert!(rel(t_cdf(-t, 4.5) + t_cdf(t, 4.5), 1.0) < 1e-15);
        }
    }

    #[test]
    fn ln_beta_branches_agree() {
        // Across the switch at 15 the two formulas must agree.
        for s in [0.5, 1.0, 2.5] {
            let below = libm::lgamma(14.999_999) + libm::lgamma(s) - libm::lgamma(14.999_999 + s);
            let above = ln_beta(15.000_001, s);
            assert!((below - above).abs() < 1e-6 * s + 1e-12, "s {s}");
            let exact = libm::lgamma(20.0) + libm::lgamma(s) - libm::lgamma(20.0 + s);
            assert!((ln_beta(20.0, s) - exact).abs() < 1e-14);
        }
    }
}
