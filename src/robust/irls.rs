//! Iteratively reweighted least squares for M-estimates with a fixed scale (MM) and Huber's joint
//! location-scale fixed point.
//!
//! Owns the iterations only: safeguarded Newton steps (`linalg::newton_sweep`) with IRLS steps
//! (weighted normal equations, `linalg::reweight`) as the fallback, the
//! reported solve once more by the accurate least-squares solve (`linalg::least_squares_rows`) with the
//! final weights. Pure functions: design, loss,
//! scale and options in, an [`MEstimate`] out.

// `!(a > b)` is used on purpose: it is true when a is NaN, so an unusable value takes the safe branch.
#![allow(clippy::neg_cmp_op_on_partial_ord)]

use super::loss::Loss;
use super::scale::mad_about_zero;
use super::{check_data, exact_fit_threshold, RobustError};
use crate::linalg::{
    least_squares_rows, newton_sweep, normal_solve_rows, residuals_rows, reweight, Dense, LinalgError, Rows,
};
use crate::termination::Termination;

/// Settings of an IRLS fit.
#[derive(Debug, Clone, PartialEq)]
pub struct IrlsOptions {
    /// Limit on reweighting steps (200).
    pub max_iter: usize,
    /// Convergence tolerance (1e-10): the iteration stops when no fitted value moves by more than
    /// tol × scale between steps (and, for the joint fit, the scale changes by less than tol
    /// relative). Measuring the change of the fit in units of the scale makes the test invariant to
    /// the units of y and of each column, unlike a test on raw coefficients.
    pub tol: f64,
    /// Re-solve the converged weighted problem once by the accurate least-squares solve (true). The selection grid turns this off
    /// for the points it only scores and polishes the chosen point alone.
    pub final_qr: bool,
}

impl Default for IrlsOptions {
    fn default() -> Self {
        IrlsOptions { max_iter: 200, tol: 1e-10, final_qr: true }
    }
}

/// An M-estimate of regression.
#[derive(Debug, Clone, PartialEq)]
pub struct MEstimate {
    pub coef: Vec<f64>,
    /// y − X·coef.
    pub residuals: Vec<f64>,
    /// The IRLS weights ψ(r_i/s)/(r_i/s) at the final residuals.
    pub weights: Vec<f64>,
    /// The scale used (fixed for MM; the final MAD for the joint Huber fit).
    pub scale: f64,
    pub termination: Termination,
}

fn weights_into(loss: &dyn Loss, r: &[f64], s: f64, w: &mut [f64]) {
    for (wi, ri) in w.iter_mut().zip(r.iter()) {
        *wi = loss.weight(ri / s);
    }
}

fn max_change(a: &[f64], b: &[f64]) -> f64 {
    a.iter().zip(b.iter()).fold(0.0f64, |m, (u, v)| m.max((u - v).abs()))
}

/// The M-estimate with the scale held fixed: minimise Σ ρ((y_i − x_i'b)/s) by IRLS from `start`.
/// Started at the S-estimate with the S-scale and the 95%-efficient bisquare this is the MM-estimate
/// (Yohai 1987). For a bounded ρ the result is a local minimum near the start, which is the point of
/// the MM construction.
///
/// A zero scale (an exact fit) returns the start with `ScaleCollapsed` and unit weights; a negative or
/// non-finite scale is `NonFinite`.
#[allow(clippy::too_many_arguments)]
pub fn m_fixed_scale(
    x: &[f64],
    n: usize,
    p: usize,
    y: &[f64],
    start: &[f64],
    scale: f64,
    loss: &dyn Loss,
    opts: &IrlsOptions,
) -> Result<MEstimate, RobustError> {
    m_fixed_scale_rows(&Dense::new(x, n, p), y, start, scale, loss, None, opts)
}

/// Weights times the prior weights (rows with prior 0 get weight 0).
fn apply_prior(w: &mut [f64], prior: Option<&[f64]>) {
    if let Some(q) = prior {
        for (wi, qi) in w.iter_mut().zip(q) {
            *wi *= qi;
        }
    }
}

/// The largest change of a residual between two iterates over the rows with a positive prior (all
/// rows without one).
fn max_change_kept(a: &[f64], b: &[f64], prior: Option<&[f64]>) -> f64 {
    match prior {
        None => max_change(a, b),
        Some(q) => {
            a.iter().zip(b).zip(q).filter(|(_, q)| **q > 0.0).fold(0.0f64, |m, ((u, v), _)| m.max((u - v).abs()))
        }
    }
}

/// [`m_fixed_scale`] on any [`Rows`] (the model design's compact rows). With `prior` (0 or 1 per row)
/// the estimate is that of the rows with prior 1 alone, computed on the full matrix: the rows with
/// prior 0 add nothing to any sum and get weight 0, and their residuals are reported at the solution.
#[allow(clippy::too_many_arguments)]
pub fn m_fixed_scale_rows<R: Rows + ?Sized>(
    x: &R,
    y: &[f64],
    start: &[f64],
    scale: f64,
    loss: &dyn Loss,
    prior: Option<&[f64]>,
    opts: &IrlsOptions,
) -> Result<MEstimate, RobustError> {
    let (n, p) = (x.n(), x.p());
    check_data(x, y)?;
    assert_eq!(start.len(), p, "m_fixed_scale: start has {} entries, expected p = {p}", start.len());
    if !scale.is_finite() || scale < 0.0 || start.iter().any(|v| !v.is_finite()) {
        return Err(RobustError::NonFinite);
    }
    let mut r = vec![0.0; n];
    // The exact-fit test on the rows kept (as a fit on just those rows would make it).
    let threshold = match prior {
        None => exact_fit_threshold(y),
        Some(q) => {
            let largest = y.iter().zip(q).filter(|(_, q)| **q > 0.0).fold(0.0f64, |a, (v, _)| a.max(v.abs()));
            exact_fit_threshold(&[largest])
        }
    };
    if scale <= threshold {
        residuals_rows(x, y, start, &mut r);
        let mut weights = vec![1.0; n];
        apply_prior(&mut weights, prior);
        return Ok(MEstimate {
            coef: start.to_vec(),
            residuals: r,
            weights,
            scale,
            termination: Termination::ScaleCollapsed { iterations: 0 },
        });
    }
    let _timer = super::profile::stage(|| format!("irls m_fixed_scale n={n} p={p}"));
    let mut w = vec![0.0; n];
    let mut r_new = vec![0.0; n];
    let mut d_new = vec![0.0; n];
    // Safeguarded Newton iteration. Each sweep over the rows gives, at the current coefficients, the
    // residuals, Σρ(r/s) and the Newton system [Σ ψ'(u) x x' | s Σ ψ(u) x] (u = r/s). A Newton step is
    // taken when that matrix is safely positive definite and the step does not raise Σρ; otherwise the
    // IRLS step (weighted least squares with weights ψ(u)/u) is taken from the same point, which never
    // raises Σρ when ψ(u)/u is non-increasing in |u| (Huber 1981, ch. 7; from memory). Both iterations have the same fixed points, Σ ψ(r_i/s) x_i = 0; the
    // Newton steps converge quadratically near a minimum where IRLS converges only linearly.
    let terms = |ri: f64| {
        let (dpsi, psi, rho) = loss.newton_terms(ri / scale);
        (dpsi, scale * psi, rho)
    };
    let weight = |ri: f64| loss.weight(ri / scale);
    let (mut system, mut objective) = newton_sweep(x, y, start, &terms, prior, &mut r, &mut w)?;
    let mut termination = Termination::IterationLimit { iterations: opts.max_iter };
    let mut last = start.to_vec();
    // After a rejected Newton step, a few IRLS steps before Newton is tried again.
    let mut irls_only = 0usize;
    for it in 1..=opts.max_iter {
        let mut taken = None;
        if irls_only == 0 {
            if let Some(step) = system.clone().cholesky() {
                let next: Vec<f64> = last.iter().zip(&step).map(|(b, s)| b + s).collect();
                // A step to non-finite residuals is a failed step like any other (IRLS is tried instead).
                match newton_sweep(x, y, &next, &terms, prior, &mut r_new, &mut d_new) {
                    // Rounding can raise Σρ by a few ulps at the minimum; that is not a failed step.
                    Ok((sys, obj)) if obj <= objective + 1e-12 * objective.abs() => taken = Some((next, sys, obj)),
                    Ok(_) | Err(LinalgError::NonFinite) => {}
                    Err(e) => return Err(e.into()),
                }
            }
            if taken.is_none() {
                irls_only = 3;
            }
        } else {
            irls_only -= 1;
        }
        let (next, sys, obj) = match taken {
            Some(t) => t,
            None => {
                let eq = reweight(x, y, &last, &weight, prior, &mut r_new, &mut w)?;
                let next = eq.solve(x, y, &w)?;
                let (sys, obj) = newton_sweep(x, y, &next, &terms, prior, &mut r_new, &mut d_new)?;
                (next, sys, obj)
            }
        };
        let moved = max_change_kept(&r, &r_new, prior);
        std::mem::swap(&mut r, &mut r_new);
        last = next;
        system = sys;
        objective = obj;
        if moved <= opts.tol * scale {
            termination = Termination::Converged { iterations: it };
            break;
        }
    }
    drop(system);
    weights_into(loss, &r, scale, &mut w);
    apply_prior(&mut w, prior);
    drop((r_new, d_new));
    if super::profile::enabled() {
        eprintln!("knotwise-profile: irls {termination:?}");
    }
    // The reported solve: once more, accurately, with the weights of the final residuals.
    let coef = if opts.final_qr {
        let ls = least_squares_rows(x, y, Some(&w))?;
        match ls.residuals {
            Some(res) => r = res,
            None => residuals_rows(x, y, &ls.coef, &mut r),
        }
        weights_into(loss, &r, scale, &mut w);
        apply_prior(&mut w, prior);
        ls.coef
    } else {
        last
    };
    Ok(MEstimate { coef, residuals: r, weights: w, scale, termination })
}

/// Huber's M-estimate with the scale re-estimated at every step as the MAD about zero of the current
/// residuals: least-squares start; then weights min(1, k s/|r_i|), weighted LS, new MAD, until the
/// joint fixed point (b = WLS(weights(r(b)/s)), s = MAD₀(r(b))) is met.
///
/// This is the fixed point of statsmodels' `RLM(norm=HuberT(k)).fit()` defaults (scale_est='mad', which
/// is the MAD about zero, `statsmodels.robust.scale.mad(resid, center=0)`), iterated here to a tighter
/// tolerance than its default relative change 1e-8 of Σρ. The Huber loss itself: Huber (1981).
pub fn huber_joint(
    x: &[f64],
    n: usize,
    p: usize,
    y: &[f64],
    k: f64,
    opts: &IrlsOptions,
) -> Result<MEstimate, RobustError> {
    huber_joint_rows(&Dense::new(x, n, p), y, k, opts)
}

/// [`huber_joint`] on any [`Rows`].
pub fn huber_joint_rows<R: Rows + ?Sized>(
    x: &R,
    y: &[f64],
    k: f64,
    opts: &IrlsOptions,
) -> Result<MEstimate, RobustError> {
    let n = x.n();
    check_data(x, y)?;
    if !(k > 0.0) || !k.is_finite() {
        return Err(RobustError::NonFinite);
    }
    let loss = super::loss::Huber { k };
    let tiny = exact_fit_threshold(y);
    let mut coef = least_squares_rows(x, y, None)?.coef;
    let mut r = vec![0.0; n];
    residuals_rows(x, y, &coef, &mut r);
    let mut s = mad_about_zero(&r);
    let mut w = vec![1.0; n];
    let mut r_new = vec![0.0; n];
    let collapsed = |coef: Vec<f64>, r: Vec<f64>, it| MEstimate {
        coef,
        residuals: r,
        weights: vec![1.0; n],
        scale: 0.0,
        termination: Termination::ScaleCollapsed { iterations: it },
    };
    if !(s > tiny) {
        return Ok(collapsed(coef, r, 0));
    }
    let mut termination = Termination::IterationLimit { iterations: opts.max_iter };
    for it in 1..=opts.max_iter {
        weights_into(&loss, &r, s, &mut w);
        coef = normal_solve_rows(x, y, &w)?;
        residuals_rows(x, y, &coef, &mut r_new);
        let s_new = mad_about_zero(&r_new);
        if !(s_new > tiny) {
            return Ok(collapsed(coef, r_new, it));
        }
        let moved = max_change(&r, &r_new);
        let ds = (s_new - s).abs() / s;
        std::mem::swap(&mut r, &mut r_new);
        s = s_new;
        if moved <= opts.tol * s && ds <= opts.tol {
            termination = Termination::Converged { iterations: it };
            break;
        }
    }
    // Reported solve (accurate least squares) with the weights of the final residuals and scale; the scale is then the MAD
    // of the reported residuals, as in the iteration.
    weights_into(&loss, &r, s, &mut w);
    coef = least_squares_rows(x, y, Some(&w))?.coef;
    residuals_rows(x, y, &coef, &mut r);
    let s_final = mad_about_zero(&r);
    if !(s_final > tiny) {
        return Ok(collapsed(coef, r, 0));
    }
    weights_into(&loss, &r, s_final, &mut w);
    Ok(MEstimate { coef, residuals: r, weights: w, scale: s_final, termination })
}
