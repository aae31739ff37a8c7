//! Building a [`Model`] from a [`ModelSpec`] and a [`Table`]: settle the
//! family (a category outcome without a family line takes the levels
//! family), check the outcome against it, plan the terms, assign priors,
//! evaluate the design once and precompute what the likelihood needs.
//!
//! The coefficients are laid out one linear predictor after another: a
//! single block for most families, one block per level after the first for
//! the levels family, each block holding every design column.

use nalgebra::DMatrix;

use crate::table::Table;

use super::defaults::{assign_priors, predictor_blocks, ColumnSpread, PredictorBlock};
use super::error::ModelError;
use super::family::gaussian::GaussianStats;
use super::guards::{check_design_size, check_scales};
use super::family::likelihood::{GlmData, GlmOutcome};
use super::family::softmax::SoftmaxData;
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
    let spec = &settle_family(spec, table);
    let outcome = read_outcome(table, &spec.outcome, &spec.family)?;
    check_scales(spec, table)?;
    check_design_size(spec, table)?;
    let (recipes, mut notes) = plan_terms(spec, table)?;
    let blocks = predictor_blocks(spec, &outcome);
    let design = design_matrix(&recipes, table)?;
    let columns = column_spread(&design);
    let priors = assign_priors(spec, &recipes, &outcome, &blocks, &columns)?;
    let term_labels: Vec<String> = recipes.iter().flat_map(TermRecipe::labels).collect();
    let labels: Vec<String> =
        blocks.iter().flat_map(|b| term_labels.iter().map(move |l| format!("{}{l}", b.prefix))).collect();
    let intercepts = intercept_columns(&recipes);
    if priors.at_average_row.iter().any(|&a| a) {
        notes.push(
            "default intercept priors are on the prediction at the average row (every other design column at its \
             mean), so they mean the same whatever the centring"
                .into(),
        );
    }
    let average_row: Vec<f64> = (0..priors.coefficients.len())
        .map(|j| {
            let column = j % design.ncols().max(1);
            if intercepts.contains(&column) { 0.0 } else { columns.mean[column] }
        })
        .collect();
    let start = starting_point(&blocks, &outcome, &priors.coefficients, priors.spread.as_ref(), &intercepts);
    let likelihood = match (priors.spread.clone(), &outcome.levels) {
        (Some(spread_prior), _) => {
            notes.push("spread is sampled as log(spread), with the Jacobian of that change included".into());
            Likelihood::Gaussian { stats: GaussianStats::new(&design, &outcome.y, intercepts), spread_prior }
        }
        (None, Some(levels)) => {
            notes.extend(level_notes(spec, levels, &outcome));
            Likelihood::Softmax(softmax_data(&design, &outcome.y, levels.len()))
        }
        (None, None) => Likelihood::Glm(glm_data(&design, &spec.family, &outcome)),
    };
    Ok(Model {
        name: spec.name.clone(),
        outcome: spec.outcome.clone(),
        table: spec.table.clone(),
        family: spec.family.clone(),
        outcome_levels: outcome.levels.clone(),
        recipes,
        labels,
        design,
        y: outcome.y,
        coefficient_priors: priors.coefficients,
        at_average_row: priors.at_average_row,
        average_row,
        likelihood,
        priors_used: priors.uses,
        notes,
        start,
    })
}

/// The sd and mean of every design column over the fitted rows.
fn column_spread(design: &DMatrix<f64>) -> ColumnSpread {
    let (mean, sd) = (0..design.ncols()).map(|j| mean_and_sd(design.column(j).as_slice())).unzip();
    ColumnSpread { sd, mean }
}

/// `spec`, with the levels family when the outcome is a category and no
/// family line was written.
fn settle_family(spec: &ModelSpec, table: &Table) -> ModelSpec {
    let category = table.column(&spec.outcome).is_some_and(|c| c.data.levels().is_some());
    let mut settled = spec.clone();
    if category && !spec.family_declared {
        settled.family = Family::Levels;
    }
    settled
}

/// What a levels-family model assumes, and levels without rows.
fn level_notes(spec: &ModelSpec, levels: &[String], outcome: &OutcomeValues) -> Vec<String> {
    let mut notes = vec![format!(
        "{}: {} levels ({}); {} is the reference level, and each other level has its own intercepts and \
         slopes on the log odds against it (softmax link)",
        spec.outcome,
        levels.len(),
        levels.join(", "),
        levels[0]
    )];
    if !spec.family_declared {
        notes.push(format!("{} is a category, so the family is levels (no family line was written)", spec.outcome));
    }
    for (level, share) in levels.iter().zip(outcome.level_shares()) {
        if share == 0.0 {
            notes.push(format!("level {level} of {} has no rows; its coefficients rest on the priors alone", spec.outcome));
        }
    }
    notes
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

/// The design as rows for the levels family, with each row's level index.
pub(super) fn softmax_data(design: &DMatrix<f64>, y: &[f64], levels: usize) -> SoftmaxData {
    let rows: Vec<f64> = design.transpose().as_slice().to_vec();
    SoftmaxData::new(rows, design.ncols(), y.iter().map(|&v| v as usize).collect(), levels)
}

/// Intercepts at each linear predictor's centre, other coefficients at 0,
/// the spread at the outcome's sd — each moved inside its prior's support.
fn starting_point(
    blocks: &[PredictorBlock],
    outcome: &OutcomeValues,
    priors: &[Prior],
    spread_prior: Option<&Prior>,
    intercepts: &[usize],
) -> Vec<f64> {
    let width = priors.len() / blocks.len().max(1);
    let inside = |prior: &Prior, value: f64| if prior.contains(value) { value } else { prior.central_point() };
    let mut start: Vec<f64> = priors
        .iter()
        .enumerate()
        .map(|(j, prior)| {
            let centre = blocks[j / width.max(1)].centre;
            inside(prior, if intercepts.contains(&(j % width.max(1))) { centre } else { 0.0 })
        })
        .collect();
    if let Some(prior) = spread_prior {
        start.push(inside(prior, mean_and_sd(&outcome.y).1).ln());
    }
    start
}
