//! Placeholder report (replaced by the report module).
pub fn render(_a: &crate::analysis::Analysis, r: &crate::results::Results, _y: &str) -> crate::error::Result<String> {
    Ok(format!("<!doctype html><title>{}</title>", r.study.title))
}
