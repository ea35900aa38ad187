//! The one user-facing error type: what went wrong, where (file, line, column, key) and a suggested fix.
//!
//! Owns exit codes too. The numerical core has its own small error enums; `app` maps them into this type
//! with the names (columns, terms) the user knows.

use std::fmt;
use std::path::Path;

/// Process exit codes (DESIGN.md §3).
pub const EXIT_OK: u8 = 0;
/// The command ran but a check failed (verify mismatch, compare difference, `--strict`).
pub const EXIT_CHECK_FAILED: u8 = 1;
/// Usage, spec, data or I/O error; nothing was written.
pub const EXIT_INPUT: u8 = 2;

/// A boxed error so `Result<T>` stays one pointer wide.
pub struct Error(Box<Inner>);

struct Inner {
    what: String,
    location: Option<String>,
    hint: Option<String>,
    exit_code: u8,
}

pub type Result<T> = std::result::Result<T, Error>;

impl Error {
    /// An input error (exit code 2) with a message.
    pub fn new(what: impl Into<String>) -> Self {
        Error(Box::new(Inner { what: what.into(), location: None, hint: None, exit_code: EXIT_INPUT }))
    }

    /// Where the problem is, e.g. `data.csv, line 118, column "age"` or `study.yaml: key smooth[1].degree`.
    pub fn at(mut self, location: impl Into<String>) -> Self {
        self.0.location = Some(location.into());
        self
    }

    /// A suggested fix, printed on its own line after `hint:`.
    pub fn hint(mut self, hint: impl Into<String>) -> Self {
        self.0.hint = Some(hint.into());
        self
    }

    /// Change the exit code (use [`EXIT_CHECK_FAILED`] for a check that ran and failed).
    pub fn with_exit_code(mut self, code: u8) -> Self {
        self.0.exit_code = code;
        self
    }

    /// An I/O error on a named path.
    pub fn io(action: &str, path: &Path, err: &std::io::Error) -> Self {
        Error::new(format!("cannot {action}: {}", describe_io(err))).at(path.display().to_string())
    }

    pub fn what(&self) -> &str {
        &self.0.what
    }
    pub fn location(&self) -> Option<&str> {
        self.0.location.as_deref()
    }
    pub fn suggestion(&self) -> Option<&str> {
        self.0.hint.as_deref()
    }
    pub fn exit_code(&self) -> u8 {
        self.0.exit_code
    }
}

/// A short description of an I/O error without the OS error number, so messages are stable.
pub fn describe_io(err: &std::io::Error) -> String {
    use std::io::ErrorKind::*;
    match err.kind() {
        NotFound => "no such file or directory".into(),
        PermissionDenied => "permission denied".into(),
        AlreadyExists => "it already exists".into(),
        IsADirectory => "it is a directory".into(),
        NotADirectory => "a parent is not a directory".into(),
        _ => {
            let s = err.to_string();
            match s.find(" (os error") {
                Some(i) => s[..i].to_string(),
                None => s,
            }
        }
    }
}

impl fmt::Display for Error {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match &self.0.location {
            Some(loc) => write!(f, "{loc}: {}", self.0.what)?,
            None => write!(f, "{}", self.0.what)?,
        }
        if let Some(h) = &self.0.hint {
            write!(f, "\n  hint: {h}")?;
        }
        Ok(())
    }
}

impl fmt::Debug for Error {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        fmt::Display::fmt(self, f)
    }
}

impl std::error::Error for Error {}

/// Levenshtein distance, for "did you mean" suggestions.
pub fn edit_distance(a: &str, b: &str) -> usize {
    let a: Vec<char> = a.chars().collect();
    let b: Vec<char> = b.chars().collect();
    let mut prev: Vec<usize> = (0..=b.len()).collect();
    let mut cur = vec![0; b.len() + 1];
    for i in 1..=a.len() {
        cur[0] = i;
        for j in 1..=b.len() {
            let cost = usize::from(a[i - 1] != b[j - 1]);
            cur[j] = (prev[j] + 1).min(cur[j - 1] + 1).min(prev[j - 1] + cost);
        }
        std::mem::swap(&mut prev, &mut cur);
    }
    prev[b.len()]
}

/// The candidate nearest to `word` if it is close enough to be a likely misspelling.
pub fn nearest<'a, I: IntoIterator<Item = &'a str>>(word: &str, candidates: I) -> Option<&'a str> {
    let lower = word.to_lowercase();
    let mut best: Option<(usize, &str)> = None;
    for c in candidates {
        let d = edit_distance(&lower, &c.to_lowercase());
        if best.is_none_or(|(bd, _)| d < bd) {
            best = Some((d, c));
        }
    }
    let limit = (word.chars().count() / 3).max(2);
    best.filter(|(d, _)| *d <= limit).map(|(_, c)| c)
}

/// Text in double quotes with `"`, `\` and control characters escaped (a newline shows as `\n`), so a
/// column name, cell or key is shown verbatim on one line. The escapes are YAML's, so the same text
/// serves messages and the resolved spec.
pub fn quote(s: &str) -> String {
    let mut out = String::with_capacity(s.len() + 2);
    out.push('"');
    for c in s.chars() {
        match c {
            '"' => out.push_str("\\\""),
            '\\' => out.push_str("\\\\"),
            '\n' => out.push_str("\\n"),
            '\r' => out.push_str("\\r"),
            '\t' => out.push_str("\\t"),
            // YAML's escapes, so the same text serves messages and the resolved spec. Besides control
            // characters, YAML (and libyaml) refuse the byte-order mark and U+FFFE/U+FFFF unescaped
            // anywhere in a document (found by tests/fuzz_props.rs).
            c if c.is_control() && (c as u32) < 0x100 => out.push_str(&format!("\\x{:02x}", c as u32)),
            c if c.is_control() || matches!(c, '\u{feff}' | '\u{fffe}' | '\u{ffff}') => {
                out.push_str(&format!("\\u{:04x}", c as u32))
            }
            c => out.push(c),
        }
    }
    out.push('"');
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn nearest_key_suggestion() {
        assert_eq!(nearest("smoth", ["linear", "smooth", "response"]), Some("smooth"));
        assert_eq!(nearest("zzzzzz", ["linear", "smooth"]), None);
        assert_eq!(edit_distance("kitten", "sitting"), 3);
    }

    #[test]
    fn display_has_location_and_hint() {
        let e = Error::new("cannot read \"7o\" as a number").at("data.csv, line 3, column \"age\"").hint("fix it");
        assert_eq!(e.to_string(), "data.csv, line 3, column \"age\": cannot read \"7o\" as a number\n  hint: fix it");
        assert_eq!(e.exit_code(), EXIT_INPUT);
    }
}
