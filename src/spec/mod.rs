//! The study spec (DESIGN.md §3): YAML text → raw serde structs (`deny_unknown_fields`) → a checked
//! [`Study`] with every default filled in. All YAML parsing in the project lives in this module.
//!
//! Only the checked `Study` crosses into the rest of the program.

use std::path::{Path, PathBuf};

pub use crate::basis::KnotPlacement;

use crate::error::{Error, Result};

mod check;
mod keys;
mod locate;
mod raw;
mod resolved;
mod yaml_errors;

/// Text as a double-quoted YAML scalar that reads back as the same text (escapes control characters,
/// quotes and backslashes). Also the quoting of names in messages.
pub use check::quote;

/// The shared grid of basis sizes when `selection.basis-sizes` is not given.
pub const DEFAULT_BASIS_SIZES: [usize; 5] = [4, 5, 6, 7, 8];

/// Specs larger than this are refused before parsing (a study spec is a few kilobytes; this bounds the
/// work an accidental or hostile file can cause).
pub const MAX_SPEC_BYTES: u64 = 1024 * 1024;

/// Read and check the spec at `path`. Messages name the path as given; relative paths inside the spec
/// are resolved against the spec's folder.
pub fn load(path: &Path) -> Result<Study> {
    let display = path.display().to_string();
    let meta = std::fs::metadata(path).map_err(|e| {
        let hint = match e.kind() {
            std::io::ErrorKind::NotFound => "the spec's path is relative to the working folder; check the spelling",
            _ => "check the path and that the file can be read",
        };
        Error::io("read the spec", path, &e).hint(hint)
    })?;
    if meta.is_dir() {
        return Err(Error::new("cannot read the spec: it is a directory")
            .at(&display)
            .hint("give the path of the study's YAML file"));
    }
    if meta.len() > MAX_SPEC_BYTES {
        return Err(too_large(&display, meta.len()));
    }
    let bytes = std::fs::read(path).map_err(|e| Error::io("read the spec", path, &e))?;
    let text = match String::from_utf8(bytes) {
        Ok(t) => t,
        Err(e) => {
            let upto = &e.as_bytes()[..e.utf8_error().valid_up_to()];
            let line = upto.iter().filter(|b| **b == b'\n').count() + 1;
            return Err(Error::new("the spec is not valid UTF-8 text")
                .at(format!("{display}, line {line}"))
                .hint("save the spec as UTF-8"));
        }
    };
    let base_dir = path.parent().unwrap_or_else(|| Path::new(""));
    parse(&text, &display, base_dir)
}

fn too_large(display: &str, len: u64) -> Error {
    Error::new(format!("the spec is {len} bytes long; at most {MAX_SPEC_BYTES} bytes (1 MiB) are read"))
        .at(display)
        .hint("a study spec is a short YAML file; check that this is the right file")
}

/// Parse and check spec text. `spec_display` names the spec in messages; `base_dir` is the folder
/// relative paths (data file, notes) are resolved against.
pub fn parse(text: &str, spec_display: &str, base_dir: &Path) -> Result<Study> {
    if text.len() as u64 > MAX_SPEC_BYTES {
        return Err(too_large(spec_display, text.len() as u64));
    }
    let ctx = Ctx { spec: spec_display, text, locator: locate::Locator::new(text) };
    // First the untyped tree: YAML syntax, duplicate keys, alias limits, the shape of the root and
    // unknown keys (with full key paths), then typed deserialization, then the checks.
    let value: serde_yaml::Value = serde_yaml::from_str(text).map_err(|e| yaml_errors::map(&ctx, &e))?;
    check_root_shape(&ctx, &value)?;
    keys::check_unknown_keys(&ctx, &value)?;
    let raw: raw::RawStudy = serde_yaml::from_str(text).map_err(|e| yaml_errors::map(&ctx, &e))?;
    check::from_raw(&ctx, raw, base_dir)
}

fn check_root_shape(ctx: &Ctx, value: &serde_yaml::Value) -> Result<()> {
    use serde_yaml::Value;
    let found = match value {
        Value::Mapping(_) => return Ok(()),
        Value::Null => "it is empty",
        Value::Sequence(_) => "it is a list",
        Value::Tagged(_) => "it is a tagged value",
        _ => "it is a single value",
    };
    Err(Error::new(format!(
        "the spec must be a mapping of keys (`knotwise`, `title`, `data`, `response`, ...); {found}"
    ))
    .at(ctx.spec)
    .hint("start the spec with `knotwise: 1` and `title: ...` on their own lines, keys at the left margin"))
}

/// Where the spec is, for messages.
pub(crate) struct Ctx<'a> {
    pub spec: &'a str,
    pub text: &'a str,
    pub locator: locate::Locator,
}

impl Ctx<'_> {
    /// `study.yaml, line 12, key smooth[1].degree` (the line when it can be found).
    pub(crate) fn at(&self, path: &str) -> String {
        match self.locator.line(path) {
            Some(l) => format!("{}, line {l}, key {path}", self.spec),
            None => format!("{}, key {path}", self.spec),
        }
    }

    pub(crate) fn err(&self, path: &str, what: impl Into<String>, hint: impl Into<String>) -> Error {
        Error::new(what).at(self.at(path)).hint(hint)
    }
}

/// The spec format version this build reads.
pub const SPEC_VERSION: u32 = 1;

/// A checked study. Paths are resolved against the spec file's folder; `*_as_written` keep the
/// spec's own text for display and for the resolved spec (never an absolute path in hashed output).
#[derive(Debug, Clone, PartialEq)]
pub struct Study {
    pub title: String,
    pub date: Option<String>,
    pub seed: u64,
    pub data: DataSource,
    pub response: String,
    pub linear: Vec<LinearTerm>,
    pub smooth: Vec<SmoothTerm>,
    pub selection: Selection,
    pub robust: RobustSettings,
    pub outliers: OutlierSettings,
    pub sensitivity: SensitivitySettings,
    pub report: ReportSettings,
}

#[derive(Debug, Clone, PartialEq)]
pub struct DataSource {
    /// The path as written in the spec (relative to the spec's folder).
    pub file_as_written: String,
    /// The path to open (spec folder joined with `file_as_written`).
    pub file: PathBuf,
    /// Optional pin: lower-case hex sha256 the data file must have.
    pub sha256: Option<String>,
    /// Tokens read as missing.
    pub missing: Vec<String>,
    /// Optional id column naming rows.
    pub id: Option<String>,
}

#[derive(Debug, Clone, PartialEq)]
pub struct LinearTerm {
    pub column: String,
    pub categorical: bool,
    /// Reference level for a categorical term (None: the first level in sorted order).
    pub reference: Option<String>,
}

#[derive(Debug, Clone, PartialEq)]
pub struct SmoothTerm {
    pub column: String,
    pub degree: usize,
    pub knots: KnotPlacement,
    /// Per-term grid; None means the shared grid of `selection.basis_sizes`.
    pub basis_sizes: Option<Vec<usize>>,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum RobustScaleMode {
    /// One S-scale (of the richest grid model) for every grid point.
    Shared,
    /// A separate S-scale per grid point.
    PerSize,
}

#[derive(Debug, Clone, PartialEq)]
pub struct Selection {
    pub basis_sizes: Vec<usize>,
    pub bic_penalty: f64,
    pub robust_scale: RobustScaleMode,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum LossChoice {
    Bisquare,
    Huber,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum StartChoice {
    /// S-estimate start, its scale held fixed (MM for the bisquare).
    SEstimate,
    /// Least-squares start, MAD re-estimated every step (Huber only).
    LeastSquares,
}

#[derive(Debug, Clone, PartialEq)]
pub struct RobustSettings {
    pub loss: LossChoice,
    pub efficiency: f64,
    pub start: StartChoice,
    pub subsamples: usize,
}

#[derive(Debug, Clone, PartialEq)]
pub struct OutlierSettings {
    pub cutoff: f64,
}

#[derive(Debug, Clone, PartialEq)]
pub struct SensitivitySettings {
    pub refit_without_flagged: bool,
    pub influence: bool,
}

#[derive(Debug, Clone, PartialEq)]
pub struct ReportSettings {
    /// The notes as written in the spec (a file path or inline markdown), for the resolved spec.
    pub notes_as_written: Option<String>,
    /// The markdown text of the notes (read from the file when `notes` names one).
    pub notes_markdown: Option<String>,
}
