//! A model built on a table that stays on disk (cargo feature `on_disk`).
//!
//! The built [`Model`] is the one an in-memory table gives — the same
//! recipes, labels, default priors, starting point and notes — except that
//! it holds no rows: everything it needs of them comes from two passes the
//! engine plans over the file ([`super::disk_sums`]):
//!
//! 1. the outcome's and each numeric predictor's mean and sd (the engine's
//!    own `avg` and `stddev`), and a count of outcome values the family
//!    cannot take;
//! 2. the design's cross-products with the outcome centred at its mean.
//!
//! For the normal family the second pass *is* the likelihood (its
//! sufficient statistics, `family::gaussian`), so a Laplace fit draws
//! exactly and NUTS samples on them, as it would in memory. For bernoulli
//! and poisson outcomes the pass gives the design columns' spread, which
//! the default priors read; the likelihood lives in the file, and a
//! Laplace fit takes one pass per Newton step (`infer::on_disk`). NUTS
//! would need a pass per gradient and is refused there with the reason.
//!
//! Pooled groups, powers, splines and the families with a parameter beside
//! the coefficients (gamma_poisson, beta), binomial and levels are not
//! fitted on disk yet; each is refused with what to do instead.

use std::sync::atomic::AtomicBool;
use std::sync::{Arc, Mutex};
use std::time::Instant;

use datafusion::arrow::datatypes::DataType;
use datafusion::functions_aggregate::expr_fn::{avg, stddev, sum};
use datafusion::logical_expr::{cast, ident, lit, Expr};
use nalgebra::{DMatrix, DVector};

use crate::table::on_disk::{real, DiskColumn, DiskTable};
use crate::table::ColumnKind;

use super::build::{family_parameter_start, glm_data, intercept_columns, starting_point};
use super::defaults::{assign_priors, predictor_blocks, ColumnSpread};
use super::disk_sums::{cross_products, CrossSums, RowLayout, INTERRUPTED};
use super::error::ModelError;
use super::family::gaussian::GaussianStats;
use super::family::pooling::Pooling;
use super::family::Family;
use super::outcome::OutcomeValues;
use super::posterior::{Likelihood, Model};
use super::prior::short_number;
use super::spec::{ModelSpec, TermSpec};
use super::terms::TermRecipe;

/// One pass of the engine over the file: what it gathered and how long.
#[derive(Debug, Clone, PartialEq)]
pub struct Pass {
    pub what: String,
    pub seconds: f64,
}

/// What a model on disk keeps of its table: the plan of the rows, the
/// design row's layout, the counts the summary needs, and the passes made.
#[derive(Debug, Clone)]
pub struct OnDisk {
    pub(crate) table: DiskTable,
    pub(crate) layout: RowLayout,
    pub(crate) rows: usize,
    /// Per design column, the rows where it is not 0.
    pub(crate) nonzero: Vec<usize>,
    /// `XᵀX` of the design (the mass-matrix rule reads it).
    pub(crate) xtx: DMatrix<f64>,
    /// Passes so far, building and fitting (shared by the model's clones).
    pub(crate) passes: Arc<Mutex<Vec<Pass>>>,
}

impl PartialEq for OnDisk {
    fn eq(&self, other: &Self) -> bool {
        self.table.source == other.table.source && self.layout == other.layout && self.rows == other.rows && self.xtx == other.xtx
    }
}

impl OnDisk {
    /// The file or folder the rows stay in.
    pub fn source(&self) -> &str {
        &self.table.source
    }

    /// The scheduler (`HOST:PORT`) whose executors run the passes, `None`
    /// when the embedded engine runs them.
    pub fn scheduler(&self) -> Option<&str> {
        self.table.engine.scheduler()
    }

    /// The rows the model was fitted to.
    pub fn rows(&self) -> usize {
        self.rows
    }

    /// Every pass made so far.
    pub fn passes(&self) -> Vec<Pass> {
        self.passes.lock().map(|p| p.clone()).unwrap_or_default()
    }

    /// `XᵀX` of the design over the kept rows.
    pub fn cross_products(&self) -> DMatrix<f64> {
        self.xtx.clone()
    }

    pub(crate) fn record(&self, what: String, started: Instant) {
        if let Ok(mut passes) = self.passes.lock() {
            passes.push(Pass { what, seconds: started.elapsed().as_secs_f64() });
        }
    }
}

impl Model {
    /// Builds the model of `spec` on a table that stays on disk (see the
    /// module docs for what differs from [`Model::build`]).
    pub fn build_on_disk(spec: &ModelSpec, table: &DiskTable, cancel: &AtomicBool) -> Result<Model, ModelError> {
        build(spec, table, cancel).map_err(|e| match spec.formula_line {
            Some(line) if !matches!(e, ModelError::Prior { .. }) => e.at_line(line),
            _ => e,
        })
    }

    /// The table on disk behind this model, if it was built on one.
    pub fn on_disk(&self) -> Option<&OnDisk> {
        self.on_disk.as_ref()
    }

    /// Whether the likelihood must be evaluated over the file (a table on
    /// disk of a family without sufficient statistics).
    pub fn likelihood_in_file(&self) -> bool {
        self.on_disk.is_some() && !matches!(self.likelihood, Likelihood::Gaussian { .. })
    }
}

fn build(spec: &ModelSpec, table: &DiskTable, cancel: &AtomicBool) -> Result<Model, ModelError> {
    check_supported(spec, table)?;
    if cancel.load(std::sync::atomic::Ordering::Relaxed) {
        return Err(engine_error(&spec.outcome, INTERRUPTED.into()));
    }
    let passes = Arc::new(Mutex::new(Vec::new()));
    let started = Instant::now();
    let moments = moments(spec, table)?;
    passes.lock().expect("fresh").push(Pass { what: "means and sds".into(), seconds: started.elapsed().as_secs_f64() });
    let (recipes, mut notes) = plan(spec, table, &moments)?;
    let layout = RowLayout::new(&recipes).map_err(ModelError::syntax)?;
    let (y_mean, y_sd) = moments.outcome;
    let started = Instant::now();
    let centre = if spec.family == Family::Normal { y_mean } else { 0.0 };
    let sums = cross_products(table, &spec.outcome, &layout, centre, cancel).map_err(|e| engine_error(&spec.outcome, e))?;
    passes.lock().expect("fresh").push(Pass { what: "cross-products".into(), seconds: started.elapsed().as_secs_f64() });
    let p = layout.width();
    let n = sums.n;
    let columns = spread_of(&sums, p);
    let stand_in = OutcomeValues::with_moments(y_mean, y_sd);
    let blocks = predictor_blocks(spec, &stand_in);
    let priors = assign_priors(spec, &recipes, &stand_in, &blocks, &columns, &[])?;
    let labels: Vec<String> = recipes.iter().flat_map(TermRecipe::labels).collect();
    let intercepts = intercept_columns(&recipes);
    if priors.at_average_row.iter().any(|&a| a) {
        notes.push(
            "default intercept priors are on the prediction at the average row (every other design column at its \
             mean), so they mean the same whatever the centring"
                .into(),
        );
    }
    let average_row: Vec<f64> = (0..p).map(|j| if intercepts.contains(&j) { 0.0 } else { columns.mean[j] }).collect();
    let family_start = priors.family_parameter.as_ref().map(|prior| (prior, family_parameter_start(&spec.family, &stand_in)));
    let start = starting_point(&blocks, &priors.coefficients, family_start, &intercepts);
    let xtx = DMatrix::from_row_slice(p, p, &sums.xtx);
    let likelihood = match (&spec.family, priors.family_parameter.clone()) {
        (Family::Normal, Some(spread_prior)) => {
            notes.push("spread is sampled as log(spread), with the Jacobian of that change included".into());
            let stats = GaussianStats::from_sums(xtx.clone(), DVector::from_vec(sums.xty.clone()), sums.yty, n, y_mean, intercepts);
            Likelihood::Gaussian { stats, spread_prior }
        }
        _ => Likelihood::Glm(glm_data(&DMatrix::zeros(0, p), &spec.family, &OutcomeValues { y: Vec::new(), trials: None, levels: None, cut_short: None, upper: None })),
    };
    notes.push(format!(
        "the table stays on disk ({}): the engine gathered the sums this model needs over its {} rows",
        table.source,
        n as usize
    ));
    Ok(Model {
        name: spec.name.clone(),
        outcome: spec.outcome.clone(),
        table: spec.table.clone(),
        family: spec.family.clone(),
        outcome_levels: None,
        recipes,
        labels,
        design: DMatrix::zeros(0, p),
        y: Vec::new(),
        coefficient_priors: priors.coefficients,
        at_average_row: priors.at_average_row,
        average_row,
        likelihood,
        priors_used: priors.uses,
        notes,
        start,
        groups: Vec::new(),
        group_rows: Vec::new(),
        pooling: Pooling::new(&[], &[], &[], priors.correlation_lkj, None, p),
        family_prior: None,
        steps: Vec::new(),
        on_disk: Some(OnDisk { table: table.clone(), layout, rows: n as usize, nonzero: sums.nonzero, xtx, passes }),
    })
}

fn engine_error(outcome: &str, message: String) -> ModelError {
    if message == INTERRUPTED {
        ModelError::Incomplete { message: "the model was interrupted while the engine gathered its sums".into() }
    } else {
        ModelError::Column { column: outcome.into(), message: format!("the engine could not gather the sums: {message}") }
    }
}

/// Families, terms and columns a table on disk can fit.
fn check_supported(spec: &ModelSpec, table: &DiskTable) -> Result<(), ModelError> {
    if !matches!(spec.family, Family::Normal | Family::Bernoulli | Family::Poisson) {
        return Err(ModelError::Family {
            message: format!(
                "family {} is not fitted on a table on disk yet (normal, bernoulli and poisson are); load the table \
                 into memory (without \"stay on disk\") for it",
                spec.family.name()
            ),
        });
    }
    if let Some(term) = spec.terms.iter().find(|t| matches!(t, TermSpec::Pooled { .. })) {
        return Err(ModelError::Term {
            term: term.to_string(),
            message: "pooled groups are not fitted on a table on disk yet; load the table into memory (without \
                      \"stay on disk\"), or make the column an ordinary term (one intercept per level)"
                .into(),
        });
    }
    let outcome = find(table, &spec.outcome)?;
    if outcome.text {
        return Err(ModelError::Column {
            column: spec.outcome.clone(),
            message: "is a category; a category outcome (family levels) is not fitted on a table on disk yet".into(),
        });
    }
    Ok(())
}

fn find<'a>(table: &'a DiskTable, name: &str) -> Result<&'a DiskColumn, ModelError> {
    table.column(name).ok_or_else(|| {
        let names: Vec<&str> = table.columns.iter().map(|c| c.name.as_str()).collect();
        ModelError::UnknownColumn { name: name.into(), table: table.name.clone(), hint: format!(" (its columns are {})", names.join(", ")) }
    })
}

/// Pass 1's results: the outcome's mean and sd, each numeric predictor's.
struct Moments {
    outcome: (f64, f64),
    predictors: Vec<(String, f64, f64)>,
}

impl Moments {
    fn of(&self, name: &str) -> (f64, f64) {
        self.predictors.iter().find(|(n, _, _)| n == name).map_or((f64::NAN, f64::NAN), |&(_, m, s)| (m, s))
    }
}

/// One pass: means and sds of the outcome and numeric predictors, and the
/// rows whose outcome the family cannot take.
fn moments(spec: &ModelSpec, table: &DiskTable) -> Result<Moments, ModelError> {
    let mut numeric: Vec<String> = Vec::new();
    for term in &spec.terms {
        let name = term.predictor();
        if name == spec.outcome {
            return Err(ModelError::syntax(format!("`{name}` is the outcome; it cannot also be a predictor")));
        }
        if !find(table, name)?.text && !numeric.iter().any(|n| n == name) {
            numeric.push(name.to_string());
        }
    }
    let number = |name: &str| cast(ident(name), DataType::Float64);
    let y = number(&spec.outcome);
    let unfit = match spec.family {
        Family::Bernoulli => y.clone().not_eq(lit(0.0)).and(y.clone().not_eq(lit(1.0))),
        Family::Poisson => y.clone().lt(lit(0.0)).or(cast(cast(y.clone(), DataType::Int64), DataType::Float64).not_eq(y.clone())),
        _ => lit(false),
    };
    let mut aggregates: Vec<Expr> = vec![avg(y.clone()), stddev(y), sum(cast(unfit, DataType::Int64))];
    for name in &numeric {
        aggregates.push(avg(number(name)));
        aggregates.push(stddev(number(name)));
    }
    let aliased: Vec<Expr> = aggregates.into_iter().enumerate().map(|(k, e)| e.alias(format!("m{k}"))).collect();
    let frame = table.frame.clone().aggregate(vec![], aliased).map_err(|e| engine_error(&spec.outcome, e.to_string()))?;
    let batches = table.engine.collect(frame).map_err(|e| engine_error(&spec.outcome, e.to_string()))?;
    let batch = batches.iter().find(|b| b.num_rows() > 0).ok_or_else(|| engine_error(&spec.outcome, "no rows".into()))?;
    let bad = datafusion::common::ScalarValue::try_from_array(batch.column(2), 0).map_or(0, |v| match v {
        datafusion::common::ScalarValue::Int64(Some(c)) => c,
        _ => 0,
    });
    if bad > 0 {
        let wanted = if spec.family == Family::Bernoulli { "0 or 1, which a bernoulli outcome must be" } else { "a whole number ≥ 0, which a poisson outcome must be" };
        return Err(ModelError::Column { column: spec.outcome.clone(), message: format!("{bad} kept rows hold a value that is not {wanted}") });
    }
    let outcome = (real(batch, 0).unwrap_or(f64::NAN), real(batch, 1).unwrap_or(0.0));
    if spec.family == Family::Normal && outcome.1.partial_cmp(&0.0) != Some(std::cmp::Ordering::Greater) {
        return Err(ModelError::Column { column: spec.outcome.clone(), message: "has the same value in every kept row, so there is nothing to model".into() });
    }
    let predictors = numeric.iter().enumerate().map(|(k, name)| (name.clone(), real(batch, 3 + 2 * k).unwrap_or(f64::NAN), real(batch, 4 + 2 * k).unwrap_or(0.0))).collect();
    Ok(Moments { outcome, predictors })
}

/// The terms' recipes from pass 1, as `terms::plan_terms` plans them on a
/// table in memory (same coding, centres and notes).
fn plan(spec: &ModelSpec, table: &DiskTable, moments: &Moments) -> Result<(Vec<TermRecipe>, Vec<String>), ModelError> {
    let mut recipes = Vec::new();
    let mut notes = Vec::new();
    let mut used: Vec<&str> = Vec::new();
    for term in &spec.terms {
        let name = term.predictor();
        if used.contains(&name) {
            return Err(ModelError::Term { term: term.to_string(), message: format!("`{name}` already enters the model through another term; keep one term per column") });
        }
        used.push(name);
        let column = find(table, name)?;
        match term {
            TermSpec::Column(_) if column.text => {
                let levels = levels_of(table, column)?;
                if recipes.iter().any(|r| matches!(r, TermRecipe::LevelIntercepts { .. })) {
                    notes.push(format!("{name}: offsets of each level from the first level, {}, which is the reference", levels[0]));
                    recipes.push(TermRecipe::LevelOffsets { column: name.into(), levels });
                } else {
                    notes.push(format!("{name}: one intercept per level ({}); no separate overall intercept", levels.join(", ")));
                    recipes.push(TermRecipe::LevelIntercepts { column: name.into(), levels });
                }
            }
            TermSpec::Column(_) => {
                let (centre, scale) = centre_and_scale(spec, name, moments, &mut notes)?;
                recipes.push(TermRecipe::Slope { column: name.into(), centre, scale });
            }
            TermSpec::Per { predictor, by } => {
                if column.text {
                    return Err(ModelError::Column {
                        column: predictor.clone(),
                        message: format!("a category has no slope, so `{predictor} per {by}` cannot be built; list `{predictor}` as a term on its own for one intercept per level"),
                    });
                }
                let by_column = find(table, by)?;
                if !by_column.text {
                    return Err(ModelError::Column { column: by.clone(), message: "the column after `per` must be a category".into() });
                }
                let levels = levels_of(table, by_column)?;
                let (centre, scale) = centre_and_scale(spec, predictor, moments, &mut notes)?;
                recipes.push(TermRecipe::SlopePer { column: predictor.clone(), centre, scale, by: by.clone(), levels });
            }
            _ => {
                return Err(ModelError::Term {
                    term: term.to_string(),
                    message: "powers and splines are not fitted on a table on disk yet; use the column as a plain slope, or load the table into memory (without \"stay on disk\")".into(),
                })
            }
        }
    }
    if !recipes.iter().any(|r| matches!(r, TermRecipe::LevelIntercepts { .. })) {
        recipes.insert(0, TermRecipe::Intercept);
    }
    Ok((recipes, notes))
}

fn centre_and_scale(spec: &ModelSpec, name: &str, moments: &Moments, notes: &mut Vec<String>) -> Result<(f64, f64), ModelError> {
    let (mean, sd) = moments.of(name);
    if !(sd > 0.0 && sd.is_finite()) {
        return Err(ModelError::Column { column: name.into(), message: "has the same value in every row, so its effect cannot be learned; drop the term".into() });
    }
    if spec.centre {
        notes.push(format!("{name} centred at {} (its mean); intercepts are for that value", short_number(mean)));
        Ok((mean, sd))
    } else {
        Ok((0.0, sd))
    }
}

/// A category's declared levels; undeclared, an error listing what the file holds.
fn levels_of(table: &DiskTable, column: &DiskColumn) -> Result<Vec<String>, ModelError> {
    match (&column.levels, &column.kind) {
        (Some(levels), ColumnKind::Category) => Ok(levels.clone()),
        _ => {
            let found = table.some_values(&column.name);
            Err(ModelError::Column {
                column: column.name.clone(),
                message: format!(
                    "a category on disk needs its levels declared in the table cell, in the order wanted (the first is \
                     the reference), e.g. `{}: category({})`; the file holds {}",
                    column.name,
                    found.join(", "),
                    if found.is_empty() { "no values".to_string() } else { found.join(", ") }
                ),
            })
        }
    }
}

/// Each design column's mean and sd from the cross-products.
fn spread_of(sums: &CrossSums, p: usize) -> ColumnSpread {
    let n = sums.n;
    let mean: Vec<f64> = sums.column_sums.iter().map(|s| s / n).collect();
    let sd = (0..p)
        .map(|j| {
            let squares = sums.xtx[j * p + j] - n * mean[j] * mean[j];
            if n > 1.0 { (squares.max(0.0) / (n - 1.0)).sqrt() } else { 0.0 }
        })
        .collect();
    ColumnSpread { sd, mean }
}

impl Model {
    /// One pass over the file at coefficients `beta` (bernoulli or poisson):
    /// the log-likelihood without its constant terms, its gradient and the
    /// information `XᵀWX` (row-major). `None` for a model in memory.
    pub(crate) fn disk_newton_pass(&self, beta: &[f64], cancel: &AtomicBool) -> Option<Result<(f64, Vec<f64>, Vec<f64>), String>> {
        let disk = self.on_disk.as_ref()?;
        let started = Instant::now();
        let result = super::disk_sums::newton_sums(&disk.table, &self.outcome, &disk.layout, &self.family, beta, cancel);
        disk.record("Newton step".into(), started);
        Some(result)
    }
}
