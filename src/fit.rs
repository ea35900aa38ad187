//! Fits on a [`Design`]: classical least squares and robust M/MM fits, each with covariance,
//! intervals and how it stopped; curves with pointwise bands for the smooth terms.
//!
//! Fitting is a pure function `(design, method, options) -> Fit`; nothing here reads or writes files.

use crate::design::Design;
use crate::dist;
use crate::linalg::{self, LinalgError};
use crate::robust::irls::{self, IrlsOptions};
use crate::robust::loss::{Bisquare, Huber, Loss};
use crate::robust::sandwich;
use crate::robust::sest::{self, SEstimate, SOptions};
use crate::robust::RobustError;
use crate::termination::Termination;

/// Why a fit could not be computed.
#[derive(Debug, Clone, PartialEq)]
pub enum FitError {
    /// Column `column` of the design is a linear combination of `aliased_with` (design column indices).
    RankDeficient { column: usize, aliased_with: Vec<usize> },
    /// Fewer rows than columns.
    TooFewRows { rows: usize, columns: usize },
    /// The fit met a non-finite value.
    NonFinite,
    /// No non-singular subsample could be drawn for the S-estimate.
    NoSubsample { tried: usize },
    /// The robust covariance is undefined: mean ψ′ at the solution is about zero.
    DegenerateCovariance,
}

impl From<LinalgError> for FitError {
    fn from(e: LinalgError) -> Self {
        match e {
            LinalgError::RankDeficient { column, aliased_with } => FitError::RankDeficient { column, aliased_with },
            LinalgError::TooFewRows { rows, columns } => FitError::TooFewRows { rows, columns },
            LinalgError::NonFinite => FitError::NonFinite,
        }
    }
}

impl From<RobustError> for FitError {
    fn from(e: RobustError) -> Self {
        match e {
            RobustError::TooFewRows { rows, columns } => FitError::TooFewRows { rows, columns },
            RobustError::AllSubsamplesSingular { tried } => FitError::NoSubsample { tried },
            RobustError::NonFinite => FitError::NonFinite,
            RobustError::RankDeficient { column, aliased_with } => FitError::RankDeficient { column, aliased_with },
            RobustError::DegenerateCovariance { .. } => FitError::DegenerateCovariance,
        }
    }
}

/// The robust method, checked once (never a string compared at run time).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum RobustMethod {
    /// MM: bisquare IRLS with tuning `c`, from the S-estimate, its scale held fixed (Yohai 1987).
    Mm { c: f64 },
    /// Huber IRLS with tuning `k` from the S-estimate, its scale held fixed.
    HuberFixedScale { k: f64 },
    /// Huber from least squares, MAD scale re-estimated each step: the joint fixed point (Huber 1981).
    HuberJoint { k: f64 },
}

impl RobustMethod {
    pub fn loss_name(&self) -> &'static str {
        match self {
            RobustMethod::Mm { .. } => "bisquare",
            _ => "huber",
        }
    }
    pub fn tuning(&self) -> f64 {
        match *self {
            RobustMethod::Mm { c } => c,
            RobustMethod::HuberFixedScale { k } | RobustMethod::HuberJoint { k } => k,
        }
    }
    /// True when the method needs an S-estimate (start and scale).
    pub fn needs_s_estimate(&self) -> bool {
        !matches!(self, RobustMethod::HuberJoint { .. })
    }
    /// The loss as a trait object.
    pub fn loss(&self) -> Box<dyn Loss> {
        match *self {
            RobustMethod::Mm { c } => Box::new(Bisquare { c }),
            RobustMethod::HuberFixedScale { k } | RobustMethod::HuberJoint { k } => Box::new(Huber { k }),
        }
    }
}

/// How intervals are formed.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum IntervalKind {
    /// Student t with n − p degrees of freedom (classical).
    StudentT,
    /// Normal (robust, asymptotic).
    Normal,
}

/// A fitted model on one design.
#[derive(Debug, Clone)]
pub struct Fit {
    pub coef: Vec<f64>,
    /// Covariance of the coefficients, p × p row-major.
    pub cov: Vec<f64>,
    pub std_errors: Vec<f64>,
    pub lower: Vec<f64>,
    pub upper: Vec<f64>,
    /// y − fitted for every design row (the fitted values are `fitted_at`: not stored, since a fit on
    /// ten million rows would carry another 80 MB for them).
    pub residuals: Vec<f64>,
    /// Rows the fit was estimated from: all design rows, or those with a positive prior weight.
    pub rows_used: usize,
    /// σ̂: RSS/(n − p) square-rooted (classical) or the robust scale.
    pub scale: f64,
    pub termination: Termination,
    /// Final IRLS weights (robust fits).
    pub weights: Option<Vec<f64>>,
    pub rss: f64,
    pub r_squared: f64,
    pub interval: IntervalKind,
    /// Quantile used for the 95% intervals and bands.
    pub critical: f64,
    /// (X'X)⁻¹ of the unweighted design (from its triangular factor), p × p; shared with fits on the same design.
    pub xtx_inverse: Vec<f64>,
}

impl Fit {
    /// The fitted value of row i of the design the fit was made on (`y` its response): y_i − r_i.
    pub fn fitted_at(&self, y: &[f64], i: usize) -> f64 {
        y[i] - self.residuals[i]
    }

    /// All fitted values (see [`Fit::fitted_at`]).
    pub fn fitted(&self, y: &[f64]) -> Vec<f64> {
        y.iter().zip(&self.residuals).map(|(y, r)| y - r).collect()
    }

    /// Whether coefficient j's 95% interval excludes zero.
    pub fn significant(&self, j: usize) -> bool {
        self.lower[j] > 0.0 || self.upper[j] < 0.0
    }
}

fn total_sum_of_squares(y: &[f64]) -> f64 {
    let mean = y.iter().sum::<f64>() / y.len().max(1) as f64;
    y.iter().map(|v| (v - mean) * (v - mean)).sum()
}

/// The values of `v` on the rows with a positive prior.
fn kept_values(v: &[f64], prior: &[f64]) -> Vec<f64> {
    v.iter().zip(prior).filter(|(_, q)| **q > 0.0).map(|(v, _)| *v).collect()
}

/// Rows with a positive prior weight (all rows without one).
fn kept_rows(n: usize, prior: Option<&[f64]>) -> usize {
    prior.map_or(n, |q| q.iter().filter(|v| **v > 0.0).count())
}

/// What a solver hands over; [`assemble`] derives the rest every fit reports.
struct Solved {
    coef: Vec<f64>,
    cov: Vec<f64>,
    scale: f64,
    termination: Termination,
    weights: Option<Vec<f64>>,
    interval: IntervalKind,
    critical: f64,
    xtx_inverse: Vec<f64>,
    /// y − X·coef when the solver has them already (computed here otherwise).
    residuals: Option<Vec<f64>>,
}

/// Standard errors, 95% intervals, residuals, RSS and R² of a solved fit; with `prior`, RSS and R² are
/// those of the rows kept (prior > 0), the residuals those of every row.
fn assemble(design: &Design, s: Solved, prior: Option<&[f64]>) -> Fit {
    let p = design.p;
    let std_errors: Vec<f64> = (0..p).map(|j| s.cov[j * p + j].max(0.0).sqrt()).collect();
    let lower = (0..p).map(|j| s.coef[j] - s.critical * std_errors[j]).collect();
    let upper = (0..p).map(|j| s.coef[j] + s.critical * std_errors[j]).collect();
    let residuals = match s.residuals {
        Some(r) if r.len() == design.n => r,
        _ => {
            let mut r = vec![0.0; design.n];
            linalg::residuals_rows(design, &design.y, &s.coef, &mut r);
            r
        }
    };
    let (rss, tss) = match prior {
        None => (residuals.iter().map(|r| r * r).sum::<f64>(), total_sum_of_squares(&design.y)),
        Some(q) => (
            kept_values(&residuals, q).iter().map(|r| r * r).sum::<f64>(),
            total_sum_of_squares(&kept_values(&design.y, q)),
        ),
    };
    let r_squared = if tss > 0.0 { 1.0 - rss / tss } else { 1.0 };
    let rows_used = kept_rows(design.n, prior);
    Fit {
        coef: s.coef,
        cov: s.cov,
        std_errors,
        lower,
        upper,
        residuals,
        rows_used,
        scale: s.scale,
        termination: s.termination,
        weights: s.weights,
        rss,
        r_squared,
        interval: s.interval,
        critical: s.critical,
        xtx_inverse: s.xtx_inverse,
    }
}

/// Classical least squares by [`linalg::least_squares_rows`] (refined normal equations or QR); σ̂² = RSS/(n − p); t-based 95% intervals (DESIGN.md §4.2).
pub fn classical(design: &Design) -> Result<Fit, FitError> {
    classical_with_prior(design, None)
}

/// [`classical`] on the rows with prior weight 1 alone (`prior` 0 or 1 per row), computed on the full
/// design: the same estimate as on the subset design, with n the number of rows kept.
pub fn classical_with_prior(design: &Design, prior: Option<&[f64]>) -> Result<Fit, FitError> {
    let (n, p) = (kept_rows(design.n, prior), design.p);
    if n <= p {
        return Err(FitError::TooFewRows { rows: n, columns: p });
    }
    let ls = linalg::least_squares_rows(design, &design.y, prior)?;
    let df = (n - p) as f64;
    let sigma2 = ls.rss / df;
    let inv = ls.xtx_inverse();
    let cov: Vec<f64> = inv.iter().map(|v| v * sigma2).collect();
    let critical = dist::t_quantile(0.975, df);
    Ok(assemble(
        design,
        Solved {
            coef: ls.coef,
            cov,
            scale: sigma2.sqrt(),
            termination: Termination::Direct,
            weights: None,
            interval: IntervalKind::StudentT,
            critical,
            xtx_inverse: inv,
            residuals: ls.residuals,
        },
        prior,
    ))
}

/// The residual sum of squares of the least-squares fit alone (what a classical criterion needs), with
/// the same errors as [`classical`].
pub fn classical_rss(design: &Design) -> Result<f64, FitError> {
    if design.n <= design.p {
        return Err(FitError::TooFewRows { rows: design.n, columns: design.p });
    }
    Ok(linalg::least_squares_rows(design, &design.y, None)?.rss)
}

/// The S-estimate of a design (the robust start and scale).
pub fn s_estimate(design: &Design, options: &SOptions) -> Result<SEstimate, FitError> {
    Ok(sest::s_estimate_rows(design, &design.y, options)?)
}

/// A robust fit on `design`. For S-started methods `start` gives the starting coefficients and
/// `scale` the scale held fixed (the S-scale, or the shared grid scale of DESIGN.md §4.5).
pub fn robust(
    design: &Design,
    method: RobustMethod,
    start: Option<&[f64]>,
    scale: f64,
    options: &IrlsOptions,
) -> Result<Fit, FitError> {
    robust_with_prior(design, method, start, scale, options, None, None)
}

/// [`robust`] reusing (X'X)⁻¹ of the same design when given (e.g. from its classical fit, saving a
/// least-squares solve), and with `prior` (0 or 1 per row) on the rows with prior weight 1 alone,
/// computed on the full design (see [`irls::m_fixed_scale_rows`]); `xtx_inverse` is then that of the
/// kept rows. The joint Huber fit, whose MAD step has no prior weights, runs on the kept rows' own
/// design instead; its residuals and weights are then spread back to every row (weight 0 off it).
#[allow(clippy::too_many_arguments)]
pub fn robust_with_prior(
    design: &Design,
    method: RobustMethod,
    start: Option<&[f64]>,
    scale: f64,
    options: &IrlsOptions,
    xtx_inverse: Option<&[f64]>,
    prior: Option<&[f64]>,
) -> Result<Fit, FitError> {
    let (n, p) = (kept_rows(design.n, prior), design.p);
    if n <= p {
        return Err(FitError::TooFewRows { rows: n, columns: p });
    }
    let loss = method.loss();
    let est = match (method, prior) {
        (RobustMethod::HuberJoint { k }, None) => irls::huber_joint_rows(design, &design.y, k, options)?,
        (RobustMethod::HuberJoint { k }, Some(q)) => {
            let keep: Vec<usize> = (0..design.n).filter(|&i| q[i] > 0.0).collect();
            let sub = design.subset(&keep);
            let mut est = irls::huber_joint_rows(&sub, &sub.y, k, options)?;
            let mut residuals = vec![0.0; design.n];
            linalg::residuals_rows(design, &design.y, &est.coef, &mut residuals);
            let mut weights = vec![0.0; design.n];
            for (&i, w) in keep.iter().zip(&est.weights) {
                weights[i] = *w;
            }
            (est.residuals, est.weights) = (residuals, weights);
            est
        }
        _ => {
            let zeros = vec![0.0; p];
            let start = start.unwrap_or(&zeros);
            irls::m_fixed_scale_rows(design, &design.y, start, scale, loss.as_ref(), prior, options)?
        }
    };
    let inv = match xtx_inverse {
        Some(inv) if inv.len() == p * p => inv.to_vec(),
        _ => linalg::least_squares_rows(design, &design.y, prior)?.xtx_inverse(),
    };
    let cov = if est.scale > 0.0 {
        let kept;
        let residuals = match prior {
            None => &est.residuals,
            Some(q) => {
                kept = kept_values(&est.residuals, q);
                &kept
            }
        };
        sandwich::huber_sandwich(n, p, residuals, est.scale, loss.as_ref(), &inv)?
    } else {
        vec![0.0; p * p]
    };
    let critical = dist::normal_quantile(0.975);
    Ok(assemble(
        design,
        Solved {
            coef: est.coef,
            cov,
            scale: est.scale,
            termination: est.termination,
            weights: Some(est.weights),
            interval: IntervalKind::Normal,
            critical,
            xtx_inverse: inv,
            residuals: Some(est.residuals),
        },
        prior,
    ))
}

/// A smooth term's estimated curve on a grid with its pointwise 95% band.
#[derive(Debug, Clone, PartialEq)]
pub struct Curve {
    pub x: Vec<f64>,
    pub value: Vec<f64>,
    pub lower: Vec<f64>,
    pub upper: Vec<f64>,
}

/// Evaluate smooth term `j`'s curve g_j at `grid` with its band from the term's covariance block.
pub fn curve(design: &Design, fit: &Fit, j: usize, grid: &[f64]) -> Curve {
    let enc = &design.smooth[j];
    let span = match design.smooth_span(j) {
        Some(s) => s.clone(),
        None => return Curve { x: vec![], value: vec![], lower: vec![], upper: vec![] },
    };
    let m = span.len;
    let p = design.p;
    let mut scratch = vec![0.0; enc.basis.degree + 1];
    let mut b = vec![0.0; m];
    let mut out = Curve { x: grid.to_vec(), value: vec![], lower: vec![], upper: vec![] };
    for &g in grid {
        enc.eval_centred(g, &mut scratch, &mut b);
        let v: f64 = b.iter().zip(&fit.coef[span.start..span.start + m]).map(|(b, c)| b * c).sum();
        let mut var = 0.0;
        for (a, ba) in b.iter().enumerate() {
            let row = (span.start + a) * p + span.start;
            let s: f64 = fit.cov[row..row + m].iter().zip(&b).map(|(c, bc)| c * bc).sum();
            var += ba * s;
        }
        let se = var.max(0.0).sqrt();
        out.value.push(v);
        out.lower.push(v - fit.critical * se);
        out.upper.push(v + fit.critical * se);
    }
    out
}

/// Evenly spaced grid of `count` points over a smooth term's range.
pub fn curve_grid(design: &Design, j: usize, count: usize) -> Vec<f64> {
    let (lo, hi) = design.smooth[j].basis.range();
    if count < 2 {
        return vec![lo];
    }
    (0..count).map(|i| lo + (hi - lo) * (i as f64) / ((count - 1) as f64)).collect()
}

/// The value of smooth term j's curve at each design row (its partial fit), for partial residuals.
pub fn partial_fit(design: &Design, fit: &Fit, j: usize) -> Vec<f64> {
    match design.smooth_span(j) {
        Some(span) => {
            // The term's coefficients alone: X·b with every other coefficient zero.
            let mut coef = vec![0.0; design.p];
            coef[span.start..span.start + span.len].copy_from_slice(&fit.coef[span.start..span.start + span.len]);
            design.predict(&coef)
        }
        None => vec![0.0; design.n],
    }
}
