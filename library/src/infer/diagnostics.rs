//! Convergence diagnostics of a multi-chain run, and the warnings a scientist
//! reads after a fit.
//!
//! The definitions follow Vehtari, Gelman, Simpson, Carpenter & Bürkner
//! (2021), "Rank-normalization, folding, and localization: an improved R-hat
//! for assessing convergence of MCMC", *Bayesian Analysis* 16(2):
//!
//! * chains are split in halves (the middle draw of an odd-length chain is
//!   left out), so a trend inside one chain shows up as disagreement;
//! * draws are rank-normalised: pooled ranks `r` (ties averaged) become
//!   `Φ⁻¹((r − 3/8) / (S + 1/4))` (the paper's §4.1, Blom's offset);
//! * R-hat is the larger of the bulk value (rank-normalised draws) and the
//!   tail value (rank-normalised draws folded about the median);
//! * bulk ESS is the effective sample size of the rank-normalised split
//!   chains; tail ESS is the smaller of the ESS of the indicators
//!   `θ ≤ q₀.₀₅` and `θ ≤ q₀.₉₅`;
//! * the ESS uses the multi-chain autocorrelation with Geyer's initial
//!   monotone sequence, from direct sums over the lags it needs, and, as
//!   the paper's §3.2 prescribes for antithetic chains, averages the sum
//!   truncated at the usual odd lag with the one running to the next even
//!   lag: `τ = −1 + 2 Σ P_k + ρ̂_{2k+2}`.
//!
//! Every function takes one slice of draws per chain, so it serves any
//! sampler. Warnings are returned as data (sentences), never printed here.
//! They are computed on the same draws as the parameter table: the
//! constrained parameters (`spread`, not `log(spread)`), so a warning and
//! the table never disagree (tail R-hat is not invariant to the change).

use statrs::distribution::{ContinuousCDF, Normal};

use crate::draws::summary::quantile;
use crate::infer::nuts::NutsRun;

/// R-hat above this is reported.
pub const RHAT_LIMIT: f64 = 1.01;
/// Bulk ESS below this is reported.
pub const ESS_BULK_LIMIT: f64 = 400.0;
/// Tail ESS below this is reported: the default interval's ends are tail
/// quantiles, and the paper (§5) asks the same 400 of them.
pub const ESS_TAIL_LIMIT: f64 = 400.0;

/// The three diagnostics of one parameter.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ParamDiagnostics {
    /// Rank-normalised split R-hat: the larger of bulk and tail.
    pub rhat: f64,
    /// Bulk effective sample size.
    pub ess_bulk: f64,
    /// Tail effective sample size.
    pub ess_tail: f64,
}

/// R-hat, bulk ESS and tail ESS of one parameter. A parameter whose draws
/// are all equal gets `NaN` for each (nothing can be said of its mixing).
pub fn diagnose(chains: &[&[f64]]) -> ParamDiagnostics {
    ParamDiagnostics { rhat: rhat(chains), ess_bulk: ess_bulk(chains), ess_tail: ess_tail(chains) }
}

/// Rank-normalised split R-hat: `max(bulk R-hat, tail R-hat)`.
pub fn rhat(chains: &[&[f64]]) -> f64 {
    let halves = split_chains(chains);
    if halves.is_empty() || all_equal(&halves) {
        return f64::NAN;
    }
    let bulk = plain_rhat(&rank_normalise(&halves));
    let median = quantile(&pooled(&halves), 0.5);
    let folded: Vec<Vec<f64>> =
        halves.iter().map(|c| c.iter().map(|x| (x - median).abs()).collect()).collect();
    let tail = plain_rhat(&rank_normalise(&folded));
    bulk.max(tail)
}

/// Bulk effective sample size: the ESS of the rank-normalised split chains.
pub fn ess_bulk(chains: &[&[f64]]) -> f64 {
    let halves = split_chains(chains);
    if halves.is_empty() || all_equal(&halves) {
        return f64::NAN;
    }
    ess(&rank_normalise(&halves))
}

/// Tail effective sample size: the smaller of the ESS of the indicators of
/// the draws at or below the 5% and the 95% quantile.
pub fn ess_tail(chains: &[&[f64]]) -> f64 {
    let halves = split_chains(chains);
    if halves.is_empty() || all_equal(&halves) {
        return f64::NAN;
    }
    let all = pooled(&halves);
    let indicator_ess = |p: f64| {
        let q = quantile(&all, p);
        let ind: Vec<Vec<f64>> = halves
            .iter()
            .map(|c| c.iter().map(|&x| if x <= q { 1.0 } else { 0.0 }).collect())
            .collect();
        ess(&ind)
    };
    indicator_ess(0.05).min(indicator_ess(0.95))
}

/// Each chain cut into its first and second half; the middle draw of an
/// odd-length chain is dropped. Chains shorter than 4 draws give no halves.
fn split_chains(chains: &[&[f64]]) -> Vec<Vec<f64>> {
    let mut halves = Vec::with_capacity(2 * chains.len());
    for chain in chains {
        let n = chain.len();
        if n < 4 {
            return Vec::new();
        }
        let half = n / 2;
        halves.push(chain[..half].to_vec());
        halves.push(chain[n - half..].to_vec());
    }
    halves
}

fn pooled(chains: &[Vec<f64>]) -> Vec<f64> {
    chains.iter().flatten().copied().collect()
}

fn all_equal(chains: &[Vec<f64>]) -> bool {
    let first = chains[0][0];
    chains.iter().flatten().all(|&x| x == first)
}

/// Pooled ranks (ties get the average of their ranks) mapped through the
/// normal quantile function with the Blom offset, chain shape kept.
fn rank_normalise(chains: &[Vec<f64>]) -> Vec<Vec<f64>> {
    let all = pooled(chains);
    let s = all.len();
    let mut order: Vec<usize> = (0..s).collect();
    order.sort_by(|&a, &b| all[a].total_cmp(&all[b]));
    let mut ranks = vec![0.0; s];
    let mut i = 0;
    while i < s {
        let mut j = i;
        while j + 1 < s && all[order[j + 1]] == all[order[i]] {
            j += 1;
        }
        let average = (i + j) as f64 / 2.0 + 1.0;
        for &k in &order[i..=j] {
            ranks[k] = average;
        }
        i = j + 1;
    }
    let normal = Normal::standard();
    let z: Vec<f64> =
        ranks.iter().map(|r| normal.inverse_cdf((r - 0.375) / (s as f64 + 0.25))).collect();
    let mut out = Vec::with_capacity(chains.len());
    let mut at = 0;
    for chain in chains {
        out.push(z[at..at + chain.len()].to_vec());
        at += chain.len();
    }
    out
}

fn mean(x: &[f64]) -> f64 {
    x.iter().sum::<f64>() / x.len() as f64
}

/// Unbiased variance (divisor `n − 1`).
fn variance(x: &[f64]) -> f64 {
    let m = mean(x);
    x.iter().map(|v| (v - m) * (v - m)).sum::<f64>() / (x.len() - 1) as f64
}

/// Within-chain variance `W`, and the pooled estimate
/// `var⁺ = (n − 1)/n · W + B/n` with `B/n` the variance of the chain means.
fn variance_parts(chains: &[Vec<f64>]) -> (f64, f64) {
    let n = chains[0].len() as f64;
    let w = mean(&chains.iter().map(|c| variance(c)).collect::<Vec<_>>());
    let means: Vec<f64> = chains.iter().map(|c| mean(c)).collect();
    let b_over_n = if chains.len() > 1 { variance(&means) } else { 0.0 };
    (w, (n - 1.0) / n * w + b_over_n)
}

/// The classic potential scale reduction `sqrt(var⁺ / W)`.
fn plain_rhat(chains: &[Vec<f64>]) -> f64 {
    let (w, var_plus) = variance_parts(chains);
    (var_plus / w).sqrt()
}

/// Autocovariance of one chain at `lag`, divisor `n`.
fn autocovariance(chain: &[f64], chain_mean: f64, lag: usize) -> f64 {
    let n = chain.len();
    chain[..n - lag]
        .iter()
        .zip(&chain[lag..])
        .map(|(a, b)| (a - chain_mean) * (b - chain_mean))
        .sum::<f64>()
        / n as f64
}

/// Multi-chain effective sample size with Geyer's initial monotone
/// sequence.
///
/// `ρ̂_t = 1 − (W − mean_m(ρ̂_{t,m} s²_m)) / var⁺`, where `ρ̂_{t,m} s²_m` is
/// chain `m`'s autocorrelation at lag `t` times its unbiased variance. Pairs
/// `P_k = ρ̂_{2k} + ρ̂_{2k+1}` are summed while above 0, each capped by the
/// one before; `τ = −1 + 2 Σ P_k + ρ̂_{2k+2}` (the last term averages the
/// sums ending at the odd and at the next even lag, when that lag exists),
/// and `ESS = S / τ`, capped at `S log₁₀ S` as the paper advises.
fn ess(chains: &[Vec<f64>]) -> f64 {
    let n = chains[0].len();
    let s = (n * chains.len()) as f64;
    let (w, var_plus) = variance_parts(chains);
    if var_plus.is_nan() || var_plus <= 0.0 {
        return f64::NAN;
    }
    let means: Vec<f64> = chains.iter().map(|c| mean(c)).collect();
    let scale = n as f64 / (n - 1) as f64;
    let rho = |t: usize| {
        let acov = mean(
            &chains.iter().zip(&means).map(|(c, &m)| autocovariance(c, m, t)).collect::<Vec<_>>(),
        );
        1.0 - (w - acov * scale) / var_plus
    };
    let mut sum = 0.0;
    let mut previous = f64::INFINITY;
    let mut k = 0;
    while 2 * k + 1 < n {
        let pair = rho(2 * k) + rho(2 * k + 1);
        // Geyer's initial positive sequence: keep pairs while P_k > 0.
        if pair.is_nan() || pair <= 0.0 {
            break;
        }
        let pair = pair.min(previous);
        sum += pair;
        previous = pair;
        k += 1;
    }
    // k is now the first pair not summed; its even lag closes the sum.
    let last = if 2 * k < n { rho(2 * k) } else { 0.0 };
    let tau = -1.0 + 2.0 * sum + if last.is_nan() { 0.0 } else { last };
    (s / tau).min(s * s.log10())
}

/// The diagnostics of every parameter of a NUTS run, in parameter order.
pub fn diagnose_run(run: &NutsRun) -> Vec<ParamDiagnostics> {
    let dim = run.draws.first().and_then(|c| c.first()).map_or(0, Vec::len);
    (0..dim)
        .map(|p| {
            let columns: Vec<Vec<f64>> =
                run.draws.iter().map(|c| c.iter().map(|d| d[p]).collect()).collect();
            let slices: Vec<&[f64]> = columns.iter().map(Vec::as_slice).collect();
            diagnose(&slices)
        })
        .collect()
}

/// Sentences for a scientist about anything doubtful in a run: divergent
/// trajectories, parameters that never moved, R-hat above 1.01, bulk or
/// tail ESS below 400, and trajectories cut at the doubling limit.
/// `names` labels the parameters and `diagnostics` holds their diagnostics
/// on the scale the parameter table shows, both in parameter order; an
/// empty list means the run looks sound.
pub fn run_warnings(run: &NutsRun, names: &[String], diagnostics: &[ParamDiagnostics], max_depth: u32) -> Vec<String> {
    let total: usize = run.draws.iter().map(Vec::len).sum();
    let mut out = Vec::new();
    let divergent: usize = run.divergences.iter().sum();
    if divergent > 0 {
        out.push(format!(
            "{divergent} of {total} draws, in {}, ended a trajectory whose energy blew up: the \
             posterior bends there more sharply than the sampler's steps can follow, so that \
             region may be under-visited and the summaries pulled away from it. Treat the table \
             as provisional: raise `acceptance` in `fit … with nuts` (nearer 1 \
             means smaller steps), give the slopes firmer priors, or drop a term that nearly \
             repeats another, and fit again until none is left.",
            chains_phrase(&run.divergences)
        ));
    }
    let label = |p: usize| names.get(p).cloned().unwrap_or_else(|| format!("parameter {}", p + 1));
    for (p, d) in diagnostics.iter().enumerate() {
        out.extend(parameter_warnings(&label(p), d));
    }
    let hits: usize = run.depth_hits.iter().sum();
    if hits > 0 {
        out.push(format!(
            "{hits} of {total} draws, in {}, stopped at the longest trajectory allowed ({max_depth} \
             doublings). Such draws are still sound, but each moves the chain less far \
             than it might, so mixing is slow and ESS drops. If ESS is low too, allow more \
             `doublings` in `fit … with nuts`, or give predictors units that keep their values near 1 \
             (metres rather than millimetres).",
            chains_phrase(&run.depth_hits)
        ));
    }
    out
}

/// The warnings about one parameter's diagnostics (its label given).
pub fn parameter_warnings(label: &str, d: &ParamDiagnostics) -> Vec<String> {
    if d.rhat.is_nan() && d.ess_bulk.is_nan() {
        return vec![format!(
            "Every draw of {label} is the same value: the sampler never moved it, so neither R-hat \
             nor ESS can be computed and its summary is not a posterior. Check the model for a \
             parameter the data and priors do not constrain, and the starting point."
        )];
    }
    let mut out = Vec::new();
    if d.rhat > RHAT_LIMIT {
        out.push(format!(
            "R-hat of {label} is {:.3}, above {RHAT_LIMIT}: its chains have not settled on one \
             posterior; at least one still sits apart from the others. `plot NAME mixing` shows \
             which; then fit again with a longer `settle` and more `draws` in `fit … with nuts`.",
            d.rhat
        ));
    }
    if d.ess_bulk < ESS_BULK_LIMIT {
        out.push(format!(
            "Bulk ESS of {label} is {:.0}, below {ESS_BULK_LIMIT:.0}: its draws follow one another \
             so closely that they count for few independent ones, and its mean and interval \
             carry more Monte Carlo error than their digits suggest. Fit again with more draws; \
             if the chains still crawl, look for a term that repeats another.",
            d.ess_bulk
        ));
    }
    if d.ess_tail < ESS_TAIL_LIMIT {
        out.push(format!(
            "Tail ESS of {label} is {:.0}, below {ESS_TAIL_LIMIT:.0}: few independent draws fall \
             near the ends of its interval, so those ends may shift on a refit. Fit again with \
             more draws before quoting them.",
            d.ess_tail
        ));
    }
    out
}

/// "chain 2" or "chains 1, 3", numbered from 1 for the reader.
fn chains_phrase(counts: &[usize]) -> String {
    let which: Vec<String> = counts
        .iter()
        .enumerate()
        .filter(|(_, &c)| c > 0)
        .map(|(i, _)| (i + 1).to_string())
        .collect();
    match which.len() {
        1 => format!("chain {}", which[0]),
        _ => format!("chains {}", which.join(", ")),
    }
}
