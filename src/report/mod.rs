//! The HTML report (DESIGN.md §1, §6): one self-contained file with inline CSS and inline SVG, no
//! script and no external URL.
//!
//! `context` turns an [`Analysis`](crate::analysis::Analysis) and its [`Results`](crate::results::Results)
//! into one typed, pre-formatted context; `plots` draws the figures; `render` fills the template.
//! The report reads results; it never fits. It reads no clock: the date comes from the spec.

pub mod context;
pub mod plots;
pub mod render;

pub use context::ReportContext;

/// The complete report HTML for one run. `resolved_yaml` is the resolved spec (every default filled
/// in), shown verbatim in the model section.
pub fn render(
    analysis: &crate::analysis::Analysis,
    results: &crate::results::Results,
    resolved_yaml: &str,
) -> Result<String, crate::error::Error> {
    let ctx = context::build(analysis, results, resolved_yaml)?;
    render::render_context(&ctx)
}
