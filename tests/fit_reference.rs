//! Design assembly and the classical fit against outside references: numpy/scipy/statsmodels golden
//! values from tests/reference/fit/make_fit_reference.py, and the stackloss data (Brownlee 1965, via
//! statsmodels.datasets). Plus invariances of the least-squares fit.

mod common;
use common::*;

use knotwise::basis::KnotPlacement;
use knotwise::data::{self, FrameRequest};
use knotwise::design::{Design, LinearSpec, ModelTerms, SmoothSpec};
use knotwise::fit;
use knotwise::select;

fn fixture_terms() -> ModelTerms {
    ModelTerms {
        response: "y".into(),
        linear: vec![
            LinearSpec { column: "z".into(), categorical: false },
            LinearSpec { column: "g".into(), categorical: true },
        ],
        smooth: vec![
            SmoothSpec { column: "x1".into(), degree: 3, knots: KnotPlacement::Quantile },
            SmoothSpec { column: "x2".into(), degree: 3, knots: KnotPlacement::Quantile },
        ],
    }
}

fn fixture_frame() -> knotwise::data::Frame {
    data::load(&FrameRequest {
        path: root("tests/fixtures/fit/data.csv"),
        display: "data.csv".into(),
        missing: vec!["".into()],
        id: None,
        numeric: vec!["y".into(), "z".into(), "x1".into(), "x2".into()],
        categorical: vec![("g".into(), None)],
    })
    .unwrap()
}

#[test]
fn classical_fit_matches_statsmodels_ols_on_the_same_design() {
    let reference = json("tests/reference/fit/fit_reference.json");
    let frame = fixture_frame();
    let terms = fixture_terms();
    for case in reference["fits"].as_array().unwrap() {
        let k = case["k"].as_u64().unwrap() as usize;
        let design = Design::build(&frame, &terms, &[k, k]).unwrap();
        assert_eq!(design.p, case["p"].as_u64().unwrap() as usize);
        for (got, want) in design.smooth[0].basis.knots.iter().zip(vecf(&case["knots_x1"])) {
            assert_close(*got, want, 1e-12, "x1 knots vs numpy.quantile");
        }
        for (got, want) in design.smooth[1].basis.knots.iter().zip(vecf(&case["knots_x2"])) {
            assert_close(*got, want, 1e-12, "x2 knots vs numpy.quantile");
        }
        let f = fit::classical(&design).unwrap();
        for (j, want) in vecf(&case["coef"]).iter().enumerate() {
            assert_close(f.coef[j], *want, 1e-8, &format!("k={k} coefficient {} vs statsmodels OLS", design.names[j]));
        }
        for (j, want) in vecf(&case["bse"]).iter().enumerate() {
            assert_close(f.std_errors[j], *want, 1e-8, "std error vs statsmodels OLS bse");
        }
        for (i, want) in vecf(&case["fitted_first10"]).iter().enumerate() {
            assert_close(f.fitted_at(&design.y, i), *want, 1e-8, "fitted value vs statsmodels OLS");
        }
        assert_close(f.rss, case["rss"].as_f64().unwrap(), 1e-8, "RSS vs statsmodels OLS");
        assert_close(f.r_squared, case["r2"].as_f64().unwrap(), 1e-8, "R² vs statsmodels OLS");
        let bic = select::bic(f.rss, design.n, design.p, 0.5);
        assert_close(bic, case["bic"].as_f64().unwrap(), 1e-8, "BIC from statsmodels OLS RSS");
    }
}

fn stackloss_frame(reference: &serde_json::Value) -> knotwise::data::Frame {
    let d = &reference["stackloss"]["data"];
    numeric_frame(&[
        ("stackloss", vecf(&d["STACKLOSS"])),
        ("air_flow", vecf(&d["AIRFLOW"])),
        ("water_temp", vecf(&d["WATERTEMP"])),
        ("acid_conc", vecf(&d["ACIDCONC"])),
    ])
}

fn stackloss_terms() -> ModelTerms {
    ModelTerms {
        response: "stackloss".into(),
        linear: ["air_flow", "water_temp", "acid_conc"]
            .iter()
            .map(|c| LinearSpec { column: c.to_string(), categorical: false })
            .collect(),
        smooth: vec![],
    }
}

#[test]
fn stackloss_ols_matches_published_and_statsmodels_values() {
    let reference = json("tests/reference/fit/fit_reference.json");
    let design = Design::build(&stackloss_frame(&reference), &stackloss_terms(), &[]).unwrap();
    let f = fit::classical(&design).unwrap();
    // Published OLS for stackloss (Brownlee 1965; also statsmodels' documentation), 4 decimals.
    for (got, want) in f.coef.iter().zip([-39.9197, 0.7156, 1.2953, -0.1521]) {
        assert!((got - want).abs() < 5e-5, "stackloss OLS {got} vs published {want}");
    }
    for (got, want) in f.coef.iter().zip(vecf(&reference["stackloss"]["ols_coef"])) {
        assert_close(*got, want, 1e-10, "stackloss OLS vs statsmodels");
    }
    for (got, want) in f.std_errors.iter().zip(vecf(&reference["stackloss"]["ols_bse"])) {
        assert_close(*got, want, 1e-10, "stackloss OLS bse vs statsmodels");
    }
    // Without observations 1, 3, 4 and 21 (1-based): statsmodels OLS on the remaining 17 rows.
    let keep: Vec<usize> = (0..21).filter(|i| ![0, 2, 3, 20].contains(i)).collect();
    let g = fit::classical(&design.subset(&keep)).unwrap();
    for (got, want) in g.coef.iter().zip(vecf(&reference["stackloss"]["ols_without_1_3_4_21_coef"])) {
        assert_close(*got, want, 1e-10, "stackloss OLS without 1,3,4,21 vs statsmodels");
    }
    for (got, want) in g.std_errors.iter().zip(vecf(&reference["stackloss"]["ols_without_1_3_4_21_bse"])) {
        assert_close(*got, want, 1e-10, "stackloss OLS bse without 1,3,4,21 vs statsmodels");
    }
}

#[test]
fn leverage_and_leave_one_out_influence() {
    let reference = json("tests/reference/fit/fit_reference.json");
    let design = Design::build(&stackloss_frame(&reference), &stackloss_terms(), &[]).unwrap();
    let f = fit::classical(&design).unwrap();
    // Both ways of computing them: from (X'X)⁻¹ (as the pipeline does) and from the R factor.
    let by_factor = knotwise::sensitivity::leverage(&design, None).unwrap();
    let lev = knotwise::sensitivity::leverage(&design, Some(&f.xtx_inverse)).unwrap();
    for l in [&lev, &by_factor] {
        let sum: f64 = l.hat.iter().sum();
        assert_close(sum, design.p as f64, 1e-10, "hat values sum to p");
        for (got, want) in l.hat.iter().zip(vecf(&reference["stackloss"]["hat"])) {
            assert_close(*got, want, 1e-10, "hat values vs statsmodels get_influence().hat_matrix_diag");
        }
    }
    let ls = knotwise::linalg::qr_solve_rows(&design, &design.y, None).unwrap();
    let inv = ls.xtx_inverse();
    let rows: Vec<usize> = (0..21).collect();
    let infl = knotwise::sensitivity::influence(&design, &f, &inv, &lev.hat, &rows);
    let sm_dfbetas = reference["stackloss"]["dfbetas"].as_array().unwrap();
    for inf in &infl {
        // Closed form against an explicit refit without the row (Belsley, Kuh & Welsch 1980).
        let keep: Vec<usize> = (0..21).filter(|&i| i != inf.row).collect();
        let refit = fit::classical(&design.subset(&keep)).unwrap();
        for j in 0..design.p {
            assert_close(inf.change[j], refit.coef[j] - f.coef[j], 1e-8, "leave-one-out change vs explicit refit");
            // statsmodels' dfbetas are (β − β_(i)) / (s_(i) √c_jj); ours are the change when the row is
            // left out, β_(i) − β, in the same units: the sign is opposite by definition.
            let want = sm_dfbetas[inf.row].as_array().unwrap()[j].as_f64().unwrap();
            assert_close(inf.dfbetas[j], -want, 1e-8, "DFBETAS vs statsmodels (sign convention noted)");
        }
    }
}

#[test]
fn least_squares_invariances() {
    let frame = fixture_frame();
    let terms = fixture_terms();
    let base = Design::build(&frame, &terms, &[5, 5]).unwrap();
    let f = fit::classical(&base).unwrap();

    // Adding a constant to y moves only the intercept.
    let mut shifted = base.clone();
    shifted.y.iter_mut().for_each(|v| *v += 123.5);
    let g = fit::classical(&shifted).unwrap();
    assert_close(g.coef[0], f.coef[0] + 123.5, 1e-10, "intercept moves by the shift");
    for j in 1..base.p {
        assert_close(g.coef[j], f.coef[j], 1e-10, "other coefficients unchanged by a shift of y");
    }

    // Rescaling a smooth covariate leaves the fitted values unchanged (quantile knots are equivariant).
    let mut frame2 = frame.clone();
    for c in &mut frame2.columns {
        if c.name == "x1" {
            if let knotwise::data::ColumnData::Numeric(v) = &mut c.data {
                v.iter_mut().for_each(|x| *x = *x * 3.7 + 11.0);
            }
        }
    }
    let scaled = fit::classical(&Design::build(&frame2, &terms, &[5, 5]).unwrap()).unwrap();
    for i in 0..base.n {
        assert_close(scaled.fitted_at(&base.y, i), f.fitted_at(&base.y, i), 1e-10, "fitted values after rescaling x1");
    }

    // Reordering rows leaves coefficients unchanged.
    let order: Vec<usize> = (0..frame.n_used()).rev().collect();
    let reordered = knotwise::sensitivity::frame_subset(&frame, &order);
    let r = fit::classical(&Design::build(&reordered, &terms, &[5, 5]).unwrap()).unwrap();
    for j in 0..base.p {
        assert_close(r.coef[j], f.coef[j], 1e-10, "coefficients after reordering rows");
    }
}

#[test]
fn rank_deficient_design_names_the_aliased_columns() {
    let mut lcg = Lcg(7);
    let a: Vec<f64> = (0..50).map(|_| lcg.uniform()).collect();
    let b: Vec<f64> = a.iter().map(|v| 2.0 * v + 1.0).collect();
    let y: Vec<f64> = (0..50).map(|_| lcg.normal()).collect();
    let frame = numeric_frame(&[("y", y), ("a", a), ("b", b)]);
    let terms = ModelTerms {
        response: "y".into(),
        linear: vec![
            LinearSpec { column: "a".into(), categorical: false },
            LinearSpec { column: "b".into(), categorical: false },
        ],
        smooth: vec![],
    };
    let design = Design::build(&frame, &terms, &[]).unwrap();
    let err = fit::classical(&design).unwrap_err();
    let e = knotwise::analysis::fit_error(err, &design.names, "study.yaml");
    assert_eq!(e.to_string(), "study.yaml: the design is rank deficient: column `b` is a linear combination of `intercept`, `a`\n  hint: remove one of the aliased terms, or check the data for a column that duplicates another");
}

#[test]
fn leverage_of_an_ill_conditioned_design_comes_from_the_factor() {
    // A covariate around 1e8 with unit spread: (X'X)⁻¹ has rounding of order κ²ε ≈ 1, so hat values
    // from it would be noise; the pipeline's check sends such a design to the R-factor evaluation.
    let mut g = Lcg(5);
    let z: Vec<f64> = (0..200).map(|_| 1e8 + g.normal()).collect();
    let y: Vec<f64> = z.iter().map(|v| 0.5 * (v - 1e8) + g.normal()).collect();
    let frame = numeric_frame(&[("y", y), ("z", z)]);
    let terms = knotwise::design::ModelTerms {
        response: "y".into(),
        linear: vec![knotwise::design::LinearSpec { column: "z".into(), categorical: false }],
        smooth: vec![],
    };
    let design = Design::build(&frame, &terms, &[]).unwrap();
    let f = fit::classical(&design).unwrap();
    let by_factor = knotwise::sensitivity::leverage(&design, None).unwrap();
    let lev = knotwise::sensitivity::leverage(&design, Some(&f.xtx_inverse)).unwrap();
    // The quadratic forms themselves are off here (the case the check exists for).
    let raw = knotwise::linalg::quadratic_forms_rows(&design, &f.xtx_inverse);
    assert!(raw.iter().zip(&by_factor.hat).any(|(a, b)| (a - b).abs() > 1e-6), "x'Mx was accurate after all");
    let sum: f64 = by_factor.hat.iter().sum();
    assert_close(sum, 2.0, 1e-6, "hat values sum to p");
    for (a, b) in lev.hat.iter().zip(&by_factor.hat) {
        assert_close(*a, *b, 1e-6, "hat value with (X'X)⁻¹ offered vs from the factor");
    }
}
