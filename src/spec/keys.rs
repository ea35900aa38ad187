//! Unknown-key check on the untyped YAML tree, before typed deserialization: every misspelt key is
//! reported with its full key path, its line and the nearest expected key.

use serde_yaml::Value;

use super::raw::*;
use super::Ctx;
use crate::error::{nearest, Result};

/// The display text of a mapping key (keys are normally strings).
pub(crate) fn key_text(k: &Value) -> String {
    match k {
        Value::String(s) => s.clone(),
        Value::Null => "null".into(),
        Value::Bool(b) => b.to_string(),
        Value::Number(n) => n.to_string(),
        _ => "(a list or mapping used as a key)".into(),
    }
}

fn check_map(ctx: &Ctx, v: &Value, path: &str, expected: &[&str], what: &str) -> Result<()> {
    let Value::Mapping(m) = v else { return Ok(()) };
    for k in m.keys() {
        let key = key_text(k);
        if !expected.contains(&key.as_str()) {
            let full = if path.is_empty() { key.clone() } else { format!("{path}.{key}") };
            let list = expected.iter().map(|e| format!("`{e}`")).collect::<Vec<_>>().join(", ");
            let hint = match nearest(&key, expected.iter().copied()) {
                Some(s) => format!("did you mean `{s}`? The keys of {what} are {list}"),
                None => format!("the keys of {what} are {list}"),
            };
            return Err(ctx.err(&full, format!("unknown key `{key}`"), hint));
        }
    }
    Ok(())
}

fn child<'a>(v: &'a Value, key: &str) -> Option<&'a Value> {
    match v {
        Value::Mapping(m) => m.get(key),
        _ => None,
    }
}

fn check_list(ctx: &Ctx, root: &Value, key: &str, expected: &[&str], what: &str) -> Result<()> {
    if let Some(Value::Sequence(items)) = child(root, key) {
        for (i, item) in items.iter().enumerate() {
            check_map(ctx, item, &format!("{key}[{i}]"), expected, what)?;
        }
    }
    Ok(())
}

/// Check every mapping in the spec for keys this version does not know.
pub(crate) fn check_unknown_keys(ctx: &Ctx, root: &Value) -> Result<()> {
    check_map(ctx, root, "", STUDY_KEYS, "the spec")?;
    let sections: [(&str, &[&str]); 6] = [
        ("data", DATA_KEYS),
        ("selection", SELECTION_KEYS),
        ("robust", ROBUST_KEYS),
        ("outliers", OUTLIERS_KEYS),
        ("sensitivity", SENSITIVITY_KEYS),
        ("report", REPORT_KEYS),
    ];
    for (name, keys) in sections {
        if let Some(v) = child(root, name) {
            check_map(ctx, v, name, keys, &format!("`{name}`"))?;
        }
    }
    check_list(ctx, root, "linear", LINEAR_KEYS, "a linear term")?;
    check_list(ctx, root, "smooth", SMOOTH_KEYS, "a smooth term")?;
    Ok(())
}
