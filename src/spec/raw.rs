//! Raw serde structs: the spec exactly as written, before any check. Optional keys are `Option` so the
//! checker (check.rs) can tell "absent" from "given" and fill defaults in one place.
//!
//! The key lists (`*_KEYS`) mirror the struct fields; keys.rs uses them to report unknown keys with a
//! full key path and a suggestion before typed deserialization runs. Keep the two in step.

use serde::Deserialize;

#[derive(Debug, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub(crate) struct RawStudy {
    pub knotwise: Option<u64>,
    pub title: Option<String>,
    pub date: Option<String>,
    pub seed: Option<u64>,
    pub data: Option<RawData>,
    pub response: Option<String>,
    pub linear: Option<Vec<RawLinear>>,
    pub smooth: Option<Vec<RawSmooth>>,
    pub selection: Option<RawSelection>,
    pub robust: Option<RawRobust>,
    pub outliers: Option<RawOutliers>,
    pub sensitivity: Option<RawSensitivity>,
    pub report: Option<RawReport>,
}

pub(crate) const STUDY_KEYS: &[&str] = &[
    "knotwise",
    "title",
    "date",
    "seed",
    "data",
    "response",
    "linear",
    "smooth",
    "selection",
    "robust",
    "outliers",
    "sensitivity",
    "report",
];

#[derive(Debug, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub(crate) struct RawData {
    pub file: Option<String>,
    pub sha256: Option<String>,
    pub missing: Option<Vec<String>>,
    pub id: Option<String>,
}

pub(crate) const DATA_KEYS: &[&str] = &["file", "sha256", "missing", "id"];

#[derive(Debug, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub(crate) struct RawLinear {
    pub column: Option<String>,
    pub categorical: Option<bool>,
    pub reference: Option<String>,
}

pub(crate) const LINEAR_KEYS: &[&str] = &["column", "categorical", "reference"];

#[derive(Debug, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub(crate) struct RawSmooth {
    pub column: Option<String>,
    pub degree: Option<usize>,
    pub knots: Option<RawKnots>,
    pub basis_sizes: Option<Vec<usize>>,
}

pub(crate) const SMOOTH_KEYS: &[&str] = &["column", "degree", "knots", "basis-sizes"];

#[derive(Debug, Clone, Copy, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub(crate) enum RawKnots {
    Quantile,
    Uniform,
}

#[derive(Debug, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub(crate) struct RawSelection {
    pub basis_sizes: Option<Vec<usize>>,
    pub bic_penalty: Option<f64>,
    pub robust_scale: Option<RawRobustScale>,
}

pub(crate) const SELECTION_KEYS: &[&str] = &["basis-sizes", "bic-penalty", "robust-scale"];

#[derive(Debug, Clone, Copy, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub(crate) enum RawRobustScale {
    Shared,
    PerSize,
}

#[derive(Debug, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub(crate) struct RawRobust {
    pub loss: Option<RawLoss>,
    pub efficiency: Option<f64>,
    pub start: Option<RawStart>,
    pub subsamples: Option<usize>,
}

pub(crate) const ROBUST_KEYS: &[&str] = &["loss", "efficiency", "start", "subsamples"];

#[derive(Debug, Clone, Copy, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub(crate) enum RawLoss {
    Bisquare,
    Huber,
}

#[derive(Debug, Clone, Copy, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub(crate) enum RawStart {
    SEstimate,
    LeastSquares,
}

#[derive(Debug, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub(crate) struct RawOutliers {
    pub cutoff: Option<f64>,
}

pub(crate) const OUTLIERS_KEYS: &[&str] = &["cutoff"];

#[derive(Debug, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub(crate) struct RawSensitivity {
    pub refit_without_flagged: Option<bool>,
    pub influence: Option<bool>,
}

pub(crate) const SENSITIVITY_KEYS: &[&str] = &["refit-without-flagged", "influence"];

#[derive(Debug, Deserialize)]
#[serde(rename_all = "kebab-case", deny_unknown_fields)]
pub(crate) struct RawReport {
    pub notes: Option<String>,
}

pub(crate) const REPORT_KEYS: &[&str] = &["notes"];
