//! CSV → [`Frame`]: typed columns, source line numbers, dropped rows. Owns every CSV concern.
//!
//! Knows nothing of YAML: the caller says which columns it needs in a [`FrameRequest`].

use crate::error::quote;
use std::collections::HashMap;
use std::path::PathBuf;

use sha2::{Digest, Sha256};

use crate::error::{nearest, Error, Result};

/// What to read from the CSV.
#[derive(Debug, Clone)]
pub struct FrameRequest {
    /// The file to open.
    pub path: PathBuf,
    /// How to name the file in messages (the path as written in the spec).
    pub display: String,
    /// Tokens read as missing (exact match after trimming surrounding spaces).
    pub missing: Vec<String>,
    /// Optional id column (kept as text; missing ids are not a reason to drop a row).
    pub id: Option<String>,
    /// Columns read as numbers, in the order wanted (the response first).
    pub numeric: Vec<String>,
    /// Columns read as categories, with an optional reference level.
    pub categorical: Vec<(String, Option<String>)>,
}

/// One typed column of used rows.
#[derive(Debug, Clone, PartialEq)]
pub enum ColumnData {
    Numeric(Vec<f64>),
    /// Levels sorted (byte order); `codes[i]` indexes `levels`; `reference` indexes `levels`.
    Categorical {
        levels: Vec<String>,
        codes: Vec<u32>,
        reference: usize,
        counts: Vec<usize>,
    },
}

#[derive(Debug, Clone, PartialEq)]
pub struct Column {
    pub name: String,
    pub data: ColumnData,
}

/// A row dropped for missing values: its source line and the columns that were missing.
#[derive(Debug, Clone, PartialEq)]
pub struct DroppedRow {
    pub line: u64,
    pub columns: Vec<String>,
}

/// The used rows of the data, column-wise.
#[derive(Debug, Clone, PartialEq)]
pub struct Frame {
    /// Data rows read (excluding the header).
    pub n_read: usize,
    /// Requested columns in request order: numeric ones first, then categorical ones.
    pub columns: Vec<Column>,
    /// Source line (1-based, header is line 1) of each used row.
    pub lines: Vec<u64>,
    /// Row names from the id column (its text, or the source line where the cell is missing); empty
    /// when no id column is requested, so large files carry no per-row strings. Use [`Frame::row_name`].
    pub ids: Vec<String>,
    pub dropped: Vec<DroppedRow>,
    /// (column, number of rows where it was missing), request order, only columns with any.
    pub missing_per_column: Vec<(String, usize)>,
    /// Non-fatal findings (e.g. a level with fewer than 2 rows).
    pub warnings: Vec<String>,
    /// Lower-case hex sha256 of the file's bytes.
    pub sha256: String,
    /// All column names in the header, in file order.
    pub header: Vec<String>,
}

impl Frame {
    /// Number of used rows.
    pub fn n_used(&self) -> usize {
        self.lines.len()
    }

    /// The name of used row `i`: its id, else its source line as text.
    pub fn row_name(&self, i: usize) -> String {
        match self.ids.get(i) {
            Some(id) => id.clone(),
            None => self.lines.get(i).map_or_else(String::new, u64::to_string),
        }
    }

    /// The column named `name`.
    pub fn column(&self, name: &str) -> Option<&Column> {
        self.columns.iter().find(|c| c.name == name)
    }

    /// The numeric values of `name` (None if absent or categorical).
    pub fn numeric(&self, name: &str) -> Option<&[f64]> {
        match self.column(name).map(|c| &c.data) {
            Some(ColumnData::Numeric(v)) => Some(v),
            _ => None,
        }
    }
}

/// Columns listed in a "no such column" message before it is cut short.
const MAX_LISTED_COLUMNS: usize = 30;

/// Trim spaces and tabs at both ends of a cell (the FrameRequest contract).
fn trim(b: &[u8]) -> &[u8] {
    let start = b.iter().position(|c| *c != b' ' && *c != b'\t').unwrap_or(b.len());
    let end = b.iter().rposition(|c| *c != b' ' && *c != b'\t').map_or(start, |i| i + 1);
    &b[start..end]
}

fn hex(bytes: &[u8]) -> String {
    const DIGITS: &[u8; 16] = b"0123456789abcdef";
    let mut s = String::with_capacity(bytes.len() * 2);
    for b in bytes {
        s.push(DIGITS[(b >> 4) as usize] as char);
        s.push(DIGITS[(b & 15) as usize] as char);
    }
    s
}

struct Ctx<'a> {
    display: &'a str,
}

/// 1-based source line of the record starting at byte `offset` of `body`.
///
/// The csv crate's own `Position::line` lags by one after CRLF line ends (it counts `\n` only and the
/// record position is taken before the `\n` of the previous `\r\n` is consumed), so lines are counted
/// here from byte offsets. `LineCounter` counts incrementally, so the whole file is scanned once.
struct LineCounter<'a> {
    body: &'a [u8],
    offset: usize,
    newlines: u64,
}

impl LineCounter<'_> {
    fn line_at(&mut self, offset: u64) -> u64 {
        let mut start = usize::try_from(offset).unwrap_or(self.body.len()).min(self.body.len());
        // Terminator bytes left over from the previous record or blank lines belong before the record.
        while start < self.body.len() && (self.body[start] == b'\n' || self.body[start] == b'\r') {
            start += 1;
        }
        if start < self.offset {
            // Positions only move forward; count afresh if not (never expected).
            self.offset = 0;
            self.newlines = 0;
        }
        // A line ends at `\n`, `\r\n` or a lone `\r` (old Mac files): the csv crate ends records at all
        // three, so a lone `\r` must count too or two records share a line number (found by
        // tests/fuzz_props.rs).
        let body = self.body;
        self.newlines += (self.offset..start)
            .filter(|&i| body[i] == b'\n' || (body[i] == b'\r' && body.get(i + 1) != Some(&b'\n')))
            .count() as u64;
        self.offset = start;
        self.newlines + 1
    }
}

impl Ctx<'_> {
    fn cell(&self, line: u64, column: &str) -> String {
        format!("{}, line {line}, column {}", self.display, quote(column))
    }
}

/// What a requested column is read as.
enum Kind {
    Numeric(usize),
    Categorical(usize),
}

/// Read `req.path` into a [`Frame`]: every requested column typed, rows with a missing value in a
/// requested column dropped (and listed), categorical levels sorted.
///
/// Ids: the `id` column's text when requested; where the id cell is empty or a missing token, the row
/// is named by its source line number instead (an id is never a reason to drop a row).
///
/// Cells are trimmed of surrounding spaces and tabs before the missing-token test and before parsing,
/// and categorical levels are the trimmed text.
pub fn load(req: &FrameRequest) -> Result<Frame> {
    let ctx = Ctx { display: &req.display };
    let meta = std::fs::metadata(&req.path).map_err(|e| {
        Error::io("read the data", &req.path, &e)
            .at(&req.display)
            .hint("`data.file` is relative to the spec's folder; check the path and the spelling")
    })?;
    if meta.is_dir() {
        return Err(Error::new("cannot read the data: it is a directory")
            .at(&req.display)
            .hint("`data.file` must name a CSV file"));
    }
    let bytes = std::fs::read(&req.path).map_err(|e| Error::io("read the data", &req.path, &e).at(&req.display))?;
    let sha256 = hex(&Sha256::digest(&bytes));
    let body = bytes.strip_prefix(b"\xEF\xBB\xBF".as_slice()).unwrap_or(&bytes);
    if body.iter().all(|b| b.is_ascii_whitespace()) {
        return Err(Error::new("the file is empty; a header row naming the columns is needed")
            .at(&req.display)
            .hint("the first line of the CSV names the columns, e.g. `price,age,district`"));
    }

    let mut reader = csv::ReaderBuilder::new().has_headers(true).flexible(false).from_reader(body);
    let header_record = reader
        .byte_headers()
        .map_err(|e| csv_error(&ctx, &e, &mut LineCounter { body, offset: 0, newlines: 0 }, false))?
        .clone();
    let mut header = Vec::with_capacity(header_record.len());
    for (j, h) in header_record.iter().enumerate() {
        match std::str::from_utf8(h) {
            Ok(s) => header.push(s.to_string()),
            Err(_) => {
                return Err(Error::new(format!("the name of column {} is not valid UTF-8 text", j + 1))
                    .at(format!("{}, line 1", req.display))
                    .hint("save the file as UTF-8"));
            }
        }
    }
    for (j, name) in header.iter().enumerate() {
        if let Some(k) = header[..j].iter().position(|h| h == name) {
            return Err(Error::new(format!(
                "the column name {} appears more than once (columns {} and {})",
                quote(name),
                k + 1,
                j + 1
            ))
            .at(format!("{}, line 1", req.display))
            .hint("give every column a different name"));
        }
    }

    let find = |name: &str| -> Result<usize> {
        header.iter().position(|h| h == name).ok_or_else(|| {
            let mut listed: Vec<String> = header.iter().take(MAX_LISTED_COLUMNS).map(|h| quote(h)).collect();
            if header.len() > MAX_LISTED_COLUMNS {
                listed.push(format!("and {} more", header.len() - MAX_LISTED_COLUMNS));
            }
            let columns = format!("The columns are {}", listed.join(", "));
            let spaced = header.iter().find(|h| h.trim() == name && !name.is_empty());
            let hint = match (spaced, nearest(name, header.iter().map(String::as_str))) {
                (Some(s), _) => format!(
                    "the header names {} with spaces around it; remove the spaces in the header line \
                     (values are trimmed, column names are not)",
                    quote(s)
                ),
                (None, Some(s)) => format!("did you mean {}? {columns}", quote(s)),
                (None, None) => columns.replacen("The", "the", 1),
            };
            Error::new(format!("there is no column {}", quote(name))).at(format!("{}, line 1", req.display)).hint(hint)
        })
    };
    // Requested columns: (name, index in the record, kind).
    let mut wanted: Vec<(&str, usize, Kind)> = Vec::new();
    for (i, name) in req.numeric.iter().enumerate() {
        wanted.push((name, find(name)?, Kind::Numeric(i)));
    }
    for (i, (name, _)) in req.categorical.iter().enumerate() {
        wanted.push((name, find(name)?, Kind::Categorical(i)));
    }
    let id_index = match &req.id {
        Some(name) => Some(find(name)?),
        None => None,
    };
    let missing: Vec<&[u8]> = req.missing.iter().map(|m| trim(m.as_bytes())).collect();
    let is_missing = |cell: &[u8]| missing.contains(&cell);

    let mut numeric: Vec<Vec<f64>> = vec![Vec::new(); req.numeric.len()];
    // Categorical: provisional codes in order of first appearance, remapped to sorted levels at the end.
    let mut level_maps: Vec<HashMap<Vec<u8>, u32>> = vec![HashMap::new(); req.categorical.len()];
    let mut level_texts: Vec<Vec<String>> = vec![Vec::new(); req.categorical.len()];
    let mut codes: Vec<Vec<u32>> = vec![Vec::new(); req.categorical.len()];
    let mut missing_counts = vec![0usize; wanted.len()];
    let mut lines = Vec::new();
    let mut ids = Vec::new();
    let mut dropped = Vec::new();
    let mut n_read = 0usize;

    // Per-row scratch, reused: no allocation per cell on the hot path.
    let mut row_num = vec![0f64; req.numeric.len()];
    let mut row_cat = vec![0u32; req.categorical.len()];
    let mut row_missing: Vec<usize> = Vec::new();
    let mut record = csv::ByteRecord::new();
    let mut counter = LineCounter { body, offset: 0, newlines: 0 };
    loop {
        match reader.read_byte_record(&mut record) {
            Ok(true) => {}
            Ok(false) => break,
            Err(e) => {
                // Reached the end of the file: what an unclosed quote does (see `csv_error`).
                let at_eof = usize::try_from(reader.position().byte()).map_or(true, |b| b >= body.len());
                return Err(csv_error(&ctx, &e, &mut counter, at_eof));
            }
        }
        n_read += 1;
        let line = record.position().map_or(0, |p| counter.line_at(p.byte()));
        row_missing.clear();
        for (w, (name, idx, kind)) in wanted.iter().enumerate() {
            let cell = trim(record.get(*idx).unwrap_or_default());
            if is_missing(cell) {
                row_missing.push(w);
                continue;
            }
            match kind {
                Kind::Numeric(i) => row_num[*i] = parse_number(&ctx, line, name, cell)?,
                Kind::Categorical(i) => {
                    let map = &mut level_maps[*i];
                    row_cat[*i] = match map.get(cell) {
                        Some(c) => *c,
                        None => {
                            let text = utf8(&ctx, line, name, cell)?;
                            let c = level_texts[*i].len() as u32;
                            level_texts[*i].push(text.to_string());
                            map.insert(cell.to_vec(), c);
                            c
                        }
                    }
                }
            }
        }
        if !row_missing.is_empty() {
            for &w in &row_missing {
                missing_counts[w] += 1;
            }
            dropped.push(DroppedRow { line, columns: row_missing.iter().map(|&w| wanted[w].0.to_string()).collect() });
            continue;
        }
        for (i, v) in row_num.iter().enumerate() {
            numeric[i].push(*v);
        }
        for (i, c) in row_cat.iter().enumerate() {
            codes[i].push(*c);
        }
        lines.push(line);
        let id = match id_index {
            Some(j) => {
                let cell = trim(record.get(j).unwrap_or_default());
                if is_missing(cell) || cell.is_empty() {
                    line.to_string()
                } else {
                    utf8(&ctx, line, req.id.as_deref().unwrap_or_default(), cell)?.to_string()
                }
            }
            None => String::new(),
        };
        if id_index.is_some() {
            ids.push(id);
        }
    }

    let missing_per_column: Vec<(String, usize)> = wanted
        .iter()
        .zip(&missing_counts)
        .filter(|(_, n)| **n > 0)
        .map(|((name, _, _), n)| (name.to_string(), *n))
        .collect();

    if n_read == 0 {
        return Err(Error::new("no data rows; the file has a header but nothing below it")
            .at(&req.display)
            .hint("add the data rows below the header line"));
    }
    if lines.is_empty() {
        let mut worst = missing_per_column.clone();
        worst.sort_by_key(|w| std::cmp::Reverse(w.1));
        let listed: Vec<String> =
            worst.iter().take(5).map(|(c, n)| format!("{} ({n} of {n_read} rows)", quote(c))).collect();
        return Err(Error::new(format!(
            "every row has a missing value in a used column; the most often missing: {}",
            listed.join(", ")
        ))
        .at(&req.display)
        .hint("check `data.missing` (the tokens read as missing), or leave out the terms with missing values"));
    }

    let mut warnings = Vec::new();
    let mut columns: Vec<Column> = Vec::with_capacity(wanted.len());
    for (name, v) in req.numeric.iter().zip(numeric) {
        columns.push(Column { name: name.clone(), data: ColumnData::Numeric(v) });
    }
    for (i, (name, reference)) in req.categorical.iter().enumerate() {
        columns.push(categorical_column(&ctx, name, reference.as_deref(), &level_texts[i], &codes[i], &mut warnings)?);
    }

    Ok(Frame { n_read, columns, lines, ids, dropped, missing_per_column, warnings, sha256, header })
}

/// Sort levels (byte order), remap codes, count, find the reference, and refuse a single level.
fn categorical_column(
    ctx: &Ctx,
    name: &str,
    reference: Option<&str>,
    first_seen: &[String],
    provisional: &[u32],
    warnings: &mut Vec<String>,
) -> Result<Column> {
    // Levels met only in dropped rows have no used rows: leave them out.
    let mut seen_counts = vec![0usize; first_seen.len()];
    for &c in provisional {
        seen_counts[c as usize] += 1;
    }
    let mut order: Vec<usize> = (0..first_seen.len()).filter(|&i| seen_counts[i] > 0).collect();
    order.sort_by(|&a, &b| first_seen[a].as_bytes().cmp(first_seen[b].as_bytes()));
    let mut remap = vec![0u32; first_seen.len()];
    for (new, &old) in order.iter().enumerate() {
        remap[old] = new as u32;
    }
    let levels: Vec<String> = order.iter().map(|&i| first_seen[i].clone()).collect();
    let counts: Vec<usize> = order.iter().map(|&i| seen_counts[i]).collect();
    let codes: Vec<u32> = provisional.iter().map(|&c| remap[c as usize]).collect();
    let listed = || levels.iter().map(|l| quote(l)).collect::<Vec<_>>().join(", ");
    if levels.len() < 2 {
        return Err(Error::new(format!(
            "the categorical column {} has only one level ({}) among the used rows; a categorical term needs at least two",
            quote(name),
            listed()
        ))
        .at(ctx.display)
        .hint("leave the term out of `linear`, or check the data and `data.missing`"));
    }
    let reference = match reference {
        None => 0,
        Some(r) => levels.iter().position(|l| l == r).ok_or_else(|| {
            let choices = format!("The levels are {}", listed());
            let hint = match nearest(r, levels.iter().map(String::as_str)) {
                Some(s) => format!("did you mean {}? {choices}", quote(s)),
                None => choices.replacen("The", "the", 1),
            };
            Error::new(format!("the reference level {} does not occur in column {}", quote(r), quote(name)))
                .at(ctx.display)
                .hint(hint)
        })?,
    };
    for (l, n) in levels.iter().zip(&counts) {
        if *n < 2 {
            warnings.push(format!(
                "{}: level {} of column {} has only {n} row; its effect rests on that row alone",
                ctx.display,
                quote(l),
                quote(name)
            ));
        }
    }
    Ok(Column { name: name.to_string(), data: ColumnData::Categorical { levels, codes, reference, counts } })
}

fn utf8<'a>(ctx: &Ctx, line: u64, column: &str, cell: &'a [u8]) -> Result<&'a str> {
    std::str::from_utf8(cell).map_err(|e| {
        Error::new(format!("the value is not valid UTF-8 text (bad byte at position {})", e.valid_up_to() + 1))
            .at(ctx.cell(line, column))
            .hint("save the file as UTF-8")
    })
}

/// A finite number, else an error naming the cell. NaN and infinities are refused, not read as missing:
/// only `data.missing` tokens are missing.
fn parse_number(ctx: &Ctx, line: u64, column: &str, cell: &[u8]) -> Result<f64> {
    let text = utf8(ctx, line, column, cell)?;
    let bad = |hint: &str| {
        Error::new(format!("cannot read {} as a number", quote(text))).at(ctx.cell(line, column)).hint(hint)
    };
    match text.parse::<f64>() {
        Ok(v) if v.is_finite() => Ok(v),
        Ok(v) if v.is_nan() => {
            Err(bad("NaN is not a number knotwise can use; if it marks a missing value, add it to `data.missing`"))
        }
        Ok(_) => {
            let lower = text.to_ascii_lowercase();
            if lower.contains("inf") {
                Err(bad("infinite values cannot be used; if this marks a missing value, add it to `data.missing`"))
            } else {
                Err(bad("the value is too large to be stored as a number (it overflows to infinity)"))
            }
        }
        Err(_) if text.is_empty() => {
            Err(bad("the cell is empty; add \"\" to `data.missing` to read empty cells as missing"))
        }
        Err(_) => Err(bad("write numbers with a dot as the decimal separator and no thousands separators; \
             if this marks a missing value, add it to `data.missing`")),
    }
}

fn csv_error(ctx: &Ctx, e: &csv::Error, counter: &mut LineCounter, at_eof: bool) -> Error {
    match e.kind() {
        csv::ErrorKind::UnequalLengths { pos, expected_len, len } => {
            let at = match pos {
                Some(p) => format!("{}, line {}", ctx.display, counter.line_at(p.byte())),
                None => ctx.display.to_string(),
            };
            // The record ran to the end of the file and holds an odd number of quotes: a quote opened
            // here is never closed and the csv reader took the rest of the file as one value. Say so,
            // rather than count the fields of a record that is not what the user wrote.
            let start = pos.as_ref().map_or(0, |p| usize::try_from(p.byte()).unwrap_or(usize::MAX));
            let quotes = counter.body.get(start..).map_or(0, |b| b.iter().filter(|c| **c == b'"').count());
            if at_eof && quotes % 2 == 1 {
                return Error::new("a quoted value that starts on this line is never closed")
                    .at(at)
                    .hint("close the quote; write a quote inside a quoted value as two quotes (\"\")");
            }
            let fields = if *len == 1 { "field" } else { "fields" };
            Error::new(format!("this row has {len} {fields} but the header has {expected_len}"))
                .at(at)
                .hint("every row needs one value per column; quote values that contain commas")
        }
        csv::ErrorKind::Io(io) => {
            Error::new(format!("cannot read the data: {}", crate::error::describe_io(io))).at(ctx.display)
        }
        _ => Error::new(format!("cannot read the data as CSV: {e}")).at(ctx.display),
    }
}
