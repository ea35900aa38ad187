//! Basis-size selection (DESIGN.md §4.5): the criterion identity, recovery of a known basis size, robust
//! choice under contamination, scale modes, and impossible grid points.

mod common;
use common::*;

use knotwise::basis::{Basis, KnotPlacement};
use knotwise::select;

#[test]
fn robust_criterion_with_squared_rho_equals_bic() {
    let mut g = Lcg(1);
    let r: Vec<f64> = (0..500).map(|_| 3.0 * g.normal()).collect();
    let rss: f64 = r.iter().map(|v| v * v).sum();
    for scale in [0.3, 1.0, 7.5] {
        for penalty in [0.5, 1.0] {
            let a = select::rbic(&r, scale, &|t| t * t, 12, penalty);
            let b = select::bic(rss, 500, 12, penalty);
            assert!((a - b).abs() < 1e-12, "RBIC with rho = t² is BIC: {a} vs {b}");
        }
    }
}

/// y = g(x) + 0.4·z + noise, with g exactly a cubic spline with 6 basis functions on the quantile knots
/// the grid itself uses; `outliers` of the responses shifted by +16σ.
fn spline_data(seed: u64, n: usize, outliers: f64) -> String {
    spline_data_rounded(seed, n, outliers, None)
}

/// As `spline_data`, with x rounded to `steps` evenly spaced values when given.
fn spline_data_rounded(seed: u64, n: usize, outliers: f64, steps: Option<f64>) -> String {
    let mut g = Lcg(seed);
    let sigma = 0.3;
    let x: Vec<f64> = (0..n)
        .map(|_| {
            let u = g.uniform();
            match steps {
                Some(k) => (u * k).floor() * 10.0 / k,
                None => u * 10.0,
            }
        })
        .collect();
    let z: Vec<f64> = (0..n).map(|_| g.normal()).collect();
    let basis = Basis::for_sample(&x, 3, 6, KnotPlacement::Quantile).unwrap();
    let theta = [0.0, 2.0, -1.5, 1.8, -1.2, 0.5];
    let y: Vec<f64> = (0..n)
        .map(|i| {
            let b = basis.eval_dense(x[i]);
            let mut v: f64 = b.iter().zip(theta).map(|(b, t)| b * t).sum::<f64>() + 0.4 * z[i] + sigma * g.normal();
            if g.uniform() < outliers {
                v += 16.0 * sigma;
            }
            v
        })
        .collect();
    csv_text(&[("y", y), ("z", z), ("x", x)])
}

fn spec(seed: u64, mode: &str, subsamples: usize) -> String {
    format!(
        "knotwise: 1
title: Recovery
seed: {seed}
data:
  file: data.csv
response: y
linear:
  - column: z
smooth:
  - column: x
selection:
  basis-sizes: [4, 5, 6, 7, 8, 9]
  robust-scale: {mode}
robust:
  subsamples: {subsamples}
sensitivity:
  influence: false
"
    )
}

fn chosen(a: &knotwise::analysis::Analysis) -> (usize, usize) {
    let s = &a.selection;
    (s.points[s.classical_choice].sizes[0], s.points[s.robust_choice].sizes[0])
}

#[test]
#[ignore = "long: 50 simulated data sets; run by .ci/run with --ignored"]
fn classical_choice_recovers_six_basis_functions() {
    let hits = (0..50)
        .filter(|&s| {
            chosen(&analyse(&format!("rec{s}"), &spec(1, "shared", 100), &spline_data(100 + s, 2000, 0.0))).0 == 6
        })
        .count();
    assert!(hits >= 40, "classical choice was 6 in {hits} of 50 seeds");
}

#[test]
#[ignore = "long: 150 robust selections; run by .ci/run with --ignored"]
fn robust_choice_survives_ten_percent_shifted_responses() {
    for s_seed in [1, 2, 3] {
        let mut hits = 0;
        let mut classical_hits = 0;
        for s in 0..50 {
            let a =
                analyse(&format!("rob{s_seed}-{s}"), &spec(s_seed, "shared", 500), &spline_data(200 + s, 2000, 0.10));
            let (c, r) = chosen(&a);
            hits += usize::from(r == 6);
            classical_hits += usize::from(c == 6);
        }
        eprintln!("S-seed {s_seed}: robust chose 6 in {hits}/50, classical in {classical_hits}/50");
        assert!(hits >= 45, "S-seed {s_seed}: robust choice was 6 in {hits} of 50 seeds");
    }
}

#[test]
fn shared_scale_choice_is_stable_across_seeds_and_per_size_is_shown() {
    // One contaminated data set, ten S-estimate seeds with few subsamples. The shared-scale choice must
    // not depend on the seed; the per-size choice is reported for comparison (it compares the luck of
    // separate random searches, DESIGN.md §4.5).
    let data = spline_data(77, 1500, 0.10);
    let mut shared = Vec::new();
    let mut per_size = Vec::new();
    for seed in 1..=10 {
        shared.push(chosen(&analyse(&format!("sh{seed}"), &spec(seed, "shared", 30), &data)).1);
        per_size.push(chosen(&analyse(&format!("ps{seed}"), &spec(seed, "per-size", 30), &data)).1);
    }
    eprintln!("shared-scale robust choices by seed: {shared:?}");
    eprintln!("per-size-scale robust choices by seed: {per_size:?}");
    // Measured when this test was written: shared [6; 10 seeds], per-size [9; 10 seeds] — the per-size
    // criterion drifts to the richest models because each size's own S-scale shrinks as p grows.
    assert!(shared.iter().all(|&k| k == shared[0]), "shared-scale choice moved with the seed: {shared:?}");
    assert_eq!(shared[0], 6);
}

#[test]
fn an_impossible_grid_point_is_skipped_with_its_reason() {
    let data = spline_data_rounded(9, 300, 0.0, Some(30.0));
    let yaml = spec(1, "shared", 50).replace("basis-sizes: [4, 5, 6, 7, 8, 9]", "basis-sizes: [4, 6, 40]");
    let a = analyse("skip", &yaml, &data);
    let skipped: Vec<_> = a.selection.points.iter().filter(|p| p.skipped.is_some()).collect();
    assert_eq!(skipped.len(), 1);
    assert_eq!(skipped[0].sizes, vec![40]);
    assert_eq!(
        skipped[0].skipped.as_deref(),
        Some("`x` has 30 distinct values, fewer than the 40 basis functions of size 40")
    );
}

#[test]
fn a_grid_with_no_possible_point_is_a_clear_error() {
    let dir = std::env::temp_dir().join(format!("knotwise-none-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    std::fs::write(dir.join("data.csv"), spline_data_rounded(9, 300, 0.0, Some(30.0))).unwrap();
    let yaml = spec(1, "shared", 50).replace("basis-sizes: [4, 5, 6, 7, 8, 9]", "basis-sizes: [40, 45]");
    let study = knotwise::spec::parse(&yaml, "study.yaml", &dir).unwrap();
    let frame = knotwise::app::load_frame(&study, "study.yaml").unwrap();
    let err = knotwise::analysis::analyse(study, frame, "study.yaml").err().expect("no possible grid point");
    assert_eq!(
        err.to_string(),
        "study.yaml: selection.basis-sizes: no basis size on the grid is possible for these data:
    x = 40: `x` has 30 distinct values, fewer than the 40 basis functions of size 40
    x = 45: `x` has 30 distinct values, fewer than the 45 basis functions of size 45
  hint: choose smaller basis sizes, or use `knots: uniform` for a column with many tied values"
    );
    let _ = std::fs::remove_dir_all(&dir);
}
