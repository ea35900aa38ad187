//! SVG figures for the report, drawn with plotters' SVG backend into a string.
//!
//! Owns drawing only: every number a figure shows arrives already computed (from `Analysis`/`Results`
//! via `context`), and this module never fits. A figure is described by a [`ChartSpec`] of layers
//! (points, lines, bands, reference lines, rugs, bars, segments); [`draw`] turns it into an accessible,
//! deterministic SVG string:
//! - non-finite values are dropped before drawing, so no `NaN` or `inf` text can appear;
//! - tick labels use one fixed formatting rule ([`tick_label`]);
//! - every number inside an SVG tag is rounded to 2 decimals ([`round_svg_numbers`]);
//! - the root `<svg>` gets `role="img"`, a `<title>` and a `<desc>` (escaped here) and
//!   `aria-labelledby`; ids come from the caller (section and term numbers), never from randomness;
//! - the namespace attribute is removed (inline SVG in HTML needs none), so no URL appears.
//!
//! Text drawn by plotters (axis descriptions, captions, legend labels) is escaped by plotters' SVG
//! backend (`<`, `>`, `&`, `"`, `'`); the tests check this with a hostile column name.

use plotters::element::{Circle, Cross, EmptyElement, PathElement, Polygon, Rectangle, TriangleMarker};
use plotters::prelude::*;

use crate::error::Error;

/// The knotwise palette: deep teal (robust), ochre (classical), plum (classical without flagged rows),
/// charcoal ink on warm off-white paper. Not a red-versus-blue pairing.
pub mod palette {
    use plotters::style::RGBColor;
    pub const ROBUST: RGBColor = RGBColor(0x1B, 0x5E, 0x5A);
    pub const CLASSICAL: RGBColor = RGBColor(0xA8, 0x6A, 0x12);
    pub const WITHOUT: RGBColor = RGBColor(0x6A, 0x3F, 0x73);
    pub const INK: RGBColor = RGBColor(0x2A, 0x2A, 0x2A);
    pub const PAPER: RGBColor = RGBColor(0xFB, 0xF8, 0xF1);
    pub const GRID: RGBColor = RGBColor(0xE2, 0xDC, 0xD0);
    pub const GRID_LIGHT: RGBColor = RGBColor(0xEF, 0xEA, 0xE0);
    /// Flagged rows: a dark brown-black, always with the × marker (never colour alone).
    pub const FLAG: RGBColor = RGBColor(0x3B, 0x24, 0x1A);
    /// Reference lines (cutoffs, fences, thresholds).
    pub const REFERENCE: RGBColor = RGBColor(0x5C, 0x5C, 0x5C);
}

/// Default figure size in SVG user units.
pub const WIDTH: u32 = 720;
pub const HEIGHT: u32 = 400;

/// A marker shape. Flags and choices are told apart by shape, not colour alone.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Shape {
    /// Small filled dot (ordinary rows).
    Dot,
    /// Open circle.
    Ring,
    /// × cross (flagged rows).
    Cross,
    /// Filled triangle.
    Triangle,
    /// Filled square.
    Square,
}

/// Colours used by figures (the palette entries).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Ink {
    Robust,
    Classical,
    Without,
    Flag,
    Reference,
    Text,
}

impl Ink {
    fn rgb(self) -> RGBColor {
        match self {
            Ink::Robust => palette::ROBUST,
            Ink::Classical => palette::CLASSICAL,
            Ink::Without => palette::WITHOUT,
            Ink::Flag => palette::FLAG,
            Ink::Reference => palette::REFERENCE,
            Ink::Text => palette::INK,
        }
    }
}

/// What one layer draws.
#[derive(Debug, Clone, PartialEq)]
pub enum LayerKind {
    Points {
        points: Vec<(f64, f64)>,
        shape: Shape,
        size: u32,
        opacity: f64,
    },
    Line {
        points: Vec<(f64, f64)>,
        dashed: bool,
        width: u32,
    },
    /// A filled area between `lower` and `upper` at the same x values.
    Band {
        x: Vec<f64>,
        lower: Vec<f64>,
        upper: Vec<f64>,
        opacity: f64,
    },
    /// Horizontal reference lines across the whole x range.
    HLines {
        ys: Vec<f64>,
        dashed: bool,
    },
    /// Vertical reference lines across the whole y range.
    VLines {
        xs: Vec<f64>,
        dashed: bool,
    },
    /// Short ticks along the bottom of the plot at these x values.
    Rug {
        xs: Vec<f64>,
    },
    /// Bars (x0, x1, height) from zero.
    Bars {
        bars: Vec<(f64, f64, f64)>,
        opacity: f64,
    },
    /// Free line segments.
    Segments {
        segments: Vec<((f64, f64), (f64, f64))>,
        width: u32,
    },
}

/// One layer: what it draws, its colour and its legend label (empty: no legend entry).
#[derive(Debug, Clone, PartialEq)]
pub struct Layer {
    pub kind: LayerKind,
    pub ink: Ink,
    pub label: String,
}

/// Where the legend sits.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum LegendAt {
    UpperLeft,
    UpperRight,
    LowerLeft,
    LowerRight,
}

/// A whole figure.
#[derive(Debug, Clone, PartialEq)]
pub struct ChartSpec {
    /// Element id prefix, e.g. `fig-6-1` (from section and term numbers).
    pub id: String,
    /// Accessible title (also drawn as the caption).
    pub title: String,
    /// Accessible description generated from the data.
    pub desc: String,
    pub x_label: String,
    pub y_label: String,
    pub layers: Vec<Layer>,
    pub legend: LegendAt,
    /// Force these values into the y range (e.g. 0 for bars).
    pub y_include: Vec<f64>,
    /// A fixed y range (the caller clamps points beyond it and says so in `desc`).
    pub y_range: Option<(f64, f64)>,
}

/// A drawn figure: the SVG text (safe to insert as HTML) and its accessible texts.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize, Default)]
pub struct Figure {
    pub id: String,
    pub title: String,
    pub desc: String,
    /// Complete `<svg …>…</svg>` element; every text inside is escaped.
    pub svg: String,
}

/// Escape text for HTML/SVG content and attribute values.
pub fn escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '&' => out.push_str("&amp;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c if c.is_control() => out.push(' '),
            c => out.push(c),
        }
    }
    out
}

/// Labels handed to plotters: control characters removed (plotters escapes markup characters itself).
fn clean_label(s: &str) -> String {
    s.chars().map(|c| if c.is_control() { ' ' } else { c }).collect()
}

/// Tick label: up to 4 significant digits, trailing zeros trimmed, no exponent for ordinary magnitudes.
pub fn tick_label(v: f64) -> String {
    if !v.is_finite() {
        return String::new();
    }
    let s = super::context::sig(v, 4);
    if s.contains('.') && !s.contains('e') {
        let t = s.trim_end_matches('0').trim_end_matches('.');
        if t == "-0" {
            "0".into()
        } else {
            t.to_string()
        }
    } else {
        s
    }
}

fn finite_pair(p: &(f64, f64)) -> bool {
    p.0.is_finite() && p.1.is_finite()
}

/// The data range of a figure over all layers (finite values only), padded by 4%.
fn ranges(spec: &ChartSpec) -> ((f64, f64), (f64, f64)) {
    let mut xs: Vec<f64> = Vec::new();
    let mut ys: Vec<f64> = spec.y_include.clone();
    for l in &spec.layers {
        match &l.kind {
            LayerKind::Points { points, .. } | LayerKind::Line { points, .. } => {
                for p in points.iter().filter(|p| finite_pair(p)) {
                    xs.push(p.0);
                    ys.push(p.1);
                }
            }
            LayerKind::Band { x, lower, upper, .. } => {
                for ((a, lo), hi) in x.iter().zip(lower).zip(upper) {
                    if a.is_finite() && lo.is_finite() && hi.is_finite() {
                        xs.push(*a);
                        ys.push(*lo);
                        ys.push(*hi);
                    }
                }
            }
            LayerKind::HLines { ys: h, .. } => ys.extend(h.iter().copied()),
            LayerKind::VLines { xs: v, .. } => xs.extend(v.iter().copied()),
            LayerKind::Rug { xs: r } => xs.extend(r.iter().copied()),
            LayerKind::Bars { bars, .. } => {
                for (a, b, h) in bars {
                    xs.push(*a);
                    xs.push(*b);
                    ys.push(*h);
                    ys.push(0.0);
                }
            }
            LayerKind::Segments { segments, .. } => {
                for (a, b) in segments {
                    xs.extend([a.0, b.0]);
                    ys.extend([a.1, b.1]);
                }
            }
        }
    }
    (padded(&xs), padded(&ys))
}

fn padded(v: &[f64]) -> (f64, f64) {
    let mut lo = f64::INFINITY;
    let mut hi = f64::NEG_INFINITY;
    for &x in v.iter().filter(|x| x.is_finite()) {
        lo = lo.min(x);
        hi = hi.max(x);
    }
    if !lo.is_finite() || !hi.is_finite() {
        return (0.0, 1.0);
    }
    if hi - lo <= f64::EPSILON * (1.0 + lo.abs().max(hi.abs())) {
        let d = if lo == 0.0 { 1.0 } else { lo.abs() * 0.05 };
        return (lo - d, hi + d);
    }
    let pad = (hi - lo) * 0.04;
    (lo - pad, hi + pad)
}

/// Stretch the y range so the legend box sits over empty space instead of over the data: the legend
/// takes about 16 px per entry plus padding of a plot area about HEIGHT − 110 px tall.
fn legend_headroom(spec: &ChartSpec, y0: f64, y1: f64) -> (f64, f64) {
    let entries = spec.layers.iter().filter(|l| !l.label.is_empty()).count();
    if entries == 0 {
        return (y0, y1);
    }
    let plot_px = (HEIGHT as f64 - 110.0).max(100.0);
    let share = ((16.0 * entries as f64 + 14.0) / plot_px).min(0.6);
    let span = (y1 - y0) / (1.0 - share);
    match spec.legend {
        LegendAt::UpperLeft | LegendAt::UpperRight => (y0, y0 + span),
        LegendAt::LowerLeft | LegendAt::LowerRight => (y1 - span, y1),
    }
}

fn draw_error<E: std::fmt::Debug>(e: E) -> Error {
    Error::new(format!("cannot draw a report figure: {e:?}"))
}

/// Draw a figure as accessible, deterministic SVG.
pub fn draw(spec: &ChartSpec) -> Result<Figure, Error> {
    let ((x0, x1), (ya, yb)) = ranges(spec);
    let (y0, y1) = spec.y_range.filter(|(a, b)| a.is_finite() && b.is_finite() && b > a).unwrap_or((ya, yb));
    let (y0, y1) = legend_headroom(spec, y0, y1);
    let mut raw = String::new();
    {
        let root = SVGBackend::with_string(&mut raw, (WIDTH, HEIGHT)).into_drawing_area();
        root.fill(&palette::PAPER).map_err(draw_error)?;
        let caption_font = ("sans-serif", 17).into_font().color(&palette::INK);
        let label_font = ("sans-serif", 13).into_font().color(&palette::INK);
        let mut chart = ChartBuilder::on(&root)
            .margin(14)
            .caption(clean_label(&spec.title), caption_font)
            .x_label_area_size(46)
            .y_label_area_size(70)
            .build_cartesian_2d(x0..x1, y0..y1)
            .map_err(draw_error)?;
        let fmt = |v: &f64| tick_label(*v);
        chart
            .configure_mesh()
            .bold_line_style(palette::GRID)
            .light_line_style(palette::GRID_LIGHT)
            .axis_style(palette::INK)
            .x_labels(7)
            .y_labels(6)
            .x_desc(clean_label(&spec.x_label))
            .y_desc(clean_label(&spec.y_label))
            .x_label_formatter(&fmt)
            .y_label_formatter(&fmt)
            .label_style(label_font.clone())
            .axis_desc_style(label_font.clone())
            .draw()
            .map_err(draw_error)?;

        let rug_top = y0 + (y1 - y0) * 0.03;
        for layer in &spec.layers {
            let color = layer.ink.rgb();
            let label = clean_label(&layer.label);
            match &layer.kind {
                LayerKind::Points { points, shape, size, opacity } => {
                    let pts: Vec<(f64, f64)> = points.iter().copied().filter(finite_pair).collect();
                    let s = *size;
                    let c = color.mix(*opacity);
                    let legend_size = s.max(3) as i32;
                    let sz = s as i32;
                    // One arm per shape: each element type is concrete, so no boxed legend element.
                    macro_rules! series {
                        ($make:expr, $legend:expr) => {{
                            let ann = chart.draw_series(pts.iter().map($make)).map_err(draw_error)?;
                            if !label.is_empty() {
                                ann.label(label.clone()).legend($legend);
                            }
                        }};
                    }
                    match shape {
                        Shape::Dot => series!(|p: &(f64, f64)| Circle::new(*p, s, c.filled()), move |(x, y)| {
                            Circle::new((x + 10, y), legend_size as u32, color.filled())
                        }),
                        Shape::Ring => {
                            series!(|p: &(f64, f64)| Circle::new(*p, s, c.stroke_width(1)), move |(x, y)| {
                                Circle::new((x + 10, y), legend_size as u32, color.stroke_width(1))
                            })
                        }
                        Shape::Cross => {
                            series!(|p: &(f64, f64)| Cross::new(*p, s, c.stroke_width(2)), move |(x, y)| {
                                Cross::new((x + 10, y), legend_size as u32, color.stroke_width(2))
                            })
                        }
                        Shape::Triangle => {
                            series!(|p: &(f64, f64)| TriangleMarker::new(*p, s, c.filled()), move |(x, y)| {
                                TriangleMarker::new((x + 10, y), legend_size as u32, color.filled())
                            })
                        }
                        Shape::Square => series!(
                            |p: &(f64, f64)| EmptyElement::at(*p) + Rectangle::new([(-sz, -sz), (sz, sz)], c.filled()),
                            move |(x, y)| Rectangle::new(
                                [(x + 10 - legend_size, y - legend_size), (x + 10 + legend_size, y + legend_size)],
                                color.filled()
                            )
                        ),
                    }
                }
                LayerKind::Line { points, dashed, width } => {
                    // A line is broken at non-finite values rather than joined across them.
                    let mut runs: Vec<Vec<(f64, f64)>> = vec![Vec::new()];
                    for p in points {
                        if finite_pair(p) {
                            if let Some(r) = runs.last_mut() {
                                r.push(*p);
                            }
                        } else if runs.last().is_some_and(|r| !r.is_empty()) {
                            runs.push(Vec::new());
                        }
                    }
                    let style = color.stroke_width(*width);
                    let mut first = true;
                    for run in runs.into_iter().filter(|r| r.len() > 1) {
                        let ann = if *dashed {
                            chart.draw_series(DashedLineSeries::new(run, 7, 4, style)).map_err(draw_error)?
                        } else {
                            chart.draw_series(LineSeries::new(run, style)).map_err(draw_error)?
                        };
                        if first && !label.is_empty() {
                            let d = *dashed;
                            let w = *width;
                            ann.label(label.clone()).legend(move |(x, y)| legend_line((x, y), d, w, color));
                        }
                        first = false;
                    }
                }
                LayerKind::Band { x, lower, upper, opacity } => {
                    let mut top = Vec::new();
                    let mut bottom = Vec::new();
                    for ((a, lo), hi) in x.iter().zip(lower).zip(upper) {
                        if a.is_finite() && lo.is_finite() && hi.is_finite() {
                            top.push((*a, *hi));
                            bottom.push((*a, *lo));
                        }
                    }
                    if top.len() > 1 {
                        bottom.reverse();
                        top.extend(bottom);
                        let fill = color.mix(*opacity).filled();
                        let ann = chart.draw_series(std::iter::once(Polygon::new(top, fill))).map_err(draw_error)?;
                        if !label.is_empty() {
                            ann.label(label).legend(move |(x, y)| Rectangle::new([(x, y - 5), (x + 20, y + 5)], fill));
                        }
                    }
                }
                LayerKind::HLines { ys: at, dashed } | LayerKind::VLines { xs: at, dashed } => {
                    let horizontal = matches!(layer.kind, LayerKind::HLines { .. });
                    let style = color.stroke_width(1);
                    let mut first = true;
                    for &v in at.iter().filter(|v| v.is_finite()) {
                        let seg = if horizontal { vec![(x0, v), (x1, v)] } else { vec![(v, y0), (v, y1)] };
                        let ann = if *dashed {
                            chart.draw_series(DashedLineSeries::new(seg, 5, 4, style)).map_err(draw_error)?
                        } else {
                            chart.draw_series(LineSeries::new(seg, style)).map_err(draw_error)?
                        };
                        if first && !label.is_empty() {
                            let d = *dashed;
                            ann.label(label.clone()).legend(move |(x, y)| legend_line((x, y), d, 1, color));
                        }
                        first = false;
                    }
                }
                LayerKind::Rug { xs } => {
                    let style = color.mix(0.6).stroke_width(1);
                    let ann = chart
                        .draw_series(
                            xs.iter()
                                .filter(|x| x.is_finite())
                                .map(|&x| PathElement::new(vec![(x, y0), (x, rug_top)], style)),
                        )
                        .map_err(draw_error)?;
                    if !label.is_empty() {
                        ann.label(label).legend(move |(x, y)| {
                            PathElement::new(vec![(x + 10, y - 5), (x + 10, y + 5)], color.stroke_width(1))
                        });
                    }
                }
                LayerKind::Bars { bars, opacity } => {
                    let fill = color.mix(*opacity).filled();
                    let ann = chart
                        .draw_series(
                            bars.iter()
                                .filter(|b| b.0.is_finite() && b.1.is_finite() && b.2.is_finite())
                                .map(|&(a, b, h)| Rectangle::new([(a, 0.0), (b, h)], fill)),
                        )
                        .map_err(draw_error)?;
                    if !label.is_empty() {
                        ann.label(label).legend(move |(x, y)| Rectangle::new([(x, y - 5), (x + 20, y + 5)], fill));
                    }
                }
                LayerKind::Segments { segments, width } => {
                    let style = color.stroke_width(*width);
                    let ann = chart
                        .draw_series(
                            segments
                                .iter()
                                .filter(|(a, b)| finite_pair(a) && finite_pair(b))
                                .map(|&(a, b)| PathElement::new(vec![a, b], style)),
                        )
                        .map_err(draw_error)?;
                    if !label.is_empty() {
                        let w = *width;
                        ann.label(label).legend(move |(x, y)| legend_line((x, y), false, w, color));
                    }
                }
            }
        }
        chart
            .configure_series_labels()
            .position(match spec.legend {
                LegendAt::UpperLeft => SeriesLabelPosition::UpperLeft,
                LegendAt::UpperRight => SeriesLabelPosition::UpperRight,
                LegendAt::LowerLeft => SeriesLabelPosition::LowerLeft,
                LegendAt::LowerRight => SeriesLabelPosition::LowerRight,
            })
            .background_style(palette::PAPER.mix(0.92))
            .border_style(palette::INK)
            .label_font(label_font)
            .draw()
            .map_err(draw_error)?;
        root.present().map_err(draw_error)?;
    }
    Ok(Figure { id: spec.id.clone(), title: spec.title.clone(), desc: spec.desc.clone(), svg: finish_svg(&raw, spec) })
}

/// Two path pieces drawn at one legend anchor.
type LegendLine<DB> =
    plotters::element::ComposedElement<(i32, i32), DB, PathElement<(i32, i32)>, PathElement<(i32, i32)>>;

/// A legend line 20 units long: two pieces with a gap when dashed (one concrete element type).
fn legend_line<DB: DrawingBackend>(at: (i32, i32), dashed: bool, width: u32, color: RGBColor) -> LegendLine<DB> {
    let style = color.stroke_width(width);
    let (a, b) = if dashed { (7, 11) } else { (10, 10) };
    EmptyElement::at(at)
        + PathElement::new(vec![(0, 0), (a, 0)], style)
        + PathElement::new(vec![(b, 0), (20, 0)], style)
}

/// Post-process plotters' SVG: accessible root element, no namespace URL, numbers rounded.
fn finish_svg(raw: &str, spec: &ChartSpec) -> String {
    let body = match raw.find('>') {
        Some(i) if raw.starts_with("<svg") => &raw[i + 1..],
        _ => raw,
    };
    let id = escape(&spec.id);
    let mut out = String::with_capacity(raw.len() + 512);
    out.push_str(&format!(
        "<svg class=\"figure-svg\" width=\"{WIDTH}\" height=\"{HEIGHT}\" viewBox=\"0 0 {WIDTH} {HEIGHT}\" role=\"img\" aria-labelledby=\"{id}-title {id}-desc\">\n<title id=\"{id}-title\">{}</title>\n<desc id=\"{id}-desc\">{}</desc>",
        escape(&spec.title),
        escape(&spec.desc)
    ));
    out.push_str(&round_svg_numbers(body));
    out
}

/// Round every decimal number inside SVG tags (not text content) to at most 2 decimals.
pub fn round_svg_numbers(svg: &str) -> String {
    let mut out = String::with_capacity(svg.len());
    let chars: Vec<char> = svg.chars().collect();
    let mut in_tag = false;
    let mut i = 0;
    while i < chars.len() {
        let c = chars[i];
        if c == '<' {
            in_tag = true;
        } else if c == '>' {
            in_tag = false;
        }
        let starts_number = in_tag
            && (c.is_ascii_digit() || (c == '-' && chars.get(i + 1).is_some_and(|d| d.is_ascii_digit())))
            && !(i > 0 && (chars[i - 1].is_ascii_alphanumeric() || chars[i - 1] == '#' || chars[i - 1] == '_'));
        if starts_number {
            let start = i;
            i += 1;
            while i < chars.len() && (chars[i].is_ascii_digit() || chars[i] == '.') {
                i += 1;
            }
            let token: String = chars[start..i].iter().collect();
            out.push_str(&round_token(&token));
            continue;
        }
        out.push(c);
        i += 1;
    }
    out
}

fn round_token(token: &str) -> String {
    let decimals = token.split('.').nth(1).map_or(0, str::len);
    if decimals <= 2 {
        return token.to_string();
    }
    match token.parse::<f64>() {
        Ok(v) => {
            let s = format!("{v:.2}");
            let s = s.trim_end_matches('0').trim_end_matches('.');
            if s == "-0" {
                "0".into()
            } else {
                s.to_string()
            }
        }
        Err(_) => token.to_string(),
    }
}

/// Indices 0..n thinned to at most `max` by taking every k-th one (k = ⌈n / max⌉), plus the indices
/// in `keep` (e.g. flagged rows): all of them when there are at most `max`, else every j-th of them
/// (j = [`kept_step`]), so a plot never carries more than about 2·max points. Deterministic; ascending.
pub fn thin(n: usize, max: usize, keep: &[bool]) -> Vec<usize> {
    let k = if max == 0 { n.max(1) } else { n.div_ceil(max).max(1) };
    let j = kept_step(&keep[..keep.len().min(n)], max);
    let mut seen = 0usize;
    (0..n)
        .filter(|&i| {
            let kept = keep.get(i).copied().unwrap_or(false) && {
                seen += 1;
                (seen - 1) % j == 0
            };
            i % k == 0 || kept
        })
        .collect()
}

/// The step j with which [`thin`] takes the indices of `keep`: 1 (all of them) when at most `max` are
/// set, else ⌈count / max⌉.
pub fn kept_step(keep: &[bool], max: usize) -> usize {
    let count = keep.iter().filter(|k| **k).count();
    if max == 0 || count <= max {
        1
    } else {
        count.div_ceil(max)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn rounds_numbers_in_tags_only() {
        let s = "<text x=\"1.23456\" font-size=\"9.677419\" fill=\"#1B5E5A\">3.14159</text>";
        assert_eq!(round_svg_numbers(s), "<text x=\"1.23\" font-size=\"9.68\" fill=\"#1B5E5A\">3.14159</text>");
        assert_eq!(round_token("-0.001"), "0");
        assert_eq!(round_token("12"), "12");
    }

    #[test]
    fn thinning_keeps_flagged() {
        let mut keep = vec![false; 10];
        keep[3] = true;
        assert_eq!(thin(10, 5, &keep), vec![0, 2, 3, 4, 6, 8]);
        assert_eq!(thin(3, 5, &[]), vec![0, 1, 2]);
        // More kept indices than `max`: every second of them (1, 5, 9), besides every 4th row.
        let keep: Vec<bool> = (0..12).map(|i| i % 2 == 1).collect();
        assert_eq!(kept_step(&keep, 3), 2);
        assert_eq!(thin(12, 3, &keep), vec![0, 1, 4, 5, 8, 9]);
    }

    #[test]
    fn tick_labels() {
        assert_eq!(tick_label(0.5), "0.5");
        assert_eq!(tick_label(1200.0), "1200");
        assert_eq!(tick_label(-0.0), "0");
        assert_eq!(tick_label(f64::NAN), "");
    }
}
