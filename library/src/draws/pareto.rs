//! The generalised Pareto distribution and its fit to a tail of draws.
//!
//! Pareto-smoothed importance sampling ([`super::importance`]) replaces the
//! largest importance ratios by quantiles of a generalised Pareto
//! distribution fitted to them, and reads the fitted shape as a diagnostic
//! of how heavy the tail is. The distribution (location 0) has
//! `F(x) = 1 − (1 + k x / σ)^(−1/k)` for shape `k` and scale `σ > 0`
//! (`1 − e^(−x/σ)` at `k = 0`).
//!
//! The fit is the estimator of Zhang & Stephens (2009, *Technometrics* 51,
//! 316–325): with `b = −k/σ`, the profile log-likelihood of `b` is
//! `n (log(−b / k̂(b)) − k̂(b) − 1)` where `k̂(b) = mean log(1 − b xᵢ)`; the
//! estimate of `b` is the average of a grid of `m = 30 + ⌊√n⌋` values
//! `b_j = 1/x₍ₙ₎ + (1 − √(m / (j − ½))) / (3 x*)` (`x*` the first-quartile
//! order statistic `x₍⌊n/4 + ½⌋₎`), weighted by their normalised profile
//! likelihoods; then `k = k̂(b)` and `σ = −k / b`. Vehtari et al. (2017,
//! 2024) then pull the shape towards ½ by a weak prior worth 10
//! observations, `(n k + 10 · ½) / (n + 10)` ([`weakly_regularised_shape`]).

/// A fitted generalised Pareto distribution (location 0).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct TailFit {
    /// The shape `k` (the tail's heaviness; moments of order `1/k` and
    /// above do not exist for `k > 0`).
    pub shape: f64,
    /// The scale `σ > 0`.
    pub scale: f64,
}

impl TailFit {
    /// The quantile at share `p` in `[0, 1)`.
    pub fn quantile(&self, p: f64) -> f64 {
        if self.shape.abs() < 1e-12 {
            -self.scale * (-p).ln_1p()
        } else {
            self.scale * ((-self.shape * (-p).ln_1p()).exp_m1()) / self.shape
        }
    }

    /// The log density at `x ≥ 0` (−∞ outside the support).
    pub fn log_density(&self, x: f64) -> f64 {
        if x < 0.0 {
            return f64::NEG_INFINITY;
        }
        if self.shape.abs() < 1e-12 {
            return -self.scale.ln() - x / self.scale;
        }
        let z = 1.0 + self.shape * x / self.scale;
        if z <= 0.0 {
            return f64::NEG_INFINITY;
        }
        -self.scale.ln() - (1.0 + 1.0 / self.shape) * z.ln()
    }
}

/// Fit a generalised Pareto distribution to exceedances `x` (every value
/// ≥ 0) by the Zhang–Stephens estimator. `None` when the sample cannot
/// carry a fit: fewer than 5 values, a value below 0 or not finite, or a
/// first-quartile value of 0 (most of the tail tied at its threshold).
pub fn fit_tail(x: &[f64]) -> Option<TailFit> {
    let n = x.len();
    if n < 5 || x.iter().any(|v| !v.is_finite() || *v < 0.0) {
        return None;
    }
    let mut sorted = x.to_vec();
    sorted.sort_by(f64::total_cmp);
    let largest = sorted[n - 1];
    let quartile = sorted[((n as f64 / 4.0 + 0.5).floor() as usize).saturating_sub(1)];
    if quartile <= 0.0 || largest <= 0.0 {
        return None;
    }
    let m = 30 + (n as f64).sqrt().floor() as usize;
    let grid: Vec<f64> =
        (1..=m).map(|j| 1.0 / largest + (1.0 - (m as f64 / (j as f64 - 0.5)).sqrt()) / (3.0 * quartile)).collect();
    let shape_given = |b: f64| sorted.iter().map(|&v| (-b * v).ln_1p()).sum::<f64>() / n as f64;
    let profile: Vec<f64> = grid
        .iter()
        .map(|&b| {
            let k = shape_given(b);
            n as f64 * ((-b / k).ln() - k - 1.0)
        })
        .collect();
    // weights exp(Lⱼ) / Σ exp(Lᵢ), computed against the largest term; a
    // grid point at b = 0 exactly (k̂ = 0) has no finite profile and no weight
    let top = profile.iter().copied().filter(|l| l.is_finite()).fold(f64::NEG_INFINITY, f64::max);
    if !top.is_finite() {
        return None;
    }
    let weights: Vec<f64> = profile.iter().map(|&l| if l.is_finite() { (l - top).exp() } else { 0.0 }).collect();
    let total: f64 = weights.iter().sum();
    let b: f64 = grid.iter().zip(&weights).map(|(b, w)| b * w).sum::<f64>() / total;
    let shape = shape_given(b);
    let scale = -shape / b;
    (scale.is_finite() && scale > 0.0 && shape.is_finite()).then_some(TailFit { shape, scale })
}

/// The shape pulled towards ½ by a weak prior worth 10 observations,
/// `(n k + 5) / (n + 10)`, for a fit to `n` values (Vehtari, Gelman & Gabry
/// 2017, appendix; recalled).
pub fn weakly_regularised_shape(shape: f64, n: usize) -> f64 {
    (n as f64 * shape + 10.0 * 0.5) / (n as f64 + 10.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Exponential tail (k = 0): quantile −σ log(1 − p), density e^(−x/σ)/σ.
    #[test]
    fn zero_shape_is_the_exponential() {
        let fit = TailFit { shape: 0.0, scale: 2.0 };
        assert!((fit.quantile(0.5) - 2.0 * std::f64::consts::LN_2).abs() < 1e-12);
        assert!((fit.log_density(1.0) - (-(2.0f64).ln() - 0.5)).abs() < 1e-12);
    }

    /// k = 1, σ = 1: F(x) = 1 − 1/(1 + x), so the median is 1.
    #[test]
    fn unit_shape_has_median_one() {
        let fit = TailFit { shape: 1.0, scale: 1.0 };
        assert!((fit.quantile(0.5) - 1.0).abs() < 1e-12);
    }

    #[test]
    fn too_few_or_tied_values_carry_no_fit() {
        assert_eq!(fit_tail(&[1.0, 2.0, 3.0]), None);
        assert_eq!(fit_tail(&[0.0; 20]), None);
        assert_eq!(fit_tail(&[1.0, f64::NAN, 2.0, 3.0, 4.0, 5.0]), None);
    }
}
