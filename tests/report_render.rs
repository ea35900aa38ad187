//! The HTML report: figures, escaping, determinism and the full pipeline on a small hand-built study.
//!
//! The study and frame are built in code (not read from YAML/CSV) so this test depends only on the
//! numerics and the report, and can carry hostile names that no sane CSV would.

use knotwise::analysis::{self, Analysis};
use knotwise::basis::KnotPlacement;
use knotwise::data::{Column, ColumnData, DroppedRow, Frame};
use knotwise::outputs::{self, Inputs};
use knotwise::report::context::{self, ReportContext};
use knotwise::report::plots::{self, ChartSpec, Ink, Layer, LayerKind, LegendAt, Shape};
use knotwise::report::{self as report, render};
use knotwise::results::Results;
use knotwise::spec::*;

const HOSTILE: &str = "<script>alert(1)</script>";
/// How the template's HTML autoescape writes [`HOSTILE`] (it escapes `/` too).
const ESCAPED: &str = "&lt;script&gt;alert(1)&lt;&#x2f;script&gt;";

/// A deterministic pseudo-random stream (64-bit LCG, Knuth's MMIX constants).
struct Lcg(u64);
impl Lcg {
    fn uniform(&mut self) -> f64 {
        self.0 = self.0.wrapping_mul(6364136223846793005).wrapping_add(1442695040888963407);
        ((self.0 >> 11) as f64) / ((1u64 << 53) as f64)
    }
    fn normal(&mut self) -> f64 {
        // Sum of 12 uniforms minus 6: close enough to normal for a test fixture.
        (0..12).map(|_| self.uniform()).sum::<f64>() - 6.0
    }
}

fn study(notes: Option<&str>, categorical_name: &str) -> Study {
    Study {
        title: format!("Test study {HOSTILE}"),
        date: Some("2026-11-30".into()),
        seed: 7,
        data: DataSource {
            file_as_written: "data.csv".into(),
            file: "data.csv".into(),
            sha256: None,
            missing: vec![String::new()],
            id: None,
        },
        response: "y".into(),
        linear: vec![
            LinearTerm { column: "z".into(), categorical: false, reference: None },
            LinearTerm { column: categorical_name.into(), categorical: true, reference: None },
        ],
        smooth: vec![SmoothTerm { column: "x".into(), degree: 3, knots: KnotPlacement::Quantile, basis_sizes: None }],
        selection: Selection { basis_sizes: vec![4, 5, 6, 7], bic_penalty: 0.5, robust_scale: RobustScaleMode::Shared },
        robust: RobustSettings {
            loss: LossChoice::Bisquare,
            efficiency: 0.95,
            start: StartChoice::SEstimate,
            subsamples: 100,
        },
        outliers: OutlierSettings { cutoff: 2.5 },
        sensitivity: SensitivitySettings { refit_without_flagged: true, influence: true },
        report: ReportSettings {
            notes_as_written: notes.map(str::to_string),
            notes_markdown: notes.map(str::to_string),
        },
    }
}

/// n rows: y = 2 + 0.5 z + sin(x) + level effect + noise, with every 25th row shifted by +6.
fn frame(n: usize, categorical_name: &str) -> Frame {
    let mut r = Lcg(42);
    let mut x = Vec::new();
    let mut z = Vec::new();
    let mut y = Vec::new();
    let mut codes = Vec::new();
    for i in 0..n {
        let xi = 6.0 * r.uniform();
        let zi = r.normal();
        let c = (i % 3) as u32;
        let mut yi = 2.0 + 0.5 * zi + xi.sin() + [0.0, 0.7, -0.4][c as usize] + 0.3 * r.normal();
        if i % 25 == 3 {
            yi += 6.0;
        }
        x.push(xi);
        z.push(zi);
        y.push(yi);
        codes.push(c);
    }
    let levels = vec!["<b>bold</b>".to_string(), "north".to_string(), "south".to_string()];
    let counts = (0..3).map(|l| codes.iter().filter(|c| **c == l).count()).collect();
    Frame {
        n_read: n + 1,
        columns: vec![
            Column { name: "y".into(), data: ColumnData::Numeric(y) },
            Column { name: "z".into(), data: ColumnData::Numeric(z) },
            Column { name: "x".into(), data: ColumnData::Numeric(x) },
            Column {
                name: categorical_name.into(),
                data: ColumnData::Categorical { levels, codes, reference: 0, counts },
            },
        ],
        lines: (0..n as u64).map(|i| i + 2).collect(),
        ids: (0..n).map(|i| format!("R{}", i + 1)).collect(),
        dropped: vec![DroppedRow { line: (n + 2) as u64, columns: vec!["x".into()] }],
        missing_per_column: vec![("x".into(), 1)],
        warnings: vec![],
        sha256: "0".repeat(64),
        header: vec!["y".into(), "z".into(), "x".into(), categorical_name.into()],
    }
}

fn pipeline(notes: Option<&str>, categorical_name: &str) -> (Analysis, Results, String) {
    let resolved = format!("knotwise: 1\ntitle: Test study {HOSTILE}\nresponse: y\n");
    let a = analysis::analyse(study(notes, categorical_name), frame(300, categorical_name), "study.yaml")
        .unwrap_or_else(|e| panic!("{e}"));
    let r = outputs::results(&a, &Inputs { spec_bytes: resolved.as_bytes(), resolved_yaml: &resolved });
    (a, r, resolved)
}

fn hostile_chart() -> ChartSpec {
    ChartSpec {
        id: "fig-9-9".into(),
        title: format!("Curve of {HOSTILE}"),
        desc: format!("Robust curve of {HOSTILE} over 0 to 1"),
        x_label: HOSTILE.into(),
        y_label: "effect & <more>".into(),
        layers: vec![
            Layer {
                kind: LayerKind::Band {
                    x: vec![0.0, 0.5, 1.0],
                    lower: vec![-1.0, -0.5, -1.0],
                    upper: vec![1.0, 0.5, 1.0],
                    opacity: 0.2,
                },
                ink: Ink::Robust,
                label: "band".into(),
            },
            Layer {
                kind: LayerKind::Line {
                    points: vec![(0.0, 0.0), (0.333333, 0.1234567), (1.0, f64::NAN), (1.0, 0.2)],
                    dashed: true,
                    width: 2,
                },
                ink: Ink::Without,
                label: HOSTILE.into(),
            },
            Layer {
                kind: LayerKind::Points {
                    points: vec![(0.1, 0.2), (f64::NAN, 1.0), (0.7, f64::INFINITY)],
                    shape: Shape::Cross,
                    size: 4,
                    opacity: 1.0,
                },
                ink: Ink::Flag,
                label: "flagged row".into(),
            },
            Layer { kind: LayerKind::Rug { xs: vec![0.1, 0.2, 0.9] }, ink: Ink::Text, label: "rug".into() },
            Layer {
                kind: LayerKind::HLines { ys: vec![-2.5, 2.5], dashed: true },
                ink: Ink::Reference,
                label: "±cutoff".into(),
            },
        ],
        legend: LegendAt::UpperRight,
        y_include: vec![],
        y_range: None,
    }
}

/// Every decimal inside an SVG tag has at most 2 decimals.
fn assert_rounded(svg: &str) {
    let mut in_tag = false;
    let mut run = String::new();
    for c in svg.chars() {
        match c {
            '<' => in_tag = true,
            '>' => in_tag = false,
            _ => {}
        }
        if in_tag && (c.is_ascii_digit() || c == '.') {
            run.push(c);
        } else {
            if let Some((_, frac)) = run.split_once('.') {
                assert!(frac.len() <= 2, "unrounded number {run} in SVG");
            }
            run.clear();
        }
    }
}

#[test]
fn plots_are_accessible_rounded_and_escaped() {
    let f = plots::draw(&hostile_chart()).unwrap();
    let s = &f.svg;
    assert!(s.starts_with("<svg "), "{}", &s[..80]);
    assert!(s.contains("role=\"img\""));
    assert!(s.contains("aria-labelledby=\"fig-9-9-title fig-9-9-desc\""));
    assert!(s.contains("<title id=\"fig-9-9-title\">Curve of &lt;script&gt;alert(1)&lt;/script&gt;</title>"));
    assert!(s.contains("<desc id=\"fig-9-9-desc\">Robust curve of &lt;script&gt;"));
    assert!(!s.contains("<script"), "raw script tag in SVG");
    assert!(s.contains("flagged row"), "legend entry missing");
    assert!(s.contains("\n&lt;script&gt;alert(1)&lt;/script&gt;\n</text>"), "axis/legend label not escaped as text");
    assert!(!s.contains("NaN") && !s.contains("inf"), "non-finite text in SVG");
    assert!(!s.contains("http"), "URL in SVG");
    assert!(s.trim_end().ends_with("</svg>"));
    assert_rounded(s);
    // Same input, same bytes.
    assert_eq!(plots::draw(&hostile_chart()).unwrap().svg, f.svg);
}

#[test]
fn default_context_renders_and_escapes() {
    let mut ctx = ReportContext { title: HOSTILE.into(), ..Default::default() };
    ctx.notes.html = Some(context::notes_html("raw <b>html</b> and <script>x()</script>"));
    ctx.model.resolved_yaml = format!("title: {HOSTILE}");
    let html = render::render_context(&ctx).unwrap();
    assert!(!html.contains("<script"), "unescaped script");
    assert!(!html.contains("<b>html"), "notes html not escaped");
    assert!(html.contains(ESCAPED));
    assert!(html.contains("&lt;b&gt;html&lt;/b&gt;"));
    assert!(html.contains("No notes") || html.contains("class=\"notes\""));
}

#[test]
fn full_report_from_pipeline() {
    let notes = "Analyst says <b>html</b> here.\n\n<script>alert(2)</script>\n\n* a point";
    let (a, r, resolved) = pipeline(Some(notes), HOSTILE);
    let html = report::render(&a, &r, &resolved).unwrap();
    if let Ok(dir) = std::env::var("KNOTWISE_REPORT_SAMPLE") {
        let _ = std::fs::write(std::path::Path::new(&dir).join("report-sample.html"), &html);
    }

    // Self-contained and safe.
    assert!(html.starts_with("<!DOCTYPE html>"));
    assert!(html.contains("Content-Security-Policy"));
    assert!(!html.to_lowercase().contains("<script"), "a script element in the report");
    assert!(!html.contains("http://") && !html.contains("https://"), "a URL in the report");
    assert!(!html.contains("<b>"), "raw html from notes or levels");
    assert!(html.contains(ESCAPED));
    assert!(html.contains("&lt;b&gt;html&lt;/b&gt;"), "notes");
    assert!(html.contains("&lt;b&gt;bold&lt;&#x2f;b&gt;"), "level name");
    assert!(html.contains(&format!("Levels of {ESCAPED}")), "column name in a caption");
    assert!(html.contains(&format!("<title>Test study {ESCAPED}</title>")), "document title");
    assert!(!html.contains("NaN"));
    assert!(html.len() < 2_000_000, "report is {} bytes", html.len());

    // Sections, warnings, date from the spec.
    for h in [
        "Warnings",
        "1</span> Summary",
        "2</span> Data",
        "3</span> Model",
        "4</span> Basis-size selection",
        "5</span> Fits side by side",
        "6</span> Smooth effects",
        "7</span> Diagnostics",
        "8</span> Outliers and sensitivity",
        "9</span> Provenance",
        "10</span> Cautions",
        "11</span> Analyst's notes",
    ] {
        assert!(html.contains(h), "missing heading {h}");
    }
    assert!(html.contains("Dated 2026-11-30"));
    assert!(html.contains("dropped for missing values"));

    // Chosen sizes and a coefficient as the context formats them.
    let cz = r.fits.classical.basis_sizes.0["x"].as_u64().unwrap();
    let rz = r.fits.robust.basis_sizes.0["x"].as_u64().unwrap();
    assert!(html.contains(&format!("Basis sizes, classical fit</th><td>x {cz}</td>")), "classical size");
    assert!(html.contains(&format!("Basis sizes, robust fit</th><td>x {rz}</td>")), "robust size");
    assert!(html.contains("◆ chosen (classical)") && html.contains("◆ chosen (robust)"));
    let z = r.fits.robust.coefficients.iter().find(|c| c.name == "z").unwrap();
    let est = context::sig(z.estimate.unwrap(), 4);
    assert!(html.contains(&format!("<td class=\"n\">{est}</td>")), "robust z estimate {est}");

    // Flagged rows: planted every 25th row.
    assert!(r.outliers.n_flagged >= 8, "{} flagged", r.outliers.n_flagged);
    assert!(html.contains("flagged row"));
    assert!(html.contains("✕ R4</th>"));
    // Every figure accessible.
    let svgs = html.matches("<svg ").count();
    assert_eq!(svgs, html.matches("role=\"img\"").count());
    assert!(svgs >= 6, "{svgs} figures");
    for part in html.split("<svg ").skip(1) {
        assert_rounded(part.split("</svg>").next().unwrap_or(""));
    }

    // Deterministic bytes.
    let again = report::render(&a, &r, &resolved).unwrap();
    assert_eq!(html, again);
}

#[test]
fn no_notes_and_nothing_flagged_say_so() {
    let (a, mut r, resolved) = pipeline(None, "group");
    // Pretend nothing was flagged in the results contract: every part says so in one sentence.
    r.outliers.n_flagged = 0;
    r.outliers.flagged.clear();
    r.sensitivity.influence.clear();
    let html = report::render(&a, &r, &resolved).unwrap();
    assert!(html.contains("No notes were supplied."));
    assert!(html.contains("No row has |scaled robust residual| above 2.5"));
    assert!(html.contains("No row was flagged, so no leave-one-out influence was computed."));
    assert!(!html.contains("<caption>Rows flagged by the robust fit"));
}

#[test]
fn sample_svg_written_on_request() {
    if let Ok(dir) = std::env::var("KNOTWISE_REPORT_SAMPLE") {
        let f = plots::draw(&hostile_chart()).unwrap();
        let _ = std::fs::write(std::path::Path::new(&dir).join("chart.svg"), &f.svg);
    }
}
