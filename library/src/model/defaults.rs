//! Assigning a prior to every parameter: the declared prior of its group, or
//! Waypath's default, derived from one principle.
//!
//! **The shared budget.** Before the data speak, the part of the linear
//! predictor that varies from row to row (every non-intercept design column
//! times its coefficient) should vary across the fitted rows by about one
//! *target* `T` on the link scale — no more than the outcome itself varies —
//! and the predictors share that budget: with `K` non-intercept columns,
//! column `j` (sd `s_j` over the rows) gets `normal(0, T / (s_j·√K))`, so
//! the prior variance of the varying part, summed over independent columns,
//! is `T²` whatever `K`. Targets: the outcome's sd `s_y` for a normal
//! outcome; 1.5 on the log-odds scale for logit and softmax links (about
//! 0.05 to 0.95 for ±2 targets around a share of one half); 1 on the log
//! scale for a log link (rates within a factor of about e² ≈ 7.4).
//!
//! **Intercepts** get `normal(centre, T)` where the centre is the outcome's
//! mean on the link scale (for the levels family, the log odds of each
//! level's share against the reference, shares below 0.001 counting as
//! 0.001). The prior is placed on the prediction *at the average row* —
//! the intercept plus every other column at its mean times its coefficient —
//! not on the raw intercept, so it means the same whatever the centring
//! (`centre off`, splines and polynomials whose columns do not average 0).
//! That shift is linear with unit diagonal, so it adds no Jacobian term.
//! With a category term's per-level intercepts each level's intercept has
//! its own `normal(centre, T)`, so the levels may differ by about √2·`T` on
//! top of the slopes' budget.
//!
//! **Steps** of an ordered category (`steps(grade)`, [`super::steps`]):
//! the whole effect from the lowest level to the highest, `grade steps`,
//! gets `normal(0, T / (s·√K))` with `s` the mean sd of the term's
//! indicator columns (about the sd of the rows' share of the whole effect)
//! and the term counted once in `K`; the shares of the steps get the
//! symmetric `dirichlet(2)`, equal steps most likely a priori and no share
//! pushed to 0.
//!
//! **Spread** (normal family): `half_normal(s_y)`: with no predictor at all
//! the spread is `s_y`; the prior keeps it below about 2·`s_y`.
//!
//! **Overdispersion** (gamma-poisson family): `half_normal(T)` with the log
//! link's `T = 1`, by the rule of the spread. The overdispersion κ is the sd
//! of the gamma multiplier of each row's rate, which for small κ is the sd
//! of the log rate's row-to-row noise (`family::shaped`): residual
//! variation on the link scale, as the spread is on the identity scale, so
//! it gets the same prior, `half_normal` of the target. It keeps κ below
//! about 2 (a multiplier that often halves or triples the rate), and its
//! density is highest at κ = 0, the poisson model, so the data must show
//! extra variation before the fit leaves it.
//!
//! **Precision** (beta family): the residual sd of a share around its mean
//! μ is `√(μ(1 − μ)/(1 + φ))`. With no predictor that residual is the
//! outcome's own sd `s_y`, at `φ₀ = ȳ(1 − ȳ)/s_y² − 1` (kept within
//! [1, 1000]); predictors shrink it. The default `lognormal(log φ₀ + 1, 1)`
//! makes the log of (residual sd / `s_y`) about normal with mean −½ and sd
//! ½: a residual sd with median 0.61·`s_y` (near the median the spread's
//! `half_normal(s_y)` gives, 0.67·`s_y`) and central 95% from 0.23·`s_y`
//! to 1.6·`s_y`. A precision has no natural zero to shrink to, so unlike
//! the spread its prior is centred on the data's scale rather than at 0.
//!
//! **Shape** (Weibull family): the log of a Weibull time varies around
//! its mean by an sd of `π/(k·√6) ≈ 1.28/k` whatever the scale (the log
//! of a Weibull time is a reversed Gumbel variable; Johnson, Kotz &
//! Balakrishnan 1994, ch. 21; recalled): the shape is the residual
//! variation on the log link's scale, read upside down. The default
//! `lognormal(0, 1)` puts its median at k = 1, the exponential (constant
//! hazard; residual sd 1.28 on the log scale, about the log link's target
//! `T = 1`), and its central 95% from k = 0.14 to 7.1: residual sds of log
//! time from 9 (times spread over orders of magnitude, a hazard falling
//! steeply) down to 0.18 (times within about a fifth of their mean, a
//! hazard rising steeply). The exponential family has no shape.
//!
//! **Gaps** (graded family, [`super::family::ordered`]): with one linear
//! predictor for every row, the level shares would put the cut above level
//! k at `logit(F_k)`, `F_k` the share of rows at or below it; the gaps
//! `d_k` between those cuts ([`marginal_cuts`]) centre each gap's default
//! `lognormal(log d_k, 1)` (95% within a factor of about 7; predictors
//! widen the latent scale, so the fitted gaps usually come out larger than
//! the marginal ones). The intercept's centre is the score that gives the
//! lowest level its share with the first cut at 0, `−logit(F_0)`. A gap,
//! like a precision, has no natural zero, so its prior sits on the data's
//! scale.
//!
//! **Pooled spreads.** A pooled group's departures vary from row to row
//! too, so each pooled group takes one share of the budget beside the `K`
//! columns: with `G` groups every column gets `T/(s_j·√(K + G))` and every
//! group spread `half_normal(T/√(K + G))` — a group spread of that size
//! makes the departures vary across rows by that share, and the prior
//! keeps it below about twice the share.
//!
//! A group's **varying slope** (`pooled block with girth`; each of several)
//! varies from row to row as well and takes a share of its own: `K + G`
//! counts it too, and its spread gets `half_normal(T/(s_x·√(K + G)))`, `s_x` the sd of the
//! predictor's design column, like the slope columns.
//!
//! **Correlations** between a group's intercept and slope departures:
//! `lkj(2)` ([`DEFAULT_LKJ`]). For two effects the LKJ density makes the
//! correlation `ρ = 2B − 1` with `B ~ beta(η, η)` (Lewandowski, Kurowicka
//! & Joe 2009, §3.2), so η = 1 is flat on (−1, 1) and leaves a positive
//! density at ±1, where a few groups can push the draws against the edge;
//! η = 2, density ∝ 1 − ρ², is the smallest whole η whose density falls to
//! 0 at ±1, and the flattest such: ρ has sd 1/√5 ≈ 0.45 and its central
//! 90% runs from about −0.73 to 0.73. With `K` effects (several slopes)
//! each correlation's marginal is `2B − 1`, `B ~ beta(η − 1 + K/2, same)`
//! (the same paper), so lkj(2) keeps every correlation at least as far
//! from ±1 as with one slope.
//!
//! Every assignment is recorded as a [`PriorUse`] so fit output can list
//! the priors actually used and who set them.

use super::error::ModelError;
use super::family::shaped::{moment_overdispersion, moment_precision};
use super::family::ordered::{cut_label, marginal_cuts};
use super::family::softmax::level_prefix;
use super::family::survival::mean_time;
use super::family::Family;
use super::outcome::OutcomeValues;
use super::prior::{short_number, Prior, PriorGroup, POSITIVE_DISTRIBUTIONS};
use super::spec::ModelSpec;
use super::steps::whole_effect_label;
use super::terms::design::group_spread_label;
use super::terms::recipe::{mean_and_sd, TermRecipe};
use super::terms::GroupTerm;

/// The shared budget's target on the log-odds scale (logit and softmax links).
const LOG_ODDS_TARGET: f64 = 1.5;
/// The shared budget's target on the log scale (log link).
const LOG_TARGET: f64 = 1.0;
/// The default η of the LKJ prior on a group's intercept–slope correlation
/// (module docs).
pub const DEFAULT_LKJ: f64 = 2.0;

/// One prior as used by a built model, for listing in output.
#[derive(Debug, Clone, PartialEq)]
pub struct PriorUse {
    pub group: PriorGroup,
    /// The parameter labels it applies to.
    pub parameters: Vec<String>,
    pub prior: Prior,
    /// `true` if declared in the cell, `false` for a default.
    pub declared: bool,
    /// `true` if declared for this parameter by its label (`prior for …`),
    /// not for its group.
    pub for_parameter: bool,
    /// `true` for a default intercept prior placed on the prediction at the
    /// average row rather than on the raw intercept.
    pub at_average_row: bool,
}

/// Priors of every coefficient, of the spread (normal family), and the list
/// of uses for output.
pub struct PriorPlan {
    pub coefficients: Vec<Prior>,
    /// Per coefficient: whether its prior is on the prediction at the
    /// average row (default intercepts) rather than on the coefficient.
    pub at_average_row: Vec<bool>,
    /// The prior of the family's positive parameter: the spread (normal)
    /// or the overdispersion (gamma-poisson).
    pub family_parameter: Option<Prior>,
    /// The prior of each gap between cut points (graded family; empty
    /// otherwise).
    pub gaps: Vec<Prior>,
    /// The spread prior of each pooled group, in the groups' order.
    pub group_spreads: Vec<Prior>,
    /// The spread priors of each group's varying slopes (empty without).
    pub slope_spreads: Vec<Vec<Prior>>,
    /// The η of the LKJ prior on every group's intercept–slope correlation.
    pub correlation_lkj: f64,
    pub uses: Vec<PriorUse>,
}

/// The coefficients of one linear predictor: every family has one, the
/// levels family one per level after the first.
#[derive(Debug, Clone, PartialEq)]
pub struct PredictorBlock {
    /// Written before each term label (empty for a single predictor).
    pub prefix: String,
    /// The centre of its default intercept priors and starting values.
    pub centre: f64,
}

/// The linear predictors of the model of `spec` on `outcome`.
pub fn predictor_blocks(spec: &ModelSpec, outcome: &OutcomeValues) -> Vec<PredictorBlock> {
    if spec.family == Family::Graded {
        return vec![PredictorBlock { prefix: String::new(), centre: marginal_cuts(&outcome.level_shares()).0 }];
    }
    match &outcome.levels {
        Some(levels) => {
            let shares = outcome.level_shares();
            let floor = |s: f64| s.max(1e-3);
            levels
                .iter()
                .zip(&shares)
                .skip(1)
                .map(|(level, &share)| PredictorBlock {
                    prefix: level_prefix(&spec.outcome, level, &levels[0]),
                    centre: (floor(share) / floor(shares[0])).ln(),
                })
                .collect()
        }
        None => vec![PredictorBlock { prefix: String::new(), centre: outcome_centre(&spec.family, outcome) }],
    }
}

/// The sd and mean of every design column over the fitted rows.
#[derive(Debug, Clone, PartialEq)]
pub struct ColumnSpread {
    pub sd: Vec<f64>,
    pub mean: Vec<f64>,
}

/// Assign priors to the coefficients of `recipes` in each linear
/// predictor of `blocks` (and the spread); `columns` describes the design.
pub fn assign_priors(
    spec: &ModelSpec,
    recipes: &[TermRecipe],
    outcome: &OutcomeValues,
    blocks: &[PredictorBlock],
    columns: &ColumnSpread,
    groups: &[GroupTerm],
) -> Result<PriorPlan, ModelError> {
    check_declared(spec, recipes, groups)?;
    let target = budget_target(&spec.family, outcome);
    let intercepts = super::build::intercept_columns(recipes);
    // A category outcome pools each column once per linear predictor; the
    // budget is per linear predictor, so count the first predictor's groups.
    let first_block = || groups.iter().filter(|g| g.block() == 0);
    let slopes = first_block().map(|g| g.slopes.len()).sum::<usize>();
    // A steps term varies as one column, its whole effect times the rows' share of it.
    let step_extra: usize = recipes.iter().map(|r| if let TermRecipe::Steps { levels, .. } = r { levels.len() - 2 } else { 0 }).sum();
    let varying = columns.sd.len() - intercepts.len() - step_extra + first_block().count() + slopes;
    let mut plan = PriorPlan {
        coefficients: Vec::new(),
        at_average_row: Vec::new(),
        family_parameter: None,
        gaps: Vec::new(),
        group_spreads: Vec::new(),
        slope_spreads: Vec::new(),
        correlation_lkj: spec.correlation_prior.unwrap_or(DEFAULT_LKJ),
        uses: Vec::new(),
    };
    for block in blocks {
        let mut column = 0;
        for recipe in recipes {
            let labels: Vec<String> = recipe.labels().iter().map(|l| format!("{}{l}", block.prefix)).collect();
            let group = recipe.group();
            let intercept = matches!(recipe, TermRecipe::Intercept | TermRecipe::LevelIntercepts { .. });
            if let TermRecipe::Steps { column: name, .. } = recipe {
                let width = labels.len();
                let score_sd = columns.sd[column..column + width].iter().sum::<f64>() / width as f64;
                let label = format!("{}{}", block.prefix, whole_effect_label(name));
                let used = choose(spec, group, label, || Prior::Normal { mean: 0.0, sd: share_of_budget(target, score_sd, varying) });
                // Every step's slot carries the whole effect's prior; the density reads the first
                // (`model::steps`), and the shares' Dirichlet prior is the term's own.
                plan.coefficients.extend(std::iter::repeat_n(used.prior.clone(), width));
                plan.at_average_row.extend(std::iter::repeat_n(false, width));
                plan.uses.push(used);
                column += width;
                continue;
            }
            for (k, label) in labels.into_iter().enumerate() {
                let default = || {
                    if intercept {
                        Prior::Normal { mean: block.centre, sd: target }
                    } else {
                        Prior::Normal { mean: 0.0, sd: share_of_budget(target, columns.sd[column + k], varying) }
                    }
                };
                let mut used = choose(spec, group, label, default);
                used.at_average_row = intercept && !used.declared;
                plan.coefficients.push(used.prior.clone());
                plan.at_average_row.push(used.at_average_row);
                plan.uses.push(used);
            }
            column += recipe.labels().len();
        }
    }
    if let Some(label) = spec.family.family_parameter() {
        let used = choose(spec, family_parameter_group(&spec.family), label.into(), || match spec.family {
            Family::Beta => Prior::LogNormal { log_mean: moment_precision(&outcome.y).ln() + 1.0, log_sd: 1.0 },
            Family::Times { .. } => Prior::LogNormal { log_mean: 0.0, log_sd: 1.0 },
            _ => Prior::HalfNormal { sd: target },
        });
        plan.family_parameter = Some(used.prior.clone());
        plan.uses.push(used);
    }
    if spec.family == Family::Graded {
        plan.gaps = gap_priors(spec, outcome, &mut plan.uses);
    }
    for group in groups {
        let label = format!("{}{}", group.label_prefix(), group_spread_label(&group.column));
        let used = choose(spec, PriorGroup::PooledSpreads, label, || Prior::HalfNormal { sd: target / (varying.max(1) as f64).sqrt() });
        plan.group_spreads.push(used.prior.clone());
        plan.uses.push(used);
        let slope_priors: Vec<Prior> = group
            .slopes
            .iter()
            .map(|slope| {
                let share = share_of_budget(target, columns.sd[slope.design_column], varying);
                let label = format!("{}{}", group.label_prefix(), group_spread_label(&format!("{} {}", group.column, slope.column)));
                let used = choose(spec, PriorGroup::PooledSpreads, label, || Prior::HalfNormal { sd: share });
                let prior = used.prior.clone();
                plan.uses.push(used);
                prior
            })
            .collect();
        plan.slope_spreads.push(slope_priors);
    }
    if spec.correlation_prior.is_some() && slopes == 0 {
        return Err(ModelError::Prior {
            group: super::spec::POOLED_CORRELATIONS.into(),
            message: "this model has no pooled group with a varying slope, so no correlation; remove the prior line \
                      or write `pooled <category> with <predictor>`"
                .into(),
        });
    }
    check_parameter_priors(spec, &plan.uses)?;
    Ok(plan)
}

/// The prior of the parameter `label` of `group`: the one declared for it
/// (`prior for <label>: …`), else its group's declared prior, else
/// `default()`.
fn choose(spec: &ModelSpec, group: PriorGroup, label: String, default: impl FnOnce() -> Prior) -> PriorUse {
    let (prior, declared, for_parameter) = match (spec.declared_for(&label), spec.declared_prior(group)) {
        (Some(prior), _) => (prior.clone(), true, true),
        (None, Some(prior)) => (prior.clone(), true, false),
        (None, None) => (default(), false, false),
    };
    PriorUse { group, parameters: vec![label], prior, declared, for_parameter, at_average_row: false }
}

/// Every `prior for <label>` names a parameter that takes a prior of its
/// own, and its distribution suits that parameter; errors name the cell
/// line and, for a label not found, the labels there are.
fn check_parameter_priors(spec: &ModelSpec, uses: &[PriorUse]) -> Result<(), ModelError> {
    for declared in &spec.parameter_priors {
        let at = |e: ModelError| e.at_line(declared.line);
        let Some(used) = uses.iter().find(|u| u.parameters.contains(&declared.label)) else {
            let labels: Vec<String> = uses.iter().flat_map(|u| u.parameters.iter().map(|l| format!("`{l}`"))).collect();
            return Err(at(ModelError::Prior {
                group: format!("`{}`", declared.label),
                message: format!(
                    "this model has no parameter of that label that takes a prior of its own; the labels are {} \
                     (pooled departures take their group's spread, correlations `prior {}: lkj(η)`)",
                    labels.join(", "),
                    super::spec::POOLED_CORRELATIONS
                ),
            }));
        };
        check_suits(used.group, &declared.prior, &format!("`{}`", declared.label)).map_err(at)?;
    }
    Ok(())
}

/// The prior of each gap between a graded outcome's cut points: the
/// declared `gaps` prior, else `lognormal(log d, 1)` with `d` the gap the
/// level shares give with one linear predictor for every row
/// ([`marginal_cuts`]), recorded under the label of the cut above the gap.
fn gap_priors(spec: &ModelSpec, outcome: &OutcomeValues, uses: &mut Vec<PriorUse>) -> Vec<Prior> {
    let Some(levels) = &outcome.levels else { return Vec::new() };
    let (_, log_gaps) = marginal_cuts(&outcome.level_shares());
    log_gaps
        .iter()
        .zip(levels.iter().skip(2))
        .map(|(&log_gap, level)| {
            let used = choose(spec, PriorGroup::Gaps, cut_label(&spec.outcome, level), || Prior::LogNormal {
                log_mean: log_gap,
                log_sd: 1.0,
            });
            let prior = used.prior.clone();
            uses.push(used);
            prior
        })
        .collect()
}

/// The information one row carries about the linear predictor at the
/// outcome's mean (the Fisher information of the family there): `1/s_y²`
/// normal, `p(1 − p)` bernoulli, `m̄·p(1 − p)` binomial, the mean count
/// poisson. Used to choose how pooled groups are sampled.
pub fn row_information(family: &Family, outcome: &OutcomeValues) -> f64 {
    match family {
        Family::Normal => 1.0 / budget_target(family, outcome).powi(2),
        Family::Poisson => outcome.mean_per_trial().max(1e-3),
        // The negative binomial's information about log μ, μφ/(φ + μ), at
        // the starting overdispersion (φ = 1/κ²).
        Family::GammaPoisson => {
            let mu = outcome.mean_per_trial().max(1e-3);
            let kappa = moment_overdispersion(&outcome.y);
            mu / (1.0 + kappa * kappa * mu)
        }
        // The quasi-likelihood information about η: (dμ/dη)² / var = μ(1 − μ)(1 + φ).
        Family::Beta => {
            let mu = outcome.mean_per_trial().clamp(1e-3, 1.0 - 1e-3);
            mu * (1.0 - mu) * (1.0 + moment_precision(&outcome.y))
        }
        // An exponential row's information about log μ is its chance of
        // showing the event: 1 when followed to it, less when cut short.
        Family::Times { .. } => outcome.time_rows().iter().map(|r| r.event).sum::<f64>().max(1.0) / outcome.y.len().max(1) as f64,
        _ => {
            let p = outcome.mean_per_trial().clamp(1e-3, 1.0 - 1e-3);
            let trials = outcome.trials.as_ref().map_or(1.0, |m| mean_and_sd(m).0.max(1.0));
            trials * p * (1.0 - p)
        }
    }
}

/// The outcome's mean on the link scale: the centre of intercept priors.
fn outcome_centre(family: &Family, outcome: &OutcomeValues) -> f64 {
    match family {
        Family::Normal => mean_and_sd(&outcome.y).0,
        Family::Times { .. } => family.link(mean_time(&outcome.time_rows())),
        _ => family.link(outcome.mean_per_trial()),
    }
}

/// The prior group of the family's parameter beside the coefficients.
fn family_parameter_group(family: &Family) -> PriorGroup {
    match family {
        Family::GammaPoisson => PriorGroup::Overdispersion,
        Family::Beta => PriorGroup::Precision,
        Family::Times { .. } => PriorGroup::Shape,
        _ => PriorGroup::Spread,
    }
}

/// The shared budget's target `T` on the link scale (module docs).
fn budget_target(family: &Family, outcome: &OutcomeValues) -> f64 {
    match family {
        Family::Normal => {
            let sd = mean_and_sd(&outcome.y).1;
            if sd.is_finite() && sd > 0.0 { sd } else { 1.0 }
        }
        Family::Poisson | Family::GammaPoisson | Family::Times { .. } => LOG_TARGET,
        _ => LOG_ODDS_TARGET,
    }
}

/// One column's prior sd: its share `T/√K` of the budget, per unit of the
/// column (a column that never varies counts as sd 1).
fn share_of_budget(target: f64, column_sd: f64, varying: usize) -> f64 {
    let sd = if column_sd.is_finite() && column_sd > 0.0 { column_sd } else { 1.0 };
    target / (sd * (varying.max(1) as f64).sqrt())
}

/// Declared priors must suit their group, and the group must exist.
fn check_declared(spec: &ModelSpec, recipes: &[TermRecipe], groups: &[GroupTerm]) -> Result<(), ModelError> {
    for (group, prior) in &spec.priors {
        let present = if matches!(group, PriorGroup::Spread | PriorGroup::Overdispersion | PriorGroup::Precision | PriorGroup::Shape) {
            spec.family.family_parameter().is_some() && family_parameter_group(&spec.family) == *group
        } else if *group == PriorGroup::Gaps {
            spec.family == Family::Graded
        } else if *group == PriorGroup::PooledSpreads {
            !groups.is_empty()
        } else {
            recipes.iter().any(|r| r.group() == *group)
        };
        if !present {
            return Err(ModelError::Prior {
                group: group.name().into(),
                message: format!("this model has no {}; remove the prior line", group.name()),
            });
        }
        check_suits(*group, prior, group.name())?;
    }
    Ok(())
}

/// A prior suits a parameter of `group`: no hard ends, positive-only for a
/// positive parameter and not for one that can be negative. `what` names
/// the group or the parameter in the message.
pub(crate) fn check_suits(group: PriorGroup, prior: &Prior, what: &str) -> Result<(), ModelError> {
    let problem = |message: String| Err(ModelError::Prior { group: what.into(), message });
    if let Prior::Uniform { lower, upper } = prior {
        // A flat prior with hard ends puts a cliff in the density at each
        // end: NUTS diverges there and a normal approximation is poor near it.
        let instead = if group.is_positive() {
            format!("half_normal({}) or lognormal", short_number(*upper / 2.0))
        } else {
            format!("normal({}, {})", short_number((lower + upper) / 2.0), short_number((upper - lower) / 4.0))
        };
        return problem(format!(
            "{prior} stops the {} at hard ends, where sampling fails and approximations are poor; \
             use a prior without ends such as {instead}",
            group.name()
        ));
    }
    if group.is_positive() && prior.allows_negative() {
        return problem(format!(
            "{prior} allows negative values but {} positive; use {}",
            match group {
                PriorGroup::Spread => "the spread is",
                PriorGroup::Overdispersion => "the overdispersion is",
                PriorGroup::Precision => "the precision is",
                PriorGroup::Shape => "the shape is",
                PriorGroup::Gaps => "the gaps between cut points are",
                _ => "pooled spreads are",
            },
            or_list(POSITIVE_DISTRIBUTIONS)
        ));
    }
    if !group.is_positive() && prior.is_positive_only() {
        return problem(format!("{prior} allows only positive values but {} can be negative; use normal or student", group.name()));
    }
    Ok(())
}

/// `a, b or c`.
fn or_list(words: &[&str]) -> String {
    match words {
        [] => String::new(),
        [one] => one.to_string(),
        [init @ .., last] => format!("{} or {last}", init.join(", ")),
    }
}
