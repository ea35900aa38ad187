//! Degenerate designs: each gives a clear message or a valid result; never a panic, a hang or a NaN in
//! any output file. Run through the binary (so every stage and the writers are covered) in a scratch
//! folder, plus library-level checks of the fit where the binary hides the numbers.
//!
//! (Former known issues now fixed are kept as regression tests.)

mod common;
use common::Lcg;

use std::fmt::Write as _;
use std::path::PathBuf;
use std::process::Command;

fn scratch(name: &str) -> PathBuf {
    let d = std::env::temp_dir().join(format!("knotwise-degenerate-{name}-{}", std::process::id()));
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

struct Run {
    code: i32,
    stdout: String,
    stderr: String,
    /// Output files by name (empty when nothing was written).
    files: Vec<(String, String)>,
}

impl Run {
    fn file(&self, name: &str) -> &str {
        self.files.iter().find(|(n, _)| n == name).map(|(_, t)| t.as_str()).unwrap_or_else(|| panic!("no {name}"))
    }
    fn results(&self) -> serde_json::Value {
        serde_json::from_str(self.file("results.json")).unwrap()
    }
}

/// `knotwise run spec.yaml --out out` on the given spec and data; checks the universal properties:
/// exit 0 or 2, no temp folders, and no NaN or inf text in any output file.
fn run(name: &str, spec: &str, data: &str) -> Run {
    let d = scratch(name);
    std::fs::write(d.join("spec.yaml"), spec).unwrap();
    std::fs::write(d.join("data.csv"), data).unwrap();
    let out = Command::new(env!("CARGO_BIN_EXE_knotwise"))
        .args(["run", "spec.yaml", "--out", "out"])
        .current_dir(&d)
        .output()
        .unwrap();
    let code = out.status.code().unwrap_or(-1);
    let stdout = String::from_utf8_lossy(&out.stdout).into_owned();
    let stderr = String::from_utf8_lossy(&out.stderr).into_owned();
    assert!(code == 0 || code == 2, "{name}: exit {code}\n{stderr}");
    assert!(!stderr.contains("panicked"), "{name}: {stderr}");
    let mut files = Vec::new();
    if let Ok(dir) = std::fs::read_dir(d.join("out")) {
        for e in dir.flatten() {
            let text = String::from_utf8_lossy(&std::fs::read(e.path()).unwrap()).into_owned();
            files.push((e.file_name().to_string_lossy().into_owned(), text));
        }
    }
    files.sort();
    for (f, text) in &files {
        if f.ends_with(".json") || f.ends_with(".csv") || f.ends_with(".yaml") {
            for bad in ["NaN", "nan,", "inf,", "Infinity", "-inf"] {
                assert!(!text.contains(bad), "{name}: {f} contains {bad:?}");
            }
        }
        if f == "report.html" {
            assert!(!text.contains(">NaN<") && !text.contains(" NaN"), "{name}: report shows NaN");
        }
    }
    for e in std::fs::read_dir(&d).unwrap().flatten() {
        let n = e.file_name().to_string_lossy().into_owned();
        assert!(!n.contains(".tmp-") && !n.contains(".old-"), "{name}: left {n}");
    }
    if code == 2 {
        assert!(files.is_empty(), "{name}: failed but wrote output");
        assert!(stderr.starts_with("error: ") && stderr.contains("\n  hint: "), "{name}: {stderr}");
    }
    let _ = std::fs::remove_dir_all(&d);
    Run { code, stdout, stderr, files }
}

const HEAD: &str = "knotwise: 1\ntitle: Degenerate\ndata:\n  file: data.csv\n  missing: [\"\", NA]\nresponse: y\n";

/// `n` rows of y, z1 (numeric), x1 (smooth), grp (4 levels), with y built by `f(z1, x1, group)`.
fn data(n: usize, noise: f64, f: impl Fn(f64, f64, usize) -> f64) -> String {
    let mut rng = Lcg(99);
    let mut s = String::from("y,z1,z2,x1,grp\n");
    for i in 0..n {
        let z1 = rng.uniform() * 4.0;
        let z2 = rng.uniform();
        let x1 = rng.uniform() * 6.0;
        let g = i % 4;
        let y = f(z1, x1, g) + noise * rng.normal();
        let _ = writeln!(s, "{y:?},{z1:?},{z2:?},{x1:?},{}", ["a", "b", "c", "d"][g]);
    }
    s
}

fn smooth_spec(extra: &str) -> String {
    format!("{HEAD}linear:\n  - column: z1\nsmooth:\n  - column: x1\nselection:\n  basis-sizes: [4, 5]\nrobust:\n  subsamples: 100\n{extra}")
}

#[test]
fn constant_linear_column_is_named() {
    let d: String = data(40, 0.1, |z, x, _| 1.0 + z + x.sin())
        .lines()
        .enumerate()
        .map(|(i, l)| if i == 0 { format!("{l},k\n") } else { format!("{l},3\n") })
        .collect();
    let r = run("constant", &format!("{HEAD}linear:\n  - column: z1\n  - column: k\n"), &d);
    assert_eq!(r.code, 2);
    assert_eq!(
        r.stderr,
        "error: spec.yaml: the design is rank deficient: column `k` is constant (it duplicates the intercept)\n  \
         hint: remove one of the aliased terms, or check the data for a column that duplicates another\n"
    );
}

#[test]
fn duplicate_columns_are_named() {
    let d: String = data(40, 0.1, |z, x, _| 1.0 + z + x.sin())
        .lines()
        .enumerate()
        .map(|(i, l)| {
            let z1 = l.split(',').nth(1).unwrap();
            if i == 0 {
                format!("{l},z1copy\n")
            } else {
                format!("{l},{z1}\n")
            }
        })
        .collect();
    let r = run("duplicate", &format!("{HEAD}linear:\n  - column: z1\n  - column: z1copy\n"), &d);
    assert_eq!(r.code, 2);
    assert_eq!(
        r.stderr,
        "error: spec.yaml: the design is rank deficient: column `z1copy` is a linear combination of `z1`\n  \
         hint: remove one of the aliased terms, or check the data for a column that duplicates another\n"
    );
}

#[test]
fn categorical_with_one_level_is_refused() {
    let d = data(30, 0.1, |z, _, _| z).replace(",b\n", ",a\n").replace(",c\n", ",a\n").replace(",d\n", ",a\n");
    let r = run("one-level", &format!("{HEAD}linear:\n  - column: grp\n    categorical: true\n"), &d);
    assert_eq!(r.code, 2);
    assert_eq!(
        r.stderr,
        "error: data.csv: the categorical column \"grp\" has only one level (\"a\") among the used rows; a \
         categorical term needs at least two\n  hint: leave the term out of `linear`, or check the data and \
         `data.missing`\n"
    );
}

#[test]
fn every_row_dropped_by_missingness() {
    let d: String = data(20, 0.1, |z, _, _| z)
        .lines()
        .enumerate()
        .map(|(i, l)| {
            let mut f: Vec<&str> = l.split(',').collect();
            if i > 0 {
                f[1 + i % 2] = "NA";
            }
            format!("{}\n", f.join(","))
        })
        .collect();
    let r = run("all-dropped", &format!("{HEAD}linear:\n  - column: z1\n  - column: z2\n"), &d);
    assert_eq!(r.code, 2);
    assert_eq!(
        r.stderr,
        "error: data.csv: every row has a missing value in a used column; the most often missing: \"z1\" (10 of \
         20 rows), \"z2\" (10 of 20 rows)\n  hint: check `data.missing` (the tokens read as missing), or leave \
         out the terms with missing values\n"
    );
}

#[test]
fn fewer_rows_than_coefficients() {
    let r = run("n-less-than-p", &smooth_spec(""), &data(5, 0.1, |z, x, _| z + x));
    assert_eq!(r.code, 2);
    assert!(r.stderr.starts_with("error: spec.yaml"), "{}", r.stderr);
    assert!(r.stderr.contains("too few rows") || r.stderr.contains("no basis size"), "{}", r.stderr);
}

#[test]
fn smooth_term_with_three_distinct_values() {
    let d: String = data(40, 0.1, |z, _, _| z)
        .lines()
        .enumerate()
        .map(|(i, l)| {
            if i == 0 {
                return format!("{l}\n");
            }
            let mut f: Vec<String> = l.split(',').map(str::to_string).collect();
            f[3] = format!("{}", i % 3);
            format!("{}\n", f.join(","))
        })
        .collect();
    let r = run("three-distinct", &smooth_spec(""), &d);
    assert_eq!(r.code, 2);
    assert_eq!(
        r.stderr,
        "error: spec.yaml: selection.basis-sizes: no basis size on the grid is possible for these data:\n    \
         x1 = 4: `x1` has 3 distinct values, fewer than the 4 basis functions of size 4\n    \
         x1 = 5: `x1` has 3 distinct values, fewer than the 5 basis functions of size 5\n  \
         hint: choose smaller basis sizes, or use `knots: uniform` for a column with many tied values\n"
    );
    // As a degree-1 term with k = 3 it is possible (a broken line through three points).
    let spec = smooth_spec("").replace("column: x1", "column: x1\n    degree: 1\n    basis-sizes: [2, 3]");
    let r = run("three-distinct-degree-1", &spec, &d);
    assert_eq!(r.code, 0, "{}", r.stderr);
}

#[test]
fn one_extreme_leverage_point() {
    let mut d = data(60, 0.2, |z, x, _| 1.0 + 2.0 * z + x.sin());
    // z1 = 1000 and a response far off the line: the classical fit tilts, the robust one must not.
    d.push_str("-50.0,1000.0,0.5,3.0,a\n");
    let r = run("leverage", &smooth_spec(""), &d);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let v = r.results();
    let coef = |fit: &str| {
        v["fits"][fit]["coefficients"].as_array().unwrap().iter().find(|c| c["name"] == "z1").unwrap()["estimate"]
            .as_f64()
            .unwrap()
    };
    assert!((coef("robust") - 2.0).abs() < 0.2, "robust slope {}", coef("robust"));
    assert!((coef("classical") - 2.0).abs() > 0.5, "classical slope {}", coef("classical"));
    let flagged = v["outliers"]["flagged"].as_array().unwrap();
    assert!(flagged.iter().any(|f| f["line"] == 62), "{flagged:?}");
}

/// y scaled by 1e12 and 1e-12: every coefficient scales with it (equivariance), to relative 1e-8.
#[test]
fn huge_and_tiny_responses_are_scale_equivariant() {
    let base = data(50, 0.3, |z, x, g| 1.0 + 2.0 * z + x.sin() + [0.0, 0.5, -0.5, 1.0][g]);
    let spec = format!(
        "{HEAD}linear:\n  - column: z1\n  - column: grp\n    categorical: true\nsmooth:\n  - column: x1\n\
         selection:\n  basis-sizes: [4, 5]\nrobust:\n  subsamples: 100\nsensitivity:\n  influence: false\n"
    );
    let scaled = |factor: f64| -> String {
        base.lines()
            .enumerate()
            .map(|(i, l)| {
                if i == 0 {
                    return format!("{l}\n");
                }
                let (y, rest) = l.split_once(',').unwrap();
                format!("{:?},{rest}\n", y.parse::<f64>().unwrap() * factor)
            })
            .collect()
    };
    let r1 = run("scale-1", &spec, &base);
    assert_eq!(r1.code, 0, "{}", r1.stderr);
    let v1 = r1.results();
    for factor in [1e12, 1e-12] {
        let r = run(&format!("scale-{factor:e}"), &spec, &scaled(factor));
        assert_eq!(r.code, 0, "{}", r.stderr);
        let v = r.results();
        for fit in ["classical", "robust"] {
            assert_eq!(v["fits"][fit]["basis-sizes"], v1["fits"][fit]["basis-sizes"], "{fit} x {factor:e}");
            let a = v1["fits"][fit]["coefficients"].as_array().unwrap();
            let b = v["fits"][fit]["coefficients"].as_array().unwrap();
            assert_eq!(a.len(), b.len());
            for (ca, cb) in a.iter().zip(b) {
                for key in ["estimate", "std-error"] {
                    let want = ca[key].as_f64().unwrap() * factor;
                    let got = cb[key].as_f64().unwrap();
                    let tol = 1e-8 * want.abs().max(1e-6 * factor);
                    assert!(
                        (got - want).abs() <= tol,
                        "{fit} {} {key} x {factor:e}: got {got}, want {want}",
                        ca["name"]
                    );
                }
            }
        }
        let flagged = |v: &serde_json::Value| v["outliers"]["flagged"].as_array().map(Vec::len);
        assert_eq!(flagged(&v), flagged(&v1), "flagged rows x {factor:e}");
    }
}

/// y exactly linear in z1: residuals are zero, the robust scale collapses. The run must not panic or
/// write NaN; it either succeeds and says the scale collapsed, or refuses with a clear message.
#[test]
fn perfect_fit_does_not_panic_or_write_nan() {
    let d = data(40, 0.0, |z, _, _| 3.0 + 2.0 * z);
    let spec = format!("{HEAD}linear:\n  - column: z1\n  - column: z2\nrobust:\n  subsamples: 100\n");
    let r = run("perfect-linear", &spec, &d);
    assert_eq!(r.code, 0, "{}", r.stderr);
    {
        let v = r.results();
        assert_eq!(v["fits"]["robust"]["termination"]["status"], "scale-collapsed", "{}", r.file("results.json"));
        assert!(r.file("report.html").contains("scale collapsed"), "the report must say the scale collapsed");
    }
    let _ = r.stdout;
}

/// Regression (hostile catalogue): an exact linear fit used to be refused with "no criterion"; the robust
/// criterion now falls back to the classical choice and the fit is marked `scale-collapsed`.
#[test]
fn perfect_linear_fit_runs_and_says_the_scale_collapsed() {
    let d = data(40, 0.0, |z, _, _| 3.0 + 2.0 * z);
    let spec = format!("{HEAD}linear:\n  - column: z1\n  - column: z2\nrobust:\n  subsamples: 100\n");
    let r = run("perfect-linear-known", &spec, &d);
    assert_eq!(r.code, 0, "{}", r.stderr);
    assert_eq!(r.results()["fits"]["robust"]["termination"]["status"], "scale-collapsed");
    assert!(r.file("report.html").contains("scale collapsed"));
}

/// Regression (hostile catalogue): an exact fit with a smooth term runs and says the scale collapsed.
#[test]
fn perfect_fit_with_a_smooth_term_runs() {
    let d = data(40, 0.0, |z, x, _| 3.0 + 2.0 * z + 0.5 * x);
    let r = run("perfect-smooth", &smooth_spec(""), &d);
    assert_eq!(r.code, 0, "{}", r.stderr);
    let v = r.results();
    assert_eq!(v["fits"]["robust"]["termination"]["status"], "scale-collapsed");
}

/// Regression (hostile catalogue): a smooth column on a lattice (6 values) with a deterministic response
/// runs (its robust scale may collapse: the response is an exact function of the row number).
#[test]
fn lattice_smooth_column_runs() {
    let mut s = String::from("y,z1,x1\n");
    for i in 0..40 {
        let x = i % 6;
        let _ = writeln!(s, "{},{},{x}", 1.0 + 0.3 * f64::from(i) + f64::from(x * x) * 0.1, i % 7);
    }
    let r = run(
        "lattice",
        &format!("{HEAD}linear:\n  - column: z1\nsmooth:\n  - column: x1\nselection:\n  basis-sizes: [4]\n"),
        &s,
    );
    // Either a result or a message that gives a reason per grid point (never a bare "no criterion").
    assert_eq!(r.code, 0, "{}", r.stderr);
}
