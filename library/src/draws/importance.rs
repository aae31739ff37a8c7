//! Pareto-smoothed importance sampling of one row's leave-one-out
//! predictive density.
//!
//! Posterior draws `θ_s` of the full data become draws of the posterior
//! without row i when weighted by `r_s ∝ 1 / p(yᵢ | θ_s)` (Gelfand, Dey &
//! Chang 1992); the left-out predictive density is then
//! `p(yᵢ | y₋ᵢ) ≈ Σ w_s p(yᵢ | θ_s) / Σ w_s`. Raw ratios can have a heavy
//! right tail; following Vehtari, Gelman & Gabry (2017) and Vehtari,
//! Simpson, Gelman, Yao & Gabry (2024), the `M = ⌈min(S/5, 3√S)⌉` largest
//! ratios are replaced by the expected order statistics of a generalised
//! Pareto distribution fitted to their exceedances over the largest ratio
//! outside the tail ([`super::pareto`], shape weakly regularised towards ½),
//! no smoothed ratio exceeds the largest raw one, and every weight is
//! truncated at `S^(3/4)` times the mean weight (the 2017 paper's guard;
//! recalled). The tail length treats the draws as independent (no
//! correction for the chains' autocorrelation). The fitted shape `k` says
//! how far the estimate can be trusted: above [`SHAPE_LIMIT`] the
//! importance-sampling estimate is unreliable and the row is better
//! refitted without it.
//!
//! Everything is on the log scale (log ratios are `−log p(yᵢ | θ_s)`,
//! shifted by their largest value), so no ratio overflows.

use super::pareto::{fit_tail, weakly_regularised_shape};

/// The tail shape above which a row's importance-sampling estimate is not
/// trusted (Vehtari et al. 2024: `min(1 − 1/log₁₀ S, 0.7)`, which is 0.7
/// from about 2,200 draws on; recalled).
pub const SHAPE_LIMIT: f64 = 0.7;

/// The fewest draws an estimate is made from.
pub const MIN_DRAWS: usize = 100;

/// One row's smoothed estimate.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct RowEstimate {
    /// `log p(yᵢ | y₋ᵢ)`, estimated.
    pub left_out: f64,
    /// `log` of the mean of `p(yᵢ | θ_s)` over the draws: the in-sample
    /// predictive density of the row.
    pub in_sample: f64,
    /// The fitted tail shape (weakly regularised); `None` when the tail
    /// could not be fitted (its ratios nearly all equal), in which case the
    /// raw ratios were used.
    pub shape: Option<f64>,
}

/// The number of largest ratios a tail fit uses for `draws` draws.
pub fn tail_length(draws: usize) -> usize {
    let s = draws as f64;
    (0.2 * s).min(3.0 * s.sqrt()).ceil() as usize
}

/// `log Σ exp(vᵢ)` without overflow.
pub fn log_sum_exp(values: impl Iterator<Item = f64> + Clone) -> f64 {
    let top = values.clone().fold(f64::NEG_INFINITY, f64::max);
    if !top.is_finite() {
        return top;
    }
    top + values.map(|v| (v - top).exp()).sum::<f64>().ln()
}

/// The smoothed log weights of draws with log ratios `log_ratios`
/// (normalised so the largest raw one is 0), and the fitted tail shape.
pub fn smoothed_log_weights(log_ratios: &[f64]) -> (Vec<f64>, Option<f64>) {
    let s = log_ratios.len();
    let top = log_ratios.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let mut weights: Vec<f64> = log_ratios.iter().map(|r| r - top).collect();
    let m = tail_length(s);
    let mut shape = None;
    if m >= 5 && m < s {
        let mut order: Vec<usize> = (0..s).collect();
        order.sort_by(|&a, &b| weights[a].total_cmp(&weights[b]));
        let tail = &order[s - m..];
        let cutoff = weights[order[s - m - 1]];
        let exceedances: Vec<f64> = tail.iter().map(|&i| weights[i].exp() - cutoff.exp()).collect();
        if let Some(fit) = fit_tail(&exceedances) {
            let k = weakly_regularised_shape(fit.shape, m);
            let smoothed = super::pareto::TailFit { shape: k, scale: fit.scale };
            for (j, &i) in tail.iter().enumerate() {
                let p = (j as f64 + 0.5) / m as f64;
                weights[i] = (smoothed.quantile(p) + cutoff.exp()).ln().min(0.0);
            }
            shape = Some(k);
        }
    }
    let cap = 0.75 * (s as f64).ln() + log_sum_exp(weights.iter().copied()) - (s as f64).ln();
    for w in &mut weights {
        *w = w.min(cap);
    }
    (weights, shape)
}

/// One row's left-out and in-sample log predictive densities from its log
/// density under each draw. The caller checks that there are at least
/// [`MIN_DRAWS`] values, all finite.
pub fn left_out_estimate(log_densities: &[f64]) -> RowEstimate {
    let s = log_densities.len() as f64;
    let ratios: Vec<f64> = log_densities.iter().map(|l| -l).collect();
    let (weights, shape) = smoothed_log_weights(&ratios);
    let left_out = log_sum_exp(weights.iter().zip(log_densities).map(|(w, l)| w + l)) - log_sum_exp(weights.iter().copied());
    let in_sample = log_sum_exp(log_densities.iter().copied()) - s.ln();
    RowEstimate { left_out, in_sample, shape }
}

/// `log` of the mean of `exp(values)`: a row's predictive density from
/// draws that never saw it (an exact refit without the row).
pub fn log_mean_exp(values: &[f64]) -> f64 {
    log_sum_exp(values.iter().copied()) - (values.len() as f64).ln()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// S = 4000: min(800, 3·63.2) = 189.7, so 190 ratios (Vehtari et al.
    /// 2024's tail length, recalled); S = 100: min(20, 30) = 20.
    #[test]
    fn tail_length_follows_the_rule() {
        assert_eq!(tail_length(4000), 190);
        assert_eq!(tail_length(100), 20);
    }

    /// Equal log densities give equal weights: the estimate is the density itself.
    #[test]
    fn equal_densities_leave_the_density_unchanged() {
        let estimate = left_out_estimate(&vec![-1.25; 400]);
        assert!((estimate.left_out + 1.25).abs() < 1e-12 && (estimate.in_sample + 1.25).abs() < 1e-12);
        assert_eq!(estimate.shape, None);
    }
}
