//! The blocked kernels (a design's fixed row layout, `linalg::Rows::layout`) against the generic
//! sparse kernels on the same design: every sum must agree bit for bit, since the blocked path is a
//! speed path only; and the hat values from (X'X)⁻¹ against their R-factor evaluation (to rounding).
//! Invented data (a seeded generator); the outside references for the fits
//! themselves are in fit_reference.rs and robust_reference.rs.

mod common;
use common::*;

use knotwise::basis::KnotPlacement;
use knotwise::data::{Column, ColumnData};
use knotwise::design::{Design, LinearSpec, ModelTerms, SmoothSpec};
use knotwise::linalg::{self, Rows};

/// The same rows with the layout hidden, so every kernel takes its generic path.
struct Generic<'a>(&'a Design);

impl Rows for Generic<'_> {
    fn n(&self) -> usize {
        self.0.n()
    }
    fn p(&self) -> usize {
        self.0.p()
    }
    fn row_into(&self, i: usize, out: &mut [f64]) {
        self.0.row_into(i, out)
    }
    fn finite(&self, lo: usize, hi: usize) -> bool {
        self.0.finite(lo, hi)
    }
    fn baseline(&self, lo: usize, hi: usize) -> Vec<f64> {
        self.0.baseline(lo, hi)
    }
    fn deviation(&self, i: usize, c: &[f64], idx: &mut [usize], val: &mut [f64]) -> usize {
        self.0.deviation(i, c, idx, val)
    }
}

fn terms() -> ModelTerms {
    let smooth = |c: &str| SmoothSpec { column: c.into(), degree: 3, knots: KnotPlacement::Quantile };
    ModelTerms {
        response: "y".into(),
        linear: vec![
            LinearSpec { column: "z".into(), categorical: false },
            LinearSpec { column: "g".into(), categorical: true },
        ],
        smooth: vec![smooth("x1"), smooth("x2"), smooth("x3")],
    }
}

/// 5 blocks of rows (so the threaded path runs too); x3 takes 60 distinct values (ties at the knots).
fn frame() -> knotwise::data::Frame {
    let n = 5 * linalg::BLOCK_ROWS + 123;
    let mut rng = Lcg(20261204);
    let (mut y, mut z, mut codes, mut x1, mut x2, mut x3) = (vec![], vec![], vec![], vec![], vec![], vec![]);
    for _ in 0..n {
        let (a, b, c) = (rng.uniform(), rng.uniform() * 40.0 - 7.0, (rng.uniform() * 60.0).floor());
        let zi = rng.normal();
        let gi = (rng.uniform() * 4.0).floor() as u32;
        let noise = if rng.uniform() < 0.08 { 25.0 } else { rng.normal() };
        y.push((6.0 * a).sin() + 0.01 * b * b + c.sqrt() + 0.5 * zi + gi as f64 + noise);
        z.push(zi);
        codes.push(gi);
        x1.push(a);
        x2.push(b);
        x3.push(c);
    }
    let mut frame = numeric_frame(&[("y", y), ("z", z), ("x1", x1), ("x2", x2), ("x3", x3)]);
    let mut counts = vec![0; 4];
    for &c in &codes {
        counts[c as usize] += 1;
    }
    frame.columns.push(Column {
        name: "g".into(),
        data: ColumnData::Categorical {
            levels: vec!["a".into(), "b".into(), "c".into(), "d".into()],
            codes,
            reference: 1,
            counts,
        },
    });
    frame
}

fn same_bits(a: &[f64], b: &[f64], what: &str) {
    assert_eq!(a.len(), b.len(), "{what}: lengths");
    for (k, (x, y)) in a.iter().zip(b).enumerate() {
        assert_eq!(x.to_bits(), y.to_bits(), "{what}[{k}]: blocked {x} vs generic {y}");
    }
}

#[test]
fn blocked_kernels_agree_bit_for_bit_with_the_generic_ones() {
    let frame = frame();
    // Size 4 truncates every run (3 kept columns of 4 functions); the others truncate some rows.
    for sizes in [[4, 4, 4], [5, 7, 9], [10, 6, 4]] {
        let design = Design::build(&frame, &terms(), &sizes).unwrap();
        assert!(design.layout().is_some(), "a cubic design has a layout");
        let generic = Generic(&design);
        let (n, p) = (design.n, design.p);
        let y = &design.y;

        let a = linalg::least_squares_rows(&design, y, None).unwrap();
        let b = linalg::least_squares_rows(&generic, y, None).unwrap();
        same_bits(&a.coef, &b.coef, "least-squares coefficients");
        same_bits(&[a.rss], &[b.rss], "RSS");
        same_bits(&a.xtx_inverse(), &b.xtx_inverse(), "(X'X)^-1");

        let w: Vec<f64> = (0..n).map(|i| if i % 11 == 0 { 0.0 } else { 0.5 + (i % 7) as f64 / 3.0 }).collect();
        let a = linalg::least_squares_rows(&design, y, Some(&w)).unwrap();
        let b = linalg::least_squares_rows(&generic, y, Some(&w)).unwrap();
        same_bits(&a.coef, &b.coef, "weighted coefficients");

        let coef: Vec<f64> = (0..p).map(|j| 0.3 - 0.07 * j as f64).collect();
        same_bits(&linalg::predict_rows(&design, &coef), &linalg::predict_rows(&generic, &coef), "Xb");

        let weight = |r: f64| 1.0 / (1.0 + r * r);
        let (mut r1, mut w1, mut r2, mut w2) = (vec![0.0; n], vec![0.0; n], vec![0.0; n], vec![0.0; n]);
        let e1 = linalg::reweight(&design, y, &coef, &weight, None, &mut r1, &mut w1).unwrap();
        let e2 = linalg::reweight(&generic, y, &coef, &weight, None, &mut r2, &mut w2).unwrap();
        same_bits(e1.entries(), e2.entries(), "reweighted [X'WX | X'Wy]");
        same_bits(&r1, &r2, "residuals");

        // Newton terms with negative and zero curvature on some rows.
        let terms = |r: f64| {
            let u = r / 2.0;
            if u.abs() > 3.0 {
                (0.0, 0.0, 1.0)
            } else {
                ((1.0 - u * u) * (1.0 - 5.0 * u * u), u * (1.0 - u * u), u * u)
            }
        };
        let (e1, o1) = linalg::newton_sweep(&design, y, &coef, &terms, None, &mut r1, &mut w1).unwrap();
        let (e2, o2) = linalg::newton_sweep(&generic, y, &coef, &terms, None, &mut r2, &mut w2).unwrap();
        same_bits(e1.entries(), e2.entries(), "Newton system");
        same_bits(&[o1], &[o2], "objective");
        same_bits(&w1, &w2, "curvatures");

        // Hat values from (X'X)⁻¹ through the baseline split agree with the R-factor evaluation and
        // sum to p (trace of the hat matrix).
        let ls = linalg::least_squares_rows(&design, y, None).unwrap();
        let by_factor = linalg::hat_values_rows(&design, &ls.r);
        let by_inverse = linalg::quadratic_forms_rows(&design, &ls.xtx_inverse());
        for (a, b) in by_inverse.iter().zip(&by_factor) {
            assert!((a - b).abs() <= 1e-10 * b.abs().max(1.0 / n as f64), "hat value {a} vs {b}");
        }
        let trace: f64 = by_inverse.iter().sum();
        assert!((trace - p as f64).abs() < 1e-8 * p as f64, "trace {trace} vs p = {p}");
    }
}

/// A fit of the kept rows with prior weight 0 on the others, on the full design, is the fit on the
/// subset design (the sensitivity refits use it to avoid building a second design).
#[test]
fn prior_weights_give_the_subset_fit() {
    use knotwise::fit::{self, RobustMethod};
    use knotwise::robust::irls::IrlsOptions;
    let frame = frame();
    let design = Design::build(&frame, &terms(), &[5, 7, 9]).unwrap();
    let n = design.n;
    let prior: Vec<f64> = (0..n).map(|i| if i % 13 == 3 || i % 97 == 0 { 0.0 } else { 1.0 }).collect();
    let keep: Vec<usize> = (0..n).filter(|&i| prior[i] > 0.0).collect();
    let sub = design.subset(&keep);
    let close = |a: f64, b: f64, tol: f64, what: &str| {
        assert!((a - b).abs() <= tol * b.abs().max(1.0), "{what}: prior {a} vs subset {b}");
    };

    let a = fit::classical_with_prior(&design, Some(&prior)).unwrap();
    let b = fit::classical(&sub).unwrap();
    assert_eq!(a.rows_used, keep.len());
    assert_eq!(a.residuals.len(), n);
    for j in 0..design.p {
        close(a.coef[j], b.coef[j], 1e-11, "classical coefficient");
        close(a.std_errors[j], b.std_errors[j], 1e-11, "classical std error");
    }
    close(a.rss, b.rss, 1e-12, "RSS");
    close(a.r_squared, b.r_squared, 1e-12, "R²");
    for (k, &i) in keep.iter().enumerate().step_by(101) {
        close(a.residuals[i], b.residuals[k], 1e-10, "residual of a kept row");
    }

    let method = RobustMethod::Mm { c: 4.685 };
    let opts = IrlsOptions::default();
    let start = b.coef.clone();
    let scale = 1.2;
    let ra = fit::robust_with_prior(&design, method, Some(&start), scale, &opts, None, Some(&prior)).unwrap();
    let rb = fit::robust(&sub, method, Some(&start), scale, &opts).unwrap();
    assert!(ra.termination.is_ok() && rb.termination.is_ok());
    for j in 0..design.p {
        close(ra.coef[j], rb.coef[j], 1e-9, "MM coefficient");
        close(ra.std_errors[j], rb.std_errors[j], 1e-8, "MM sandwich std error");
    }
    let weights = ra.weights.as_ref().unwrap();
    assert!(prior.iter().zip(weights).all(|(q, w)| *q > 0.0 || *w == 0.0), "left-out rows have weight 0");

    // The joint Huber fit runs on the kept rows' own design: the subset fit, spread back to all rows.
    let huber = RobustMethod::HuberJoint { k: 1.345 };
    let ha = fit::robust_with_prior(&design, huber, None, 0.0, &opts, None, Some(&prior)).unwrap();
    let hb = fit::robust(&sub, huber, None, 0.0, &opts).unwrap();
    same_bits(&ha.coef, &hb.coef, "joint Huber coefficients");
    // (X'X)⁻¹ of the kept rows is summed over the full design's row blocks here: rounding level.
    for (a, b) in ha.std_errors.iter().zip(&hb.std_errors) {
        close(*a, *b, 1e-12, "joint Huber std error");
    }
    assert_eq!((ha.rows_used, ha.residuals.len()), (keep.len(), n));
    let kept: Vec<f64> = keep.iter().map(|&i| ha.residuals[i]).collect();
    same_bits(&kept, &hb.residuals, "joint Huber residuals of the kept rows");
}
