//! CSV → [`Frame`]: typed columns, source line numbers, dropped rows. Owns every CSV concern.
//!
//! Knows nothing of YAML: the caller says which columns it needs in a [`FrameRequest`].

use std::path::PathBuf;

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
    /// Row names: the id column's text, else the source line as text.
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

/// Placeholder (replaced by the data module).
pub fn load(_req: &FrameRequest) -> crate::error::Result<Frame> {
    todo!()
}
