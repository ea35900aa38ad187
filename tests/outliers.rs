//! Outlier flags and sensitivity on outside data (stackloss: Brownlee 1965, via statsmodels.datasets)
//! and on invented data with planted outliers.

mod common;
use common::*;

fn stackloss_csv() -> String {
    let r = json("tests/reference/fit/fit_reference.json");
    let d = &r["stackloss"]["data"];
    csv_text(&[
        ("stackloss", vecf(&d["STACKLOSS"])),
        ("air_flow", vecf(&d["AIRFLOW"])),
        ("water_temp", vecf(&d["WATERTEMP"])),
        ("acid_conc", vecf(&d["ACIDCONC"])),
    ])
}

const STACKLOSS_SPEC: &str = "knotwise: 1
title: Stack loss
data:
  file: data.csv
response: stackloss
linear:
  - column: air_flow
  - column: water_temp
  - column: acid_conc
smooth: []
";

fn flagged_observations(a: &knotwise::analysis::Analysis) -> Vec<u64> {
    // Source line − 1 is the observation number (header on line 1).
    a.sensitivity.flagged.iter().map(|&i| a.frame.lines[i] - 1).collect()
}

#[test]
fn stackloss_mm_flags_the_known_outliers_at_cutoff_3() {
    // Observations 1, 3, 4 and 21 are the long-known outliers of these data (Daniel & Wood 1971;
    // Rousseeuw & Leroy 1987), from memory.
    let spec = format!("{STACKLOSS_SPEC}outliers:\n  cutoff: 3\n");
    let a = analyse("stackloss-mm", &spec, &stackloss_csv());
    assert_eq!(flagged_observations(&a), vec![1, 3, 4, 21]);
    // The classical refit without them equals statsmodels OLS on the remaining 17 rows.
    let r = json("tests/reference/fit/fit_reference.json");
    let f = a.sensitivity.classical_without.as_ref().expect("refit without flagged rows");
    for (got, want) in f.coef.iter().zip(vecf(&r["stackloss"]["ols_without_1_3_4_21_coef"])) {
        assert_close(*got, want, 1e-10, "refit without 1,3,4,21 vs statsmodels OLS");
    }
    for (got, want) in f.std_errors.iter().zip(vecf(&r["stackloss"]["ols_without_1_3_4_21_bse"])) {
        assert_close(*got, want, 1e-10, "refit std errors vs statsmodels OLS");
    }
}

#[test]
fn stackloss_scale_convention_at_cutoff_2_5() {
    // knotwise's M-scale uses the 1/n mean (Rousseeuw & Yohai 1984), with no n/(n − p) factor. Under it
    // observation 13 sits just beyond 2.5 (|r/s| ≈ 2.515), so the MM fit at 2.5 flags it as well.
    let spec = format!("{STACKLOSS_SPEC}outliers:\n  cutoff: 2.5\n");
    let a = analyse("stackloss-mm25", &spec, &stackloss_csv());
    assert_eq!(flagged_observations(&a), vec![1, 3, 4, 13, 21]);
    let rf = &a.selection.robust_fit;
    let z13 = rf.residuals[12] / rf.scale;
    assert!(z13.abs() > 2.5 && z13.abs() < 2.53, "observation 13 scaled residual {z13}");

    // The Huber fit with MAD scale (statsmodels' documented RLM example) flags only 4 and 21; statsmodels
    // documents their scaled residuals as 2.664 and −3.654.
    let huber = format!("{STACKLOSS_SPEC}robust:\n  loss: huber\n  start: least-squares\noutliers:\n  cutoff: 2.5\n");
    let h = analyse("stackloss-huber", &huber, &stackloss_csv());
    assert_eq!(flagged_observations(&h), vec![4, 21]);
    let hf = &h.selection.robust_fit;
    assert!((hf.residuals[3] / hf.scale - 2.664).abs() < 5e-4);
    assert!((hf.residuals[20] / hf.scale + 3.654).abs() < 5e-4);
}

fn planted(seed: u64, n: usize, share: f64) -> (String, Vec<bool>) {
    let mut g = Lcg(seed);
    let (mut y, mut z, mut x) = (vec![], vec![], vec![]);
    let mut bad = vec![];
    for _ in 0..n {
        let xi = g.uniform() * 6.0;
        let zi = g.normal();
        let mut yi = 1.0 + 0.8 * zi + (xi * 1.3).sin() + 0.5 * g.normal();
        let is_bad = g.uniform() < share;
        if is_bad {
            yi += 0.5 * (8.0 + 2.0 * g.uniform());
        }
        y.push(yi);
        z.push(zi);
        x.push(xi);
        bad.push(is_bad);
    }
    (csv_text(&[("y", y), ("z", z), ("x", x)]), bad)
}

const PLANTED_SPEC: &str = "knotwise: 1
title: Planted
seed: 5
data:
  file: data.csv
response: y
linear:
  - column: z
smooth:
  - column: x
selection:
  basis-sizes: [5, 6, 7]
";

#[test]
fn planted_outliers_are_recalled_and_false_flags_stay_in_the_binomial_range() {
    let (csv, bad) = planted(11, 2000, 0.05);
    let a = analyse("planted", PLANTED_SPEC, &csv);
    let flagged = &a.sensitivity.flagged;
    let n_bad = bad.iter().filter(|b| **b).count();
    let hits = flagged.iter().filter(|&&i| bad[i]).count();
    let recall = hits as f64 / n_bad as f64;
    assert!(recall >= 0.95, "recall {recall}");
    // Clean rows beyond 2.5 under normal errors: Binomial(m, 0.0124); allow ±4 standard deviations.
    let m = (2000 - n_bad) as f64;
    let p = knotwise::dist::two_sided_normal_tail(2.5);
    assert!((p - 0.0124193).abs() < 1e-6, "P(|Z| > 2.5) = 1.24% (common practice)");
    let false_flags = (flagged.len() - hits) as f64;
    let (mean, sd) = (m * p, (m * p * (1.0 - p)).sqrt());
    assert!((false_flags - mean).abs() <= 4.0 * sd, "false flags {false_flags}, expected {mean} ± {sd}");
    assert_close(a.sensitivity.expected_false, 2000.0 * p, 1e-12, "expected false flags n·P(|Z|>c)");
    // The robust fit gives the planted rows weight near zero.
    let w = a.selection.robust_fit.weights.as_ref().unwrap();
    let heavy = (0..2000).filter(|&i| bad[i] && w[i] > 0.05).count();
    assert!(heavy <= n_bad / 20, "{heavy} planted rows kept a robust weight above 0.05");
}

#[test]
fn no_flagged_rows_means_no_refit_and_no_influence() {
    let (csv, _) = planted(3, 400, 0.0);
    let spec = PLANTED_SPEC.replace("basis-sizes: [5, 6, 7]", "basis-sizes: [5]") + "outliers:\n  cutoff: 6\n";
    let a = analyse("clean", &spec, &csv);
    assert!(a.sensitivity.flagged.is_empty());
    assert!(a.sensitivity.classical_without.is_none());
    assert!(a.sensitivity.influence.is_empty());
}

#[test]
fn influence_is_capped_at_fifty_rows() {
    let (csv, _) = planted(5, 1500, 0.08);
    let a = analyse("capped", PLANTED_SPEC, &csv);
    assert!(a.sensitivity.flagged.len() > 50);
    assert_eq!(a.sensitivity.influence.len(), 50);
    assert!(a.sensitivity.influence_capped);
}

#[test]
fn assessment_demo_planted_recording_errors_are_flagged_with_weight_near_zero() {
    // The demo's generator lists the rows it corrupted (demo-data/assessment-planted.csv).
    let spec = root("specs-demo/assessment.yaml");
    let study = knotwise::spec::load(&spec).unwrap();
    let frame = knotwise::app::load_frame(&study, "assessment.yaml").unwrap();
    let a = knotwise::analysis::analyse(study, frame, "assessment.yaml").unwrap();
    let planted = std::fs::read_to_string(root("demo-data/assessment-planted.csv")).unwrap();
    let ids: Vec<&str> = planted.lines().skip(1).filter_map(|l| l.split(',').next()).collect();
    let w = a.selection.robust_fit.weights.as_ref().unwrap();
    let flagged: std::collections::HashSet<usize> = a.sensitivity.flagged.iter().copied().collect();
    let mut used = 0;
    for id in &ids {
        // A planted row may also have been dropped for a missing value.
        if let Some(i) = (0..a.frame.n_used()).position(|i| a.frame.row_name(i) == *id) {
            used += 1;
            assert!(w[i] < 0.05, "planted row {id} kept robust weight {}", w[i]);
            assert!(flagged.contains(&i), "planted row {id} not flagged");
        }
    }
    assert!(used >= ids.len() - 2, "only {used} of {} planted rows were used", ids.len());
    assert!(a.sensitivity.coefficients.iter().any(|c| c.sign_changes || c.significance_changes));
}
