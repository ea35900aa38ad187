//! `knotwise init`: draft a commented study spec from a CSV file's columns.
//!
//! Numeric columns with many distinct values are proposed as smooth terms, numeric columns with few
//! distinct values as linear terms, text columns as categorical terms. Reading goes through `data`.

use std::path::Path;

use crate::data::{self, ColumnData, FrameRequest};
use crate::error::{Error, Result};

/// Distinct values at or above which a numeric column is proposed as a smooth term.
pub const SMOOTH_MIN_DISTINCT: usize = 10;

#[derive(Debug)]
struct ColumnProfile {
    name: String,
    numeric: bool,
    distinct: usize,
    note: Option<String>,
}

fn profile(path: &Path, display: &str) -> Result<Vec<ColumnProfile>> {
    let base = FrameRequest {
        path: path.to_path_buf(),
        display: display.to_string(),
        missing: vec!["".into(), "NA".into()],
        id: None,
        numeric: vec![],
        categorical: vec![],
    };
    let header = match data::load(&base) {
        Ok(f) => f.header,
        Err(e) if e.what().contains("no data rows") => return Err(e),
        Err(e) => return Err(e),
    };
    let mut out = Vec::new();
    for name in header {
        if name.trim().is_empty() {
            // The spec refuses a blank column name, so such a column cannot be proposed (found by
            // tests/fuzz_props.rs: a draft that did not parse).
            let note = Some("the column has no name in the header".to_string());
            out.push(ColumnProfile { name, numeric: false, distinct: 0, note });
            continue;
        }
        let numeric_req = FrameRequest { numeric: vec![name.clone()], ..base.clone() };
        match data::load(&numeric_req) {
            Ok(f) => {
                let mut v = f.numeric(&name).map(|s| s.to_vec()).unwrap_or_default();
                v.sort_by(|a, b| a.total_cmp(b));
                v.dedup();
                out.push(ColumnProfile { name, numeric: true, distinct: v.len(), note: None });
            }
            Err(_) => {
                let cat_req = FrameRequest { categorical: vec![(name.clone(), None)], ..base.clone() };
                match data::load(&cat_req) {
                    Ok(f) => {
                        let distinct = match f.column(&name).map(|c| &c.data) {
                            Some(ColumnData::Categorical { levels, .. }) => levels.len(),
                            _ => 0,
                        };
                        out.push(ColumnProfile { name, numeric: false, distinct, note: None });
                    }
                    Err(e) => {
                        out.push(ColumnProfile { name, numeric: false, distinct: 0, note: Some(e.what().to_string()) })
                    }
                }
            }
        }
    }
    Ok(out)
}

/// A YAML double-quoted scalar. The spec's own quoting, so control characters, quotes, backslashes and a
/// stray byte-order mark in a column name are escaped (a hand-made escape missed control characters:
/// found by tests/fuzz_props.rs, a NUL in a header made the draft unreadable).
fn yaml_string(s: &str) -> String {
    crate::spec::quote(s)
}

/// Text safe inside a YAML comment: escaped like a quoted scalar, without the quotes, so a carriage
/// return or control character in a column name or message cannot end the comment or break the YAML.
fn comment(s: &str) -> String {
    let q = crate::spec::quote(s);
    q[1..q.len() - 1].to_string()
}

/// The drafted spec text. The data path is written as given (relative to where the spec will be saved).
pub fn draft_spec(path: &Path, response: Option<&str>) -> Result<String> {
    let display = path.display().to_string();
    let cols = profile(path, &display)?;
    let resp = match response {
        Some(r) => {
            if !cols.iter().any(|c| c.name == r && c.numeric) {
                let names: Vec<&str> = cols.iter().filter(|c| c.numeric).map(|c| c.name.as_str()).collect();
                let mut e = Error::new(format!("`{r}` is not a numeric column of the data")).at(display.clone());
                if let Some(n) = crate::error::nearest(r, names.iter().copied()) {
                    e = e.hint(format!("did you mean `{n}`?"));
                }
                return Err(e);
            }
            r.to_string()
        }
        None => match cols.iter().find(|c| c.numeric) {
            Some(c) => c.name.clone(),
            None => {
                return Err(Error::new("no numeric column to use as the response")
                    .at(display)
                    .hint("a response must be numeric"))
            }
        },
    };
    let mut s = String::new();
    s.push_str("# Draft study spec written by `knotwise init`. Review every term before running:\n");
    s.push_str("# the proposals below come only from column types and counts of distinct values.\n");
    s.push_str("knotwise: 1\n");
    // The spec allows titles of at most 200 characters; a long column name is cut short.
    let short: String = resp.chars().take(100).collect();
    s.push_str(&format!("title: {}\n", yaml_string(&format!("Study of {short}"))));
    s.push_str("seed: 1\n");
    s.push_str("data:\n");
    s.push_str(&format!("  file: {}   # relative to this spec's folder\n", yaml_string(&display)));
    s.push_str("  missing: [\"\", \"NA\"]\n");
    s.push_str(&format!("response: {}\n", yaml_string(&resp)));
    let mut linear = String::new();
    let mut smooth = String::new();
    let mut skipped = String::new();
    for c in cols.iter().filter(|c| c.name != resp) {
        if let Some(note) = &c.note {
            skipped.push_str(&format!("#   {}: not proposed ({})\n", comment(&c.name), comment(note)));
        } else if c.numeric && c.distinct >= SMOOTH_MIN_DISTINCT {
            smooth.push_str(&format!(
                "  - column: {}   # numeric, {} distinct values\n",
                yaml_string(&c.name),
                c.distinct
            ));
        } else if c.numeric && c.distinct >= 2 {
            linear.push_str(&format!(
                "  - column: {}   # numeric, {} distinct values\n",
                yaml_string(&c.name),
                c.distinct
            ));
        } else if !c.numeric && c.distinct >= 2 && c.distinct <= 50 {
            linear.push_str(&format!(
                "  - column: {}   # text, {} levels\n    categorical: true\n",
                yaml_string(&c.name),
                c.distinct
            ));
        } else {
            skipped.push_str(&format!("#   {}: not proposed ({} distinct values)\n", comment(&c.name), c.distinct));
        }
    }
    s.push_str(if linear.is_empty() { "linear: []\n" } else { "linear:\n" });
    s.push_str(&linear);
    s.push_str(if smooth.is_empty() { "smooth: []\n" } else { "smooth:\n" });
    s.push_str(&smooth);
    if !skipped.is_empty() {
        s.push_str("# columns left out (an id column may go under data.id):\n");
        s.push_str(&skipped);
    }
    s.push_str("selection:\n  basis-sizes: [4, 5, 6, 7, 8]\n");
    s.push_str("outliers:\n  cutoff: 2.5\n");
    Ok(s)
}
