//! Distribution functions needed by the statistics: standard normal cdf, density and quantile, Student t
//! quantile. Pure functions; transcendental calls go through `libm` so digests match across platforms.

/// Standard normal cumulative distribution Φ(x).
pub fn normal_cdf(x: f64) -> f64 {
    let _ = x;
    todo!("robust helper")
}

/// Standard normal density φ(x).
pub fn normal_pdf(x: f64) -> f64 {
    libm::exp(-0.5 * x * x) / (2.0 * std::f64::consts::PI).sqrt()
}

/// Standard normal quantile Φ⁻¹(p), 0 < p < 1.
pub fn normal_quantile(p: f64) -> f64 {
    let _ = p;
    todo!("robust helper")
}

/// Student t quantile with `df` degrees of freedom (df may be fractional, > 0).
pub fn t_quantile(p: f64, df: f64) -> f64 {
    let _ = (p, df);
    todo!("robust helper")
}

/// P(|Z| > z) for standard normal Z.
pub fn two_sided_normal_tail(z: f64) -> f64 {
    let _ = z;
    todo!("robust helper")
}
