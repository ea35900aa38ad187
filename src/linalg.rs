//! Dense least-squares engine: streaming Householder QR (the final solve of every fit), weighted normal
//! equations by Cholesky (inner IRLS steps only), hat values and (X'X)^-1.
//!
//! Matrices are row-major `&[f64]` with explicit n rows and p columns. Reductions run over fixed row
//! chunks in a fixed order, so results are bit-identical whatever the thread count.

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
    pub fn xtx_inverse(&self) -> Vec<f64> {
        todo!("linalg helper")
    }
}

/// Least squares min Σ w_i (y_i − x_i'b)² by blocked Householder QR (rows processed in fixed chunks;
/// each chunk is stacked under the running R and re-triangularised). Never forms X'X.
pub fn qr_solve(x: &[f64], n: usize, p: usize, y: &[f64], w: Option<&[f64]>) -> Result<LeastSquares, LinalgError> {
    let _ = (x, n, p, y, w);
    todo!("linalg helper")
}

/// Weighted normal equations X'WX b = X'Wy by Cholesky, for inner IRLS steps where speed matters.
pub fn normal_solve(x: &[f64], n: usize, p: usize, y: &[f64], w: &[f64]) -> Result<Vec<f64>, LinalgError> {
    let _ = (x, n, p, y, w);
    todo!("linalg helper")
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
pub fn hat_values(x: &[f64], n: usize, p: usize, r: &[f64]) -> Vec<f64> {
    let _ = (x, n, p, r);
    todo!("linalg helper")
}
