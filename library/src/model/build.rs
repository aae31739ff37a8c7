//! Building a [`Model`] from a [`ModelSpec`] and a [`Table`]: check the
//! outcome against the family, plan the terms, assign priors, evaluate the
//! design once and precompute what the likelihood needs.

use nalgebra::DMatrix;

use crate::table::Table;

use super::defaults::assign_priors;
use super::error::ModelError;
use super::family::gaussian::GaussianStats;
use super::family::likelihood::{GlmData, GlmOutcome};
use super::family::Family;
use super::outcome::{read_outcome, OutcomeValues};
use super::posterior::{Likelihood, Model};
use super::prior::Prior;
use super::spec::ModelSpec;
use super::terms::recipe::mean_and_sd;
use super::terms::{design_matrix, plan_terms, TermRecipe};

impl Model {
    /// Build the model of `spec` on `table` (the table `spec.table` names;
    /// the caller resolves the name). Errors name the cell line of the
    /// outcome line where one is known.
    pub fn build(spec: &ModelSpec, table: &Table) -> Result<Model, ModelError> {
        build_model(spec, table).map_err(|e| match spec.formula_line {
            Some(line) if !matches!(e, ModelError::Prior { .. }) => e.at_line(line),
            _ => e,
        })
    }
}

fn build_model(spec: &ModelSpec, table: &Table) -> Result<Model, ModelError> {
    let outcome = read_outcome(table, &spec.outcome, &spec.family)?;
    let (recipes, mut notes) = plan_terms(spec, table)?;
    let priors = assign_priors(spec, &recipes, &outcome)?;
    let design = design_matrix(&recipes, table)?;
    let labels: Vec<String> = recipes.iter().flat_map(TermRecipe::labels).collect();
    let intercepts = intercept_columns(&recipes);
    let start = starting_point(&spec.family, &outcome, &priors.coefficients, priors.spread.as_ref(), &intercepts);
    let likelihood = match priors.spread.clone() {
        Some(spread_prior) => {
            notes.push("spread is sampled as log(spread), with the Jacobian of that change included".into());
            Likelihood::Gaussian { stats: GaussianStats::new(&design, &outcome.y, intercepts), spread_prior }
        }
        None => Likelihood::Glm(glm_data(&design, &spec.family, &outcome)),
    };
    Ok(Model {
        name: spec.name.clone(),
        outcome: spec.outcome.clone(),
        table: spec.table.clone(),
        family: spec.family.clone(),
        recipes,
        labels,
        design,
        y: outcome.y,
        coefficient_priors: priors.coefficients,
        likelihood,
        priors_used: priors.uses,
        notes,
        start,
    })
}

/// Indices of the design columns that are intercepts (exactly one of them
/// is 1 in every row).
pub(super) fn intercept_columns(recipes: &[TermRecipe]) -> Vec<usize> {
    let mut columns = Vec::new();
    let mut offset = 0;
    for recipe in recipes {
        let width = recipe.labels().len();
        if matches!(recipe, TermRecipe::Intercept | TermRecipe::LevelIntercepts { .. }) {
            columns.extend(offset..offset + width);
        }
        offset += width;
    }
    columns
}

pub(super) fn glm_data(design: &DMatrix<f64>, family: &Family, outcome: &OutcomeValues) -> GlmData {
    let rows: Vec<f64> = design.transpose().as_slice().to_vec();
    let y = outcome.y.clone();
    let glm_outcome = match (family, &outcome.trials) {
        (Family::Binomial { .. }, Some(trials)) => GlmOutcome::Binomial { y, trials: trials.clone() },
        (Family::Poisson, _) => GlmOutcome::Poisson { y },
        _ => GlmOutcome::Bernoulli { y },
    };
    GlmData::new(rows, design.ncols(), glm_outcome)
}

fn starting_point(
    family: &Family,
    outcome: &OutcomeValues,
    priors: &[Prior],
    spread_prior: Option<&Prior>,
    intercepts: &[usize],
) -> Vec<f64> {
    let centre = family.link(outcome.mean_per_trial());
    let inside = |prior: &Prior, value: f64| if prior.contains(value) { value } else { prior.central_point() };
    let mut start: Vec<f64> = priors
        .iter()
        .enumerate()
        .map(|(j, prior)| inside(prior, if intercepts.contains(&j) { centre } else { 0.0 }))
        .collect();
    if let Some(prior) = spread_prior {
        start.push(inside(prior, mean_and_sd(&outcome.y).1).ln());
    }
    start
}
