//! Choosing basis sizes (DESIGN.md §4.5): every grid point gets a classical fit with its BIC and a robust
//! fit with its robust criterion; each fit chooses its own sizes.
//!
//! BIC(k)  = log(RSS_k / n) + γ · p_k · log(n) / n
//! RBIC(k) = log(σ̂² · (1/n) Σ ρ(r_ik / σ̂)) + γ · p_k · log(n) / n
//! γ = 0.5 is the M-type spline criterion of He, Zhu & Fung (2002); γ = 1 is Schwarz (1978). With
//! ρ(t) = t² the two coincide. In `Shared` scale mode σ̂ is the S-scale of the richest grid model and the MM
//! fit at every grid point holds it fixed (robust criteria commonly take the full model's scale, e.g.
//! Ronchetti & Staudte 1994).

use std::sync::Arc;

use crate::data::Frame;
use crate::design::{Design, DesignError, ModelTerms, SortedColumns};
use crate::fit::{self, Fit, FitError, RobustMethod};
use crate::robust::irls::IrlsOptions;
use crate::robust::sest::{SEstimate, SOptions};
use crate::termination::Termination;

/// Largest product grid searched exhaustively; beyond it the search is coordinate-wise.
pub const MAX_PRODUCT_POINTS: usize = 200;

/// How the robust scale is chosen across the grid.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ScaleMode {
    Shared,
    PerSize,
}

/// How the grid was searched.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum SearchKind {
    /// One size shared by every smooth term.
    Shared,
    /// The full product of the per-term grids.
    Product,
    /// Coordinate-wise, term by term, from the best shared size.
    CoordinateWise,
    /// No smooth terms: a single linear model.
    NoSmooth,
}

impl SearchKind {
    pub fn describe(&self) -> &'static str {
        match self {
            SearchKind::Shared => "one basis size shared by every smooth term, every size on the grid",
            SearchKind::Product => "every combination of the per-term grids (full product)",
            SearchKind::CoordinateWise => {
                "coordinate-wise: from the best shared size, each term's size in turn, repeated until no change"
            }
            SearchKind::NoSmooth => "no smooth terms: a single linear model, nothing to choose",
        }
    }
}

/// What to search.
#[derive(Debug, Clone)]
pub struct GridSpec {
    /// The shared grid.
    pub shared: Vec<usize>,
    /// Per smooth term: its own grid, if given.
    pub per_term: Vec<Option<Vec<usize>>>,
    pub penalty: f64,
}

/// The robust side of the selection.
#[derive(Debug, Clone)]
pub struct RobustPlan {
    pub method: RobustMethod,
    pub scale_mode: ScaleMode,
    pub s_options: SOptions,
    pub irls: IrlsOptions,
}

/// One evaluated grid point.
#[derive(Debug, Clone)]
pub struct GridPoint {
    pub sizes: Vec<usize>,
    pub p: usize,
    pub bic: Option<f64>,
    pub rbic: Option<f64>,
    pub robust_termination: Option<Termination>,
    /// Why the point was skipped (impossible for the data), if it was.
    pub skipped: Option<String>,
}

/// The selection's result: every point, the choices and the fits at the chosen points.
#[derive(Debug)]
pub struct Selection {
    pub points: Vec<GridPoint>,
    pub search: SearchKind,
    pub classical_choice: usize,
    pub robust_choice: usize,
    /// True when no grid point had a robust criterion (the robust scale collapsed to zero everywhere);
    /// the robust fit is then the one at the classical choice.
    pub robust_criterion_collapsed: bool,
    /// The robust scale used by the criterion (shared mode: the richest model's S-scale).
    pub shared_scale: Option<f64>,
    /// Sizes of the model whose S-scale is shared.
    pub scale_source: Vec<usize>,
    /// The S-estimate behind the robust fit at its chosen point (or of the richest model).
    pub s_estimate: Option<SEstimate>,
    pub classical_design: Arc<Design>,
    pub classical_fit: Fit,
    pub robust_design: Arc<Design>,
    pub robust_fit: Fit,
}

/// Why the selection failed as a whole.
#[derive(Debug)]
pub enum SelectError {
    /// Every grid point was impossible; the reasons per point.
    NonePossible(Vec<GridPoint>),
    /// A fit failed for a reason other than the grid point's shape.
    Fit(FitError, Vec<usize>),
    Design(DesignError),
}

/// Classical criterion from an RSS.
pub fn bic(rss: f64, n: usize, p: usize, penalty: f64) -> f64 {
    let nf = n as f64;
    libm::log(rss / nf) + penalty * (p as f64) * libm::log(nf) / nf
}

/// Robust criterion from residuals, scale and ρ.
pub fn rbic(residuals: &[f64], scale: f64, rho: &dyn Fn(f64) -> f64, p: usize, penalty: f64) -> f64 {
    let n = residuals.len();
    let nf = n as f64;
    let mean_rho = residuals.iter().map(|r| rho(r / scale)).sum::<f64>() / nf;
    libm::log(scale * scale * mean_rho) + penalty * (p as f64) * libm::log(nf) / nf
}

fn describe_design_error(e: &DesignError) -> String {
    use crate::basis::BasisError::*;
    match e {
        DesignError::Basis { column, size, error } => match error {
            TooFewDistinct { distinct, needed } => {
                format!("`{column}` has {distinct} distinct values, fewer than the {needed} basis functions of size {size}")
            }
            SizeBelowOrder { size, degree } => format!("size {size} is below degree + 1 = {} for `{column}`", degree + 1),
            TiedKnots { requested, distinct } => format!(
                "`{column}` at size {size}: {requested} interior knots needed but the sample quantiles give only {distinct} distinct ones (tied values)"
            ),
            DegenerateRange => format!("`{column}` has no spread (all values equal)"),
        },
        DesignError::MissingColumn(c) => format!("column `{c}` is not in the data"),
    }
}

fn candidate_points(spec: &GridSpec, n_smooth: usize) -> (SearchKind, Vec<Vec<usize>>) {
    if n_smooth == 0 {
        return (SearchKind::NoSmooth, vec![vec![]]);
    }
    if spec.per_term.iter().all(|g| g.is_none()) {
        return (SearchKind::Shared, spec.shared.iter().map(|&k| vec![k; n_smooth]).collect());
    }
    let lists: Vec<Vec<usize>> =
        spec.per_term.iter().map(|g| g.clone().unwrap_or_else(|| spec.shared.clone())).collect();
    let total = lists.iter().map(|l| l.len()).product::<usize>();
    if total <= MAX_PRODUCT_POINTS {
        let mut points = vec![vec![]];
        for l in &lists {
            let mut next = Vec::new();
            for p in &points {
                for &k in l {
                    let mut q = p.clone();
                    q.push(k);
                    next.push(q);
                }
            }
            points = next;
        }
        (SearchKind::Product, points)
    } else {
        (SearchKind::CoordinateWise, Vec::new())
    }
}

struct Evaluator<'a> {
    frame: &'a Frame,
    terms: &'a ModelTerms,
    spec: &'a GridSpec,
    plan: &'a RobustPlan,
    sorted: &'a SortedColumns,
    shared_scale: Option<f64>,
    /// Robust fitted values of the richest model, projected onto each design as a warm start.
    anchor: Option<Vec<f64>>,
}

struct Evaluated {
    point: GridPoint,
    classical: Option<(Design, Fit)>,
    robust: Option<(Fit, Option<SEstimate>)>,
}

impl Evaluator<'_> {
    fn evaluate(&self, sizes: &[usize]) -> Result<Evaluated, SelectError> {
        let mut point =
            GridPoint { sizes: sizes.to_vec(), p: 0, bic: None, rbic: None, robust_termination: None, skipped: None };
        let t = crate::robust::profile::stage(|| format!("select: design {sizes:?}"));
        let design = match Design::build_sorted(self.frame, self.terms, sizes, self.sorted) {
            Ok(d) => d,
            Err(e @ DesignError::Basis { .. }) => {
                point.skipped = Some(describe_design_error(&e));
                return Ok(Evaluated { point, classical: None, robust: None });
            }
            Err(e) => return Err(SelectError::Design(e)),
        };
        point.p = design.p;
        drop(t);
        let t = crate::robust::profile::stage(|| format!("select: classical fit {sizes:?}"));
        let classical = match fit::classical(&design) {
            Ok(f) => f,
            // Aliasing inside a smooth block (too few rows between knots) makes this size impossible;
            // aliasing among linear columns is the model's fault at every size, so it is an error.
            Err(FitError::RankDeficient { column, aliased_with })
                if design.spans.iter().any(|s| {
                    s.kind == crate::design::TermKind::Smooth && (s.start..s.start + s.len).contains(&column)
                }) =>
            {
                let names: Vec<&str> = aliased_with.iter().map(|&c| design.names[c].as_str()).collect();
                point.skipped = Some(format!(
                    "the design is rank deficient: `{}` is a combination of {} (too few rows between knots)",
                    design.names[column],
                    if names.is_empty() { "nothing (an all-zero column)".to_string() } else { names.join(", ") }
                ));
                return Ok(Evaluated { point, classical: None, robust: None });
            }
            Err(e) => return Err(SelectError::Fit(e, sizes.to_vec())),
        };
        drop(t);
        point.bic = Some(bic(classical.rss, design.n, design.p, self.spec.penalty));
        let (start, scale, s_est) = match (self.plan.method.needs_s_estimate(), self.plan.scale_mode, self.shared_scale)
        {
            (false, _, _) => (None, 0.0, None),
            (true, ScaleMode::Shared, Some(scale)) => {
                // Least-squares projection of the anchor through the classical fit's (X'X)⁻¹: a start
                // value only (the MM iteration takes it from there), so no QR of its own is needed.
                let start = self.anchor.as_ref().map(|anchor| project(&design, &classical.xtx_inverse, anchor));
                (start, scale, None)
            }
            _ => {
                let s =
                    fit::s_estimate(&design, &self.plan.s_options).map_err(|e| SelectError::Fit(e, sizes.to_vec()))?;
                (Some(s.coef.clone()), s.scale, Some(s))
            }
        };
        // Grid points are only scored here; the chosen one is re-solved accurately after the search.
        let scoring = IrlsOptions { final_qr: false, ..self.plan.irls.clone() };
        let robust = fit::robust_with_prior(
            &design,
            self.plan.method,
            start.as_deref(),
            scale,
            &scoring,
            Some(&classical.xtx_inverse),
            None,
        )
        .map_err(|e| SelectError::Fit(e, sizes.to_vec()))?;
        let loss = self.plan.method.loss();
        if robust.scale > 0.0 {
            point.rbic = Some(rbic(&robust.residuals, robust.scale, &|t| loss.rho(t), design.p, self.spec.penalty));
        }
        point.robust_termination = Some(robust.termination);
        Ok(Evaluated { point, classical: Some((design, classical)), robust: Some((robust, s_est)) })
    }
}

/// Above this many rows, grid points are evaluated one at a time (see [`evaluate_in_waves`]).
const WAVE_MAX_ROWS: usize = 200_000;

/// Whether independent grid points on designs of `rows` rows run in parallel, one per thread. Large
/// designs run one at a time (each already parallel over its rows): memory first. Results are the
/// same either way.
pub fn points_in_parallel(rows: usize) -> bool {
    rows <= WAVE_MAX_ROWS
}

/// Evaluate independent grid points, as many at a time as there are worker threads (each point's
/// kernels then run on its own thread; results are those of a sequential loop, see
/// `linalg::map_tasks`), adding them to `kept` in list order. Waves keep the memory of the designs in
/// flight to one per thread. The first error in list order is returned, as a sequential loop would.
fn evaluate_in_waves(
    ev: &Evaluator<'_>,
    points: &[Vec<usize>],
    kept: &mut Keeper,
    report: &dyn Fn(usize),
) -> Result<(), SelectError> {
    let width = if points_in_parallel(ev.frame.n_used()) { crate::linalg::threads().max(1) } else { 1 };
    for wave in points.chunks(width) {
        for e in crate::linalg::map_tasks(wave.len(), |i| ev.evaluate(&wave[i])) {
            kept.add(e?);
            report(kept.points.len());
        }
    }
    Ok(())
}

/// (X'X)⁻¹ X'v: the least-squares coefficients of `v` on the design.
fn project(design: &Design, xtx_inverse: &[f64], v: &[f64]) -> Vec<f64> {
    let p = design.p;
    let xtv = design.transpose_times(v);
    (0..p).map(|j| (0..p).map(|k| xtx_inverse[j * p + k] * xtv[k]).sum()).collect()
}

fn argmin(points: &[GridPoint], key: impl Fn(&GridPoint) -> Option<f64>) -> Option<usize> {
    let mut best: Option<(usize, f64)> = None;
    for (i, p) in points.iter().enumerate() {
        if let Some(v) = key(p) {
            if v.is_finite() && best.is_none_or(|(_, b)| v < b) {
                best = Some((i, v));
            }
        }
    }
    best.map(|(i, _)| i)
}

/// The classical best: point index, BIC, design, classical fit, robust fit there, S-estimate there.
type KeptClassical = (usize, f64, Option<Arc<Design>>, Fit, Option<Fit>, Option<SEstimate>);
/// Index, robust criterion, design, robust fit and S-estimate of the robust best.
type KeptRobust = (usize, f64, Option<Arc<Design>>, Fit, Option<SEstimate>);

/// Above this many rows the kept best points do not hold their designs (each is ~130 bytes a row);
/// the chosen ones are built again after the search, which gives the same design. Below it, keeping
/// them is cheaper than building them twice. `KNOTWISE_KEEP_DESIGN_ROWS` overrides it (memory and
/// speed only; the tests run both ways and compare the outputs byte for byte).
pub(crate) fn keep_design_max_rows() -> usize {
    static ROWS: std::sync::OnceLock<usize> = std::sync::OnceLock::new();
    *ROWS.get_or_init(|| {
        std::env::var("KNOTWISE_KEEP_DESIGN_ROWS").ok().and_then(|v| v.trim().parse().ok()).unwrap_or(2_000_000)
    })
}

/// Every evaluated point, and the fits (and, for moderate n, the designs) of the best point so far
/// for each criterion only, so that memory stays at a few designs however large the grid (ties keep
/// the earlier point).
#[derive(Default)]
struct Keeper {
    points: Vec<GridPoint>,
    /// The classical best, with the robust fit at the same point while no point has a robust
    /// criterion (the fallback when the robust scale collapsed everywhere; dropped once a robust best
    /// exists, since the fallback can then no longer be needed).
    classical: Option<KeptClassical>,
    robust: Option<KeptRobust>,
}

impl Keeper {
    fn add(&mut self, e: Evaluated) {
        let i = self.points.len();
        let better = |v: Option<f64>, best: Option<f64>| v.is_some_and(|v| v.is_finite() && best.is_none_or(|b| v < b));
        if let (Some((design, classical)), Some((robust, s_est))) = (e.classical, e.robust) {
            // One design shared by both criteria when the same point is best for each; none kept for
            // large n.
            let design = (design.n <= keep_design_max_rows()).then(|| Arc::new(design));
            let c_better = better(e.point.bic, self.classical.as_ref().map(|c| c.1));
            let r_better = better(e.point.rbic, self.robust.as_ref().map(|r| r.1));
            let c_design = if c_better { design.clone() } else { None };
            let mut robust = Some(robust);
            if r_better {
                self.robust =
                    robust.take().map(|f| (i, e.point.rbic.unwrap_or(f64::INFINITY), design, f, s_est.clone()));
            }
            let fallback = self.robust.is_none();
            if c_better {
                let at_ci = robust.filter(|_| fallback);
                self.classical = Some((i, e.point.bic.unwrap_or(f64::INFINITY), c_design, classical, at_ci, s_est));
            } else if !fallback {
                if let Some(c) = self.classical.as_mut() {
                    c.4 = None;
                }
            }
        }
        self.points.push(e.point);
    }

    fn has(&self, sizes: &[usize]) -> bool {
        self.points.iter().any(|p| p.sizes == sizes)
    }
}

/// Run the selection.
pub fn select(frame: &Frame, terms: &ModelTerms, spec: &GridSpec, plan: &RobustPlan) -> Result<Selection, SelectError> {
    select_with_progress(frame, terms, spec, plan, &|_, _| {})
}

/// [`select`], calling `progress(done, total)` after each step (the shared S-estimate, then each grid
/// point's classical and robust fits). `total` is the number of steps planned so far (the coordinate-wise
/// search learns its length as it goes). The callback never affects the result.
pub fn select_with_progress(
    frame: &Frame,
    terms: &ModelTerms,
    spec: &GridSpec,
    plan: &RobustPlan,
    progress: &dyn Fn(usize, usize),
) -> Result<Selection, SelectError> {
    let n_smooth = terms.smooth.len();
    let (search, candidates) = candidate_points(spec, n_smooth);
    let shared_step = usize::from(plan.method.needs_s_estimate() && plan.scale_mode == ScaleMode::Shared);
    let planned_grid = if search == SearchKind::CoordinateWise { spec.shared.len() } else { candidates.len() };
    let report = |done: usize| progress(done, (shared_step + planned_grid).max(done));
    report(0);
    let lists: Vec<Vec<usize>> =
        spec.per_term.iter().map(|g| g.clone().unwrap_or_else(|| spec.shared.clone())).collect();
    // One sort per smooth column serves every design of the grid.
    let sorted = SortedColumns::new(frame, terms).map_err(SelectError::Design)?;
    let mut ev = Evaluator { frame, terms, spec, plan, sorted: &sorted, shared_scale: None, anchor: None };

    // The shared scale: S-estimate of the richest model that can be built (largest sizes first).
    let mut scale_source = Vec::new();
    let mut s_richest = None;
    if plan.method.needs_s_estimate() && plan.scale_mode == ScaleMode::Shared {
        let mut order: Vec<Vec<usize>> = if search == SearchKind::CoordinateWise || search == SearchKind::Product {
            let mut v = vec![lists.iter().map(|l| l.iter().copied().max().unwrap_or(0)).collect::<Vec<_>>()];
            v.extend(candidates.iter().cloned());
            v
        } else {
            candidates.clone()
        };
        order.sort_by_key(|s| std::cmp::Reverse(s.iter().sum::<usize>()));
        for sizes in &order {
            let Ok(design) = Design::build_sorted(frame, terms, sizes, &sorted) else { continue };
            let Ok(classical) = fit::classical(&design) else { continue };
            let s = fit::s_estimate(&design, &plan.s_options).map_err(|e| SelectError::Fit(e, sizes.clone()))?;
            let xtx = Some(classical.xtx_inverse.as_slice());
            let mm = fit::robust_with_prior(&design, plan.method, Some(&s.coef), s.scale, &plan.irls, xtx, None)
                .map_err(|e| SelectError::Fit(e, sizes.clone()))?;
            ev.shared_scale = Some(s.scale);
            ev.anchor = Some(mm.fitted(&design.y));
            scale_source = sizes.clone();
            s_richest = Some(s);
            break;
        }
        report(1);
    }

    let mut kept = Keeper::default();
    if search == SearchKind::CoordinateWise {
        // Start from the best shared size, then improve term by term, for each criterion.
        let shared: Vec<Vec<usize>> = spec.shared.iter().map(|&k| vec![k; n_smooth]).collect();
        evaluate_in_waves(&ev, &shared, &mut kept, &|done| report(shared_step + done))?;
        for which in 0..2 {
            let key = |p: &GridPoint| if which == 0 { p.bic } else { p.rbic };
            let Some(mut current) = argmin(&kept.points, key).map(|i| kept.points[i].sizes.clone()) else { continue };
            for _sweep in 0..3 {
                let before = current.clone();
                for t in 0..n_smooth {
                    for &k in &lists[t] {
                        let mut s = current.clone();
                        s[t] = k;
                        if !kept.has(&s) {
                            kept.add(ev.evaluate(&s)?);
                            report(shared_step + kept.points.len());
                        }
                    }
                    let best = kept
                        .points
                        .iter()
                        .filter(|p| (0..n_smooth).all(|u| u == t || p.sizes[u] == current[u]))
                        .filter_map(|p| key(p).filter(|v| v.is_finite()).map(|v| (v, p.sizes.clone())))
                        .min_by(|a, b| a.0.total_cmp(&b.0));
                    if let Some((_, s)) = best {
                        current = s;
                    }
                }
                if current == before {
                    break;
                }
            }
        }
    } else {
        evaluate_in_waves(&ev, &candidates, &mut kept, &|done| report(shared_step + done))?;
    }

    let Keeper { points, classical, robust } = kept;
    let Some((ci, _, classical_design, classical_fit, robust_at_ci, s_at_ci)) = classical else {
        return Err(SelectError::NonePossible(points));
    };
    // The chosen designs, built again when they were not kept (the same sizes give the same design).
    let rebuild = |kept: Option<Arc<Design>>, i: usize| -> Result<Arc<Design>, SelectError> {
        match kept {
            Some(d) => Ok(d),
            None => {
                Design::build_sorted(frame, terms, &points[i].sizes, &sorted).map(Arc::new).map_err(SelectError::Design)
            }
        }
    };
    let classical_design = rebuild(classical_design, ci)?;
    // No robust criterion anywhere: the robust scale collapsed to zero at every grid point (more than
    // half the rows fitted exactly). The robust fit is then reported at the classical choice.
    let robust_criterion_collapsed = robust.is_none();
    let (ri, robust_design, robust_fit, s_at_point) = match robust {
        Some((ri, _, d, f, s)) if ri == ci => (ri, d.unwrap_or_else(|| Arc::clone(&classical_design)), f, s),
        Some((ri, _, d, f, s)) => (ri, rebuild(d, ri)?, f, s),
        None => match robust_at_ci {
            Some(f) => (ci, Arc::clone(&classical_design), f, s_at_ci),
            // Unreachable: the classical best keeps its robust fit while no robust best exists.
            None => return Err(SelectError::NonePossible(points)),
        },
    };
    // The reported robust fit: from its converged coefficients, once more with the final QR solve (one
    // reweighting step; the joint Huber fit re-estimates its own scale and always ends with QR).
    let robust_fit = if plan.method.needs_s_estimate() && robust_fit.scale > 0.0 {
        let xtx = Some(robust_fit.xtx_inverse.as_slice());
        fit::robust_with_prior(
            &robust_design,
            plan.method,
            Some(&robust_fit.coef),
            robust_fit.scale,
            &plan.irls,
            xtx,
            None,
        )
        .map_err(|e| SelectError::Fit(e, points[ri].sizes.clone()))?
    } else {
        robust_fit
    };
    Ok(Selection {
        points,
        search,
        classical_choice: ci,
        robust_choice: ri,
        robust_criterion_collapsed,
        shared_scale: ev.shared_scale,
        scale_source,
        s_estimate: s_at_point.or(s_richest),
        classical_design,
        classical_fit,
        robust_design,
        robust_fit,
    })
}

/// Whether a chosen size sits at the edge of its term's grid (per smooth term).
pub fn at_edge(spec: &GridSpec, sizes: &[usize]) -> Vec<bool> {
    sizes
        .iter()
        .enumerate()
        .map(|(t, &k)| {
            let list = spec.per_term.get(t).cloned().flatten().unwrap_or_else(|| spec.shared.clone());
            let lo = list.iter().copied().min().unwrap_or(k);
            let hi = list.iter().copied().max().unwrap_or(k);
            list.len() > 1 && (k == lo || k == hi)
        })
        .collect()
}
