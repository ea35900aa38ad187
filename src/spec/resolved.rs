//! The resolved spec: the study written back with every default filled in, keys in DESIGN.md §3 order.
//!
//! Written by hand so the text is deterministic and independent of any serializer's formatting choices:
//! every string is double-quoted with escapes, every number in shortest round-trip form. No absolute
//! path ever appears (the data file is written as in the spec).

use std::fmt::Write;

use super::check::quote;
use super::*;

/// A float that YAML reads back as the same float (always with a `.` or an exponent).
fn float(x: f64) -> String {
    let s = format!("{x:?}");
    if s.contains(['.', 'e', 'E']) {
        s
    } else {
        format!("{s}.0")
    }
}

fn list<T: std::fmt::Display>(items: &[T]) -> String {
    let v: Vec<String> = items.iter().map(|i| i.to_string()).collect();
    format!("[{}]", v.join(", "))
}

impl Study {
    /// The spec with every default filled in, deterministic, re-parsable by [`parse`] to an equal
    /// `Study` (with the same base folder).
    pub fn to_resolved_yaml(&self) -> String {
        let mut o = String::new();
        // `write!` into a String cannot fail; the results are ignored on purpose.
        let _ = writeln!(o, "knotwise: {SPEC_VERSION}");
        let _ = writeln!(o, "title: {}", quote(&self.title));
        if let Some(d) = &self.date {
            let _ = writeln!(o, "date: {}", quote(d));
        }
        let _ = writeln!(o, "seed: {}", self.seed);
        o.push_str("data:\n");
        let _ = writeln!(o, "  file: {}", quote(&self.data.file_as_written));
        if let Some(s) = &self.data.sha256 {
            let _ = writeln!(o, "  sha256: {}", quote(s));
        }
        let missing: Vec<String> = self.data.missing.iter().map(|m| quote(m)).collect();
        let _ = writeln!(o, "  missing: [{}]", missing.join(", "));
        if let Some(id) = &self.data.id {
            let _ = writeln!(o, "  id: {}", quote(id));
        }
        let _ = writeln!(o, "response: {}", quote(&self.response));
        if self.linear.is_empty() {
            o.push_str("linear: []\n");
        } else {
            o.push_str("linear:\n");
            for t in &self.linear {
                let _ = writeln!(o, "  - column: {}", quote(&t.column));
                let _ = writeln!(o, "    categorical: {}", t.categorical);
                if let Some(r) = &t.reference {
                    let _ = writeln!(o, "    reference: {}", quote(r));
                }
            }
        }
        if self.smooth.is_empty() {
            o.push_str("smooth: []\n");
        } else {
            o.push_str("smooth:\n");
            for t in &self.smooth {
                let _ = writeln!(o, "  - column: {}", quote(&t.column));
                let _ = writeln!(o, "    degree: {}", t.degree);
                let knots = match t.knots {
                    KnotPlacement::Quantile => "quantile",
                    KnotPlacement::Uniform => "uniform",
                };
                let _ = writeln!(o, "    knots: {knots}");
                if let Some(g) = &t.basis_sizes {
                    let _ = writeln!(o, "    basis-sizes: {}", list(g));
                }
            }
        }
        o.push_str("selection:\n");
        let _ = writeln!(o, "  basis-sizes: {}", list(&self.selection.basis_sizes));
        let _ = writeln!(o, "  bic-penalty: {}", float(self.selection.bic_penalty));
        let scale = match self.selection.robust_scale {
            RobustScaleMode::Shared => "shared",
            RobustScaleMode::PerSize => "per-size",
        };
        let _ = writeln!(o, "  robust-scale: {scale}");
        o.push_str("robust:\n");
        let loss = match self.robust.loss {
            LossChoice::Bisquare => "bisquare",
            LossChoice::Huber => "huber",
        };
        let _ = writeln!(o, "  loss: {loss}");
        let _ = writeln!(o, "  efficiency: {}", float(self.robust.efficiency));
        let start = match self.robust.start {
            StartChoice::SEstimate => "s-estimate",
            StartChoice::LeastSquares => "least-squares",
        };
        let _ = writeln!(o, "  start: {start}");
        let _ = writeln!(o, "  subsamples: {}", self.robust.subsamples);
        o.push_str("outliers:\n");
        let _ = writeln!(o, "  cutoff: {}", float(self.outliers.cutoff));
        o.push_str("sensitivity:\n");
        let _ = writeln!(o, "  refit-without-flagged: {}", self.sensitivity.refit_without_flagged);
        let _ = writeln!(o, "  influence: {}", self.sensitivity.influence);
        match &self.report.notes_as_written {
            Some(n) => {
                o.push_str("report:\n");
                let _ = writeln!(o, "  notes: {}", quote(n));
            }
            None => o.push_str("report: {}\n"),
        }
        o
    }
}
