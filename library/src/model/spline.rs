//! B-spline bases by de Boor's recursion.
//!
//! A basis is a knot vector (boundary knots repeated `degree + 1` times, so
//! the basis is clamped at both ends) and a degree. Evaluating at `x` gives
//! the `degree + 1` functions that are non-zero there, computed with the
//! triangular Cox–de Boor recursion, which needs no division by zero-length
//! knot spans. The right boundary belongs to the last non-empty span, so the
//! last function equals 1 there.

/// A clamped B-spline basis.
#[derive(Debug, Clone, PartialEq)]
pub struct BSplineBasis {
    knots: Vec<f64>,
    degree: usize,
}

impl BSplineBasis {
    /// A basis on `[lower, upper]` with the given strictly increasing
    /// interior knots; the boundary knots are repeated `degree + 1` times.
    pub fn clamped(lower: f64, upper: f64, interior: &[f64], degree: usize) -> Self {
        let mut knots = vec![lower; degree + 1];
        knots.extend_from_slice(interior);
        knots.extend(std::iter::repeat_n(upper, degree + 1));
        BSplineBasis { knots, degree }
    }

    /// A basis from a full, non-decreasing knot vector, with
    /// `knots.len() > 2 * (degree + 1) - 1`.
    pub fn from_knots(knots: Vec<f64>, degree: usize) -> Self {
        BSplineBasis { knots, degree }
    }

    /// Number of basis functions: knots − degree − 1.
    pub fn len(&self) -> usize {
        self.knots.len() - self.degree - 1
    }

    /// Whether the basis has no functions (never, for a valid knot vector).
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// The full knot vector.
    pub fn knots(&self) -> &[f64] {
        &self.knots
    }

    /// The range `[lower, upper]` the basis covers.
    pub fn range(&self) -> (f64, f64) {
        (self.knots[self.degree], self.knots[self.len()])
    }

    /// All basis function values at `x` (zero outside the range).
    pub fn row(&self, x: f64) -> Vec<f64> {
        let mut row = vec![0.0; self.len()];
        let (lower, upper) = self.range();
        if !(lower..=upper).contains(&x) {
            return row;
        }
        let span = self.span(x);
        for (r, value) in self.nonzero(span, x).into_iter().enumerate() {
            row[span - self.degree + r] = value;
        }
        row
    }

    /// The index `l` with `knots[l] <= x < knots[l + 1]` and `degree <= l < len`;
    /// the right boundary maps to the last non-empty span.
    fn span(&self, x: f64) -> usize {
        let last = self.len() - 1;
        if x >= self.knots[last + 1] {
            return (self.degree..=last).rev().find(|&l| self.knots[l] < self.knots[l + 1]).unwrap_or(last);
        }
        let above = self.knots[self.degree..=last + 1].partition_point(|&k| k <= x);
        self.degree + above - 1
    }

    /// The `degree + 1` functions non-zero on span `l`, in index order
    /// `l - degree ..= l` (de Boor's triangular recursion).
    fn nonzero(&self, l: usize, x: f64) -> Vec<f64> {
        let p = self.degree;
        let mut values = vec![0.0; p + 1];
        let mut left = vec![0.0; p + 1];
        let mut right = vec![0.0; p + 1];
        values[0] = 1.0;
        for j in 1..=p {
            left[j] = x - self.knots[l + 1 - j];
            right[j] = self.knots[l + j] - x;
            let mut saved = 0.0;
            for r in 0..j {
                let term = values[r] / (right[r + 1] + left[j - r]);
                values[r] = saved + right[r + 1] * term;
                saved = left[j - r] * term;
            }
            values[j] = saved;
        }
        values
    }
}

/// Quantiles of `values` at probabilities `probs`, by linear interpolation
/// between order statistics (position `(n − 1) p` in the sorted values).
pub fn quantiles(values: &[f64], probs: &[f64]) -> Vec<f64> {
    let mut sorted = values.to_vec();
    sorted.sort_by(f64::total_cmp);
    let last = sorted.len().saturating_sub(1);
    probs
        .iter()
        .map(|&p| {
            let position = p * last as f64;
            let below = (position.floor() as usize).min(last);
            let above = (below + 1).min(last);
            sorted[below] + (position - below as f64) * (sorted[above] - sorted[below])
        })
        .collect()
}

/// Interior knots for `functions` cubic-or-other basis functions of degree
/// `degree`: `functions − degree − 1` knots at equally spaced quantiles.
pub fn quantile_knots(values: &[f64], functions: usize, degree: usize) -> Vec<f64> {
    let count = functions.saturating_sub(degree + 1);
    let probs: Vec<f64> = (1..=count).map(|j| j as f64 / (count + 1) as f64).collect();
    quantiles(values, &probs)
}
