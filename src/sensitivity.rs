//! Outliers and sensitivity (DESIGN.md §4.4): flags from the robust fit, the boxplot view, leverage,
//! refits without the flagged rows, the three fits side by side, and leave-one-out influence.
//!
//! Pure computation on designs and fits; the report only displays what this module returns.

use crate::basis::quantile_sorted;
use crate::data::{ColumnData, Frame};
use crate::design::{Design, ModelTerms, TermKind};
use crate::dist;
use crate::fit::{self, Curve, Fit, FitError, RobustMethod};
use crate::linalg;
use crate::robust::irls::IrlsOptions;
use crate::select::{self, GridPoint};

/// Most flagged rows examined one at a time for influence.
pub const MAX_INFLUENCE_ROWS: usize = 50;

/// Rows whose |robust scaled residual| exceeds the cutoff, ascending row index.
pub fn flag_rows(scaled_residuals: &[f64], cutoff: f64) -> Vec<usize> {
    scaled_residuals.iter().enumerate().filter(|(_, z)| z.abs() > cutoff).map(|(i, _)| i).collect()
}

/// Expected number of clean rows beyond ±cutoff under normal errors: n · P(|Z| > cutoff).
pub fn expected_false_flags(n: usize, cutoff: f64) -> f64 {
    n as f64 * dist::two_sided_normal_tail(cutoff)
}

/// Tukey (1977) boxplot fences at 1.5 IQR; quartiles by linear interpolation of the order statistics
/// (Hyndman & Fan 1996 type 7).
#[derive(Debug, Clone, PartialEq)]
pub struct Boxplot {
    pub q1: f64,
    pub median: f64,
    pub q3: f64,
    pub lower_fence: f64,
    pub upper_fence: f64,
    /// Rows outside the fences.
    pub outside: Vec<usize>,
}

pub fn boxplot(values: &[f64]) -> Boxplot {
    let mut s = values.to_vec();
    s.sort_unstable_by(f64::total_cmp);
    let q1 = quantile_sorted(&s, 0.25);
    let median = quantile_sorted(&s, 0.5);
    let q3 = quantile_sorted(&s, 0.75);
    let iqr = q3 - q1;
    let lower_fence = q1 - 1.5 * iqr;
    let upper_fence = q3 + 1.5 * iqr;
    let outside =
        values.iter().enumerate().filter(|(_, v)| **v < lower_fence || **v > upper_fence).map(|(i, _)| i).collect();
    Boxplot { q1, median, q3, lower_fence, upper_fence, outside }
}

/// Hat values of a design and the rows above 2p/n (Belsley, Kuh & Welsch 1980).
#[derive(Debug, Clone)]
pub struct Leverage {
    pub hat: Vec<f64>,
    pub threshold: f64,
    pub high: Vec<usize>,
}

/// From the design's (X'X)⁻¹ when it is at hand (a fit on the same design has it), otherwise from the
/// triangular factor of a least-squares solve.
pub fn leverage(design: &Design, xtx_inverse: Option<&[f64]>) -> Result<Leverage, FitError> {
    // x'Mx carries rounding of order κ²ε: it is used only when its values are plainly sound (they
    // lie in [0, 1] and sum to p, the trace of the hat matrix); an ill-conditioned design gets the
    // R-factor evaluation, whose error is of order κε.
    let by_inverse = match xtx_inverse {
        Some(m) if m.len() == design.p * design.p => Some(linalg::quadratic_forms_rows(design, m)),
        _ => None,
    };
    let sound = |h: &[f64]| {
        let trace: f64 = h.iter().sum();
        (trace - design.p as f64).abs() <= 1e-7 * design.p as f64
            && h.iter().all(|v| (-1e-12..=1.0 + 1e-12).contains(v))
    };
    let hat = match by_inverse {
        Some(h) if sound(&h) => h,
        _ => {
            let ls = linalg::least_squares_rows(design, &design.y, None)?;
            linalg::hat_values_rows(design, &ls.r)
        }
    };
    let threshold = 2.0 * design.p as f64 / design.n as f64;
    let high = hat.iter().enumerate().filter(|(_, h)| **h > threshold).map(|(i, _)| i).collect();
    Ok(Leverage { hat, threshold, high })
}

/// Whether the fits without the `flagged` rows (distinct indices among `n`) are made: some rows are
/// flagged and more than `columns` remain.
pub fn without_flagged_applies(n: usize, flagged: &[usize], columns: usize) -> bool {
    !flagged.is_empty() && n.saturating_sub(flagged.len()) > columns
}

/// The classical criterion rerun over `grid_points` without the `flagged` rows: designs of the kept
/// rows straight from the frame (knots and centring from those rows), the residual sum of squares
/// alone at each point; and the point it chooses. Empty when there is nothing to rerun (no flagged
/// rows, or no more kept rows than `columns`, the chosen design's). Needs no design of the full data.
pub fn rerun_classical_grid(
    frame: &Frame,
    terms: &ModelTerms,
    flagged: &[usize],
    columns: usize,
    grid_points: &[GridPoint],
    penalty: f64,
) -> (Vec<GridPoint>, Option<usize>) {
    let n = frame.n_used();
    if !without_flagged_applies(n, flagged, columns) {
        return (Vec::new(), None);
    }
    let mut is_flagged = vec![false; n];
    for &i in flagged {
        is_flagged[i] = true;
    }
    let keep: Vec<usize> = (0..n).filter(|&i| !is_flagged[i]).collect();
    let _t = crate::robust::profile::stage(|| "sensitivity: rerun of the classical grid".into());
    let sorted = crate::design::SortedColumns::of_rows(frame, terms, Some(&keep));
    // Only the classical criterion is needed at each point, so only the residual sum of squares is
    // computed; the points are independent (see `select::points_in_parallel`).
    let evaluate = |g: usize| {
        let gp = &grid_points[g];
        let mut point =
            GridPoint { sizes: gp.sizes.clone(), p: 0, bic: None, rbic: None, robust_termination: None, skipped: None };
        let built = sorted
            .as_ref()
            .map_err(|e| e.clone())
            .and_then(|sorted| crate::design::Design::build_sorted_rows(frame, terms, &gp.sizes, sorted, Some(&keep)));
        match built {
            Ok(d) => {
                point.p = d.p;
                match fit::classical_rss(&d) {
                    Ok(rss) => point.bic = Some(select::bic(rss, d.n, d.p, penalty)),
                    Err(_) => point.skipped = Some("rank deficient without the flagged rows".into()),
                }
            }
            Err(_) => point.skipped = Some("basis impossible without the flagged rows".into()),
        }
        point
    };
    let points: Vec<GridPoint> = if select::points_in_parallel(keep.len()) {
        crate::linalg::map_tasks(grid_points.len(), evaluate)
    } else {
        (0..grid_points.len()).map(evaluate).collect()
    };
    let choice = points
        .iter()
        .enumerate()
        .filter_map(|(i, p)| p.bic.map(|b| (i, b)))
        .min_by(|a, b| a.1.total_cmp(&b.1))
        .map(|(i, _)| i);
    (points, choice)
}

/// The used rows of `frame` restricted to `keep` (ascending): a frame of just those rows.
pub fn frame_subset(frame: &Frame, keep: &[usize]) -> Frame {
    let columns = frame
        .columns
        .iter()
        .map(|c| {
            let data = match &c.data {
                ColumnData::Numeric(v) => ColumnData::Numeric(keep.iter().map(|&i| v[i]).collect()),
                ColumnData::Categorical { levels, codes, reference, .. } => {
                    let codes: Vec<u32> = keep.iter().map(|&i| codes[i]).collect();
                    let mut counts = vec![0; levels.len()];
                    for &c in &codes {
                        counts[c as usize] += 1;
                    }
                    ColumnData::Categorical { levels: levels.clone(), codes, reference: *reference, counts }
                }
            };
            crate::data::Column { name: c.name.clone(), data }
        })
        .collect();
    Frame {
        n_read: frame.n_read,
        columns,
        lines: keep.iter().map(|&i| frame.lines[i]).collect(),
        ids: if frame.ids.is_empty() { Vec::new() } else { keep.iter().map(|&i| frame.ids[i].clone()).collect() },
        dropped: frame.dropped.clone(),
        missing_per_column: frame.missing_per_column.clone(),
        warnings: Vec::new(),
        sha256: frame.sha256.clone(),
        header: frame.header.clone(),
    }
}

/// Leave-one-out change of every coefficient when row i alone is left out of a least-squares fit, by
/// the closed form Δβ = (X'X)⁻¹ x_i r_i / (1 − h_ii) (Belsley, Kuh & Welsch 1980, ch. 2), and the
/// DFBETAS scaling Δβ_j / (s_(i) √((X'X)⁻¹_jj)) with s_(i)² = (RSS − r_i²/(1 − h_ii)) / (n − p − 1).
#[derive(Debug, Clone)]
pub struct Influence {
    pub row: usize,
    /// Change β_(i) − β for every coefficient (β_(i): without row i).
    pub change: Vec<f64>,
    pub dfbetas: Vec<f64>,
}

pub fn influence(design: &Design, fit: &Fit, xtx_inv: &[f64], hat: &[f64], rows: &[usize]) -> Vec<Influence> {
    let (n, p) = (design.n, design.p);
    let df = n as f64 - p as f64 - 1.0;
    rows.iter()
        .map(|&i| {
            let x = design.row(i);
            let r = fit.residuals[i];
            let h = hat[i];
            let denom = 1.0 - h;
            let mut change = vec![0.0; p];
            for (a, c) in change.iter_mut().enumerate() {
                let s: f64 = (0..p).map(|b| xtx_inv[a * p + b] * x[b]).sum();
                // β − β_(i) = (X'X)⁻¹ x_i r_i / (1 − h_ii): the refit moves by minus this.
                *c = if denom > 0.0 { -s * r / denom } else { 0.0 };
            }
            let rss_i = if denom > 0.0 { fit.rss - r * r / denom } else { fit.rss };
            let s_i = if df > 0.0 { (rss_i.max(0.0) / df).sqrt() } else { 0.0 };
            let dfbetas = (0..p)
                .map(|a| {
                    let d = s_i * xtx_inv[a * p + a].max(0.0).sqrt();
                    if d > 0.0 {
                        change[a] / d
                    } else {
                        0.0
                    }
                })
                .collect();
            Influence { row: i, change, dfbetas }
        })
        .collect()
}

/// (estimate, std error, lower, upper, significant at 95%) of one coefficient in one fit.
pub type CoefficientSummary = (f64, f64, f64, f64, bool);

/// One linear coefficient across the three fits.
#[derive(Debug, Clone)]
pub struct CoefficientRow {
    pub name: String,
    /// (estimate, std error, lower, upper, significant) per fit: classical, robust, classical without flagged.
    pub values: Vec<Option<CoefficientSummary>>,
    pub sign_changes: bool,
    pub significance_changes: bool,
}

/// How far one fit's curve sits from the robust curve, in robust band half-widths.
#[derive(Debug, Clone)]
pub struct CurveMove {
    pub column: String,
    /// Curves on the common grid: classical, robust, classical without flagged (if refitted).
    pub grid: Vec<f64>,
    pub classical: Curve,
    pub robust: Curve,
    pub without_flagged: Option<Curve>,
    /// max |g_fit − g_robust| / median robust half-width, for classical and for classical-without-flagged.
    pub classical_move: f64,
    pub without_flagged_move: Option<f64>,
}

/// Everything the sensitivity step found.
#[derive(Debug)]
pub struct Sensitivity {
    pub flagged: Vec<usize>,
    pub expected_false: f64,
    pub boxplot: Boxplot,
    pub leverage: Leverage,
    /// Classical refit without flagged rows at the classical chosen sizes (on the classical design
    /// with prior weight 0 on the flagged rows: residuals for every row, `rows_used` rows kept).
    pub classical_without: Option<Fit>,
    /// Classical criterion rerun without flagged rows over the same grid points.
    pub rerun_points: Vec<GridPoint>,
    pub rerun_choice: Option<usize>,
    /// Robust refit without flagged rows; the largest coefficient move in robust standard errors.
    pub robust_without: Option<Fit>,
    pub robust_move: Option<f64>,
    pub coefficients: Vec<CoefficientRow>,
    pub curves: Vec<CurveMove>,
    pub influence: Vec<Influence>,
    pub influence_capped: bool,
}

/// Linear coefficient indices (intercept and linear terms) of a design.
pub fn linear_columns(design: &Design) -> Vec<usize> {
    design.spans.iter().filter(|s| s.kind != TermKind::Smooth).flat_map(|s| s.start..s.start + s.len).collect()
}

/// Flags, fences, leverage, the refits without the flagged rows, the side-by-side coefficients and
/// curves, influence; the rerun of the grid is [`rerun_classical_grid`].
pub fn analyse(
    classical: (&Design, &Fit),
    robust: (&Design, &Fit),
    method: RobustMethod,
    irls: &IrlsOptions,
    cutoff: f64,
    refit: bool,
    with_influence: bool,
) -> Result<Sensitivity, FitError> {
    let (cd, cf) = classical;
    let (rd, rf) = robust;
    let n = rd.n;
    let scaled: Vec<f64> =
        if rf.scale > 0.0 { rf.residuals.iter().map(|r| r / rf.scale).collect() } else { vec![0.0; n] };
    let flagged = flag_rows(&scaled, cutoff);
    let expected_false = expected_false_flags(n, cutoff);
    let boxplot = boxplot(&scaled);
    let t = crate::robust::profile::stage(|| "sensitivity: leverage".into());
    let leverage = leverage(rd, Some(&rf.xtx_inverse))?;
    drop(t);
    let mut classical_without = None;
    let mut robust_without = None;
    let mut robust_move = None;
    if refit && without_flagged_applies(n, &flagged, cd.p) {
        // The refits are fits of the kept rows on the full designs, with prior weight 0 on the flagged
        // rows (no subset design: at ten million rows that would be another gigabyte).
        let prior: Vec<f64> = {
            let mut q = vec![1.0; n];
            for &i in &flagged {
                q[i] = 0.0;
            }
            q
        };
        classical_without = fit::classical_with_prior(cd, Some(&prior)).ok();
        let same = cd.sizes == rd.sizes;
        let xtx = classical_without.as_ref().filter(|_| same).map(|f| f.xtx_inverse.as_slice());
        if let Ok(f) = fit::robust_with_prior(rd, method, Some(&rf.coef), rf.scale, irls, xtx, Some(&prior)) {
            let lin = linear_columns(rd);
            let mv = lin
                .iter()
                .map(|&j| if rf.std_errors[j] > 0.0 { (f.coef[j] - rf.coef[j]).abs() / rf.std_errors[j] } else { 0.0 })
                .fold(0.0, f64::max);
            robust_move = Some(mv);
            robust_without = Some(f);
        }
    }

    // Side-by-side linear coefficients (names from the classical design; linear columns coincide).
    let lin = linear_columns(cd);
    let coefficients = lin
        .iter()
        .map(|&j| {
            let pick = |f: &Fit| Some((f.coef[j], f.std_errors[j], f.lower[j], f.upper[j], f.significant(j)));
            let values = vec![pick(cf), pick(rf), classical_without.as_ref().and_then(pick)];
            let present: Vec<CoefficientSummary> = values.iter().flatten().copied().collect();
            let sign_changes = present.iter().any(|v| v.0 > 0.0) && present.iter().any(|v| v.0 < 0.0);
            let significance_changes = present.iter().any(|v| v.4) && present.iter().any(|v| !v.4);
            CoefficientRow { name: cd.names[j].clone(), values, sign_changes, significance_changes }
        })
        .collect();

    let mut curves = Vec::new();
    for t in 0..rd.smooth.len() {
        let grid = fit::curve_grid(rd, t, 200);
        let robust_curve = fit::curve(rd, rf, t, &grid);
        let classical_curve = fit::curve(cd, cf, t, &grid);
        let without = classical_without.as_ref().map(|f| fit::curve(cd, f, t, &grid));
        let mut half: Vec<f64> =
            robust_curve.upper.iter().zip(&robust_curve.lower).map(|(u, l)| (u - l) / 2.0).collect();
        half.sort_by(|a, b| a.total_cmp(b));
        let median_half = if half.is_empty() { 0.0 } else { quantile_sorted(&half, 0.5) };
        let mv = |c: &Curve| {
            let m = c.value.iter().zip(&robust_curve.value).map(|(a, b)| (a - b).abs()).fold(0.0, f64::max);
            if median_half > 0.0 {
                m / median_half
            } else {
                0.0
            }
        };
        let classical_move = mv(&classical_curve);
        let without_flagged_move = without.as_ref().map(mv);
        curves.push(CurveMove {
            column: rd.smooth[t].column.clone(),
            grid,
            classical: classical_curve,
            robust: robust_curve,
            without_flagged: without,
            classical_move,
            without_flagged_move,
        });
    }

    let mut influence_rows = Vec::new();
    let mut influence_capped = false;
    if with_influence && !flagged.is_empty() {
        // Influence in the classical fit at its chosen size: the rows ranked by |scaled residual|.
        let mut ranked = flagged.clone();
        ranked.sort_by(|&a, &b| scaled[b].abs().total_cmp(&scaled[a].abs()).then(a.cmp(&b)));
        if ranked.len() > MAX_INFLUENCE_ROWS {
            ranked.truncate(MAX_INFLUENCE_ROWS);
            influence_capped = true;
        }
        ranked.sort_unstable();
        // The classical fit carries (X'X)⁻¹; the hat values are the leverage computed above when the
        // classical and robust designs coincide (same sizes, same rows), else one more least-squares solve.
        let hat = if cd.sizes == rd.sizes && cd.n == rd.n {
            leverage.hat.clone()
        } else {
            let ls = linalg::least_squares_rows(cd, &cd.y, None)?;
            linalg::hat_values_rows(cd, &ls.r)
        };
        influence_rows = influence(cd, cf, &cf.xtx_inverse, &hat, &ranked);
    }

    Ok(Sensitivity {
        flagged,
        expected_false,
        boxplot,
        leverage,
        classical_without,
        // Filled by [`rerun_classical_grid`], which the pipeline runs after this (it needs no design of
        // the full data, so that one can be released for it at large n).
        rerun_points: Vec::new(),
        rerun_choice: None,
        robust_without,
        robust_move,
        coefficients,
        curves,
        influence: influence_rows,
        influence_capped,
    })
}
