//! B-spline bases for the smooth terms (DESIGN.md §4.1): knot placement and Cox–de Boor evaluation.
//!
//! Pure math on slices. Knows nothing of specs, CSV files or reports.

/// Where the interior knots go.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum KnotPlacement {
    /// Sample quantiles l/(K+1), l = 1..K (Hyndman & Fan 1996 type 7).
    Quantile,
    /// Evenly spaced between min and max.
    Uniform,
}

/// Why a basis cannot be built for the data.
#[derive(Debug, Clone, PartialEq)]
pub enum BasisError {
    /// Fewer distinct x values than basis functions.
    TooFewDistinct { distinct: usize, needed: usize },
    /// k < degree + 1.
    SizeBelowOrder { size: usize, degree: usize },
    /// After merging tied quantile knots fewer interior knots remain than the size needs.
    TiedKnots { requested: usize, distinct: usize },
    /// All x equal, or x not finite.
    DegenerateRange,
}

/// A B-spline basis: the full knot vector (boundary knots repeated degree + 1 times) and the degree.
#[derive(Debug, Clone, PartialEq)]
pub struct Basis {
    pub degree: usize,
    pub knots: Vec<f64>,
}

impl Basis {
    /// Build a basis of `size` functions for the sample `x`.
    pub fn for_sample(x: &[f64], degree: usize, size: usize, placement: KnotPlacement) -> Result<Basis, BasisError> {
        let _ = (x, degree, size, placement);
        todo!("basis helper")
    }

    /// Number of basis functions (= knots.len() - degree - 1).
    pub fn size(&self) -> usize {
        self.knots.len() - self.degree - 1
    }

    /// Lower and upper boundary.
    pub fn range(&self) -> (f64, f64) {
        (self.knots[0], self.knots[self.knots.len() - 1])
    }

    /// The degree + 1 possibly non-zero basis values at `x`: returns the index of the first one and
    /// writes them into `out` (length degree + 1). x is clamped into the range; the right end is closed.
    pub fn eval_nonzero(&self, x: f64, out: &mut [f64]) -> usize {
        let _ = (x, out);
        todo!("basis helper")
    }

    /// All `size()` basis values at `x` (dense).
    pub fn eval_dense(&self, x: f64) -> Vec<f64> {
        let mut out = vec![0.0; self.size()];
        let mut nz = vec![0.0; self.degree + 1];
        let first = self.eval_nonzero(x, &mut nz);
        for (j, v) in nz.iter().enumerate() {
            if first + j < out.len() {
                out[first + j] = *v;
            }
        }
        out
    }
}

/// Type-7 sample quantile (Hyndman & Fan 1996) of an ascending sorted slice; `prob` in [0, 1].
pub fn quantile_sorted(sorted: &[f64], prob: f64) -> f64 {
    let _ = (sorted, prob);
    todo!("basis helper")
}
