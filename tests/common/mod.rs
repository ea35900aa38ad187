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
        ids: Vec::new(),
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

/// Write `csv` and `yaml` (whose data.file must be `data.csv`) into a scratch folder and run the
/// numerical pipeline on them.
pub fn analyse(name: &str, yaml: &str, csv: &str) -> knotwise::analysis::Analysis {
    let dir = std::env::temp_dir().join(format!("knotwise-lib-{name}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    std::fs::write(dir.join("data.csv"), csv).unwrap();
    let study = knotwise::spec::parse(yaml, "study.yaml", &dir).unwrap_or_else(|e| panic!("{e}"));
    let frame = knotwise::app::load_frame(&study, "study.yaml").unwrap_or_else(|e| panic!("{e}"));
    let a = knotwise::analysis::analyse(study, frame, "study.yaml").unwrap_or_else(|e| panic!("{e}"));
    let _ = std::fs::remove_dir_all(&dir);
    a
}

/// CSV text from named columns.
pub fn csv_text(cols: &[(&str, Vec<f64>)]) -> String {
    let mut s = cols.iter().map(|c| c.0).collect::<Vec<_>>().join(",");
    s.push('\n');
    for i in 0..cols[0].1.len() {
        let row: Vec<String> = cols.iter().map(|c| format!("{}", c.1[i])).collect();
        s.push_str(&row.join(","));
        s.push('\n');
    }
    s
}
