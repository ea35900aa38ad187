//! The `run` pipeline as pure stages: checked study + frame → selection → sensitivity → results.
//!
//! No file is written here; `app` writes what this returns.

use std::sync::Arc;

use crate::data::{Frame, FrameRequest};
use crate::design::{LinearSpec, ModelTerms, SmoothSpec};
use crate::error::{Error, Result};
use crate::fit::{FitError, RobustMethod};
use crate::robust::irls::IrlsOptions;
use crate::robust::loss::{bisquare_tuning, huber_tuning};
use crate::robust::sest::SOptions;
use crate::select::{self, GridSpec, RobustPlan, ScaleMode, SelectError, Selection};
use crate::sensitivity::{self, Sensitivity};
use crate::spec::{LossChoice, RobustScaleMode, StartChoice, Study};

/// Everything one study run computed.
pub struct Analysis {
    pub study: Study,
    pub frame: Frame,
    pub terms: ModelTerms,
    pub grid: GridSpec,
    pub plan: RobustPlan,
    pub selection: Selection,
    pub sensitivity: Sensitivity,
}

/// What to read from the data for this study.
pub fn frame_request(study: &Study) -> FrameRequest {
    let mut numeric = vec![study.response.clone()];
    let mut categorical = Vec::new();
    for t in &study.linear {
        if t.categorical {
            categorical.push((t.column.clone(), t.reference.clone()));
        } else {
            numeric.push(t.column.clone());
        }
    }
    for s in &study.smooth {
        numeric.push(s.column.clone());
    }
    FrameRequest {
        path: study.data.file.clone(),
        display: study.data.file_as_written.clone(),
        missing: study.data.missing.clone(),
        id: study.data.id.clone(),
        numeric,
        categorical,
    }
}

/// The model terms of a study.
pub fn model_terms(study: &Study) -> ModelTerms {
    ModelTerms {
        response: study.response.clone(),
        linear: study
            .linear
            .iter()
            .map(|t| LinearSpec { column: t.column.clone(), categorical: t.categorical })
            .collect(),
        smooth: study
            .smooth
            .iter()
            .map(|s| SmoothSpec { column: s.column.clone(), degree: s.degree, knots: s.knots })
            .collect(),
    }
}

/// The robust method and options of a study.
pub fn robust_plan(study: &Study) -> RobustPlan {
    let method = match (study.robust.loss, study.robust.start) {
        (LossChoice::Bisquare, _) => RobustMethod::Mm { c: bisquare_tuning(study.robust.efficiency) },
        (LossChoice::Huber, StartChoice::SEstimate) => {
            RobustMethod::HuberFixedScale { k: huber_tuning(study.robust.efficiency) }
        }
        (LossChoice::Huber, StartChoice::LeastSquares) => {
            RobustMethod::HuberJoint { k: huber_tuning(study.robust.efficiency) }
        }
    };
    let s_options = SOptions { subsamples: study.robust.subsamples, seed: study.seed, ..SOptions::default() };
    RobustPlan {
        method,
        scale_mode: match study.selection.robust_scale {
            RobustScaleMode::Shared => ScaleMode::Shared,
            RobustScaleMode::PerSize => ScaleMode::PerSize,
        },
        s_options,
        irls: IrlsOptions::default(),
    }
}

/// The selection grid of a study.
pub fn grid_spec(study: &Study) -> GridSpec {
    GridSpec {
        shared: study.selection.basis_sizes.clone(),
        per_term: study.smooth.iter().map(|s| s.basis_sizes.clone()).collect(),
        penalty: study.selection.bic_penalty,
    }
}

/// Map a fit error to a user message naming columns.
pub fn fit_error(e: FitError, names: &[String], context: &str) -> Error {
    match e {
        FitError::RankDeficient { column, aliased_with } => {
            let col = names.get(column).cloned().unwrap_or_else(|| format!("#{column}"));
            let with: Vec<String> = aliased_with.iter().filter_map(|&c| names.get(c).cloned()).collect();
            let what = if with.is_empty() {
                format!("the design is rank deficient: column `{col}` is zero everywhere")
            } else if with.len() == 1 && with[0] == "intercept" {
                format!("the design is rank deficient: column `{col}` is constant (it duplicates the intercept)")
            } else {
                format!(
                    "the design is rank deficient: column `{col}` is a linear combination of {}",
                    with.iter().map(|w| format!("`{w}`")).collect::<Vec<_>>().join(", ")
                )
            };
            Error::new(what)
                .at(context)
                .hint("remove one of the aliased terms, or check the data for a column that duplicates another")
        }
        FitError::TooFewRows { rows, columns } => {
            Error::new(format!("too few rows: {rows} rows for {columns} model coefficients"))
                .at(context)
                .hint("use fewer terms or smaller basis sizes, or supply more data")
        }
        FitError::NonFinite => {
            Error::new("a non-finite number appeared in the fit").at(context).hint("check the data for extreme values")
        }
        FitError::DegenerateCovariance => Error::new(
            "the robust fit's covariance is undefined: almost every residual lies beyond the loss's tuning constant",
        )
        .at(context)
        .hint("check the response for a gross recording problem, or use `loss: huber`"),
        FitError::NoSubsample { tried } => {
            Error::new(format!("no non-singular subsample found for the robust start after {tried} draws"))
                .at(context)
                .hint("the design may be nearly singular: check categorical levels with very few rows")
        }
    }
}

/// Run the numerical pipeline on a loaded frame.
pub fn analyse(study: Study, frame: Frame, spec_display: &str) -> Result<Analysis> {
    analyse_with_progress(study, frame, spec_display, &|_, _| {})
}

/// [`analyse`], reporting selection progress as (steps done, steps planned).
pub fn analyse_with_progress(
    study: Study,
    frame: Frame,
    spec_display: &str,
    progress: &dyn Fn(usize, usize),
) -> Result<Analysis> {
    let terms = model_terms(&study);
    let grid = grid_spec(&study);
    let plan = robust_plan(&study);
    let selection = match select::select_with_progress(&frame, &terms, &grid, &plan, progress) {
        Ok(s) => s,
        Err(SelectError::NonePossible(points)) => {
            let reasons: Vec<String> = points
                .iter()
                .map(|p| {
                    let sizes: Vec<String> =
                        terms.smooth.iter().zip(&p.sizes).map(|(s, k)| format!("{} = {k}", s.column)).collect();
                    format!("{}: {}", sizes.join(", "), p.skipped.clone().unwrap_or_else(|| "no criterion".into()))
                })
                .collect();
            return Err(Error::new(format!(
                "no basis size on the grid is possible for these data:\n    {}",
                reasons.join("\n    ")
            ))
            .at(format!("{spec_display}: selection.basis-sizes"))
            .hint("choose smaller basis sizes, or use `knots: uniform` for a column with many tied values"));
        }
        Err(SelectError::Fit(e, sizes)) => {
            let names = select_names(&frame, &terms, &sizes);
            return Err(fit_error(e, &names, spec_display));
        }
        Err(SelectError::Design(e)) => {
            return Err(Error::new(format!("cannot build the design: {e:?}")).at(spec_display))
        }
    };
    let _t = crate::robust::profile::stage(|| "sensitivity".into());
    let mut selection = selection;
    let mut sensitivity = sensitivity::analyse(
        (&selection.classical_design, &selection.classical_fit),
        (&selection.robust_design, &selection.robust_fit),
        plan.method,
        &plan.irls,
        study.outliers.cutoff,
        study.sensitivity.refit_without_flagged,
        study.sensitivity.influence,
    )
    .map_err(|e| fit_error(e, &selection.robust_design.names, spec_display))?;
    if study.sensitivity.refit_without_flagged {
        // The rerun builds designs of its own; at large n the chosen designs are released while it
        // runs and built again after it (the same designs), so that only one is in memory at a time.
        let rerun_needed =
            sensitivity::without_flagged_applies(frame.n_used(), &sensitivity.flagged, selection.classical_design.p);
        let release = rerun_needed && frame.n_used() > select::keep_design_max_rows();
        let chosen = (selection.classical_design.sizes.clone(), selection.robust_design.sizes.clone());
        if release {
            selection.classical_design = Arc::new(selection.classical_design.subset(&[]));
            selection.robust_design = Arc::clone(&selection.classical_design);
        }
        let (points, choice) = sensitivity::rerun_classical_grid(
            &frame,
            &terms,
            &sensitivity.flagged,
            selection.classical_design.p,
            &selection.points,
            grid.penalty,
        );
        sensitivity.rerun_points = points;
        sensitivity.rerun_choice = choice;
        if release {
            let build = |sizes: &[usize]| {
                crate::design::Design::build(&frame, &terms, sizes)
                    .map(Arc::new)
                    .map_err(|e| Error::new(format!("cannot build the design: {e:?}")).at(spec_display))
            };
            selection.classical_design = build(&chosen.0)?;
            selection.robust_design =
                if chosen.1 == chosen.0 { Arc::clone(&selection.classical_design) } else { build(&chosen.1)? };
        }
    }
    Ok(Analysis { study, frame, terms, grid, plan, selection, sensitivity })
}

fn select_names(frame: &Frame, terms: &ModelTerms, sizes: &[usize]) -> Vec<String> {
    crate::design::Design::build(frame, terms, sizes).map(|d| d.names).unwrap_or_default()
}
