//! Helpers shared by the integration tests.
#![allow(dead_code)]

use knotwise::data::{Column, ColumnData, Frame};
use std::path::PathBuf;

/// Path under the crate root.
pub fn root(rel: &str) -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR")).join(rel)
}

/// Read a committed JSON file.
pub fn json(rel: &str) -> serde_json::Value {
    let text = std::fs::read_to_string(root(rel)).unwrap_or_else(|e| panic!("{rel}: {e}"));
    serde_json::from_str(&text).unwrap()
}

/// f64 vector from a JSON array.
pub fn vecf(v: &serde_json::Value) -> Vec<f64> {
    v.as_array().unwrap().iter().map(|x| x.as_f64().unwrap()).collect()
}

/// A frame of numeric columns (rows numbered from line 2).
pub fn numeric_frame(cols: &[(&str, Vec<f64>)]) -> Frame {
    let n = cols[0].1.len();
    Frame {
        n_read: n,
        columns: cols
            .iter()
            .map(|(name, v)| Column { name: name.to_string(), data: ColumnData::Numeric(v.clone()) })
            .collect(),
        lines: (0..n as u64).map(|i| i + 2).collect(),
        ids: (0..n).map(|i| (i + 1).to_string()).collect(),
        dropped: vec![],
        missing_per_column: vec![],
        warnings: vec![],
        sha256: String::new(),
        header: cols.iter().map(|(n, _)| n.to_string()).collect(),
    }
}

/// Relative closeness with a floor of 1 on the scale.
pub fn assert_close(got: f64, want: f64, tol: f64, what: &str) {
    let scale = want.abs().max(1.0);
    assert!((got - want).abs() <= tol * scale, "{what}: got {got}, want {want} (tol {tol})");
}

/// Deterministic pseudo-random numbers for invented test data (a 64-bit LCG; Knuth MMIX constants).
pub struct Lcg(pub u64);
impl Lcg {
    pub fn uniform(&mut self) -> f64 {
        self.0 = self.0.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
        ((self.0 >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }
    pub fn normal(&mut self) -> f64 {
        let u1 = self.uniform();
        let u2 = self.uniform();
        (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
    }
}
