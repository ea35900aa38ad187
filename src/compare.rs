//! Differences between two result sets (results.json values): chosen sizes, coefficients, scales and
//! flagged rows, each judged against a tolerance. Used by `compare` and by `verify`.

use serde_json::Value;

/// Tolerances: a number moves when |a − b| > atol + rtol · max(|a|, |b|).
#[derive(Debug, Clone, Copy)]
pub struct Tolerance {
    pub rtol: f64,
    pub atol: f64,
}

impl Default for Tolerance {
    fn default() -> Self {
        Tolerance { rtol: 1e-6, atol: 1e-9 }
    }
}

/// One difference.
#[derive(Debug, Clone, PartialEq)]
pub struct Difference {
    pub what: String,
    pub a: String,
    pub b: String,
    /// True when the difference exceeds the tolerance (or is not numeric).
    pub beyond: bool,
}

const FITS: [&str; 3] = ["classical", "robust", "classical-without-flagged"];

fn text(v: Option<&Value>) -> String {
    match v {
        None | Some(Value::Null) => "—".into(),
        Some(Value::String(s)) => s.clone(),
        Some(v) => v.to_string(),
    }
}

fn number(a: &mut Vec<Difference>, what: String, x: Option<&Value>, y: Option<&Value>, tol: Tolerance) {
    match (x.and_then(Value::as_f64), y.and_then(Value::as_f64)) {
        (Some(p), Some(q)) => {
            if p != q {
                let beyond = (p - q).abs() > tol.atol + tol.rtol * p.abs().max(q.abs());
                a.push(Difference { what, a: format!("{p}"), b: format!("{q}"), beyond });
            }
        }
        (None, None) => {}
        _ => a.push(Difference { what, a: text(x), b: text(y), beyond: true }),
    }
}

fn flagged_rows(v: &Value) -> Vec<String> {
    v.pointer("/outliers/flagged")
        .and_then(Value::as_array)
        .map(|rows| rows.iter().map(|r| text(r.get("row"))).collect())
        .unwrap_or_default()
}

/// All differences between result sets `a` and `b`.
pub fn diff(a: &Value, b: &Value, tol: Tolerance) -> Vec<Difference> {
    let mut out = Vec::new();
    for key in ["/study/n-rows-used", "/schema"] {
        if a.pointer(key) != b.pointer(key) {
            out.push(Difference {
                what: key.trim_start_matches('/').replace('/', "."),
                a: text(a.pointer(key)),
                b: text(b.pointer(key)),
                beyond: true,
            });
        }
    }
    for fit in FITS {
        let fa = a.pointer(&format!("/fits/{fit}"));
        let fb = b.pointer(&format!("/fits/{fit}"));
        match (fa, fb) {
            (None | Some(Value::Null), None | Some(Value::Null)) => continue,
            (Some(x), Some(y)) if !x.is_null() && !y.is_null() => {
                if x.get("basis-sizes") != y.get("basis-sizes") {
                    out.push(Difference {
                        what: format!("{fit}: chosen basis sizes"),
                        a: text(x.get("basis-sizes")),
                        b: text(y.get("basis-sizes")),
                        beyond: true,
                    });
                }
                number(&mut out, format!("{fit}: scale"), x.get("scale"), y.get("scale"), tol);
                let ca = x.get("coefficients").and_then(Value::as_array).cloned().unwrap_or_default();
                let cb = y.get("coefficients").and_then(Value::as_array).cloned().unwrap_or_default();
                for c in &ca {
                    let name = text(c.get("name"));
                    match cb.iter().find(|d| text(d.get("name")) == name) {
                        Some(d) => {
                            number(&mut out, format!("{fit}: {name}"), c.get("estimate"), d.get("estimate"), tol);
                            number(
                                &mut out,
                                format!("{fit}: {name} (std. error)"),
                                c.get("std-error"),
                                d.get("std-error"),
                                tol,
                            );
                        }
                        None => out.push(Difference {
                            what: format!("{fit}: {name}"),
                            a: text(c.get("estimate")),
                            b: "absent".into(),
                            beyond: true,
                        }),
                    }
                }
                for d in &cb {
                    let name = text(d.get("name"));
                    if !ca.iter().any(|c| text(c.get("name")) == name) {
                        out.push(Difference {
                            what: format!("{fit}: {name}"),
                            a: "absent".into(),
                            b: text(d.get("estimate")),
                            beyond: true,
                        });
                    }
                }
            }
            _ => out.push(Difference {
                what: format!("{fit} fit"),
                a: text(fa.map(|_| &Value::Bool(true))).replace("true", "present"),
                b: text(fb.map(|_| &Value::Bool(true))).replace("true", "present"),
                beyond: true,
            }),
        }
    }
    let ra = flagged_rows(a);
    let rb = flagged_rows(b);
    let only_a: Vec<&String> = ra.iter().filter(|r| !rb.contains(r)).collect();
    let only_b: Vec<&String> = rb.iter().filter(|r| !ra.contains(r)).collect();
    if !only_a.is_empty() || !only_b.is_empty() {
        let list = |v: &[&String]| {
            if v.is_empty() {
                "—".to_string()
            } else {
                v.iter().map(|s| s.as_str()).collect::<Vec<_>>().join(", ")
            }
        };
        out.push(Difference {
            what: "flagged rows (only in A | only in B)".into(),
            a: list(&only_a),
            b: list(&only_b),
            beyond: true,
        });
    }
    out
}

/// A plain-text table of differences.
pub fn table(diffs: &[Difference]) -> String {
    let w0 = diffs.iter().map(|d| d.what.chars().count()).max().unwrap_or(4).max(4);
    let w1 = diffs.iter().map(|d| d.a.chars().count()).max().unwrap_or(1).max(1);
    let w2 = diffs.iter().map(|d| d.b.chars().count()).max().unwrap_or(1).max(1);
    let mut s = format!("{:<w0$}  {:<w1$}  {:<w2$}  status\n", "what", "A", "B");
    for d in diffs {
        s.push_str(&format!(
            "{:<w0$}  {:<w1$}  {:<w2$}  {}\n",
            d.what,
            d.a,
            d.b,
            if d.beyond { "DIFFERS" } else { "within tolerance" }
        ));
    }
    s
}
