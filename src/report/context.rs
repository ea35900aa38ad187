//! The report's one typed context: everything the template shows, built from `Analysis` and `Results`,
//! with every number already formatted as text by the fixed rules below and every figure already drawn.
//!
//! Formatting rules (the template formats nothing numeric and decides nothing):
//! - estimates, standard errors, interval ends, scales, data summaries, knots: 4 significant digits
//!   ([`sig`]), plain decimal for exponents −4..6, otherwise `d.ddde±x`;
//! - criteria (BIC, RBIC): 4 decimals; R²: 3 decimals; weights and leverage: 3 decimals;
//!   scaled residuals, DFBETAS and curve moves: 2 decimals; expected counts: 1 decimal;
//! - a missing or non-finite number is shown as "—".
//!
//! Owns no I/O and fits nothing: curves come from `Results`, partial fits from `fit::partial_fit`.

use serde::Serialize;

use crate::analysis::Analysis;
use crate::data::ColumnData;
use crate::error::Error;
use crate::fit::{self, RobustMethod};
use crate::report::plots::{self, ChartSpec, Figure, Ink, Layer, LayerKind, LegendAt, Shape};
use crate::results::{FitOut, Results, Sizes};

/// Most points drawn in one scatter (every k-th row), and most flagged rows drawn besides them.
pub const MAX_POINTS: usize = 1200;
/// Most rug ticks per smooth plot.
pub const MAX_RUG: usize = 300;
/// Most dropped lines listed in the data section.
pub const MAX_DROPPED_LISTED: usize = 50;
/// Most flagged rows listed in the outlier table.
pub const MAX_FLAGGED_LISTED: usize = 100;
/// Most high-leverage rows listed.
pub const MAX_LEVERAGE_LISTED: usize = 50;

const DASH: &str = "—";

/// A plotted (x, y) point.
type Point = (f64, f64);

// ---------------------------------------------------------------------------------------------------
// Number formatting

/// `v` to `digits` significant digits; plain decimals for exponents −4..=6, else scientific.
/// Uses Rust's exact decimal formatting (no logarithms), so the text is the same on every platform.
pub fn sig(v: f64, digits: usize) -> String {
    if !v.is_finite() {
        return DASH.into();
    }
    if v == 0.0 {
        return "0".into();
    }
    let digits = digits.max(1);
    let sci = format!("{:.*e}", digits - 1, v);
    let exp: i32 = sci.rsplit('e').next().and_then(|e| e.parse().ok()).unwrap_or(0);
    let s = if (-4..=6).contains(&exp) {
        let decimals = (digits as i32 - 1 - exp).max(0) as usize;
        format!("{v:.decimals$}")
    } else {
        sci
    };
    neg_zero(s)
}

/// `v` with a fixed number of decimals.
pub fn fixed(v: f64, decimals: usize) -> String {
    if !v.is_finite() {
        return DASH.into();
    }
    neg_zero(format!("{v:.decimals$}"))
}

fn neg_zero(s: String) -> String {
    if s.starts_with('-') && s.chars().all(|c| matches!(c, '-' | '0' | '.')) {
        s[1..].to_string()
    } else {
        s
    }
}

fn osig(v: Option<f64>) -> String {
    v.map_or_else(|| DASH.into(), |v| sig(v, 4))
}

fn ofixed(v: Option<f64>, d: usize) -> String {
    v.map_or_else(|| DASH.into(), |v| fixed(v, d))
}

fn plural(n: usize, one: &str, many: &str) -> String {
    if n == 1 {
        format!("{n} {one}")
    } else {
        format!("{n} {many}")
    }
}

/// "floor_area 6, building_age 5" in the spec's term order `order` (the results map is keyed by name
/// and may be sorted), or "none" with no smooth terms.
pub fn sizes_text(s: &Sizes, order: &[String]) -> String {
    if s.0.is_empty() {
        return "none (no smooth terms)".into();
    }
    let mut names: Vec<&str> = order.iter().map(String::as_str).filter(|n| s.0.contains_key(*n)).collect();
    names.extend(s.0.keys().map(String::as_str).filter(|k| !order.iter().any(|o| o == k)));
    names
        .iter()
        .map(|k| format!("{k} {}", s.0.get(*k).map_or(DASH.to_string(), |v| v.to_string())))
        .collect::<Vec<_>>()
        .join(", ")
}

/// The smooth terms in spec order (as the results list their curves).
fn term_order(r: &Results) -> Vec<String> {
    r.fits.robust.smooth.iter().map(|s| s.column.clone()).collect()
}

/// 4 significant digits with trailing zeros trimmed (for settings such as the cutoff: "2.5").
fn short(v: f64) -> String {
    let s = sig(v, 4);
    if s.contains('.') && !s.contains('e') {
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        s
    }
}

/// Type-7 quantile of an ascending slice (Hyndman & Fan 1996), the rule `basis::quantile_sorted` uses;
/// repeated here so the data summary needs nothing beyond the frame.
fn quantile7(sorted: &[f64], p: f64) -> f64 {
    if sorted.is_empty() {
        return f64::NAN;
    }
    let h = (sorted.len() - 1) as f64 * p;
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(sorted.len() - 1);
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

// ---------------------------------------------------------------------------------------------------
// The context

#[derive(Debug, Clone, Serialize, Default)]
pub struct KeyValue {
    pub key: String,
    pub value: String,
}

fn kv(key: impl Into<String>, value: impl Into<String>) -> KeyValue {
    KeyValue { key: key.into(), value: value.into() }
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct TocEntry {
    pub id: String,
    pub number: String,
    pub title: String,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct ReportContext {
    pub title: String,
    pub date: Option<String>,
    pub description: String,
    /// Non-convergence first, then the rest in the order `outputs::warnings` gives.
    pub warnings: Vec<String>,
    pub no_warnings: Option<String>,
    pub toc: Vec<TocEntry>,
    pub summary: SummaryCtx,
    pub data: DataCtx,
    pub model: ModelCtx,
    pub selection: SelectionCtx,
    pub fits: FitsCtx,
    pub smooth: SmoothCtx,
    pub diagnostics: DiagnosticsCtx,
    pub outliers: OutliersCtx,
    pub provenance: ProvenanceCtx,
    pub cautions: Vec<String>,
    pub notes: NotesCtx,
    pub generator: String,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct SummaryCtx {
    pub fitted: Vec<KeyValue>,
    pub findings: Vec<String>,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct NumericSummary {
    pub column: String,
    pub role: String,
    pub min: String,
    pub q1: String,
    pub median: String,
    pub q3: String,
    pub max: String,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct LevelCount {
    pub level: String,
    pub count: String,
    pub note: String,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct CategoricalSummary {
    pub column: String,
    pub role: String,
    pub levels: Vec<LevelCount>,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct DataCtx {
    pub counts: Vec<KeyValue>,
    pub dropped: Vec<String>,
    pub dropped_more: Option<String>,
    pub dropped_none: Option<String>,
    pub numeric: Vec<NumericSummary>,
    pub categorical: Vec<CategoricalSummary>,
    pub missing: Vec<KeyValue>,
    pub warnings: Vec<String>,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct TermRow {
    pub term: String,
    pub role: String,
    pub detail: String,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct KnotRow {
    pub column: String,
    pub fit: String,
    pub size: String,
    pub boundary: String,
    pub interior: String,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct ModelCtx {
    pub terms: Vec<TermRow>,
    pub knots: Vec<KnotRow>,
    pub knots_none: Option<String>,
    pub resolved_yaml: String,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct PointRow {
    pub index: String,
    pub sizes: Vec<String>,
    pub p: String,
    pub bic: String,
    pub rbic: String,
    pub chosen: String,
    pub skipped: String,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct SelectionCtx {
    pub method: Vec<KeyValue>,
    pub term_names: Vec<String>,
    pub points: Vec<PointRow>,
    pub figure: Option<Figure>,
    pub no_figure: Option<String>,
    pub sentences: Vec<String>,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct CoefCell {
    pub estimate: String,
    pub std_error: String,
    pub interval: String,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct CoefRow {
    pub name: String,
    pub cells: Vec<CoefCell>,
    pub marker: String,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct FitSummaryRow {
    pub fit: String,
    pub method: String,
    pub loss: String,
    pub scale: String,
    pub r_squared: String,
    pub rows: String,
    pub coefficients: String,
    pub sizes: String,
    pub termination: String,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct FitsCtx {
    pub fit_names: Vec<String>,
    pub coefficients: Vec<CoefRow>,
    pub no_coefficients: Option<String>,
    pub marker_legend: String,
    pub change_sentence: String,
    pub summary: Vec<FitSummaryRow>,
    pub start: Vec<KeyValue>,
    pub start_none: Option<String>,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct SmoothTermCtx {
    pub number: String,
    pub column: String,
    pub figure: Figure,
    pub moves: Vec<String>,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct SmoothCtx {
    pub terms: Vec<SmoothTermCtx>,
    pub none: Option<String>,
    pub intro: String,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct DiagnosticsCtx {
    pub intro: String,
    pub figures: Vec<Figure>,
    pub sentences: Vec<String>,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct FlagRow {
    pub row: String,
    pub line: String,
    pub residual: String,
    pub scaled: String,
    pub weight: String,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct LeverageRow {
    pub row: String,
    pub line: String,
    pub leverage: String,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct InfluenceRow {
    pub row: String,
    pub line: String,
    pub values: Vec<String>,
    pub largest: String,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct OutliersCtx {
    pub flagged_sentence: String,
    pub flagged: Vec<FlagRow>,
    pub flagged_cap: Option<String>,
    pub boxplot: Vec<String>,
    pub leverage_sentence: String,
    pub leverage: Vec<LeverageRow>,
    pub leverage_cap: Option<String>,
    pub rerun: Vec<String>,
    pub influence_sentence: String,
    pub influence_names: Vec<String>,
    pub influence: Vec<InfluenceRow>,
    pub influence_cap: Option<String>,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct ProvenanceCtx {
    pub items: Vec<KeyValue>,
    pub rerun: Vec<String>,
}

#[derive(Debug, Clone, Serialize, Default)]
pub struct NotesCtx {
    /// The analyst's notes as HTML; raw HTML in the markdown is escaped, links keep only their text.
    pub html: Option<String>,
    pub none_sentence: Option<String>,
}

/// Section numbers and titles (ids `s0` … `s11`).
pub const SECTIONS: [&str; 11] = [
    "Summary",
    "Data",
    "Model",
    "Basis-size selection",
    "Fits side by side",
    "Smooth effects",
    "Diagnostics",
    "Outliers and sensitivity",
    "Provenance",
    "Cautions",
    "Analyst's notes",
];

// ---------------------------------------------------------------------------------------------------
// Markdown notes

/// Render analyst notes: CommonMark with tables and strikethrough; raw HTML (block or inline) is turned
/// into text so it is escaped; links keep their text only and images their alt text, so the report
/// carries no URL.
pub fn notes_html(markdown: &str) -> String {
    use pulldown_cmark::{html, CowStr, Event, Options, Parser, Tag, TagEnd};
    let parser = Parser::new_ext(markdown, Options::ENABLE_TABLES | Options::ENABLE_STRIKETHROUGH);
    let events = parser.filter_map(|ev| match ev {
        Event::Html(t) | Event::InlineHtml(t) => Some(Event::Text(t)),
        Event::Start(Tag::Link { .. }) | Event::End(TagEnd::Link) => None,
        Event::Start(Tag::Image { .. }) => Some(Event::Text(CowStr::Borrowed("[image: "))),
        Event::End(TagEnd::Image) => Some(Event::Text(CowStr::Borrowed("]"))),
        other => Some(other),
    });
    let mut out = String::new();
    html::push_html(&mut out, events);
    out
}

// ---------------------------------------------------------------------------------------------------
// Building

fn method_words(m: RobustMethod) -> &'static str {
    match m {
        RobustMethod::Mm { .. } => "MM estimation with the bisquare loss from an S-estimate start (S-scale held fixed)",
        RobustMethod::HuberFixedScale { .. } => "Huber M-estimation from an S-estimate start (S-scale held fixed)",
        RobustMethod::HuberJoint { .. } => {
            "Huber M-estimation from least squares, MAD scale re-estimated each step (joint fixed point)"
        }
    }
}

fn ordered_warnings(w: &[String]) -> Vec<String> {
    let mut v: Vec<(usize, String)> =
        w.iter().map(|s| (usize::from(!s.to_lowercase().contains("not converge")), s.clone())).collect();
    v.sort_by_key(|(k, _)| *k);
    v.into_iter().map(|(_, s)| s).collect()
}

fn find_coef<'a>(f: &'a FitOut, name: &str) -> Option<&'a crate::results::CoefOut> {
    f.coefficients.iter().find(|c| c.name == name)
}

/// Build the context. Fails only if a figure cannot be drawn.
pub fn build(a: &Analysis, r: &Results, resolved_yaml: &str) -> Result<ReportContext, Error> {
    let sel = &a.selection;
    let sens = &a.sensitivity;
    let rf = &sel.robust_fit;
    let rd = &sel.robust_design;
    let n = rd.n;
    let mut flagged_mask = vec![false; n];
    for &i in &sens.flagged {
        if let Some(m) = flagged_mask.get_mut(i) {
            *m = true;
        }
    }
    let scaled: Vec<f64> = rf.residuals.iter().map(|e| if rf.scale > 0.0 { e / rf.scale } else { f64::NAN }).collect();

    let robust_words = method_words(a.plan.method);
    let description = format!(
        "Partially linear additive model of {} with {} and {}, fitted by least squares and by {}, on {} of {} data rows.",
        a.study.response,
        plural(a.study.linear.len(), "linear term", "linear terms"),
        plural(a.study.smooth.len(), "smooth term", "smooth terms"),
        robust_words,
        r.study.n_rows_used,
        r.study.n_rows_read
    );
    let warnings = ordered_warnings(&r.warnings);
    let no_warnings = warnings.is_empty().then(|| "No warnings.".to_string());
    let toc = SECTIONS
        .iter()
        .enumerate()
        .map(|(i, t)| TocEntry { id: format!("s{}", i + 1), number: format!("{}", i + 1), title: (*t).to_string() })
        .collect();

    let fits_ctx = fits_section(r);
    let summary = summary_section(a, r, &fits_ctx);
    let data = data_section(a, r);
    let model = model_section(a, resolved_yaml);
    let selection = selection_section(a, r)?;
    let smooth = smooth_section(a, r, &flagged_mask)?;
    let diagnostics = diagnostics_section(a, r, &scaled, &flagged_mask)?;
    let outliers = outliers_section(r);
    let p = &r.provenance;
    let provenance = ProvenanceCtx {
        items: vec![
            kv("Spec sha256", p.spec_sha256.clone()),
            kv("Data file", p.data_file.clone()),
            kv("Data sha256", p.data_sha256.clone()),
            kv("Resolved spec sha256", p.resolved_spec_sha256.clone()),
            kv("knotwise version", p.version.clone()),
            kv("Target", p.target.clone()),
            kv("Seed", p.seed.to_string()),
            kv("Results digest", p.digest.clone()),
        ],
        rerun: vec![
            "Rerun the study with `knotwise run <spec file>`; the same spec, data and version give the same results digest.".into(),
            "Check a saved output folder with `knotwise verify <output folder>`: it reruns the recorded study and says whether every digest still matches, and if not, which input changed and which results moved.".into(),
        ],
    };
    let cautions = vec![
        "Statistical output supports, and does not replace, the judgement of qualified professionals working under local rules and codes.".into(),
        "A robust fit is not a licence to drop data: flagged rows need investigation, not deletion. The refit without flagged rows is shown only to measure their influence.".into(),
        "The 95% bands around the curves are pointwise, not simultaneous: across a whole curve, some true values are expected to fall outside them.".into(),
        "The basis sizes were chosen by a criterion, and that choice is itself uncertain; the intervals shown do not account for it.".into(),
        format!(
            "Scale convention: the robust scale is an M-scale (bisquare ρ, c = 1.5476, b = 0.5) defined with the 1/n mean of ρ; other conventions (e.g. 1/(n − p)) give somewhat larger values. The robust residuals are scaled by this value ({}) before flagging.",
            osig(r.fits.robust.scale)
        ),
    ];
    let notes = match a.study.report.notes_markdown.as_deref().filter(|s| !s.trim().is_empty()) {
        Some(md) => NotesCtx { html: Some(notes_html(md)), none_sentence: None },
        None => NotesCtx { html: None, none_sentence: Some("No notes were supplied.".into()) },
    };
    Ok(ReportContext {
        title: a.study.title.clone(),
        date: a.study.date.clone(),
        description,
        warnings,
        no_warnings,
        toc,
        summary,
        data,
        model,
        selection,
        fits: fits_ctx,
        smooth,
        diagnostics,
        outliers,
        provenance,
        cautions,
        notes,
        generator: format!("knotwise {}", r.provenance.version),
    })
}

fn summary_section(a: &Analysis, r: &Results, fits: &FitsCtx) -> SummaryCtx {
    let linear: Vec<String> = a
        .study
        .linear
        .iter()
        .map(|t| if t.categorical { format!("{} (categorical)", t.column) } else { t.column.clone() })
        .collect();
    let smooth: Vec<String> = a.study.smooth.iter().map(|t| t.column.clone()).collect();
    let fitted = vec![
        kv("Response", a.study.response.clone()),
        kv("Linear terms", if linear.is_empty() { "none".into() } else { linear.join(", ") }),
        kv("Smooth terms", if smooth.is_empty() { "none".into() } else { smooth.join(", ") }),
        kv("Basis sizes, classical fit", sizes_text(&r.fits.classical.basis_sizes, &term_order(r))),
        kv("Basis sizes, robust fit", sizes_text(&r.fits.robust.basis_sizes, &term_order(r))),
    ];
    let mut findings = Vec::new();
    let dropped = r.study.dropped.len();
    findings.push(format!(
        "{} of {} rows were used; {} dropped for missing values.",
        r.study.n_rows_used,
        r.study.n_rows_read,
        plural(dropped, "row was", "rows were")
    ));
    let o = &r.outliers;
    findings.push(format!(
        "{} flagged by the robust fit (|scaled residual| > {}); about {} would be flagged by chance under normal errors.",
        plural(o.n_flagged, "row is", "rows are"),
        short(o.cutoff),
        fixed(o.expected_false, 1)
    ));
    findings.push(fits.change_sentence.clone());
    let mut inf: Vec<&crate::results::InfluenceOut> = r.sensitivity.influence.iter().collect();
    inf.sort_by(|x, y| y.largest.unwrap_or(0.0).total_cmp(&x.largest.unwrap_or(0.0)).then(x.line.cmp(&y.line)));
    if inf.is_empty() {
        findings.push("No leave-one-out influence was computed (no flagged rows, or influence turned off).".into());
    } else {
        let parts: Vec<String> = inf
            .iter()
            .take(3)
            .map(|i| {
                let top = i
                    .dfbetas
                    .iter()
                    .filter(|v| v.value.is_some() && v.name != "intercept")
                    .max_by(|x, y| x.value.unwrap_or(0.0).abs().total_cmp(&y.value.unwrap_or(0.0).abs()));
                match top {
                    Some(t) => {
                        format!("row {} (line {}): |DFBETAS| {} on {}", i.row, i.line, ofixed(i.largest, 2), t.name)
                    }
                    None => format!("row {} (line {})", i.row, i.line),
                }
            })
            .collect();
        findings.push(format!(
            "Flagged rows that move the linear coefficients most when left out one at a time: {}.",
            parts.join("; ")
        ));
    }
    let (rs, cs) = (r.fits.robust.scale, r.fits.classical.scale);
    let ratio = match (rs, cs) {
        (Some(a), Some(b)) if b > 0.0 => format!(" (ratio {})", fixed(a / b, 2)),
        _ => String::new(),
    };
    findings.push(format!(
        "Robust scale {} against the classical residual standard deviation {}{}.",
        osig(rs),
        osig(cs),
        ratio
    ));
    SummaryCtx { fitted, findings }
}

fn data_section(a: &Analysis, r: &Results) -> DataCtx {
    let counts = vec![
        kv("Rows read", r.study.n_rows_read.to_string()),
        kv("Rows used", r.study.n_rows_used.to_string()),
        kv("Rows dropped", r.study.dropped.len().to_string()),
    ];
    let dropped: Vec<String> = r
        .study
        .dropped
        .iter()
        .take(MAX_DROPPED_LISTED)
        .map(|d| format!("line {}: missing {}", d.line, d.columns.join(", ")))
        .collect();
    let dropped_more = (r.study.dropped.len() > MAX_DROPPED_LISTED)
        .then(|| format!("and {} more.", r.study.dropped.len() - MAX_DROPPED_LISTED));
    let dropped_none = r.study.dropped.is_empty().then(|| "No rows were dropped.".to_string());
    let role = |name: &str| -> String {
        if name == a.study.response {
            "response".into()
        } else if a.study.smooth.iter().any(|s| s.column == name) {
            "smooth".into()
        } else {
            "linear".into()
        }
    };
    let mut numeric = Vec::new();
    let mut categorical = Vec::new();
    // The numeric columns' sorted values, one column per worker thread at a time (an unstable sort:
    // values equal under `total_cmp` have the same bits, so there is one sorted order).
    let sorted_numeric = crate::linalg::map_tasks(a.frame.columns.len(), |j| match &a.frame.columns[j].data {
        ColumnData::Numeric(v) => {
            let mut s: Vec<f64> = v.iter().copied().filter(|x| x.is_finite()).collect();
            s.sort_unstable_by(f64::total_cmp);
            let q = |p: f64| if s.is_empty() { None } else { Some(quantile7(&s, p)) };
            [q(0.0), q(0.25), q(0.5), q(0.75), q(1.0)]
        }
        ColumnData::Categorical { .. } => [None; 5],
    });
    for (c, quantiles) in a.frame.columns.iter().zip(sorted_numeric) {
        match &c.data {
            ColumnData::Numeric(_) => {
                let q = |k: usize| quantiles[k].map_or_else(|| DASH.to_string(), |v| sig(v, 4));
                numeric.push(NumericSummary {
                    column: c.name.clone(),
                    role: role(&c.name),
                    min: q(0),
                    q1: q(1),
                    median: q(2),
                    q3: q(3),
                    max: q(4),
                });
            }
            ColumnData::Categorical { levels, reference, counts, .. } => {
                categorical.push(CategoricalSummary {
                    column: c.name.clone(),
                    role: role(&c.name),
                    levels: levels
                        .iter()
                        .enumerate()
                        .map(|(i, l)| LevelCount {
                            level: l.clone(),
                            count: counts.get(i).copied().unwrap_or(0).to_string(),
                            note: if i == *reference { "reference".into() } else { String::new() },
                        })
                        .collect(),
                });
            }
        }
    }
    DataCtx {
        counts,
        dropped,
        dropped_more,
        dropped_none,
        numeric,
        categorical,
        missing: r.study.missing_per_column.iter().map(|m| kv(m.column.clone(), m.rows.to_string())).collect(),
        warnings: a.frame.warnings.clone(),
    }
}

fn model_section(a: &Analysis, resolved_yaml: &str) -> ModelCtx {
    let mut terms = vec![TermRow { term: a.study.response.clone(), role: "response".into(), detail: String::new() }];
    for t in &a.study.linear {
        let detail = if t.categorical {
            let levels = match a.frame.column(&t.column).map(|c| &c.data) {
                Some(ColumnData::Categorical { levels, reference, .. }) => {
                    format!(
                        "reference level {}; {}",
                        levels.get(*reference).cloned().unwrap_or_default(),
                        plural(levels.len(), "level", "levels")
                    )
                }
                _ => String::new(),
            };
            format!("categorical, treatment coding; {levels}")
        } else {
            "numeric".into()
        };
        terms.push(TermRow { term: t.column.clone(), role: "linear".into(), detail });
    }
    for s in &a.study.smooth {
        let grid = match &s.basis_sizes {
            Some(g) => format!("own grid {}", g.iter().map(|k| k.to_string()).collect::<Vec<_>>().join(", ")),
            None => "shared grid".into(),
        };
        let knots = match s.knots {
            crate::basis::KnotPlacement::Quantile => "interior knots at sample quantiles",
            crate::basis::KnotPlacement::Uniform => "evenly spaced interior knots",
        };
        terms.push(TermRow {
            term: s.column.clone(),
            role: "smooth".into(),
            detail: format!("B-spline of degree {}, {knots}; {grid}; centred, k − 1 columns", s.degree),
        });
    }
    let mut knots = Vec::new();
    for (fit, d) in [("classical", &a.selection.classical_design), ("robust", &a.selection.robust_design)] {
        for enc in &d.smooth {
            let kn = &enc.basis.knots;
            let deg = enc.basis.degree;
            let interior: Vec<String> = if kn.len() > 2 * (deg + 1) {
                kn[deg + 1..kn.len() - deg - 1].iter().map(|v| sig(*v, 4)).collect()
            } else {
                vec![]
            };
            let (lo, hi) = (kn.first().copied().unwrap_or(f64::NAN), kn.last().copied().unwrap_or(f64::NAN));
            knots.push(KnotRow {
                column: enc.column.clone(),
                fit: fit.into(),
                size: enc.basis.size().to_string(),
                boundary: format!("{} and {}", sig(lo, 4), sig(hi, 4)),
                interior: if interior.is_empty() { "none".into() } else { interior.join(", ") },
            });
        }
    }
    let knots_none = knots.is_empty().then(|| "There are no smooth terms, so there are no knots.".to_string());
    ModelCtx { terms, knots, knots_none, resolved_yaml: resolved_yaml.to_string() }
}

fn selection_section(a: &Analysis, r: &Results) -> Result<SelectionCtx, Error> {
    let m = &r.selection_method;
    let method = vec![
        kv("Search", a.selection.search.describe().to_string()),
        kv("Penalty γ (multiplier of p·log(n)/n)", sig(m.bic_penalty, 4)),
        kv("Robust scale mode", m.robust_scale.clone()),
        kv(
            "Shared robust scale",
            match m.shared_scale {
                Some(s) => format!(
                    "{} (S-scale of the model with basis sizes {})",
                    sig(s, 4),
                    sizes_text(&m.scale_from_basis_sizes, &term_order(r))
                ),
                None => "not used (each grid point has its own scale)".into(),
            },
        ),
    ];
    let term_names: Vec<String> = a.terms.smooth.iter().map(|s| s.column.clone()).collect();
    let points: Vec<PointRow> = r
        .selection
        .iter()
        .enumerate()
        .map(|(i, p)| PointRow {
            index: (i + 1).to_string(),
            sizes: term_names
                .iter()
                .map(|t| p.basis_sizes.0.get(t).map_or(DASH.to_string(), |v| v.to_string()))
                .collect(),
            p: p.p.to_string(),
            bic: ofixed(p.bic, 4),
            rbic: ofixed(p.rbic, 4),
            chosen: p.chosen_by.iter().map(|w| format!("◆ chosen ({w})")).collect::<Vec<_>>().join(" "),
            skipped: p.skipped.clone().unwrap_or_default(),
        })
        .collect();
    let mut sentences = Vec::new();
    for (who, edge) in [("classical", &m.classical_at_edge), ("robust", &m.robust_at_edge)] {
        if !edge.is_empty() {
            sentences.push(format!(
                "The {who} choice sits at the edge of the grid for {}; a wider grid may choose differently.",
                edge.join(", ")
            ));
        }
    }
    let (figure, no_figure) = if r.selection.len() < 2 {
        (None, Some("Only one grid point: there is nothing to compare, so no criterion plot is drawn.".to_string()))
    } else {
        (Some(criteria_figure(r)?), None)
    };
    Ok(SelectionCtx { method, term_names, points, figure, no_figure, sentences })
}

fn criteria_figure(r: &Results) -> Result<Figure, Error> {
    let rel = |vals: Vec<Option<f64>>| -> Vec<(f64, f64)> {
        let min = vals.iter().flatten().copied().fold(f64::INFINITY, f64::min);
        vals.iter().enumerate().map(|(i, v)| ((i + 1) as f64, v.map_or(f64::NAN, |v| v - min))).collect()
    };
    let bic = rel(r.selection.iter().map(|p| p.bic).collect());
    let rbic = rel(r.selection.iter().map(|p| p.rbic).collect());
    let pick = |who: &str, pts: &[(f64, f64)]| -> Vec<(f64, f64)> {
        r.selection.iter().zip(pts).filter(|(p, _)| p.chosen_by.contains(&who)).map(|(_, q)| *q).collect()
    };
    let chosen_c = pick("classical", &bic);
    let chosen_r = pick("robust", &rbic);
    let desc = format!(
        "Both criteria over {} grid points, each shown relative to its own minimum. The classical choice is point {} and the robust choice is point {}.",
        r.selection.len(),
        chosen_c.first().map_or(DASH.to_string(), |p| format!("{}", p.0 as usize)),
        chosen_r.first().map_or(DASH.to_string(), |p| format!("{}", p.0 as usize)),
    );
    let spec = ChartSpec {
        id: "fig-4-1".into(),
        title: "Selection criteria over the grid".into(),
        desc,
        x_label: "grid point (numbered as in the table)".into(),
        y_label: "criterion minus its minimum".into(),
        layers: vec![
            Layer {
                kind: LayerKind::Line { points: bic.clone(), dashed: false, width: 2 },
                ink: Ink::Classical,
                label: "BIC (classical)".into(),
            },
            Layer {
                kind: LayerKind::Points { points: bic, shape: Shape::Dot, size: 3, opacity: 1.0 },
                ink: Ink::Classical,
                label: String::new(),
            },
            Layer {
                kind: LayerKind::Line { points: rbic.clone(), dashed: true, width: 2 },
                ink: Ink::Robust,
                label: "RBIC (robust)".into(),
            },
            Layer {
                kind: LayerKind::Points { points: rbic, shape: Shape::Ring, size: 3, opacity: 1.0 },
                ink: Ink::Robust,
                label: String::new(),
            },
            Layer {
                kind: LayerKind::Points { points: chosen_c, shape: Shape::Triangle, size: 8, opacity: 1.0 },
                ink: Ink::Classical,
                label: "chosen (classical)".into(),
            },
            Layer {
                kind: LayerKind::Points { points: chosen_r, shape: Shape::Square, size: 6, opacity: 1.0 },
                ink: Ink::Robust,
                label: "chosen (robust)".into(),
            },
        ],
        legend: LegendAt::UpperRight,
        y_include: vec![0.0],
        y_range: None,
    };
    plots::draw(&spec)
}

fn fits_section(r: &Results) -> FitsCtx {
    let fits: Vec<(&str, Option<&FitOut>)> = vec![
        ("Classical (all rows)", Some(&r.fits.classical)),
        ("Robust (all rows)", Some(&r.fits.robust)),
        ("Classical without flagged rows", r.fits.classical_without_flagged.as_ref()),
    ];
    let fit_names = fits.iter().map(|(n, _)| (*n).to_string()).collect();
    let coefficients: Vec<CoefRow> = r
        .sensitivity
        .coefficients
        .iter()
        .map(|c| {
            let cells = fits
                .iter()
                .map(|(_, f)| match f.and_then(|f| find_coef(f, &c.name)) {
                    Some(co) => CoefCell {
                        estimate: osig(co.estimate),
                        std_error: osig(co.std_error),
                        interval: format!("{} to {}", osig(co.lower), osig(co.upper)),
                    },
                    None => CoefCell { estimate: DASH.into(), std_error: DASH.into(), interval: DASH.into() },
                })
                .collect();
            let mut marks = Vec::new();
            if c.sign_changes {
                marks.push("▲ sign changes");
            }
            if c.significance_changes {
                marks.push("● significance changes");
            }
            CoefRow { name: c.name.clone(), cells, marker: marks.join(" ") }
        })
        .collect();
    let changed: Vec<String> = r
        .sensitivity
        .coefficients
        .iter()
        .filter(|c| c.sign_changes || c.significance_changes)
        .map(|c| {
            let what = match (c.sign_changes, c.significance_changes) {
                (true, true) => "sign and significance",
                (true, false) => "sign",
                _ => "significance",
            };
            format!("{} ({what})", c.name)
        })
        .collect();
    let change_sentence = if changed.is_empty() {
        "No linear effect changes sign or significance (95% interval excluding zero) across the three fits.".to_string()
    } else {
        format!("The conclusion changes across the three fits for: {}.", changed.join(", "))
    };
    let no_coefficients = coefficients.is_empty().then(|| "The model has no linear coefficients.".to_string());
    let mut summary = Vec::new();
    for (name, f) in &fits {
        if let Some(f) = f {
            summary.push(FitSummaryRow {
                fit: (*name).to_string(),
                method: f.method.clone(),
                loss: match f.tuning {
                    Some(t) => format!("{}, tuning {}", f.loss, sig(t, 4)),
                    None => f.loss.clone(),
                },
                scale: osig(f.scale),
                r_squared: ofixed(f.r_squared, 3),
                rows: f.n.to_string(),
                coefficients: f.p.to_string(),
                sizes: sizes_text(&f.basis_sizes, &term_order(r)),
                termination: f.termination.describe(),
            });
        }
    }
    let (start, start_none) = match &r.fits.robust.start {
        Some(s) => (
            vec![
                kv("Start", s.kind.clone()),
                kv("S-scale", osig(s.s_scale)),
                kv("S-estimate basis sizes", sizes_text(&s.s_basis_sizes, &term_order(r))),
                kv("Random subsamples drawn", s.subsamples.to_string()),
                kv("Singular subsamples redrawn", s.singular_redraws.to_string()),
                kv("Rows in the search", s.search_rows.to_string()),
                kv("Seed", s.seed.to_string()),
                kv("S-estimate iteration", s.termination.describe()),
            ],
            None,
        ),
        None => {
            (Vec::new(), Some("The robust fit started from least squares; no S-estimate was computed.".to_string()))
        }
    };
    FitsCtx {
        fit_names,
        coefficients,
        no_coefficients,
        marker_legend: "Markers: ▲ sign changes — the estimate is positive in one fit and negative in another; ● significance changes — the 95% interval excludes zero in one fit but not in another.".into(),
        change_sentence,
        summary,
        start,
        start_none,
    }
}

fn smooth_section(a: &Analysis, r: &Results, flagged: &[bool]) -> Result<SmoothCtx, Error> {
    let rd = &a.selection.robust_design;
    let rf = &a.selection.robust_fit;
    let mut terms = Vec::new();
    for (t, enc) in rd.smooth.iter().enumerate() {
        let column = enc.column.clone();
        let Some(x) = a.frame.numeric(&column) else {
            continue;
        };
        let partial = fit::partial_fit(rd, rf, t);
        let n = x.len().min(partial.len()).min(rf.residuals.len());
        let shown = plots::thin(n, MAX_POINTS, flagged);
        let k = n.div_ceil(MAX_POINTS).max(1);
        let mut pts = Vec::new();
        let mut fl = Vec::new();
        for &i in &shown {
            let p = (x[i], partial[i] + rf.residuals[i]);
            if flagged.get(i).copied().unwrap_or(false) {
                fl.push(p);
            } else {
                pts.push(p);
            }
        }
        let mut sorted: Vec<f64> = x.iter().copied().filter(|v| v.is_finite()).collect();
        sorted.sort_unstable_by(f64::total_cmp);
        let rug: Vec<f64> = plots::thin(sorted.len(), MAX_RUG, &[]).into_iter().map(|i| sorted[i]).collect();
        let curve_of = |f: Option<&FitOut>| {
            f.and_then(|f| f.smooth.iter().find(|s| s.column == column)).map(|s| {
                let v = |o: &Vec<Option<f64>>| o.iter().map(|v| v.unwrap_or(f64::NAN)).collect::<Vec<f64>>();
                (s.grid.clone(), v(&s.curve), v(&s.lower), v(&s.upper))
            })
        };
        let robust = curve_of(Some(&r.fits.robust));
        let classical = curve_of(Some(&r.fits.classical));
        let without = curve_of(r.fits.classical_without_flagged.as_ref());
        // The y range comes from the unflagged points and the curves, so gross outliers do not flatten
        // the curves; flagged points beyond it are drawn at the edge with their own marker.
        let mut ys: Vec<f64> = pts.iter().map(|p| p.1).collect();
        for c in [&robust, &classical, &without].into_iter().flatten() {
            ys.extend(c.1.iter().chain(&c.2).chain(&c.3).copied());
        }
        let (ylo, yhi) = ys
            .iter()
            .copied()
            .filter(|v| v.is_finite())
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(l, h), v| (l.min(v), h.max(v)));
        let y_range = (ylo.is_finite() && yhi > ylo).then(|| {
            let pad = (yhi - ylo) * 0.06;
            (ylo - pad, yhi + pad)
        });
        let (fl_in, fl_out): (Vec<Point>, Vec<Point>) = match y_range {
            Some((lo, hi)) => {
                let (inside, outside): (Vec<_>, Vec<_>) = fl.iter().partition(|p| p.1 >= lo && p.1 <= hi);
                (inside, outside.into_iter().map(|p| (p.0, p.1.clamp(lo, hi))).collect())
            }
            None => (fl.clone(), Vec::new()),
        };
        let mut layers = Vec::new();
        if let Some((g, _, lo, hi)) = &robust {
            layers.push(Layer {
                kind: LayerKind::Band { x: g.clone(), lower: lo.clone(), upper: hi.clone(), opacity: 0.2 },
                ink: Ink::Robust,
                label: "robust 95% pointwise band".into(),
            });
        }
        layers.push(Layer {
            kind: LayerKind::Points { points: pts, shape: Shape::Dot, size: 2, opacity: 0.4 },
            ink: Ink::Robust,
            label: "robust partial residual".into(),
        });
        let n_flag_shown = fl.len();
        let n_flag_edge = fl_out.len();
        if !fl_in.is_empty() {
            layers.push(Layer {
                kind: LayerKind::Points { points: fl_in, shape: Shape::Cross, size: 4, opacity: 1.0 },
                ink: Ink::Flag,
                label: "flagged row".into(),
            });
        }
        if !fl_out.is_empty() {
            layers.push(Layer {
                kind: LayerKind::Points { points: fl_out, shape: Shape::Triangle, size: 5, opacity: 1.0 },
                ink: Ink::Flag,
                label: "flagged row beyond the range (at the edge)".into(),
            });
        }
        let line = |c: &(Vec<f64>, Vec<f64>, Vec<f64>, Vec<f64>)| {
            c.0.iter().copied().zip(c.1.iter().copied()).collect::<Vec<_>>()
        };
        if let Some(c) = &classical {
            layers.push(Layer {
                kind: LayerKind::Line { points: line(c), dashed: false, width: 2 },
                ink: Ink::Classical,
                label: "classical curve".into(),
            });
        }
        if let Some(c) = &without {
            layers.push(Layer {
                kind: LayerKind::Line { points: line(c), dashed: true, width: 2 },
                ink: Ink::Without,
                label: "classical without flagged rows".into(),
            });
        }
        if let Some(c) = &robust {
            layers.push(Layer {
                kind: LayerKind::Line { points: line(c), dashed: false, width: 3 },
                ink: Ink::Robust,
                label: "robust curve".into(),
            });
        }
        layers.push(Layer {
            kind: LayerKind::Rug { xs: rug.clone() },
            ink: Ink::Text,
            label: "data x values (rug)".into(),
        });
        let (xmin, xmax) = (sorted.first().copied().unwrap_or(f64::NAN), sorted.last().copied().unwrap_or(f64::NAN));
        let curve_range = robust.as_ref().map_or(String::new(), |c| {
            let f: Vec<f64> = c.1.iter().copied().filter(|v| v.is_finite()).collect();
            let lo = f.iter().copied().fold(f64::INFINITY, f64::min);
            let hi = f.iter().copied().fold(f64::NEG_INFINITY, f64::max);
            format!(" The robust curve runs from {} to {}.", sig(lo, 4), sig(hi, 4))
        });
        let edge = if n_flag_edge > 0 {
            format!(", of which {n_flag_edge} lie beyond the plotted range and are drawn as triangles at its edge")
        } else {
            String::new()
        };
        let desc = format!(
            "Robust curve of {column} over {} to {} with its pointwise 95% band, the classical curve{}; {} of {n} robust partial residuals shown ({}, {}); {} marked with crosses{edge}; a rug of {} x values.{curve_range}",
            sig(xmin, 4),
            sig(xmax, 4),
            if without.is_some() { " and the classical curve without flagged rows (dashed)" } else { "" },
            shown.len(),
            if k == 1 { "every row".to_string() } else { format!("every {} row", ordinal(k)) },
            flagged_kept_words(&flagged[..flagged.len().min(n)]),
            plural(n_flag_shown, "flagged row", "flagged rows"),
            rug.len()
        );
        let number = format!("{}", t + 1);
        let figure = plots::draw(&ChartSpec {
            id: format!("fig-6-{number}"),
            title: format!("Smooth effect of {column}"),
            desc,
            x_label: column.clone(),
            y_label: format!("partial effect on {}", a.study.response),
            layers,
            legend: LegendAt::UpperLeft,
            y_include: vec![],
            y_range,
        })?;
        let mut moves = Vec::new();
        if let Some(m) = r.sensitivity.curves.iter().find(|c| c.column == column) {
            moves.push(format!(
                "Largest distance of the classical curve from the robust curve: {} robust band half-widths (median half-width of the robust band).",
                ofixed(m.classical_move, 2)
            ));
            match m.without_flagged_move {
                Some(v) => moves.push(format!(
                    "Largest distance of the classical curve without flagged rows from the robust curve: {} half-widths.",
                    fixed(v, 2)
                )),
                None => moves.push("No classical refit without flagged rows was made, so there is no third curve.".into()),
            }
        }
        terms.push(SmoothTermCtx { number, column, figure, moves });
    }
    let none = terms.is_empty().then(|| "The model has no smooth terms.".to_string());
    Ok(SmoothCtx {
        terms,
        none,
        intro: "Each curve is centred to average zero over the data rows. Points are robust partial residuals: the term's robust partial fit plus the robust residual.".into(),
    })
}

/// How the flagged rows of a thinned plot were kept: all of them, or every j-th (see `plots::thin`).
fn flagged_kept_words(flagged: &[bool]) -> String {
    match plots::kept_step(flagged, MAX_POINTS) {
        1 => "all flagged rows kept".to_string(),
        j => format!("every {} flagged row kept", ordinal(j)),
    }
}

fn diagnostics_section(a: &Analysis, r: &Results, scaled: &[f64], flagged: &[bool]) -> Result<DiagnosticsCtx, Error> {
    let rf = &a.selection.robust_fit;
    let n = scaled.len();
    let cutoff = r.outliers.cutoff;
    let cut_label = format!("±cutoff {}", short(cutoff));
    let shown = plots::thin(n, MAX_POINTS, flagged);
    let k = n.div_ceil(MAX_POINTS).max(1);
    let thin_words = if k == 1 {
        "all rows shown".to_string()
    } else {
        format!("every {} row shown, {}", ordinal(k), flagged_kept_words(flagged))
    };
    let n_flagged = flagged.iter().filter(|f| **f).count();
    let split = |f: &dyn Fn(usize) -> (f64, f64)| {
        let mut a = Vec::new();
        let mut b = Vec::new();
        for &i in &shown {
            if flagged.get(i).copied().unwrap_or(false) {
                b.push(f(i));
            } else {
                a.push(f(i));
            }
        }
        (a, b)
    };
    // Gross outliers would squash every residual plot: the scaled-residual axis stops at ±lim and rows
    // beyond it are drawn at the edge as triangles (they are all flagged, since lim > cutoff).
    let lim = (3.0 * cutoff).max(8.0);
    let beyond = scaled.iter().filter(|v| v.abs() > lim).count();
    let clip = beyond > 0;
    let y_clip = clip.then_some((-lim * 1.06, lim * 1.06));
    let edge_words = if clip {
        format!(
            "; the axis stops at ±{}, and {} beyond it ({}drawn at its edge as triangles)",
            short(lim),
            plural(beyond, "row lies", "rows lie"),
            if n <= MAX_POINTS && plots::kept_step(flagged, MAX_POINTS) == 1 { "" } else { "those shown are " }
        )
    } else {
        String::new()
    };
    let points_layers = |a: Vec<(f64, f64)>, b: Vec<(f64, f64)>, label: &str| {
        let mut v = vec![Layer {
            kind: LayerKind::Points { points: a, shape: Shape::Dot, size: 2, opacity: 0.45 },
            ink: Ink::Robust,
            label: label.to_string(),
        }];
        let (inside, edge): (Vec<Point>, Vec<Point>) = b.into_iter().partition(|p| p.1.abs() <= lim);
        if !inside.is_empty() {
            v.push(Layer {
                kind: LayerKind::Points { points: inside, shape: Shape::Cross, size: 4, opacity: 1.0 },
                ink: Ink::Flag,
                label: "flagged row".into(),
            });
        }
        if !edge.is_empty() {
            let edge = edge.into_iter().map(|p| (p.0, p.1.signum() * lim)).collect();
            v.push(Layer {
                kind: LayerKind::Points { points: edge, shape: Shape::Triangle, size: 4, opacity: 1.0 },
                ink: Ink::Flag,
                label: format!("flagged row beyond ±{} (at the edge)", short(lim)),
            });
        }
        v
    };
    let mut figures = Vec::new();

    // 7.1 scaled residuals against fitted values.
    let (p, f) = split(&|i| (rf.fitted_at(&a.selection.robust_design.y, i), scaled[i]));
    let mut layers = points_layers(p, f, "row");
    layers.push(Layer {
        kind: LayerKind::HLines { ys: vec![-cutoff, cutoff], dashed: true },
        ink: Ink::Reference,
        label: cut_label.clone(),
    });
    figures.push(plots::draw(&ChartSpec {
        id: "fig-7-1".into(),
        title: "Scaled robust residuals against fitted values".into(),
        desc: format!(
            "Scaled robust residuals of {n} rows against the robust fitted values ({thin_words}), with dashed lines at ±{}; {} beyond them{}, marked with crosses{edge_words}.",
            short(cutoff),
            plural(n_flagged, "row lies", "rows lie"),
            if plots::kept_step(flagged, MAX_POINTS) == 1 { String::new() } else { format!(" ({} of them shown)", shown.iter().filter(|&&i| flagged.get(i).copied().unwrap_or(false)).count()) }
        ),
        x_label: format!("robust fitted {}", a.study.response),
        y_label: "scaled robust residual".into(),
        layers,
        legend: LegendAt::UpperRight,
        y_include: vec![-cutoff, cutoff],
        y_range: y_clip,
    })?);

    // 7.2 normal QQ plot, plotting positions (i − 0.5)/n.
    let mut order: Vec<usize> = (0..n).filter(|&i| scaled[i].is_finite()).collect();
    // Ties are broken by row, so the unstable sort has one result.
    order.sort_unstable_by(|&x, &y| scaled[x].total_cmp(&scaled[y]).then(x.cmp(&y)));
    let m = order.len();
    let flagged_sorted: Vec<bool> = (0..m).map(|j| flagged.get(order[j]).copied().unwrap_or(false)).collect();
    let mut q_idx = plots::thin(m, MAX_POINTS, &flagged_sorted);
    q_idx.extend((0..m.min(25)).chain(m.saturating_sub(25)..m));
    q_idx.sort_unstable();
    q_idx.dedup();
    let mut qp = Vec::new();
    let mut qf = Vec::new();
    for &j in &q_idx {
        let th = crate::dist::normal_quantile((j as f64 + 0.5) / m as f64);
        let pt = (th, scaled[order[j]]);
        if flagged.get(order[j]).copied().unwrap_or(false) {
            qf.push(pt);
        } else {
            qp.push(pt);
        }
    }
    let ends: Vec<f64> = qp.iter().chain(&qf).map(|p| p.0).collect();
    let lo = ends.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = ends.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let mut layers = points_layers(qp, qf, "row (sorted)");
    if lo.is_finite() && hi.is_finite() {
        layers.insert(
            0,
            Layer {
                kind: LayerKind::Line { points: vec![(lo, lo), (hi, hi)], dashed: true, width: 1 },
                ink: Ink::Reference,
                label: "y = x (normal reference)".into(),
            },
        );
    }
    figures.push(plots::draw(&ChartSpec {
        id: "fig-7-2".into(),
        title: "Normal quantile plot of scaled robust residuals".into(),
        desc: format!(
            "Sorted scaled robust residuals of {m} rows against standard normal quantiles at plotting positions (i − 0.5)/n; {} points shown (the 25 most extreme at each end, {} and a regular thinning of the rest); the dashed line is y = x{edge_words}.",
            q_idx.len(),
            match plots::kept_step(&flagged_sorted, MAX_POINTS) {
                1 => "every flagged row".to_string(),
                j => format!("every {} flagged row", ordinal(j)),
            }
        ),
        x_label: "standard normal quantile".into(),
        y_label: "scaled robust residual".into(),
        layers,
        legend: LegendAt::UpperLeft,
        y_include: vec![],
        y_range: y_clip,
    })?);

    // 7.3 horizontal boxplot with Tukey fences.
    let b = &r.outliers.boxplot;
    if let (Some(q1), Some(med), Some(q3), Some(lf), Some(uf)) = (b.q1, b.median, b.q3, b.lower_fence, b.upper_fence) {
        let inside: Vec<f64> = scaled.iter().copied().filter(|v| v.is_finite() && *v >= lf && *v <= uf).collect();
        let wlo = inside.iter().copied().fold(q1, f64::min);
        let whi = inside.iter().copied().fold(q3, f64::max);
        let outside: Vec<f64> = scaled.iter().copied().filter(|v| v.is_finite() && (*v < lf || *v > uf)).collect();
        let out_idx = plots::thin(outside.len(), 600, &[]);
        let out_pts: Vec<(f64, f64)> = out_idx.iter().map(|&i| (outside[i].clamp(-lim, lim), 0.5)).collect();
        let (y0, y1) = (0.3, 0.7);
        let segs = vec![
            ((q1, y0), (q3, y0)),
            ((q1, y1), (q3, y1)),
            ((q1, y0), (q1, y1)),
            ((q3, y0), (q3, y1)),
            ((wlo, 0.5), (q1, 0.5)),
            ((q3, 0.5), (whi, 0.5)),
            ((wlo, 0.4), (wlo, 0.6)),
            ((whi, 0.4), (whi, 0.6)),
        ];
        let mut layers = vec![
            Layer {
                kind: LayerKind::Segments { segments: segs, width: 2 },
                ink: Ink::Robust,
                label: "quartile box and whiskers".into(),
            },
            Layer {
                kind: LayerKind::Segments { segments: vec![((med, y0), (med, y1))], width: 3 },
                ink: Ink::Classical,
                label: "median".into(),
            },
            Layer {
                kind: LayerKind::VLines { xs: vec![lf, uf], dashed: true },
                ink: Ink::Reference,
                label: "Tukey fences (1.5 IQR)".into(),
            },
        ];
        if !out_pts.is_empty() {
            layers.push(Layer {
                kind: LayerKind::Points { points: out_pts, shape: Shape::Ring, size: 3, opacity: 1.0 },
                ink: Ink::Flag,
                label: "row outside the fences".into(),
            });
        }
        figures.push(plots::draw(&ChartSpec {
            id: "fig-7-3".into(),
            title: "Boxplot of scaled robust residuals".into(),
            desc: format!(
                "Quartiles {}, {}, {} ({}); fences at {} and {}; whiskers to {} and {}; {} outside the fences{}.",
                fixed(q1, 2),
                fixed(med, 2),
                fixed(q3, 2),
                b.quartiles,
                fixed(lf, 2),
                fixed(uf, 2),
                fixed(wlo, 2),
                fixed(whi, 2),
                plural(b.n_outside, "row", "rows"),
                if clip {
                    format!(" (the axis stops at ±{}; rows beyond it are drawn at its edge)", short(lim))
                } else {
                    String::new()
                }
            ),
            x_label: "scaled robust residual".into(),
            y_label: String::new(),
            layers,
            legend: LegendAt::UpperRight,
            y_include: vec![0.0, 1.2],
            y_range: None,
        })?);
    }

    // 7.4 histogram of robust weights.
    let mut sentences = Vec::new();
    match &rf.weights {
        Some(w) if !w.is_empty() => {
            let bins = 20usize;
            let mut counts = vec![0usize; bins];
            for &v in w.iter().filter(|v| v.is_finite()) {
                let j = ((v.clamp(0.0, 1.0) * bins as f64) as usize).min(bins - 1);
                counts[j] += 1;
            }
            let bars: Vec<(f64, f64, f64)> = counts
                .iter()
                .enumerate()
                .map(|(j, c)| (j as f64 / bins as f64, (j + 1) as f64 / bins as f64, *c as f64))
                .collect();
            let below_half = w.iter().filter(|v| **v < 0.5).count();
            let zero = w.iter().filter(|v| **v == 0.0).count();
            figures.push(plots::draw(&ChartSpec {
                id: "fig-7-4".into(),
                title: "Histogram of robust weights".into(),
                desc: format!(
                    "Final robust weights of {} rows in {bins} bins of width 0.05 from 0 to 1; {} below 0.5, {} exactly 0.",
                    w.len(),
                    plural(below_half, "row has weight", "rows have weights"),
                    plural(zero, "row has weight", "rows have weight")
                ),
                x_label: "robust weight".into(),
                y_label: "rows".into(),
                layers: vec![Layer { kind: LayerKind::Bars { bars, opacity: 0.75 }, ink: Ink::Robust, label: "rows per bin".into() }],
                legend: LegendAt::UpperLeft,
                y_include: vec![0.0],
                y_range: None,
            })?);
        }
        _ => sentences.push("The robust fit reports no weights, so no weight histogram is drawn.".into()),
    }

    // 7.5 scaled residual against leverage.
    let hat = &a.sensitivity.leverage.hat;
    let thr = a.sensitivity.leverage.threshold;
    let keep: Vec<bool> =
        (0..n).map(|i| flagged.get(i).copied().unwrap_or(false) || hat.get(i).is_some_and(|h| *h > thr)).collect();
    let lev_idx = plots::thin(n.min(hat.len()), MAX_POINTS, &keep);
    let mut lp = Vec::new();
    let mut lf = Vec::new();
    for &i in &lev_idx {
        let pt = (hat[i], scaled[i]);
        if flagged.get(i).copied().unwrap_or(false) {
            lf.push(pt);
        } else {
            lp.push(pt);
        }
    }
    let mut layers = points_layers(lp, lf, "row");
    layers.push(Layer {
        kind: LayerKind::VLines { xs: vec![thr], dashed: true },
        ink: Ink::Classical,
        label: format!("2p/n = {}", fixed(thr, 3)),
    });
    layers.push(Layer {
        kind: LayerKind::HLines { ys: vec![-cutoff, cutoff], dashed: true },
        ink: Ink::Reference,
        label: cut_label,
    });
    figures.push(plots::draw(&ChartSpec {
        id: "fig-7-5".into(),
        title: "Scaled robust residuals against leverage".into(),
        desc: format!(
            "Scaled robust residuals against hat values of the robust design for {} shown rows{}; the dashed vertical line is 2p/n = {}; {} above it{edge_words}.",
            lev_idx.len(),
            match (n <= MAX_POINTS, plots::kept_step(&keep, MAX_POINTS)) {
                (true, _) => String::new(),
                (false, 1) => " (flagged and high-leverage rows all kept, a regular thinning of the rest)".to_string(),
                (false, j) => format!(" (every {} flagged or high-leverage row, a regular thinning of the rest)", ordinal(j)),
            },
            fixed(thr, 3),
            plural(a.sensitivity.leverage.high.len(), "row lies", "rows lie")
        ),
        x_label: "leverage (hat value)".into(),
        y_label: "scaled robust residual".into(),
        layers,
        legend: LegendAt::UpperRight,
        y_include: vec![-cutoff, cutoff],
        y_range: y_clip,
    })?);
    Ok(DiagnosticsCtx {
        intro: format!(
            "Residuals are the robust fit's residuals divided by the robust scale {}. Rows beyond ±{} are flagged and drawn as crosses.",
            osig(r.fits.robust.scale),
            short(cutoff)
        ),
        figures,
        sentences,
    })
}

fn outliers_section(r: &Results) -> OutliersCtx {
    let o = &r.outliers;
    let flagged_sentence = if o.n_flagged == 0 {
        format!(
            "No row has |scaled robust residual| above {}; about {} would be expected by chance under normal errors.",
            short(o.cutoff),
            fixed(o.expected_false, 1)
        )
    } else {
        format!(
            "{} |scaled robust residual| above {}; about {} would be expected by chance under normal errors (n × P(|Z| > {})).",
            plural(o.n_flagged, "row has", "rows have"),
            short(o.cutoff),
            fixed(o.expected_false, 1),
            short(o.cutoff)
        )
    };
    let flagged = o
        .flagged
        .iter()
        .take(MAX_FLAGGED_LISTED)
        .map(|f| FlagRow {
            row: f.row.clone(),
            line: f.line.to_string(),
            residual: osig(f.residual),
            scaled: ofixed(f.scaled_residual, 2),
            weight: ofixed(f.weight, 3),
        })
        .collect();
    let flagged_cap = (o.flagged.len() > MAX_FLAGGED_LISTED).then(|| {
        format!(
            "Only the first {MAX_FLAGGED_LISTED} of {} flagged rows are listed (in data order); rows.csv has all of them.",
            o.flagged.len()
        )
    });
    let b = &o.boxplot;
    let boxplot = vec![format!(
        "Boxplot view: quartiles {}, {}, {}; Tukey fences (1.5 IQR) at {} and {}; {} outside the fences. Quartiles by {}.",
        ofixed(b.q1, 2),
        ofixed(b.median, 2),
        ofixed(b.q3, 2),
        ofixed(b.lower_fence, 2),
        ofixed(b.upper_fence, 2),
        plural(b.n_outside, "row lies", "rows lie"),
        b.quartiles
    )];
    let leverage_sentence = if o.high_leverage.is_empty() {
        format!("No row has leverage above 2p/n = {}.", fixed(o.leverage_threshold, 3))
    } else {
        format!(
            "{} leverage above 2p/n = {} (robust design). High leverage is flagged separately from large residuals.",
            plural(o.high_leverage.len(), "row has", "rows have"),
            fixed(o.leverage_threshold, 3)
        )
    };
    let leverage = o
        .high_leverage
        .iter()
        .take(MAX_LEVERAGE_LISTED)
        .map(|l| LeverageRow { row: l.row.clone(), line: l.line.to_string(), leverage: ofixed(l.leverage, 3) })
        .collect();
    let leverage_cap = (o.high_leverage.len() > MAX_LEVERAGE_LISTED).then(|| {
        format!(
            "Only the first {MAX_LEVERAGE_LISTED} of {} high-leverage rows are listed; rows.csv has every hat value.",
            o.high_leverage.len()
        )
    });
    let s = &r.sensitivity;
    let mut rerun = Vec::new();
    if o.n_flagged == 0 {
        rerun.push("Nothing was flagged, so nothing was refitted without flagged rows.".into());
    } else {
        match (&s.classical_rerun_basis_sizes, s.classical_rerun_changes_size) {
            (Some(sz), Some(changes)) => rerun.push(format!(
                "Rerunning the classical selection without the flagged rows chooses basis sizes {}: {}.",
                sizes_text(sz, &term_order(r)),
                if changes { "the size changes" } else { "the same as with all rows" }
            )),
            _ => rerun.push("The classical selection was not rerun without the flagged rows (refit turned off, or no grid point possible).".into()),
        }
        match s.robust_largest_move_in_se {
            Some(v) => rerun.push(format!(
                "Refitting the robust model without the flagged rows moves its linear coefficients by at most {} robust standard errors.",
                fixed(v, 2)
            )),
            None => rerun.push("The robust model was not refitted without the flagged rows.".into()),
        }
    }
    let influence_names: Vec<String> =
        s.influence.first().map(|i| i.dfbetas.iter().map(|d| d.name.clone()).collect()).unwrap_or_default();
    let influence = s
        .influence
        .iter()
        .map(|i| InfluenceRow {
            row: i.row.clone(),
            line: i.line.to_string(),
            values: i.dfbetas.iter().map(|d| ofixed(d.value, 2)).collect(),
            largest: ofixed(i.largest, 2),
        })
        .collect();
    let influence_sentence = if s.influence.is_empty() {
        if o.n_flagged == 0 {
            "No row was flagged, so no leave-one-out influence was computed.".into()
        } else {
            "Leave-one-out influence was not computed (turned off in the spec).".into()
        }
    } else {
        "DFBETAS of each linear coefficient in the classical fit when one flagged row alone is left out (the change in standard errors of the leave-one-out fit; |DFBETAS| above 2/√n is often taken as notable).".into()
    };
    let influence_cap = s.influence_capped.then(|| {
        format!(
            "Influence was computed for the {} flagged rows with the largest |scaled residual| only (cap {}).",
            s.influence.len(),
            crate::sensitivity::MAX_INFLUENCE_ROWS
        )
    });
    OutliersCtx {
        flagged_sentence,
        flagged,
        flagged_cap,
        boxplot,
        leverage_sentence,
        leverage,
        leverage_cap,
        rerun,
        influence_sentence,
        influence_names,
        influence,
        influence_cap,
    }
}

/// 1st, 2nd, 3rd, 4th, … 11th, 12th, 13th, 21st …
fn ordinal(k: usize) -> String {
    let suffix = match (k % 10, k % 100) {
        (_, 11..=13) => "th",
        (1, _) => "st",
        (2, _) => "nd",
        (3, _) => "rd",
        _ => "th",
    };
    format!("{k}{suffix}")
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn significant_digits() {
        assert_eq!(sig(1234.5678, 4), "1235");
        assert_eq!(sig(0.00123456, 4), "0.001235");
        assert_eq!(sig(9.99996, 4), "10.00");
        assert_eq!(sig(-0.00001, 4), "-1.000e-5");
        assert_eq!(sig(12345678.0, 4), "1.235e7");
        assert_eq!(sig(0.0, 4), "0");
        assert_eq!(sig(f64::NAN, 4), "—");
        assert_eq!(fixed(-0.0001, 2), "0.00");
    }

    #[test]
    fn notes_escape_raw_html_and_drop_urls() {
        let h =
            notes_html("Hello <b>html</b>\n\n<script>alert(1)</script>\n\n[site](https://example.org) ![pic](x.png)");
        assert!(!h.contains("<b>"), "{h}");
        assert!(!h.contains("<script"), "{h}");
        assert!(h.contains("&lt;b&gt;html&lt;/b&gt;"), "{h}");
        assert!(!h.contains("example.org"), "{h}");
        assert!(!h.contains("x.png"), "{h}");
        assert!(h.contains("site"));
    }
}
