//! The graded family: an ordered category outcome (survey scales, disease
//! grades, canopy classes) through the cumulative logit (McCullagh 1980,
//! "Regression models for ordinal data", JRSS B 42, §2).
//!
//! A row's latent score is its linear predictor η = x·β plus a standard
//! logistic error; the outcome is the level whose stretch of the latent
//! line holds the score. With K levels there are K − 1 cut points
//! `c₀ < c₁ < … < c_{K−2}` between them, so
//!
//! `P(y ≤ k) = F(c_k − η)`, `P(y = k) = F(c_k − η) − F(c_{k−1} − η)`
//!
//! with F the logistic function, `c_{−1} = −∞` and `c_{K−1} = +∞`.
//!
//! **Identification.** The design keeps its intercepts (one, or one per
//! level of a first category term), so the cut points and the intercepts
//! cannot both move freely: the first cut is fixed at `c₀ = 0` and the
//! intercepts place the rows' latent scores against it. The remaining cuts
//! are parameters (`rating cut[good]`: the cut below level `good`).
//!
//! **Order.** The sampler sees the log of each gap,
//! `g_j = log(c_j − c_{j−1})` for `j = 1 … K − 2`, so every point of the
//! unconstrained space gives ordered cuts. `c_j = Σ_{i≤j} e^{g_i}` has a
//! triangular Jacobian with diagonal `e^{g_j}`, so its log Jacobian is
//! `Σ g_j`; the priors are on the gaps `e^{g_j}` themselves.
//!
//! **Stable row density.** With `a = c_{k−1} − η` and `b = c_k − η`,
//! `F(b) − F(a) = F(b)·(1 − F(a))·(1 − e^{a−b})`, so
//!
//! `log P(y = k) = −softplus(−b) − softplus(a) + log(−expm1(a − b))`
//!
//! is finite wherever the probability is not zero, without subtracting two
//! numbers near 1. Its derivatives are `∂/∂b = F(−b) + 1/expm1(b − a)` and
//! `∂/∂a = −F(a) − 1/expm1(b − a)`; `∂/∂η = −(∂/∂a + ∂/∂b)`.

use super::super::prior::Prior;
use super::kernels::softplus_and_logistic;

/// Design, outcome levels and gap priors of a graded-family model, ready
/// for repeated density evaluations.
#[derive(Debug, Clone, PartialEq)]
pub struct GradedData {
    /// Row-major design (`rows · width` values).
    rows: Vec<f64>,
    width: usize,
    /// Each row's level index (0 the lowest level).
    outcome: Vec<usize>,
    levels: usize,
    /// The prior of each gap `c_j − c_{j−1}`, `j = 1 … K − 2`.
    gap_priors: Vec<Prior>,
}

impl GradedData {
    /// From a row-major design, the level of each row, the number of
    /// levels K (at least 2) and the K − 2 gap priors.
    pub fn new(rows: Vec<f64>, width: usize, outcome: Vec<usize>, levels: usize, gap_priors: Vec<Prior>) -> Self {
        GradedData { rows, width, outcome, levels, gap_priors }
    }

    /// The same priors and levels over other rows (a row left out, or
    /// simulated outcomes).
    pub fn with_rows(&self, rows: Vec<f64>, outcome: Vec<usize>) -> Self {
        GradedData { rows, outcome, ..self.clone() }
    }

    /// The number of outcome levels K.
    pub fn levels(&self) -> usize {
        self.levels
    }

    /// The gap priors, in cut order.
    pub fn gap_priors(&self) -> &[Prior] {
        &self.gap_priors
    }

    /// The log-likelihood at coefficients `beta` and log gaps `log_gaps`,
    /// adding its gradient into `grad_beta` and `grad_gaps`. `-inf` where
    /// it is not finite.
    ///
    /// Rows go through in blocks of [`LANES`]: each row needs the softplus
    /// and logistic of its two cut arguments, which the vector kernels take
    /// a block at a time; the band's own term `log(1 − e^{a−b})` and its
    /// derivative depend on the level alone (`a − b` is minus the gap), so
    /// they are computed once per level ([`Band`]).
    ///
    /// As for the other GLM families (`likelihood::GlmData`), on x86-64 the
    /// body is compiled twice more, for AVX-512 and for AVX2 with FMA (the
    /// kernels' fused multiply-adds are one instruction there, a library
    /// call otherwise), and the widest the processor has runs; every
    /// version gives the same bits.
    pub fn log_likelihood_and_gradient(&self, beta: &[f64], log_gaps: &[f64], grad_beta: &mut [f64], grad_gaps: &mut [f64]) -> f64 {
        #[cfg(target_arch = "x86_64")]
        {
            if std::is_x86_feature_detected!("avx512f") && std::is_x86_feature_detected!("fma") {
                // SAFETY: the processor supports AVX-512F and FMA, checked just above.
                return unsafe { self.evaluate_avx512(beta, log_gaps, grad_beta, grad_gaps) };
            }
            if std::is_x86_feature_detected!("avx2") && std::is_x86_feature_detected!("fma") {
                // SAFETY: the processor supports AVX2 and FMA, checked just above.
                return unsafe { self.evaluate_avx2(beta, log_gaps, grad_beta, grad_gaps) };
            }
        }
        self.evaluate(beta, log_gaps, grad_beta, grad_gaps)
    }

    /// [`GradedData::evaluate`] compiled for AVX-512.
    ///
    /// # Safety
    /// Call only on a processor with AVX-512F and FMA.
    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx512f,avx2,fma")]
    unsafe fn evaluate_avx512(&self, beta: &[f64], log_gaps: &[f64], grad_beta: &mut [f64], grad_gaps: &mut [f64]) -> f64 {
        self.evaluate(beta, log_gaps, grad_beta, grad_gaps)
    }

    /// [`GradedData::evaluate`] compiled for AVX2 with FMA.
    ///
    /// # Safety
    /// Call only on a processor with AVX2 and FMA.
    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2,fma")]
    unsafe fn evaluate_avx2(&self, beta: &[f64], log_gaps: &[f64], grad_beta: &mut [f64], grad_gaps: &mut [f64]) -> f64 {
        self.evaluate(beta, log_gaps, grad_beta, grad_gaps)
    }

    /// The likelihood's body, for every build of it.
    #[inline(always)]
    fn evaluate(&self, beta: &[f64], log_gaps: &[f64], grad_beta: &mut [f64], grad_gaps: &mut [f64]) -> f64 {
        let cuts = cut_points(log_gaps);
        let bands: Vec<Band> = (0..self.levels).map(|k| Band::of(k, &cuts)).collect();
        let mut d_cuts = vec![0.0; cuts.len()];
        let mut total = 0.0;
        let width = self.width.max(1);
        let rows = self.rows.chunks_exact(width * LANES).zip(self.outcome.chunks_exact(LANES));
        for (x, y) in rows {
            total += self.block::<LANES>(x, y, beta, &bands, &mut d_cuts, grad_beta);
        }
        let whole = self.outcome.len() / LANES * LANES;
        for (x, y) in self.rows[whole * width..].chunks_exact(width).zip(&self.outcome[whole..]) {
            total += self.block::<1>(x, std::slice::from_ref(y), beta, &bands, &mut d_cuts, grad_beta);
        }
        gaps_from_cuts(log_gaps, &d_cuts, grad_gaps);
        if total.is_nan() {
            f64::NEG_INFINITY
        } else {
            total
        }
    }

    /// The log-likelihood of `N` rows (`x` row-major, `y` their levels),
    /// their derivatives added into `d_cuts` and `grad_beta`.
    #[inline(always)]
    fn block<const N: usize>(&self, x: &[f64], y: &[usize], beta: &[f64], bands: &[Band], d_cuts: &mut [f64], grad_beta: &mut [f64]) -> f64 {
        let width = self.width.max(1);
        let (mut eta, mut lower, mut minus_upper) = ([0.0; N], [0.0; N], [0.0; N]);
        for k in 0..N {
            eta[k] = x[k * width..(k + 1) * width].iter().zip(beta).map(|(a, b)| a * b).sum();
            let band = &bands[y[k]];
            lower[k] = band.lower - eta[k];
            minus_upper[k] = eta[k] - band.upper;
        }
        let (softplus_a, logistic_a) = softplus_and_logistic(&lower);
        let (softplus_b, logistic_b) = softplus_and_logistic(&minus_upper);
        let mut total = 0.0;
        for k in 0..N {
            let band = &bands[y[k]];
            total += band.log_width - softplus_a[k] - softplus_b[k];
            let d_lower = -logistic_a[k] - band.inverse;
            let d_upper = logistic_b[k] + band.inverse;
            if y[k] > 0 {
                d_cuts[y[k] - 1] += d_lower;
            }
            if y[k] < d_cuts.len() {
                d_cuts[y[k]] += d_upper;
            }
            let d_eta = -(d_lower + d_upper);
            for (g, xj) in grad_beta.iter_mut().zip(&x[k * width..(k + 1) * width]) {
                *g += d_eta * xj;
            }
        }
        total
    }

    /// The gaps' log prior with the log Jacobian `Σ g_j` of `gap = e^g`,
    /// its gradient in the log gaps added into `grad_gaps`.
    pub fn log_prior_of_gaps(&self, log_gaps: &[f64], grad_gaps: &mut [f64]) -> f64 {
        let mut total = 0.0;
        for ((prior, &g), d) in self.gap_priors.iter().zip(log_gaps).zip(grad_gaps.iter_mut()) {
            let gap = g.exp();
            let (lp, d_gap) = prior.log_density_and_derivative(gap);
            total += lp + g;
            *d += d_gap * gap + 1.0;
        }
        total
    }
}

/// The cut points `c₀ = 0, c_j = c_{j−1} + e^{g_j}` from the log gaps.
pub fn cut_points(log_gaps: &[f64]) -> Vec<f64> {
    let mut cuts = Vec::with_capacity(log_gaps.len() + 1);
    cuts.push(0.0);
    let mut at = 0.0;
    for g in log_gaps {
        at += g.exp();
        cuts.push(at);
    }
    cuts
}

/// The log gaps of cut points `cuts[1..]` above the fixed `c₀ = 0`; `Err`
/// with the position (in `cuts[1..]`) of the first cut not above the one
/// before it.
pub fn log_gaps_of(cuts_above_first: &[f64]) -> Result<Vec<f64>, usize> {
    let mut below = 0.0;
    let mut out = Vec::with_capacity(cuts_above_first.len());
    for (j, &c) in cuts_above_first.iter().enumerate() {
        if !(c > below && c.is_finite()) {
            return Err(j);
        }
        out.push((c - below).ln());
        below = c;
    }
    Ok(out)
}

/// The derivative in each log gap from the derivatives in the cuts:
/// `∂/∂g_i = e^{g_i}·Σ_{j≥i} ∂/∂c_j` (added into `grad_gaps`).
fn gaps_from_cuts(log_gaps: &[f64], d_cuts: &[f64], grad_gaps: &mut [f64]) {
    let mut tail = 0.0;
    for i in (0..log_gaps.len()).rev() {
        tail += d_cuts[i + 1];
        grad_gaps[i] += log_gaps[i].exp() * tail;
    }
}

/// Rows summed a block at a time by the likelihood.
const LANES: usize = 8;

/// A cut standing for an infinite one: whatever a row's finite η, the
/// argument stays below −10²⁹⁹, whose softplus and logistic (through the
/// kernels' floor of `e^−700`) are 0 to far below a rounding unit of any
/// row's term.
const FAR: f64 = 1e300;

/// What a level's band of the latent line gives every row at that level:
/// its two cuts (±[`FAR`] for the open ends), `log(1 − e^{a−b})` with
/// `a − b = c_{k−1} − c_k` (0 for an end level) and `1/expm1(b − a)`
/// (0 for an end level), the part of both cut derivatives that does not
/// depend on the row.
#[derive(Debug, Clone, Copy)]
struct Band {
    lower: f64,
    upper: f64,
    log_width: f64,
    inverse: f64,
}

impl Band {
    fn of(level: usize, cuts: &[f64]) -> Band {
        let lower = level.checked_sub(1).map(|k| cuts[k]);
        let upper = cuts.get(level).copied();
        let (log_width, inverse) = match (lower, upper) {
            (Some(a), Some(b)) => {
                // d = e^(a−b) − 1 < 0; 1/expm1(b − a) = (1 + d)/(−d).
                let d = (a - b).exp_m1();
                ((-d).ln(), -(1.0 + d) / d)
            }
            _ => (0.0, 0.0),
        };
        Band { lower: lower.unwrap_or(-FAR), upper: upper.unwrap_or(FAR), log_width, inverse }
    }
}

/// One row's `log P(y = level)` at linear predictor `eta`, with its
/// derivatives in the lower cut's argument `a = c_{level−1} − η` and the
/// upper one's `b = c_level − η` (0 where that cut is infinite).
pub fn row_log_probability(level: usize, eta: f64, cuts: &[f64]) -> (f64, f64, f64) {
    let lower = level.checked_sub(1).map(|k| cuts[k] - eta);
    let upper = cuts.get(level).map(|c| c - eta);
    match (lower, upper) {
        (None, Some(b)) => {
            let (softplus_b, logistic_b) = softplus_and_logistic_one(-b);
            (-softplus_b, 0.0, logistic_b)
        }
        (Some(a), None) => {
            let (softplus_a, logistic_a) = softplus_and_logistic_one(a);
            (-softplus_a, -logistic_a, 0.0)
        }
        (Some(a), Some(b)) => {
            let (softplus_a, logistic_a) = softplus_and_logistic_one(a);
            let (softplus_b, logistic_b) = softplus_and_logistic_one(-b);
            // d = e^(a−b) − 1 < 0; 1/expm1(b − a) = (1 + d)/(−d).
            let d = (a - b).exp_m1();
            let inverse = -(1.0 + d) / d;
            (-softplus_b - softplus_a + (-d).ln(), -logistic_a - inverse, logistic_b + inverse)
        }
        (None, None) => (0.0, 0.0, 0.0),
    }
}

/// `(softplus(x), logistic(x))` from one exponential, `e^−|x|`.
fn softplus_and_logistic_one(x: f64) -> (f64, f64) {
    let e = (-x.abs()).exp();
    let logistic = if x >= 0.0 { 1.0 / (1.0 + e) } else { e / (1.0 + e) };
    (x.max(0.0) + e.ln_1p(), logistic)
}

/// The probability of every level (lowest first) at linear predictor
/// `eta` and cut points `cuts`: differences of the logistic cumulative
/// probabilities, each taken in the stable form of the module doc.
pub fn level_probabilities(eta: f64, cuts: &[f64]) -> Vec<f64> {
    (0..=cuts.len()).map(|k| row_log_probability(k, eta, cuts).0.exp()).collect()
}

/// The label of the cut below level `level` of outcome `outcome`:
/// `rating cut[good]`.
pub fn cut_label(outcome: &str, level: &str) -> String {
    format!("{outcome} cut[{level}]")
}

/// The cuts a data set's level shares put on the latent scale when every
/// row has the same linear predictor: `logit` of the share of rows at or
/// below each level (shares kept within [0.001, 0.999]), shifted so the
/// first is 0, with each gap at least 0.01. Returns the linear predictor
/// that puts the first cut there (`−logit` of the lowest level's share)
/// and the log gaps: the centre of the default priors and the start.
pub fn marginal_cuts(shares: &[f64]) -> (f64, Vec<f64>) {
    let logit = |p: f64| {
        let p = p.clamp(1e-3, 1.0 - 1e-3);
        (p / (1.0 - p)).ln()
    };
    let mut cumulative = 0.0;
    let mut raw = Vec::new();
    for share in &shares[..shares.len().saturating_sub(1)] {
        cumulative += share;
        raw.push(logit(cumulative));
    }
    let first = raw.first().copied().unwrap_or(0.0);
    let gaps = raw.windows(2).map(|w| (w[1] - w[0]).max(0.01).ln()).collect();
    (-first, gaps)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Source: the definition `P(y = k) = F(c_k − η) − F(c_{k−1} − η)`
    /// (McCullagh 1980, eq. 2.1) written plainly with F(x) = 1/(1 + e^−x)
    /// at moderate arguments; derivatives against central differences.
    #[test]
    fn row_matches_the_plain_definition() {
        let f = |x: f64| 1.0 / (1.0 + (-x).exp());
        let plain = |level: usize, eta: f64, cuts: &[f64]| {
            let upper = cuts.get(level).map_or(1.0, |c| f(c - eta));
            let lower = level.checked_sub(1).map_or(0.0, |k| f(cuts[k] - eta));
            (upper - lower).ln()
        };
        let cuts = [0.0, 0.7, 2.9];
        for level in 0..4 {
            for &eta in &[-2.0, -0.3, 0.4, 1.5, 3.7] {
                let (term, d_lower, d_upper) = row_log_probability(level, eta, &cuts);
                let want = plain(level, eta, &cuts);
                assert!((term - want).abs() < 1e-12 * (1.0 + want.abs()), "level {level} η {eta}: {term} vs {want}");
                let h = 1e-6;
                let fd_eta = (plain(level, eta + h, &cuts) - plain(level, eta - h, &cuts)) / (2.0 * h);
                assert!((-(d_lower + d_upper) - fd_eta).abs() < 1e-7, "level {level} η {eta}: d_eta");
                if level < 3 {
                    let mut up = cuts;
                    let mut down = cuts;
                    up[level] += h;
                    down[level] -= h;
                    let fd = (plain(level, eta, &up) - plain(level, eta, &down)) / (2.0 * h);
                    assert!((d_upper - fd).abs() < 1e-7, "level {level} η {eta}: d_upper {d_upper} vs {fd}");
                }
            }
        }
    }

    /// Source: with the cuts far from η the plain difference of two values
    /// near 1 loses every digit, but `F(b) − F(a)` for `a = 40, b = 41`
    /// equals `e^−40 − e^−41` to relative 1e-17 (both complements are
    /// `e^{−x}/(1 + e^{−x})`), so its log is `−40 + log(1 − e^−1)`.
    #[test]
    fn far_cuts_stay_accurate() {
        let (term, _, _) = row_log_probability(1, -40.0, &[0.0, 1.0]);
        let want = -40.0 + (1.0 - (-1f64).exp()).ln();
        assert!((term - want).abs() < 1e-12, "{term} vs {want}");
        let p = level_probabilities(3.0, &[0.0, 1.0, 2.5]);
        assert!((p.iter().sum::<f64>() - 1.0).abs() < 1e-14, "{p:?}");
    }

    /// Source: the likelihood's gradient in the coefficients and in the log
    /// gaps against central differences of its value.
    #[test]
    fn gradient_matches_central_differences() {
        let rows: Vec<f64> = (0..30 * 2).map(|k| if k % 2 == 0 { 1.0 } else { (k as f64 * 0.61).sin() * 1.7 }).collect();
        let outcome: Vec<usize> = (0..30).map(|i| (i * 5 + i / 3) % 4).collect();
        let data = GradedData::new(rows, 2, outcome, 4, vec![Prior::LogNormal { log_mean: 0.0, log_sd: 1.0 }; 2]);
        let value = |beta: &[f64], gaps: &[f64]| {
            let (mut a, mut b) = (vec![0.0; 2], vec![0.0; 2]);
            data.log_likelihood_and_gradient(beta, gaps, &mut a, &mut b) + data.log_prior_of_gaps(gaps, &mut b)
        };
        let (beta, gaps) = ([0.3, -0.6], [0.2, -0.4]);
        let (mut g_beta, mut g_gaps) = (vec![0.0; 2], vec![0.0; 2]);
        data.log_likelihood_and_gradient(&beta, &gaps, &mut g_beta, &mut g_gaps);
        data.log_prior_of_gaps(&gaps, &mut g_gaps);
        let h = 1e-6;
        for j in 0..2 {
            let (mut up, mut down) = (beta, beta);
            up[j] += h;
            down[j] -= h;
            let fd = (value(&up, &gaps) - value(&down, &gaps)) / (2.0 * h);
            assert!((g_beta[j] - fd).abs() < 1e-6 * (1.0 + fd.abs()), "β{j}: {} vs {fd}", g_beta[j]);
            let (mut up, mut down) = (gaps, gaps);
            up[j] += h;
            down[j] -= h;
            let fd = (value(&beta, &up) - value(&beta, &down)) / (2.0 * h);
            assert!((g_gaps[j] - fd).abs() < 1e-6 * (1.0 + fd.abs()), "g{j}: {} vs {fd}", g_gaps[j]);
        }
    }

    /// Source: the blocked likelihood against the row-by-row definition
    /// `log(F(b) − F(a))` written plainly (McCullagh 1980, eq. 2.1) at
    /// moderate arguments, over 8·3 + 5 rows (whole blocks and a remainder)
    /// and at a linear predictor far below every cut.
    #[test]
    fn blocked_rows_match_the_plain_definition() {
        let f = |x: f64| 1.0 / (1.0 + (-x).exp());
        let n = 8 * 3 + 5;
        let rows: Vec<f64> = (0..n * 2).map(|k| if k % 2 == 0 { 1.0 } else { (k as f64 * 0.37).cos() * 2.1 }).collect();
        let outcome: Vec<usize> = (0..n).map(|i| (i * 7 + i / 4) % 4).collect();
        let data = GradedData::new(rows.clone(), 2, outcome.clone(), 4, vec![Prior::LogNormal { log_mean: 0.0, log_sd: 1.0 }; 2]);
        let (beta, gaps) = ([0.2, 0.9], [0.1, -0.3]);
        let cuts = cut_points(&gaps);
        let plain: f64 = rows
            .chunks_exact(2)
            .zip(&outcome)
            .map(|(x, &y)| {
                let eta = x[0] * beta[0] + x[1] * beta[1];
                let upper = cuts.get(y).map_or(1.0, |c| f(c - eta));
                let lower = y.checked_sub(1).map_or(0.0, |k| f(cuts[k] - eta));
                (upper - lower).ln()
            })
            .sum();
        let got = data.log_likelihood_and_gradient(&beta, &gaps, &mut [0.0; 2], &mut [0.0; 2]);
        assert!((got - plain).abs() < 1e-11 * plain.abs(), "{got} vs {plain}");
        // η = −900: every row at the lowest level has probability 1 − e^−900 (log 0 in doubles).
        let low = GradedData::new(vec![1.0; 9], 1, vec![0; 9], 4, vec![Prior::LogNormal { log_mean: 0.0, log_sd: 1.0 }; 2]);
        let at_floor = low.log_likelihood_and_gradient(&[-900.0], &gaps, &mut [0.0], &mut [0.0; 2]);
        assert!(at_floor.abs() < 1e-300, "{at_floor}");
    }

    /// The AVX2 and AVX-512 builds of the likelihood give the plain build's
    /// bits (every product added on is a fused multiply-add, every sum in a
    /// fixed order), so a seed gives the same draws on any x86-64 processor.
    #[cfg(target_arch = "x86_64")]
    #[test]
    fn wide_registers_give_the_same_bits() {
        let n = 8 * 5 + 3;
        let rows: Vec<f64> = (0..n * 3).map(|k| ((k * 37 % 101) as f64 / 101.0 - 0.5) * 4.0).collect();
        let outcome: Vec<usize> = (0..n).map(|i| (i * 5 + i / 3) % 4).collect();
        let data = GradedData::new(rows, 3, outcome, 4, vec![Prior::LogNormal { log_mean: 0.0, log_sd: 1.0 }; 2]);
        let (beta, gaps) = ([0.4, -0.9, 0.3], [0.5, -0.2]);
        let run = |which: usize| {
            let (mut g_beta, mut g_gaps) = (vec![0.0; 3], vec![0.0; 2]);
            // SAFETY: each wide build runs only after its features were checked below.
            let value = match which {
                0 => data.evaluate(&beta, &gaps, &mut g_beta, &mut g_gaps),
                1 => unsafe { data.evaluate_avx2(&beta, &gaps, &mut g_beta, &mut g_gaps) },
                _ => unsafe { data.evaluate_avx512(&beta, &gaps, &mut g_beta, &mut g_gaps) },
            };
            (value.to_bits(), g_beta.iter().chain(&g_gaps).map(|g| g.to_bits()).collect::<Vec<_>>())
        };
        let plain = run(0);
        if std::is_x86_feature_detected!("avx2") && std::is_x86_feature_detected!("fma") {
            assert_eq!(plain, run(1));
        }
        if std::is_x86_feature_detected!("avx512f") && std::is_x86_feature_detected!("fma") {
            assert_eq!(plain, run(2));
        }
    }

    /// Source: `log_gaps_of` inverts `cut_points` (the map is a bijection
    /// onto increasing sequences), and refuses cuts out of order.
    #[test]
    fn gaps_and_cuts_round_trip() {
        let gaps = [-0.5, 1.2, 0.0];
        let cuts = cut_points(&gaps);
        let back = log_gaps_of(&cuts[1..]).expect("ordered");
        for (a, b) in gaps.iter().zip(&back) {
            assert!((a - b).abs() < 1e-12);
        }
        assert_eq!(log_gaps_of(&[0.5, 0.4]), Err(1));
        assert_eq!(log_gaps_of(&[-0.1]), Err(0));
    }
}
