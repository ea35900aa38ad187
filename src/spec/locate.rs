//! Find the source line of a key path (`smooth[1].degree`) in block-style YAML text.
//!
//! serde_yaml's `Value` carries no positions, so the checker asks this scanner where a key was written.
//! It understands block mappings, block sequences (including the compact `key:\n- item` form), comments
//! and block scalars (`|`, `>`); for anything else (flow style, multi-line quoted keys) it falls back to
//! the nearest enclosing key it did find. A wrong guess costs only a less precise line number, never a
//! wrong message, so the scanner stays small.

use std::collections::HashMap;

/// Key path → 1-based line of the key.
pub(crate) struct Locator {
    lines: HashMap<String, usize>,
}

#[derive(Clone)]
enum Segment {
    Root,
    Key(String),
    Index(usize),
}

struct Frame {
    col: isize,
    seg: Segment,
    /// Items seen so far in a block sequence directly below this entry.
    next_index: usize,
}

fn path_of(stack: &[Frame]) -> String {
    let mut out = String::new();
    for f in stack {
        match &f.seg {
            Segment::Root => {}
            Segment::Key(k) => {
                if !out.is_empty() {
                    out.push('.');
                }
                out.push_str(k);
            }
            Segment::Index(i) => {
                out.push_str(&format!("[{i}]"));
            }
        }
    }
    out
}

/// The key at the start of `s` (`key: value` or `key:`), and the rest after the colon.
fn split_key(s: &str) -> Option<(String, &str)> {
    let (key, rest) = if let Some(q) = s.chars().next().filter(|c| *c == '"' || *c == '\'') {
        let end = s[1..].find(q)? + 1;
        (s[1..end].to_string(), &s[end + 1..])
    } else {
        let mut idx = None;
        for (i, _) in s.match_indices(':') {
            let after = &s[i + 1..];
            if after.is_empty() || after.starts_with(' ') || after.starts_with('\t') {
                idx = Some(i);
                break;
            }
        }
        let i = idx?;
        let key = s[..i].trim_end();
        if key.is_empty() || key.starts_with(['{', '[', '#', '&', '*', '!', '|', '>']) {
            return None;
        }
        return Some((key.to_string(), &s[i + 1..]));
    };
    let rest = rest.trim_start();
    let rest = rest.strip_prefix(':')?;
    Some((key, rest))
}

impl Locator {
    pub(crate) fn new(text: &str) -> Locator {
        let mut lines = HashMap::new();
        let mut stack = vec![Frame { col: -1, seg: Segment::Root, next_index: 0 }];
        // While inside a block scalar: lines indented deeper than this column are its text.
        let mut scalar_col: Option<isize> = None;
        for (n, raw_line) in text.lines().enumerate() {
            let line_no = n + 1;
            let content = raw_line.trim_start_matches(' ');
            let mut col = (raw_line.len() - content.len()) as isize;
            if let Some(sc) = scalar_col {
                if content.trim().is_empty() || col > sc {
                    continue;
                }
                scalar_col = None;
            }
            if content.trim().is_empty() || content.starts_with('#') || content.starts_with("---") {
                continue;
            }
            let mut rest = content;
            // Sequence dashes, possibly several on one line (`- - x`).
            while rest == "-" || rest.starts_with("- ") {
                while stack.last().is_some_and(|f| f.col > col || (f.col == col && matches!(f.seg, Segment::Index(_))))
                {
                    stack.pop();
                }
                let index = match stack.last_mut() {
                    Some(parent) => {
                        let i = parent.next_index;
                        parent.next_index += 1;
                        i
                    }
                    None => 0,
                };
                stack.push(Frame { col, seg: Segment::Index(index), next_index: 0 });
                lines.entry(path_of(&stack)).or_insert(line_no);
                let after = rest[1..].trim_start_matches(' ');
                col += (rest.len() - after.len()) as isize;
                rest = after;
            }
            if let Some((key, value)) = split_key(rest) {
                while stack.last().is_some_and(|f| f.col >= col) {
                    stack.pop();
                }
                stack.push(Frame { col, seg: Segment::Key(key), next_index: 0 });
                lines.entry(path_of(&stack)).or_insert(line_no);
                let v = value.trim_start();
                if v.starts_with('|') || v.starts_with('>') {
                    scalar_col = Some(col);
                }
            }
        }
        Locator { lines }
    }

    /// The line of `path`, else of its nearest enclosing key that was found.
    pub(crate) fn line(&self, path: &str) -> Option<usize> {
        let mut p = path.to_string();
        loop {
            if let Some(l) = self.lines.get(&p) {
                return Some(*l);
            }
            let cut = p.rfind(['.', '['])?;
            p.truncate(cut);
            if p.is_empty() {
                return None;
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn finds_nested_and_compact_sequences() {
        let text = "knotwise: 1\ndata:\n  file: x.csv # c\nsmooth:\n- column: a\n  degree: 3\n- column: b\n  \
                    degree: 2\nlinear:\n  - column: c\nreport:\n  notes: |\n    foo: bar\n  other: 1\n";
        let l = Locator::new(text);
        assert_eq!(l.line("data.file"), Some(3));
        assert_eq!(l.line("smooth[0].degree"), Some(6));
        assert_eq!(l.line("smooth[1].degree"), Some(8));
        assert_eq!(l.line("linear[0].column"), Some(10));
        assert_eq!(l.line("report.notes"), Some(12));
        assert_eq!(l.line("report.foo"), Some(11));
        assert_eq!(l.line("report.other"), Some(14));
        assert_eq!(l.line("smooth[1].knots"), Some(7));
    }
}
