//! B-spline bases for the smooth terms (DESIGN.md §4.1): knot placement and Cox–de Boor evaluation.
//!
//! Pure math on slices. Knows nothing of specs, CSV files or reports.
//!
//! Conventions (de Boor 1978, *A Practical Guide to Splines*, ch. IX–X):
//! - a basis of degree p (order p + 1) with K interior knots has k = K + p + 1 functions;
//! - the knot vector is t_0 = … = t_p = min(x) < t_{p+1} ≤ … ≤ t_{p+K} < t_{p+K+1} = … = t_{2p+K+1} = max(x)
//!   (boundary knots repeated p + 1 times);
//! - B_j is supported on [t_j, t_{j+p+1}); the base interval is closed on the right, so at x = max(x)
//!   the last function equals 1 (the left-continuous limit there).

use std::fmt;

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
    ///
    /// Raised when two interior knots coincide, or an interior knot coincides with a boundary
    /// (which happens for discrete x). `requested` is K = size − degree − 1, `distinct` the number of
    /// distinct interior knot values strictly inside (min, max). The size is refused rather than
    /// silently changed, so a selection grid can skip it with this reason (DESIGN.md §4.1).
    TiedKnots { requested: usize, distinct: usize },
    /// All x equal, or x not finite (or no x at all).
    DegenerateRange,
}

impl fmt::Display for BasisError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            BasisError::TooFewDistinct { distinct, needed } => write!(
                f,
                "the variable has {distinct} distinct values, fewer than the {needed} basis functions asked for"
            ),
            BasisError::SizeBelowOrder { size, degree } => {
                write!(f, "a basis of degree {degree} needs at least {} functions, {size} were asked for", degree + 1)
            }
            BasisError::TiedKnots { requested, distinct } => write!(
                f,
                "{requested} interior knots were needed but the sample quantiles give only {distinct} distinct \
                 values strictly inside the range (tied values)"
            ),
            BasisError::DegenerateRange => {
                write!(f, "the variable has no finite range (all values equal, missing or not finite)")
            }
        }
    }
}

impl std::error::Error for BasisError {}

/// A B-spline basis: the full knot vector (boundary knots repeated degree + 1 times) and the degree.
#[derive(Debug, Clone, PartialEq)]
pub struct Basis {
    pub degree: usize,
    pub knots: Vec<f64>,
}

impl Basis {
    /// Build a basis of `size` functions for the sample `x`.
    ///
    /// K = size − degree − 1 interior knots (de Boor 1978: k = K + degree + 1). Checks, in this order:
    /// `size < degree + 1` → [`BasisError::SizeBelowOrder`]; empty, non-finite or constant `x` →
    /// [`BasisError::DegenerateRange`]; fewer distinct values than `size` → [`BasisError::TooFewDistinct`];
    /// interior knots that coincide with each other or with a boundary → [`BasisError::TiedKnots`].
    /// Degree 0 (piecewise constant) is allowed.
    pub fn for_sample(x: &[f64], degree: usize, size: usize, placement: KnotPlacement) -> Result<Basis, BasisError> {
        if size < degree + 1 {
            return Err(BasisError::SizeBelowOrder { size, degree });
        }
        if x.is_empty() || x.iter().any(|v| !v.is_finite()) {
            return Err(BasisError::DegenerateRange);
        }
        let mut sorted = x.to_vec();
        sorted.sort_by(f64::total_cmp);
        Basis::for_sorted(&sorted, degree, size, placement)
    }

    /// [`Basis::for_sample`] from the sample already sorted ascending (by `f64::total_cmp`), so that
    /// many bases on the same sample share one sort.
    pub fn for_sorted(
        sorted: &[f64],
        degree: usize,
        size: usize,
        placement: KnotPlacement,
    ) -> Result<Basis, BasisError> {
        if size < degree + 1 {
            return Err(BasisError::SizeBelowOrder { size, degree });
        }
        if sorted.is_empty() || sorted.iter().any(|v| !v.is_finite()) {
            return Err(BasisError::DegenerateRange);
        }
        let (lo, hi) = (sorted[0], sorted[sorted.len() - 1]);
        // `hi - lo` must itself be finite for uniform knots (e.g. x spanning ±1e308).
        if lo >= hi || !(hi - lo).is_finite() {
            return Err(BasisError::DegenerateRange);
        }
        let distinct = 1 + sorted.windows(2).filter(|w| w[0] != w[1]).count();
        if distinct < size {
            return Err(BasisError::TooFewDistinct { distinct, needed: size });
        }

        let n_interior = size - degree - 1;
        let denom = (n_interior + 1) as f64;
        let interior: Vec<f64> = (1..=n_interior)
            .map(|l| match placement {
                KnotPlacement::Quantile => quantile_sorted(sorted, l as f64 / denom),
                KnotPlacement::Uniform => lo + (hi - lo) * (l as f64 / denom),
            })
            .collect();

        // Ties: every interior knot must lie strictly inside (lo, hi) and strictly increase.
        let strictly_inside = interior.iter().all(|&t| lo < t && t < hi);
        let increasing = interior.windows(2).all(|w| w[0] < w[1]);
        if !(strictly_inside && increasing) {
            let mut inside: Vec<f64> = interior.iter().copied().filter(|&t| lo < t && t < hi).collect();
            inside.dedup();
            return Err(BasisError::TiedKnots { requested: n_interior, distinct: inside.len() });
        }

        let mut knots = Vec::with_capacity(size + degree + 1);
        knots.extend(std::iter::repeat_n(lo, degree + 1));
        knots.extend_from_slice(&interior);
        knots.extend(std::iter::repeat_n(hi, degree + 1));
        Ok(Basis { degree, knots })
    }

    /// Number of basis functions (= knots.len() - degree - 1).
    pub fn size(&self) -> usize {
        self.knots.len() - self.degree - 1
    }

    /// Lower and upper boundary.
    pub fn range(&self) -> (f64, f64) {
        (self.knots[0], self.knots[self.knots.len() - 1])
    }

    /// The interior knots t_{p+1} … t_{p+K} (empty when size = degree + 1).
    pub fn interior_knots(&self) -> &[f64] {
        &self.knots[self.degree + 1..self.knots.len() - self.degree - 1]
    }

    /// The degree + 1 possibly non-zero basis values at `x`: returns the index of the first one and
    /// writes them into `out` (length degree + 1). x is clamped into the range; the right end is closed.
    ///
    /// The knot span μ with t_μ ≤ x < t_{μ+1} (μ = k − 1 at the right end) is found by binary search;
    /// the values B_{μ−p}(x) … B_μ(x) come from the triangular Cox–de Boor recursion in the form of
    /// de Boor's BSPLVB (de Boor 1978, ch. X, "The subroutine BSPLVB"):
    /// B_{i,r}(x) = (x − t_i)/(t_{i+r} − t_i) · B_{i,r−1}(x) + (t_{i+r+1} − x)/(t_{i+r+1} − t_{i+1}) · B_{i+1,r−1}(x),
    /// which only forms convex combinations of non-negative numbers and so is numerically stable.
    /// No allocation. A NaN `x` gives NaN values (the data layer rejects non-finite input first).
    ///
    /// # Panics
    /// If `out.len() < degree + 1` (a programming error, not reachable from user input).
    pub fn eval_nonzero(&self, x: f64, out: &mut [f64]) -> usize {
        let p = self.degree;
        let k = self.size();
        let t = &self.knots;
        let out = &mut out[..p + 1];
        if x.is_nan() {
            out.fill(f64::NAN);
            return 0;
        }
        let (lo, hi) = (t[p], t[k]);
        // `max`/`min` rather than `clamp`: never panics, even on a hand-built knot vector.
        let x = x.max(lo).min(hi);
        // Interior knots t[p+1..k]; the number of them ≤ x gives the span, and x = hi lands in the last
        // non-empty span [t_{k−1}, t_k] (closed right end).
        let interior = &t[p + 1..k];
        let mu = p + if interior.len() <= 32 {
            // A branch-free count for the usual few knots (the same number: the knots are sorted).
            interior.iter().map(|&knot| usize::from(knot <= x)).sum::<usize>()
        } else {
            interior.partition_point(|&knot| knot <= x)
        };

        out[0] = 1.0;
        for j in 1..=p {
            // left(i) = x − t_{μ+1−i}, right(i) = t_{μ+i} − x (de Boor's BSPLVB arrays, computed on the fly).
            let mut saved = 0.0;
            for r in 0..j {
                let right = t[mu + r + 1] - x;
                let left = x - t[mu + 1 + r - j];
                let temp = out[r] / (right + left);
                out[r] = saved + right * temp;
                saved = left * temp;
            }
            out[j] = saved;
        }
        mu - p
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

    /// Sample mean of each of the `size()` basis columns over `x`, summed over rows in order (fixed
    /// reduction order, DESIGN.md §4.6). Empty `x` gives zeros.
    pub fn column_means(&self, x: &[f64]) -> Vec<f64> {
        let mut sums = vec![0.0; self.size()];
        let mut nz = vec![0.0; self.degree + 1];
        for &xi in x {
            let first = self.eval_nonzero(xi, &mut nz);
            for (s, v) in sums[first..].iter_mut().zip(&nz) {
                *s += *v;
            }
        }
        if !x.is_empty() {
            let n = x.len() as f64;
            sums.iter_mut().for_each(|s| *s /= n);
        }
        sums
    }
}

/// A basis centred by its sample column means with one column dropped: the k − 1 columns a smooth term
/// contributes to the design (DESIGN.md §4.1).
///
/// Centring makes Σ_i g(x_i) = 0 on the sample, the identifiability constraint of DESIGN.md §4, so the
/// term does not compete with the intercept. Because the B-splines sum to one (partition of unity,
/// de Boor 1978), the k centred columns sum to zero and are linearly dependent: one must go. The LAST
/// column is dropped, a fixed convention: the fitted curve does not depend on which column is dropped
/// (the k − 1 remaining centred columns span the same space whichever one goes), and dropping the last
/// keeps coefficient j paired with B_j for j = 0..k−2 with no index shift.
#[derive(Debug, Clone, PartialEq)]
pub struct CentredBasis {
    pub basis: Basis,
    /// Sample mean of each of the k basis columns.
    pub means: Vec<f64>,
    /// Index of the dropped column (always k − 1).
    pub dropped: usize,
}

impl CentredBasis {
    /// Centre `basis` on the sample `x`. Empty or non-finite `x` → [`BasisError::DegenerateRange`].
    pub fn new(basis: Basis, x: &[f64]) -> Result<CentredBasis, BasisError> {
        if x.is_empty() || x.iter().any(|v| !v.is_finite()) {
            return Err(BasisError::DegenerateRange);
        }
        let means = basis.column_means(x);
        let dropped = basis.size() - 1;
        Ok(CentredBasis { basis, means, dropped })
    }

    /// Number of design columns, k − 1.
    pub fn width(&self) -> usize {
        self.basis.size() - 1
    }

    /// Write the k − 1 centred columns B_j(x) − mean_j (j ≠ dropped) into `out[..k − 1]`.
    ///
    /// # Panics
    /// If `out.len() < k − 1` (a programming error). Allocates a small buffer only for degree > 7.
    pub fn eval_centred(&self, x: f64, out: &mut [f64]) {
        let p = self.basis.degree;
        let width = self.width();
        let out = &mut out[..width];
        for (o, m) in out.iter_mut().zip(&self.means) {
            *o = -*m;
        }
        let mut stack = [0.0; 8];
        let mut heap = Vec::new();
        let nz: &mut [f64] = if p < stack.len() {
            &mut stack[..p + 1]
        } else {
            heap.resize(p + 1, 0.0);
            &mut heap
        };
        let first = self.basis.eval_nonzero(x, nz);
        for (j, v) in nz.iter().enumerate() {
            let col = first + j;
            if col < width {
                out[col] += *v;
            }
        }
    }
}

/// Type-7 sample quantile (Hyndman & Fan 1996) of an ascending sorted slice; `prob` in [0, 1].
///
/// Q(p) = x_(⌊h⌋) + (h − ⌊h⌋)(x_(⌊h⌋+1) − x_(⌊h⌋)) with h = (n − 1)p (0-based order statistics), the
/// default of numpy.quantile ("linear"). The interpolation is written like numpy's, from the upper
/// point when the fraction is ≥ ½, so the two agree to the last bit in the usual case. `prob` outside
/// [0, 1] is clamped. Returns NaN only for an empty slice or a NaN `prob` (no quantile exists).
pub fn quantile_sorted(sorted: &[f64], prob: f64) -> f64 {
    if sorted.is_empty() || prob.is_nan() {
        return f64::NAN;
    }
    let n = sorted.len();
    let h = (n - 1) as f64 * prob.clamp(0.0, 1.0);
    let below = h.floor();
    let i = below as usize; // h ∈ [0, n − 1], so the cast is exact and in range
    if i + 1 >= n {
        return sorted[n - 1];
    }
    let g = h - below;
    let (a, b) = (sorted[i], sorted[i + 1]);
    let diff = b - a;
    if g >= 0.5 {
        b - diff * (1.0 - g)
    } else {
        a + diff * g
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn cubic_example() -> Basis {
        // Boundary 0 and 1, interior 0.25, 0.5, 0.75: k = 3 + 3 + 1 = 7.
        let x: Vec<f64> = (0..=100).map(|i| f64::from(i) / 100.0).collect();
        let b = Basis::for_sample(&x, 3, 7, KnotPlacement::Uniform).expect("valid sample");
        assert_eq!(b.interior_knots(), &[0.25, 0.5, 0.75]);
        b
    }

    fn sample(n: usize) -> Vec<f64> {
        // A deterministic, irregular sample on about [-3, 5].
        (0..n).map(|i| 4.0 * libm::sin(i as f64 * 0.7) + 0.01 * i as f64).collect()
    }

    #[test]
    fn size_is_interior_knots_plus_order() {
        let x = sample(200);
        for degree in 0..=4 {
            for size in degree + 1..degree + 9 {
                let b = Basis::for_sample(&x, degree, size, KnotPlacement::Quantile).expect("valid");
                assert_eq!(b.size(), size);
                assert_eq!(b.interior_knots().len() + degree + 1, size);
                assert_eq!(b.knots.len(), size + degree + 1);
            }
        }
    }

    #[test]
    fn partition_of_unity_non_negative_local_support() {
        let x = sample(300);
        for degree in 0..=5 {
            for placement in [KnotPlacement::Quantile, KnotPlacement::Uniform] {
                let b = Basis::for_sample(&x, degree, degree + 8, placement).expect("valid");
                let (lo, hi) = b.range();
                let mut nz = vec![0.0; degree + 1];
                for i in 0..=1000 {
                    let xi = lo + (hi - lo) * f64::from(i) / 1000.0;
                    let first = b.eval_nonzero(xi, &mut nz);
                    assert!(first + degree < b.size());
                    let sum: f64 = nz.iter().sum();
                    assert!((sum - 1.0).abs() <= 1e-12, "degree {degree}: sum {sum} at {xi}");
                    assert!(nz.iter().all(|&v| v >= 0.0), "negative value at {xi}");
                    let dense = b.eval_dense(xi);
                    assert!(dense.iter().filter(|&&v| v != 0.0).count() <= degree + 1);
                    let dense_sum: f64 = dense.iter().sum();
                    assert!((dense_sum - 1.0).abs() <= 1e-12);
                }
            }
        }
    }

    #[test]
    fn cubic_example_at_one_half() {
        // de Boor 1978: the uniform cubic B-spline takes 1/6, 2/3, 1/6 at a knot.
        let b = cubic_example();
        let v = b.eval_dense(0.5);
        let expected = [0.0, 0.0, 1.0 / 6.0, 2.0 / 3.0, 1.0 / 6.0, 0.0, 0.0];
        for (got, want) in v.iter().zip(expected) {
            assert!((got - want).abs() <= 1e-15, "{v:?}");
        }
    }

    #[test]
    fn closed_right_end_and_clamping() {
        let b = cubic_example();
        let right = b.eval_dense(1.0);
        assert_eq!(right, vec![0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 1.0]);
        let left = b.eval_dense(0.0);
        assert_eq!(left, vec![1.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0]);
        assert_eq!(b.eval_dense(7.0), right);
        assert_eq!(b.eval_dense(f64::INFINITY), right);
        assert_eq!(b.eval_dense(-3.0), left);
        let mut nz = [0.0; 4];
        assert!(b.eval_nonzero(f64::NAN, &mut nz) == 0 && nz.iter().all(|v| v.is_nan()));
    }

    #[test]
    fn uniform_knots_are_evenly_spaced() {
        let x = [-2.0, 3.0, 0.0, 1.0, 2.5, -1.0, 0.5];
        let b = Basis::for_sample(&x, 2, 7, KnotPlacement::Uniform).expect("valid");
        assert_eq!(b.knots, vec![-2.0, -2.0, -2.0, -1.0, 0.0, 1.0, 2.0, 3.0, 3.0, 3.0]);
    }

    #[test]
    fn quantile_knots_are_type_7() {
        // 1..=9: quantiles at 1/4, 1/2, 3/4 are 3, 5, 7; at 1/3 it is 1 + 8/3.
        let x: Vec<f64> = (1..=9).rev().map(f64::from).collect();
        let b = Basis::for_sample(&x, 3, 7, KnotPlacement::Quantile).expect("valid");
        assert_eq!(b.interior_knots(), &[3.0, 5.0, 7.0]);
        let sorted: Vec<f64> = (1..=9).map(f64::from).collect();
        assert_eq!(quantile_sorted(&sorted, 0.0), 1.0);
        assert_eq!(quantile_sorted(&sorted, 1.0), 9.0);
        assert!((quantile_sorted(&sorted, 1.0 / 3.0) - (1.0 + 8.0 / 3.0)).abs() < 1e-15);
        assert_eq!(quantile_sorted(&sorted, 1.5), 9.0);
        assert_eq!(quantile_sorted(&[4.0], 0.3), 4.0);
        assert!(quantile_sorted(&[], 0.3).is_nan());
    }

    #[test]
    fn error_cases() {
        let x = sample(50);
        assert_eq!(
            Basis::for_sample(&x, 3, 3, KnotPlacement::Quantile),
            Err(BasisError::SizeBelowOrder { size: 3, degree: 3 })
        );
        assert_eq!(Basis::for_sample(&[], 3, 6, KnotPlacement::Quantile), Err(BasisError::DegenerateRange));
        assert_eq!(Basis::for_sample(&[2.0; 10], 3, 6, KnotPlacement::Quantile), Err(BasisError::DegenerateRange));
        assert_eq!(
            Basis::for_sample(&[1.0, f64::NAN, 3.0], 1, 2, KnotPlacement::Uniform),
            Err(BasisError::DegenerateRange)
        );
        assert_eq!(
            Basis::for_sample(&[1.0, f64::INFINITY, 3.0], 1, 2, KnotPlacement::Uniform),
            Err(BasisError::DegenerateRange)
        );
        assert_eq!(
            Basis::for_sample(&[-f64::MAX, f64::MAX], 1, 2, KnotPlacement::Uniform),
            Err(BasisError::DegenerateRange)
        );
        assert_eq!(
            Basis::for_sample(&[1.0, 2.0, 3.0, 2.0, 1.0], 3, 6, KnotPlacement::Uniform),
            Err(BasisError::TooFewDistinct { distinct: 3, needed: 6 })
        );
        // Messages name the numbers.
        let msg = BasisError::TooFewDistinct { distinct: 3, needed: 6 }.to_string();
        assert!(msg.contains('3') && msg.contains('6'), "{msg}");
    }

    #[test]
    fn tied_quantile_knots_are_refused() {
        // Discrete x: 0 ×10, 1 ×10, 2 ×10, 3 ×10, 4 ×10 (five distinct values).
        let x: Vec<f64> = (0..50).map(|i| f64::from(i / 10)).collect();
        // K = 1: median 2 is strictly inside (0, 4): fine.
        let b = Basis::for_sample(&x, 3, 5, KnotPlacement::Quantile).expect("one knot");
        assert_eq!(b.interior_knots(), &[2.0]);
        // Linear, K = 3: quantiles 1/4, 1/2, 3/4 are 1, 2, 3: distinct and inside.
        let b = Basis::for_sample(&x, 1, 5, KnotPlacement::Quantile).expect("three knots");
        assert_eq!(b.interior_knots(), &[1.0, 2.0, 3.0]);
        // A heavier tie: 0 ×30 then 1..=10.
        let heavy: Vec<f64> = (0..40).map(|i| if i < 30 { 0.0 } else { f64::from(i - 29) }).collect();
        // K = 4 quantiles at 0.2, 0.4, 0.6, 0.8 (h = 39p = 7.8, 15.6, 23.4, 31.2) are 0, 0, 0, 2.2: three
        // sit on the lower boundary, one distinct knot is left inside.
        let err = Basis::for_sample(&heavy, 3, 8, KnotPlacement::Quantile).unwrap_err();
        assert_eq!(err, BasisError::TiedKnots { requested: 4, distinct: 1 });
        // Deterministic: the same input gives the same error.
        assert_eq!(Basis::for_sample(&heavy, 3, 8, KnotPlacement::Quantile).unwrap_err(), err);
        // Uniform placement on the same data is fine.
        assert!(Basis::for_sample(&heavy, 3, 8, KnotPlacement::Uniform).is_ok());
        // Two coinciding interior knots, neither at a boundary.
        let mid: Vec<f64> = (0..21).map(|i| if (3..18).contains(&i) { 5.0 } else { f64::from(i) }).collect();
        let err = Basis::for_sample(&mid, 1, 5, KnotPlacement::Quantile).unwrap_err();
        assert_eq!(err, BasisError::TiedKnots { requested: 3, distinct: 1 });
    }

    #[test]
    fn centred_columns_have_mean_zero() {
        let x = sample(257);
        let b = Basis::for_sample(&x, 3, 9, KnotPlacement::Quantile).expect("valid");
        let c = CentredBasis::new(b.clone(), &x).expect("valid");
        assert_eq!(c.dropped, 8);
        assert_eq!(c.width(), 8);
        let means_sum: f64 = c.means.iter().sum();
        assert!((means_sum - 1.0).abs() < 1e-12, "means sum to one by partition of unity");
        let mut sums = vec![0.0; c.width()];
        let mut row = vec![0.0; c.width()];
        for &xi in &x {
            c.eval_centred(xi, &mut row);
            let dense = b.eval_dense(xi);
            for j in 0..c.width() {
                assert!((row[j] - (dense[j] - c.means[j])).abs() < 1e-15);
                sums[j] += row[j];
            }
        }
        for s in sums {
            assert!((s / x.len() as f64).abs() < 1e-12, "centred mean {s}");
        }
        assert_eq!(CentredBasis::new(b, &[]), Err(BasisError::DegenerateRange));
    }

    #[test]
    fn high_degree_centring_uses_heap_buffer() {
        let x = sample(100);
        let b = Basis::for_sample(&x, 9, 12, KnotPlacement::Uniform).expect("valid");
        let c = CentredBasis::new(b.clone(), &x).expect("valid");
        let mut row = vec![0.0; c.width()];
        c.eval_centred(0.3, &mut row);
        let dense = b.eval_dense(0.3);
        for j in 0..c.width() {
            assert!((row[j] - (dense[j] - c.means[j])).abs() < 1e-15);
        }
    }
}
