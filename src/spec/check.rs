//! Raw spec → checked [`Study`]: required keys, defaults (DESIGN.md §3), ranges and cross-key rules.
//! Every message names the key path and says how to fix it.

use std::path::Path;

use super::raw::*;
use super::*;

const MAX_DEGREE: usize = 5;
const MAX_BASIS_SIZE: usize = 50;
const MAX_SUBSAMPLES: usize = 100_000;
const MAX_CUTOFF: f64 = 10.0;
const MAX_TITLE_CHARS: usize = 200;

fn missing_key(ctx: &Ctx, path: &str, hint: &str) -> Error {
    // A missing key has no line of its own; point at the enclosing key when there is one.
    Error::new(format!("missing required key `{path}`"))
        .at(match path.rfind('.') {
            Some(i) => ctx.at(&path[..i]),
            None => ctx.spec.to_string(),
        })
        .hint(hint)
}

/// A number for messages: shortest text that reads back as the same value.
fn num(x: f64) -> String {
    format!("{x}")
}

fn check_grid(ctx: &Ctx, path: &str, grid: &[usize], degree: Option<(usize, &str)>) -> Result<()> {
    if grid.is_empty() {
        return Err(ctx.err(path, "the grid of basis sizes is empty", "list at least one size, e.g. `[4, 5, 6]`"));
    }
    for (i, &k) in grid.iter().enumerate() {
        if k > MAX_BASIS_SIZE {
            return Err(ctx.err(
                path,
                format!("basis size {k} is too large; at most {MAX_BASIS_SIZE} basis functions per term are allowed"),
                "smooth terms rarely need more than 10 to 15 basis functions; use sizes such as `[4, 5, 6, 7, 8]`",
            ));
        }
        if let Some((d, term)) = degree {
            if k < d + 1 {
                return Err(ctx.err(
                    path,
                    format!("basis size {k} is too small for degree {d} (smooth term `{term}`); `k` must be at least degree + 1 = {}", d + 1),
                    format!("use basis sizes of {} or more, or lower the degree", d + 1),
                ));
            }
        } else if k < 2 {
            return Err(ctx.err(
                path,
                format!("basis size {k} is too small; a smooth term needs at least 2 basis functions"),
                "use sizes such as `[4, 5, 6, 7, 8]`",
            ));
        }
        if grid[..i].contains(&k) {
            return Err(ctx.err(path, format!("basis size {k} is listed twice"), "list each size once"));
        }
    }
    Ok(())
}

fn check_date(ctx: &Ctx, date: &str) -> Result<()> {
    let b = date.as_bytes();
    let shape_ok = b.len() == 10
        && b[4] == b'-'
        && b[7] == b'-'
        && b.iter().enumerate().all(|(i, c)| i == 4 || i == 7 || c.is_ascii_digit());
    let valid = shape_ok && {
        let year: u32 = date[0..4].parse().unwrap_or(0);
        let month: u32 = date[5..7].parse().unwrap_or(0);
        let day: u32 = date[8..10].parse().unwrap_or(0);
        let leap = (year % 4 == 0 && year % 100 != 0) || year % 400 == 0;
        let days = match month {
            1 | 3 | 5 | 7 | 8 | 10 | 12 => 31,
            4 | 6 | 9 | 11 => 30,
            2 if leap => 29,
            2 => 28,
            _ => 0,
        };
        day >= 1 && day <= days
    };
    if valid {
        Ok(())
    } else {
        Err(ctx.err(
            "date",
            format!("{} is not a date of the form YYYY-MM-DD", quote(date)),
            "write the date as year-month-day, e.g. `date: 2026-11-30`",
        ))
    }
}

pub use crate::error::quote;

fn nonempty(ctx: &Ctx, path: &str, value: String, what: &str) -> Result<String> {
    if value.trim().is_empty() {
        return Err(ctx.err(path, format!("`{path}` is empty"), format!("write {what}")));
    }
    Ok(value)
}

pub(crate) fn from_raw(ctx: &Ctx, raw: RawStudy, base_dir: &Path) -> Result<Study> {
    match raw.knotwise {
        None => {
            return Err(missing_key(ctx, "knotwise", "start the spec with `knotwise: 1` (the spec format version)"));
        }
        Some(v) if v != u64::from(SPEC_VERSION) => {
            return Err(ctx.err(
                "knotwise",
                format!("spec format version {v} is not supported; this knotwise reads version {SPEC_VERSION}"),
                format!(
                    "write `knotwise: {SPEC_VERSION}` and check the spec against the version {SPEC_VERSION} format"
                ),
            ));
        }
        Some(_) => {}
    }

    let title = raw.title.ok_or_else(|| missing_key(ctx, "title", "add `title: <what the study is about>`"))?;
    let title = nonempty(ctx, "title", title, "a short description of the study")?;
    let title_chars = title.chars().count();
    if title_chars > MAX_TITLE_CHARS {
        return Err(ctx.err(
            "title",
            format!("the title is {title_chars} characters long; at most {MAX_TITLE_CHARS} are allowed"),
            "shorten the title and put the details in `report.notes`",
        ));
    }

    if let Some(d) = &raw.date {
        check_date(ctx, d)?;
    }
    let seed = raw.seed.unwrap_or(1);

    let rd = raw.data.ok_or_else(|| missing_key(ctx, "data", "add `data:` with `file: <path to the CSV>` below it"))?;
    let file_as_written =
        rd.file.ok_or_else(|| missing_key(ctx, "data.file", "add `file: <path to the CSV>` under `data:`"))?;
    let file_as_written = nonempty(ctx, "data.file", file_as_written, "the path of the CSV file")?;
    let sha256 = match rd.sha256 {
        None => None,
        Some(s) => {
            let t = s.trim();
            if t.len() != 64 || !t.bytes().all(|b| b.is_ascii_hexdigit()) {
                return Err(ctx.err(
                    "data.sha256",
                    format!(
                        "{} is not a sha256 digest; it must be 64 hexadecimal characters (found {})",
                        quote(&s),
                        s.chars().count()
                    ),
                    "copy the digest printed by `sha256sum <file>`, or remove the pin",
                ));
            }
            Some(t.to_ascii_lowercase())
        }
    };
    let missing = rd.missing.unwrap_or_else(|| vec![String::new()]);
    let data = DataSource { file: base_dir.join(&file_as_written), file_as_written, sha256, missing, id: rd.id };

    let response = raw.response.ok_or_else(|| missing_key(ctx, "response", "add `response: <column to explain>`"))?;
    let response = nonempty(ctx, "response", response, "the name of the column to explain")?;

    // Every column may appear once: as the response or in one term.
    let mut used: Vec<(String, String)> = vec![(response.clone(), "response".into())];
    let mut claim = |path: &str, column: &str, kind: &str| -> Result<()> {
        if column == response {
            return Err(ctx.err(
                path,
                format!("the response {} is also used as a {kind} term", quote(column)),
                format!(
                    "a column cannot explain itself; remove it from `{}`",
                    if kind == "linear" { "linear" } else { "smooth" }
                ),
            ));
        }
        if let Some((_, first)) = used.iter().find(|(c, _)| c == column) {
            return Err(ctx.err(
                path,
                format!("the column {} is used twice: in {first} and in {path}", quote(column)),
                "use each column in one term only",
            ));
        }
        used.push((column.to_string(), path.to_string()));
        Ok(())
    };

    let mut linear = Vec::new();
    for (i, t) in raw.linear.unwrap_or_default().into_iter().enumerate() {
        let path = format!("linear[{i}]");
        let column = t.column.ok_or_else(|| {
            missing_key(ctx, &format!("{path}.column"), "each term names its column: `- column: <name>`")
        })?;
        let column = nonempty(ctx, &format!("{path}.column"), column, "the name of a column")?;
        claim(&format!("{path}.column"), &column, "linear")?;
        let categorical = t.categorical.unwrap_or(false);
        if t.reference.is_some() && !categorical {
            return Err(ctx.err(
                &format!("{path}.reference"),
                format!("`reference` is given for {} but the term is not categorical", quote(&column)),
                "add `categorical: true` to the term, or remove `reference`",
            ));
        }
        linear.push(LinearTerm { column, categorical, reference: t.reference });
    }

    let mut smooth = Vec::new();
    for (i, t) in raw.smooth.unwrap_or_default().into_iter().enumerate() {
        let path = format!("smooth[{i}]");
        let column = t.column.ok_or_else(|| {
            missing_key(ctx, &format!("{path}.column"), "each term names its column: `- column: <name>`")
        })?;
        let column = nonempty(ctx, &format!("{path}.column"), column, "the name of a column")?;
        claim(&format!("{path}.column"), &column, "smooth")?;
        let degree = t.degree.unwrap_or(3);
        if !(1..=MAX_DEGREE).contains(&degree) {
            return Err(ctx.err(
                &format!("{path}.degree"),
                format!("degree {degree} is out of range; it must be from 1 to {MAX_DEGREE}"),
                "3 (cubic) is the usual choice; 1 gives a broken line",
            ));
        }
        if let Some(grid) = &t.basis_sizes {
            check_grid(ctx, &format!("{path}.basis-sizes"), grid, Some((degree, &column)))?;
        }
        let knots = match t.knots.unwrap_or(RawKnots::Quantile) {
            RawKnots::Quantile => KnotPlacement::Quantile,
            RawKnots::Uniform => KnotPlacement::Uniform,
        };
        smooth.push(SmoothTerm { column, degree, knots, basis_sizes: t.basis_sizes });
    }

    let rs = raw.selection.unwrap_or(RawSelection { basis_sizes: None, bic_penalty: None, robust_scale: None });
    let basis_sizes = rs.basis_sizes.unwrap_or_else(|| DEFAULT_BASIS_SIZES.to_vec());
    check_grid(ctx, "selection.basis-sizes", &basis_sizes, None)?;
    for t in smooth.iter().filter(|t| t.basis_sizes.is_none()) {
        check_grid(ctx, "selection.basis-sizes", &basis_sizes, Some((t.degree, &t.column)))?;
    }
    let bic_penalty = rs.bic_penalty.unwrap_or(0.5);
    if !bic_penalty.is_finite() || bic_penalty < 0.0 {
        return Err(ctx.err(
            "selection.bic-penalty",
            format!("bic-penalty {} is out of range; it must be a finite number of 0 or more", num(bic_penalty)),
            "0.5 is the default, 1 is the Schwarz criterion",
        ));
    }
    let robust_scale = match rs.robust_scale.unwrap_or(RawRobustScale::Shared) {
        RawRobustScale::Shared => RobustScaleMode::Shared,
        RawRobustScale::PerSize => RobustScaleMode::PerSize,
    };

    let rr = raw.robust.unwrap_or(RawRobust { loss: None, efficiency: None, start: None, subsamples: None });
    let loss = match rr.loss.unwrap_or(RawLoss::Bisquare) {
        RawLoss::Bisquare => LossChoice::Bisquare,
        RawLoss::Huber => LossChoice::Huber,
    };
    let efficiency = rr.efficiency.unwrap_or(0.95);
    if !(efficiency > 0.5 && efficiency < 1.0) {
        return Err(ctx.err(
            "robust.efficiency",
            format!("efficiency {} is out of range; it must be above 0.5 and below 1", num(efficiency)),
            "0.95 is the usual choice; an efficiency of 1 would be least squares, which is not robust",
        ));
    }
    let start = match rr.start.unwrap_or(RawStart::SEstimate) {
        RawStart::SEstimate => StartChoice::SEstimate,
        RawStart::LeastSquares => StartChoice::LeastSquares,
    };
    if start == StartChoice::LeastSquares && loss != LossChoice::Huber {
        return Err(ctx.err(
            "robust.start",
            "`start: least-squares` needs `loss: huber`; the bisquare loss needs the S-estimate start",
            "write `loss: huber`, or use `start: s-estimate`",
        ));
    }
    let subsamples = rr.subsamples.unwrap_or(500);
    if !(1..=MAX_SUBSAMPLES).contains(&subsamples) {
        return Err(ctx.err(
            "robust.subsamples",
            format!("subsamples {subsamples} is out of range; it must be from 1 to {MAX_SUBSAMPLES}"),
            "500 is the default and enough for most studies",
        ));
    }

    let cutoff = raw.outliers.and_then(|o| o.cutoff).unwrap_or(2.5);
    if !(cutoff.is_finite() && cutoff > 0.0 && cutoff <= MAX_CUTOFF) {
        return Err(ctx.err(
            "outliers.cutoff",
            format!("cutoff {} is out of range; it must be above 0 and at most {}", num(cutoff), num(MAX_CUTOFF)),
            "2.5 is the default: rows whose residual is more than 2.5 robust scales from the fit are flagged",
        ));
    }

    let rsens = raw.sensitivity.unwrap_or(RawSensitivity { refit_without_flagged: None, influence: None });
    let sensitivity = SensitivitySettings {
        refit_without_flagged: rsens.refit_without_flagged.unwrap_or(true),
        influence: rsens.influence.unwrap_or(true),
    };

    let notes_as_written = raw.report.and_then(|r| r.notes);
    let notes_markdown = match &notes_as_written {
        None => None,
        Some(n) => Some(read_notes(ctx, n, base_dir)?),
    };

    Ok(Study {
        title,
        date: raw.date,
        seed,
        data,
        response,
        linear,
        smooth,
        selection: Selection { basis_sizes, bic_penalty, robust_scale },
        robust: RobustSettings { loss, efficiency, start, subsamples },
        outliers: OutlierSettings { cutoff },
        sensitivity,
        report: ReportSettings { notes_as_written, notes_markdown },
    })
}

/// `notes` is a file (relative to the spec) when it ends in `.md`, or is one line naming an existing
/// file; otherwise it is the markdown itself.
fn read_notes(ctx: &Ctx, notes: &str, base_dir: &Path) -> Result<String> {
    let one_line = !notes.contains('\n') && !notes.trim().is_empty();
    if !one_line {
        return Ok(notes.to_string());
    }
    let name = notes.trim();
    let path = base_dir.join(name);
    let is_md = name.to_ascii_lowercase().ends_with(".md");
    if is_md || path.is_file() {
        if path.is_dir() {
            return Err(ctx.err(
                "report.notes",
                format!("the notes file {} is a directory", quote(name)),
                "name a markdown file",
            ));
        }
        return std::fs::read_to_string(&path).map_err(|e| {
            ctx.err(
                "report.notes",
                format!("cannot read the notes file {}: {}", quote(name), crate::error::describe_io(&e)),
                "paths in the spec are relative to the spec's folder; or write the notes inline",
            )
        });
    }
    Ok(notes.to_string())
}
