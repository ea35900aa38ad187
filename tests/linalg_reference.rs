//! Least-squares engine against a golden solution (statsmodels OLS on the stack-loss data, Brownlee
//! 1965, committed in tests/reference/robust/stackloss.json) and against its own invariants.

use knotwise::linalg::{
    hat_values, least_squares_rows, normal_solve, qr_solve, qr_solve_chunked, Dense, LeastSquares, LinalgError,
    LsMethod,
};
use rand_chacha::ChaCha8Rng;
use rand_core::{RngCore, SeedableRng};

fn stackloss() -> (Vec<f64>, Vec<f64>, serde_json::Value) {
    let text = std::fs::read_to_string(concat!(env!("CARGO_MANIFEST_DIR"), "/tests/reference/robust/stackloss.json"))
        .expect("reference file");
    let v: serde_json::Value = serde_json::from_str(&text).expect("json");
    let x: Vec<f64> = v["x"]
        .as_array()
        .unwrap()
        .iter()
        .flat_map(|row| row.as_array().unwrap().iter().map(|a| a.as_f64().unwrap()))
        .collect();
    let y: Vec<f64> = v["y"].as_array().unwrap().iter().map(|a| a.as_f64().unwrap()).collect();
    (x, y, v)
}

fn floats(v: &serde_json::Value) -> Vec<f64> {
    v.as_array().unwrap().iter().map(|a| a.as_f64().unwrap()).collect()
}

fn uniform(rng: &mut ChaCha8Rng) -> f64 {
    (rng.next_u64() >> 11) as f64 / (1u64 << 53) as f64
}

fn random_design(n: usize, p: usize, seed: u64) -> (Vec<f64>, Vec<f64>, Vec<f64>) {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let mut x = vec![0.0; n * p];
    for i in 0..n {
        x[i * p] = 1.0;
        for j in 1..p {
            x[i * p + j] = uniform(&mut rng) * 10.0 - 3.0 + j as f64;
        }
    }
    let y: Vec<f64> = (0..n)
        .map(|i| (0..p).map(|j| x[i * p + j] * (j as f64 - 1.5)).sum::<f64>() + uniform(&mut rng) - 0.5)
        .collect();
    let w: Vec<f64> = (0..n).map(|_| 0.1 + 2.0 * uniform(&mut rng)).collect();
    (x, y, w)
}

/// Coefficients, RSS and classical standard errors σ²(X'X)⁻¹ (σ² = RSS/(n − p)) of a stack-loss
/// solve against the committed statsmodels OLS values.
fn assert_matches_statsmodels_ols(ls: &LeastSquares, v: &serde_json::Value) {
    for (a, b) in ls.coef.iter().zip(floats(&v["ols"]["coef"]).iter()) {
        assert!((a - b).abs() < 1e-10 * b.abs().max(1.0), "{a} vs {b}");
    }
    let rss = v["ols"]["rss"].as_f64().unwrap();
    assert!((ls.rss - rss).abs() < 1e-10 * rss);
    let inv = ls.xtx_inverse();
    let s2 = ls.rss / 17.0;
    for (j, b) in floats(&v["ols"]["bse"]).iter().enumerate() {
        assert!(((s2 * inv[j * 4 + j]).sqrt() - b).abs() < 1e-9 * b);
    }
}

#[test]
fn stackloss_ols_matches_statsmodels() {
    let (x, y, v) = stackloss();
    let ls = qr_solve(&x, 21, 4, &y, None).unwrap();
    assert_matches_statsmodels_ols(&ls, &v);
    let want = floats(&v["ols"]["coef"]);
    // Brownlee (1965) OLS as usually quoted: -39.9197, 0.7156, 1.2953, -0.1521.
    for (a, b) in ls.coef.iter().zip([-39.9197, 0.7156, 1.2953, -0.1521].iter()) {
        assert!((a - b).abs() < 5e-5);
    }
    let nb = normal_solve(&x, 21, 4, &y, &[1.0; 21]).unwrap();
    for (a, b) in nb.iter().zip(want.iter()) {
        assert!((a - b).abs() < 1e-7 * b.abs().max(1.0));
    }
}

#[test]
fn hat_values_sum_to_p() {
    let (x, y, _) = stackloss();
    let ls = qr_solve(&x, 21, 4, &y, None).unwrap();
    let h = hat_values(&x, 21, 4, &ls.r);
    assert!((h.iter().sum::<f64>() - 4.0).abs() < 1e-12);
    assert!(h.iter().all(|v| *v > 0.0 && *v < 1.0));
    let (x, y, _) = random_design(700, 5, 3);
    let ls = qr_solve(&x, 700, 5, &y, None).unwrap();
    assert!((hat_values(&x, 700, 5, &ls.r).iter().sum::<f64>() - 5.0).abs() < 1e-11);
}

#[test]
fn duplicated_column_is_named() {
    let (x, y, _) = stackloss();
    // Append column 5 = 2·AIRFLOW − WATERTEMP.
    let mut x5 = Vec::new();
    for i in 0..21 {
        x5.extend_from_slice(&x[i * 4..i * 4 + 4]);
        x5.push(2.0 * x[i * 4 + 1] - x[i * 4 + 2]);
    }
    let e = qr_solve(&x5, 21, 5, &y, None).unwrap_err();
    assert_eq!(e, LinalgError::RankDeficient { column: 4, aliased_with: vec![1, 2] });
    // An exact copy of column 3 placed at position 1 (before it): column 3 is the first deficient one.
    let mut xc = Vec::new();
    for i in 0..21 {
        xc.extend_from_slice(&[x[i * 4], x[i * 4 + 3], x[i * 4 + 1], x[i * 4 + 3]]);
    }
    let e = qr_solve(&xc, 21, 4, &y, None).unwrap_err();
    assert_eq!(e, LinalgError::RankDeficient { column: 3, aliased_with: vec![1] });
    // normal_solve falls back to QR and reports the same.
    assert_eq!(normal_solve(&xc, 21, 4, &y, &[1.0; 21]).unwrap_err(), e);
}

#[test]
fn weighted_equals_scaled_rows() {
    let (x, y, w) = random_design(600, 4, 11);
    let a = qr_solve(&x, 600, 4, &y, Some(&w)).unwrap();
    let xs: Vec<f64> = (0..600 * 4).map(|k| x[k] * w[k / 4].sqrt()).collect();
    let ys: Vec<f64> = (0..600).map(|i| y[i] * w[i].sqrt()).collect();
    let b = qr_solve(&xs, 600, 4, &ys, None).unwrap();
    for (u, v) in a.coef.iter().zip(b.coef.iter()) {
        assert!((u - v).abs() < 1e-12 * v.abs().max(1.0));
    }
    assert!((a.rss - b.rss).abs() < 1e-10 * b.rss);
    // Zero weights drop rows.
    let mut w0 = w.clone();
    w0[..100].iter_mut().for_each(|v| *v = 0.0);
    let c = qr_solve(&x, 600, 4, &y, Some(&w0)).unwrap();
    let d = qr_solve(&x[400..], 500, 4, &y[100..], Some(&w[100..])).unwrap();
    for (u, v) in c.coef.iter().zip(d.coef.iter()) {
        assert!((u - v).abs() < 1e-12 * v.abs().max(1.0));
    }
}

#[test]
fn chunk_boundaries_do_not_matter() {
    for &n in &[1usize, 255, 256, 257, 1000] {
        let p = if n == 1 { 1 } else { 4 };
        let (x, y, w) = random_design(n, p, n as u64);
        let reference = qr_solve_chunked(&x, n, p, &y, Some(&w), n.max(1)).unwrap();
        for chunk in [1usize, 7, 256] {
            let got = qr_solve_chunked(&x, n, p, &y, Some(&w), chunk).unwrap();
            for (u, v) in got.coef.iter().zip(reference.coef.iter()) {
                assert!((u - v).abs() < 1e-12 * v.abs().max(1.0), "n {n} chunk {chunk}: {u} vs {v}");
            }
            assert!((got.rss - reference.rss).abs() <= 1e-12 * reference.rss.max(1e-300) + 1e-300);
        }
        let default = qr_solve(&x, n, p, &y, Some(&w)).unwrap();
        assert_eq!(default.coef, qr_solve_chunked(&x, n, p, &y, Some(&w), 256).unwrap().coef);
    }
}

#[test]
fn degenerate_inputs_are_errors() {
    let (x, y, _) = random_design(10, 3, 1);
    assert_eq!(qr_solve(&x[..6], 2, 3, &y[..2], None).unwrap_err(), LinalgError::TooFewRows { rows: 2, columns: 3 });
    let mut xn = x.clone();
    xn[4] = f64::INFINITY;
    assert_eq!(qr_solve(&xn, 10, 3, &y, None).unwrap_err(), LinalgError::NonFinite);
    let mut w = vec![0.0; 10];
    w[0] = 1.0;
    w[1] = 1.0;
    assert_eq!(normal_solve(&x, 10, 3, &y, &w).unwrap_err(), LinalgError::TooFewRows { rows: 2, columns: 3 });
}

/// The solve every fit uses (refined normal equations when well conditioned) against the same
/// statsmodels golden values as the QR path, to the same tolerance.
#[test]
fn refined_normal_equations_match_statsmodels_on_stackloss() {
    let (x, y, v) = stackloss();
    let ls = least_squares_rows(&Dense::new(&x, 21, 4), &y, None).unwrap();
    assert_eq!(ls.method, LsMethod::RefinedNormal);
    assert_matches_statsmodels_ols(&ls, &v);
    // R'R = X'X whichever factor was used: the hat values still sum to p.
    let h = hat_values(&x, 21, 4, &ls.r);
    assert!((h.iter().sum::<f64>() - 4.0).abs() < 1e-10);
}

/// Weighted, well conditioned: the refined normal equations agree with Householder QR to rounding.
#[test]
fn refined_normal_equations_agree_with_qr() {
    for (n, p, seed) in [(50, 3, 11), (5000, 8, 12), (9000, 12, 13)] {
        let (x, y, w) = random_design(n, p, seed);
        let a = least_squares_rows(&Dense::new(&x, n, p), &y, Some(&w)).unwrap();
        let b = qr_solve(&x, n, p, &y, Some(&w)).unwrap();
        assert_eq!(a.method, LsMethod::RefinedNormal);
        for (u, v) in a.coef.iter().zip(&b.coef) {
            assert!((u - v).abs() <= 1e-11 * v.abs().max(1.0), "n={n}: {u} vs {v}");
        }
        assert!((a.rss - b.rss).abs() <= 1e-11 * b.rss);
    }
}

/// Near the normal-equations limit (two nearly collinear columns, scaled condition bound ~1e4, below
/// `NORMAL_COND_MAX`), where a refinement step removes less of the error: the refined solve still
/// agrees with Householder QR, and its RSS and residuals are those at its coefficients.
#[test]
fn refined_normal_equations_near_the_limit_agree_with_qr() {
    let (n, p) = (20000, 4);
    let (base, y, w) = random_design(n, p, 14);
    let mut rng = ChaCha8Rng::seed_from_u64(15);
    let mut x = base.clone();
    for i in 0..n {
        x[i * p + 3] = x[i * p + 2] + 1e-3 * (uniform(&mut rng) - 0.5);
    }
    let a = least_squares_rows(&Dense::new(&x, n, p), &y, Some(&w)).unwrap();
    let b = qr_solve(&x, n, p, &y, Some(&w)).unwrap();
    assert_eq!(a.method, LsMethod::RefinedNormal);
    let big = b.coef.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    for (u, v) in a.coef.iter().zip(&b.coef) {
        assert!((u - v).abs() <= 1e-9 * big, "{u} vs {v}");
    }
    assert!((a.rss - b.rss).abs() <= 1e-11 * b.rss);
    let res = a.residuals.as_ref().expect("the refined solve returns its residuals");
    let mut direct = vec![0.0; n];
    knotwise::linalg::residuals(&x, n, p, &y, &a.coef, &mut direct);
    assert_eq!(res, &direct);
}

/// An ill-conditioned design (monomials t^0..t^9 on [0, 1], scaled condition number far above
/// 1e6) goes to Householder QR: the answer is QR's bit for bit. A rank-deficient one gets QR's error.
#[test]
fn ill_conditioned_and_deficient_designs_go_to_qr() {
    let (n, p) = (200, 10);
    let x: Vec<f64> = (0..n).flat_map(|i| (0..p).map(move |j| (i as f64 / (n - 1) as f64).powi(j as i32))).collect();
    let y: Vec<f64> = (0..n).map(|i| ((i as f64) * 0.05).sin()).collect();
    let a = least_squares_rows(&Dense::new(&x, n, p), &y, None).unwrap();
    let b = qr_solve(&x, n, p, &y, None).unwrap();
    assert_eq!(a.method, LsMethod::Householder);
    assert_eq!(a.coef, b.coef);
    assert_eq!(a.r, b.r);
    let mut xd = x.clone();
    for i in 0..n {
        xd[i * p + 4] = 2.0 * xd[i * p + 1];
    }
    assert_eq!(
        least_squares_rows(&Dense::new(&xd, n, p), &y, None).unwrap_err(),
        qr_solve(&xd, n, p, &y, None).unwrap_err()
    );
}
