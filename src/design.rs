//! Design assembly: a [`Frame`] plus the model's terms and one basis size per smooth term → the design
//! matrix (stored compactly, read through [`linalg::Rows`]) with readable column names and term spans.
//!
//! Columns, in order: `intercept`; each linear term (a numeric column, or treatment-coded dummies
//! `column[level]` for every non-reference level); each smooth term's k − 1 centred B-spline columns
//! `column:b1 .. column:b(k-1)`. Centring each basis column by its sample mean and dropping the last
//! makes Σ_i g_j(x_ij) = 0, so the intercept carries the mean (DESIGN.md §4, §4.1). Owns no I/O.

use crate::basis::{Basis, BasisError, KnotPlacement};
use crate::data::{ColumnData, Frame};
use crate::linalg::{self, Rows};

/// A linear term as the design sees it.
#[derive(Debug, Clone, PartialEq)]
pub struct LinearSpec {
    pub column: String,
    pub categorical: bool,
}

/// A smooth term as the design sees it.
#[derive(Debug, Clone, PartialEq)]
pub struct SmoothSpec {
    pub column: String,
    pub degree: usize,
    pub knots: KnotPlacement,
}

/// The model's terms (taken from the checked study by the pipeline).
#[derive(Debug, Clone, PartialEq)]
pub struct ModelTerms {
    pub response: String,
    pub linear: Vec<LinearSpec>,
    pub smooth: Vec<SmoothSpec>,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum TermKind {
    Intercept,
    Numeric,
    Categorical,
    Smooth,
}

/// Where a term's columns sit in the design.
#[derive(Debug, Clone, PartialEq)]
pub struct TermSpan {
    pub column: String,
    pub kind: TermKind,
    pub start: usize,
    pub len: usize,
}

/// A smooth term's basis and the column means used for centring.
#[derive(Debug, Clone, PartialEq)]
pub struct SmoothEncoding {
    pub column: String,
    pub basis: Basis,
    /// Sample mean of each of the k basis functions (over the rows the design was built from).
    pub means: Vec<f64>,
}

impl SmoothEncoding {
    /// Build the basis and its centring means on the sample `x`.
    pub fn new(
        column: &str,
        x: &[f64],
        degree: usize,
        size: usize,
        placement: KnotPlacement,
    ) -> Result<Self, BasisError> {
        let basis = Basis::for_sample(x, degree, size, placement)?;
        let rows = basis_rows(&basis, x, None);
        Ok(SmoothEncoding::from_sums(column, basis, &rows.sums, x.len()))
    }

    /// The encoding of `basis` with centring means from the sums of its rows over the whole sample of
    /// `n` rows (as [`basis_rows`] gives them).
    fn from_sums(column: &str, basis: Basis, sums: &[f64], n: usize) -> Self {
        let n = n.max(1) as f64;
        let means = sums.iter().map(|s| s / n).collect();
        SmoothEncoding { column: column.to_string(), basis, means }
    }

    /// Number of design columns (k − 1: the last basis function is dropped).
    pub fn columns(&self) -> usize {
        self.basis.size() - 1
    }

    /// The k − 1 centred basis values at `x` into `out`; `scratch` has length degree + 1.
    pub fn eval_centred(&self, x: f64, scratch: &mut [f64], out: &mut [f64]) {
        let m = self.columns();
        for (o, mean) in out[..m].iter_mut().zip(&self.means) {
            *o = -mean;
        }
        let first = self.basis.eval_nonzero(x, scratch);
        for (j, v) in scratch.iter().enumerate() {
            let c = first + j;
            if c < m {
                out[c] += v;
            }
        }
    }
}

/// A smooth term's rows: each row's first non-zero basis index and its degree + 1 values, and the sum
/// of each basis function over the rows.
struct BasisRows {
    first: Vec<u32>,
    values: Vec<f64>,
    sums: Vec<f64>,
}

/// The [`BasisRows`] of `basis` at `x[i]` for the rows `rows` (all of `x` when None). Rows are
/// evaluated in parallel over the fixed row blocks, each value the same way on any thread; the sums
/// are taken per block and added in block order.
fn basis_rows(basis: &Basis, x: &[f64], rows: Option<&[usize]>) -> BasisRows {
    let width = basis.degree + 1;
    let k = basis.size();
    let n = rows.map_or(x.len(), |r| r.len());
    let mut first = vec![0u32; n];
    let mut values = vec![0.0; n * width];
    let blocks: Vec<(&mut [u32], &mut [f64])> =
        first.chunks_mut(linalg::BLOCK_ROWS).zip(values.chunks_mut(linalg::BLOCK_ROWS * width)).collect();
    let parts = linalg::map_block_items(blocks, |lo, (first, values)| {
        let mut sums = vec![0.0; k];
        for (a, (f, out)) in first.iter_mut().zip(values.chunks_exact_mut(width)).enumerate() {
            let i = rows.map_or(lo + a, |r| r[lo + a]);
            let f0 = basis.eval_nonzero(x[i], out);
            *f = f0 as u32;
            for (s, v) in sums.iter_mut().skip(f0).zip(out.iter()) {
                *s += v;
            }
        }
        sums
    });
    let mut sums = vec![0.0; k];
    for part in parts {
        for (s, v) in sums.iter_mut().zip(part) {
            *s += v;
        }
    }
    BasisRows { first, values, sums }
}

/// The smooth columns of a frame, each sorted once, so that the designs of a whole grid share the
/// sorts their quantile knots need.
#[derive(Debug, Clone)]
pub struct SortedColumns(Vec<Vec<f64>>);

impl SortedColumns {
    /// The columns are sorted in parallel, one per thread; values equal under `total_cmp` have the
    /// same bits, so the unstable sort gives the one sorted order.
    pub fn new(frame: &Frame, terms: &ModelTerms) -> Result<Self, DesignError> {
        SortedColumns::of_rows(frame, terms, None)
    }

    /// The smooth columns of the frame's rows `rows` (all when None), each sorted.
    pub fn of_rows(frame: &Frame, terms: &ModelTerms, rows: Option<&[usize]>) -> Result<Self, DesignError> {
        let columns = terms
            .smooth
            .iter()
            .map(|s| frame.numeric(&s.column).ok_or_else(|| DesignError::MissingColumn(s.column.clone())))
            .collect::<Result<Vec<_>, _>>()?;
        Ok(SortedColumns(linalg::map_tasks(columns.len(), |j| {
            let mut sorted = match rows {
                None => columns[j].to_vec(),
                Some(r) => r.iter().map(|&i| columns[j][i]).collect(),
            };
            sorted.sort_unstable_by(f64::total_cmp);
            sorted
        })))
    }
}

/// Why a design could not be built.
#[derive(Debug, Clone, PartialEq)]
pub enum DesignError {
    /// The basis for the named smooth column cannot be built at this size.
    Basis { column: String, size: usize, error: BasisError },
    /// A column the terms need is not in the frame (a pipeline bug, not user input).
    MissingColumn(String),
}

/// How the design stores its rows: the intercept is implicit; numeric columns are copied; a
/// categorical term keeps, per row, the design column of its dummy (or none for the reference level);
/// a smooth term keeps, per row, the index of its first non-zero basis function and the degree + 1
/// values. A row is then the baseline (1 for the intercept, 0 for numeric and dummy columns, −mean for
/// a centred basis column) plus those few entries, which is how [`Rows`] hands it to the kernels.
#[derive(Debug, Clone, PartialEq)]
enum Store {
    /// A numeric linear term: its design column and values.
    Numeric { col: usize, values: Vec<f64> },
    /// A categorical term: per row the design column of its dummy, or `NO_DUMMY`.
    Categorical { cols: Vec<u32> },
    /// A smooth term: design columns start..start + m, per row the first basis index and the values.
    /// `span` bounds the columns the rows reach, kept or not (first + width ≤ span, m ≤ span).
    Smooth { start: usize, m: usize, width: usize, span: usize, first: Vec<u32>, values: Vec<f64> },
}

/// The columns a smooth store's rows reach, kept or not: the largest first index + width (at least m).
fn smooth_span(m: usize, width: usize, first: &[u32]) -> usize {
    first.iter().fold(m, |s, &f| s.max(f as usize + width))
}

const NO_DUMMY: u32 = linalg::NO_COLUMN;

/// The model's design with its response and bookkeeping, stored compactly (see [`Store`]).
#[derive(Debug, Clone)]
pub struct Design {
    pub n: usize,
    pub p: usize,
    pub y: Vec<f64>,
    pub names: Vec<String>,
    pub spans: Vec<TermSpan>,
    pub smooth: Vec<SmoothEncoding>,
    /// Basis size per smooth term (same order as `smooth`).
    pub sizes: Vec<usize>,
    store: Vec<Store>,
    /// The baseline row c (see [`Store`]).
    baseline: Vec<f64>,
    /// Whether every stored value is finite (checked once when the design is built; the store is never
    /// changed afterwards), so that the kernels' finiteness test is free.
    all_finite: bool,
}

impl Design {
    /// Build the design on all rows of `frame` with `sizes[j]` basis functions for smooth term j.
    pub fn build(frame: &Frame, terms: &ModelTerms, sizes: &[usize]) -> Result<Design, DesignError> {
        Design::build_sorted(frame, terms, sizes, &SortedColumns::new(frame, terms)?)
    }

    /// [`Design::build`] with the smooth columns already sorted (`SortedColumns::new` of the same frame).
    pub fn build_sorted(
        frame: &Frame,
        terms: &ModelTerms,
        sizes: &[usize],
        sorted: &SortedColumns,
    ) -> Result<Design, DesignError> {
        Design::build_sorted_rows(frame, terms, sizes, sorted, None)
    }

    /// The design of the frame's rows `rows` alone (indices into its used rows, ascending; all when
    /// None), knots and centring from those rows: the same design, bit for bit, as [`Design::build`] on
    /// a frame of just those rows, without making that frame. `sorted` holds the smooth columns of
    /// those rows ([`SortedColumns::of_rows`]).
    pub fn build_sorted_rows(
        frame: &Frame,
        terms: &ModelTerms,
        sizes: &[usize],
        sorted: &SortedColumns,
        rows: Option<&[usize]>,
    ) -> Result<Design, DesignError> {
        let mut encodings = Vec::with_capacity(terms.smooth.len());
        let mut smooth_rows = Vec::with_capacity(terms.smooth.len());
        for ((s, &k), sorted) in terms.smooth.iter().zip(sizes).zip(&sorted.0) {
            let x = frame.numeric(&s.column).ok_or_else(|| DesignError::MissingColumn(s.column.clone()))?;
            let basis = Basis::for_sorted(sorted, s.degree, k, s.knots).map_err(|error| DesignError::Basis {
                column: s.column.clone(),
                size: k,
                error,
            })?;
            let BasisRows { first, values, sums } = basis_rows(&basis, x, rows);
            encodings.push(SmoothEncoding::from_sums(&s.column, basis, &sums, rows.map_or(x.len(), <[usize]>::len)));
            smooth_rows.push((first, values));
        }
        Design::assemble(frame, terms, encodings, rows, Some(smooth_rows))
    }

    /// Build the design from given smooth encodings (knots and centring fixed), optionally on a subset
    /// of rows (indices into the frame's used rows, ascending).
    pub fn with_encodings(
        frame: &Frame,
        terms: &ModelTerms,
        encodings: Vec<SmoothEncoding>,
        rows: Option<&[usize]>,
    ) -> Result<Design, DesignError> {
        Design::assemble(frame, terms, encodings, rows, None)
    }

    /// The design on `rows` (all when None); `smooth_rows` are the basis rows of each smooth term on
    /// exactly those rows when the caller has them already.
    fn assemble(
        frame: &Frame,
        terms: &ModelTerms,
        encodings: Vec<SmoothEncoding>,
        rows: Option<&[usize]>,
        smooth_rows: Option<Vec<(Vec<u32>, Vec<f64>)>>,
    ) -> Result<Design, DesignError> {
        let whole = rows.is_none();
        let all: Vec<usize>;
        let rows = match rows {
            Some(r) => r,
            None => {
                all = (0..frame.n_used()).collect();
                &all
            }
        };
        let n = rows.len();
        let y_all = frame.numeric(&terms.response).ok_or_else(|| DesignError::MissingColumn(terms.response.clone()))?;
        let mut names = vec!["intercept".to_string()];
        let mut spans = vec![TermSpan { column: "intercept".into(), kind: TermKind::Intercept, start: 0, len: 1 }];
        let mut baseline = vec![1.0];
        let mut store = Vec::new();
        for t in &terms.linear {
            let col = frame.column(&t.column).ok_or_else(|| DesignError::MissingColumn(t.column.clone()))?;
            let start = names.len();
            match &col.data {
                ColumnData::Numeric(v) => {
                    names.push(t.column.clone());
                    baseline.push(0.0);
                    store.push(Store::Numeric { col: start, values: rows.iter().map(|&i| v[i]).collect() });
                    spans.push(TermSpan { column: t.column.clone(), kind: TermKind::Numeric, start, len: 1 });
                }
                ColumnData::Categorical { levels, codes, reference, .. } => {
                    let mut map = vec![NO_DUMMY; levels.len()];
                    let mut next = 0;
                    for (li, level) in levels.iter().enumerate() {
                        if li != *reference {
                            names.push(format!("{}[{}]", t.column, level));
                            baseline.push(0.0);
                            map[li] = (start + next) as u32;
                            next += 1;
                        }
                    }
                    spans.push(TermSpan { column: t.column.clone(), kind: TermKind::Categorical, start, len: next });
                    let cols = rows.iter().map(|&i| map.get(codes[i] as usize).copied().unwrap_or(NO_DUMMY)).collect();
                    store.push(Store::Categorical { cols });
                }
            }
        }
        let mut smooth_rows = smooth_rows;
        for (t, enc) in encodings.iter().enumerate() {
            let start = names.len();
            let m = enc.columns();
            for j in 1..=m {
                names.push(format!("{}:b{}", enc.column, j));
            }
            baseline.extend(enc.means[..m].iter().map(|mean| -mean));
            spans.push(TermSpan { column: enc.column.clone(), kind: TermKind::Smooth, start, len: m });
            let xs = frame.numeric(&enc.column).ok_or_else(|| DesignError::MissingColumn(enc.column.clone()))?;
            let width = enc.basis.degree + 1;
            let (first, values) = match smooth_rows.as_mut().and_then(|r| r.get_mut(t)) {
                Some(r) => std::mem::take(r),
                None => {
                    let r = basis_rows(&enc.basis, xs, if whole { None } else { Some(rows) });
                    (r.first, r.values)
                }
            };
            let span = smooth_span(m, width, &first);
            store.push(Store::Smooth { start, m, width, span, first, values });
        }
        let p = names.len();
        let y = rows.iter().map(|&i| y_all[i]).collect();
        let sizes = encodings.iter().map(|e| e.basis.size()).collect();
        let mut design = Design { n, p, y, names, spans, smooth: encodings, sizes, store, baseline, all_finite: false };
        design.all_finite = design.store_finite(0, n);
        Ok(design)
    }

    /// Whether every stored entry of rows lo..hi (and the baseline) is finite.
    fn store_finite(&self, lo: usize, hi: usize) -> bool {
        self.store.iter().all(|s| match s {
            Store::Numeric { values, .. } => values[lo..hi].iter().all(|v| v.is_finite()),
            Store::Categorical { .. } => true,
            Store::Smooth { width, values, .. } => values[lo * width..hi * width].iter().all(|v| v.is_finite()),
        }) && self.baseline.iter().all(|v| v.is_finite())
    }

    /// The span of smooth term `j` (in `smooth` order).
    pub fn smooth_span(&self, j: usize) -> Option<&TermSpan> {
        self.spans.iter().filter(|s| s.kind == TermKind::Smooth).nth(j)
    }

    /// Row i of the design, dense (for the few rows a report looks at; the kernels use [`Rows`]).
    pub fn row(&self, i: usize) -> Vec<f64> {
        let mut out = vec![0.0; self.p];
        self.row_into(i, &mut out);
        out
    }

    /// Xb for every row.
    pub fn predict(&self, coef: &[f64]) -> Vec<f64> {
        linalg::predict_rows(self, coef)
    }

    /// X'v, summed over the fixed row blocks in block order.
    pub fn transpose_times(&self, v: &[f64]) -> Vec<f64> {
        let p = self.p;
        let parts = linalg::map_blocks(self.n, |lo, hi| {
            let mut acc = vec![0.0; p];
            let mut idx = vec![0usize; p];
            let mut val = vec![0.0; p];
            let mut sum_v = 0.0;
            for (i, vi) in v.iter().enumerate().take(hi).skip(lo) {
                sum_v += vi;
                let m = self.deviation(i, &self.baseline, &mut idx, &mut val);
                for (&j, &d) in idx[..m].iter().zip(&val[..m]) {
                    acc[j] += d * vi;
                }
            }
            for (a, c) in acc.iter_mut().zip(&self.baseline) {
                *a += c * sum_v;
            }
            acc
        });
        parts.into_iter().fold(vec![0.0; p], |mut t, part| {
            for (a, b) in t.iter_mut().zip(part) {
                *a += b;
            }
            t
        })
    }

    /// The same design restricted to the rows `keep` (ascending indices into this design).
    pub fn subset(&self, keep: &[usize]) -> Design {
        let store = self
            .store
            .iter()
            .map(|s| match s {
                Store::Numeric { col, values } => {
                    Store::Numeric { col: *col, values: keep.iter().map(|&i| values[i]).collect() }
                }
                Store::Categorical { cols } => Store::Categorical { cols: keep.iter().map(|&i| cols[i]).collect() },
                Store::Smooth { start, m, width, span, first, values } => Store::Smooth {
                    start: *start,
                    m: *m,
                    width: *width,
                    span: *span,
                    first: keep.iter().map(|&i| first[i]).collect(),
                    values: keep.iter().flat_map(|&i| values[i * width..(i + 1) * width].iter().copied()).collect(),
                },
            })
            .collect();
        Design {
            n: keep.len(),
            p: self.p,
            y: keep.iter().map(|&i| self.y[i]).collect(),
            names: self.names.clone(),
            spans: self.spans.clone(),
            smooth: self.smooth.clone(),
            sizes: self.sizes.clone(),
            store,
            baseline: self.baseline.clone(),
            // A subset of finite rows is finite; otherwise its rows are checked when used.
            all_finite: self.all_finite,
        }
    }
}

impl Rows for Design {
    fn n(&self) -> usize {
        self.n
    }
    fn p(&self) -> usize {
        self.p
    }
    fn row_into(&self, i: usize, out: &mut [f64]) {
        let out = &mut out[..self.p];
        out.copy_from_slice(&self.baseline);
        for s in &self.store {
            match s {
                Store::Numeric { col, values } => out[*col] = values[i],
                Store::Categorical { cols } => {
                    if let Some(o) = out.get_mut(cols[i] as usize) {
                        *o = 1.0;
                    }
                }
                Store::Smooth { start, m, width, first, values, .. } => {
                    let f = first[i] as usize;
                    for (j, v) in values[i * width..(i + 1) * width].iter().enumerate() {
                        if f + j < *m {
                            out[start + f + j] += v;
                        }
                    }
                }
            }
        }
    }
    fn finite(&self, lo: usize, hi: usize) -> bool {
        self.all_finite || self.store_finite(lo, hi)
    }
    fn baseline(&self, _lo: usize, _hi: usize) -> Vec<f64> {
        self.baseline.clone()
    }
    fn layout(&self) -> Option<linalg::Layout<'_>> {
        let mut layout = linalg::Layout { singles: Vec::new(), singles_end: 1, runs: Vec::new() };
        for (s, term) in self.store.iter().zip(&self.spans[1..]) {
            match s {
                Store::Numeric { col, values } => {
                    layout.singles.push(linalg::Single::Value { col: *col, values });
                }
                Store::Categorical { cols } => layout.singles.push(linalg::Single::Indicator { cols }),
                Store::Smooth { start, m, width, span, first, values } => {
                    if *width != linalg::RUN_WIDTH {
                        return None;
                    }
                    layout.runs.push(linalg::Run { start: *start, kept: *m, span: *span, first, values });
                }
            }
            if !layout.runs.is_empty() && !matches!(s, Store::Smooth { .. }) {
                return None;
            }
            if layout.runs.is_empty() {
                layout.singles_end = term.start + term.len;
            }
        }
        Some(layout)
    }
    fn deviation(&self, i: usize, c: &[f64], idx: &mut [usize], val: &mut [f64]) -> usize {
        // The kernels pass back the baseline this design gave them; the entries below are x_i − c for
        // exactly that c.
        debug_assert!(c.len() == self.p);
        let mut m = 0;
        for s in &self.store {
            match s {
                Store::Numeric { col, values } => {
                    idx[m] = *col;
                    val[m] = values[i];
                    m += 1;
                }
                Store::Categorical { cols } => {
                    let col = cols[i];
                    if col != NO_DUMMY {
                        idx[m] = col as usize;
                        val[m] = 1.0;
                        m += 1;
                    }
                }
                Store::Smooth { start, m: width_cols, width, first, values, .. } => {
                    // The row's basis values that fall on kept columns: the first `len` of them.
                    let f = first[i] as usize;
                    let len = (*width).min(width_cols.saturating_sub(f));
                    val[m..m + len].copy_from_slice(&values[i * width..i * width + len]);
                    for (j, slot) in idx[m..m + len].iter_mut().enumerate() {
                        *slot = start + f + j;
                    }
                    m += len;
                }
            }
        }
        m
    }
}
