//! The machine contract: results.json and rows.csv (DESIGN.md §3). Schema-versioned, kebab-case keys in
//! the fixed order of these types, numbers in shortest round-trip form, non-finite numbers written as
//! null. Scripts of users and reviewers read these keys: extend freely, rename only with a schema bump.

use serde::ser::SerializeMap;
use serde::{Deserialize, Serialize, Serializer};

use crate::design::Design;
use crate::fit::{Fit, IntervalKind};
use crate::termination::Termination;

pub const SCHEMA: &str = "knotwise-results/1";

/// An ordered name → size map (the order of the smooth terms in the spec).
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(transparent)]
pub struct Sizes(pub serde_json::Map<String, serde_json::Value>);

impl Sizes {
    pub fn new(design: &Design) -> Sizes {
        Sizes::from_pairs(design.smooth.iter().map(|e| e.column.as_str()).zip(design.sizes.iter().copied()))
    }
    pub fn from_pairs<'a>(pairs: impl Iterator<Item = (&'a str, usize)>) -> Sizes {
        let mut m = serde_json::Map::new();
        for (k, v) in pairs {
            m.insert(k.to_string(), serde_json::Value::from(v));
        }
        Sizes(m)
    }
}

impl Serialize for Sizes {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        // serde_json is built with preserve_order, so the map keeps the spec's term order.
        let mut map = s.serialize_map(Some(self.0.len()))?;
        for (k, v) in &self.0 {
            map.serialize_entry(k, v)?;
        }
        map.end()
    }
}

#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct Results {
    pub schema: &'static str,
    pub study: StudyOut,
    pub fits: FitsOut,
    pub selection: Vec<PointOut>,
    pub selection_method: SelectionMethodOut,
    pub outliers: OutliersOut,
    pub sensitivity: SensitivityOut,
    pub warnings: Vec<String>,
    pub provenance: ProvenanceOut,
}

#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct StudyOut {
    pub title: String,
    pub date: Option<String>,
    pub response: String,
    pub n_rows_read: usize,
    pub n_rows_used: usize,
    pub dropped: Vec<DroppedOut>,
    pub missing_per_column: Vec<MissingOut>,
}

#[derive(Debug, Clone, Serialize)]
pub struct DroppedOut {
    pub line: u64,
    pub columns: Vec<String>,
}

#[derive(Debug, Clone, Serialize)]
pub struct MissingOut {
    pub column: String,
    pub rows: usize,
}

#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct FitsOut {
    pub classical: FitOut,
    pub robust: FitOut,
    pub classical_without_flagged: Option<FitOut>,
    pub robust_without_flagged: Option<FitOut>,
}

#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct FitOut {
    pub method: String,
    pub loss: String,
    pub tuning: Option<f64>,
    pub scale: Option<f64>,
    pub termination: Termination,
    pub basis_sizes: Sizes,
    pub n: usize,
    pub p: usize,
    pub rss: Option<f64>,
    pub r_squared: Option<f64>,
    pub interval: &'static str,
    pub coefficients: Vec<CoefOut>,
    pub smooth: Vec<SmoothOut>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub start: Option<StartOut>,
}

#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct CoefOut {
    pub name: String,
    pub estimate: Option<f64>,
    pub std_error: Option<f64>,
    pub lower: Option<f64>,
    pub upper: Option<f64>,
}

#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct SmoothOut {
    pub column: String,
    pub degree: usize,
    pub knots: Vec<f64>,
    pub grid: Vec<f64>,
    pub curve: Vec<Option<f64>>,
    pub lower: Vec<Option<f64>>,
    pub upper: Vec<Option<f64>>,
}

/// The robust fit's start, for audit.
#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct StartOut {
    pub kind: String,
    pub s_scale: Option<f64>,
    pub s_basis_sizes: Sizes,
    pub s_coefficients: Vec<f64>,
    pub subsamples: usize,
    pub singular_redraws: usize,
    pub search_rows: usize,
    pub seed: u64,
    pub termination: Termination,
}

#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct PointOut {
    pub basis_sizes: Sizes,
    pub p: usize,
    pub bic: Option<f64>,
    pub rbic: Option<f64>,
    pub chosen_by: Vec<&'static str>,
    #[serde(skip_serializing_if = "Option::is_none")]
    pub skipped: Option<String>,
}

#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct SelectionMethodOut {
    pub search: String,
    pub bic_penalty: f64,
    pub robust_scale: String,
    pub shared_scale: Option<f64>,
    pub scale_from_basis_sizes: Sizes,
    pub classical_at_edge: Vec<String>,
    pub robust_at_edge: Vec<String>,
}

#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct OutliersOut {
    pub cutoff: f64,
    pub expected_false: f64,
    pub n_flagged: usize,
    pub flagged: Vec<FlagOut>,
    pub boxplot: BoxplotOut,
    pub leverage_threshold: f64,
    pub high_leverage: Vec<LeverageOut>,
}

#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct FlagOut {
    pub row: String,
    pub line: u64,
    pub residual: Option<f64>,
    pub scaled_residual: Option<f64>,
    pub weight: Option<f64>,
}

#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct BoxplotOut {
    pub quartiles: &'static str,
    pub q1: Option<f64>,
    pub median: Option<f64>,
    pub q3: Option<f64>,
    pub lower_fence: Option<f64>,
    pub upper_fence: Option<f64>,
    pub n_outside: usize,
}

#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct LeverageOut {
    pub row: String,
    pub line: u64,
    pub leverage: Option<f64>,
}

#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct SensitivityOut {
    pub coefficients: Vec<CoefCompareOut>,
    pub curves: Vec<CurveMoveOut>,
    pub classical_rerun_basis_sizes: Option<Sizes>,
    pub classical_rerun_changes_size: Option<bool>,
    pub robust_largest_move_in_se: Option<f64>,
    pub influence: Vec<InfluenceOut>,
    pub influence_capped: bool,
    pub conclusion_changes: bool,
}

#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct CoefCompareOut {
    pub name: String,
    pub classical: Option<f64>,
    pub robust: Option<f64>,
    pub classical_without_flagged: Option<f64>,
    pub sign_changes: bool,
    pub significance_changes: bool,
}

#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct CurveMoveOut {
    pub column: String,
    pub classical_move: Option<f64>,
    pub without_flagged_move: Option<f64>,
}

#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct InfluenceOut {
    pub row: String,
    pub line: u64,
    pub dfbetas: Vec<NamedValue>,
    pub largest: Option<f64>,
}

#[derive(Debug, Clone, Serialize)]
pub struct NamedValue {
    pub name: String,
    pub value: Option<f64>,
}

#[derive(Debug, Clone, Serialize)]
#[serde(rename_all = "kebab-case")]
pub struct ProvenanceOut {
    pub spec_sha256: String,
    pub data_sha256: String,
    pub resolved_spec_sha256: String,
    pub data_file: String,
    pub version: String,
    pub target: String,
    pub seed: u64,
    pub digest: String,
}

/// A finite number or None (written as null).
pub fn finite(v: f64) -> Option<f64> {
    v.is_finite().then_some(v)
}

/// The coefficient table and curves of one fit.
pub fn fit_out(
    method: &str,
    loss: &str,
    tuning: Option<f64>,
    design: &Design,
    fit: &Fit,
    curves: &[crate::fit::Curve],
) -> FitOut {
    let coefficients = design
        .names
        .iter()
        .enumerate()
        .map(|(j, name)| CoefOut {
            name: name.clone(),
            estimate: finite(fit.coef[j]),
            std_error: finite(fit.std_errors[j]),
            lower: finite(fit.lower[j]),
            upper: finite(fit.upper[j]),
        })
        .collect();
    let smooth = design
        .smooth
        .iter()
        .zip(curves)
        .map(|(enc, c)| SmoothOut {
            column: enc.column.clone(),
            degree: enc.basis.degree,
            knots: enc.basis.knots.clone(),
            grid: c.x.clone(),
            curve: c.value.iter().map(|v| finite(*v)).collect(),
            lower: c.lower.iter().map(|v| finite(*v)).collect(),
            upper: c.upper.iter().map(|v| finite(*v)).collect(),
        })
        .collect();
    FitOut {
        method: method.to_string(),
        loss: loss.to_string(),
        tuning,
        scale: finite(fit.scale),
        termination: fit.termination,
        basis_sizes: Sizes::new(design),
        n: design.n,
        p: design.p,
        rss: finite(fit.rss),
        r_squared: finite(fit.r_squared),
        interval: match fit.interval {
            IntervalKind::StudentT => "student-t",
            IntervalKind::Normal => "normal",
        },
        coefficients,
        smooth,
        start: None,
    }
}

/// Shortest round-trip text of a number; empty for non-finite (rows.csv writes nothing there).
pub fn num(v: f64) -> String {
    let mut s = String::new();
    num_into(&mut s, v);
    s
}

/// [`num`] appended to `out` (no allocation of its own, for rows.csv's millions of fields).
///
/// The text is the shortest digits that read back to the same number (the `ryu` crate's; Adams 2018),
/// written out without an exponent as Rust's `{}` writes numbers: "0.000000125",
/// "1000000000000000000000", "-3". It is Rust's `{}` of the value except where two shortest digit
/// strings are equally near the value, where ryu takes the even last digit (checked in the tests
/// below); ryu finds the digits several times quicker, which matters for rows.csv.
pub fn num_into(out: &mut String, v: f64) {
    if v.is_finite() {
        let mut buf = ryu::Buffer::new();
        positional(buf.format_finite(v), out);
    }
}

/// ryu's text ("-1.25e-7", "1e21", "12.5", "3.0") rewritten in positional form, appended to `out`.
fn positional(s: &str, out: &mut String) {
    let (negative, s) = match s.strip_prefix('-') {
        Some(rest) => (true, rest),
        None => (false, s),
    };
    let (mantissa, exponent) = match s.split_once(['e', 'E']) {
        Some((m, e)) => (m, e.parse::<i64>().unwrap_or(0)),
        None => (s, 0),
    };
    let (int, frac) = mantissa.split_once('.').unwrap_or((mantissa, ""));
    // The digits int ++ frac (at most 17 significant ones, plus a few zeros) with the decimal point
    // after `point` of them.
    let mut store = [0u8; 40];
    let mut len = 0;
    for d in int.bytes().chain(frac.bytes()).take(store.len()) {
        store[len] = d;
        len += 1;
    }
    let lead = store[..len].iter().take_while(|&&d| d == b'0').count();
    let mut digits = &store[lead..len];
    let point = int.len() as i64 + exponent - lead as i64;
    while let [rest @ .., b'0'] = digits {
        digits = rest;
    }
    if negative {
        out.push('-');
    }
    // ASCII digits from a str, so always valid UTF-8.
    let put = |out: &mut String, d: &[u8]| out.push_str(std::str::from_utf8(d).unwrap_or_default());
    let n = digits.len() as i64;
    if n == 0 {
        out.push('0');
    } else if point <= 0 {
        out.push_str("0.");
        out.extend(std::iter::repeat_n('0', (-point) as usize));
        put(out, digits);
    } else if point >= n {
        put(out, digits);
        out.extend(std::iter::repeat_n('0', (point - n) as usize));
    } else {
        put(out, &digits[..point as usize]);
        out.push('.');
        put(out, &digits[point as usize..]);
    }
}

#[cfg(test)]
mod number_text_tests {
    use super::num;

    /// `num` reads back to the value and is Rust's `{}` of it, byte for byte, except at an exact tie
    /// between two shortest digit strings (there the last digit may differ by one): edge values and a
    /// million random bit patterns.
    #[test]
    fn num_matches_rust_display() {
        let check = |v: f64| {
            let (ours, display) = (num(v), format!("{v}"));
            assert_eq!(ours.parse::<f64>().map(f64::to_bits), Ok(v.to_bits()), "{v:e} -> {ours}");
            if ours != display {
                let (a, b) = (ours.as_bytes(), display.as_bytes());
                let last = a.len() - 1;
                assert!(
                    a.len() == b.len() && a[..last] == b[..last] && a[last].abs_diff(b[last]) == 1,
                    "{v:e}: {ours} vs {display}"
                );
            }
        };
        let mut edge = vec![
            0.0,
            -0.0,
            1.0,
            -3.0,
            0.1,
            1e-7,
            1.25e-7,
            123456.789,
            1e15,
            1e16,
            1e17,
            1e21,
            1e22,
            9007199254740993.0,
            f64::MAX,
            f64::MIN,
            f64::MIN_POSITIVE,
            5e-324,
            std::f64::consts::PI,
            -2.5e-300,
            1e300,
        ];
        for e in -30..=30 {
            edge.push(10f64.powi(e));
            edge.push(-1.5 * 10f64.powi(e));
        }
        for v in edge {
            assert_eq!(num(v), format!("{v}"), "{v:e}");
        }
        // An exact tie: 1394865425023536.25 lies halfway between ...536.2 and ...536.3.
        assert_eq!(num(1394865425023536.0 + 0.25), "1394865425023536.2");
        let mut state = 0x9E3779B97F4A7C15u64;
        for _ in 0..1_000_000 {
            // xorshift64* (Vigna 2016), for bit patterns only.
            state ^= state >> 12;
            state ^= state << 25;
            state ^= state >> 27;
            let v = f64::from_bits(state.wrapping_mul(0x2545F4914F6CDD1D));
            if v.is_finite() {
                check(v);
            }
        }
        assert_eq!(num(f64::NAN), "");
        assert_eq!(num(f64::INFINITY), "");
    }
}
