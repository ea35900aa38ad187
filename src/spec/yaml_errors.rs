//! serde_yaml errors → our [`Error`]: the spec's name, the key path, the line and column, plain-words
//! wording of serde's type names, and a hint per key where one helps.

use super::Ctx;
use crate::error::{nearest, Error};

/// Remove serde_yaml's own " at line L column C" / " at position N" from a message: we print the
/// position in the location instead.
fn strip_marks(msg: &str) -> String {
    let mut out = String::with_capacity(msg.len());
    let mut rest = msg;
    while let Some(i) = rest.find(" at ") {
        let tail = &rest[i + 4..];
        let skip = mark_len(tail);
        if skip > 0 {
            out.push_str(&rest[..i]);
            rest = &tail[skip..];
        } else {
            out.push_str(&rest[..i + 4]);
            rest = tail;
        }
    }
    out.push_str(rest);
    out
}

/// Length of a leading "line L column C" or "position N", else 0.
fn mark_len(s: &str) -> usize {
    fn digits(s: &str) -> usize {
        s.bytes().take_while(u8::is_ascii_digit).count()
    }
    if let Some(r) = s.strip_prefix("line ") {
        let d = digits(r);
        if d > 0 {
            if let Some(r2) = r[d..].strip_prefix(" column ") {
                let d2 = digits(r2);
                if d2 > 0 {
                    return 5 + d + 8 + d2;
                }
            }
        }
    } else if let Some(r) = s.strip_prefix("position ") {
        let d = digits(r);
        if d > 0 {
            return 9 + d;
        }
    }
    0
}

/// serde's name of an expected type → words.
fn expected_words(e: &str) -> String {
    match e.trim() {
        "usize" | "u64" | "u32" => "a whole number (0 or more)".into(),
        "f64" | "f32" => "a number".into(),
        "a string" => "text".into(),
        "a boolean" => "true or false".into(),
        "a sequence" => "a list".into(),
        "option" => "a value".into(),
        other if other.starts_with("struct ") => "a mapping of keys".into(),
        other => other.to_string(),
    }
}

/// serde's description of a found value → words.
fn found_words(f: &str) -> String {
    let f = f.trim();
    let unticked = |s: &str| s.trim().trim_matches('`').to_string();
    if let Some(s) = f.strip_prefix("string ") {
        format!("the text {s}")
    } else if let Some(s) = f.strip_prefix("integer ") {
        format!("the number {}", unticked(s))
    } else if let Some(s) = f.strip_prefix("floating point ") {
        format!("the number {}", unticked(s))
    } else if let Some(s) = f.strip_prefix("boolean ") {
        unticked(s)
    } else if f == "unit value" {
        "an empty value".into()
    } else if f == "sequence" {
        "a list".into()
    } else if f == "map" {
        "a mapping".into()
    } else {
        f.to_string()
    }
}

/// Rewrite serde's wording; returns the message and a hint of its own, if any.
fn reword(msg: &str) -> (String, Option<String>) {
    for prefix in ["invalid type: ", "invalid value: "] {
        if let Some(rest) = msg.strip_prefix(prefix) {
            // A whole number beyond 64 bits: serde_yaml says "integer `N` as u128, expected any YAML
            // value", which reads as nonsense; say what is wrong with the number instead.
            if let Some(n) = rest.strip_prefix("integer `").and_then(|r| r.split_once("` as ")).map(|(n, _)| n) {
                return (
                    format!("the number {n} is out of range; whole numbers are read from -9223372036854775808 to 18446744073709551615"),
                    None,
                );
            }
            if let Some(i) = rest.rfind(", expected ") {
                let found = found_words(&rest[..i]);
                let expected = expected_words(&rest[i + 11..]);
                return (format!("expected {expected}, found {found}"), None);
            }
        }
    }
    if let Some(rest) = msg.strip_prefix("unknown variant ") {
        // unknown variant `quantil`, expected `quantile` or `uniform`
        let ticked: Vec<&str> = rest.split('`').skip(1).step_by(2).collect();
        if let Some((given, options)) = ticked.split_first() {
            let list = options.iter().map(|o| format!("`{o}`")).collect::<Vec<_>>().join(" or ");
            let hint = match nearest(given, options.iter().copied()) {
                Some(s) => format!("did you mean `{s}`? The choices are {list}"),
                None => format!("the choices are {list}"),
            };
            return (format!("unknown choice `{given}`"), Some(hint));
        }
    }
    if let Some(rest) = msg.strip_prefix("duplicate field ") {
        return (format!("the key {rest} is given twice"), Some("remove one of them".into()));
    }
    if let Some(rest) = msg.strip_prefix("duplicate entry with key ") {
        let key = rest.trim_matches('"');
        return (format!("the key `{key}` is given twice"), Some("remove one of them".into()));
    }
    (msg.to_string(), None)
}

/// Key path with list indices removed, for the hint table.
fn generic(path: &str) -> String {
    let mut out = String::new();
    let mut skip = false;
    for c in path.chars() {
        match c {
            '[' => {
                skip = true;
                out.push_str("[]");
            }
            ']' => skip = false,
            _ if !skip => out.push(c),
            _ => {}
        }
    }
    out
}

/// What a key takes, for type errors.
fn key_hint(path: &str) -> Option<&'static str> {
    Some(match generic(path).as_str() {
        "knotwise" => "write `knotwise: 1` (the spec format version)",
        "title" | "response" | "data.file" | "data.id" | "date" | "data.sha256" | "report.notes" => {
            "write the value as text; quote it if it could be read as a number or true/false"
        }
        "seed" => "the seed is a whole number from 0 to 18446744073709551615, e.g. `seed: 4172`",
        "data" => "`data` is a mapping with at least `file: <path to the CSV>`",
        "data.missing" => "list the tokens that mark a missing value, e.g. `missing: [\"\", \"NA\"]`",
        "linear" => "`linear` is a list of terms, each `- column: <name>`",
        "smooth" => "`smooth` is a list of terms, each `- column: <name>`",
        "linear[]" | "smooth[]" => "each term is a mapping such as `- column: <name>`",
        "linear[].categorical" => "write `categorical: true` or `categorical: false`",
        "smooth[].degree" => "the degree is a whole number from 1 to 5 (3 is cubic)",
        "smooth[].basis-sizes" | "selection.basis-sizes" => {
            "list whole numbers of basis functions, e.g. `basis-sizes: [4, 5, 6]`"
        }
        "selection.bic-penalty" => "the penalty is a number of 0 or more (0.5 is the default)",
        "robust.efficiency" => "the efficiency is a number above 0.5 and below 1 (0.95 is the default)",
        "robust.subsamples" => "the number of subsamples is a whole number from 1 to 100000 (default 500)",
        "outliers.cutoff" => "the cutoff is a number above 0 and at most 10 (2.5 is the default)",
        "sensitivity.refit-without-flagged" | "sensitivity.influence" => "write `true` or `false`",
        _ => return None,
    })
}

/// Split serde_yaml's "path: message" into its two parts (the path has no spaces).
fn split_path(msg: &str) -> (Option<&str>, &str) {
    if let Some(i) = msg.find(": ") {
        let head = &msg[..i];
        if !head.is_empty() && !head.contains(' ') && head != "." {
            return (Some(head), &msg[i + 2..]);
        }
    }
    (None, msg)
}

/// The key named by a duplicate-key message.
fn duplicate_key(msg: &str) -> Option<&str> {
    if let Some(rest) = msg.strip_prefix("duplicate entry with key ") {
        return Some(rest.trim_matches('"'));
    }
    msg.strip_prefix("duplicate field ").map(|r| r.trim_matches('`'))
}

/// 1-based line of the second line that starts (after indentation) with `key:`.
fn second_occurrence(text: &str, key: &str) -> Option<usize> {
    let pattern = format!("{key}:");
    text.lines()
        .enumerate()
        .filter(|(_, l)| l.trim_start().trim_start_matches("- ").starts_with(&pattern))
        .nth(1)
        .map(|(i, _)| i + 1)
}

/// Map a serde_yaml error (from parsing the tree or from typed deserialization).
pub(crate) fn map(ctx: &Ctx, err: &serde_yaml::Error) -> Error {
    let full = strip_marks(&err.to_string());
    let (path, msg) = split_path(&full);
    let location = err.location();
    if msg.contains("repetition limit exceeded") {
        return Error::new("the spec expands YAML aliases too many times (is it an alias bomb?)")
            .at(ctx.spec)
            .hint("write the values out instead of nesting anchors (&) and aliases (*)");
    }
    if msg.contains("recursion limit exceeded") {
        let at = match location {
            Some(l) => format!("{}, line {}, column {}", ctx.spec, l.line(), l.column()),
            None => ctx.spec.to_string(),
        };
        return Error::new("the spec is nested too deeply")
            .at(at)
            .hint("a study spec needs a few levels of nesting at most");
    }
    let (what, own_hint) = reword(msg);
    if let Some(key) = duplicate_key(msg) {
        // serde_yaml points at the start of the mapping; the second occurrence is more useful.
        if let Some(line) = second_occurrence(ctx.text, key) {
            let at = match path {
                Some(p) => format!("{}, line {line}, key {p}", ctx.spec),
                None => format!("{}, line {line}", ctx.spec),
            };
            return Error::new(what).at(at).hint("remove one of them");
        }
    }
    match path {
        Some(p) => {
            let at = match location {
                Some(l) => format!("{}, line {}, key {p}", ctx.spec, l.line()),
                None => ctx.at(p),
            };
            let hint = own_hint.or_else(|| key_hint(p).map(str::to_string));
            let e = Error::new(what).at(at);
            match hint {
                Some(h) => e.hint(h),
                None => e,
            }
        }
        None => {
            let at = match &location {
                Some(l) => format!("{}, line {}, column {}", ctx.spec, l.line(), l.column()),
                None => ctx.spec.to_string(),
            };
            let line_has_tab = location
                .as_ref()
                .and_then(|l| ctx.text.lines().nth(l.line().saturating_sub(1)))
                .is_some_and(|line| line.contains('\t'));
            let tab_indent = location
                .as_ref()
                .and_then(|l| ctx.text.lines().nth(l.line().saturating_sub(1)))
                .is_some_and(|line| line.trim_start_matches(' ').starts_with('\t'));
            let hint = if line_has_tab {
                Some("indent with spaces: YAML does not allow tabs for indentation".to_string())
            } else {
                own_hint
            };
            if tab_indent {
                return Error::new("this is not valid YAML: the line is indented with a tab")
                    .at(at)
                    .hint(hint.unwrap_or_default());
            }
            let what = if what.starts_with("the key ") { what } else { format!("this is not valid YAML: {what}") };
            let e = Error::new(what).at(at);
            match hint {
                Some(h) => e.hint(h),
                None => e.hint("check the indentation and the quoting near this position"),
            }
        }
    }
}
