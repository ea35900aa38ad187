//! Checks `knotwise::basis` and `knotwise::dist` against golden values computed with scipy and numpy.
//!
//! The JSON files are written by the committed scripts `tests/reference/basis/make_basis_reference.py`
//! and `tests/reference/dist/make_dist_reference.py` (each has a `--check` mode for CI). Each quantity
//! has its own tolerance, stated beside its check.

use knotwise::basis::{quantile_sorted, Basis, KnotPlacement};
use knotwise::dist::{normal_cdf, normal_quantile, t_cdf, t_quantile};
use serde_json::Value;

fn load(relative: &str) -> Value {
    let path = format!("{}/tests/reference/{relative}", env!("CARGO_MANIFEST_DIR"));
    let text = std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("cannot read {path}: {e}"));
    serde_json::from_str(&text).unwrap_or_else(|e| panic!("{path} is not valid JSON: {e}"))
}

fn num(v: &Value) -> f64 {
    v.as_f64().unwrap_or_else(|| panic!("not a number: {v}"))
}

fn nums(v: &Value) -> Vec<f64> {
    v.as_array().unwrap_or_else(|| panic!("not an array: {v}")).iter().map(num).collect()
}

fn source(data: &Value) -> String {
    format!("{} (scipy {}, numpy {})", data["source"], data["scipy_version"], data["numpy_version"])
}

#[test]
fn type_7_quantiles_match_numpy() {
    let data = load("basis/basis_reference.json");
    let src = source(&data);
    let mut sorted = nums(&data["sample"]);
    assert_eq!(sorted.len(), 200);
    sorted.sort_by(f64::total_cmp);
    for case in data["quantiles"].as_array().expect("quantiles") {
        let (p, want) = (num(&case["prob"]), num(&case["value"]));
        let got = quantile_sorted(&sorted, p);
        // Tolerance 1e-12 absolute on values of order 1–10.
        assert!((got - want).abs() <= 1e-12, "quantile at p = {p}: {got} vs {want} from {src}");
    }
}

#[test]
fn basis_values_match_scipy_design_matrix() {
    let data = load("basis/basis_reference.json");
    let src = source(&data);
    let sample = nums(&data["sample"]);
    let cases = data["bases"].as_array().expect("bases");
    assert!(cases.len() >= 4);
    for case in cases {
        let name = case["name"].as_str().expect("name");
        let degree = case["degree"].as_u64().expect("degree") as usize;
        let size = case["size"].as_u64().expect("size") as usize;
        let knots = nums(&case["knots"]);
        let points = nums(&case["points"]);
        // Where the case says how its knots were placed, place them ourselves and compare the knots
        // (1e-12); otherwise use the knot vector as given.
        let basis = match case["placement"].as_str() {
            Some("quantile") => Basis::for_sample(&sample, degree, size, KnotPlacement::Quantile),
            Some("uniform") => Basis::for_sample(&points, degree, size, KnotPlacement::Uniform),
            _ => Ok(Basis { degree, knots: knots.clone() }),
        }
        .unwrap_or_else(|e| panic!("{name}: {e}"));
        assert_eq!(basis.knots.len(), knots.len(), "{name}");
        for (got, want) in basis.knots.iter().zip(&knots) {
            assert!((got - want).abs() <= 1e-12, "{name}: knot {got} vs {want} from {src}");
        }
        assert_eq!(basis.size(), size);

        let rows = case["values"].as_array().expect("values");
        assert_eq!(rows.len(), points.len());
        for (&x, row) in points.iter().zip(rows) {
            let want = nums(row);
            let got = basis.eval_dense(x);
            assert_eq!(got.len(), want.len(), "{name}");
            for (j, (g, w)) in got.iter().zip(&want).enumerate() {
                // Tolerance 1e-12 absolute; basis values lie in [0, 1].
                assert!((g - w).abs() <= 1e-12, "{name}: B_{j}({x}) = {g} vs {w} from {src}");
            }
        }
    }
}

/// |got − want| ≤ tol · max(1, |want|): relative for large values, absolute near zero.
fn close(got: f64, want: f64, tol: f64) -> bool {
    (got - want).abs() <= tol * want.abs().max(1.0)
}

#[test]
fn t_quantiles_match_scipy() {
    let data = load("dist/dist_reference.json");
    let src = source(&data);
    let cases = data["t_quantiles"].as_array().expect("t_quantiles");
    assert!(cases.len() > 300);
    let mut worst = 0.0_f64;
    for case in cases {
        let (df, p, want) = (num(&case["df"]), num(&case["p"]), num(&case["value"]));
        let got = t_quantile(p, df);
        worst = worst.max((got - want).abs() / want.abs().max(1.0));
        // Tolerance 1e-10, relative above 1 and absolute below.
        assert!(close(got, want, 1e-10), "t quantile p = {p}, df = {df}: {got} vs {want} from {src}");
    }
    eprintln!("t quantiles: worst scaled difference from scipy {worst:e}");
}

#[test]
fn t_cdf_matches_scipy() {
    let data = load("dist/dist_reference.json");
    let src = source(&data);
    let mut worst = 0.0_f64;
    for case in data["t_cdfs"].as_array().expect("t_cdfs") {
        let (df, t, want) = (num(&case["df"]), num(&case["t"]), num(&case["value"]));
        let got = t_cdf(t, df);
        if want != 0.0 {
            worst = worst.max(((got - want) / want).abs());
        }
        // Lower tails only (t ≤ 0): relative tolerance 1e-10, so small tails are checked in full.
        let ok = if want == 0.0 { got == 0.0 } else { ((got - want) / want).abs() <= 1e-10 };
        assert!(ok, "t cdf at t = {t}, df = {df}: {got:e} vs {want:e} from {src}");
        // The upper tail by symmetry, absolute 1e-12 (the continued fraction near df = 1e4 carries a
        // relative error of about 3e-13 in the lower tail, see `EXPANSION_MIN_DF` in src/dist.rs).
        assert!((t_cdf(-t, df) - (1.0 - want)).abs() <= 1e-12, "upper t cdf at {t}, df {df} from {src}");
    }
    eprintln!("t cdf: worst relative difference from scipy {worst:e}");
}

#[test]
fn normal_functions_match_scipy() {
    let data = load("dist/dist_reference.json");
    let src = source(&data);
    for case in data["normal_quantiles"].as_array().expect("normal_quantiles") {
        let (p, want) = (num(&case["p"]), num(&case["value"]));
        let got = normal_quantile(p);
        // Relative 1e-15: AS 241 and scipy's ndtri each claim about 1e-16.
        assert!(((got - want) / want).abs() <= 1e-15 || got == want, "Φ⁻¹({p}) = {got} vs {want} from {src}");
    }
    for case in data["normal_cdfs"].as_array().expect("normal_cdfs") {
        let (x, want) = (num(&case["x"]), num(&case["value"]));
        let got = normal_cdf(x);
        // Relative 1e-15, widened to 2x²·ε in the lower tail: scipy's ndtr rounds x/√2 before erfc,
        // which costs it about x²·ε (measured against mpmath 1.3.0 at 50 digits when this file was
        // written: 7e-15 at x = −10, 6e-14 at −30, 1.1e-13 at −37). knotwise's own tail is checked
        // against mpmath values to 1e-15 in the unit tests of src/dist.rs.
        let tol = 1e-15_f64.max(2.0 * x * x * f64::EPSILON);
        assert!(((got - want) / want).abs() <= tol, "Φ({x}) = {got:e} vs {want:e} from {src}");
    }
}
