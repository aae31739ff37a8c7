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

use crate::limits::{bytes_for, check_memory};

use super::defaults::{assign_priors, predictor_blocks, row_information, ColumnSpread, PredictorBlock};
use super::family::pooling::Pooling;
use super::error::ModelError;
use super::family::gaussian::GaussianStats;
use super::guards::{check_design_size, check_scales};
use super::family::likelihood::{GlmData, GlmOutcome, GroupIndices};
use super::family::shaped::{moment_overdispersion, moment_precision, BetaShare};
use super::family::softmax::{level_prefix, DepartureRun, SoftmaxData};
use super::family::survival::time_notes;
use super::family::ordered::{marginal_cuts, GradedData};
use super::family::Family;
use super::outcome::{read_outcome, OutcomeValues};
use super::posterior::{Likelihood, Model};
use super::prior::Prior;
use super::spec::{ModelSpec, TermSpec};
use super::steps::{shares_label, StepTerm, DEFAULT_STEP_CONCENTRATION};
use super::terms::recipe::mean_and_sd;
use super::terms::groups::{GroupLayout, SlopeEvidence, VaryingSlope};
use super::terms::{design_matrix, plan_terms, GroupTerm, TermRecipe};
use super::prior::short_number;

impl Model {
    /// Build the model of `spec` on `table` (the table `spec.table` names;
    /// the caller resolves the name). Errors name the cell line of the
    /// outcome line where one is known (an error already placed on its own
    /// line, such as a `prior for` line's, keeps that line).
    pub fn build(spec: &ModelSpec, table: &Table) -> Result<Model, ModelError> {
        build_model(spec, table).map_err(|e| match spec.formula_line {
            Some(line) if !matches!(e, ModelError::Prior { .. } | ModelError::AtLine { .. }) => e.at_line(line),
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
    refuse_steps_with_levels(spec, &recipes)?;
    check_share_priors(spec, &recipes)?;
    let mut groups = for_outcome_levels(plan_groups(spec, table, &recipes)?, spec, outcome.levels.as_deref());
    let blocks = predictor_blocks(spec, &outcome);
    let design = design_matrix(&recipes, table)?;
    let columns = column_spread(&design);
    let priors = assign_priors(spec, &recipes, &outcome, &blocks, &columns, &groups)?;
    check_layout_lines(spec, &groups)?;
    let information = row_information(&spec.family, &outcome);
    let group_rows = fitted_group_rows(&groups, table)?;
    for (group, rows) in groups.iter_mut().zip(&group_rows) {
        let effects = 1 + group.slopes.len();
        let declared = spec.layouts.iter().find(|(g, _)| *g == group.column).map(|(_, l)| match *l {
            GroupLayout::CentredFirst(n) if n >= effects => GroupLayout::Centred,
            l => l,
        });
        let (family, outcome, information) = match group.outcome_level {
            Some(ref level) => {
                let one = one_level_outcome(&outcome, level.block + 1);
                let information = row_information(&Family::Bernoulli, &one);
                (Family::Bernoulli, one, information)
            }
            None => (spec.family.clone(), outcome.clone(), information),
        };
        let means = level_link_means(&family, &outcome, rows, group.levels.len());
        let evidence: Vec<SlopeEvidence> =
            group.slopes.iter().map(|s| slope_evidence(&family, &outcome, design.column(s.design_column).as_slice(), rows, group.levels.len())).collect();
        group.settle_layout(declared, information, &means, &evidence);
        notes.push(group.note());
    }
    let single_intercept = recipes.iter().position(|r| matches!(r, TermRecipe::Intercept)).map(|_| 0);
    if groups.iter().any(|g| !g.slopes.is_empty()) {
        notes.push(format!(
            "the correlations of a group's intercept and slope departures have the prior lkj({}) on their \
             correlation matrix{}",
            short_number(priors.correlation_lkj),
            if spec.correlation_prior.is_some() { "" } else { " (the default; `prior pooled correlations: lkj(η)` sets η)" }
        ));
    }
    let pooling =
        Pooling::new(&groups, &priors.group_spreads, &priors.slope_spreads, priors.correlation_lkj, single_intercept, design.ncols());
    if let Some(group) = pooling.groups.iter().zip(&groups).find(|(p, _)| p.around_intercept).map(|(_, g)| g) {
        notes.push(format!(
            "pooled {} is sampled around the intercept: its coordinates are the level means (intercept plus \
             departure), which the data pin down apart from the intercept; its draws are still the departures{}",
            group.column,
            if group.slopes.is_empty() {
                "; the intercept itself is sampled as its standard score about those means, which does not narrow \
                 as the spread shrinks"
            } else {
                ""
            }
        ));
    }
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
    let family_start = priors.family_parameter.as_ref().map(|prior| (prior, family_parameter_start(&spec.family, &outcome)));
    let mut start = starting_point(&blocks, &priors.coefficients, family_start, &intercepts);
    if spec.family == Family::Graded {
        start.extend(marginal_cuts(&outcome.level_shares()).1);
    }
    let anchor = pooling.anchor(&start);
    start.extend(pooling.start(&[], &anchor));
    let gaussian_spread = priors.family_parameter.clone().filter(|_| spec.family == Family::Normal);
    let family_prior = priors.family_parameter.clone().filter(|_| spec.family != Family::Normal);
    match &spec.family {
        Family::GammaPoisson => notes.push(
            "overdispersion is the sd of the gamma multiplier of each row's rate (variance mean + \
             overdispersion²·mean²), sampled as log(overdispersion) with the Jacobian of that change included"
                .into(),
        ),
        Family::Beta => notes.push(
            "each share is beta distributed around its mean with the precision φ (variance \
             mean·(1 − mean)/(1 + φ)), sampled as log(precision) with the Jacobian of that change included"
                .into(),
        ),
        Family::Times { form, cut_short, came_by } => {
            let rows = outcome.time_rows();
            notes.extend(time_notes(*form, cut_short.as_deref(), outcome.cut_short.as_deref(), came_by.as_deref().map(|c| (c, rows.as_slice()))))
        }
        _ => {}
    }
    let likelihood = match (gaussian_spread, &outcome.levels) {
        (None, Some(levels)) if spec.family == Family::Graded => {
            notes.extend(graded_notes(spec, levels, &outcome));
            Likelihood::Graded(graded_data(&design, &outcome.y, levels.len(), priors.gaps.clone()))
        }
        (Some(spread_prior), _) => {
            notes.push("spread is sampled as log(spread), with the Jacobian of that change included".into());
            if !groups.is_empty() {
                notes.push(
                    "the normal likelihood keeps its sufficient statistics: cross-products of the design and the \
                     groups' level indicators, computed once, so a gradient costs the same whatever the rows"
                        .into(),
                );
            }
            let likelihood_design = with_departure_columns(&design, &groups, &group_rows);
            Likelihood::Gaussian { stats: GaussianStats::new(&likelihood_design, &outcome.y, intercepts), spread_prior }
        }
        (None, Some(levels)) => {
            notes.extend(level_notes(spec, levels, &outcome));
            Likelihood::Softmax(softmax_data(&design, &outcome.y, levels.len(), &groups, &group_rows))
        }
        (None, None) => {
            Likelihood::Glm(glm_data(&design, &spec.family, &outcome).with_groups(group_indices(&design, &groups, &group_rows)))
        }
    };
    let steps = step_terms(spec, &recipes, &priors.coefficients);
    if !steps.is_empty() && spec.family == Family::Normal {
        notes.push(
            "a steps term's effects are its whole effect times the shares, not linear in what is sampled, so a \
             normal model with one is fitted by Laplace or NUTS, never by the exact normal draws"
                .into(),
        );
    }
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
        groups,
        group_rows,
        pooling,
        family_prior,
        steps,
        #[cfg(feature = "on_disk")]
        on_disk: None,
    })
}

/// The `steps(…)` terms among `recipes`, each with its first coefficient's
/// position and the whole effect's prior (the one every step's slot holds).
fn step_terms(spec: &ModelSpec, recipes: &[TermRecipe], priors: &[Prior]) -> Vec<StepTerm> {
    let mut at = 0;
    let mut terms = Vec::new();
    for recipe in recipes {
        let width = recipe.labels().len();
        if let TermRecipe::Steps { column, levels } = recipe {
            terms.push(StepTerm {
                column: column.clone(),
                levels: levels.clone(),
                first: at,
                steps: width,
                concentration: spec.share_concentration(column).unwrap_or(DEFAULT_STEP_CONCENTRATION),
                whole_prior: priors[at].clone(),
            });
        }
        at += width;
    }
    terms
}

/// Every `prior for … shares: dirichlet(α)` names a steps term's shares;
/// the error names the cell line and the labels there are.
fn check_share_priors(spec: &ModelSpec, recipes: &[TermRecipe]) -> Result<(), ModelError> {
    let labels: Vec<String> = recipes
        .iter()
        .filter_map(|r| if let TermRecipe::Steps { column, .. } = r { Some(shares_label(column)) } else { None })
        .collect();
    match spec.share_priors.iter().find(|p| !labels.contains(&p.label)) {
        None => Ok(()),
        Some(declared) => Err(ModelError::Prior {
            group: format!("`{}`", declared.label),
            message: if labels.is_empty() {
                "dirichlet(α) is the prior of a steps(…) term's shares, and this model has none".to_string()
            } else {
                format!(
                    "dirichlet(α) is the prior of a steps(…) term's shares; this model's are {}",
                    labels.iter().map(|l| format!("`{l}`")).collect::<Vec<_>>().join(", ")
                )
            },
        }
        .at_line(declared.line)),
    }
}

/// A category outcome (levels family) has one linear predictor per level;
/// a steps term is not offered there.
fn refuse_steps_with_levels(spec: &ModelSpec, recipes: &[TermRecipe]) -> Result<(), ModelError> {
    match recipes.iter().find(|r| matches!(r, TermRecipe::Steps { .. })) {
        Some(TermRecipe::Steps { column, .. }) if spec.family == Family::Levels => Err(ModelError::Column {
            column: column.clone(),
            message: format!(
                "a `steps({column})` term is not offered with a category outcome (family levels) yet; list `{column}` as \
                 a plain term, or model the outcome as `family graded` if its levels are ordered"
            ),
        }),
        _ => Ok(()),
    }
}

/// The pooled groups of `spec` planned on `table`, checked against the
/// memory the likelihood's copy of their indicator columns needs.
fn plan_groups(spec: &ModelSpec, table: &Table, recipes: &[TermRecipe]) -> Result<Vec<GroupTerm>, ModelError> {
    let mut groups = Vec::new();
    for term in &spec.terms {
        let TermSpec::Pooled { by, within, with } = term else { continue };
        if spec.family == Family::Graded {
            return Err(ModelError::Term {
                term: term.to_string(),
                message: format!(
                    "pooled groups are not available for an ordered outcome (family graded) yet; model {} with \
                     `{by}` as an ordinary term (one intercept or offset per level) instead",
                    spec.outcome
                ),
            });
        }
        if within.as_deref() == Some(spec.outcome.as_str()) {
            return Err(ModelError::Term {
                term: term.to_string(),
                message: format!("`{}` is the outcome; a pooled group cannot be nested within it", spec.outcome),
            });
        }
        let planned = match within {
            Some(outer) => GroupTerm::plan_nested(by, outer, table),
            None => GroupTerm::plan(by, table),
        };
        let mut group = planned.map_err(|e| match e {
            ModelError::Syntax { message } => ModelError::Term { term: term.to_string(), message },
            other => other,
        })?;
        for x in with {
            group.slopes.push(varying_slope(x, recipes).map_err(|message| ModelError::Term { term: term.to_string(), message })?);
        }
        if groups.iter().any(|g: &GroupTerm| g.column == group.column) {
            return Err(ModelError::Term {
                term: term.to_string(),
                message: format!(
                    "`{by}` is pooled twice; keep one `pooled {by}` term (with its slope, if any){}",
                    if within.is_some() { ", nested or not" } else { "" }
                ),
            });
        }
        let rows = table.nrows();
        check_memory(
            &format!("the term {term}: {} indicator columns over {rows} rows", group.levels.len() * (1 + group.slopes.len())),
            bytes_for(&[rows.max(1), group.levels.len() * (1 + group.slopes.len()), 3]),
        )
        .map_err(|message| ModelError::Term { term: term.to_string(), message })?;
        groups.push(group);
    }
    Ok(groups)
}

/// A category outcome's pooled groups: each planned group once per outcome
/// level after the reference (`levels`, reference first), each copy with
/// its own spread and departures on that level's log odds; other
/// outcomes' groups unchanged.
fn for_outcome_levels(groups: Vec<GroupTerm>, spec: &ModelSpec, levels: Option<&[String]>) -> Vec<GroupTerm> {
    let Some(levels) = levels.filter(|_| spec.family == Family::Levels) else { return groups };
    groups
        .iter()
        .flat_map(|g| {
            levels[1..].iter().enumerate().map(|(block, level)| g.for_outcome_level(block, level_prefix(&spec.outcome, level, &levels[0])))
        })
        .collect()
}

/// A category outcome as a yes/no outcome of level `level` (index), for
/// choosing how that level's pooled departures are sampled.
fn one_level_outcome(outcome: &OutcomeValues, level: usize) -> OutcomeValues {
    let y = outcome.y.iter().map(|&v| f64::from(u8::from(v as usize == level))).collect();
    OutcomeValues { y, trials: None, levels: None, cut_short: None, upper: None }
}

/// The varying slope of predictor `x`: `x` must enter the model as a plain
/// slope (the population slope the levels depart from).
fn varying_slope(x: &str, recipes: &[TermRecipe]) -> Result<VaryingSlope, String> {
    let mut offset = 0;
    for recipe in recipes {
        if matches!(recipe, TermRecipe::Slope { column, .. } if column == x) {
            return Ok(VaryingSlope { column: x.to_string(), design_column: offset });
        }
        offset += recipe.labels().len();
    }
    Err(format!(
        "a varying slope of `{x}` departs from the population's slope of `{x}`, which the model does not have: add \
         `{x}` (a numeric column) to the outcome line's terms"
    ))
}

/// A `parameterise` line must name a pooled group of the model, and
/// `centred N` no more effects than the group has.
fn check_layout_lines(spec: &ModelSpec, groups: &[GroupTerm]) -> Result<(), ModelError> {
    for (name, layout) in &spec.layouts {
        if let (GroupLayout::CentredFirst(n), Some(group)) = (layout, groups.iter().find(|g| g.column == *name)) {
            let effects = 1 + group.slopes.len();
            if *n > effects {
                let names: Vec<&str> = std::iter::once("intercept").chain(group.slopes.iter().map(|s| s.column.as_str())).collect();
                return Err(ModelError::syntax(format!(
                    "`parameterise {name} centred {n}`: pooled {name} has {effects} effect{} ({}), so at most {effects} can be centred",
                    if effects == 1 { "" } else { "s" },
                    names.join(", ")
                )));
            }
        }
        if !groups.iter().any(|g| g.column == *name) {
            let pooled: Vec<&str> = groups.iter().map(|g| g.column.as_str()).collect();
            return Err(ModelError::syntax(format!(
                "`parameterise {name}`: {name} is not a pooled group of this model ({}); add `pooled {name}` to \
                 the outcome line or remove the line",
                if pooled.is_empty() { "it has none".to_string() } else { format!("pooled: {}", pooled.join(", ")) }
            )));
        }
    }
    Ok(())
}

/// Each level's raw mean outcome (per trial) on the link scale; `None`
/// for a level without rows.
fn level_link_means(family: &Family, outcome: &OutcomeValues, rows: &[usize], levels: usize) -> Vec<Option<f64>> {
    let mut sums = vec![(0.0, 0.0); levels];
    for (i, &level) in rows.iter().enumerate() {
        // Time followed over events for times cut short (the exponential mean).
        let event = outcome.cut_short.as_ref().map_or(1.0, |c| if c[i] { 0.0 } else { 1.0 });
        let trials = outcome.trials.as_ref().map_or(event, |m| m[i]);
        sums[level].0 += outcome.y[i];
        sums[level].1 += trials;
    }
    sums.into_iter().map(|(y, m)| (m > 0.0).then(|| family.link(y / m))).collect()
}

/// What the rows of each level say about a varying slope of design column
/// `x` (`terms::groups::SlopeEvidence`): the column's sum of squared
/// deviations within the level and the level's least-squares slope of the
/// outcome per trial on it, times the link's derivative at the outcome's
/// mean (so on the link scale).
fn slope_evidence(family: &Family, outcome: &OutcomeValues, x: &[f64], rows: &[usize], levels: usize) -> SlopeEvidence {
    let per_trial = |i: usize| outcome.y[i] / outcome.trials.as_ref().map_or(1.0, |m| m[i].max(1.0));
    let mut sums = vec![(0.0, 0.0, 0.0); levels];
    for (i, &level) in rows.iter().enumerate() {
        sums[level].0 += 1.0;
        sums[level].1 += x[i];
        sums[level].2 += per_trial(i);
    }
    let means: Vec<(f64, f64)> = sums.iter().map(|&(n, sx, sy)| if n > 0.0 { (sx / n, sy / n) } else { (0.0, 0.0) }).collect();
    let mut cross = vec![(0.0, 0.0); levels];
    for (i, &level) in rows.iter().enumerate() {
        let dx = x[i] - means[level].0;
        cross[level].0 += dx * dx;
        cross[level].1 += dx * (per_trial(i) - means[level].1);
    }
    let mean = outcome.mean_per_trial();
    let link_slope = match family {
        Family::Normal => 1.0,
        Family::Poisson => 1.0 / mean.max(1e-3),
        _ => {
            let p = mean.clamp(1e-3, 1.0 - 1e-3);
            1.0 / (p * (1.0 - p))
        }
    };
    SlopeEvidence {
        spread_sums: cross.iter().map(|c| c.0).collect(),
        slopes: cross
            .iter()
            .zip(&sums)
            .map(|(&(sxx, sxy), &(n, _, _))| (n >= 2.0 && sxx > 0.0).then(|| link_slope * sxy / sxx))
            .collect(),
    }
}

/// Every fitted row's level in each group.
fn fitted_group_rows(groups: &[GroupTerm], table: &Table) -> Result<Vec<Vec<usize>>, ModelError> {
    groups
        .iter()
        .map(|g| Ok(g.level_of_rows(table)?.into_iter().map(|l| l.unwrap_or(0)).collect()))
        .collect()
}

/// The design the normal likelihood's sufficient statistics are computed
/// from: the fixed-effect columns followed by each group's level
/// indicators, so that the coefficients followed by the departures give
/// every row's linear predictor (`family::pooling`). Without groups, the
/// design itself. (The GLM families take the levels by index instead,
/// [`group_indices`].)
pub(super) fn with_departure_columns(design: &DMatrix<f64>, groups: &[GroupTerm], rows: &[Vec<usize>]) -> DMatrix<f64> {
    if groups.is_empty() {
        return design.clone();
    }
    let runs = group_indices(design, groups, rows);
    let p = design.ncols();
    let width = p + runs.iter().map(|r| r.levels).sum::<usize>();
    let mut out = DMatrix::zeros(design.nrows(), width);
    out.columns_mut(0, p).copy_from(design);
    let mut at = p;
    for run in &runs {
        for (i, &level) in run.level_of_row.iter().enumerate() {
            out[(i, at + level as usize)] = run.weights.as_ref().map_or(1.0, |w| w[i]);
        }
        at += run.levels;
    }
    out
}

/// Every group's fitted rows by level index, for the GLM likelihood's
/// gather and scatter (`family::likelihood`): one run per group, and one
/// more per varying slope, weighted by the predictor's design column.
pub(super) fn group_indices(design: &DMatrix<f64>, groups: &[GroupTerm], rows: &[Vec<usize>]) -> Vec<GroupIndices> {
    let mut runs = Vec::new();
    for (group, levels) in groups.iter().zip(rows) {
        let level_of_row: Vec<u32> = levels.iter().map(|&l| l as u32).collect();
        runs.push(GroupIndices { level_of_row: level_of_row.clone(), levels: group.levels.len(), weights: None });
        for slope in &group.slopes {
            let weights = design.column(slope.design_column).iter().copied().collect();
            runs.push(GroupIndices { level_of_row: level_of_row.clone(), levels: group.levels.len(), weights: Some(weights) });
        }
    }
    runs
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

/// What a graded-family model assumes, and levels without rows.
fn graded_notes(spec: &ModelSpec, levels: &[String], outcome: &OutcomeValues) -> Vec<String> {
    let mut notes = vec![format!(
        "{}: {} ordered levels, lowest first ({}); each row has a latent score, its linear predictor plus a \
         logistic error, and falls in the level between the cuts around that score (cumulative logit); the cut \
         below {} is fixed at 0, so the intercepts place the scores against it, and the gaps between later cuts \
         are sampled as their logs with the Jacobian of that change included",
        spec.outcome,
        levels.len(),
        levels.join(", "),
        levels[1]
    )];
    for (level, share) in levels.iter().zip(outcome.level_shares()) {
        if share == 0.0 {
            notes.push(format!("level {level} of {} has no rows; the cuts around it rest on their priors", spec.outcome));
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
        (Family::GammaPoisson, _) => GlmOutcome::GammaPoisson { y },
        (Family::Beta, _) => GlmOutcome::Beta { shares: y.iter().map(|&v| BetaShare::new(v)).collect(), y },
        (Family::Times { form, .. }, _) => GlmOutcome::Times { rows: outcome.time_rows(), y, form: *form },
        _ => GlmOutcome::Bernoulli { y },
    };
    GlmData::new(rows, design.ncols(), glm_outcome)
}

/// The design as rows for the levels family, with each row's level index
/// and the pooled groups' runs of departures, each on its outcome level's
/// linear predictor.
pub(super) fn softmax_data(design: &DMatrix<f64>, y: &[f64], levels: usize, groups: &[GroupTerm], rows: &[Vec<usize>]) -> SoftmaxData {
    let design_rows: Vec<f64> = design.transpose().as_slice().to_vec();
    let blocks = groups.iter().flat_map(|g| std::iter::repeat_n(g.block(), 1 + g.slopes.len()));
    let runs = blocks.zip(group_indices(design, groups, rows)).map(|(block, indices)| DepartureRun { block, indices }).collect();
    SoftmaxData::new(design_rows, design.ncols(), y.iter().map(|&v| v as usize).collect(), levels).with_runs(runs)
}

/// The design as rows for the graded family, with each row's level index
/// and the gaps' priors.
pub(super) fn graded_data(design: &DMatrix<f64>, y: &[f64], levels: usize, gaps: Vec<Prior>) -> GradedData {
    let rows: Vec<f64> = design.transpose().as_slice().to_vec();
    GradedData::new(rows, design.ncols(), y.iter().map(|&v| v as usize).collect(), levels, gaps)
}

/// The family parameter's starting value: the outcome's sd for the
/// spread, the moment estimate for the overdispersion or the precision.
pub(super) fn family_parameter_start(family: &Family, outcome: &OutcomeValues) -> f64 {
    match family {
        Family::GammaPoisson => moment_overdispersion(&outcome.y),
        Family::Beta => moment_precision(&outcome.y),
        Family::Times { .. } => 1.0,
        _ => mean_and_sd(&outcome.y).1,
    }
}

/// Intercepts at each linear predictor's centre, other coefficients at 0,
/// the family's parameter at `family_start` (its prior and value) — each
/// moved inside its prior's support.
pub(super) fn starting_point(
    blocks: &[PredictorBlock],
    priors: &[Prior],
    family_start: Option<(&Prior, f64)>,
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
    if let Some((prior, value)) = family_start {
        start.push(inside(prior, value).ln());
    }
    start
}
