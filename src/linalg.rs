//! Dense least-squares engine: streaming Householder QR (the final solve of every fit), weighted normal
//! equations by Cholesky (inner IRLS steps only), hat values and (X'X)^-1.
//!
//! Matrices are row-major `&[f64]` with explicit n rows and p columns. Reductions run over fixed row
//! chunks in a fixed order, so results are bit-identical whatever the thread count.
//!
//! This module owns only dense linear algebra; it knows nothing of losses, scales or the study spec.
//! The Householder updating scheme (stacking new rows under a triangular factor and re-triangularising)
//! is the classical one of Golub & Van Loan, *Matrix Computations* (3rd ed. 1996, §5.2 and §12.5,
//! from memory); nothing here forms X'X except [`normal_solve`], which is documented as the fast path.

// `!(a > b)` is used on purpose: it is true when a is NaN, so an unusable value takes the safe branch.
#![allow(clippy::neg_cmp_op_on_partial_ord)]

/// Rows processed per block by the streaming QR and by the normal-equation accumulation. Fixed so that
/// the order of every floating-point operation is independent of n's factorisation and of threads.
pub const CHUNK_ROWS: usize = 256;

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

/// Result of a least-squares solve by QR.
#[derive(Debug, Clone)]
pub struct LeastSquares {
    pub coef: Vec<f64>,
    /// Residual sum of squares (weighted when weights were given).
    pub rss: f64,
    /// Upper-triangular R (p × p, row-major) of the (weighted) design.
    pub r: Vec<f64>,
    pub p: usize,
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

fn check_inputs(x: &[f64], n: usize, p: usize, y: &[f64], w: Option<&[f64]>) -> Result<usize, LinalgError> {
    assert_eq!(x.len(), n * p, "linalg: x has {} entries, expected n·p = {}", x.len(), n * p);
    assert_eq!(y.len(), n, "linalg: y has {} entries, expected n = {n}", y.len());
    if let Some(w) = w {
        assert_eq!(w.len(), n, "linalg: w has {} entries, expected n = {n}", w.len());
    }
    if x.iter().chain(y.iter()).any(|v| !v.is_finite()) {
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
    qr_solve_chunked(x, n, p, y, w, CHUNK_ROWS)
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
    check_inputs(x, n, p, y, w)?;
    let chunk = chunk.max(1);
    let width = p + 1; // augmented with y
                       // Work array: rows 0..p hold [R | Q'y head]; rows p..p+chunk hold the incoming block.
    let mut a = vec![0.0; (p + chunk) * width];
    let mut colnorm2 = vec![0.0; p];

    let mut i = 0;
    while i < n {
        // Fill the block with the next `chunk` positively weighted rows, scaled by sqrt(w).
        let mut m = 0;
        while i < n && m < chunk {
            let wi = w.map_or(1.0, |w| w[i]);
            if wi > 0.0 {
                let sw = wi.sqrt();
                let dst = &mut a[(p + m) * width..(p + m + 1) * width];
                for j in 0..p {
                    let v = sw * x[i * p + j];
                    dst[j] = v;
                    colnorm2[j] += v * v;
                }
                dst[p] = sw * y[i];
                m += 1;
            }
            i += 1;
        }
        if m > 0 {
            triangularise_block(&mut a, p, m);
        }
    }

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

    let rss = weighted_rss(x, n, p, y, w, &coef);
    if !rss.is_finite() || coef.iter().any(|c| !c.is_finite()) {
        return Err(LinalgError::NonFinite);
    }
    Ok(LeastSquares { coef, rss, r, p })
}

/// Re-triangularise [R; B] where R (rows 0..p of `a`) is upper triangular and B (rows p..p+m) is dense,
/// by one Householder reflection per column acting on row j of R and the m block rows only (the rows
/// j+1..p of R are zero in column j). The y column rides along.
fn triangularise_block(a: &mut [f64], p: usize, m: usize) {
    let width = p + 1;
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
        for k in (j + 1)..width {
            let mut s = v0 * a[j * width + k];
            for b in 0..m {
                s += a[(p + b) * width + j] * a[(p + b) * width + k];
            }
            let f = 2.0 * s / vtv;
            a[j * width + k] -= f * v0;
            for b in 0..m {
                let vb = a[(p + b) * width + j];
                a[(p + b) * width + k] -= f * vb;
            }
        }
        a[j * width + j] = alpha;
        for b in 0..m {
            a[(p + b) * width + j] = 0.0;
        }
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

/// Σ w_i (y_i − x_i'b)², summed in row order.
fn weighted_rss(x: &[f64], n: usize, p: usize, y: &[f64], w: Option<&[f64]>, coef: &[f64]) -> f64 {
    let mut rss = 0.0;
    for i in 0..n {
        let wi = w.map_or(1.0, |w| w[i]);
        if wi == 0.0 {
            continue;
        }
        let row = &x[i * p..(i + 1) * p];
        let mut fit = 0.0;
        for j in 0..p {
            fit += row[j] * coef[j];
        }
        let e = y[i] - fit;
        rss += wi * e * e;
    }
    rss
}

/// Weighted normal equations X'WX b = X'Wy by Cholesky, for inner IRLS steps where speed matters.
///
/// X'WX and X'Wy are accumulated over fixed chunks of [`CHUNK_ROWS`] rows, each chunk's partial sums
/// added to the total in chunk order. When the Cholesky factorisation meets a pivot below
/// 1e-12 × (the corresponding diagonal of X'WX) — numerically rank deficient in the squared problem —
/// the solve falls back to [`qr_solve`], which either succeeds with more accuracy or names the aliased
/// columns.
pub fn normal_solve(x: &[f64], n: usize, p: usize, y: &[f64], w: &[f64]) -> Result<Vec<f64>, LinalgError> {
    check_inputs(x, n, p, y, Some(w))?;
    let width = p + 1;
    // Upper triangle of [X'WX | X'Wy], row-major width p+1.
    let mut total = vec![0.0; p * width];
    let mut part = vec![0.0; p * width];
    let mut start = 0;
    while start < n {
        let end = (start + CHUNK_ROWS).min(n);
        part.iter_mut().for_each(|v| *v = 0.0);
        for i in start..end {
            let wi = w[i];
            if wi == 0.0 {
                continue;
            }
            let row = &x[i * p..(i + 1) * p];
            let wy = wi * y[i];
            for j in 0..p {
                let wxj = wi * row[j];
                if wxj == 0.0 {
                    continue;
                }
                let dst = &mut part[j * width..(j + 1) * width];
                for k in j..p {
                    dst[k] += wxj * row[k];
                }
                dst[p] += row[j] * wy;
            }
        }
        for (t, v) in total.iter_mut().zip(part.iter()) {
            *t += *v;
        }
        start = end;
    }

    match cholesky_solve(&mut total, p) {
        Some(coef) if coef.iter().all(|c| c.is_finite()) => Ok(coef),
        _ => qr_solve(x, n, p, y, Some(w)).map(|ls| ls.coef),
    }
}

/// In-place Cholesky of the upper triangle of `a` (p × (p+1), last column the right-hand side) and the
/// two triangular solves. None when a pivot is not safely positive.
fn cholesky_solve(a: &mut [f64], p: usize) -> Option<Vec<f64>> {
    let width = p + 1;
    let diag: Vec<f64> = (0..p).map(|j| a[j * width + j]).collect();
    // Upper factor U with U'U = A, stored over A's upper triangle.
    for j in 0..p {
        let mut d = a[j * width + j];
        for k in 0..j {
            d -= a[k * width + j] * a[k * width + j];
        }
        if !(d > 1e-12 * diag[j]) || diag[j] <= 0.0 {
            return None;
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
    // U' z = b
    let mut z = vec![0.0; p];
    for j in 0..p {
        let mut s = a[j * width + p];
        for k in 0..j {
            s -= a[k * width + j] * z[k];
        }
        z[j] = s / a[j * width + j];
    }
    // U b = z
    let mut b = vec![0.0; p];
    for j in (0..p).rev() {
        let mut s = z[j];
        for k in (j + 1)..p {
            s -= a[j * width + k] * b[k];
        }
        b[j] = s / a[j * width + j];
    }
    Some(b)
}

/// Residuals y − Xb into `out`.
pub fn residuals(x: &[f64], n: usize, p: usize, y: &[f64], coef: &[f64], out: &mut [f64]) {
    for i in 0..n {
        let row = &x[i * p..(i + 1) * p];
        let mut s = 0.0;
        for j in 0..p {
            s += row[j] * coef[j];
        }
        out[i] = y[i] - s;
    }
}

/// Hat values h_i = x_i'(X'X)^-1 x_i from the R factor of an unweighted QR.
///
/// h_i = ||R^-T x_i||², one forward substitution per row (Belsley, Kuh & Welsch 1980, from memory, for
/// the hat matrix; the R-based evaluation avoids forming (X'X)^-1). A zero diagonal of R (impossible for
/// an R from a successful [`qr_solve`]) contributes nothing rather than NaN.
pub fn hat_values(x: &[f64], n: usize, p: usize, r: &[f64]) -> Vec<f64> {
    let mut h = vec![0.0; n];
    let mut u = vec![0.0; p];
    for i in 0..n {
        let row = &x[i * p..(i + 1) * p];
        let mut s2 = 0.0;
        for j in 0..p {
            let mut s = row[j];
            for k in 0..j {
                s -= r[k * p + j] * u[k];
            }
            let d = r[j * p + j];
            u[j] = if d != 0.0 { s / d } else { 0.0 };
            s2 += u[j] * u[j];
        }
        h[i] = s2;
    }
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
