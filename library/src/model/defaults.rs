//! Assigning a prior to every parameter: the declared prior of its group, or
//! a weakly informative default on the data's own scale.
//!
//! Defaults (`s_y` the outcome's sd, `s_x` a predictor's sd):
//! * normal family — intercepts `normal(ȳ, 2·s_y)`; slopes
//!   `normal(0, 2·s_y/s_x)` (in a one-predictor regression the slope is at
//!   most `s_y/s_x` in size, since |correlation| ≤ 1; twice that leaves room
//!   for predictors acting together); spline weights and level offsets
//!   `normal(0, 2·s_y)`; spread `exponential(1/s_y)` (prior mean `s_y`).
//! * logit and log links — intercepts `normal(link(ȳ), 2)` on the link
//!   scale; slopes `normal(0, 2/s_x)`; weights and offsets `normal(0, 2)`.
//! * levels family (softmax link) — as the logit link, once per level after
//!   the first, with the intercepts of level k centred at
//!   `log(share_k / share_reference)`, the log odds of the level's share in
//!   the data (shares below 0.001 count as 0.001).
//!
//! Every assignment is recorded as a [`PriorUse`] so fit output can list
//! the priors actually used.

use super::error::ModelError;
use super::family::softmax::level_prefix;
use super::family::Family;
use super::outcome::OutcomeValues;
use super::prior::{Prior, PriorGroup};
use super::spec::ModelSpec;
use super::terms::recipe::{mean_and_sd, TermRecipe};

/// Width of default priors in units of the data's scale.
const DEFAULT_WIDTH: f64 = 2.0;

/// One prior as used by a built model, for listing in output.
#[derive(Debug, Clone, PartialEq)]
pub struct PriorUse {
    pub group: PriorGroup,
    /// The parameter labels it applies to.
    pub parameters: Vec<String>,
    pub prior: Prior,
    /// `true` if declared in the cell, `false` for a default.
    pub declared: bool,
}

/// Priors of every coefficient, of the spread (normal family), and the list
/// of uses for output.
pub struct PriorPlan {
    pub coefficients: Vec<Prior>,
    pub spread: Option<Prior>,
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
        None => vec![PredictorBlock { prefix: String::new(), centre: OutcomeScale::new(&spec.family, outcome).centre }],
    }
}

/// Assign priors to the coefficients of `recipes` in each linear
/// predictor of `blocks` (and the spread).
pub fn assign_priors(
    spec: &ModelSpec,
    recipes: &[TermRecipe],
    outcome: &OutcomeValues,
    blocks: &[PredictorBlock],
) -> Result<PriorPlan, ModelError> {
    check_declared(spec, recipes)?;
    let scale = OutcomeScale::new(&spec.family, outcome);
    let mut plan = PriorPlan { coefficients: Vec::new(), spread: None, uses: Vec::new() };
    for block in blocks {
        let block_scale = OutcomeScale { centre: block.centre, spread: scale.spread };
        for recipe in recipes {
            let labels: Vec<String> = recipe.labels().iter().map(|l| format!("{}{l}", block.prefix)).collect();
            let group = recipe.group();
            match spec.declared_prior(group) {
                Some(prior) => {
                    plan.coefficients.extend(std::iter::repeat_n(prior.clone(), labels.len()));
                    plan.uses.push(PriorUse { group, parameters: labels, prior: prior.clone(), declared: true });
                }
                None => {
                    for (label, column_scale) in labels.into_iter().zip(recipe.scales()) {
                        let prior = block_scale.default_for(recipe, column_scale);
                        plan.coefficients.push(prior.clone());
                        plan.uses.push(PriorUse { group, parameters: vec![label], prior, declared: false });
                    }
                }
            }
        }
    }
    if spec.family.has_spread() {
        let declared = spec.declared_prior(PriorGroup::Spread);
        let prior = declared.cloned().unwrap_or(Prior::Exponential { rate: 1.0 / scale.spread });
        plan.uses.push(PriorUse {
            group: PriorGroup::Spread,
            parameters: vec!["spread".into()],
            prior: prior.clone(),
            declared: declared.is_some(),
        });
        plan.spread = Some(prior);
    }
    Ok(plan)
}

/// The data's scale on the link scale: a centre for intercepts and a spread.
struct OutcomeScale {
    centre: f64,
    spread: f64,
}

impl OutcomeScale {
    fn new(family: &Family, outcome: &OutcomeValues) -> Self {
        match family {
            Family::Normal => {
                let (mean, sd) = mean_and_sd(&outcome.y);
                OutcomeScale { centre: mean, spread: sd }
            }
            _ => OutcomeScale { centre: family.link(outcome.mean_per_trial()), spread: 1.0 },
        }
    }

    fn default_for(&self, recipe: &TermRecipe, column_scale: f64) -> Prior {
        let width = DEFAULT_WIDTH * self.spread;
        match recipe {
            TermRecipe::Intercept | TermRecipe::LevelIntercepts { .. } => Prior::Normal { mean: self.centre, sd: width },
            _ => Prior::Normal { mean: 0.0, sd: width / column_scale },
        }
    }
}

/// Declared priors must suit their group, and the group must exist.
fn check_declared(spec: &ModelSpec, recipes: &[TermRecipe]) -> Result<(), ModelError> {
    for (group, prior) in &spec.priors {
        let problem = |message: String| Err(ModelError::Prior { group: group.name().into(), message });
        let present = if *group == PriorGroup::Spread {
            spec.family.has_spread()
        } else {
            recipes.iter().any(|r| r.group() == *group)
        };
        if !present {
            return problem(format!("this model has no {}; remove the prior line", group.name()));
        }
        if group.is_positive() && prior.allows_negative() {
            return problem(format!(
                "{prior} allows negative values but the spread is positive; use exponential, half_normal, \
                 lognormal or uniform with a lower end ≥ 0"
            ));
        }
        if !group.is_positive() && prior.is_positive_only() {
            return problem(format!(
                "{prior} allows only positive values but {} can be negative; use normal, student_t or uniform",
                group.name()
            ));
        }
    }
    Ok(())
}
