//! Recovery checks: refit a model on synthetic data and lay its posterior
//! intervals beside the true values implied by the mechanisms.
//!
//! A parameter has a true value when the outcome's mechanism, on its link
//! scale, is exactly a linear combination of the model's design columns on
//! the generated rows (checked by least squares: the residual must vanish).
//! Then the coefficients of that combination are the truth — slopes,
//! intercepts at the centres, per-level intercepts and offsets alike — and
//! a constant sd of a normal mechanism is the true spread. A hidden cause,
//! a missing parent or a non-linear term leaves a residual, and the check
//! says the coefficients have no single true value instead of guessing.
//!
//! A pooled group `pooled c` has a truth when the outcome's mechanism draws
//! `departure(c, spread)`: the stated spread is the group's true spread, the
//! departures the simulation drew are the levels' true departures, and they
//! are taken out of the link scale before the coefficients are solved for.

use std::sync::atomic::AtomicBool;

use nalgebra::{DMatrix, DVector};
use serde::Serialize;

use crate::infer::fit::{fit_model, Fit, Method};
use crate::infer::nuts::Progress;
use crate::model::family::survival::TimeForm;
use crate::model::terms::GroupTerm;
use crate::model::{Family, Model, ModelSpec};

use super::error::QueryError;
use super::mechanism::{stated_correlation, Mechanism};
use super::simulate::{Generated, GroupDraw, Simulation};
use super::support::{interval_words, ContrastSummary};

/// Largest residual, relative to the spread of the truth, that still counts
/// as an exact linear combination.
const EXACT: f64 = 1e-7;

/// One parameter of a recovery check.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RecoveryParameter {
    pub name: String,
    /// The value implied by the mechanisms, when one exists.
    pub truth: Option<f64>,
    pub mean: f64,
    pub lower: f64,
    pub upper: f64,
    /// Whether the interval holds the truth.
    pub covered: Option<bool>,
}

/// A recovery check of one model on one simulation.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Recovery {
    pub model: String,
    pub simulation: String,
    pub method: String,
    pub mass: f64,
    pub interval: String,
    pub parameters: Vec<RecoveryParameter>,
    pub notes: Vec<String>,
}

/// Build `spec` on the data of `simulation`, fit it with `method`, and
/// compare each parameter with its true value.
pub fn recover(
    spec: &ModelSpec,
    simulation: &Simulation,
    method: &Method,
    cancel: &AtomicBool,
    mass: f64,
) -> Result<Recovery, QueryError> {
    recover_fitted(spec, simulation, method, cancel, mass, &|_| {}).map(|(recovery, _, _)| recovery)
}

/// [`recover`], reporting the sampler's progress, and returning the model
/// built on the synthetic table and its fit beside the check (for contrasts
/// against true intervention effects).
pub fn recover_fitted(
    spec: &ModelSpec,
    simulation: &Simulation,
    method: &Method,
    cancel: &AtomicBool,
    mass: f64,
    progress: &(dyn Fn(Progress) + Sync),
) -> Result<(Recovery, Model, Fit), QueryError> {
    let generated = simulation.generate_default()?;
    let table = simulation.observed_table(&generated)?;
    let model = Model::build(spec, &table)?;
    let fit = fit_model(&model, method, cancel, progress)
        .map_err(|e| QueryError::Fit { what: format!("model {} on {}", spec.name, simulation.name), message: e.to_string() })?;
    let mut notes = fit.warnings.clone();
    notes.extend(follow_up_notes(&model, simulation, &generated));
    let truths = true_parameters(&model, simulation, &generated, &mut notes);
    let parameters = model
        .parameter_names()
        .iter()
        .enumerate()
        .map(|(j, name)| {
            let s = ContrastSummary::of(fit.draws.require(name)?, mass)?;
            let truth = truths.as_ref().and_then(|t| t.get(j).copied().flatten());
            Ok(RecoveryParameter {
                name: name.clone(),
                truth,
                mean: s.mean,
                lower: s.lower,
                upper: s.upper,
                covered: truth.map(|t| s.lower <= t && t <= s.upper),
            })
        })
        .collect::<Result<Vec<_>, QueryError>>()?;
    let recovery = Recovery {
        model: spec.name.clone(),
        simulation: simulation.name.clone(),
        method: method.describe(),
        mass,
        interval: interval_words(mass),
        parameters,
        notes,
    };
    Ok((recovery, model, fit))
}

/// What the outcome's follow-up rule did to the rows, and whether the
/// model reads the column it wrote: a time model without `cut short by`
/// takes every follow-up end for an event, which pulls its times down.
fn follow_up_notes(model: &Model, simulation: &Simulation, generated: &Generated) -> Vec<String> {
    let Some(cut) = simulation.cut_short(generated).into_iter().find(|c| c.node == model.outcome_name()) else { return Vec::new() };
    let read = matches!(model.family(), Family::Times { cut_short: Some(c), .. } if *c == cut.column);
    let mut notes = vec![format!(
        "{} of {} rows of {} were cut short by the simulation's follow-up rule (column {})",
        cut.rows, cut.of, cut.node, cut.column
    )];
    if !read && cut.rows > 0 {
        notes.push(format!(
            "warning: model {} does not read {col}, so it takes each follow-up end for an event and its times come out \
             too short; add `cut short by {col}` to its family line",
            model.name(),
            col = cut.column
        ));
    }
    if let Some(looks) = simulation.looks_of(model.outcome_name()) {
        let reads = matches!(model.family(), Family::Times { came_by: Some(c), .. } if *c == looks.column);
        notes.push(format!(
            "the other rows' events were seen only between looks {} apart: {} holds the last look before the event \
             and {} the first at or after it",
            crate::model::prior::short_number(looks.gap),
            cut.node,
            looks.column
        ));
        if !reads {
            notes.push(format!(
                "warning: model {} does not read {col}, so it takes each last look before an event for the event and \
                 its times come out too short; add `came by {col}` to its family line",
                model.name(),
                col = looks.column
            ));
        }
    }
    notes
}

/// The true cuts of a graded model above its first (fixed at 0): the
/// mechanism's cuts less its first; `None` each when the mechanism has
/// another number of levels.
fn cut_truths(model: &Model, mechanism: Option<&Mechanism>, notes: &mut Vec<String>) -> Vec<Option<f64>> {
    let wanted = model.first_group_index() - model.coefficient_names().len();
    match mechanism {
        Some(Mechanism::Category { score: Some(latent), .. }) if latent.cuts.len() == wanted + 1 => {
            notes.push(format!(
                "the cuts' true values are the mechanism's cuts less its first ({}), which the model fixes at 0; the \
                 intercepts' are the score's less the same",
                super::support::short(latent.cuts[0])
            ));
            latent.cuts[1..].iter().map(|c| Some(c - latent.cuts[0])).collect()
        }
        _ => vec![None; wanted],
    }
}

/// The true value of each parameter (in parameter order), or `None` with a
/// note when the mechanism is not of the model's family.
fn true_parameters(
    model: &Model,
    simulation: &Simulation,
    generated: &super::simulate::Generated,
    notes: &mut Vec<String>,
) -> Option<Vec<Option<f64>>> {
    let outcome = model.outcome_name();
    if *model.family() == Family::Levels {
        return true_level_parameters(model, simulation, generated, notes);
    }
    let matches = matches!(
        (simulation.mechanism(outcome), model.family()),
        (Some(Mechanism::Normal { .. }), Family::Normal)
            | (Some(Mechanism::Bernoulli { .. }), Family::Bernoulli)
            | (Some(Mechanism::Poisson { overdispersion: None, .. }), Family::Poisson)
            | (Some(Mechanism::Poisson { overdispersion: Some(_), .. }), Family::GammaPoisson)
            | (Some(Mechanism::Beta { .. }), Family::Beta)
            | (Some(Mechanism::Time { shape: None, .. }), Family::Times { form: TimeForm::Exponential, .. })
            | (Some(Mechanism::Time { shape: Some(_), .. }), Family::Times { form: TimeForm::Weibull, .. })
            | (Some(Mechanism::Category { score: Some(_), .. }), Family::Graded)
    );
    if !matches {
        notes.push(format!("the mechanism of {outcome} is not of the model's family, so no parameter has a true value"));
        return None;
    }
    let (mut eta, spread) = simulation.link_scale_truth(outcome, generated)?;
    let on_link = simulation.mechanism(outcome).map(Mechanism::link_departures).unwrap_or_default();
    let all_draws = simulation.group_draws(outcome, generated);
    let draws: Vec<&GroupDraw> =
        all_draws.iter().filter(|d| on_link.iter().any(|t| t.group == d.group && t.within == d.within && t.slope == d.slope)).collect();
    if draws.len() < all_draws.len() {
        notes.push(format!(
            "the mechanism of {outcome} draws a departure outside its linear predictor on the link scale (in an sd, \
             a probability or a rate), which no pooled group stands for"
        ));
    }
    let mut group_truths = Vec::new();
    let mut used = vec![false; draws.len()];
    for group in model.pooled_groups() {
        // A nested group stands for `departure(plot within site, …)`, whose levels are the same pairs.
        let find = |slope: Option<&str>| {
            draws.iter().position(|d| d.group == group.column && d.within.as_deref() == group.outer() && d.slope.as_deref() == slope)
        };
        let intercept = find(None);
        let slopes: Vec<Option<usize>> = group.slopes.iter().map(|s| find(Some(&s.column))).collect();
        if intercept.is_none() && slopes.iter().all(Option::is_none) {
            notes.push(format!(
                "the mechanism of {outcome} draws no departure({}, …), so the levels of {} share one mean there and \
                 pooled {} has no true spread or departures to compare (its spread should come out near 0)",
                group.column, group.column, group.column
            ));
            group_truths.extend(std::iter::repeat_n(None, group.labels().len()));
            continue;
        }
        for &k in intercept.iter().chain(slopes.iter().flatten()) {
            used[k] = true;
            for (e, d) in eta.iter_mut().zip(simulation.departure_in_rows(draws[k], generated)) {
                *e -= d;
            }
        }
        let shifts: Vec<f64> = group.slopes.iter().map(|s| centring_of(model, simulation, generated, &s.column, s.design_column)).collect();
        group_truths.extend(group_truth(group, intercept.map(|k| draws[k]), &slopes.iter().map(|k| k.map(|k| draws[k])).collect::<Vec<_>>(), &shifts, notes));
    }
    for (draw, _) in draws.iter().zip(&used).filter(|(_, u)| !**u) {
        notes.push(format!(
            "the mechanism of {outcome} draws {}, which model {} does not pool",
            draw.term().written(&super::support::short(draw.spread)),
            model.name()
        ));
    }
    let mut truth = fixed_truths(model, eta, spread, notes);
    if truth.len() < model.first_group_index() {
        truth.extend(cut_truths(model, simulation.mechanism(outcome), notes));
    }
    truth.extend(group_truths);
    Some(truth)
}

/// The coefficients on the model's (shared) design whose linear
/// predictor is `eta` exactly, or `None` with a note when no combination
/// of the design's columns gives it.
fn exact_coefficients(model: &Model, eta: Vec<f64>, notes: &mut Vec<String>) -> Option<Vec<f64>> {
    let outcome = model.outcome_name();
    let x = model.design_matrix();
    let y = DVector::from_vec(eta);
    let beta = least_squares(x, &y)?;
    let residual = (x * &beta - &y).norm() / (y.len() as f64).sqrt();
    let mean = y.mean();
    let scale = (y.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / y.len() as f64).sqrt().max(1.0);
    if residual.is_nan() || residual > EXACT * scale {
        notes.push(format!(
            "the mechanism of {outcome} is not a linear combination of the model's terms (a hidden cause, a missing \
             parent or a non-linear term), so its coefficients have no single true value"
        ));
        return None;
    }
    Some(beta.iter().copied().collect())
}

/// The least-squares coefficients of `y` on the columns of `x`: by
/// Householder QR, `R·β = Qᵀ·y`, when the columns are independent (every
/// diagonal entry of `R` above 1e-10 of the largest), else by the SVD with
/// singular values below 1e-12 left out; then one step of refinement on
/// the residual (Golub & Van Loan, Matrix Computations, 4th ed., §5.3 and
/// §3.5.3; recalled). The SVD alone once missed an exact intercept by
/// 0.003 on a well-conditioned two-column design.
fn least_squares(x: &DMatrix<f64>, y: &DVector<f64>) -> Option<DVector<f64>> {
    let (rows, columns) = x.shape();
    let qr = (rows >= columns).then(|| x.clone().qr());
    let by_qr = qr.as_ref().and_then(|qr| {
        let r = qr.r();
        let largest = r.diagonal().iter().fold(0.0f64, |m, v| m.max(v.abs()));
        r.diagonal().iter().all(|v| v.abs() > 1e-10 * largest).then_some((qr.q(), r))
    });
    let solve = |b: &DVector<f64>| -> Option<DVector<f64>> {
        match &by_qr {
            Some((q, r)) => r.solve_upper_triangular(&(q.transpose() * b)),
            None => x.clone().svd(true, true).solve(b, 1e-12).ok(),
        }
    };
    let beta = solve(y)?;
    let step = solve(&(y - x * &beta))?;
    Some(beta + step)
}

/// [`true_parameters`] of a category outcome (`family levels`) simulated
/// by a `levels(…)` mechanism: each outcome level's coefficients solved
/// from its stated log odds less the departures its pooled groups stand
/// for, then every group's (per outcome level) truths.
fn true_level_parameters(
    model: &Model,
    simulation: &Simulation,
    generated: &super::simulate::Generated,
    notes: &mut Vec<String>,
) -> Option<Vec<Option<f64>>> {
    let outcome = model.outcome_name();
    let (Some(mut etas), Some(Mechanism::Category { levels: stated, .. })) =
        (simulation.level_log_odds_truth(outcome, generated), simulation.mechanism(outcome))
    else {
        notes.push(format!(
            "the mechanism of {outcome} is not a levels(…) mechanism (log odds per level), so no parameter has a true value"
        ));
        return None;
    };
    let levels = model.outcome_levels()?;
    if stated.as_slice() != levels {
        notes.push(format!(
            "the model's levels of {outcome} ({}) are not the mechanism's ({}), so no parameter has a true value",
            levels.join(", "),
            stated.join(", ")
        ));
        return None;
    }
    let draws = simulation.group_draws(outcome, generated);
    let mut used = vec![false; draws.len()];
    let mut group_truths = Vec::new();
    for group in model.pooled_groups() {
        let level = levels[group.block() + 1].as_str();
        let find = |slope: Option<&str>| {
            draws.iter().position(|d| {
                d.group == group.column
                    && d.within.as_deref() == group.outer()
                    && d.outcome_level.as_deref() == Some(level)
                    && d.slope.as_deref() == slope
            })
        };
        let intercept = find(None);
        let slopes: Vec<Option<usize>> = group.slopes.iter().map(|s| find(Some(&s.column))).collect();
        if intercept.is_none() && slopes.iter().all(Option::is_none) {
            notes.push(format!(
                "the log odds of {level} in the mechanism of {outcome} draw no departure({}, …), so pooled {} has no \
                 true spread or departures there",
                group.column,
                group.written()
            ));
            group_truths.extend(std::iter::repeat_n(None, group.labels().len()));
            continue;
        }
        for &k in intercept.iter().chain(slopes.iter().flatten()) {
            used[k] = true;
            for (e, d) in etas[group.block()].iter_mut().zip(simulation.departure_in_rows(&draws[k], generated)) {
                *e -= d;
            }
        }
        let shifts: Vec<f64> = group.slopes.iter().map(|s| centring_of(model, simulation, generated, &s.column, s.design_column)).collect();
        let slope_draws: Vec<Option<&GroupDraw>> = slopes.iter().map(|k| k.map(|k| &draws[k])).collect();
        group_truths.extend(group_truth(group, intercept.map(|k| &draws[k]), &slope_draws, &shifts, notes));
    }
    for (draw, _) in draws.iter().zip(&used).filter(|(_, u)| !**u) {
        notes.push(format!(
            "the log odds of {} in the mechanism of {outcome} draw {}, which model {} does not pool",
            draw.outcome_level.as_deref().unwrap_or(""),
            draw.term().written(&super::support::short(draw.spread)),
            model.name()
        ));
    }
    let width = model.design_matrix().ncols();
    let mut truth = Vec::with_capacity(model.first_group_index() + group_truths.len());
    for eta in etas {
        match exact_coefficients(model, eta, notes) {
            Some(beta) => truth.extend(beta.into_iter().map(Some)),
            None => truth.extend(std::iter::repeat_n(None, width)),
        }
    }
    truth.extend(group_truths);
    Some(truth)
}

/// The truth of pooled group `group`'s parameters (in its label order)
/// from the draws of its intercept's and slopes' departures (`None` where
/// the mechanism drew none). With centring, a slope's design column is the
/// predictor less `c` (`shifts`), so the model's intercept departures are
/// `a₀ⱼ + Σₓ cₓ·aₓⱼ`, of spread `√(τ₀² + Σ cₓ²τₓ²)` and correlation
/// `cₓτₓ / that` with slope `x` when the departures were drawn apart; with
/// stated correlations every spread and correlation comes from the stated
/// covariance ([`StatedCovariance`]).
fn group_truth(
    group: &GroupTerm,
    intercept: Option<&GroupDraw>,
    slopes: &[Option<&GroupDraw>],
    shifts: &[f64],
    notes: &mut Vec<String>,
) -> Vec<Option<f64>> {
    let at_level = |draw: &GroupDraw, level: &str| draw.levels.iter().position(|l| l == level).map(|i| draw.departures[i]);
    let shifted = slopes.iter().zip(shifts).any(|(d, c)| d.is_some() && *c != 0.0);
    let covariance = StatedCovariance::of(intercept, slopes);
    let spread0 = intercept.map(|_| covariance.intercept_variance(shifts).sqrt());
    let mut truth = vec![spread0];
    for level in &group.levels {
        truth.push(intercept.and_then(|d| {
            let mut value = at_level(d, level)?;
            for (slope, c) in slopes.iter().zip(shifts) {
                if let Some(s) = slope {
                    value += c * at_level(s, level)?;
                }
            }
            Some(value)
        }));
    }
    if let Some(d) = intercept {
        notes.push(departures_note(&group.column, d, shifted));
    }
    for (slope, draw) in group.slopes.iter().zip(slopes) {
        truth.push(draw.map(|d| d.spread));
        truth.extend(group.levels.iter().map(|level| draw.and_then(|d| at_level(d, level))));
        if let Some(d) = draw {
            notes.push(departures_note(&format!("{} {}", group.column, slope.column), d, false));
        }
    }
    for i in 1..=slopes.len() {
        for j in 0..i {
            truth.push(match (j, spread0) {
                (0, Some(s0)) => slopes[i - 1].map(|d| covariance.intercept_covariance(i, shifts) / (s0 * d.spread)),
                (0, None) => None,
                _ => slopes[i - 1].zip(slopes[j - 1]).map(|_| covariance.0[i][j] / (covariance.0[i][i] * covariance.0[j][j]).sqrt()),
            });
        }
    }
    let stated = slopes.iter().flatten().any(|d| d.correlation.is_some() || !d.with_slopes.is_empty());
    if !slopes.is_empty() && intercept.is_some() && slopes.iter().all(Option::is_some) {
        notes.push(format!(
            "{} correlations: {}{}",
            group.column,
            if stated {
                "the intercept's with each slope as stated (0 where none is), and between two slopes as stated (`correlation q with x`), else the product of their stated correlations with the intercept"
            } else {
                "the simulation draws every departure independently, so the true correlations are 0"
            },
            if shifted { " — with centring, the model's intercept departures take in c times each slope's (c the centring value), and their spread and correlations are worked out from the stated covariance" } else { "" }
        ));
    }
    truth
}

/// The covariance matrix of a group's stated departures, intercept first
/// then each slope: spreads τ on the diagonal, `r·τ₀·τₓ` between the
/// intercept and a slope with stated correlation r, `q·τₓ·τ_w` between two
/// slopes with stated correlation q, else `rₓ·r_w·τₓ·τ_w`
/// (`mechanism::stated_correlation`, what `simulate::correlate_departures`
/// draws); 0 where a departure is missing.
struct StatedCovariance(Vec<Vec<f64>>);

impl StatedCovariance {
    fn of(intercept: Option<&GroupDraw>, slopes: &[Option<&GroupDraw>]) -> StatedCovariance {
        let k = 1 + slopes.len();
        let spread = |e: usize| if e == 0 { intercept.map_or(0.0, |d| d.spread) } else { slopes[e - 1].map_or(0.0, |d| d.spread) };
        let with_intercept = |e: usize| match (e, intercept) {
            (0, _) => 1.0,
            (_, Some(_)) => slopes[e - 1].and_then(|d| d.correlation).unwrap_or(0.0),
            (_, None) => 0.0,
        };
        let matrix = (0..k)
            .map(|i| {
                (0..k)
                    .map(|j| match (i, j) {
                        _ if i == j => spread(i) * spread(i),
                        (0, e) | (e, 0) => with_intercept(e) * spread(0) * spread(e),
                        _ => slopes[i - 1].zip(slopes[j - 1]).map_or(0.0, |(a, b)| stated_correlation(&a.term(), &b.term()))
                            * spread(i)
                            * spread(j),
                    })
                    .collect()
            })
            .collect();
        StatedCovariance(matrix)
    }

    /// The variance of the model's intercept departure `a₀ + Σ cₓ·aₓ` (`shifts` the centring values c).
    fn intercept_variance(&self, shifts: &[f64]) -> f64 {
        let weights: Vec<f64> = std::iter::once(1.0).chain(shifts.iter().copied()).collect();
        let m = &self.0;
        (0..m.len()).flat_map(|i| (0..m.len()).map(move |j| (i, j))).map(|(i, j)| weights[i] * weights[j] * m[i][j]).sum()
    }

    /// The covariance of the model's intercept departure with slope `e`'s departure.
    fn intercept_covariance(&self, e: usize, shifts: &[f64]) -> f64 {
        let weights: Vec<f64> = std::iter::once(1.0).chain(shifts.iter().copied()).collect();
        (0..self.0.len()).map(|i| weights[i] * self.0[i][e]).sum()
    }
}

/// A note on the truth of a group's spread: the stated spread (or, when
/// `shifted`, its mixture with the slopes' through centring) and the
/// departures' sample sd.
fn departures_note(label: &str, draw: &GroupDraw, shifted: bool) -> String {
    let k = draw.departures.len() as f64;
    let mean = draw.departures.iter().sum::<f64>() / k.max(1.0);
    let sd = (draw.departures.iter().map(|d| (d - mean).powi(2)).sum::<f64>() / (k - 1.0).max(1.0)).sqrt();
    let stated = if shifted {
        format!(
            "the stated {} combined with the slopes' through the centring of their columns (the model's intercept \
             departures take in each level's slope departures times the centring value)",
            super::support::short(draw.spread)
        )
    } else {
        format!("the stated {}", super::support::short(draw.spread))
    };
    format!(
        "{label} spread: the true value is {stated}; the {} departures the simulation drew have a sample sd of {} \
         (their own mean {}, which the intercept takes up)",
        draw.departures.len(),
        super::support::short(sd),
        super::support::short(mean)
    )
}

/// The value `c` that the model's design column `column` takes off
/// predictor `x` (its centring; 0 without), from the generated rows.
fn centring_of(model: &Model, simulation: &Simulation, generated: &super::simulate::Generated, x: &str, column: usize) -> f64 {
    let design = model.design_matrix();
    let Some(values) = simulation.values_of(x, generated) else { return 0.0 };
    let n = values.len().min(design.nrows());
    (0..n).map(|i| values[i] - design[(i, column)]).sum::<f64>() / n.max(1) as f64
}

/// The true coefficients (and spread) from the link scale of the outcome's
/// mechanism without pooled departures, each `None` when that is not in
/// the span of the model's design.
fn fixed_truths(model: &Model, eta: Vec<f64>, spread: Option<f64>, notes: &mut Vec<String>) -> Vec<Option<f64>> {
    let outcome = model.outcome_name();
    let Some(beta) = exact_coefficients(model, eta, notes) else { return vec![None; model.first_group_index()] };
    let mut truth: Vec<Option<f64>> = beta.into_iter().map(Some).collect();
    if let Some(name) = model.family_parameter() {
        if spread.is_none() {
            let what = if model.has_spread() { "sd" } else { name };
            notes.push(format!("the {what} of {outcome} varies between rows, so the {name} has no single true value"));
        }
        truth.push(spread);
    }
    truth
}
