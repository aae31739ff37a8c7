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
//! contiguous columns times coefficients, its gradient contribution a
//! contiguous dot product per column, and both run in vector registers;
//! the block's predictors and slopes stay on the stack. The logit link's
//! softplus and logistic come from one exponential ([`super::kernels`]).

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

    /// The log-likelihood and gradient, block by block.
    #[inline(always)]
    fn evaluate(&self, beta: &[f64], grad: &mut [f64]) -> f64 {
        let width = self.width;
        if width == 0 {
            return self.constant;
        }
        let (beta, grad) = (&beta[..width], &mut grad[..width]);
        let mut eta = [0.0; BLOCK];
        let mut slope = [0.0; BLOCK];
        let mut total = self.constant;
        for (b, block) in self.blocks.chunks_exact(BLOCK * width).enumerate() {
            let first = b * BLOCK;
            let used = (self.rows - first).min(BLOCK);
            linear_predictors(block, beta, &mut eta);
            total += self.block_terms(first, &eta[..used], &mut slope[..used]);
            slope[used..].fill(0.0);
            add_weighted_columns(block, &slope, grad);
        }
        if total.is_nan() {
            f64::NEG_INFINITY
        } else {
            total
        }
    }

    /// The log-likelihood terms (without constant) of the rows from `first`
    /// on, one per linear predictor in `eta`, summed; their derivatives in η
    /// go to `slope`. The logit rows go four at a time through
    /// straight-line code, so their arithmetic overlaps.
    #[inline(always)]
    fn block_terms(&self, first: usize, eta: &[f64], slope: &mut [f64]) -> f64 {
        let rows = first..first + eta.len();
        let mut sum = [0.0; 4];
        let (y, trials) = match &self.outcome {
            GlmOutcome::Bernoulli { y } => (&y[rows], None),
            GlmOutcome::Binomial { y, trials } => (&y[rows.clone()], Some(&trials[rows])),
            GlmOutcome::Poisson { y } => {
                for (k, ((&e, s), &y)) in eta.iter().zip(slope.iter_mut()).zip(&y[rows]).enumerate() {
                    let mu = e.exp();
                    sum[k % 4] += y * e - mu;
                    *s = y - mu;
                }
                return (sum[0] + sum[1]) + (sum[2] + sum[3]);
            }
        };
        for start in (0..eta.len()).step_by(4) {
            let count = (eta.len() - start).min(4);
            let lanes = start..start + count;
            let (e, yy) = (four(&eta[lanes.clone()], 0.0), four(&y[lanes.clone()], 0.0));
            let m = trials.map_or([1.0; 4], |t| four(&t[lanes.clone()], 1.0));
            let (softplus, p) = softplus_and_logistic(e);
            let mut s = [0.0; 4];
            for k in 0..4 {
                // Lanes past `count` hold η = 0, y = 0: a finite term, left out.
                let term = yy[k] * e[k] - m[k] * softplus[k];
                sum[k] += if k < count { term } else { 0.0 };
                s[k] = yy[k] - m[k] * p[k];
            }
            slope[lanes].copy_from_slice(&s[..count]);
        }
        (sum[0] + sum[1]) + (sum[2] + sum[3])
    }
}

/// Up to four values in a fixed array, the rest set to `fill`.
#[inline(always)]
fn four(values: &[f64], fill: f64) -> [f64; 4] {
    match values.try_into() {
        Ok(full) => full,
        Err(_) => {
            let mut out = [fill; 4];
            out[..values.len()].copy_from_slice(values);
            out
        }
    }
}

/// `eta = X_block · beta` for one column-major block.
#[inline(always)]
fn linear_predictors(block: &[f64], beta: &[f64], eta: &mut [f64; BLOCK]) {
    eta.fill(0.0);
    for (column, &b) in block.chunks_exact(BLOCK).zip(beta) {
        for (e, &x) in eta.iter_mut().zip(column) {
            *e += x * b;
        }
    }
}

/// `grad_j += Σ_i slope_i · X_block[i, j]`, eight partial sums per column.
#[inline(always)]
fn add_weighted_columns(block: &[f64], slope: &[f64; BLOCK], grad: &mut [f64]) {
    for (column, g) in block.chunks_exact(BLOCK).zip(grad.iter_mut()) {
        let mut acc = [0.0; 8];
        for (xs, ss) in column.chunks_exact(8).zip(slope.chunks_exact(8)) {
            for k in 0..8 {
                acc[k] += xs[k] * ss[k];
            }
        }
        *g += ((acc[0] + acc[1]) + (acc[2] + acc[3])) + ((acc[4] + acc[5]) + (acc[6] + acc[7]));
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
