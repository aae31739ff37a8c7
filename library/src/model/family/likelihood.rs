//! Row-by-row log-likelihoods of the GLM families (bernoulli, binomial,
//! poisson; the gamma-poisson, beta and time rows come from `shaped` and
//! `survival`) and their gradients with respect to the coefficients.
//!
//! Each row contributes `y·η − m·softplus(η)` (logit link, `m` trials) or
//! `y·η − e^η` (log link), plus a constant that does not depend on the
//! coefficients; its derivative in η is `y − m·logistic(η)` or `y − e^η`.
//! With `r` the vector of these derivatives (the rows' slopes), the
//! gradient is `Xᵀ·r`.
//!
//! This is the hot loop of every GLM fit (NUTS evaluates it thousands of
//! times), so the design is stored for it: rows are cut into blocks of
//! [`BLOCK`], and each block is stored column by column (the last block
//! padded with zero rows). One pass over the blocks does everything: a
//! block's linear predictors `X_b·β` ([`fixed_effects_product`]), its rows'
//! terms and slopes, and its share `X_bᵀ·r_b` of the gradient
//! ([`fixed_effects_gradient`]), while the block (a few kilobytes) is still
//! in the first-level cache. Both products run down contiguous columns in
//! vector registers, with fused multiply-adds. Sums are kept in lanes and
//! added up once, in a fixed order, so the result does not depend on the
//! register width: every build (portable, AVX2, AVX-512) gives the same
//! bits. The logit link's softplus and logistic come from one exponential
//! ([`super::kernels`]).
//!
//! Pooled groups add each row's departure to the linear predictor by the
//! row's level index ([`GroupIndices`]): after the block's fixed-effect
//! product, a gather `ηᵢ += a[level of row i]` ([`add_departures`]); after
//! its slopes, a scatter-add `∂a[level] += rᵢ` ([`add_departure_gradient`]).
//! This costs one load per row and group, where indicator columns would
//! cost one multiply-add per row and level. The scatter runs in row order,
//! so it too gives the same bits in every build.

use statrs::function::gamma::ln_gamma;

use super::kernels::{exp, softplus_and_logistic};
use super::shaped::{beta_rows, count_tally, gamma_difference_total, BetaPrecision, BetaShare, GammaShape};
use super::survival::{time_row, TimeForm, TimeRow, TimeShape};

/// Rows per block of the stored design.
const BLOCK: usize = 64;
/// Lanes of the gradient's partial sums: each column's block product is
/// summed in this many lanes (row `i` of a block into lane `i mod LANES`).
const LANES: usize = 8;

/// The outcome of a GLM family, as reals.
#[derive(Debug, Clone, PartialEq)]
pub enum GlmOutcome {
    Bernoulli { y: Vec<f64> },
    Binomial { y: Vec<f64>, trials: Vec<f64> },
    Poisson { y: Vec<f64> },
    /// Gamma-poisson counts: the likelihood also takes `log(overdispersion)`.
    GammaPoisson { y: Vec<f64> },
    /// Beta shares in (0, 1), kept as their logs: the likelihood also takes
    /// `log(precision)`.
    Beta { y: Vec<f64>, shares: Vec<BetaShare> },
    /// Positive times, each with its event indicator: a Weibull likelihood
    /// also takes `log(shape)`, an exponential one has shape 1.
    Times { y: Vec<f64>, rows: Vec<TimeRow>, form: TimeForm },
}

/// One run of pooled departures as the likelihood sees it: each row's
/// level, the number of levels, and for a varying slope each row's value
/// of the predictor (the departure is multiplied by it).
#[derive(Debug, Clone, PartialEq)]
pub struct GroupIndices {
    /// The level of every fitted row.
    pub level_of_row: Vec<u32>,
    /// The number of levels.
    pub levels: usize,
    /// Every fitted row's multiplier (`None`: 1, a varying intercept).
    pub weights: Option<Vec<f64>>,
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
    /// Pooled groups, whose departures follow the coefficients.
    groups: Vec<GroupIndices>,
    /// A gamma-poisson outcome's distinct counts with their rows
    /// ([`count_tally`]); empty for the other families.
    count_tally: Vec<(f64, f64)>,
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
        let count_tally = match &outcome {
            GlmOutcome::GammaPoisson { y } => count_tally(y),
            _ => Vec::new(),
        };
        GlmData { blocks, rows: n, width, outcome, constant, groups: Vec::new(), count_tally }
    }

    /// The same data with pooled groups: the likelihood then takes the
    /// coefficients followed by each group's departures (levels in order,
    /// group after group), and writes their derivatives in the same order.
    ///
    /// # Panics
    /// When a group's levels do not cover the rows (a build error).
    pub fn with_groups(mut self, groups: Vec<GroupIndices>) -> Self {
        for group in &groups {
            assert_eq!(group.level_of_row.len(), self.rows, "one level per row");
            assert!(group.weights.as_ref().is_none_or(|w| w.len() == self.rows), "one weight per row");
            assert!(group.level_of_row.iter().all(|&l| (l as usize) < group.levels), "levels in range");
        }
        self.groups = groups;
        self
    }

    /// The number of departures of every group together.
    fn departures(&self) -> usize {
        self.groups.iter().map(|g| g.levels).sum()
    }

    /// The number of trials of each row (binomial outcomes only).
    pub fn trials(&self) -> Option<&[f64]> {
        match &self.outcome {
            GlmOutcome::Binomial { trials, .. } => Some(trials),
            _ => None,
        }
    }

    /// Each row's event indicator (time families only): 1 for an event, 0
    /// for a row cut short.
    pub fn time_rows(&self) -> Option<&[TimeRow]> {
        match &self.outcome {
            GlmOutcome::Times { rows, .. } => Some(rows),
            _ => None,
        }
    }

    /// The full log-likelihood at coefficients `beta` (followed by the
    /// groups' departures, [`GlmData::with_groups`]), adding its gradient
    /// into `grad`. Returns `-inf` where the likelihood underflows to zero.
    ///
    /// On x86-64 the same code is compiled twice more, for AVX-512 and for
    /// AVX2 with FMA, and the widest the processor has is chosen at run
    /// time. Every operation is lane by lane, every product added on is a
    /// fused multiply-add and every sum has a fixed order, so all versions
    /// give the same bits.
    pub fn log_likelihood_and_gradient(&self, beta: &[f64], grad: &mut [f64]) -> f64 {
        self.log_likelihood_and_gradients(beta, 0.0, grad).0
    }

    /// [`GlmData::log_likelihood_and_gradient`] for a family with a
    /// positive parameter beside the coefficients (gamma-poisson:
    /// `u = log(overdispersion)`; beta: `u = log(precision)`;
    /// [`super::shaped`]): also returns the
    /// derivative in `u` (0 for the families without one, which ignore `u`).
    pub fn log_likelihood_and_gradients(&self, beta: &[f64], u: f64, grad: &mut [f64]) -> (f64, f64) {
        #[cfg(target_arch = "x86_64")]
        {
            if std::is_x86_feature_detected!("avx512f") && std::is_x86_feature_detected!("fma") {
                // SAFETY: the processor supports AVX-512F and FMA, checked just above.
                return unsafe { self.evaluate_avx512(beta, u, grad) };
            }
            if std::is_x86_feature_detected!("avx2") && std::is_x86_feature_detected!("fma") {
                // SAFETY: the processor supports AVX2 and FMA, checked just above.
                return unsafe { self.evaluate_avx2(beta, u, grad) };
            }
        }
        self.evaluate(beta, u, grad)
    }

    /// [`GlmData::evaluate`] compiled for AVX-512.
    ///
    /// # Safety
    /// Call only on a processor with AVX-512F and FMA.
    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx512f,avx2,fma")]
    unsafe fn evaluate_avx512(&self, beta: &[f64], u: f64, grad: &mut [f64]) -> (f64, f64) {
        self.evaluate(beta, u, grad)
    }

    /// [`GlmData::evaluate`] compiled for AVX2 with FMA.
    ///
    /// # Safety
    /// Call only on a processor with AVX2 and FMA.
    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2,fma")]
    unsafe fn evaluate_avx2(&self, beta: &[f64], u: f64, grad: &mut [f64]) -> (f64, f64) {
        self.evaluate(beta, u, grad)
    }

    /// The log-likelihood and gradient in one pass over the blocks (module
    /// doc). Row terms are summed in `BLOCK` lanes and gradient entries in
    /// [`LANES`] lanes across all blocks, and each lane set is added up
    /// once at the end in a fixed order, as are the rows' derivatives in
    /// the family parameter `u`.
    #[inline(always)]
    fn evaluate(&self, beta: &[f64], u: f64, grad: &mut [f64]) -> (f64, f64) {
        let width = self.width;
        if width == 0 {
            return (self.constant, 0.0);
        }
        let shape = FamilyShape {
            gamma: GammaShape::from_log_overdispersion(u),
            beta: BetaPrecision::from_log_precision(u),
            times: match &self.outcome {
                GlmOutcome::Times { form: TimeForm::Exponential, .. } => TimeShape::exponential(),
                _ => TimeShape::from_log_shape(u),
            },
        };
        let mut d_u = [0.0; BLOCK];
        let total_width = width + self.departures();
        let (beta, departures) = beta[..total_width].split_at(width);
        let (grad, d_departures) = grad[..total_width].split_at_mut(width);
        let mut eta = [0.0; BLOCK];
        let mut slope = [0.0; BLOCK];
        let mut terms = [0.0; BLOCK];
        let mut gradient_lanes = vec![0.0; width * LANES];
        for (b, block) in self.blocks.chunks_exact(BLOCK * width).enumerate() {
            let first = b * BLOCK;
            let used = (self.rows - first).min(BLOCK);
            fixed_effects_product(block, beta, &mut eta);
            add_departures(&self.groups, departures, first, used, &mut eta);
            self.block_terms(first, used, &eta, shape, &mut terms, &mut slope, &mut d_u);
            fixed_effects_gradient(block, &slope, &mut gradient_lanes);
            add_departure_gradient(&self.groups, &slope, first, used, d_departures);
        }
        for (g, lanes) in grad.iter_mut().zip(gradient_lanes.chunks_exact(LANES)) {
            *g += sum_in_fixed_order(lanes);
        }
        let (difference, d_difference) = match self.outcome {
            GlmOutcome::GammaPoisson { .. } => gamma_difference_total(&self.count_tally, shape.gamma.phi),
            _ => (0.0, 0.0),
        };
        let total = self.constant + sum_in_fixed_order(&terms) + difference;
        if total.is_nan() {
            (f64::NEG_INFINITY, 0.0)
        } else {
            (total, sum_in_fixed_order(&d_u) - 2.0 * shape.gamma.phi * d_difference)
        }
    }

    /// The log-likelihood terms (without constant) of the first `used`
    /// rows of the block starting at row `first`, added into their lanes of
    /// `terms`; their derivatives in η go to `slope` (0 for the padding rows
    /// past `used`), those in the family parameter into the lanes of `d_u`.
    #[inline(always)]
    #[allow(clippy::too_many_arguments)]
    fn block_terms(
        &self,
        first: usize,
        used: usize,
        eta: &[f64; BLOCK],
        shape: FamilyShape,
        terms: &mut [f64; BLOCK],
        slope: &mut [f64; BLOCK],
        d_u: &mut [f64; BLOCK],
    ) {
        let rows = first..first + used;
        *slope = [0.0; BLOCK];
        match &self.outcome {
            GlmOutcome::Bernoulli { y } => {
                let (softplus, p) = softplus_and_logistic(eta);
                for (i, &y) in y[rows].iter().enumerate() {
                    terms[i] += y.mul_add(eta[i], -softplus[i]);
                    slope[i] = y - p[i];
                }
            }
            GlmOutcome::Binomial { y, trials } => {
                let (softplus, p) = softplus_and_logistic(eta);
                for (i, (&y, &m)) in y[rows.clone()].iter().zip(&trials[rows]).enumerate() {
                    terms[i] += y.mul_add(eta[i], -m * softplus[i]);
                    slope[i] = (-m).mul_add(p[i], y);
                }
            }
            GlmOutcome::Poisson { y } => {
                let mu = exp(eta);
                for (i, &y) in y[rows].iter().enumerate() {
                    terms[i] += y.mul_add(eta[i], -mu[i]);
                    slope[i] = y - mu[i];
                }
            }
            GlmOutcome::GammaPoisson { y } => {
                // `shaped` module doc, with the gamma difference left to the
                // tally (`evaluate`): softplus(−t) = softplus(t) − t and
                // logistic(−t) = 1 − logistic(t), so one vector call serves.
                let GammaShape { phi, log_phi } = shape.gamma;
                let mut t = [0.0; BLOCK];
                for (t, &eta) in t.iter_mut().zip(eta) {
                    *t = eta - log_phi;
                }
                let (softplus, p) = softplus_and_logistic(&t);
                for (i, &y) in y[rows].iter().enumerate() {
                    terms[i] += (-y).mul_add(softplus[i] - t[i], -phi * softplus[i]);
                    slope[i] = (-(y + phi)).mul_add(p[i], y);
                    d_u[i] += 2.0 * phi.mul_add(softplus[i], slope[i]);
                }
            }
            GlmOutcome::Beta { shares, .. } => {
                // Rows past `used` hold a share of ½ and are not added in.
                let mut block = [BetaShare { logit: 0.0, log_complement: -std::f64::consts::LN_2 }; BLOCK];
                block[..used].copy_from_slice(&shares[rows]);
                let (term, d_eta, d_shape) = beta_rows(&block, eta, shape.beta);
                for i in 0..used {
                    terms[i] += term[i];
                    slope[i] = d_eta[i];
                    d_u[i] += d_shape[i];
                }
            }
            GlmOutcome::Times { rows: times, .. } => {
                for (i, &row) in times[rows].iter().enumerate() {
                    let (term, d_eta, d_shape) = time_row(row, eta[i], shape.times);
                    terms[i] += term;
                    slope[i] = d_eta;
                    d_u[i] += d_shape;
                }
            }
        }
    }
}

/// The family parameter as each family's rows use it, from its log `u`.
#[derive(Debug, Clone, Copy)]
struct FamilyShape {
    gamma: GammaShape,
    beta: BetaPrecision,
    times: TimeShape,
}

/// The sum of a multiple of eight lanes: eight partial sums, then a fixed
/// tree.
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

/// The fixed-effect part of the linear predictor, `eta = X_b·β`, for one
/// column-major block: `GROUP` rows at a time, so their sums stay in
/// registers while the columns go by.
#[inline(always)]
pub(crate) fn fixed_effects_product(block: &[f64], beta: &[f64], eta: &mut [f64; BLOCK]) {
    for (g, out) in eta.chunks_exact_mut(GROUP).enumerate() {
        let mut acc = [0.0; GROUP];
        for (column, &b) in block.chunks_exact(BLOCK).zip(beta) {
            let xs = &column[g * GROUP..(g + 1) * GROUP];
            for k in 0..GROUP {
                acc[k] = xs[k].mul_add(b, acc[k]);
            }
        }
        out.copy_from_slice(&acc);
    }
}

/// Each of the block's rows `first..first + used` gets its level's
/// departure of every group added to its linear predictor (a gather by
/// level index; `departures` holds the groups' runs one after another).
#[inline(always)]
fn add_departures(groups: &[GroupIndices], departures: &[f64], first: usize, used: usize, eta: &mut [f64; BLOCK]) {
    let mut at = 0;
    for group in groups {
        let run = &departures[at..at + group.levels];
        let levels = &group.level_of_row[first..first + used];
        match &group.weights {
            None => {
                for (e, &level) in eta.iter_mut().zip(levels) {
                    *e += run[level as usize];
                }
            }
            Some(weights) => {
                for ((e, &level), &w) in eta.iter_mut().zip(levels).zip(&weights[first..first + used]) {
                    *e = w.mul_add(run[level as usize], *e);
                }
            }
        }
        at += group.levels;
    }
}

/// The block's share of the derivatives in the departures: each row's
/// slope added onto its level's departure of every group (a scatter-add
/// by level index, in row order).
#[inline(always)]
fn add_departure_gradient(groups: &[GroupIndices], slope: &[f64; BLOCK], first: usize, used: usize, d_departures: &mut [f64]) {
    let mut at = 0;
    for group in groups {
        let run = &mut d_departures[at..at + group.levels];
        let levels = &group.level_of_row[first..first + used];
        match &group.weights {
            None => {
                for (&s, &level) in slope.iter().zip(levels) {
                    run[level as usize] += s;
                }
            }
            Some(weights) => {
                for ((&s, &level), &w) in slope.iter().zip(levels).zip(&weights[first..first + used]) {
                    run[level as usize] = w.mul_add(s, run[level as usize]);
                }
            }
        }
        at += group.levels;
    }
}

/// Columns whose block products are accumulated together: independent
/// sums the processor can overlap.
const COLUMNS_AT_ONCE: usize = 4;

/// The block's share of the fixed-effect gradient, `X_bᵀ·slope`: for each
/// column, the products with the slopes summed in [`LANES`] lanes and
/// added onto that column's lanes in `lanes` (`width · LANES` values).
#[inline(always)]
pub(crate) fn fixed_effects_gradient(block: &[f64], slope: &[f64; BLOCK], lanes: &mut [f64]) {
    let mut columns = block.chunks_exact(COLUMNS_AT_ONCE * BLOCK);
    let mut outputs = lanes.chunks_exact_mut(COLUMNS_AT_ONCE * LANES);
    for (quad, out) in (&mut columns).zip(&mut outputs) {
        column_products::<COLUMNS_AT_ONCE>(quad, slope, out);
    }
    let (rest, rest_out) = (columns.remainder(), outputs.into_remainder());
    for (column, out) in rest.chunks_exact(BLOCK).zip(rest_out.chunks_exact_mut(LANES)) {
        column_products::<1>(column, slope, out);
    }
}

/// `out[c][k] += Σ_chunk x[c][chunk·LANES + k] · slope[chunk·LANES + k]`
/// for `C` columns of a block, chunk by chunk in order.
#[inline(always)]
fn column_products<const C: usize>(columns: &[f64], slope: &[f64; BLOCK], out: &mut [f64]) {
    let mut acc = [[0.0; LANES]; C];
    for chunk in 0..BLOCK / LANES {
        let s = &slope[chunk * LANES..(chunk + 1) * LANES];
        for (c, acc) in acc.iter_mut().enumerate() {
            let x = &columns[c * BLOCK + chunk * LANES..c * BLOCK + (chunk + 1) * LANES];
            for k in 0..LANES {
                acc[k] = x[k].mul_add(s[k], acc[k]);
            }
        }
    }
    for (c, acc) in acc.iter().enumerate() {
        for k in 0..LANES {
            out[c * LANES + k] += acc[k];
        }
    }
}

/// The part of the log-likelihood free of coefficients: Σ log C(m, y) for
/// binomial, −Σ log y! for poisson and gamma-poisson, −Σ log(y(1 − y))
/// for beta, 0 for bernoulli.
fn log_likelihood_constant(outcome: &GlmOutcome) -> f64 {
    let log_factorial = |v: f64| ln_gamma(v + 1.0);
    match outcome {
        GlmOutcome::Bernoulli { .. } => 0.0,
        GlmOutcome::Binomial { y, trials } => y
            .iter()
            .zip(trials)
            .map(|(&s, &m)| log_factorial(m) - log_factorial(s) - log_factorial(m - s))
            .sum(),
        GlmOutcome::Poisson { y } | GlmOutcome::GammaPoisson { y } => -y.iter().map(|&v| log_factorial(v)).sum::<f64>(),
        GlmOutcome::Beta { y, shares } => -y.iter().zip(shares).map(|(&v, s)| v.ln() + s.log_complement).sum::<f64>(),
        GlmOutcome::Times { rows, .. } => -rows.iter().map(TimeRow::log_time_of_event).sum::<f64>(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::family::shaped::gamma_poisson_row;
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
            GlmOutcome::Binomial { y: successes.clone(), trials: trials.clone() },
            GlmOutcome::Poisson { y: successes.clone() },
            GlmOutcome::GammaPoisson { y: successes.clone() },
            shares_of(&successes, &trials),
            times_of(&successes),
        ]
    }

    /// Exponential times `s + ½`, every fourth row cut short.
    fn times_of(successes: &[f64]) -> GlmOutcome {
        let y: Vec<f64> = successes.iter().map(|s| s + 0.5).collect();
        let rows = y.iter().enumerate().map(|(i, &t)| TimeRow::new(t, i % 4 == 0)).collect();
        GlmOutcome::Times { y, rows, form: TimeForm::Exponential }
    }

    /// An exponential row by its definition (mean e^η, module doc of
    /// `family::survival`) without `−δ·log y`: `δ·(log y − η) − y·e^−η`,
    /// and its derivative in η, `y·e^−η − δ`.
    fn exponential_by_definition(row: TimeRow, eta: f64) -> (f64, f64) {
        let y = row.log_time.exp();
        (row.event * (row.log_time - eta) - y * (-eta).exp(), y * (-eta).exp() - row.event)
    }

    /// Beta shares `(s + ½)/(m + 1)`, strictly inside (0, 1).
    fn shares_of(successes: &[f64], trials: &[f64]) -> GlmOutcome {
        let y: Vec<f64> = successes.iter().zip(trials).map(|(s, m)| (s + 0.5) / (m + 1.0)).collect();
        GlmOutcome::Beta { shares: y.iter().map(|&v| BetaShare::new(v)).collect(), y }
    }

    /// A beta row at precision 1 (`u = 0`), as [`gamma_poisson_at_one`].
    fn beta_at_one(share: BetaShare, eta: f64) -> (f64, f64) {
        let (term, slope, _) = super::super::shaped::beta_row(share, eta, BetaPrecision::from_log_precision(0.0));
        (term, slope)
    }

    /// A gamma-poisson row at overdispersion 1 (`u = 0`, the value
    /// `log_likelihood_and_gradient` passes): its own formula is checked
    /// against the plain definition in `family::shaped`; here it checks
    /// the blocking.
    fn gamma_poisson_at_one(y: f64, eta: f64) -> (f64, f64) {
        let (term, slope, _) = gamma_poisson_row(y, eta, GammaShape::from_log_overdispersion(0.0));
        (term, slope)
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
                GlmOutcome::GammaPoisson { y } => gamma_poisson_at_one(y[i], eta),
                GlmOutcome::Beta { shares, .. } => beta_at_one(shares[i], eta),
                GlmOutcome::Times { rows, .. } => exponential_by_definition(rows[i], eta),
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

    /// Random designs of several widths (each a different mix of the
    /// four-column and single-column gradient paths) and row counts (full
    /// and padded blocks), all three families: the fused pass equals the
    /// plain definition — `X·β` row by row, the standard library's exp and
    /// ln_1p, then `Xᵀ·r` — to 1e-12 relative to the size of each sum
    /// (Σ|term| for the value, Σ|rᵢ·xᵢⱼ| for gradient entry j).
    #[test]
    fn fused_pass_equals_the_plain_products_on_random_designs() {
        use rand::rngs::StdRng;
        use rand::{RngExt, SeedableRng};
        let mut rng = StdRng::seed_from_u64(20_261_203);
        for (n, width) in [(1, 1), (63, 2), (64, 4), (200, 5), (517, 7), (1000, 21), (3001, 11)] {
            let rows: Vec<f64> = (0..n * width)
                .map(|k| if k % width == 0 { 1.0 } else { 3.0 * (rng.random::<f64>() - 0.5) })
                .collect();
            let beta: Vec<f64> = (0..width).map(|_| rng.random::<f64>() - 0.5).collect();
            let trials: Vec<f64> = (0..n).map(|_| f64::from(rng.random_range(1..40u32))).collect();
            let successes: Vec<f64> = trials.iter().map(|&m| (rng.random::<f64>() * (m + 1.0)).floor().min(m)).collect();
            let yes: Vec<f64> = (0..n).map(|_| f64::from(rng.random::<bool>())).collect();
            for outcome in [
                GlmOutcome::Bernoulli { y: yes.clone() },
                GlmOutcome::Binomial { y: successes.clone(), trials: trials.clone() },
                GlmOutcome::Poisson { y: successes.clone() },
                GlmOutcome::GammaPoisson { y: successes.clone() },
                shares_of(&successes, &trials),
            ] {
                let data = GlmData::new(rows.clone(), width, outcome.clone());
                let mut grad = vec![0.0; width];
                let value = data.log_likelihood_and_gradient(&beta, &mut grad);
                let (want, want_grad) = by_definition(&rows, width, &outcome, &beta);
                let (value_scale, gradient_scales) = sum_sizes(&rows, width, &outcome, &beta);
                assert!((value - want).abs() <= 1e-12 * value_scale, "{n}×{width} {outcome:?}: {value} vs {want}");
                for (j, (g, w)) in grad.iter().zip(&want_grad).enumerate() {
                    assert!((g - w).abs() <= 1e-12 * gradient_scales[j], "{n}×{width}: gradient {j}: {g} vs {w}");
                }
            }
        }
    }

    /// Σ|row term| (with the constant) and, per column j, Σ|slopeᵢ·xᵢⱼ|: the
    /// sizes against which the rounding of the sums is judged.
    fn sum_sizes(rows: &[f64], width: usize, outcome: &GlmOutcome, beta: &[f64]) -> (f64, Vec<f64>) {
        let mut value = log_likelihood_constant(outcome).abs();
        let mut gradient = vec![0.0; width];
        for (i, row) in rows.chunks_exact(width).enumerate() {
            let eta: f64 = row.iter().zip(beta).map(|(x, b)| x * b).sum();
            let (term, slope) = match outcome {
                GlmOutcome::Bernoulli { y } => (y[i] * eta - softplus(eta), y[i] - logistic(eta)),
                GlmOutcome::Binomial { y, trials } => (y[i] * eta - trials[i] * softplus(eta), y[i] - trials[i] * logistic(eta)),
                GlmOutcome::Poisson { y } => (y[i] * eta - eta.exp(), y[i] - eta.exp()),
                GlmOutcome::GammaPoisson { y } => gamma_poisson_at_one(y[i], eta),
                GlmOutcome::Beta { shares, .. } => beta_at_one(shares[i], eta),
                GlmOutcome::Times { rows, .. } => exponential_by_definition(rows[i], eta),
            };
            value += term.abs() + (y_of(outcome, i) * eta).abs();
            for (g, x) in gradient.iter_mut().zip(row) {
                *g += (slope * x).abs();
            }
        }
        (value, gradient)
    }

    fn y_of(outcome: &GlmOutcome, i: usize) -> f64 {
        match outcome {
            GlmOutcome::Bernoulli { y }
            | GlmOutcome::Binomial { y, .. }
            | GlmOutcome::Poisson { y }
            | GlmOutcome::GammaPoisson { y }
            | GlmOutcome::Beta { y, .. }
            | GlmOutcome::Times { y, .. } => y[i],
        }
    }

    /// Pooled groups by level index against their definition: the same
    /// rows with each group's level indicators appended as columns, and the
    /// coefficients followed by the departures, evaluated row by row
    /// (`by_definition`). Two groups (7 and 3 levels) and a varying slope by
    /// the first (its indicator columns times the predictor) over 517 rows
    /// (padded last block), every family.
    #[test]
    fn departures_by_level_index_equal_indicator_columns() {
        use rand::rngs::StdRng;
        use rand::{RngExt, SeedableRng};
        let mut rng = StdRng::seed_from_u64(20_261_204);
        let (n, width, level_counts) = (517, 4, [7usize, 3, 7]);
        let rows: Vec<f64> =
            (0..n * width).map(|k| if k % width == 0 { 1.0 } else { 3.0 * (rng.random::<f64>() - 0.5) }).collect();
        let mut levels: Vec<Vec<u32>> =
            level_counts.iter().map(|&l| (0..n).map(|_| rng.random_range(0..l as u32)).collect()).collect();
        // The third run is a varying slope of the design's second column, by the first group's levels.
        levels[2] = levels[0].clone();
        let slope_of: Vec<f64> = (0..n).map(|i| rows[i * width + 1]).collect();
        let weight = |g: usize, i: usize| if g == 2 { slope_of[i] } else { 1.0 };
        let wide = width + level_counts.iter().sum::<usize>();
        let mut dense = Vec::with_capacity(n * wide);
        for i in 0..n {
            dense.extend_from_slice(&rows[i * width..(i + 1) * width]);
            for (g, &count) in level_counts.iter().enumerate() {
                dense.extend((0..count).map(|l| if levels[g][i] as usize == l { weight(g, i) } else { 0.0 }));
            }
        }
        let beta: Vec<f64> = (0..wide).map(|_| rng.random::<f64>() - 0.5).collect();
        let trials: Vec<f64> = (0..n).map(|_| f64::from(rng.random_range(1..30u32))).collect();
        let successes: Vec<f64> = trials.iter().map(|&m| (rng.random::<f64>() * (m + 1.0)).floor().min(m)).collect();
        let yes: Vec<f64> = (0..n).map(|_| f64::from(rng.random::<bool>())).collect();
        for outcome in [
            GlmOutcome::Bernoulli { y: yes },
            GlmOutcome::Binomial { y: successes.clone(), trials: trials.clone() },
            GlmOutcome::Poisson { y: successes.clone() },
            GlmOutcome::GammaPoisson { y: successes.clone() },
            shares_of(&successes, &trials),
        ] {
            let groups = levels
                .iter()
                .zip(level_counts)
                .enumerate()
                .map(|(g, (l, count))| GroupIndices {
                    level_of_row: l.clone(),
                    levels: count,
                    weights: (g == 2).then(|| slope_of.clone()),
                })
                .collect();
            let data = GlmData::new(rows.clone(), width, outcome.clone()).with_groups(groups);
            let mut grad = vec![0.0; wide];
            let value = data.log_likelihood_and_gradient(&beta, &mut grad);
            let (want, want_grad) = by_definition(&dense, wide, &outcome, &beta);
            let (value_scale, gradient_scales) = sum_sizes(&dense, wide, &outcome, &beta);
            assert!((value - want).abs() <= 1e-12 * value_scale, "{outcome:?}: {value} vs {want}");
            for (j, (g, w)) in grad.iter().zip(&want_grad).enumerate() {
                assert!((g - w).abs() <= 1e-12 * gradient_scales[j], "gradient {j}: {g} vs {w}");
            }
        }
    }

    /// A gamma-poisson pass takes the gamma difference once per distinct
    /// count, not per row: at several overdispersions, with counts on both
    /// sides of the summed range, its value and its derivative in
    /// `u = log κ` equal the sum of the row formula (checked against the
    /// definition by central differences in `family::shaped`).
    #[test]
    fn gamma_poisson_tally_equals_the_rows_summed_one_by_one() {
        let (rows, width) = design();
        let y: Vec<f64> = (0..150).map(|i| ((i * 29) % 97) as f64 + if i % 11 == 0 { 40.0 } else { 0.0 }).collect();
        assert!(y.iter().any(|&v| v >= 64.0) && y.iter().any(|&v| v < 64.0));
        let data = GlmData::new(rows.clone(), width, GlmOutcome::GammaPoisson { y: y.clone() });
        let beta = [1.3, 0.4, -0.2];
        for u in [-2.0, -0.4, 0.0, 0.7, 1.5] {
            let mut grad = vec![0.0; width];
            let (value, d_u) = data.log_likelihood_and_gradients(&beta, u, &mut grad);
            let (mut want, mut want_d_u, mut scale) = (0.0, 0.0, 0.0);
            for (i, &yi) in y.iter().enumerate() {
                let eta: f64 = (0..width).map(|j| rows[i * width + j] * beta[j]).sum();
                let (term, _, d) = gamma_poisson_row(yi, eta, GammaShape::from_log_overdispersion(u));
                want += term - ln_gamma(yi + 1.0);
                want_d_u += d;
                scale += term.abs() + d.abs();
            }
            assert!((value - want).abs() <= 1e-12 * scale, "u = {u}: {value} vs {want}");
            assert!((d_u - want_d_u).abs() <= 1e-12 * scale, "u = {u}: {d_u} vs {want_d_u}");
        }
    }

    /// The AVX2 and AVX-512 builds of the loop must give the portable
    /// build's bits, so a seed gives the same draws on any x86-64
    /// processor. A 7-column design takes both gradient paths; a pooled
    /// group of 5 levels adds the gather and scatter.
    #[cfg(target_arch = "x86_64")]
    #[test]
    fn wide_registers_give_the_same_bits() {
        let width = 7;
        let rows: Vec<f64> = (0..150 * width).map(|k| ((k * 37 % 101) as f64 / 101.0 - 0.5) * 4.0).collect();
        let beta = [0.2, -0.7, 0.4, 0.1, -0.3, 0.25, -0.05, 0.3, -0.2, 0.1, 0.05, -0.4];
        let width = beta.len();
        for outcome in outcomes() {
            let group = GroupIndices { level_of_row: (0..150).map(|i| (i * 7 % 5) as u32).collect(), levels: 5, weights: None };
            let data = GlmData::new(rows.clone(), 7, outcome).with_groups(vec![group]);
            let mut plain = vec![0.0; width];
            let a = data.evaluate(&beta, -0.4, &mut plain);
            if std::is_x86_feature_detected!("avx2") && std::is_x86_feature_detected!("fma") {
                let mut wide = vec![0.0; width];
                // SAFETY: AVX2 and FMA support were checked just above.
                let b = unsafe { data.evaluate_avx2(&beta, -0.4, &mut wide) };
                assert_eq!((a.0.to_bits(), a.1.to_bits(), &plain), (b.0.to_bits(), b.1.to_bits(), &wide));
            }
            if std::is_x86_feature_detected!("avx512f") && std::is_x86_feature_detected!("fma") {
                let mut wide = vec![0.0; width];
                // SAFETY: AVX-512F and FMA support were checked just above.
                let b = unsafe { data.evaluate_avx512(&beta, -0.4, &mut wide) };
                assert_eq!((a.0.to_bits(), a.1.to_bits(), &plain), (b.0.to_bits(), b.1.to_bits(), &wide));
            }
        }
    }
}
