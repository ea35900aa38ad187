//! Least-squares engine: weighted normal equations from sparse rows by Cholesky (inner IRLS steps),
//! the final solve of every fit (corrected semi-normal equations when well conditioned, streaming
//! Householder QR otherwise: [`least_squares_rows`]), hat values and (X'X)^-1.
//!
//! Matrices are read through [`Rows`] (a dense row-major slice is [`Dense`]). Reductions run over
//! fixed row blocks in a fixed order, so results are bit-identical whatever the thread count.
//!
//! This module owns only dense linear algebra; it knows nothing of losses, scales or the study spec.
//! The Householder updating scheme (stacking new rows under a triangular factor and re-triangularising)
//! is the classical one of Golub & Van Loan, *Matrix Computations* (3rd ed. 1996, §5.2 and §12.5,
//! from memory).

// `!(a > b)` is used on purpose: it is true when a is NaN, so an unusable value takes the safe branch.
#![allow(clippy::neg_cmp_op_on_partial_ord)]

/// Rows processed per block by the streaming QR and by the normal-equation accumulation. Fixed so that
/// the order of every floating-point operation is independent of n's factorisation and of threads.
pub const CHUNK_ROWS: usize = 256;

/// Rows per reduction block. Every reduction over rows (X'WX, the QR factor, sums of squares and of ρ)
/// is computed block by block, each block on its own from its first row, and the block results are
/// combined in block order: the blocks are fixed by n alone, so the answer is bit-identical whatever
/// the number of threads, which only decides which thread computes which blocks.
pub const BLOCK_ROWS: usize = 4096;

/// Worker threads for row-block work: `KNOTWISE_THREADS` when set to a positive integer, otherwise the
/// machine's available parallelism. Affects speed only, never a result.
pub fn threads() -> usize {
    static T: std::sync::OnceLock<usize> = std::sync::OnceLock::new();
    *T.get_or_init(|| {
        std::env::var("KNOTWISE_THREADS")
            .ok()
            .and_then(|v| v.trim().parse::<usize>().ok())
            .filter(|&t| t > 0)
            .unwrap_or_else(|| std::thread::available_parallelism().map_or(1, |t| t.get()))
    })
}

thread_local! {
    static IN_WORKER: std::cell::Cell<bool> = const { std::cell::Cell::new(false) };
}

/// Run `f` as a worker: block helpers called inside it run on the calling thread (no nested threads).
/// Results are the same either way, since the blocks are fixed.
pub fn as_worker<R>(f: impl FnOnce() -> R) -> R {
    let before = IN_WORKER.with(|c| c.replace(true));
    let out = f();
    IN_WORKER.with(|c| c.set(before));
    out
}

/// Fewer blocks than this run on the calling thread: starting threads costs more than a few blocks of
/// work (speed only; the blocks, and so the results, are the same).
const MIN_PARALLEL_BLOCKS: usize = 4;

fn available_threads(nb: usize) -> usize {
    if IN_WORKER.with(|c| c.get()) || nb < MIN_PARALLEL_BLOCKS {
        1
    } else {
        threads().min(nb)
    }
}

/// `f(start, end)` for every fixed block of [`BLOCK_ROWS`] rows of 0..n, results in block order. Blocks
/// are dealt to threads in contiguous runs (a static assignment); each result depends on its block only.
pub fn map_blocks<T: Send>(n: usize, f: impl Fn(usize, usize) -> T + Sync) -> Vec<T> {
    let nb = n.div_ceil(BLOCK_ROWS);
    let t = available_threads(nb);
    let run = |b: usize| f(b * BLOCK_ROWS, ((b + 1) * BLOCK_ROWS).min(n));
    if t <= 1 {
        return (0..nb).map(run).collect();
    }
    let per = nb.div_ceil(t);
    std::thread::scope(|s| {
        let run = &run;
        let handles: Vec<_> = (0..t)
            .map(|k| s.spawn(move || as_worker(|| (k * per..((k + 1) * per).min(nb)).map(run).collect::<Vec<T>>())))
            .collect();
        handles.into_iter().flat_map(|h| h.join().expect("linalg worker thread panicked")).collect()
    })
}

/// `f(k)` for the independent tasks k = 0..tasks (grid points, say), results in task order. Tasks are
/// dealt to threads round-robin and each runs as a worker (its own block helpers on its thread); a
/// single task runs on the calling thread with the block helpers parallel. Results are those of a
/// sequential loop, since every block helper's answer is independent of threads.
pub fn map_tasks<T: Send>(tasks: usize, f: impl Fn(usize) -> T + Sync) -> Vec<T> {
    let t = if IN_WORKER.with(|c| c.get()) { 1 } else { threads().min(tasks) };
    if t <= 1 {
        return (0..tasks).map(f).collect();
    }
    let mut slots: Vec<Option<T>> = (0..tasks).map(|_| None).collect();
    std::thread::scope(|s| {
        let f = &f;
        let handles: Vec<_> = (0..t)
            .map(|k| {
                s.spawn(move || as_worker(|| (k..tasks).step_by(t).map(|i| (i, f(i))).collect::<Vec<(usize, T)>>()))
            })
            .collect();
        for h in handles {
            for (i, v) in h.join().expect("linalg worker thread panicked") {
                slots[i] = Some(v);
            }
        }
    });
    // Every slot was filled by exactly one thread above (the round-robin covers 0..tasks).
    slots.into_iter().flatten().collect()
}

/// Σ over blocks of `f(start, end)`, added in block order (see [`BLOCK_ROWS`]).
pub fn sum_blocks(n: usize, f: impl Fn(usize, usize) -> f64 + Sync) -> f64 {
    map_blocks(n, f).into_iter().fold(0.0, |a, b| a + b)
}

/// `f(start, out)` on consecutive blocks of `out` (block b starts at row b·[`BLOCK_ROWS`]); for
/// elementwise work whose result does not depend on how the rows are split.
pub fn fill_blocks(out: &mut [f64], f: impl Fn(usize, &mut [f64]) + Sync) {
    let n = out.len();
    let nb = n.div_ceil(BLOCK_ROWS);
    let t = available_threads(nb);
    if t <= 1 {
        f(0, out);
        return;
    }
    let per = nb.div_ceil(t) * BLOCK_ROWS;
    std::thread::scope(|s| {
        let f = &f;
        for (k, part) in out.chunks_mut(per).enumerate() {
            s.spawn(move || as_worker(|| f(k * per, part)));
        }
    });
}

/// `f(start, a_block, b_block)` for every fixed block of [`BLOCK_ROWS`] rows, with the block's parts
/// of two row arrays of equal length to fill; results in block order (as [`map_blocks`]).
pub fn map_blocks_mut2<T: Send>(
    a: &mut [f64],
    b: &mut [f64],
    f: impl Fn(usize, &mut [f64], &mut [f64]) -> T + Sync,
) -> Vec<T> {
    assert_eq!(a.len(), b.len(), "map_blocks_mut2: arrays of different lengths");
    let blocks = a.chunks_mut(BLOCK_ROWS).zip(b.chunks_mut(BLOCK_ROWS)).collect();
    map_block_items(blocks, |lo, (x, y)| f(lo, x, y))
}

/// `f(start, a_block)` for every fixed block of [`BLOCK_ROWS`] rows of `a` (to fill); results in block
/// order (as [`map_blocks`]).
pub fn map_blocks_mut<T: Send>(a: &mut [f64], f: impl Fn(usize, &mut [f64]) -> T + Sync) -> Vec<T> {
    map_block_items(a.chunks_mut(BLOCK_ROWS).collect(), f)
}

/// `f(start, item)` for the per-block items of consecutive [`BLOCK_ROWS`]-row blocks (item b belongs to
/// rows from b·BLOCK_ROWS, e.g. the blocks' parts of arrays to fill), results in block order; blocks
/// dealt to threads in contiguous runs (as [`map_blocks`]).
pub fn map_block_items<C: Send, T: Send>(mut blocks: Vec<C>, f: impl Fn(usize, C) -> T + Sync) -> Vec<T> {
    let nb = blocks.len();
    let t = available_threads(nb);
    if t <= 1 {
        return blocks.into_iter().enumerate().map(|(k, c)| f(k * BLOCK_ROWS, c)).collect();
    }
    let per = nb.div_ceil(t);
    std::thread::scope(|s| {
        let f = &f;
        let mut handles = Vec::new();
        let mut first = 0;
        while !blocks.is_empty() {
            let rest = blocks.split_off(per.min(blocks.len()));
            let mine = std::mem::replace(&mut blocks, rest);
            let start = first;
            first += mine.len();
            handles.push(s.spawn(move || {
                as_worker(|| {
                    mine.into_iter().enumerate().map(|(k, c)| f((start + k) * BLOCK_ROWS, c)).collect::<Vec<T>>()
                })
            }));
        }
        handles.into_iter().flat_map(|h| h.join().expect("linalg worker thread panicked")).collect()
    })
}

fn all_finite(v: &[f64]) -> bool {
    // v·0 is NaN exactly when v is non-finite; four independent accumulators keep the loop from being
    // one long chain of dependent additions.
    let mut acc = [0.0f64; 4];
    let mut chunks = v.chunks_exact(4);
    for c in &mut chunks {
        for (a, &b) in acc.iter_mut().zip(c) {
            *a += b * 0.0;
        }
    }
    let tail = chunks.remainder().iter().fold(0.0, |a, &b| a + b * 0.0);
    acc.iter().sum::<f64>() + tail == 0.0
}

/// A design matrix as the row kernels read it: n rows of p columns, each row a per-column baseline
/// plus a (mostly) sparse deviation. A dense row-major slice is [`Dense`]; the model design stores its
/// B-spline rows compactly (degree + 1 values per smooth term) and implements this trait directly, so
/// that X'WX, residuals and the QR factor never need an n × p array.
pub trait Rows: Sync {
    fn n(&self) -> usize;
    fn p(&self) -> usize;
    /// Row i, dense, into `out[..p]`.
    fn row_into(&self, i: usize, out: &mut [f64]);
    /// Whether every entry of rows lo..hi is finite.
    fn finite(&self, lo: usize, hi: usize) -> bool;
    /// A baseline c for rows lo..hi: row i = c + d_i with d_i mostly zero. Any c gives the same
    /// results up to rounding; a good one makes the sparse kernels cheap. Must depend on lo..hi only.
    fn baseline(&self, lo: usize, hi: usize) -> Vec<f64>;
    /// The entries of d_i = x_i − c that may be non-zero, in ascending column order, into `idx` and
    /// `val` (each at least p long); returns how many.
    fn deviation(&self, i: usize, c: &[f64], idx: &mut [usize], val: &mut [f64]) -> usize;
    /// The rows' fixed layout, when they have one the blocked kernels read directly (a speed path:
    /// the results are the same bit for bit as through [`Rows::deviation`]). The layout's entries must
    /// be exactly the non-zero entries of [`Rows::deviation`] for the baseline of [`Rows::baseline`].
    fn layout(&self) -> Option<Layout<'_>> {
        None
    }
    /// x_i'b for the rows lo..lo + out.len(), into `out`.
    fn dot_rows(&self, lo: usize, coef: &[f64], out: &mut [f64]) {
        let p = self.p();
        let hi = lo + out.len();
        let c = self.baseline(lo, hi);
        if let Some((layout, pad)) = blocked_layout(self) {
            return blocked::dot_block(&layout, &pad, coef, lo, out, &c);
        }
        let cb = dot(&c, coef);
        let mut idx = vec![0usize; p];
        let mut val = vec![0.0; p];
        for (k, o) in out.iter_mut().enumerate() {
            let m = self.deviation(lo + k, &c, &mut idx, &mut val);
            *o = sparse_dot(cb, &idx[..m], &val[..m], coef);
        }
    }
}

mod blocked;
use blocked::Padding;

/// Width of a [`Run`]: the non-zero values of a cubic B-spline basis at a point.
pub const RUN_WIDTH: usize = 4;

/// "No entry" in a [`Single::Indicator`] row.
pub const NO_COLUMN: u32 = u32::MAX;

/// A per-row single entry of a [`Layout`].
pub enum Single<'a> {
    /// A value in column `col` on every row.
    Value { col: usize, values: &'a [f64] },
    /// A 1 in column `cols[i]` of row i, or nothing when it is [`NO_COLUMN`].
    Indicator { cols: &'a [u32] },
}

/// A per-row run of [`RUN_WIDTH`] values in consecutive columns `start + first[i] ..`, of which only
/// those on the `kept` columns start..start + kept belong to the matrix. `span` bounds the run:
/// first[i] + RUN_WIDTH ≤ span for every row, and kept ≤ span.
pub struct Run<'a> {
    pub start: usize,
    pub kept: usize,
    pub span: usize,
    pub first: &'a [u32],
    /// RUN_WIDTH values per row.
    pub values: &'a [f64],
}

/// The fixed row layout of a design as the blocked kernels read it: row i minus the baseline is the
/// single entries (all in columns below `singles_end`, ascending) followed by the runs (ascending,
/// each at or after the previous one's kept columns).
pub struct Layout<'a> {
    pub singles: Vec<Single<'a>>,
    pub singles_end: usize,
    pub runs: Vec<Run<'a>>,
}

/// The layout of `x` with its padding, when the blocked kernels can take it.
fn blocked_layout<R: Rows + ?Sized>(x: &R) -> Option<(Layout<'_>, Padding)> {
    let layout = x.layout()?;
    let pad = Padding::new(&layout, x.p())?;
    Some((layout, pad))
}

/// A dense row-major n × p matrix.
#[derive(Debug, Clone, Copy)]
pub struct Dense<'a> {
    x: &'a [f64],
    n: usize,
    p: usize,
}

impl<'a> Dense<'a> {
    /// # Panics
    /// If `x.len() != n·p` (a programming error: every caller builds x with that shape).
    pub fn new(x: &'a [f64], n: usize, p: usize) -> Self {
        assert_eq!(x.len(), n * p, "linalg: x has {} entries, expected n·p = {}", x.len(), n * p);
        Dense { x, n, p }
    }
}

impl Rows for Dense<'_> {
    fn n(&self) -> usize {
        self.n
    }
    fn p(&self) -> usize {
        self.p
    }
    fn row_into(&self, i: usize, out: &mut [f64]) {
        out[..self.p].copy_from_slice(&self.x[i * self.p..(i + 1) * self.p]);
    }
    fn finite(&self, lo: usize, hi: usize) -> bool {
        all_finite(&self.x[lo * self.p..hi * self.p])
    }
    fn baseline(&self, lo: usize, hi: usize) -> Vec<f64> {
        block_baseline(self.x, self.p, lo, hi)
    }
    fn deviation(&self, i: usize, c: &[f64], idx: &mut [usize], val: &mut [f64]) -> usize {
        let p = self.p;
        let row = &self.x[i * p..(i + 1) * p];
        let (idx, val) = (&mut idx[..p], &mut val[..p]);
        // Branch-free compaction: every entry is written at the next free slot, which advances only
        // for a non-zero (which entries are zero changes from row to row, so a branch mispredicts).
        let mut m = 0;
        for (j, (&x, &cj)) in row.iter().zip(&c[..p]).enumerate() {
            let d = x - cj;
            idx[m] = j;
            val[m] = d;
            m += usize::from(d != 0.0);
        }
        m
    }
    fn dot_rows(&self, lo: usize, coef: &[f64], out: &mut [f64]) {
        let p = self.p;
        for (k, o) in out.iter_mut().enumerate() {
            let i = lo + k;
            *o = dot(&self.x[i * p..(i + 1) * p], coef);
        }
    }
}

/// Relative tolerance of the rank test: column j is deficient when |R_jj| <= RANK_TOL · ||X_j||_w,
/// with ||X_j||_w the (weighted) Euclidean norm of column j. |R_jj| is the distance of column j from
/// the span of columns 0..j (Golub & Van Loan 1996, §5.4, from memory), so the test asks whether
/// column j is, to 9 digits, a combination of the earlier ones. Scale-aware: rescaling a column by any
/// factor leaves the decision unchanged.
pub const RANK_TOL: f64 = 1e-9;

/// A coefficient of the aliasing combination is reported when its contribution |c_i|·||X_i|| exceeds
/// this fraction of ||X_j||; smaller terms are rounding noise of the triangular solve.
const ALIAS_TOL: f64 = 1e-6;

/// Why a least-squares problem cannot be solved.
#[derive(Debug, Clone, PartialEq)]
pub enum LinalgError {
    /// Column `column` is (numerically) a linear combination of the columns in `aliased_with`.
    RankDeficient { column: usize, aliased_with: Vec<usize> },
    /// Fewer (positively weighted) rows than columns.
    TooFewRows { rows: usize, columns: usize },
    /// A non-finite value in X, y or the weights.
    NonFinite,
}

/// How a least-squares solution was computed.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum LsMethod {
    /// Householder QR.
    Householder,
    /// Cholesky of X'WX with corrected semi-normal refinement ([`least_squares_rows`]).
    RefinedNormal,
}

/// Result of a least-squares solve (QR or refined normal equations).
#[derive(Debug, Clone)]
pub struct LeastSquares {
    pub coef: Vec<f64>,
    /// y − X·coef for every row, when the solve computed them on the way (the refined normal
    /// equations do; QR does not).
    pub residuals: Option<Vec<f64>>,
    /// Residual sum of squares (weighted when weights were given).
    pub rss: f64,
    /// Upper-triangular R (p × p, row-major) of the (weighted) design.
    pub r: Vec<f64>,
    pub p: usize,
    pub method: LsMethod,
}

impl LeastSquares {
    /// (X'WX)^-1 = R^-1 R^-T, p × p row-major.
    ///
    /// R comes from a successful [`qr_solve`], so its diagonal is non-zero by the rank test; a zero
    /// diagonal (impossible through the public API) yields zeros in the affected rows, never NaN.
    pub fn xtx_inverse(&self) -> Vec<f64> {
        let p = self.p;
        let rinv = upper_inverse(&self.r, p);
        // (R^-1)(R^-1)': entry (i, k) = Σ_j Rinv[i][j] Rinv[k][j], j >= max(i, k).
        let mut out = vec![0.0; p * p];
        for i in 0..p {
            for k in i..p {
                let mut s = 0.0;
                for j in k..p {
                    s += rinv[i * p + j] * rinv[k * p + j];
                }
                out[i * p + k] = s;
                out[k * p + i] = s;
            }
        }
        out
    }
}

/// Inverse of an upper-triangular p × p matrix by back substitution (column by column).
fn upper_inverse(r: &[f64], p: usize) -> Vec<f64> {
    let mut inv = vec![0.0; p * p];
    for col in 0..p {
        // Solve R v = e_col; v_i = 0 for i > col.
        for i in (0..=col).rev() {
            let mut s = if i == col { 1.0 } else { 0.0 };
            for j in (i + 1)..=col {
                s -= r[i * p + j] * inv[j * p + col];
            }
            let d = r[i * p + i];
            inv[i * p + col] = if d != 0.0 { s / d } else { 0.0 };
        }
    }
    inv
}

/// Shape asserts and the cheap checks (y, weights, positive rows). The check that x is finite is fused
/// into the block kernels, which read every row anyway; when there are too few rows it is done here so
/// that non-finite data is still reported first.
fn check_inputs<R: Rows + ?Sized>(x: &R, y: &[f64], w: Option<&[f64]>) -> Result<usize, LinalgError> {
    let (n, p) = (x.n(), x.p());
    assert_eq!(y.len(), n, "linalg: y has {} entries, expected n = {n}", y.len());
    if let Some(w) = w {
        assert_eq!(w.len(), n, "linalg: w has {} entries, expected n = {n}", w.len());
    }
    if !all_finite(y) {
        return Err(LinalgError::NonFinite);
    }
    let positive = match w {
        None => n,
        Some(w) => {
            // Negative weights make the problem indefinite: refuse them with the non-finite error,
            // the closest existing meaning ("a value the solver cannot use").
            if w.iter().any(|v| !v.is_finite() || *v < 0.0) {
                return Err(LinalgError::NonFinite);
            }
            w.iter().filter(|v| **v > 0.0).count()
        }
    };
    if positive < p {
        if !x.finite(0, n) {
            return Err(LinalgError::NonFinite);
        }
        return Err(LinalgError::TooFewRows { rows: positive, columns: p });
    }
    Ok(positive)
}

/// Least squares min Σ w_i (y_i − x_i'b)² by blocked Householder QR (rows processed in fixed chunks;
/// each chunk is stacked under the running R and re-triangularised). Never forms X'X.
///
/// Rows with w_i = 0 drop out. Negative or non-finite weights, or non-finite data, give
/// [`LinalgError::NonFinite`]. The first column failing the rank test of [`RANK_TOL`] is reported with
/// the earlier columns that reproduce it. RSS is recomputed at the end as Σ w_i (y_i − x_i'b)² (more
/// accurate than the rotated-out sum when the fit is nearly exact).
pub fn qr_solve(x: &[f64], n: usize, p: usize, y: &[f64], w: Option<&[f64]>) -> Result<LeastSquares, LinalgError> {
    qr_solve_rows(&Dense::new(x, n, p), y, w)
}

/// [`qr_solve`] on any [`Rows`].
pub fn qr_solve_rows<R: Rows + ?Sized>(x: &R, y: &[f64], w: Option<&[f64]>) -> Result<LeastSquares, LinalgError> {
    qr_solve_chunked_rows(x, y, w, CHUNK_ROWS)
}

/// [`qr_solve`] with an explicit chunk size (rows per block, at least 1). Exposed so tests can check
/// that the answer does not depend on where chunk boundaries fall.
pub fn qr_solve_chunked(
    x: &[f64],
    n: usize,
    p: usize,
    y: &[f64],
    w: Option<&[f64]>,
    chunk: usize,
) -> Result<LeastSquares, LinalgError> {
    qr_solve_chunked_rows(&Dense::new(x, n, p), y, w, chunk)
}

fn qr_solve_chunked_rows<R: Rows + ?Sized>(
    x: &R,
    y: &[f64],
    w: Option<&[f64]>,
    chunk: usize,
) -> Result<LeastSquares, LinalgError> {
    let (n, p) = (x.n(), x.p());
    check_inputs(x, y, w)?;
    let chunk = chunk.max(1);
    let width = p + 1; // augmented with y

    // Each block of BLOCK_ROWS rows is triangularised on its own; the block factors are then merged in
    // block order by stacking each under the running factor (a tall-skinny QR). With one block this is
    // exactly the plain streaming QR.
    let blocks = map_blocks(n, |lo, hi| qr_block(x, y, w, lo, hi, chunk));
    if blocks.iter().any(|b| !b.finite) {
        return Err(LinalgError::NonFinite);
    }
    let mut colnorm2 = vec![0.0; p];
    let mut acc: Option<Vec<f64>> = None;
    let mut work = vec![0.0; 2 * p * width];
    for b in blocks {
        for (c, v) in colnorm2.iter_mut().zip(&b.colnorm2) {
            *c += v;
        }
        if b.rows == 0 {
            continue;
        }
        match acc.as_mut() {
            None => acc = Some(b.a),
            Some(a) => {
                work[..p * width].copy_from_slice(a);
                work[p * width..].copy_from_slice(&b.a);
                triangularise_block(&mut work, p, p);
                a.copy_from_slice(&work[..p * width]);
            }
        }
    }
    let a = acc.unwrap_or_else(|| vec![0.0; p * width]);

    let r: Vec<f64> = (0..p).flat_map(|row| a[row * width..row * width + p].iter().copied()).collect();
    let qty: Vec<f64> = (0..p).map(|row| a[row * width + p]).collect();

    // Rank test, first deficient column wins.
    for j in 0..p {
        let norm = colnorm2[j].sqrt();
        if r[j * p + j].abs() <= RANK_TOL * norm || norm == 0.0 {
            return Err(LinalgError::RankDeficient { column: j, aliased_with: aliased_columns(&r, p, j, &colnorm2) });
        }
    }

    // Back substitution R b = Q'y.
    let mut coef = vec![0.0; p];
    for j in (0..p).rev() {
        let mut s = qty[j];
        for k in (j + 1)..p {
            s -= r[j * p + k] * coef[k];
        }
        coef[j] = s / r[j * p + j];
    }

    let rss = weighted_rss(x, y, w, &coef);
    if !rss.is_finite() || coef.iter().any(|c| !c.is_finite()) {
        return Err(LinalgError::NonFinite);
    }
    Ok(LeastSquares { coef, rss, r, p, method: LsMethod::Householder, residuals: None })
}

/// One block's triangular factor [R | Q'y] (p × (p+1)), column sums of squares and row count.
struct BlockQr {
    a: Vec<f64>,
    colnorm2: Vec<f64>,
    rows: usize,
    finite: bool,
}

/// Streaming Householder QR of rows lo..hi in chunks of `chunk` positively weighted rows.
fn qr_block<R: Rows + ?Sized>(x: &R, y: &[f64], w: Option<&[f64]>, lo: usize, hi: usize, chunk: usize) -> BlockQr {
    let p = x.p();
    let width = p + 1;
    // Work array: rows 0..p hold [R | Q'y head]; rows p..p+chunk hold the incoming block.
    let mut a = vec![0.0; (p + chunk) * width];
    let mut colnorm2 = vec![0.0; p];
    let finite = x.finite(lo, hi);
    let mut src = vec![0.0; p];
    let mut rows = 0;
    let mut i = lo;
    while i < hi {
        // Fill the block with the next `chunk` positively weighted rows, scaled by sqrt(w).
        let mut m = 0;
        while i < hi && m < chunk {
            let wi = w.map_or(1.0, |w| w[i]);
            if wi > 0.0 {
                let sw = wi.sqrt();
                let dst = &mut a[(p + m) * width..(p + m + 1) * width];
                x.row_into(i, &mut src);
                for ((d, s), c) in dst[..p].iter_mut().zip(&src).zip(colnorm2.iter_mut()) {
                    let v = sw * s;
                    *d = v;
                    *c += v * v;
                }
                dst[p] = sw * y[i];
                m += 1;
            }
            i += 1;
        }
        if m > 0 && finite {
            triangularise_block(&mut a, p, m);
        }
        rows += m;
    }
    a.truncate(p * width);
    BlockQr { a, colnorm2, rows, finite }
}

/// Re-triangularise [R; B] where R (rows 0..p of `a`) is upper triangular and B (rows p..p+m) is dense,
/// by one Householder reflection per column acting on row j of R and the m block rows only (the rows
/// j+1..p of R are zero in column j). The y column rides along.
fn triangularise_block(a: &mut [f64], p: usize, m: usize) {
    let width = p + 1;
    let mut f = vec![0.0; width];
    for j in 0..p {
        let top = a[j * width + j];
        // Scaled norm to avoid overflow/underflow in the sum of squares.
        let mut big = top.abs();
        for b in 0..m {
            big = big.max(a[(p + b) * width + j].abs());
        }
        if big == 0.0 {
            continue;
        }
        let mut ss = (top / big) * (top / big);
        for b in 0..m {
            let v = a[(p + b) * width + j] / big;
            ss += v * v;
        }
        let norm = big * ss.sqrt();
        if norm == 0.0 {
            continue;
        }
        let alpha = if top >= 0.0 { -norm } else { norm };
        let v0 = top - alpha;
        // v'v = v0² + Σ b² = 2 norm (norm + |top|), exact identity that avoids cancellation.
        let vtv = 2.0 * norm * (norm + top.abs());
        if vtv == 0.0 {
            continue;
        }
        // Row-oriented: for every column k > j at once, s_k = v0·a[j][k] + Σ_b a[b][j]·a[b][k] (rows b
        // in order, so each s_k is summed exactly as a column-by-column loop would), then the update.
        let (head, block) = a.split_at_mut(p * width);
        let rowj = &mut head[j * width..(j + 1) * width];
        let fk = &mut f[j + 1..];
        for (s, &v) in fk.iter_mut().zip(&rowj[j + 1..]) {
            *s = v0 * v;
        }
        for b in 0..m {
            let row = &block[b * width..(b + 1) * width];
            let vb = row[j];
            for (s, &v) in fk.iter_mut().zip(&row[j + 1..]) {
                *s += vb * v;
            }
        }
        for (s, v) in fk.iter_mut().zip(rowj[j + 1..].iter_mut()) {
            *s = 2.0 * *s / vtv;
            *v -= *s * v0;
        }
        for b in 0..m {
            let row = &mut block[b * width..(b + 1) * width];
            let vb = row[j];
            for (s, v) in fk.iter().zip(row[j + 1..].iter_mut()) {
                *v -= s * vb;
            }
            row[j] = 0.0;
        }
        rowj[j] = alpha;
    }
}

/// The earlier columns with non-negligible weight in the combination that reproduces column j:
/// solve R[0..j, 0..j] c = R[0..j, j] (the leading triangle is non-singular: column j is the first
/// deficient one).
fn aliased_columns(r: &[f64], p: usize, j: usize, colnorm2: &[f64]) -> Vec<usize> {
    let normj = colnorm2[j].sqrt();
    if normj == 0.0 || j == 0 {
        return Vec::new();
    }
    let mut c = vec![0.0; j];
    for i in (0..j).rev() {
        let mut s = r[i * p + j];
        for k in (i + 1)..j {
            s -= r[i * p + k] * c[k];
        }
        c[i] = s / r[i * p + i];
    }
    (0..j).filter(|&i| c[i].abs() * colnorm2[i].sqrt() > ALIAS_TOL * normj).collect()
}

/// Σ w_i (y_i − x_i'b)², summed in row order within each block and over blocks in block order.
fn weighted_rss<R: Rows + ?Sized>(x: &R, y: &[f64], w: Option<&[f64]>, coef: &[f64]) -> f64 {
    sum_blocks(x.n(), |lo, hi| {
        let mut fit = vec![0.0; hi - lo];
        x.dot_rows(lo, coef, &mut fit);
        let mut rss = 0.0;
        for (k, f) in fit.iter().enumerate() {
            let i = lo + k;
            let wi = w.map_or(1.0, |w| w[i]);
            if wi == 0.0 {
                continue;
            }
            let e = y[i] - f;
            rss += wi * e * e;
        }
        rss
    })
}

/// c'b + Σ_k val_k·b_{idx_k}: a row's x'b from its baseline product `cb` and its deviation entries.
#[inline]
fn sparse_dot(cb: f64, idx: &[usize], val: &[f64], coef: &[f64]) -> f64 {
    let mut s = cb;
    for (&j, &v) in idx.iter().zip(val) {
        s += v * coef[j];
    }
    s
}

/// x'b summed in index order.
#[inline]
fn dot(row: &[f64], coef: &[f64]) -> f64 {
    let mut s = 0.0;
    for (a, b) in row.iter().zip(coef) {
        s += a * b;
    }
    s
}

/// Weighted normal equations X'WX b = X'Wy by Cholesky, for inner IRLS steps where speed matters.
///
/// The upper triangle of [X'WX | X'Wy] is accumulated over the fixed blocks of [`BLOCK_ROWS`] rows
/// (in parallel), each block four rows at a time, and the block sums are added in block order. When the
/// Cholesky factorisation meets a pivot below 1e-12 × (the corresponding diagonal of X'WX) —
/// numerically rank deficient in the squared problem — the solve falls back to [`qr_solve`], which
/// either succeeds with more accuracy or names the aliased columns.
pub fn normal_solve(x: &[f64], n: usize, p: usize, y: &[f64], w: &[f64]) -> Result<Vec<f64>, LinalgError> {
    normal_solve_rows(&Dense::new(x, n, p), y, w)
}

/// [`normal_solve`] on any [`Rows`].
pub fn normal_solve_rows<R: Rows + ?Sized>(x: &R, y: &[f64], w: &[f64]) -> Result<Vec<f64>, LinalgError> {
    check_inputs(x, y, Some(w))?;
    let mut total = normal_equations(x, y, w)?;
    match cholesky_solve(&mut total, x.p()) {
        Some(coef) if coef.iter().all(|c| c.is_finite()) => Ok(coef),
        _ => qr_solve_rows(x, y, Some(w)).map(|ls| ls.coef),
    }
}

/// The upper triangle of [X'WX | X'Wy] (p × (p + 1)): [`xtwx_block`] over the fixed blocks, added
/// in block order; non-finite rows are [`LinalgError::NonFinite`].
fn normal_equations<R: Rows + ?Sized>(x: &R, y: &[f64], w: &[f64]) -> Result<Vec<f64>, LinalgError> {
    let parts = map_blocks(x.n(), |lo, hi| xtwx_block(x, y, w, lo, hi));
    if parts.iter().any(|(_, finite)| !finite) {
        return Err(LinalgError::NonFinite);
    }
    Ok(add_parts(x.p() * (x.p() + 1), parts.into_iter().map(|(part, _)| part)))
}

/// Element-wise sum of block results, added in block order.
fn add_parts(len: usize, parts: impl IntoIterator<Item = Vec<f64>>) -> Vec<f64> {
    let mut total = vec![0.0; len];
    for part in parts {
        for (t, v) in total.iter_mut().zip(&part) {
            *t += v;
        }
    }
    total
}

/// Upper triangle of [X'WX | X'Wy] over rows lo..hi (row-major, width p + 1) and whether those rows
/// of x are finite.
///
/// Designs with B-spline and dummy columns are mostly constant per column: a centred basis column
/// equals −mean outside the support of its function, a dummy 0. So each column j gets a baseline c_j
/// (the most frequent value among the block's first rows) and the rows are split as x_i = d_i + c with
/// d_i sparse (exact zeros where x_ij = c_j); then, exactly in algebra,
/// X'WX = Σ w d d' + (Σ w d) c' + c (Σ w d)' + (Σ w) c c' and X'Wy = Σ w y d + (Σ w y) c,
/// which costs (nonzeros of d_i)² per row instead of p². Any baseline gives the same matrix up to
/// rounding; a good one only makes it cheaper. Rows with zero weight are skipped.
fn xtwx_block<R: Rows + ?Sized>(x: &R, y: &[f64], w: &[f64], lo: usize, hi: usize) -> (Vec<f64>, bool) {
    let p = x.p();
    if !x.finite(lo, hi) {
        return (vec![0.0; p * (p + 1)], false);
    }
    let c = x.baseline(lo, hi);
    if let Some((layout, pad)) = blocked_layout(x) {
        return (blocked::normal_block(&layout, &pad, y, w, lo, hi, &c), true);
    }
    let mut acc = NormalAcc::new(p);
    let mut idx = vec![0usize; p];
    let mut val = vec![0.0; p];
    for i in lo..hi {
        let wi = w[i];
        if wi == 0.0 {
            continue;
        }
        let m = x.deviation(i, &c, &mut idx, &mut val);
        acc.add(wi, y[i], &idx[..m], &val[..m]);
    }
    (acc.finish(&c), true)
}

/// One block's running sums for [`xtwx_block`]: Σ w d d' (upper triangle) and Σ w y d in `part`,
/// Σ w d, Σ w and Σ w y for the baseline terms.
struct NormalAcc {
    p: usize,
    part: Vec<f64>,
    sum_wd: Vec<f64>,
    sum_w: f64,
    sum_wy: f64,
}

impl NormalAcc {
    fn new(p: usize) -> Self {
        NormalAcc { p, part: vec![0.0; p * (p + 1)], sum_wd: vec![0.0; p], sum_w: 0.0, sum_wy: 0.0 }
    }

    /// Add row i with weight `wi`, response `yi` and deviation entries (ascending columns).
    #[inline]
    fn add(&mut self, wi: f64, yi: f64, idx: &[usize], val: &[f64]) {
        self.add_general(wi, wi * yi, idx, val);
    }

    /// Add row i with matrix weight `wi` and right-hand-side multiplier `wy`: w d d' to the matrix and
    /// wy·d to the right-hand side (for weighted least squares wy = w·y).
    #[inline]
    fn add_general(&mut self, wi: f64, wy: f64, idx: &[usize], val: &[f64]) {
        let (p, width) = (self.p, self.p + 1);
        self.sum_w += wi;
        self.sum_wy += wy;
        let m = idx.len().min(val.len());
        let (idx, val) = (&idx[..m], &val[..m]);
        for a in 0..m {
            let ja = idx[a];
            let wd = wi * val[a];
            self.sum_wd[ja] += wd;
            let dst = &mut self.part[ja * width..(ja + 1) * width];
            for (&jb, &vb) in idx[a..].iter().zip(&val[a..]) {
                dst[jb] += wd * vb;
            }
            dst[p] += val[a] * wy;
        }
    }

    /// The upper triangle of [X'WX | X'Wy] with the baseline terms added.
    fn finish(mut self, c: &[f64]) -> Vec<f64> {
        let (p, width) = (self.p, self.p + 1);
        for j in 0..p {
            let dst = &mut self.part[j * width..(j + 1) * width];
            for k in j..p {
                dst[k] += self.sum_wd[j] * c[k] + c[j] * self.sum_wd[k] + self.sum_w * c[j] * c[k];
            }
            dst[p] += self.sum_wy * c[j];
        }
        self.part
    }
}

/// The weighted normal equations [X'WX | X'Wy] (upper triangle, p × (p + 1)) of one reweighting pass.
#[derive(Debug, Clone)]
pub struct NormalEquations {
    a: Vec<f64>,
    p: usize,
}

impl NormalEquations {
    /// The upper triangle of [A | b], p × (p + 1) row-major (entries below the diagonal are zero).
    pub fn entries(&self) -> &[f64] {
        &self.a
    }

    /// The Cholesky solution alone: None when the matrix is not safely positive definite.
    pub fn cholesky(mut self) -> Option<Vec<f64>> {
        cholesky_solve(&mut self.a, self.p).filter(|c| c.iter().all(|v| v.is_finite()))
    }

    /// Solve by Cholesky; when a pivot is not safely positive (see [`normal_solve`]) fall back to
    /// [`qr_solve`] on the same rows and weights, which succeeds more accurately or names the aliases.
    pub fn solve<R: Rows + ?Sized>(mut self, x: &R, y: &[f64], w: &[f64]) -> Result<Vec<f64>, LinalgError> {
        match cholesky_solve(&mut self.a, self.p) {
            Some(coef) if coef.iter().all(|c| c.is_finite()) => Ok(coef),
            _ => qr_solve_rows(x, y, Some(w)).map(|ls| ls.coef),
        }
    }
}

/// One IRLS pass in a single sweep over the rows: the residuals r = y − Xb into `r`, the weights
/// w_i = weight(r_i) into `w`, and the normal equations at those weights, each row's deviation read
/// once. Blocks as in [`normal_solve`]; the same answer for any thread count. A non-finite residual,
/// a negative or non-finite weight, or non-finite rows give [`LinalgError::NonFinite`]. With `prior`,
/// row i's weight is weight(r_i)·prior_i (a zero prior leaves the row out; see [`newton_sweep`]).
pub fn reweight<R: Rows + ?Sized>(
    x: &R,
    y: &[f64],
    coef: &[f64],
    weight: &(dyn Fn(f64) -> f64 + Sync),
    prior: Option<&[f64]>,
    r: &mut [f64],
    w: &mut [f64],
) -> Result<NormalEquations, LinalgError> {
    let p = x.p();
    let terms = |i: usize, ri: f64, yi: f64| {
        let wi = weight(ri) * prior.map_or(1.0, |q| q[i]);
        (wi.is_finite() && wi >= 0.0).then_some((wi, wi * yi, 0.0))
    };
    let (eq, _) = sweep(x, y, coef, &terms, r, w)?;
    let positive = w.iter().filter(|v| **v > 0.0).count();
    if positive < p {
        return Err(LinalgError::TooFewRows { rows: positive, columns: p });
    }
    Ok(eq)
}

/// One Newton pass for Σ ρ(r_i) in a single sweep: the residuals r = y − Xb into `r`; `terms(r_i)`
/// gives (d_i, g_i, ρ_i), stored d_i into `d`; returns the system [Σ d_i x_i x_i' | Σ g_i x_i] and
/// Σ ρ_i, each added in block order (the same answer for any thread count). With d = ψ'(r/s) and
/// g = s·ψ(r/s), the solution of the system is the Newton step for the coefficients of the M-estimate
/// with scale s. d may be negative or zero (a row with d = 0 still adds g x_i). A non-finite residual,
/// term or row gives [`LinalgError::NonFinite`].
///
/// `prior` (0 or 1 per row, or any non-negative case weights) multiplies each row's terms: a row with
/// prior 0 adds nothing, so the sweep is that of the rows kept, on the full matrix (its residual is
/// still written). A prior of 1 leaves the terms exactly as they are.
pub fn newton_sweep<R: Rows + ?Sized>(
    x: &R,
    y: &[f64],
    coef: &[f64],
    terms: &(dyn Fn(f64) -> (f64, f64, f64) + Sync),
    prior: Option<&[f64]>,
    r: &mut [f64],
    d: &mut [f64],
) -> Result<(NormalEquations, f64), LinalgError> {
    let terms = |i: usize, ri: f64, _yi: f64| {
        let (mut di, mut gi, mut rho) = terms(ri);
        if let Some(q) = prior {
            (di, gi, rho) = (di * q[i], gi * q[i], rho * q[i]);
        }
        (di.is_finite() && gi.is_finite() && rho.is_finite()).then_some((di, gi, rho))
    };
    sweep(x, y, coef, &terms, r, d)
}

/// The shared sweep of [`reweight`] and [`newton_sweep`]: residuals into `r`; `terms(i, r_i, y_i)` gives
/// the matrix weight d_i (stored into `d`), the right-hand-side multiplier g_i and an objective term,
/// or None for an unusable value; returns [Σ d x x' | Σ g x] and the summed objective.
fn sweep<R: Rows + ?Sized>(
    x: &R,
    y: &[f64],
    coef: &[f64],
    terms: &blocked::Terms<'_>,
    r: &mut [f64],
    d: &mut [f64],
) -> Result<(NormalEquations, f64), LinalgError> {
    let (n, p) = (x.n(), x.p());
    assert!(y.len() == n && r.len() == n && d.len() == n && coef.len() == p, "linalg::sweep: shapes");
    let parts = map_blocks_mut2(r, d, |lo, r, d| {
        let hi = lo + r.len();
        if !x.finite(lo, hi) {
            return None;
        }
        let c = x.baseline(lo, hi);
        if let Some((layout, pad)) = blocked_layout(x) {
            return blocked::sweep_block(&layout, &pad, y, coef, terms, lo, r, d, &c);
        }
        let cb = dot(&c, coef);
        let mut objective = 0.0;
        let mut acc = NormalAcc::new(p);
        let mut idx = vec![0usize; p];
        let mut val = vec![0.0; p];
        for (k, (rk, dk)) in r.iter_mut().zip(d.iter_mut()).enumerate() {
            let i = lo + k;
            let m = x.deviation(i, &c, &mut idx, &mut val);
            let ri = y[i] - sparse_dot(cb, &idx[..m], &val[..m], coef);
            if !ri.is_finite() {
                return None;
            }
            let (di, gi, obj) = terms(i, ri, y[i])?;
            *rk = ri;
            *dk = di;
            objective += obj;
            if di != 0.0 || gi != 0.0 {
                acc.add_general(di, gi, &idx[..m], &val[..m]);
            }
        }
        Some((acc.finish(&c), objective))
    });
    let parts: Vec<(Vec<f64>, f64)> = parts.into_iter().collect::<Option<_>>().ok_or(LinalgError::NonFinite)?;
    let objective = parts.iter().fold(0.0, |a, (_, o)| a + o);
    let total = add_parts(p * (p + 1), parts.into_iter().map(|(part, _)| part));
    Ok((NormalEquations { a: total, p }, objective))
}

/// Per column, the most frequent value among the first rows of the block (ties: the earliest), or 0
/// when no value repeats.
fn block_baseline(x: &[f64], p: usize, lo: usize, hi: usize) -> Vec<f64> {
    const PROBE: usize = 16;
    let rows = (hi - lo).min(PROBE);
    (0..p)
        .map(|j| {
            let vals: Vec<f64> = (lo..lo + rows).map(|i| x[i * p + j]).collect();
            let mut best = (0.0, 1usize);
            for (a, &v) in vals.iter().enumerate() {
                let count = vals[a..].iter().filter(|&&u| u == v).count();
                if count > best.1 {
                    best = (v, count);
                }
            }
            best.0
        })
        .collect()
}

/// In-place Cholesky of the upper triangle of `a` (p × (p+1), last column the right-hand side) and the
/// two triangular solves. None when a pivot is not safely positive.
fn cholesky_solve(a: &mut [f64], p: usize) -> Option<Vec<f64>> {
    if !cholesky_factor(a, p) {
        return None;
    }
    let width = p + 1;
    let rhs: Vec<f64> = (0..p).map(|j| a[j * width + p]).collect();
    Some(cholesky_apply(a, width, p, &rhs))
}

/// Factor the upper triangle of `a` (row stride p + 1) in place as U'U with U upper triangular.
/// False when a pivot is not safely positive (below 1e-12 × its diagonal of A, or not positive).
fn cholesky_factor(a: &mut [f64], p: usize) -> bool {
    let width = p + 1;
    let diag: Vec<f64> = (0..p).map(|j| a[j * width + j]).collect();
    for j in 0..p {
        let mut d = a[j * width + j];
        for k in 0..j {
            d -= a[k * width + j] * a[k * width + j];
        }
        if !(d > 1e-12 * diag[j]) || diag[j] <= 0.0 {
            return false;
        }
        let u = d.sqrt();
        a[j * width + j] = u;
        for c in (j + 1)..p {
            let mut s = a[j * width + c];
            for k in 0..j {
                s -= a[k * width + j] * a[k * width + c];
            }
            a[j * width + c] = s / u;
        }
    }
    true
}

/// Solve U'U b = rhs with the factor U stored in the upper triangle of `u` (row stride `stride`).
fn cholesky_apply(u: &[f64], stride: usize, p: usize, rhs: &[f64]) -> Vec<f64> {
    // U' z = rhs
    let mut z = vec![0.0; p];
    for j in 0..p {
        let mut s = rhs[j];
        for k in 0..j {
            s -= u[k * stride + j] * z[k];
        }
        z[j] = s / u[j * stride + j];
    }
    // U b = z
    let mut b = vec![0.0; p];
    for j in (0..p).rev() {
        let mut s = z[j];
        for k in (j + 1)..p {
            s -= u[j * stride + k] * b[k];
        }
        b[j] = s / u[j * stride + j];
    }
    b
}

/// Largest column-scaled condition number (Frobenius-norm bound) for which [`least_squares_rows`]
/// keeps the normal-equations solution; above it the problem goes to Householder QR.
pub const NORMAL_COND_MAX: f64 = 1e6;

/// Refinement steps of the corrected semi-normal equations, at most.
const REFINE_STEPS: usize = 4;

/// A bound on the coefficient error left after a refinement step of size `step` (largest entry), for
/// [`least_squares_rows`] with condition bound `cond` on `n` rows and `p` columns. Each step
/// multiplies the error by about κ(X'WX)·ε·(rounding growth), κ(X'WX) = cond²; the growth taken is
/// the worst-case one of the sums (recursive summation, error ≤ (terms − 1)·ε: Higham, *Accuracy and
/// Stability of Numerical Algorithms*, 2002, §4.2, from memory) of X'WX, formed over the fixed row
/// blocks, plus p for the Cholesky factor. When the bound is at rounding level, one more pass over
/// the rows gives the residuals and the RSS at the refined coefficients and the correction it would
/// give is not computed: on large samples that correction is the rounding noise of the sums (seen at
/// 1e6 rows: ~1e-14 relative, not shrinking from step to step), and computing it only cost passes.
fn refined_error(step: f64, cond: f64, n: usize, p: usize) -> f64 {
    let growth = n.min(BLOCK_ROWS) + n.div_ceil(BLOCK_ROWS) + p;
    cond * cond * f64::EPSILON * growth as f64 * step
}

/// The least-squares solve of every fit, min Σ w_i (y_i − x_i'b)², choosing its method from the data:
///
/// - X'WX is accumulated from the sparse rows (as [`normal_solve`]) and factored by Cholesky, U'U.
///   When the factor exists and the condition number of the column-scaled design, bounded above by
///   ||U D⁻¹||_F ||D U⁻¹||_F (D the weighted column norms), is at most [`NORMAL_COND_MAX`], the
///   solution is refined by the corrected semi-normal equations: b ← b + (U'U)⁻¹ X'W(y − Xb), up
///   to four times, until the correction, or the error it leaves (see [`refined_error`]), is at
///   rounding level. Each step multiplies the error by about κ²·ε (≤ 1e-4 here), so the result has
///   the accuracy of a QR solve (Björck, *Numerical Methods for Least Squares Problems*, 1996, §2.9
///   and §6.6, from memory) at the cost of two or three sparse passes over the rows instead of a
///   dense p² per row.
/// - Otherwise (ill-conditioned, rank deficient, too few rows, non-finite values) the answer, or the
///   error naming the aliased columns, is that of [`qr_solve_rows`].
///
/// The returned `r` is U (or QR's R): either way R'R = X'WX, which is all that (X'WX)⁻¹ and hat
/// values need. Deterministic: the method chosen depends on the data only.
pub fn least_squares_rows<R: Rows + ?Sized>(x: &R, y: &[f64], w: Option<&[f64]>) -> Result<LeastSquares, LinalgError> {
    let (n, p) = (x.n(), x.p());
    check_inputs(x, y, w)?;
    let width = p + 1;
    let ones;
    let wv = match w {
        Some(w) => w,
        None => {
            ones = vec![1.0; n];
            &ones
        }
    };
    let mut a = normal_equations(x, y, wv)?;
    let norms: Vec<f64> = (0..p).map(|j| a[j * width + j].max(0.0).sqrt()).collect();
    if !cholesky_factor(&mut a, p) {
        return qr_solve_rows(x, y, w);
    }
    let mut u = vec![0.0; p * p];
    for i in 0..p {
        u[i * p + i..(i + 1) * p].copy_from_slice(&a[i * width + i..i * width + p]);
    }
    let uinv = upper_inverse(&u, p);
    let mut fu = 0.0;
    let mut fi = 0.0;
    for i in 0..p {
        for j in i..p {
            fu += (u[i * p + j] / norms[j]).powi(2);
            fi += (norms[i] * uinv[i * p + j]).powi(2);
        }
    }
    let cond = (fu * fi).sqrt();
    if !(cond <= NORMAL_COND_MAX) {
        return qr_solve_rows(x, y, w);
    }
    let rhs: Vec<f64> = (0..p).map(|j| a[j * width + p]).collect();
    let mut coef = cholesky_apply(&u, p, p, &rhs);
    let mut residuals = vec![0.0; n];
    // The residuals and RSS at `coef`, once the error left is at rounding level: the correction just
    // computed is (and so is not applied), or the last one applied leaves less than that.
    let mut settled = None;
    let mut error_left = f64::INFINITY;
    for _ in 0..REFINE_STEPS {
        let (g, rss) = xtw_residual(x, y, wv, &coef, &mut residuals);
        let big = coef.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        let rounding = 4.0 * f64::EPSILON * big;
        if error_left <= rounding {
            settled = Some(rss);
            break;
        }
        let delta = cholesky_apply(&u, p, p, &g);
        let step = delta.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        if !(step > rounding) {
            settled = Some(rss);
            break;
        }
        for (c, d) in coef.iter_mut().zip(&delta) {
            *c += d;
        }
        error_left = refined_error(step, cond, n, p);
    }
    let rss = match settled {
        Some(rss) => rss,
        None => {
            residuals_rows(x, y, &coef, &mut residuals);
            weighted_rss(x, y, w, &coef)
        }
    };
    if !rss.is_finite() || coef.iter().any(|c| !c.is_finite()) {
        return Err(LinalgError::NonFinite);
    }
    Ok(LeastSquares { coef, rss, r: u, p, method: LsMethod::RefinedNormal, residuals: Some(residuals) })
}

/// X'W(y − Xb) and Σ w (y − Xb)² over the fixed blocks in block order, each row's deviation read
/// once; the residuals y − Xb of every row (zero weight included) into `r`. The sum of squares is
/// that of [`weighted_rss`], bit for bit.
fn xtw_residual<R: Rows + ?Sized>(x: &R, y: &[f64], w: &[f64], coef: &[f64], r: &mut [f64]) -> (Vec<f64>, f64) {
    let p = x.p();
    let parts = map_blocks_mut(&mut r[..x.n()], |lo, r| {
        let hi = lo + r.len();
        let c = x.baseline(lo, hi);
        if let Some((layout, pad)) = blocked_layout(x) {
            return blocked::residual_block(&layout, &pad, y, w, coef, lo, r, &c);
        }
        let cb = dot(&c, coef);
        let mut acc = vec![0.0; p];
        let (mut sum, mut rss) = (0.0, 0.0);
        let mut idx = vec![0usize; p];
        let mut val = vec![0.0; p];
        for (i, ri) in (lo..hi).zip(r.iter_mut()) {
            let m = x.deviation(i, &c, &mut idx, &mut val);
            let e = y[i] - sparse_dot(cb, &idx[..m], &val[..m], coef);
            *ri = e;
            if w[i] == 0.0 {
                continue;
            }
            rss += w[i] * e * e;
            let wr = w[i] * e;
            sum += wr;
            for (&j, &v) in idx[..m].iter().zip(&val[..m]) {
                acc[j] += v * wr;
            }
        }
        for (a, cj) in acc.iter_mut().zip(&c) {
            *a += cj * sum;
        }
        (acc, rss)
    });
    let rss = parts.iter().fold(0.0, |a, (_, b)| a + b);
    (add_parts(p, parts.into_iter().map(|(g, _)| g)), rss)
}

/// Residuals y − Xb into `out` (rows in parallel; each value is computed the same way on any thread).
pub fn residuals(x: &[f64], n: usize, p: usize, y: &[f64], coef: &[f64], out: &mut [f64]) {
    residuals_rows(&Dense::new(x, n, p), y, coef, out)
}

/// [`residuals`] on any [`Rows`].
pub fn residuals_rows<R: Rows + ?Sized>(x: &R, y: &[f64], coef: &[f64], out: &mut [f64]) {
    let out = &mut out[..x.n()];
    fill_blocks(out, |lo, part| {
        x.dot_rows(lo, coef, part);
        for (o, yi) in part.iter_mut().zip(&y[lo..]) {
            *o = yi - *o;
        }
    });
}

/// Fitted values Xb (rows in parallel).
pub fn predict_rows<R: Rows + ?Sized>(x: &R, coef: &[f64]) -> Vec<f64> {
    let mut out = vec![0.0; x.n()];
    fill_blocks(&mut out, |lo, part| x.dot_rows(lo, coef, part));
    out
}

/// The quadratic forms x_i' M x_i of every row for a symmetric p × p matrix `m` (row-major): with
/// M = (X'X)⁻¹ these are the hat values. Each row is split as baseline plus deviation (see [`Rows`]),
/// x'Mx = c'Mc + 2 d'(Mc) + d'Md, so a row costs (its non-zeros)² instead of p². Rows run in
/// parallel; each value is computed the same way on any thread.
pub fn quadratic_forms_rows<R: Rows + ?Sized>(x: &R, m: &[f64]) -> Vec<f64> {
    let (n, p) = (x.n(), x.p());
    assert_eq!(m.len(), p * p, "linalg::quadratic_forms_rows: m must be p × p");
    let mut h = vec![0.0; n];
    fill_blocks(&mut h, |lo, part| {
        let c = x.baseline(lo, lo + part.len());
        let mc: Vec<f64> = (0..p).map(|j| dot(&m[j * p..(j + 1) * p], &c)).collect();
        let cmc = dot(&c, &mc);
        let mut idx = vec![0usize; p];
        let mut val = vec![0.0; p];
        for (k, hk) in part.iter_mut().enumerate() {
            let nz = x.deviation(lo + k, &c, &mut idx, &mut val);
            let (idx, val) = (&idx[..nz], &val[..nz]);
            let mut linear = 0.0;
            let mut quad = 0.0;
            for (a, (&ja, &va)) in idx.iter().zip(val).enumerate() {
                linear += va * mc[ja];
                let row = &m[ja * p..(ja + 1) * p];
                // The symmetric sum over pairs: the diagonal once, each off-diagonal pair twice.
                let mut off = 0.0;
                for (&jb, &vb) in idx[a + 1..].iter().zip(&val[a + 1..]) {
                    off += row[jb] * vb;
                }
                quad += va * (row[ja] * va + 2.0 * off);
            }
            *hk = cmc + 2.0 * linear + quad;
        }
    });
    h
}

/// Hat values h_i = x_i'(X'X)^-1 x_i from the R factor of an unweighted QR.
///
/// h_i = ||R^-T x_i||², one forward substitution per row (Belsley, Kuh & Welsch 1980, from memory, for
/// the hat matrix; the R-based evaluation avoids forming (X'X)^-1). A zero diagonal of R (impossible for
/// an R from a successful [`qr_solve`]) contributes nothing rather than NaN. Rows run in parallel.
pub fn hat_values(x: &[f64], n: usize, p: usize, r: &[f64]) -> Vec<f64> {
    hat_values_rows(&Dense::new(x, n, p), r)
}

/// [`hat_values`] on any [`Rows`].
pub fn hat_values_rows<R: Rows + ?Sized>(x: &R, r: &[f64]) -> Vec<f64> {
    let (n, p) = (x.n(), x.p());
    let mut h = vec![0.0; n];
    // Reciprocal-free: the same divisions as a row-by-row loop, R read column-wise from its transpose.
    let mut rt = vec![0.0; p * p];
    for j in 0..p {
        for k in 0..p {
            rt[j * p + k] = r[k * p + j];
        }
    }
    fill_blocks(&mut h, |lo, part| {
        let mut u = vec![0.0; p];
        let mut row = vec![0.0; p];
        for (k, hk) in part.iter_mut().enumerate() {
            x.row_into(lo + k, &mut row);
            let mut s2 = 0.0;
            for j in 0..p {
                let mut s = row[j];
                for (a, b) in rt[j * p..j * p + j].iter().zip(&u[..j]) {
                    s -= a * b;
                }
                let d = r[j * p + j];
                u[j] = if d != 0.0 { s / d } else { 0.0 };
                s2 += u[j] * u[j];
            }
            *hk = s2;
        }
    });
    h
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn exact_small_system() {
        // y = 1 + 2 t on t = 0, 1, 2.
        let x = [1.0, 0.0, 1.0, 1.0, 1.0, 2.0];
        let y = [1.0, 3.0, 5.0];
        let ls = qr_solve(&x, 3, 2, &y, None).unwrap();
        assert!((ls.coef[0] - 1.0).abs() < 1e-14 && (ls.coef[1] - 2.0).abs() < 1e-14);
        assert!(ls.rss < 1e-28);
        let inv = ls.xtx_inverse();
        // X'X = [[3, 3], [3, 5]], inverse = [[5, -3], [-3, 3]] / 6.
        let want = [5.0 / 6.0, -0.5, -0.5, 0.5];
        for (a, b) in inv.iter().zip(want.iter()) {
            assert!((a - b).abs() < 1e-14);
        }
        let nb = normal_solve(&x, 3, 2, &y, &[1.0; 3]).unwrap();
        assert!((nb[0] - 1.0).abs() < 1e-12 && (nb[1] - 2.0).abs() < 1e-12);
    }

    #[test]
    fn zero_column_is_rank_deficient_with_no_aliases() {
        let x = [1.0, 0.0, 1.0, 0.0, 1.0, 0.0];
        let e = qr_solve(&x, 3, 2, &[1.0, 2.0, 3.0], None).unwrap_err();
        assert_eq!(e, LinalgError::RankDeficient { column: 1, aliased_with: vec![] });
    }

    #[test]
    fn too_few_rows_and_non_finite() {
        let x = [1.0, 2.0, 3.0, 4.0];
        assert_eq!(
            qr_solve(&x, 2, 2, &[1.0, 2.0], Some(&[1.0, 0.0])).unwrap_err(),
            LinalgError::TooFewRows { rows: 1, columns: 2 }
        );
        assert_eq!(qr_solve(&x, 2, 2, &[1.0, f64::NAN], None).unwrap_err(), LinalgError::NonFinite);
        assert_eq!(normal_solve(&x, 2, 2, &[1.0, 2.0], &[1.0, -1.0]).unwrap_err(), LinalgError::NonFinite);
    }
}
