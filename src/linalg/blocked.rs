//! Kernels for designs with a fixed row layout: a few single entries per row (a numeric column, one
//! dummy of a categorical term) followed by runs of [`RUN_WIDTH`] consecutive columns (the non-zero
//! cubic B-spline values of each smooth term). Such a row's outer product is a handful of dense
//! 4-wide strips instead of ~100 scattered entries, which is what the generic kernels of the parent
//! module spend their time on.
//!
//! Every matrix entry gets exactly the same products, added in the same row order, as in the generic
//! kernels ([`super::NormalAcc`], [`super::sparse_dot`]): the results are bit-identical to theirs, so
//! this is a speed path only. To keep the strips a fixed width, each run's columns are accumulated in
//! a padded column space where the basis functions a design drops (past its kept columns) have room;
//! the padded entries are discarded when the block's sums are mapped back.

use super::{Layout, Single, RUN_WIDTH};

// The unrolled run in `RowView::dot` and the fixed strips assume cubic runs.
const _: () = assert!(RUN_WIDTH == 4);

/// Largest number of single entries and of runs per row the kernels take (more: the generic path).
const MAX_PARTS: usize = 16;

/// One row of a [`Layout`], read out of its columns.
pub(super) struct RowView {
    /// (column, value) of the single entries present in the row, ascending columns.
    singles: [(usize, f64); MAX_PARTS],
    ns: usize,
    /// Per run: design column of its first value, how many of its values fall on kept columns,
    /// padded column of its first value, the values.
    runs: [(usize, usize, usize, [f64; RUN_WIDTH]); MAX_PARTS],
    nr: usize,
}

/// The padded column space of a layout: design column → padded column, and the padded size.
pub(super) struct Padding {
    map: Vec<usize>,
    /// Padded start of each run (its design columns start..start + kept map to pstart..).
    run_start: Vec<usize>,
    padded: usize,
}

impl Padding {
    /// The padding for `layout` on `p` design columns, or None when the layout does not have the
    /// shape the kernels assume (singles before runs, both ascending, at most [`MAX_PARTS`] each).
    pub(super) fn new(layout: &Layout<'_>, p: usize) -> Option<Padding> {
        if layout.singles.len() > MAX_PARTS || layout.runs.len() > MAX_PARTS {
            return None;
        }
        let mut map: Vec<usize> = (0..p).collect();
        let mut run_start = Vec::with_capacity(layout.runs.len());
        let mut shift = 0;
        let mut prev_end = layout.singles_end;
        for run in &layout.runs {
            if run.start < prev_end || run.start + run.kept > p || run.span < run.kept || run.span < RUN_WIDTH {
                return None;
            }
            // Design columns between runs (none in a model design) keep their order, shifted.
            for m in map.iter_mut().take(run.start).skip(prev_end) {
                *m += shift;
            }
            run_start.push(run.start + shift);
            for (j, m) in map.iter_mut().enumerate().skip(run.start).take(run.kept) {
                *m = j + shift;
            }
            shift += run.span - run.kept;
            prev_end = run.start + run.kept;
        }
        for m in map.iter_mut().skip(prev_end) {
            *m += shift;
        }
        Some(Padding { map, run_start, padded: p + shift })
    }
}

impl RowView {
    pub(super) fn new() -> Self {
        RowView { singles: [(0, 0.0); MAX_PARTS], ns: 0, runs: [(0, 0, 0, [0.0; RUN_WIDTH]); MAX_PARTS], nr: 0 }
    }

    /// Read row i of `layout` (padded as `pad`).
    #[inline(always)]
    pub(super) fn read(&mut self, layout: &Layout<'_>, pad: &Padding, i: usize) {
        let mut ns = 0;
        for s in &layout.singles {
            match s {
                Single::Value { col, values } => {
                    self.singles[ns] = (*col, values[i]);
                    ns += 1;
                }
                Single::Indicator { cols } => {
                    let c = cols[i];
                    if c != super::NO_COLUMN {
                        self.singles[ns] = (c as usize, 1.0);
                        ns += 1;
                    }
                }
            }
        }
        self.ns = ns;
        for (t, run) in layout.runs.iter().enumerate() {
            let f = run.first[i] as usize;
            let mut v = [0.0; RUN_WIDTH];
            v.copy_from_slice(&run.values[i * RUN_WIDTH..(i + 1) * RUN_WIDTH]);
            self.runs[t] = (run.start + f, RUN_WIDTH.min(run.kept.saturating_sub(f)), pad.run_start[t] + f, v);
        }
        self.nr = layout.runs.len();
    }

    /// c'b + Σ x_ij b_j over the row's entries in ascending column order (as [`super::sparse_dot`]).
    #[inline(always)]
    pub(super) fn dot(&self, cb: f64, coef: &[f64]) -> f64 {
        let mut s = cb;
        for &(j, v) in &self.singles[..self.ns] {
            s += v * coef[j];
        }
        for &(c0, len, _, v) in &self.runs[..self.nr] {
            // A whole run (most rows) unrolled; the same additions in the same order either way.
            if let (RUN_WIDTH, Some(c)) = (len, coef.get(c0..c0 + RUN_WIDTH)) {
                s += v[0] * c[0];
                s += v[1] * c[1];
                s += v[2] * c[2];
                s += v[3] * c[3];
            } else {
                for (vk, ck) in v[..len].iter().zip(&coef[c0..c0 + len]) {
                    s += vk * ck;
                }
            }
        }
        s
    }
}

/// A block's running sums in the padded column space: the upper triangle of Σ w d d' and Σ w y d
/// (row-major, width padded + 1), Σ w d, Σ w and Σ w y.
pub(super) struct BlockedAcc {
    padded: usize,
    part: Vec<f64>,
    sum_wd: Vec<f64>,
    sum_w: f64,
    sum_wy: f64,
}

impl BlockedAcc {
    pub(super) fn new(pad: &Padding) -> Self {
        let q = pad.padded;
        BlockedAcc { padded: q, part: vec![0.0; q * (q + 1)], sum_wd: vec![0.0; q], sum_w: 0.0, sum_wy: 0.0 }
    }

    /// Add a row with matrix weight `wi` and right-hand-side multiplier `wy` (as
    /// [`super::NormalAcc::add_general`]: entry (a, b), a ≤ b, gets (wi·v_a)·v_b; the right-hand side
    /// v_a·wy).
    #[inline(always)]
    pub(super) fn add(&mut self, wi: f64, wy: f64, row: &RowView) {
        let width = self.padded + 1;
        let q = self.padded;
        self.sum_w += wi;
        self.sum_wy += wy;
        let singles = &row.singles[..row.ns];
        let runs = &row.runs[..row.nr];
        for (a, &(ja, va)) in singles.iter().enumerate() {
            let wd = wi * va;
            self.sum_wd[ja] += wd;
            let dst = &mut self.part[ja * width..(ja + 1) * width];
            for &(jb, vb) in &singles[a..] {
                dst[jb] += wd * vb;
            }
            for &(_, _, pc, v) in runs {
                strip(&mut dst[pc..pc + RUN_WIDTH], wd, &v);
            }
            dst[q] += va * wy;
        }
        for (t, &(_, _, pa, va)) in runs.iter().enumerate() {
            for (a, &vaa) in va.iter().enumerate() {
                let ja = pa + a;
                let wd = wi * vaa;
                self.sum_wd[ja] += wd;
                let dst = &mut self.part[ja * width..(ja + 1) * width];
                // The run's own block is written whole (entries left of the diagonal are never read).
                for &(_, _, pb, vb) in &runs[t..] {
                    strip(&mut dst[pb..pb + RUN_WIDTH], wd, &vb);
                }
                dst[q] += vaa * wy;
            }
        }
    }

    /// The upper triangle of [X'WX | X'Wy] in design columns (p × (p + 1)) with the baseline terms
    /// added exactly as [`super::NormalAcc::finish`] adds them.
    pub(super) fn finish(self, pad: &Padding, c: &[f64]) -> Vec<f64> {
        let p = c.len();
        let (pw, qw) = (p + 1, self.padded + 1);
        let mut out = vec![0.0; p * pw];
        for j in 0..p {
            let mj = pad.map[j];
            let src = &self.part[mj * qw..(mj + 1) * qw];
            let dst = &mut out[j * pw..(j + 1) * pw];
            for k in j..p {
                dst[k] = src[pad.map[k]];
                dst[k] += self.sum_wd[mj] * c[k] + c[j] * self.sum_wd[pad.map[k]] + self.sum_w * c[j] * c[k];
            }
            dst[p] = src[self.padded];
            dst[p] += self.sum_wy * c[j];
        }
        out
    }
}

/// dst[k] += wd · v[k] for a 4-wide strip (fixed length, so the compiler keeps it in vector registers).
#[inline(always)]
fn strip(dst: &mut [f64], wd: f64, v: &[f64; RUN_WIDTH]) {
    if let Ok(dst) = <&mut [f64; RUN_WIDTH]>::try_from(dst) {
        for (d, vk) in dst.iter_mut().zip(v) {
            *d += wd * vk;
        }
    }
}

// The row loops of the parent module's kernels on a layout. Each is compiled twice, for the baseline
// target and with AVX2 (chosen at run time): element-wise IEEE multiplications and additions give the
// same bits in either instruction set and no operation is fused or reordered (Rust never contracts
// a·b + c into an FMA), so the choice changes speed only.

/// `pub(super) fn $name(args) -> ret` running `$plain` (an `#[inline(always)]` function of the same
/// arguments), through a copy compiled with AVX2 when the CPU has it.
macro_rules! simd_kernel {
    ($(#[$doc:meta])* $name:ident => $plain:ident ($($arg:ident: $ty:ty),*) -> $ret:ty) => {
        $(#[$doc])*
        #[allow(clippy::too_many_arguments)]
        pub(super) fn $name($($arg: $ty),*) -> $ret {
            #[cfg(target_arch = "x86_64")]
            if avx2() {
                /// # Safety
                /// Only on a CPU with AVX2 (an `unsafe fn`, which `target_feature` needs before Rust 1.86).
                #[target_feature(enable = "avx2")]
                #[allow(clippy::too_many_arguments)]
                unsafe fn with_avx2($($arg: $ty),*) -> $ret {
                    $plain($($arg),*)
                }
                // SAFETY: the CPU supports AVX2 (checked by `avx2`); the copy differs from `$plain`
                // in instruction selection only.
                return unsafe { with_avx2($($arg),*) };
            }
            $plain($($arg),*)
        }
    };
}

/// Whether the AVX2 copies may run (detected once; `KNOTWISE_SIMD=0` turns them off, for checks).
#[cfg(target_arch = "x86_64")]
fn avx2() -> bool {
    static ON: std::sync::OnceLock<bool> = std::sync::OnceLock::new();
    *ON.get_or_init(|| {
        std::arch::is_x86_feature_detected!("avx2") && std::env::var("KNOTWISE_SIMD").map_or(true, |v| v != "0")
    })
}

simd_kernel! {
    /// Upper triangle of [X'WX | X'Wy] over rows lo..hi with baseline `c` (rows of zero weight skipped).
    normal_block => normal_block_plain(layout: &Layout<'_>, pad: &Padding, y: &[f64], w: &[f64], lo: usize, hi: usize, c: &[f64]) -> Vec<f64>
}

#[inline(always)]
fn normal_block_plain(
    layout: &Layout<'_>,
    pad: &Padding,
    y: &[f64],
    w: &[f64],
    lo: usize,
    hi: usize,
    c: &[f64],
) -> Vec<f64> {
    let mut acc = BlockedAcc::new(pad);
    let mut row = RowView::new();
    for i in lo..hi {
        let wi = w[i];
        if wi == 0.0 {
            continue;
        }
        row.read(layout, pad, i);
        acc.add(wi, wi * y[i], &row);
    }
    acc.finish(pad, c)
}

/// The terms of row i (from its index, residual and response) for [`sweep_block`]: (matrix weight,
/// right-hand-side multiplier, objective), or None for an unusable value.
pub(super) type Terms<'t> = dyn Fn(usize, f64, f64) -> Option<(f64, f64, f64)> + Sync + 't;

simd_kernel! {
    /// One block of the parent's `sweep`: residuals into `r`, matrix weights into `d`, and the block's
    /// [Σ d x x' | Σ g x] with its summed objective; None on an unusable value.
    sweep_block => sweep_block_plain(layout: &Layout<'_>, pad: &Padding, y: &[f64], coef: &[f64], terms: &Terms<'_>, lo: usize, r: &mut [f64], d: &mut [f64], c: &[f64]) -> Option<(Vec<f64>, f64)>
}

#[allow(clippy::too_many_arguments)]
#[inline(always)]
fn sweep_block_plain(
    layout: &Layout<'_>,
    pad: &Padding,
    y: &[f64],
    coef: &[f64],
    terms: &Terms<'_>,
    lo: usize,
    r: &mut [f64],
    d: &mut [f64],
    c: &[f64],
) -> Option<(Vec<f64>, f64)> {
    let cb = super::dot(c, coef);
    let mut objective = 0.0;
    let mut acc = BlockedAcc::new(pad);
    let mut row = RowView::new();
    for (k, (rk, dk)) in r.iter_mut().zip(d.iter_mut()).enumerate() {
        let i = lo + k;
        row.read(layout, pad, i);
        let ri = y[i] - row.dot(cb, coef);
        if !ri.is_finite() {
            return None;
        }
        let (di, gi, obj) = terms(i, ri, y[i])?;
        *rk = ri;
        *dk = di;
        objective += obj;
        if di != 0.0 || gi != 0.0 {
            acc.add(di, gi, &row);
        }
    }
    Some((acc.finish(pad, c), objective))
}

simd_kernel! {
    /// X'W(y − Xb) and Σ w (y − Xb)² over rows lo..lo + r.len() with baseline `c` (rows of zero
    /// weight skipped), the residuals of every row into `r`.
    residual_block => residual_block_plain(layout: &Layout<'_>, pad: &Padding, y: &[f64], w: &[f64], coef: &[f64], lo: usize, r: &mut [f64], c: &[f64]) -> (Vec<f64>, f64)
}

#[allow(clippy::too_many_arguments)]
#[inline(always)]
fn residual_block_plain(
    layout: &Layout<'_>,
    pad: &Padding,
    y: &[f64],
    w: &[f64],
    coef: &[f64],
    lo: usize,
    r: &mut [f64],
    c: &[f64],
) -> (Vec<f64>, f64) {
    let cb = super::dot(c, coef);
    // X'Wr in the padded columns (runs as 4-wide strips; the padding is dropped below).
    let mut padded = vec![0.0; pad.padded + 1];
    let (mut sum, mut rss) = (0.0, 0.0);
    let mut row = RowView::new();
    for (k, rk) in r.iter_mut().enumerate() {
        let i = lo + k;
        row.read(layout, pad, i);
        let e = y[i] - row.dot(cb, coef);
        *rk = e;
        if w[i] == 0.0 {
            continue;
        }
        rss += w[i] * e * e;
        let wr = w[i] * e;
        sum += wr;
        for &(j, v) in &row.singles[..row.ns] {
            padded[j] += v * wr;
        }
        for &(_, _, pc, v) in &row.runs[..row.nr] {
            // wr·v[k]: the same bits as the generic kernel's v[k]·wr (IEEE multiplication commutes).
            strip(&mut padded[pc..pc + RUN_WIDTH], wr, &v);
        }
    }
    let mut acc: Vec<f64> = pad.map.iter().map(|&m| padded[m]).collect();
    for (a, cj) in acc.iter_mut().zip(c) {
        *a += cj * sum;
    }
    (acc, rss)
}

simd_kernel! {
    /// x_i'b for rows lo..lo + out.len() with baseline `c`.
    dot_block => dot_block_plain(layout: &Layout<'_>, pad: &Padding, coef: &[f64], lo: usize, out: &mut [f64], c: &[f64]) -> ()
}

#[inline(always)]
fn dot_block_plain(layout: &Layout<'_>, pad: &Padding, coef: &[f64], lo: usize, out: &mut [f64], c: &[f64]) {
    let cb = super::dot(c, coef);
    let mut row = RowView::new();
    for (k, o) in out.iter_mut().enumerate() {
        row.read(layout, pad, lo + k);
        *o = row.dot(cb, coef);
    }
}
