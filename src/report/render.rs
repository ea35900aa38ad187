//! Fill the compiled-in template with a [`ReportContext`]. HTML autoescaping is on for every value;
//! only our own CSS, the SVG figures (whose texts are escaped in `plots`) and the notes (rendered by
//! `context::notes_html` with raw HTML escaped) are inserted unescaped.

use minijinja::{AutoEscape, Environment, UndefinedBehavior};

use crate::error::Error;
use crate::report::context::ReportContext;

/// The report template (compiled in).
pub const TEMPLATE: &str = include_str!("../../templates/report.html.j2");
/// The report stylesheet (compiled in, inlined into a `<style>` element).
pub const CSS: &str = include_str!("../../templates/report.css");

/// Render the report HTML from a context.
pub fn render_context(ctx: &ReportContext) -> Result<String, Error> {
    let mut env = Environment::new();
    env.set_auto_escape_callback(|_| AutoEscape::Html);
    env.set_undefined_behavior(UndefinedBehavior::Strict);
    env.set_trim_blocks(true);
    env.set_lstrip_blocks(true);
    env.add_template("report.html", TEMPLATE)
        .map_err(|e| Error::new(format!("the report template is invalid: {e}")))?;
    let tmpl =
        env.get_template("report.html").map_err(|e| Error::new(format!("the report template is missing: {e}")))?;
    tmpl.render(minijinja::context! { r => ctx, css => CSS })
        .map_err(|e| Error::new(format!("cannot render the report: {e}")))
}
