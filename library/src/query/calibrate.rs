//! Checks of a model against its own assumptions: simulation-based
//! calibration over the prior (Talts, Betancourt, Simpson, Vehtari & Gelman
//! 2018), and prior / posterior predictive outcome sets (the numbers only;
//! plotting is elsewhere).
//!
//! Calibration: for each replication, parameters are drawn from the model's
//! priors, outcomes are simulated with the model's own design (and, for a
//! binomial model, its own numbers of trials; a bernoulli model gets yes/no
//! outcomes), the same
//! model (same priors: they must not move with the simulated data) is
//! refitted, and the rank of each true parameter among the posterior draws
//! is recorded. If fitting is right, ranks are uniform; a chi-square test on
//! binned ranks gives a p-value per parameter.

use std::sync::atomic::AtomicBool;

use rand::rngs::StdRng;
use rand::SeedableRng;
use serde::Serialize;
use statrs::distribution::{ChiSquared, ContinuousCDF};

use crate::draws::Draws;
use crate::infer::fit::{fit_model, Method};
use crate::limits::{bytes_for, check_memory};
use crate::model::family::correlated::{cholesky_from_partial, correlations_of, lower_times, pair_count, pair_index, partial_correlation_beta};
use crate::model::Model;
use crate::table::Table;

use super::error::QueryError;
use super::support::{parameter_rows, stream_seed};

/// Most posterior draws each rank is computed among (draws are thinned to this).
const RANK_DRAWS: usize = 99;
/// Bins of the rank histogram.
const BINS: usize = 10;
/// Fewest expected ranks per bin for the chi-square p-value (the usual rule
/// for Pearson's test, e.g. Cochran 1954, recalled).
pub const MIN_EXPECTED: f64 = 5.0;

/// Ranks and the uniformity test of one parameter.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CalibratedParameter {
    pub name: String,
    /// Rank of the true value among the posterior draws, each in `0..=draws_per_fit`.
    pub ranks: Vec<usize>,
    /// Chi-square statistic of the binned ranks and its p-value under
    /// uniform ranks; the p-value is `None` when some bin expects fewer than
    /// [`MIN_EXPECTED`] ranks, where the chi-square approximation fails.
    pub chi_square: f64,
    pub p_value: Option<f64>,
}

/// The result of a calibration run.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Calibration {
    pub model: String,
    pub method: String,
    pub seed: u64,
    /// Replications that were fitted (failed fits are counted in `failures`).
    pub reps: usize,
    pub failures: usize,
    pub draws_per_fit: usize,
    pub bins: usize,
    pub parameters: Vec<CalibratedParameter>,
    pub notes: Vec<String>,
}

/// Simulation-based calibration of `model` with `reps` replications, each
/// refitted with `method` (its seed replaced by a per-replication stream of
/// `seed`).
pub fn calibrate(model: &Model, reps: usize, method: &Method, seed: u64, cancel: &AtomicBool) -> Result<Calibration, QueryError> {
    calibrate_with_progress(model, reps, method, seed, cancel, &|_| {})
}

/// [`calibrate`], calling `progress(r)` as replication `r` (0-based) starts.
pub fn calibrate_with_progress(
    model: &Model,
    reps: usize,
    method: &Method,
    seed: u64,
    cancel: &AtomicBool,
    progress: &(dyn Fn(usize) + Sync),
) -> Result<Calibration, QueryError> {
    let names = model.parameter_names();
    let place = format!("calibrate {}", model.name());
    check_memory(&format!("{place}: {reps} replications of {} parameters", names.len()), bytes_for(&[reps, names.len().max(1)]))
        .map_err(QueryError::request)?;
    let rows = model.fitted_rows();
    let mut ranks = vec![Vec::with_capacity(reps); names.len()];
    let mut failed: Vec<(usize, String)> = Vec::new();
    let mut draws_per_fit = 0;
    for r in 0..reps {
        QueryError::stop_if(cancel, &place)?;
        progress(r);
        let mut rng = StdRng::seed_from_u64(stream_seed(seed, r as u64, 3));
        let truth = prior_draw(model, &mut rng)?;
        let y = model.outcome_draw(&truth, &rows, &mut rng)?;
        let refit = model.with_outcome(y)?;
        let rep_method = reseeded(method, stream_seed(seed, r as u64, 4));
        let fit = match fit_model(&refit, &rep_method, cancel, &|_| {}) {
            Ok(fit) => fit,
            Err(e) => {
                failed.push((r + 1, e.to_string()));
                continue;
            }
        };
        let kept = thinned(&parameter_rows(model, &fit.draws)?);
        draws_per_fit = kept.len();
        for (j, slot) in ranks.iter_mut().enumerate() {
            slot.push(kept.iter().filter(|row| row[j] < truth[j]).count());
        }
    }
    let parameters: Vec<CalibratedParameter> = names
        .iter()
        .zip(ranks)
        .map(|(name, ranks)| {
            let (chi_square, p_value) = uniformity(&ranks, draws_per_fit);
            CalibratedParameter { name: name.clone(), ranks, chi_square, p_value }
        })
        .collect();
    let mut notes = vec![format!(
        "ranks among {draws_per_fit} posterior draws, {BINS} bins; a p-value far below 0.01 for a parameter says its posterior is off"
    )];
    let failures = failed.len();
    if failures > 0 {
        notes.push(failure_note(reps, &failed));
    }
    if parameters.iter().any(|p| p.p_value.is_none()) {
        notes.push(format!(
            "with {} replications some of the {BINS} bins expect fewer than {MIN_EXPECTED} ranks, so no chi-square \
             p-value is computed; read the ranks, or run at least {} replications",
            reps - failures,
            (MIN_EXPECTED * BINS as f64).ceil() as usize + 1
        ));
    }
    Ok(Calibration {
        model: model.name().to_string(),
        method: method.describe(),
        seed,
        reps: reps - failures,
        failures,
        draws_per_fit,
        bins: BINS,
        parameters,
        notes,
    })
}

/// Distinct reasons shown for failed refits.
const REASONS_SHOWN: usize = 3;

/// How many refits failed and why: each distinct reason once, with the
/// replications it stopped (the first few of them).
fn failure_note(reps: usize, failed: &[(usize, String)]) -> String {
    let mut reasons: Vec<(&str, Vec<usize>)> = Vec::new();
    for (rep, reason) in failed {
        match reasons.iter_mut().find(|(r, _)| r == reason) {
            Some((_, reps)) => reps.push(*rep),
            None => reasons.push((reason, vec![*rep])),
        }
    }
    let mut said: Vec<String> = reasons
        .iter()
        .take(REASONS_SHOWN)
        .map(|(reason, which)| {
            let listed: Vec<String> = which.iter().take(5).map(usize::to_string).collect();
            let more = if which.len() > 5 { format!(" and {} more", which.len() - 5) } else { String::new() };
            let label = if which.len() == 1 { "replication" } else { "replications" };
            format!("{label} {}{more}: {reason}", listed.join(", "))
        })
        .collect();
    if reasons.len() > REASONS_SHOWN {
        said.push(format!("{} other reasons", reasons.len() - REASONS_SHOWN));
    }
    format!(
        "{} of {reps} refits failed and were left out ({}); the ranks of the rest may be biased",
        failed.len(),
        said.join("; ")
    )
}

/// One draw of every parameter from its prior, in parameter order. A
/// pooled group draws its spread from the spread's prior, then each
/// departure from `normal(0, spread)`; a group with varying slopes draws
/// each slope's spread, the correlation matrix from its LKJ prior (through
/// independent partial correlations, `model::family::correlated`), and
/// each level's departures jointly.
pub fn prior_draw(model: &Model, rng: &mut StdRng) -> Result<Vec<f64>, QueryError> {
    let names = model.parameter_names();
    let sample = |name: &String, rng: &mut StdRng| -> Result<f64, QueryError> {
        let used = model.priors_used().iter().find(|u| u.parameters.contains(name)).ok_or_else(|| {
            QueryError::request(format!("model {}: parameter {name} has no prior", model.name()))
        })?;
        Ok(used.prior.sample(rng))
    };
    let first_group = model.first_group_index();
    let steps = model.step_terms();
    let in_steps = |j: usize| steps.iter().any(|t| (t.first..t.first + t.steps).contains(&j));
    let mut values: Vec<f64> = names[..first_group]
        .iter()
        .enumerate()
        .map(|(j, n)| if in_steps(j) { Ok(0.0) } else { sample(n, rng) })
        .collect::<Result<_, QueryError>>()?;
    for term in steps {
        let effects = step_effects_draw(term, rng).map_err(|e| QueryError::request(format!("model {}: {e}", model.name())))?;
        values[term.first..term.first + term.steps].copy_from_slice(&effects);
    }
    let mut at = first_group;
    for group in model.pooled_groups() {
        let (n, k) = (group.levels.len(), 1 + group.slopes.len());
        let spreads: Vec<f64> = (0..k).map(|e| sample(&names[at + e * (1 + n)], rng)).collect::<Result<_, _>>()?;
        let l = lkj_cholesky_draw(model, k, rng)?;
        let mut departures = vec![vec![0.0; n]; k];
        for level in 0..n {
            let z: Vec<f64> = (0..k).map(|_| rand_distr::Distribution::sample(&rand_distr::StandardNormal, rng)).collect();
            for (e, mixed) in lower_times(&l, &z, k).into_iter().enumerate() {
                departures[e][level] = spreads[e] * mixed;
            }
        }
        for (spread, run) in spreads.iter().zip(&departures) {
            values.push(*spread);
            values.extend_from_slice(run);
        }
        values.extend(correlations_of(&l, k));
        at += k * (1 + n) + pair_count(k);
    }
    Ok(model.from_prior_values(values))
}

/// A steps term's effects drawn from its priors: the whole effect from its
/// normal prior times shares from the symmetric Dirichlet, drawn as
/// independent gamma(α, 1) values over their sum (the Dirichlet's gamma
/// representation, e.g. Devroye 1986, Non-Uniform Random Variate
/// Generation, §XI.4 (recalled)).
fn step_effects_draw(term: &crate::model::steps::StepTerm, rng: &mut StdRng) -> Result<Vec<f64>, String> {
    let whole = term.whole_prior.sample(rng);
    let gamma = rand_distr::Gamma::new(term.concentration, 1.0).map_err(|e| format!("the steps' prior cannot be drawn ({e})"))?;
    let raw: Vec<f64> = (0..term.steps).map(|_| rand_distr::Distribution::sample(&gamma, rng)).collect();
    let sum: f64 = raw.iter().sum();
    Ok(raw.iter().map(|g| whole * g / sum).collect())
}

/// The Cholesky factor of a `k × k` correlation matrix drawn from the
/// model's lkj(η): partial correlation `(i, j)` is `2B − 1` with
/// `B ~ beta(βⱼ, βⱼ)`, `βⱼ = η + (k − 2 − j)/2` (Lewandowski, Kurowicka &
/// Joe 2009, §2.4 and §3.2). The identity for `k = 1`.
fn lkj_cholesky_draw(model: &Model, k: usize, rng: &mut StdRng) -> Result<Vec<f64>, QueryError> {
    let eta = model.correlation_lkj();
    let mut z = vec![0.0; pair_count(k)];
    for i in 1..k {
        for j in 0..i {
            let b = partial_correlation_beta(eta, k, j);
            let beta = rand_distr::Beta::new(b, b)
                .map_err(|e| QueryError::request(format!("model {}: lkj({eta}) cannot be drawn ({e})", model.name())))?;
            z[pair_index(i, j)] = 2.0 * rand_distr::Distribution::sample(&beta, rng) - 1.0;
        }
    }
    Ok(cholesky_from_partial(&z, k))
}

/// `method` with its seed replaced.
fn reseeded(method: &Method, seed: u64) -> Method {
    match method {
        Method::Laplace { draws, .. } => Method::Laplace { draws: *draws, seed },
        Method::Nuts(s) => Method::Nuts(crate::infer::nuts::NutsSettings { seed, ..s.clone() }),
    }
}

/// At most [`RANK_DRAWS`] rows, evenly spaced (thinning reduces the
/// autocorrelation of sampler draws, which would bend the rank histogram).
fn thinned(rows: &[Vec<f64>]) -> Vec<Vec<f64>> {
    if rows.len() <= RANK_DRAWS {
        return rows.to_vec();
    }
    (0..RANK_DRAWS).map(|k| rows[k * rows.len() / RANK_DRAWS].clone()).collect()
}

/// Chi-square statistic of ranks (each in `0..=draws`) binned into [`BINS`]
/// bins, and its p-value, with expected counts proportional to the number of
/// rank values each bin holds; no p-value when a bin expects fewer than
/// [`MIN_EXPECTED`].
fn uniformity(ranks: &[usize], draws: usize) -> (f64, Option<f64>) {
    let values = draws + 1;
    let bins = BINS.min(values);
    if ranks.is_empty() || bins < 2 {
        return (f64::NAN, None);
    }
    let mut observed = vec![0.0; bins];
    for &r in ranks {
        observed[(r * bins / values).min(bins - 1)] += 1.0;
    }
    let mut width = vec![0.0; bins];
    (0..values).for_each(|v| width[v * bins / values] += 1.0);
    let n = ranks.len() as f64;
    let statistic: f64 = observed.iter().zip(&width).map(|(o, w)| {
        let e = n * w / values as f64;
        (o - e) * (o - e) / e
    }).sum();
    let fewest = width.iter().fold(f64::INFINITY, |m, w| m.min(n * w / values as f64));
    if fewest < MIN_EXPECTED {
        return (statistic, None);
    }
    let p = ChiSquared::new((bins - 1) as f64).map(|d| 1.0 - d.cdf(statistic)).ok();
    (statistic, p)
}

/// Observed outcomes and replicated outcome sets.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PredictiveSets {
    pub model: String,
    /// "prior" or "posterior".
    pub kind: String,
    pub seed: u64,
    pub observed: Vec<f64>,
    /// One simulated outcome set per entry, one value per row of the table.
    pub replicated: Vec<Vec<f64>>,
    /// Per observed row, whether its follow-up was cut short (a time model
    /// with a `cut short by` column, whose simulated sets are cut the same
    /// way, `Model::cut_like_the_data`).
    pub cut_short: Option<Vec<bool>>,
}

/// `sets` outcome sets simulated from parameters drawn from the priors, for
/// the rows of `table` (the model's own table).
pub fn prior_predictive(model: &Model, table: &Table, sets: usize, seed: u64) -> Result<PredictiveSets, QueryError> {
    model.refuse_bounded_times("`prior check`")?;
    let rows = model.new_rows(table)?;
    let replicated = (0..sets)
        .map(|s| {
            let mut rng = StdRng::seed_from_u64(stream_seed(seed, s as u64, 5));
            let theta = prior_draw(model, &mut rng)?;
            Ok(model.cut_like_the_data(model.outcome_draw(&theta, &rows, &mut rng)?).0)
        })
        .collect::<Result<_, QueryError>>()?;
    let (observed, cut_short) = (model.outcome_values().to_vec(), model.cut_short_rows());
    Ok(PredictiveSets { model: model.name().into(), kind: "prior".into(), seed, observed, replicated, cut_short })
}

/// `sets` outcome sets simulated at posterior draws spread evenly through
/// `draws`, for the rows of `table` (the model's own table).
pub fn posterior_predictive(model: &Model, draws: &Draws, table: &Table, sets: usize, seed: u64) -> Result<PredictiveSets, QueryError> {
    model.refuse_bounded_times("`check`")?;
    let rows = model.new_rows(table)?;
    let params = parameter_rows(model, draws)?;
    if params.is_empty() {
        return Err(QueryError::request(format!("model {} has no posterior draws; fit it first", model.name())));
    }
    let sets = sets.min(params.len());
    let replicated = (0..sets)
        .map(|s| {
            let mut rng = StdRng::seed_from_u64(stream_seed(seed, s as u64, 6));
            Ok(model.cut_like_the_data(model.outcome_draw(&params[s * params.len() / sets], &rows, &mut rng)?).0)
        })
        .collect::<Result<_, QueryError>>()?;
    let (observed, cut_short) = (model.outcome_values().to_vec(), model.cut_short_rows());
    Ok(PredictiveSets { model: model.name().into(), kind: "posterior".into(), seed, observed, replicated, cut_short })
}

#[cfg(test)]
mod tests {
    use super::failure_note;

    #[test]
    fn a_failed_refit_note_gives_each_reason_once_with_its_replications() {
        let failed = vec![
            (3, "the step size fell to zero".to_string()),
            (7, "the mode search did not converge".to_string()),
            (9, "the step size fell to zero".to_string()),
        ];
        let note = failure_note(30, &failed);
        assert!(note.starts_with("3 of 30 refits failed"), "{note}");
        assert!(note.contains("replications 3, 9: the step size fell to zero"), "{note}");
        assert!(note.contains("replication 7: the mode search did not converge"), "{note}");
        assert_eq!(note.matches("the step size fell to zero").count(), 1, "{note}");
    }
}
