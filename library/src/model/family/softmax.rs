//! The levels family: a category outcome with K levels, row by row.
//!
//! Level 0 (the first level of the outcome column) is the reference, with
//! linear predictor η₀ = 0; every other level k has its own coefficients
//! βₖ over the same design row x, so ηₖ = x·βₖ. The probability of level k
//! is the softmax `pₖ = e^ηₖ / Σⱼ e^ηⱼ`, and a row with outcome level y
//! contributes `η_y − log Σⱼ e^ηⱼ` to the log-likelihood (no constant). Its
//! gradient in βₖ is `x · ([y = k] − pₖ)` (Bishop, *Pattern Recognition and
//! Machine Learning*, 2006, §4.3.4, eqs. 4.104–4.109; recalled).
//!
//! The coefficients are stored level by level: `beta[(k − 1)·p .. k·p]` are
//! those of level k, in design-column order. The log of the sum is taken
//! after subtracting the largest predictor, so large predictors neither
//! overflow nor lose the small probabilities. Rows are summed in order, so
//! the result does not depend on the number of threads.
//!
//! **Pooled groups.** A pooled column gives every outcome level after the
//! reference its own departures, one per group level: `ηₖ(i) = xᵢ·βₖ +
//! aₖ[level of row i]` (plus `xᵢ·aₖₓ[…]` for a varying slope of `x`). Each
//! run of departures ([`DepartureRun`]) names the linear predictor it adds
//! to; the coefficients handed in are the `(K − 1)·p` coefficients followed
//! by every run's departures, so the derivative in a departure is the sum
//! over its level's rows of `([y = k] − pₖ)` (times `xᵢ` for a slope's) —
//! the same residual that multiplies the design in βₖ's gradient.

/// Design and outcome levels of a levels-family model, ready for repeated
/// likelihood evaluations.
#[derive(Debug, Clone, PartialEq)]
pub struct SoftmaxData {
    /// Row-major design (`rows · width` values).
    rows: Vec<f64>,
    width: usize,
    /// The outcome level of each row (0 is the reference).
    outcome: Vec<usize>,
    levels: usize,
    /// Pooled departures, run by run in parameter order.
    runs: Vec<DepartureRun>,
}

/// One run of pooled departures on one linear predictor.
#[derive(Debug, Clone, PartialEq)]
pub struct DepartureRun {
    /// The outcome level after the reference (0 for the first) whose
    /// linear predictor the departures move.
    pub block: usize,
    /// The rows' group levels and, for a varying slope, their multipliers.
    pub indices: super::likelihood::GroupIndices,
}

impl SoftmaxData {
    /// From a row-major design (`rows.len() == n · width`), the outcome
    /// level of each row and the number of levels K (at least 2).
    pub fn new(rows: Vec<f64>, width: usize, outcome: Vec<usize>, levels: usize) -> Self {
        SoftmaxData { rows, width, outcome, levels, runs: Vec::new() }
    }

    /// The same data with pooled departures (module docs); each run has
    /// one level per row and a block below K − 1.
    pub fn with_runs(mut self, runs: Vec<DepartureRun>) -> Self {
        for run in &runs {
            assert_eq!(run.indices.level_of_row.len(), self.outcome.len(), "one level per row");
            assert!(run.block + 1 < self.levels, "a block per level after the reference");
        }
        self.runs = runs;
        self
    }

    /// The full log-likelihood at coefficients `beta` (level by level, see
    /// the module doc), adding its gradient into `grad`. Returns `-inf`
    /// where the likelihood is not finite.
    pub fn log_likelihood_and_gradient(&self, beta: &[f64], grad: &mut [f64]) -> f64 {
        let (p, k) = (self.width, self.levels);
        let starts = self.run_starts(k);
        let mut eta = vec![0.0; k];
        let mut probabilities = vec![0.0; k];
        let mut total = 0.0;
        for (i, (x, &y)) in self.rows.chunks_exact(p.max(1)).zip(&self.outcome).enumerate() {
            linear_predictors(x, beta, &mut eta);
            for (run, &start) in self.runs.iter().zip(&starts) {
                eta[run.block + 1] += run.weight(i) * beta[start + run.indices.level_of_row[i] as usize];
            }
            let log_sum = log_sum_exp(&eta);
            total += eta[y] - log_sum;
            for (level, pr) in probabilities.iter_mut().enumerate() {
                *pr = (eta[level] - log_sum).exp();
            }
            for level in 1..k {
                let slope = f64::from(u8::from(y == level)) - probabilities[level];
                let g = &mut grad[(level - 1) * p..level * p];
                for (gj, xj) in g.iter_mut().zip(x) {
                    *gj += slope * xj;
                }
            }
            for (run, &start) in self.runs.iter().zip(&starts) {
                let slope = f64::from(u8::from(y == run.block + 1)) - probabilities[run.block + 1];
                grad[start + run.indices.level_of_row[i] as usize] += run.weight(i) * slope;
            }
        }
        if total.is_nan() {
            f64::NEG_INFINITY
        } else {
            total
        }
    }
}

impl SoftmaxData {
    /// Where each run's departures start among the coefficients handed to
    /// the likelihood (after the `(K − 1)·p` coefficients).
    fn run_starts(&self, k: usize) -> Vec<usize> {
        let mut at = (k - 1) * self.width;
        self.runs
            .iter()
            .map(|run| {
                let start = at;
                at += run.indices.levels;
                start
            })
            .collect()
    }
}

impl DepartureRun {
    /// Row `i`'s multiplier of its departure (1 for a varying intercept).
    fn weight(&self, i: usize) -> f64 {
        self.indices.weights.as_ref().map_or(1.0, |w| w[i])
    }
}

/// `eta[0] = 0` and `eta[k] = x · beta_k` for the other levels.
fn linear_predictors(x: &[f64], beta: &[f64], eta: &mut [f64]) {
    let p = x.len();
    eta[0] = 0.0;
    for (level, e) in eta.iter_mut().enumerate().skip(1) {
        let b = &beta[(level - 1) * p..level * p];
        *e = x.iter().zip(b).map(|(a, c)| a * c).sum();
    }
}

/// `log Σ e^eta`, computed after subtracting the largest value.
pub fn log_sum_exp(eta: &[f64]) -> f64 {
    let top = eta.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if !top.is_finite() {
        return top;
    }
    top + eta.iter().map(|e| (e - top).exp()).sum::<f64>().ln()
}

/// The probability of every level (reference first) from the linear
/// predictors of the levels after the first.
pub fn level_probabilities(eta_after_reference: &[f64]) -> Vec<f64> {
    let mut eta = Vec::with_capacity(eta_after_reference.len() + 1);
    eta.push(0.0);
    eta.extend_from_slice(eta_after_reference);
    let log_sum = log_sum_exp(&eta);
    eta.iter().map(|e| (e - log_sum).exp()).collect()
}

/// The start of the labels of level `level`'s coefficients,
/// `form[shrub vs herb]: ` (followed by the term's label, as in
/// `form[shrub vs herb]: shade slope`): each coefficient moves the log odds of
/// that level against the reference level.
pub fn level_prefix(outcome: &str, level: &str, reference: &str) -> String {
    format!("{outcome}[{level} vs {reference}]: ")
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Source: the definition log p_y = log(e^η_y / Σ e^η) (Bishop 2006,
    /// eq. 4.104; recalled), computed naively at moderate predictors, and
    /// the gradient of eq. 4.109 written out per row.
    #[test]
    fn log_likelihood_matches_the_naive_definition() {
        let rows: Vec<f64> = (0..40 * 2).map(|k| if k % 2 == 0 { 1.0 } else { (k as f64 * 0.37).sin() * 2.0 }).collect();
        let outcome: Vec<usize> = (0..40).map(|i| (i * 7) % 3).collect();
        let data = SoftmaxData::new(rows.clone(), 2, outcome.clone(), 3);
        let beta = [0.4, -0.8, -0.3, 1.1];
        let mut grad = vec![0.0; 4];
        let value = data.log_likelihood_and_gradient(&beta, &mut grad);
        let mut want = 0.0;
        let mut want_grad = [0.0; 4];
        for (x, &y) in rows.chunks_exact(2).zip(&outcome) {
            let e = [0.0, x[0] * beta[0] + x[1] * beta[1], x[0] * beta[2] + x[1] * beta[3]];
            let denominator: f64 = e.iter().map(|v| v.exp()).sum();
            want += (e[y].exp() / denominator).ln();
            for level in 1..3 {
                let r = f64::from(u8::from(y == level)) - e[level].exp() / denominator;
                want_grad[2 * (level - 1)] += r * x[0];
                want_grad[2 * (level - 1) + 1] += r * x[1];
            }
        }
        assert!((value - want).abs() < 1e-12 * want.abs(), "{value} vs {want}");
        for (g, w) in grad.iter().zip(&want_grad) {
            assert!((g - w).abs() < 1e-12 * (1.0 + w.abs()), "{g} vs {w}");
        }
    }

    /// Source: with predictors (0, 800, 790) the naive sum overflows, but
    /// log Σ e^η = 800 + log(1 + e^−10 + e^−800) exactly in real numbers, so
    /// p₁ = 1 / (1 + e^−10). Tolerance: the log sum is stored next to 800,
    /// whose unit in the last place is 1.1e-13.
    #[test]
    fn large_predictors_stay_finite() {
        let p = level_probabilities(&[800.0, 790.0]);
        assert!((p[1] - 1.0 / (1.0 + (-10f64).exp())).abs() < 1e-12, "{p:?}");
        assert!(p[0] >= 0.0 && p[0] < 1e-300);
        assert!((log_sum_exp(&[0.0, 800.0, 790.0]) - (800.0 + (-10f64).exp().ln_1p())).abs() < 1e-12);
    }
}
