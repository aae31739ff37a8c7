//! Row-by-row log-likelihoods of the GLM families (bernoulli, binomial,
//! poisson) and their gradients with respect to the coefficients.
//!
//! Each row contributes `y·η − m·softplus(η)` (logit link, `m` trials) or
//! `y·η − e^η` (log link), plus a constant that does not depend on the
//! coefficients; its derivative in η is `y − m·logistic(η)` or `y − e^η`.
//!
//! This is the hot loop of every GLM fit (NUTS evaluates it thousands of
//! times), so the design is stored for it: rows are cut into blocks of
//! [`BLOCK`], and each block is stored column by column (the last block
//! padded with zero rows). A block's linear predictors are then a sum of
//! contiguous columns times coefficients, and its gradient contribution a
//! lane-wise product of each column with the slopes; both run in vector
//! registers, and the block's predictors and slopes stay on the stack.
//! Sums are kept per lane and added up once, in a fixed order, so the
//! result does not depend on the register width. The logit link's softplus
//! and logistic come from one exponential ([`super::kernels`]).

use statrs::function::gamma::ln_gamma;

use super::kernels::softplus_and_logistic;

/// Rows per block of the stored design.
const BLOCK: usize = 64;

/// The outcome of a GLM family, as reals.
#[derive(Debug, Clone, PartialEq)]
pub enum GlmOutcome {
    Bernoulli { y: Vec<f64> },
    Binomial { y: Vec<f64>, trials: Vec<f64> },
    Poisson { y: Vec<f64> },
}

/// Design and outcome of a GLM, ready for repeated likelihood evaluations.
#[derive(Debug, Clone, PartialEq)]
pub struct GlmData {
    /// Blocks of `BLOCK` rows, each column-major (`BLOCK · width` values).
    blocks: Vec<f64>,
    rows: usize,
    width: usize,
    outcome: GlmOutcome,
    constant: f64,
}

impl GlmData {
    /// From a row-major design (`rows.len() == n · width`) and the outcome.
    pub fn new(rows: Vec<f64>, width: usize, outcome: GlmOutcome) -> Self {
        let constant = log_likelihood_constant(&outcome);
        let n = if width == 0 { 0 } else { rows.len() / width };
        let mut blocks = vec![0.0; n.div_ceil(BLOCK) * BLOCK * width];
        for (i, row) in rows.chunks_exact(width.max(1)).enumerate().take(n) {
            let base = (i / BLOCK) * BLOCK * width + i % BLOCK;
            for (j, &x) in row.iter().enumerate() {
                blocks[base + j * BLOCK] = x;
            }
        }
        GlmData { blocks, rows: n, width, outcome, constant }
    }

    /// The number of trials of each row (binomial outcomes only).
    pub fn trials(&self) -> Option<&[f64]> {
        match &self.outcome {
            GlmOutcome::Binomial { trials, .. } => Some(trials),
            _ => None,
        }
    }

    /// The full log-likelihood at coefficients `beta`, adding its gradient
    /// into `grad`. Returns `-inf` where the likelihood underflows to zero.
    ///
    /// On x86-64 processors with AVX2 the same code is compiled a second
    /// time for the wider registers and chosen at run time. Every operation
    /// is lane by lane and every sum has a fixed order, so both versions
    /// give the same bits.
    pub fn log_likelihood_and_gradient(&self, beta: &[f64], grad: &mut [f64]) -> f64 {
        #[cfg(target_arch = "x86_64")]
        if std::is_x86_feature_detected!("avx2") {
            // SAFETY: the processor supports AVX2, checked just above.
            return unsafe { self.evaluate_avx2(beta, grad) };
        }
        self.evaluate(beta, grad)
    }

    /// [`GlmData::evaluate`] compiled for AVX2.
    ///
    /// # Safety
    /// Call only on a processor with AVX2.
    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2")]
    unsafe fn evaluate_avx2(&self, beta: &[f64], grad: &mut [f64]) -> f64 {
        self.evaluate(beta, grad)
    }

    /// The log-likelihood and gradient, block by block. Sums run in
    /// `BLOCK` lanes (row `i` adds into lane `i mod BLOCK`) across all
    /// blocks, and each lane set is added up once at the end in a fixed
    /// order; lane-wise updates vectorise, per-block totals would not.
    #[inline(always)]
    fn evaluate(&self, beta: &[f64], grad: &mut [f64]) -> f64 {
        let width = self.width;
        if width == 0 {
            return self.constant;
        }
        let (beta, grad) = (&beta[..width], &mut grad[..width]);
        let mut eta = [0.0; BLOCK];
        let mut slope = [0.0; BLOCK];
        let mut terms = [0.0; BLOCK];
        let mut gradient_lanes = vec![0.0; width * BLOCK];
        for (b, block) in self.blocks.chunks_exact(BLOCK * width).enumerate() {
            let first = b * BLOCK;
            let used = (self.rows - first).min(BLOCK);
            linear_predictors(block, beta, &mut eta);
            self.block_terms(first, used, &eta, &mut terms, &mut slope);
            add_weighted_columns(block, &slope, &mut gradient_lanes);
        }
        for (g, lanes) in grad.iter_mut().zip(gradient_lanes.chunks_exact(BLOCK)) {
            *g += sum_in_fixed_order(lanes);
        }
        let total = self.constant + sum_in_fixed_order(&terms);
        if total.is_nan() {
            f64::NEG_INFINITY
        } else {
            total
        }
    }

    /// The log-likelihood terms (without constant) of the first `used`
    /// rows of the block starting at row `first`, added into their lanes of
    /// `terms`; their derivatives in η go to `slope` (0 for the padding rows
    /// past `used`).
    #[inline(always)]
    fn block_terms(
        &self,
        first: usize,
        used: usize,
        eta: &[f64; BLOCK],
        terms: &mut [f64; BLOCK],
        slope: &mut [f64; BLOCK],
    ) {
        let rows = first..first + used;
        *slope = [0.0; BLOCK];
        match &self.outcome {
            GlmOutcome::Bernoulli { y } => {
                let (softplus, p) = softplus_and_logistic(eta);
                for (i, &y) in y[rows].iter().enumerate() {
                    terms[i] += y * eta[i] - softplus[i];
                    slope[i] = y - p[i];
                }
            }
            GlmOutcome::Binomial { y, trials } => {
                let (softplus, p) = softplus_and_logistic(eta);
                for (i, (&y, &m)) in y[rows.clone()].iter().zip(&trials[rows]).enumerate() {
                    terms[i] += y * eta[i] - m * softplus[i];
                    slope[i] = y - m * p[i];
                }
            }
            GlmOutcome::Poisson { y } => {
                for (i, &y) in y[rows].iter().enumerate() {
                    let mu = eta[i].exp();
                    terms[i] += y * eta[i] - mu;
                    slope[i] = y - mu;
                }
            }
        }
    }
}

/// The sum of `BLOCK` lanes: eight partial sums, then a fixed tree.
#[inline(always)]
fn sum_in_fixed_order(lanes: &[f64]) -> f64 {
    let mut acc = [0.0; 8];
    for chunk in lanes.chunks_exact(8) {
        for k in 0..8 {
            acc[k] += chunk[k];
        }
    }
    ((acc[0] + acc[1]) + (acc[2] + acc[3])) + ((acc[4] + acc[5]) + (acc[6] + acc[7]))
}

/// Rows whose predictors are accumulated together (in registers).
const GROUP: usize = 32;

/// `eta = X_block · beta` for one column-major block, `GROUP` rows at a
/// time so their sums stay in registers.
#[inline(always)]
fn linear_predictors(block: &[f64], beta: &[f64], eta: &mut [f64; BLOCK]) {
    for (g, out) in eta.chunks_exact_mut(GROUP).enumerate() {
        let mut acc = [0.0; GROUP];
        for (column, &b) in block.chunks_exact(BLOCK).zip(beta) {
            let xs = &column[g * GROUP..(g + 1) * GROUP];
            for k in 0..GROUP {
                acc[k] += xs[k] * b;
            }
        }
        out.copy_from_slice(&acc);
    }
}

/// `lanes[j][i] += slope_i · X_block[i, j]` for every column `j` and row
/// `i` of the block.
#[inline(always)]
fn add_weighted_columns(block: &[f64], slope: &[f64; BLOCK], lanes: &mut [f64]) {
    for (column, column_lanes) in block.chunks_exact(BLOCK).zip(lanes.chunks_exact_mut(BLOCK)) {
        for ((lane, &x), &s) in column_lanes.iter_mut().zip(column).zip(slope) {
            *lane += x * s;
        }
    }
}

/// The part of the log-likelihood free of coefficients: Σ log C(m, y) for
/// binomial, −Σ log y! for poisson, 0 for bernoulli.
fn log_likelihood_constant(outcome: &GlmOutcome) -> f64 {
    let log_factorial = |v: f64| ln_gamma(v + 1.0);
    match outcome {
        GlmOutcome::Bernoulli { .. } => 0.0,
        GlmOutcome::Binomial { y, trials } => y
            .iter()
            .zip(trials)
            .map(|(&s, &m)| log_factorial(m) - log_factorial(s) - log_factorial(m - s))
            .sum(),
        GlmOutcome::Poisson { y } => -y.iter().map(|&v| log_factorial(v)).sum::<f64>(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::family::{logistic, softplus};

    /// 150 rows (two full blocks and a padded one) of a 3-column design.
    fn design() -> (Vec<f64>, usize) {
        let rows: Vec<f64> = (0..150 * 3)
            .map(|k| if k % 3 == 0 { 1.0 } else { ((k * 37 % 101) as f64 / 101.0 - 0.5) * 4.0 })
            .collect();
        (rows, 3)
    }

    fn outcomes() -> Vec<GlmOutcome> {
        let y: Vec<f64> = (0..150).map(|i| f64::from(i % 3 == 0)).collect();
        let trials: Vec<f64> = (0..150).map(|i| (i % 7 + 1) as f64).collect();
        let successes: Vec<f64> = trials.iter().enumerate().map(|(i, m)| (i % 8) as f64 % (m + 1.0)).collect();
        vec![
            GlmOutcome::Bernoulli { y },
            GlmOutcome::Binomial { y: successes.clone(), trials },
            GlmOutcome::Poisson { y: successes },
        ]
    }

    /// The row-by-row definition in the module doc, with the standard
    /// library's exp and ln_1p (through `softplus` and `logistic`).
    fn by_definition(rows: &[f64], width: usize, outcome: &GlmOutcome, beta: &[f64]) -> (f64, Vec<f64>) {
        let mut total = 0.0;
        let mut grad = vec![0.0; width];
        for (i, row) in rows.chunks_exact(width).enumerate() {
            let eta: f64 = row.iter().zip(beta).map(|(x, b)| x * b).sum();
            let (value, slope) = match outcome {
                GlmOutcome::Bernoulli { y } => (y[i] * eta - softplus(eta), y[i] - logistic(eta)),
                GlmOutcome::Binomial { y, trials } => {
                    (y[i] * eta - trials[i] * softplus(eta), y[i] - trials[i] * logistic(eta))
                }
                GlmOutcome::Poisson { y } => (y[i] * eta - eta.exp(), y[i] - eta.exp()),
            };
            total += value;
            for (g, x) in grad.iter_mut().zip(row) {
                *g += slope * x;
            }
        }
        (total + log_likelihood_constant(outcome), grad)
    }

    #[test]
    fn blocked_evaluation_matches_the_row_by_row_definition() {
        let (rows, width) = design();
        let beta = [-0.3, 0.8, -1.1];
        for outcome in outcomes() {
            let data = GlmData::new(rows.clone(), width, outcome.clone());
            let mut grad = vec![0.0; width];
            let value = data.log_likelihood_and_gradient(&beta, &mut grad);
            let (want, want_grad) = by_definition(&rows, width, &outcome, &beta);
            assert!((value - want).abs() < 1e-11 * want.abs(), "{outcome:?}: {value} vs {want}");
            for (g, w) in grad.iter().zip(&want_grad) {
                assert!((g - w).abs() < 1e-10 * (1.0 + w.abs()), "{outcome:?}: gradient {g} vs {w}");
            }
        }
    }

    /// The AVX2 build of the loop must give the portable build's bits, so
    /// a seed gives the same draws on any x86-64 processor.
    #[cfg(target_arch = "x86_64")]
    #[test]
    fn wide_registers_give_the_same_bits() {
        if !std::is_x86_feature_detected!("avx2") {
            return;
        }
        let (rows, width) = design();
        for outcome in outcomes() {
            let data = GlmData::new(rows.clone(), width, outcome);
            let (mut plain, mut wide) = (vec![0.0; width], vec![0.0; width]);
            let a = data.evaluate(&[0.2, -0.7, 0.4], &mut plain);
            // SAFETY: AVX2 support was checked above.
            let b = unsafe { data.evaluate_avx2(&[0.2, -0.7, 0.4], &mut wide) };
            assert_eq!(a.to_bits(), b.to_bits());
            assert_eq!(plain, wide);
        }
    }
}
