//! Design assembly: a [`Frame`] plus the model's terms and one basis size per smooth term → a dense
//! design matrix with readable column names and term spans.
//!
//! Columns, in order: `intercept`; each linear term (a numeric column, or treatment-coded dummies
//! `column[level]` for every non-reference level); each smooth term's k − 1 centred B-spline columns
//! `column:b1 .. column:b(k-1)`. Centring each basis column by its sample mean and dropping the last
//! makes Σ_i g_j(x_ij) = 0, so the intercept carries the mean (DESIGN.md §4, §4.1). Owns no I/O.

use crate::basis::{Basis, BasisError, KnotPlacement};
use crate::data::{ColumnData, Frame};

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
        let k = basis.size();
        let mut sums = vec![0.0; k];
        let mut nz = vec![0.0; degree + 1];
        for &xi in x {
            let first = basis.eval_nonzero(xi, &mut nz);
            for (j, v) in nz.iter().enumerate() {
                if let Some(s) = sums.get_mut(first + j) {
                    *s += v;
                }
            }
        }
        let n = x.len().max(1) as f64;
        let means = sums.into_iter().map(|s| s / n).collect();
        Ok(SmoothEncoding { column: column.to_string(), basis, means })
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

/// Why a design could not be built.
#[derive(Debug, Clone, PartialEq)]
pub enum DesignError {
    /// The basis for the named smooth column cannot be built at this size.
    Basis { column: String, size: usize, error: BasisError },
    /// A column the terms need is not in the frame (a pipeline bug, not user input).
    MissingColumn(String),
}

/// A dense design matrix (row-major) with its response and bookkeeping.
#[derive(Debug, Clone)]
pub struct Design {
    pub n: usize,
    pub p: usize,
    pub x: Vec<f64>,
    pub y: Vec<f64>,
    pub names: Vec<String>,
    pub spans: Vec<TermSpan>,
    pub smooth: Vec<SmoothEncoding>,
    /// Basis size per smooth term (same order as `smooth`).
    pub sizes: Vec<usize>,
}

impl Design {
    /// Build the design on all rows of `frame` with `sizes[j]` basis functions for smooth term j.
    pub fn build(frame: &Frame, terms: &ModelTerms, sizes: &[usize]) -> Result<Design, DesignError> {
        let mut encodings = Vec::with_capacity(terms.smooth.len());
        for (s, &k) in terms.smooth.iter().zip(sizes) {
            let x = frame.numeric(&s.column).ok_or_else(|| DesignError::MissingColumn(s.column.clone()))?;
            let enc = SmoothEncoding::new(&s.column, x, s.degree, k, s.knots).map_err(|error| DesignError::Basis {
                column: s.column.clone(),
                size: k,
                error,
            })?;
            encodings.push(enc);
        }
        Design::with_encodings(frame, terms, encodings, None)
    }

    /// Build the design from given smooth encodings (knots and centring fixed), optionally on a subset
    /// of rows (indices into the frame's used rows, ascending).
    pub fn with_encodings(
        frame: &Frame,
        terms: &ModelTerms,
        encodings: Vec<SmoothEncoding>,
        rows: Option<&[usize]>,
    ) -> Result<Design, DesignError> {
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
        enum Src<'a> {
            Num(&'a [f64]),
            Cat(&'a [u32], Vec<Option<usize>>),
        }
        let mut sources = Vec::new();
        for t in &terms.linear {
            let col = frame.column(&t.column).ok_or_else(|| DesignError::MissingColumn(t.column.clone()))?;
            let start = names.len();
            match &col.data {
                ColumnData::Numeric(v) => {
                    names.push(t.column.clone());
                    sources.push(Src::Num(v));
                    spans.push(TermSpan { column: t.column.clone(), kind: TermKind::Numeric, start, len: 1 });
                }
                ColumnData::Categorical { levels, codes, reference, .. } => {
                    let mut map = vec![None; levels.len()];
                    let mut next = 0;
                    for (li, level) in levels.iter().enumerate() {
                        if li != *reference {
                            names.push(format!("{}[{}]", t.column, level));
                            map[li] = Some(next);
                            next += 1;
                        }
                    }
                    spans.push(TermSpan { column: t.column.clone(), kind: TermKind::Categorical, start, len: next });
                    sources.push(Src::Cat(codes, map));
                }
            }
        }
        let mut smooth_x = Vec::new();
        for enc in &encodings {
            let start = names.len();
            for j in 1..=enc.columns() {
                names.push(format!("{}:b{}", enc.column, j));
            }
            spans.push(TermSpan { column: enc.column.clone(), kind: TermKind::Smooth, start, len: enc.columns() });
            smooth_x.push(frame.numeric(&enc.column).ok_or_else(|| DesignError::MissingColumn(enc.column.clone()))?);
        }
        let p = names.len();
        let mut x = vec![0.0; n * p];
        let mut y = Vec::with_capacity(n);
        let max_degree = encodings.iter().map(|e| e.basis.degree).max().unwrap_or(0);
        let mut scratch = vec![0.0; max_degree + 1];
        for (out_row, &i) in rows.iter().enumerate() {
            y.push(y_all[i]);
            let row = &mut x[out_row * p..(out_row + 1) * p];
            row[0] = 1.0;
            let mut c = 1;
            for src in &sources {
                match src {
                    Src::Num(v) => {
                        row[c] = v[i];
                        c += 1;
                    }
                    Src::Cat(codes, map) => {
                        let width = map.iter().filter(|m| m.is_some()).count();
                        if let Some(Some(j)) = map.get(codes[i] as usize) {
                            row[c + j] = 1.0;
                        }
                        c += width;
                    }
                }
            }
            for (enc, xs) in encodings.iter().zip(&smooth_x) {
                let m = enc.columns();
                let d = enc.basis.degree + 1;
                enc.eval_centred(xs[i], &mut scratch[..d], &mut row[c..c + m]);
                c += m;
            }
        }
        let sizes = encodings.iter().map(|e| e.basis.size()).collect();
        Ok(Design { n, p, x, y, names, spans, smooth: encodings, sizes })
    }

    /// The span of smooth term `j` (in `smooth` order).
    pub fn smooth_span(&self, j: usize) -> Option<&TermSpan> {
        self.spans.iter().filter(|s| s.kind == TermKind::Smooth).nth(j)
    }

    /// Row i of the design.
    pub fn row(&self, i: usize) -> &[f64] {
        &self.x[i * self.p..(i + 1) * self.p]
    }

    /// The same design restricted to the rows `keep` (ascending indices into this design).
    pub fn subset(&self, keep: &[usize]) -> Design {
        let mut x = Vec::with_capacity(keep.len() * self.p);
        let mut y = Vec::with_capacity(keep.len());
        for &i in keep {
            x.extend_from_slice(self.row(i));
            y.push(self.y[i]);
        }
        Design { n: keep.len(), x, y, ..self.clone_meta() }
    }

    fn clone_meta(&self) -> Design {
        Design {
            n: 0,
            p: self.p,
            x: Vec::new(),
            y: Vec::new(),
            names: self.names.clone(),
            spans: self.spans.clone(),
            smooth: self.smooth.clone(),
            sizes: self.sizes.clone(),
        }
    }
}
