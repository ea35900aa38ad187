//! Assemble the machine-readable outputs (results.json, rows.csv) of an [`Analysis`] and its digest.

use crate::analysis::Analysis;
use crate::fit::{self, RobustMethod};
use crate::provenance;
use crate::results::*;
use crate::select::{self, SearchKind};
use crate::termination::Termination;

/// Inputs to provenance that come from files, not from the analysis.
pub struct Inputs<'a> {
    pub spec_bytes: &'a [u8],
    pub resolved_yaml: &'a str,
}

fn curves_of(design: &crate::design::Design, f: &crate::fit::Fit) -> Vec<crate::fit::Curve> {
    (0..design.smooth.len()).map(|t| fit::curve(design, f, t, &fit::curve_grid(design, t, 200))).collect()
}

fn method_name(m: RobustMethod) -> &'static str {
    match m {
        RobustMethod::Mm { .. } => "mm-bisquare",
        RobustMethod::HuberFixedScale { .. } => "huber-fixed-s-scale",
        RobustMethod::HuberJoint { .. } => "huber-joint-mad-scale",
    }
}

fn sizes_of(a: &Analysis, sizes: &[usize]) -> Sizes {
    Sizes::from_pairs(a.terms.smooth.iter().map(|s| s.column.as_str()).zip(sizes.iter().copied()))
}

/// Warnings that belong at the top of the report and in results.json.
pub fn warnings(a: &Analysis) -> Vec<String> {
    let mut w = Vec::new();
    let sel = &a.selection;
    let fits = [("classical", &sel.classical_fit), ("robust", &sel.robust_fit)];
    for (name, f) in fits {
        if !f.termination.is_ok() {
            w.push(format!("The {name} fit {}. Its numbers are not a converged solution.", f.termination.describe()));
        }
    }
    if sel.robust_criterion_collapsed {
        w.push(
            "The robust scale collapsed to zero: more than half the rows are fitted exactly, so the robust criterion is undefined and the robust fit is shown at the classical choice. Check whether the response is computed from the terms."
                .into(),
        );
    }
    if let Some(s) = &sel.s_estimate {
        if !s.termination.is_ok() {
            w.push(format!("The S-estimate start {}.", s.termination.describe()));
        }
    }
    let cz = &sel.points[sel.classical_choice].sizes;
    let rz = &sel.points[sel.robust_choice].sizes;
    for (who, sizes) in [("classical", cz), ("robust", rz)] {
        let edge = select::at_edge(&a.grid, sizes);
        for (t, e) in edge.iter().enumerate() {
            if *e {
                w.push(format!(
                    "The {who} choice for {} ({} basis functions) sits at the edge of its grid; a wider grid may choose differently.",
                    a.terms.smooth[t].column, sizes[t]
                ));
            }
        }
    }
    let skipped = sel.points.iter().filter(|p| p.skipped.is_some()).count();
    if skipped > 0 {
        w.push(format!(
            "{skipped} grid point(s) were impossible for these data and skipped (see the selection section)."
        ));
    }
    if !a.frame.dropped.is_empty() {
        w.push(format!(
            "{} row(s) were dropped for missing values (listed in the data section).",
            a.frame.dropped.len()
        ));
    }
    let s = &a.sensitivity;
    let expected = s.expected_false;
    if (s.flagged.len() as f64) > 2.0 * expected + 3.0 {
        w.push(format!(
            "{} rows are flagged as outliers, more than the {:.1} expected by chance under normal errors.",
            s.flagged.len(),
            expected
        ));
    }
    for msg in &a.frame.warnings {
        w.push(msg.clone());
    }
    w
}

/// Build results.json's content (digest filled in).
pub fn results(a: &Analysis, inputs: &Inputs) -> Results {
    let sel = &a.selection;
    let sens = &a.sensitivity;
    let cd = &sel.classical_design;
    let rd = &sel.robust_design;
    let mut classical =
        fit_out("least-squares", "squared", None, cd, &sel.classical_fit, &curves_of(cd, &sel.classical_fit));
    classical.method = "least-squares-qr".into();
    let m = a.plan.method;
    let mut robust =
        fit_out(method_name(m), m.loss_name(), Some(m.tuning()), rd, &sel.robust_fit, &curves_of(rd, &sel.robust_fit));
    if let Some(s) = &sel.s_estimate {
        let src = if sel.scale_source.is_empty() {
            sel.points[sel.robust_choice].sizes.clone()
        } else {
            sel.scale_source.clone()
        };
        robust.start = Some(StartOut {
            kind: if sel.shared_scale.is_some() && src != sel.points[sel.robust_choice].sizes {
                "s-estimate of the richest grid model; this size started from its MM fit projected onto this basis"
                    .into()
            } else {
                "s-estimate".into()
            },
            s_scale: finite(s.scale),
            s_basis_sizes: sizes_of(a, &src),
            s_coefficients: s.coef.clone(),
            subsamples: s.subsamples_drawn,
            singular_redraws: s.singular_redraws,
            search_rows: s.search_rows,
            seed: a.study.seed,
            termination: s.termination,
        });
    }
    let without = sens.classical_without.as_ref().map(|f| {
        // Curves and names from the full classical design (the subset has the same encodings).
        let mut o = fit_out("least-squares-qr", "squared", None, cd, f, &curves_of(cd, f));
        o.method = "least-squares-qr-without-flagged".into();
        o.n = f.rows_used;
        o
    });
    let robust_without = sens.robust_without.as_ref().map(|f| {
        let keep_design = rd; // curves use the same encodings
        let mut o =
            fit_out(method_name(m), m.loss_name(), Some(m.tuning()), keep_design, f, &curves_of(keep_design, f));
        o.n = f.rows_used;
        o
    });

    let selection = sel
        .points
        .iter()
        .enumerate()
        .map(|(i, p)| {
            let mut chosen_by = Vec::new();
            if i == sel.classical_choice {
                chosen_by.push("classical");
            }
            if i == sel.robust_choice {
                chosen_by.push("robust");
            }
            PointOut {
                basis_sizes: sizes_of(a, &p.sizes),
                p: p.p,
                bic: p.bic.and_then(finite),
                rbic: p.rbic.and_then(finite),
                chosen_by,
                skipped: p.skipped.clone(),
            }
        })
        .collect();
    let edge_names = |sizes: &[usize]| -> Vec<String> {
        select::at_edge(&a.grid, sizes)
            .iter()
            .enumerate()
            .filter(|(_, e)| **e)
            .map(|(t, _)| a.terms.smooth[t].column.clone())
            .collect()
    };
    let selection_method = SelectionMethodOut {
        search: match sel.search {
            SearchKind::Shared => "shared",
            SearchKind::Product => "product",
            SearchKind::CoordinateWise => "coordinate-wise",
            SearchKind::NoSmooth => "none",
        }
        .into(),
        bic_penalty: a.grid.penalty,
        robust_scale: match a.plan.scale_mode {
            select::ScaleMode::Shared => "shared",
            select::ScaleMode::PerSize => "per-size",
        }
        .into(),
        shared_scale: sel.shared_scale.and_then(finite),
        scale_from_basis_sizes: sizes_of(a, &sel.scale_source),
        classical_at_edge: edge_names(&sel.points[sel.classical_choice].sizes),
        robust_at_edge: edge_names(&sel.points[sel.robust_choice].sizes),
    };

    let rf = &sel.robust_fit;
    let scale = rf.scale;
    let weights = rf.weights.clone().unwrap_or_default();
    let flagged = sens
        .flagged
        .iter()
        .map(|&i| FlagOut {
            row: a.frame.row_name(i),
            line: a.frame.lines[i],
            residual: finite(rf.residuals[i]),
            scaled_residual: finite(rf.residuals[i] / scale),
            weight: weights.get(i).copied().and_then(finite),
        })
        .collect();
    let b = &sens.boxplot;
    let outliers = OutliersOut {
        cutoff: a.study.outliers.cutoff,
        expected_false: sens.expected_false,
        n_flagged: sens.flagged.len(),
        flagged,
        boxplot: BoxplotOut {
            quartiles: "linear interpolation of order statistics (Hyndman & Fan type 7)",
            q1: finite(b.q1),
            median: finite(b.median),
            q3: finite(b.q3),
            lower_fence: finite(b.lower_fence),
            upper_fence: finite(b.upper_fence),
            n_outside: b.outside.len(),
        },
        leverage_threshold: sens.leverage.threshold,
        high_leverage: sens
            .leverage
            .high
            .iter()
            .map(|&i| LeverageOut {
                row: a.frame.row_name(i),
                line: a.frame.lines[i],
                leverage: finite(sens.leverage.hat[i]),
            })
            .collect(),
    };
    let conclusion_changes = sens.coefficients.iter().any(|c| c.sign_changes || c.significance_changes);
    let sensitivity = SensitivityOut {
        coefficients: sens
            .coefficients
            .iter()
            .map(|c| CoefCompareOut {
                name: c.name.clone(),
                classical: c.values[0].and_then(|v| finite(v.0)),
                robust: c.values[1].and_then(|v| finite(v.0)),
                classical_without_flagged: c.values[2].and_then(|v| finite(v.0)),
                sign_changes: c.sign_changes,
                significance_changes: c.significance_changes,
            })
            .collect(),
        curves: sens
            .curves
            .iter()
            .map(|c| CurveMoveOut {
                column: c.column.clone(),
                classical_move: finite(c.classical_move),
                without_flagged_move: c.without_flagged_move.and_then(finite),
            })
            .collect(),
        classical_rerun_basis_sizes: sens.rerun_choice.map(|i| sizes_of(a, &sens.rerun_points[i].sizes)),
        classical_rerun_changes_size: sens
            .rerun_choice
            .map(|i| sens.rerun_points[i].sizes != sel.points[sel.classical_choice].sizes),
        robust_largest_move_in_se: sens.robust_move.and_then(finite),
        influence: sens
            .influence
            .iter()
            .map(|inf| {
                let lin = crate::sensitivity::linear_columns(cd);
                let dfbetas: Vec<NamedValue> = lin
                    .iter()
                    .map(|&j| NamedValue { name: cd.names[j].clone(), value: finite(inf.dfbetas[j]) })
                    .collect();
                // The largest move of an effect (the intercept's move is a level shift, not an effect).
                let largest = dfbetas
                    .iter()
                    .filter(|v| v.name != "intercept")
                    .filter_map(|v| v.value)
                    .map(f64::abs)
                    .fold(None, |m: Option<f64>, v| Some(m.map_or(v, |m| m.max(v))));
                InfluenceOut { row: a.frame.row_name(inf.row), line: a.frame.lines[inf.row], dfbetas, largest }
            })
            .collect(),
        influence_capped: sens.influence_capped,
        conclusion_changes,
    };
    let mut results = Results {
        schema: SCHEMA,
        study: StudyOut {
            title: a.study.title.clone(),
            date: a.study.date.clone(),
            response: a.study.response.clone(),
            n_rows_read: a.frame.n_read,
            n_rows_used: a.frame.n_used(),
            dropped: a.frame.dropped.iter().map(|d| DroppedOut { line: d.line, columns: d.columns.clone() }).collect(),
            missing_per_column: a
                .frame
                .missing_per_column
                .iter()
                .map(|(c, n)| MissingOut { column: c.clone(), rows: *n })
                .collect(),
        },
        fits: FitsOut { classical, robust, classical_without_flagged: without, robust_without_flagged: robust_without },
        selection,
        selection_method,
        outliers,
        sensitivity,
        warnings: warnings(a),
        provenance: ProvenanceOut {
            spec_sha256: provenance::sha256_hex(inputs.spec_bytes),
            data_sha256: a.frame.sha256.clone(),
            resolved_spec_sha256: provenance::sha256_hex(inputs.resolved_yaml.as_bytes()),
            data_file: a.study.data.file_as_written.clone(),
            version: provenance::version().into(),
            target: String::new(),
            seed: a.study.seed,
            digest: String::new(),
        },
    };
    results.provenance.digest = digest(&results);
    results.provenance.target = provenance::target();
    results
}

/// sha256 over the canonical compact JSON with `digest` and `target` blank.
pub fn digest(results: &Results) -> String {
    let mut r = results.clone();
    r.provenance.digest = String::new();
    r.provenance.target = String::new();
    let bytes = serde_json::to_vec(&r).unwrap_or_default();
    provenance::sha256_hex(&bytes)
}

/// Row blocks formatted together before they are written (about 130 000 rows, some 25 MB of text).
const ROWS_PER_WAVE_BLOCKS: usize = 32;

/// rows.csv (one row per used data row) written to `out` as it is formatted, so the whole text never
/// sits in memory: waves of row blocks are formatted on the worker threads (one CSV writer per block,
/// so quoting is the writer's own) and written in block order, the same bytes for any thread count.
/// A wave is written (and hashed, when `out` hashes) on a thread of its own while the next one is
/// formatted; at most three waves are in memory at once (one written, one handed over, one formatted).
pub fn write_rows_csv(a: &Analysis, out: &mut (dyn std::io::Write + Send)) -> std::io::Result<()> {
    let sel = &a.selection;
    let sens = &a.sensitivity;
    let rf = &sel.robust_fit;
    let cf = &sel.classical_fit;
    let n = a.frame.n_used();
    let mut flagged = vec![false; n];
    for &i in &sens.flagged {
        flagged[i] = true;
    }
    // The refit without flagged rows predicts every row (same encoding), so its columns are full.
    let without_pred: Option<Vec<f64>> = sens.classical_without.as_ref().map(|f| sel.classical_design.predict(&f.coef));
    let mut w = csv::WriterBuilder::new().terminator(csv::Terminator::Any(b'\n')).from_writer(Vec::new());
    let mut header =
        vec!["row", "line", "observed", "classical-fitted", "classical-residual", "robust-fitted", "robust-residual"];
    if without_pred.is_some() {
        header.push("classical-without-flagged-fitted");
        header.push("classical-without-flagged-residual");
    }
    header.extend(["robust-weight", "robust-scaled-residual", "flagged", "leverage"]);
    let _ = w.write_record(&header);
    out.write_all(&w.into_inner().unwrap_or_default())?;
    let weights = rf.weights.as_deref().unwrap_or(&[]);
    let block_rows = crate::linalg::BLOCK_ROWS;
    let wave_rows = block_rows * ROWS_PER_WAVE_BLOCKS;
    std::thread::scope(|scope| {
        // A rendezvous channel: the formatting side waits until the writer takes the wave it holds.
        let (to_writer, waves) = std::sync::mpsc::sync_channel::<Vec<Vec<u8>>>(0);
        let writer = scope.spawn(move || -> std::io::Result<()> {
            for blocks in waves {
                for block in blocks {
                    out.write_all(&block)?;
                }
            }
            Ok(())
        });
        for wave_lo in (0..n).step_by(wave_rows) {
            let wave_n = wave_rows.min(n - wave_lo);
            let blocks = crate::linalg::map_blocks(wave_n, |lo, hi| {
                let mut w = csv::WriterBuilder::new().terminator(csv::Terminator::Any(b'\n')).from_writer(Vec::new());
                let mut buf = String::new();
                let mut field = |w: &mut csv::Writer<Vec<u8>>, v: f64| {
                    buf.clear();
                    num_into(&mut buf, v);
                    let _ = w.write_field(buf.as_bytes());
                };
                for i in wave_lo + lo..wave_lo + hi {
                    let y = sel.robust_design.y[i];
                    let mut line = itoa::Buffer::new();
                    let line = line.format(a.frame.lines[i]);
                    // The row's name is its id, or (no id column) its source line, as `Frame::row_name`.
                    match a.frame.ids.get(i) {
                        Some(id) => w.write_field(id),
                        None => w.write_field(line),
                    }
                    .ok();
                    let _ = w.write_field(line);
                    for v in [y, y - cf.residuals[i], cf.residuals[i], y - rf.residuals[i], rf.residuals[i]] {
                        field(&mut w, v);
                    }
                    if let Some(p) = &without_pred {
                        field(&mut w, p[i]);
                        field(&mut w, y - p[i]);
                    }
                    field(&mut w, weights.get(i).copied().unwrap_or(f64::NAN));
                    field(&mut w, if rf.scale > 0.0 { rf.residuals[i] / rf.scale } else { f64::NAN });
                    let _ = w.write_field(if flagged[i] { "yes" } else { "no" });
                    field(&mut w, sens.leverage.hat[i]);
                    let _ = w.write_record(None::<&[u8]>);
                }
                w.into_inner().unwrap_or_default()
            });
            // A failed write ends the writer, and so the channel: its error is returned below.
            if to_writer.send(blocks).is_err() {
                break;
            }
        }
        drop(to_writer);
        writer.join().unwrap_or_else(|_| Err(std::io::Error::other("the rows.csv writer stopped unexpectedly")))
    })
}

/// Whether any fit failed to converge (for `--strict`).
pub fn any_not_converged(a: &Analysis) -> bool {
    let t = [a.selection.classical_fit.termination, a.selection.robust_fit.termination];
    t.iter().any(|t: &Termination| !t.is_ok())
}
