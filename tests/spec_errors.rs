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
fn unknown_key_with_suggestion() {
    assert_eq!(
        err(&with("smoth:\n  - column: age\n")),
        "study.yaml, line 6, key smoth: unknown key `smoth`\n  hint: did you mean `smooth`? The keys of the spec are `knotwise`, `title`, `date`, `seed`, `data`, `response`, `linear`, `smooth`, `selection`, `robust`, `outliers`, `sensitivity`, `report`"
    );
}

#[test]
fn unknown_nested_key_with_path() {
    assert_eq!(
        err(&with("smooth:\n  - column: age\n    degre: 3\n")),
        "study.yaml, line 8, key smooth[0].degre: unknown key `degre`\n  hint: did you mean `degree`? The keys of a smooth term are `column`, `degree`, `knots`, `basis-sizes`"
    );
}

#[test]
fn missing_required_key() {
    assert_eq!(
        err("title: x\n"),
        "study.yaml: missing required key `knotwise`\n  hint: start the spec with `knotwise: 1` (the spec format version)"
    );
}

#[test]
fn missing_data_file() {
    assert_eq!(
        err("knotwise: 1\ntitle: x\ndata:\n  id: a\nresponse: y\n"),
        "study.yaml, line 3, key data: missing required key `data.file`\n  hint: add `file: <path to the CSV>` under `data:`"
    );
}

#[test]
fn wrong_type() {
    assert_eq!(
        err(&with("smooth:\n  - column: age\n    degree: three\n")),
        "study.yaml, line 8, key smooth[0].degree: expected a whole number (0 or more), found the text \"three\"\n  hint: the degree is a whole number from 1 to 5 (3 is cubic)"
    );
}

#[test]
fn unsupported_version() {
    assert_eq!(
        err(&BASE.replace("knotwise: 1", "knotwise: 2")),
        "study.yaml, line 1, key knotwise: spec format version 2 is not supported; this knotwise reads version 1\n  hint: write `knotwise: 1` and check the spec against the version 1 format"
    );
}

#[test]
fn list_spec() {
    assert_eq!(
        err("- a\n- b\n"),
        "study.yaml: the spec must be a mapping of keys (`knotwise`, `title`, `data`, `response`, ...); it is a list\n  hint: start the spec with `knotwise: 1` and `title: ...` on their own lines, keys at the left margin"
    );
}

#[test]
fn scalar_spec() {
    assert_eq!(
        err("hello\n"),
        "study.yaml: the spec must be a mapping of keys (`knotwise`, `title`, `data`, `response`, ...); it is a single value\n  hint: start the spec with `knotwise: 1` and `title: ...` on their own lines, keys at the left margin"
    );
}

#[test]
fn tab_indentation() {
    assert_eq!(
        err("knotwise: 1\ntitle: x\ndata:\n\tfile: a.csv\n"),
        "study.yaml, line 4, column 1: this is not valid YAML: the line is indented with a tab\n  hint: indent with spaces: YAML does not allow tabs for indentation"
    );
}

#[test]
fn duplicate_key() {
    assert_eq!(
        err("knotwise: 1\ntitle: x\ntitle: y\n"),
        "study.yaml, line 3: the key `title` is given twice\n  hint: remove one of them"
    );
}

#[test]
fn response_used_as_term() {
    assert_eq!(
        err(&with("linear:\n  - column: price\n")),
        "study.yaml, line 7, key linear[0].column: the response \"price\" is also used as a linear term\n  hint: a column cannot explain itself; remove it from `linear`"
    );
}

#[test]
fn column_used_twice() {
    assert_eq!(
        err(&with("linear:\n  - column: d\nsmooth:\n  - column: d\n")),
        "study.yaml, line 9, key smooth[0].column: the column \"d\" is used twice: in linear[0].column and in smooth[0].column\n  hint: use each column in one term only"
    );
}

#[test]
fn reference_without_categorical() {
    assert_eq!(
        err(&with("linear:\n  - column: d\n    reference: a\n")),
        "study.yaml, line 8, key linear[0].reference: `reference` is given for \"d\" but the term is not categorical\n  hint: add `categorical: true` to the term, or remove `reference`"
    );
}

#[test]
fn basis_size_below_degree_plus_one() {
    assert_eq!(
        err(&with("smooth:\n  - column: age\n    basis-sizes: [3, 4]\n")),
        "study.yaml, line 8, key smooth[0].basis-sizes: basis size 3 is too small for degree 3 (smooth term `age`); `k` must be at least degree + 1 = 4\n  hint: use basis sizes of 4 or more, or lower the degree"
    );
}

#[test]
fn shared_grid_checked_against_degree() {
    assert_eq!(
        err(&with("smooth:\n  - column: age\n    degree: 5\n")),
        "study.yaml, key selection.basis-sizes: basis size 4 is too small for degree 5 (smooth term `age`); `k` must be at least degree + 1 = 6\n  hint: use basis sizes of 6 or more, or lower the degree"
    );
}

#[test]
fn huge_basis_size() {
    assert_eq!(
        err(&with("smooth:\n  - column: age\n    basis-sizes: [1000000]\n")),
        "study.yaml, line 8, key smooth[0].basis-sizes: basis size 1000000 is too large; at most 50 basis functions per term are allowed\n  hint: smooth terms rarely need more than 10 to 15 basis functions; use sizes such as `[4, 5, 6, 7, 8]`"
    );
}

#[test]
fn empty_grid() {
    assert_eq!(
        err(&with("selection:\n  basis-sizes: []\n")),
        "study.yaml, line 7, key selection.basis-sizes: the grid of basis sizes is empty\n  hint: list at least one size, e.g. `[4, 5, 6]`"
    );
}

#[test]
fn efficiency_one() {
    assert_eq!(
        err(&with("robust:\n  efficiency: 1.0\n")),
        "study.yaml, line 7, key robust.efficiency: efficiency 1 is out of range; it must be above 0.5 and below 1\n  hint: 0.95 is the usual choice; an efficiency of 1 would be least squares, which is not robust"
    );
}

#[test]
fn negative_cutoff() {
    assert_eq!(
        err(&with("outliers:\n  cutoff: -1\n")),
        "study.yaml, line 7, key outliers.cutoff: cutoff -1 is out of range; it must be above 0 and at most 10\n  hint: 2.5 is the default: rows whose residual is more than 2.5 robust scales from the fit are flagged"
    );
}

#[test]
fn too_many_subsamples() {
    assert_eq!(
        err(&with("robust:\n  subsamples: 1000000000000\n")),
        "study.yaml, line 7, key robust.subsamples: subsamples 1000000000000 is out of range; it must be from 1 to 100000\n  hint: 500 is the default and enough for most studies"
    );
}

#[test]
fn degree_zero() {
    assert_eq!(
        err(&with("smooth:\n  - column: age\n    degree: 0\n")),
        "study.yaml, line 8, key smooth[0].degree: degree 0 is out of range; it must be from 1 to 5\n  hint: 3 (cubic) is the usual choice; 1 gives a broken line"
    );
}

#[test]
fn degree_twelve() {
    assert_eq!(
        err(&with("smooth:\n  - column: age\n    degree: 12\n")),
        "study.yaml, line 8, key smooth[0].degree: degree 12 is out of range; it must be from 1 to 5\n  hint: 3 (cubic) is the usual choice; 1 gives a broken line"
    );
}

#[test]
fn bad_sha256_pin() {
    assert_eq!(
        err(&BASE.replace("  file: sales.csv\n", "  file: sales.csv\n  sha256: abc123\n")),
        "study.yaml, line 5, key data.sha256: \"abc123\" is not a sha256 digest; it must be 64 hexadecimal characters (found 6)\n  hint: copy the digest printed by `sha256sum <file>`, or remove the pin"
    );
}

#[test]
fn least_squares_start_needs_huber() {
    assert_eq!(
        err(&with("robust:\n  start: least-squares\n")),
        "study.yaml, line 7, key robust.start: `start: least-squares` needs `loss: huber`; the bisquare loss needs the S-estimate start\n  hint: write `loss: huber`, or use `start: s-estimate`"
    );
}

#[test]
fn negative_seed() {
    assert_eq!(
        err(&with("seed: -3\n")),
        "study.yaml, line 6, key seed: expected a whole number (0 or more), found the number -3\n  hint: the seed is a whole number from 0 to 18446744073709551615, e.g. `seed: 4172`"
    );
}

#[test]
fn unknown_choice() {
    assert_eq!(
        err(&with("smooth:\n  - column: age\n    knots: quantil\n")),
        "study.yaml, line 8, key smooth[0].knots: unknown choice `quantil`\n  hint: did you mean `quantile`? The choices are `quantile` or `uniform`"
    );
}

#[test]
fn bad_date() {
    assert_eq!(
        err(&with("date: 2026-02-30\n")),
        "study.yaml, line 6, key date: \"2026-02-30\" is not a date of the form YYYY-MM-DD\n  hint: write the date as year-month-day, e.g. `date: 2026-11-30`"
    );
}

#[test]
fn empty_title() {
    assert_eq!(
        err(&BASE.replace("title: Sales", "title: \"  \"")),
        "study.yaml, line 2, key title: `title` is empty\n  hint: write a short description of the study"
    );
}

#[test]
fn long_title() {
    assert_eq!(
        err(&BASE.replace("Sales", &"x".repeat(201))),
        "study.yaml, line 2, key title: the title is 201 characters long; at most 200 are allowed\n  hint: shorten the title and put the details in `report.notes`"
    );
}

#[test]
fn missing_notes_file() {
    assert_eq!(
        err(&with("report:\n  notes: missing.md\n")),
        "study.yaml, line 7, key report.notes: cannot read the notes file \"missing.md\": no such file or directory\n  hint: paths in the spec are relative to the spec's folder; or write the notes inline"
    );
}

#[test]
fn alias_bomb_is_refused_quickly() {
    let mut text = String::from(
        "knotwise: 1\na0: &a0 [\"lol\", \"lol\", \"lol\", \"lol\", \"lol\", \"lol\", \"lol\", \"lol\", \"lol\"]\n",
    );
    for i in 1..10 {
        let prev = format!("*a{}", i - 1);
        text.push_str(&format!("a{i}: &a{i} [{}]\n", vec![prev; 9].join(", ")));
    }
    let start = Instant::now();
    let e = err(&text);
    assert!(start.elapsed() < Duration::from_secs(5), "took {:?}", start.elapsed());
    assert_eq!(
        e,
        "study.yaml: the spec expands YAML aliases too many times (is it an alias bomb?)\n  \
         hint: write the values out instead of nesting anchors (&) and aliases (*)"
    );
}

#[test]
fn oversized_spec_is_refused() {
    let text = format!("{BASE}# {}\n", "x".repeat(1024 * 1024));
    assert_eq!(
        err(&text),
        format!(
            "study.yaml: the spec is {} bytes long; at most 1048576 bytes (1 MiB) are read\n  \
             hint: a study spec is a short YAML file; check that this is the right file",
            text.len()
        )
    );
}

#[test]
fn load_names_the_path_as_given() {
    let e = spec::load(Path::new("no/such/study.yaml")).unwrap_err();
    assert_eq!(
        e.to_string(),
        "no/such/study.yaml: cannot read the spec: no such file or directory\n  \
         hint: the spec's path is relative to the working folder; check the spelling"
    );
}

const FULL: &str = r#"knotwise: 1
title: Residential sales, price per square metre
date: 2026-11-30
seed: 4172
data:
  file: ../demo-data/assessment-sales.csv
  sha256: 9F1C000000000000000000000000000000000000000000000000000000000abc
  missing: ["", "NA"]
  id: parcel
response: price_per_m2
linear:
  - column: storeys
  - column: district
    categorical: true
    reference: harbour
smooth:
  - column: floor_area
    degree: 3
    knots: quantile
  - column: building_age
    knots: uniform
  - column: transit_distance
    basis-sizes: [4, 5, 6]
selection:
  robust-scale: per-size
robust:
  loss: huber
  start: least-squares
  efficiency: 0.9
outliers:
  cutoff: 3
report:
  notes: |
    Invented data. <b>Raw HTML</b> stays text.
    Second line with "quotes" and a \ backslash.
"#;

#[test]
fn resolved_yaml_round_trips_and_fills_defaults() {
    let base = Path::new("specs");
    let s = spec::parse(FULL, "study.yaml", base).unwrap();
    assert_eq!(s.data.sha256.as_deref(), Some("9f1c000000000000000000000000000000000000000000000000000000000abc"));
    assert_eq!(s.data.file, base.join("../demo-data/assessment-sales.csv"));
    let text = s.to_resolved_yaml();
    let again = spec::parse(&text, "study.resolved.yaml", base).unwrap();
    assert_eq!(again, s);
    assert_eq!(again.to_resolved_yaml(), text, "the resolved spec is a fixed point");
    assert!(text.contains("  subsamples: 500\n"));
    assert!(text.contains("  bic-penalty: 0.5\n"));
    assert!(text.contains("  refit-without-flagged: true\n"));
    let minimal = spec::parse(BASE, "study.yaml", base).unwrap();
    assert_eq!(
        minimal.to_resolved_yaml(),
        "knotwise: 1\ntitle: \"Sales\"\nseed: 1\ndata:\n  file: \"sales.csv\"\n  missing: [\"\"]\nresponse: \"price\"\n\
         linear: []\nsmooth: []\nselection:\n  basis-sizes: [4, 5, 6, 7, 8]\n  bic-penalty: 0.5\n  robust-scale: shared\n\
         robust:\n  loss: bisquare\n  efficiency: 0.95\n  start: s-estimate\n  subsamples: 500\noutliers:\n  cutoff: 2.5\n\
         sensitivity:\n  refit-without-flagged: true\n  influence: true\nreport: {}\n"
    );
    assert_eq!(spec::parse(&minimal.to_resolved_yaml(), "r.yaml", base).unwrap(), minimal);
}

#[test]
fn notes_file_is_read_relative_to_the_spec() {
    let dir = temp_dir("notes");
    std::fs::write(dir.join("notes.md"), "# Notes\nhello\n").unwrap();
    std::fs::write(dir.join("study.yaml"), with("report:\n  notes: notes.md\n")).unwrap();
    let s = spec::load(&dir.join("study.yaml")).unwrap();
    assert_eq!(s.report.notes_as_written.as_deref(), Some("notes.md"));
    assert_eq!(s.report.notes_markdown.as_deref(), Some("# Notes\nhello\n"));
    assert_eq!(s.data.file, dir.join("sales.csv"));
    let inline = spec::parse(&with("report:\n  notes: Just a sentence.\n"), "s.yaml", &dir).unwrap();
    assert_eq!(inline.report.notes_markdown.as_deref(), Some("Just a sentence."));
    let _ = std::fs::remove_dir_all(&dir);
}
