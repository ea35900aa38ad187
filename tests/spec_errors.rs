//! Exact error text of the spec checker (knotwise::spec::parse / load). The wording users see is part of
//! the contract: change a message here and in the code together.

use std::path::{Path, PathBuf};
use std::time::{Duration, Instant};

use knotwise::spec::{self, LossChoice, StartChoice};

const BASE: &str = "knotwise: 1\ntitle: Sales\ndata:\n  file: sales.csv\nresponse: price\n";

fn err(text: &str) -> String {
    match spec::parse(text, "study.yaml", Path::new("specs")) {
        Ok(s) => panic!("expected an error, got {s:?}"),
        Err(e) => e.to_string(),
    }
}

fn with(extra: &str) -> String {
    format!("{BASE}{extra}")
}

/// A fresh, empty folder for one test.
fn temp_dir(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("knotwise-spec-{}-{name}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

#[test]
fn minimal_spec_gets_every_default() {
    let s = spec::parse(BASE, "study.yaml", Path::new("specs")).unwrap();
    assert_eq!(s.seed, 1);
    assert_eq!(s.data.missing, vec![String::new()]);
    assert_eq!(s.data.file, Path::new("specs").join("sales.csv"));
    assert_eq!(s.data.file_as_written, "sales.csv");
    assert_eq!(s.selection.basis_sizes, spec::DEFAULT_BASIS_SIZES.to_vec());
    assert_eq!(s.selection.bic_penalty, 0.5);
    assert_eq!(s.selection.robust_scale, spec::RobustScaleMode::Shared);
    assert_eq!(s.robust.loss, LossChoice::Bisquare);
    assert_eq!(s.robust.efficiency, 0.95);
    assert_eq!(s.robust.start, StartChoice::SEstimate);
    assert_eq!(s.robust.subsamples, 500);
    assert_eq!(s.outliers.cutoff, 2.5);
    assert!(s.sensitivity.refit_without_flagged && s.sensitivity.influence);
    assert!(s.linear.is_empty() && s.smooth.is_empty());
}

#[test]
fn show_messages() {
    for t in [
        with("smoth:\n  - column: age\n"),
        with("smooth:\n  - column: age\n    degre: 3\n"),
        "title: x\n".to_string(),
        with("smooth:\n  - column: age\n    degree: three\n"),
        BASE.replace("knotwise: 1", "knotwise: 2"),
        "- a\n- b\n".into(),
        "hello\n".into(),
        "knotwise: 1\ntitle: x\ndata:\n\tfile: a.csv\n".into(),
        "knotwise: 1\ntitle: x\ntitle: y\n".into(),
        with("linear:\n  - column: price\n"),
        with("smooth:\n  - column: age\n    basis-sizes: [3, 4]\n"),
        with("robust:\n  efficiency: 1.0\n"),
        with("outliers:\n  cutoff: -1\n"),
        with("robust:\n  subsamples: 1000000000000\n"),
        with("smooth:\n  - column: age\n    basis-sizes: [1000000]\n"),
        with("smooth:\n  - column: age\n    degree: 0\n"),
        with("smooth:\n  - column: age\n    degree: 12\n"),
        BASE.replace("  file: sales.csv\n", "  file: sales.csv\n  sha256: abc123\n"),
        with("robust:\n  start: least-squares\n"),
        with("seed: -3\n"),
        with("smooth:\n  - column: age\n    knots: quantil\n"),
        with("linear:\n  - column: d\n    reference: a\n"),
        with("linear:\n  - column: d\n  - column: d\n"),
        "knotwise: 1\ntitle: x\nresponse: y\n".into(),
        "knotwise: 1\ntitle: x\ndata:\n  id: a\nresponse: y\n".into(),
        with("date: 2026-13-01\n"),
        with("selection:\n  basis-sizes: []\n"),
        "".into(),
        "knotwise: 1\ntitle: [unclosed\n".into(),
        with("report:\n  notes: missing.md\n"),
    ] {
        println!("----\n{}", err(&t));
    }
}
