//! The Bayesian estimate of a total effect from its identifying formula:
//! the one evaluator for effects that no adjustment set identifies (the
//! front door through any number of mediators, and the formula of the
//! complete identification algorithm, [`crate::graph::Complete`]).
//!
//! An identifying formula ([`Formula`]) is built from products, sums over
//! observed nodes and observed conditionals `Pr[v | given]`. Without
//! ratios it is a generative recipe, which is how it is evaluated here:
//!
//! 1. *Flatten.* Every sum binds fresh copies of its nodes (an inner sum
//!    over the exposure runs over its values, not the value set), so the
//!    formula becomes one product of conditionals over distinct node
//!    copies, summed over every bound copy. A joint `Pr[a, b | g]` is split
//!    into `Pr[a | g] · Pr[b | g, a]` (the product rule, in the graph's
//!    order). Each bound copy and the outcome must be drawn by exactly one
//!    factor, and the factors must chain (each given copy drawn before), or
//!    the formula is refused.
//! 2. *Take what the rows give.* A sum over observed values of observed
//!    probabilities is an average over the rows: factors that form a chain
//!    of observed conditionals from nothing (`Pr[a] · Pr[b | a] · …`, each
//!    given every copy taken before it) take the rows' own values.
//! 3. *Fit the rest.* Every other factor `Pr[v | g1, g2, …]` becomes an
//!    additive regression `v from g1, g2, … using T` with the family read
//!    from v's kind (the answer's own model builder); identical
//!    conditionals share one fit.
//! 4. *Simulate per posterior draw.* For each draw, in chain order, each
//!    fitted copy is drawn from its regression over the rows, the exposure
//!    set; the outcome's factor gives its mean, averaged over rows. The two
//!    settings share draw index and noise streams, so their difference is a
//!    paired contrast, summarised last.
//!
//! A ratio is evaluated when it is the outcome's expectation normalised:
//! the denominator is the numerator with the outcome summed out (the
//! napkin graph's `(sum over w of Pr[w]·Pr[x | w, z]·Pr[y | w, z, x]) ÷
//! (sum over y′, w of …)`). The factors that give the probability of the
//! value set (the exposure, or a node the formula holds at any value) are
//! then weights: each row's simulated values are weighted by those
//! factors' densities at the set values under their fitted regressions, and
//! the outcome's mean is the weighted average over the rows, per draw
//! (self-normalised importance weighting of the rows). A node the formula
//! holds at any value is held at one (a numeric one's mean, a category's
//! most frequent level), as the weights need one value.
//!
//! The regressions are fitted separately and their draws paired by index.
//! For the front door they are two factors of one joint density with
//! independent priors, so that pairing gives joint posterior draws; for a
//! general formula the conditionals need not factorise one density, and
//! pairing treats their posteriors as independent.

use std::collections::BTreeMap;
use std::sync::atomic::AtomicBool;

use rand::rngs::StdRng;
use rand::SeedableRng;

use crate::graph::Formula;
use crate::infer::fit::{fit_model, Fit, Method};
use crate::infer::nuts::Progress;
use crate::limits::{bytes_for, check_memory};
use crate::model::{Family, Model, ModelSpec};
use crate::table::{Column, ColumnData, Table};

use super::answer::family_for;
use super::contrast::{scale_words, Contrast, On};
use super::error::QueryError;
use super::formula_chain::{chain_estimate, chain_nodes};
use super::formula_levels::{level_estimate, level_nodes, level_settings};
use super::support::{column_mean, drawn_column, interval_words, parameter_rows, require_column, stream_seed, ContrastSummary, Setting};

/// The seed of the simulated node values.
pub const FORMULA_SEED: u64 = 16_180;

/// Below this share of the rows, the effective number of a ratio's
/// weighted rows earns a warning.
const WEIGHT_SHARE_WARNING: f64 = 0.05;

/// One fitted conditional of the formula.
pub struct FittedConditional {
    /// The node drawn.
    pub node: String,
    /// The nodes it is drawn given (columns of the table).
    pub given: Vec<String>,
    /// Its regression, the fit and the body as written.
    pub model: Model,
    pub fit: Fit,
    pub text: String,
}

/// The fitted parts and contrasts of a formula estimate.
pub struct FormulaFit {
    /// Every fitted conditional, the outcome's last.
    pub conditionals: Vec<FittedConditional>,
    /// The nodes whose values are the rows' own (an average over rows).
    pub from_rows: Vec<String>,
    /// One contrast per comparison of exposure settings.
    pub contrasts: Vec<Contrast>,
    /// Sampler warnings of every fit, and notes on the pairing.
    pub warnings: Vec<String>,
}

/// What plays a node copy's part in the flattened formula.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Role {
    /// The exposure at the value set.
    Set,
    /// A node the formula takes but does not depend on: the rows' values.
    Fixed,
    /// The outcome.
    Outcome,
    /// A copy bound by a sum.
    Bound,
}

/// A copy of an observed node.
#[derive(Debug, Clone)]
struct Copy {
    column: String,
    role: Role,
}

/// `Pr[of | given]` over copies.
#[derive(Debug, Clone)]
struct Factor {
    of: usize,
    given: Vec<usize>,
}

/// How a factor is evaluated.
#[derive(Debug, Clone, PartialEq)]
enum Source {
    /// The rows' own values of its node.
    Rows,
    /// Drawn (or, for the outcome, its mean) from fitted conditional `k`.
    Fitted(usize),
}

/// The formula as a simulation: copies, factors in chain order, and how
/// each is evaluated.
#[derive(Debug)]
struct Plan {
    copies: Vec<Copy>,
    steps: Vec<(Factor, Source)>,
    /// Distinct conditionals to fit: (node, given columns).
    conditionals: Vec<(String, Vec<String>)>,
    /// For a ratio: the factors of a value set, evaluated as densities at
    /// that value (each with its conditional), after the chain.
    weights: Vec<(Factor, usize)>,
}

impl Plan {
    /// Whether the formula is a ratio evaluated by weighting the rows.
    fn weighted(&self) -> bool {
        !self.weights.is_empty()
    }
}

/// How a formula estimate is simulated: the exposure settings compared
/// (`(to, from)` pairs), the rows the simulation runs over and averages
/// (the fitted table's, or rows resampled from it), and the seed of the
/// drawn node values.
pub(crate) struct FormulaSimulation<'a> {
    pub(crate) settings: Vec<(Setting, Setting)>,
    pub(crate) rows: &'a Table,
    pub seed: u64,
}

/// Fit the conditionals `formula` needs and contrast `E[y | do(x)]`
/// between the settings the answer compares; `also_set` are nodes the
/// formula takes without depending on them (their rows' values are used).
#[allow(clippy::too_many_arguments)]
pub fn formula_estimate(
    table: &Table,
    x: &str,
    y: &str,
    formula: &Formula,
    also_set: &[String],
    method: &Method,
    cancel: &AtomicBool,
    mass: f64,
    progress: &(dyn Fn(Progress) + Sync),
) -> Result<FormulaFit, QueryError> {
    let place = format!("ask total effect of {x} on {y} by its identifying formula");
    let column = require_column(table, x, &place)?;
    let by_levels = plan(formula, x, y, also_set, &place).is_err() && chain_nodes(table, formula, x, y, also_set, &place).is_err();
    let compared = if by_levels { level_settings(column, &place)? } else { settings(column, &place)? };
    let simulation = FormulaSimulation { settings: compared, rows: table, seed: FORMULA_SEED };
    formula_estimate_with(table, x, y, formula, also_set, method, cancel, mass, progress, &simulation)
}

/// [`formula_estimate`] with the settings, rows and seed of `simulation`:
/// the conditionals are fitted on `table`, the chain simulated over
/// `simulation.rows`.
#[allow(clippy::too_many_arguments)]
pub(crate) fn formula_estimate_with(
    table: &Table,
    x: &str,
    y: &str,
    formula: &Formula,
    also_set: &[String],
    method: &Method,
    cancel: &AtomicBool,
    mass: f64,
    progress: &(dyn Fn(Progress) + Sync),
    simulation: &FormulaSimulation,
) -> Result<FormulaFit, QueryError> {
    let place = format!("ask total effect of {x} on {y} by its identifying formula");
    let plan = match plan(formula, x, y, also_set, &place) {
        Ok(plan) => plan,
        Err(shape) => {
            if chain_nodes(table, formula, x, y, also_set, &place).is_ok() {
                return chain_estimate(table, x, y, formula, also_set, method, cancel, mass, progress, simulation, &[]);
            }
            if level_nodes(table, formula, x, y, also_set, &place).is_ok() {
                return level_estimate(table, x, y, formula, also_set, method, cancel, mass, progress, simulation, &[]);
            }
            return Err(shape);
        }
    };
    for c in &plan.copies {
        require_column(table, &c.column, &place)?;
        require_column(simulation.rows, &c.column, &place)?;
    }
    family_for(table, y, &place)?;
    let n = simulation.rows.nrows();
    check_memory(&format!("{place}: {} simulated node copies over {n} rows", plan.copies.len()), bytes_for(&[n.max(1), plan.copies.len().max(1), 2]))
        .map_err(QueryError::request)?;
    let mut conditionals = Vec::with_capacity(plan.conditionals.len());
    for (node, given) in &plan.conditionals {
        QueryError::stop_if(cancel, &place)?;
        conditionals.push(fit_conditional(table, node, given, method, cancel, progress, &place)?);
    }
    let mut warnings: Vec<String> = conditionals.iter().flat_map(|c| c.fit.warnings.iter().cloned()).collect();
    let params: Vec<Vec<Vec<f64>>> = conditionals.iter().map(|c| parameter_rows(&c.model, &c.fit.draws)).collect::<Result<_, _>>()?;
    let draws = params.iter().map(Vec::len).min().unwrap_or(0);
    if params.iter().any(|p| p.len() != draws) {
        warnings.push(format!("the fits kept different numbers of draws; the first {draws} of each are paired"));
    }
    if draws == 0 {
        return Err(QueryError::request(format!("{place}: the fits kept no draws")));
    }
    let outcome_model = &conditionals.last().expect("the outcome's conditional is fitted").model;
    let held = held_values(&plan, simulation.rows, &place)?;
    let mut contrasts = Vec::new();
    let mut least_share = 1.0_f64;
    for (to, from) in &simulation.settings {
        let mut changes = Vec::with_capacity(draws);
        let mut means = Vec::with_capacity(draws);
        for d in 0..draws {
            QueryError::stop_if(cancel, &place)?;
            let (under_to, share_to) = mean_under(&plan, simulation, to, &held, &conditionals, &params, d)?;
            let (under_from, share_from) = mean_under(&plan, simulation, from, &held, &conditionals, &params, d)?;
            least_share = least_share.min(share_to).min(share_from);
            changes.push(under_to - under_from);
            means.push((under_to, under_from));
        }
        let how = how_words(&plan, &held, x, y, n, simulation.seed);
        contrasts.push(formula_contrast(table, x, y, outcome_model, to, from, changes, means, mass, how, Some(simulation.seed))?);
    }
    if plan.weighted() && least_share < WEIGHT_SHARE_WARNING {
        warnings.push(format!(
            "the ratio's weights rest on few rows: at some draw they count for {:.1}% of the {n} rows (Kish's effective number); \
             the settings compared may lie where the rows give {x} little density, so treat the interval as rough",
            100.0 * least_share
        ));
    }
    let from_rows = plan.steps.iter().filter(|(_, s)| *s == Source::Rows).map(|(f, _)| plan.copies[f.of].column.clone()).collect();
    Ok(FormulaFit { conditionals, from_rows, contrasts, warnings })
}

/// The contrast of `E[y | do(x)]` between two settings from its per-draw
/// changes and means, with the simulation described in `held_how`.
#[allow(clippy::too_many_arguments)]
pub(super) fn formula_contrast(
    table: &Table,
    x: &str,
    y: &str,
    outcome_model: &Model,
    to: &Setting,
    from: &Setting,
    changes: Vec<f64>,
    means: Vec<(f64, f64)>,
    mass: f64,
    held_how: String,
    seed: Option<u64>,
) -> Result<Contrast, QueryError> {
    let s = ContrastSummary::of(&changes, mass)?;
    let is_probability = matches!(outcome_model.family(), Family::Bernoulli | Family::Binomial { .. });
    Ok(Contrast {
        contrast: format!("{x} {} vs {}", to.text(), from.text()),
        model: outcome_model.name().to_string(),
        variable: x.to_string(),
        to: to.text(),
        from: from.text(),
        on: "means".to_string(),
        scale: scale_words(outcome_model, On::Means, true),
        in_outcome_unit: !is_probability,
        unit: if is_probability { None } else { table.column(y).and_then(|c| c.unit.clone()) },
        mean: s.mean,
        lower: s.lower,
        upper: s.upper,
        share_above_zero: s.share_above_zero,
        share_below_zero: s.share_below_zero,
        mass,
        interval: interval_words(mass),
        held: Vec::new(),
        held_how,
        over_rows: true,
        along: None,
        grid: Vec::new(),
        seed,
        notes: Vec::new(),
        draws: changes,
        means,
        level: None,
        curves: None,
    })
}

/// Whether `formula` can be evaluated on `table`: by simulation over the
/// rows (see the module notes), or else exactly on a chain of normal
/// regressions ([`super::formula_chain`]) or on a chain over the levels of
/// discrete nodes ([`super::formula_levels`]); the error gives every reason.
pub fn check_formula(table: &Table, formula: &Formula, x: &str, y: &str, also_set: &[String]) -> Result<(), QueryError> {
    let place = format!("ask total effect of {x} on {y} by its identifying formula");
    let Err(shape) = plan(formula, x, y, also_set, &place) else {
        return Ok(());
    };
    let (Err(normal), Err(levels)) = (chain_nodes(table, formula, x, y, also_set, &place), level_nodes(table, formula, x, y, also_set, &place)) else {
        return Ok(());
    };
    let trim = |e: QueryError| e.to_string().trim_start_matches(&format!("{place}: ")).to_string();
    Err(QueryError::request(format!("{shape}; {}; {}", trim(normal), trim(levels))))
}

/// Every level against the first for a category exposure; mean + 1 vs mean
/// for a numeric one (as the adjustment answer compares).
pub(crate) fn settings(column: &Column, place: &str) -> Result<Vec<(Setting, Setting)>, QueryError> {
    if let Some(levels) = column.data.levels() {
        let first = Setting::read(column, &levels[0], place)?;
        return levels[1..].iter().map(|l| Ok((Setting::read(column, l, place)?, first.clone()))).collect();
    }
    let centre = column_mean(column).ok_or_else(|| QueryError::request(format!("{place}: {} has no values", column.name)))?;
    Ok(vec![(Setting::Number(centre + 1.0), Setting::Number(centre))])
}

/// The simulation in words, for the contrast's `held_how`.
fn how_words(plan: &Plan, held: &[Option<Setting>], x: &str, y: &str, rows: usize, seed: u64) -> String {
    let mut drawn = Vec::new();
    let mut taken = Vec::new();
    for (f, source) in &plan.steps {
        let copy = &plan.copies[f.of];
        if copy.role == Role::Outcome {
            continue;
        }
        match source {
            Source::Rows => taken.push(copy_words(copy, x)),
            Source::Fitted(_) => {
                let given: Vec<String> = f.given.iter().map(|&g| copy_words(&plan.copies[g], x)).collect();
                drawn.push(if given.is_empty() { copy.column.clone() } else { format!("{} from {}", copy.column, given.join(", ")) });
            }
        }
    }
    let mut parts = Vec::new();
    if !taken.is_empty() {
        parts.push(format!("{} taken from each row", taken.join(", ")));
    }
    if !drawn.is_empty() {
        parts.push(format!("{} drawn in every row from fitted models", drawn.join("; ")));
    }
    if plan.weighted() {
        let weights: Vec<String> = plan
            .weights
            .iter()
            .map(|(f, _)| {
                let given: Vec<String> = f.given.iter().map(|&g| copy_words(&plan.copies[g], x)).collect();
                format!("{} given {}", copy_words(&plan.copies[f.of], x), given.join(", "))
            })
            .collect();
        let at: Vec<String> = plan.copies.iter().zip(held).filter_map(|(c, h)| h.as_ref().map(|h| format!("{} = {}", c.column, h.text()))).collect();
        return format!(
            "identifying formula (a ratio) by simulation with {x} set{}: {}; {y}'s mean from its model at those values, averaged over the {rows} rows \
             weighted by the fitted density of {} (seed {seed})",
            if at.is_empty() { String::new() } else { format!(" and {} held", at.join(", ")) },
            if parts.is_empty() { "nothing else simulated".to_string() } else { parts.join("; then ") },
            weights.join(" and ")
        );
    }
    format!(
        "identifying formula by simulation with {x} set: {}; {y}'s mean from its model at those values, averaged over the {rows} rows (seed {seed})",
        if parts.is_empty() { "nothing else simulated".to_string() } else { parts.join("; then ") }
    )
}

/// For a ratio, the one value each node held at any value takes: a numeric
/// column's mean, a category's most frequent level (`None` elsewhere, and
/// for every copy of a formula without a ratio, whose held nodes keep the
/// rows' values).
fn held_values(plan: &Plan, rows: &Table, place: &str) -> Result<Vec<Option<Setting>>, QueryError> {
    plan.copies
        .iter()
        .map(|c| {
            if !plan.weighted() || c.role != Role::Fixed {
                return Ok(None);
            }
            let column = require_column(rows, &c.column, place)?;
            if let ColumnData::Category { codes, levels } = &column.data {
                let mut counts = vec![0usize; levels.len()];
                codes.iter().for_each(|&k| counts[k as usize] += 1);
                let most = (0..levels.len()).max_by_key(|&k| (counts[k], std::cmp::Reverse(k))).unwrap_or(0);
                return Ok(Some(Setting::read(column, &levels[most], place)?));
            }
            let mean = column_mean(column).ok_or_else(|| QueryError::request(format!("{place}: {} has no values to hold it at", c.column)))?;
            Ok(Some(Setting::Number(mean)))
        })
        .collect()
}

fn copy_words(copy: &Copy, x: &str) -> String {
    match copy.role {
        Role::Set => format!("{x} as set"),
        Role::Bound if copy.column == x => format!("{x} as observed"),
        _ => copy.column.clone(),
    }
}

/// Flatten `formula`, check that it chains, and decide each factor's
/// source; a ratio must be the outcome's expectation normalised.
fn plan(formula: &Formula, x: &str, y: &str, also_set: &[String], place: &str) -> Result<Plan, QueryError> {
    let Formula::Ratio { numerator, denominator } = formula else {
        let (copies, factors) = flat(formula, x, y, also_set, place)?;
        return build_plan(copies, factors, Vec::new(), place);
    };
    let (copies, factors) = flat(numerator, x, y, also_set, place)?;
    let (d_copies, d_factors) = flat(denominator, x, y, also_set, place)?;
    if factors.iter().any(|f| f.given.iter().any(|&g| copies[g].role == Role::Outcome)) {
        return Err(unsupported(place, &format!("its numerator draws a node given {y}, so summing {y} out does not leave the rest")));
    }
    let mut expected: Vec<String> = factors.iter().map(|f| signature(&copies, f)).collect();
    let mut found: Vec<String> = d_factors.iter().map(|f| signature(&d_copies, f)).collect();
    expected.sort();
    found.sort();
    if expected != found || d_copies.iter().enumerate().any(|(i, c)| c.role == Role::Outcome && d_factors.iter().any(|f| f.of == i || f.given.contains(&i))) {
        return Err(unsupported(place, &format!("its denominator is not its numerator with {y} summed out")));
    }
    let (weights, drawn): (Vec<Factor>, Vec<Factor>) = factors.into_iter().partition(|f| matches!(copies[f.of].role, Role::Set | Role::Fixed));
    if weights.is_empty() {
        return Err(unsupported(place, "its ratio weights nothing by the value set"));
    }
    build_plan(copies, drawn, weights, place)
}

/// A factor in words that two flattenings of one body share: its node
/// and given nodes, each with whether it is the value set, a node held,
/// or drawn (a bound copy or the outcome, which the denominator sums out).
fn signature(copies: &[Copy], f: &Factor) -> String {
    let word = |i: usize| {
        let c = &copies[i];
        let kind = match c.role {
            Role::Set => "set",
            Role::Fixed => "held",
            Role::Outcome | Role::Bound => "drawn",
        };
        format!("{}:{kind}", c.column)
    };
    let mut given: Vec<String> = f.given.iter().map(|&g| word(g)).collect();
    given.sort();
    format!("{} | {}", word(f.of), given.join(", "))
}

/// The copies and factors of `formula` flattened, the exposure, the
/// outcome and `also_set` free.
fn flat(formula: &Formula, x: &str, y: &str, also_set: &[String], place: &str) -> Result<(Vec<Copy>, Vec<Factor>), QueryError> {
    let mut copies = vec![Copy { column: x.to_string(), role: Role::Set }, Copy { column: y.to_string(), role: Role::Outcome }];
    let mut scope: BTreeMap<String, usize> = BTreeMap::from([(x.to_string(), 0), (y.to_string(), 1)]);
    for a in also_set {
        scope.insert(a.clone(), copies.len());
        copies.push(Copy { column: a.clone(), role: Role::Fixed });
    }
    let mut factors = Vec::new();
    flatten(formula, &scope, &mut copies, &mut factors, place)?;
    Ok((copies, factors))
}

/// Chain the `factors` that draw, decide each one's source, and give each
/// weight factor its conditional.
fn build_plan(copies: Vec<Copy>, factors: Vec<Factor>, weight_factors: Vec<Factor>, place: &str) -> Result<Plan, QueryError> {
    let y = copies[1].column.clone();
    let mut drawn_by = vec![None; copies.len()];
    for (k, f) in factors.iter().enumerate() {
        let copy = &copies[f.of];
        if matches!(copy.role, Role::Set | Role::Fixed) || drawn_by[f.of].is_some() {
            return Err(unsupported(place, &format!("it gives {} more than one distribution", copy.column)));
        }
        drawn_by[f.of] = Some(k);
    }
    if let Some(c) = copies.iter().enumerate().find(|(i, c)| matches!(c.role, Role::Outcome | Role::Bound) && drawn_by[*i].is_none()) {
        return Err(unsupported(place, &format!("it sums over {} without a distribution for it", c.1.column)));
    }
    let steps = chain(&copies, factors, place)?;
    let mut conditionals: Vec<(String, Vec<String>)> = Vec::new();
    let mut outcome_step = None;
    let steps = steps
        .into_iter()
        .map(|(f, from_rows)| {
            if from_rows {
                return (f, Source::Rows);
            }
            let node = copies[f.of].column.clone();
            let given: Vec<String> = f.given.iter().map(|&g| copies[g].column.clone()).collect();
            if copies[f.of].role == Role::Outcome {
                outcome_step = Some((node, given));
                return (f, Source::Fitted(usize::MAX));
            }
            let k = conditionals.iter().position(|c| c.0 == node && same_set(&c.1, &given)).unwrap_or_else(|| {
                conditionals.push((node, given));
                conditionals.len() - 1
            });
            (f, Source::Fitted(k))
        })
        .collect::<Vec<_>>();
    let mut weights = Vec::with_capacity(weight_factors.len());
    for f in weight_factors {
        let node = copies[f.of].column.clone();
        let given: Vec<String> = f.given.iter().map(|&g| copies[g].column.clone()).collect();
        let k = conditionals.iter().position(|c| c.0 == node && same_set(&c.1, &given)).unwrap_or_else(|| {
            conditionals.push((node, given));
            conditionals.len() - 1
        });
        weights.push((f, k));
    }
    // The outcome's conditional is fitted last, so it is easy to find.
    let outcome = outcome_step.ok_or_else(|| unsupported(place, &format!("it gives no distribution for {y}")))?;
    conditionals.push(outcome);
    let last = conditionals.len() - 1;
    let steps = steps.into_iter().map(|(f, s)| (f, if s == Source::Fitted(usize::MAX) { Source::Fitted(last) } else { s })).collect();
    Ok(Plan { copies, steps, conditionals, weights })
}

fn same_set(a: &[String], b: &[String]) -> bool {
    a.len() == b.len() && a.iter().all(|v| b.contains(v))
}

fn unsupported(place: &str, why: &str) -> QueryError {
    QueryError::request(format!(
        "{place}: the formula cannot be evaluated by simulation because {why}; Waypath evaluates formulas built from \
         products and sums of observed conditionals — the identification and its formula above still hold"
    ))
}

/// Append the factors of `formula` to `factors`, binding names through `scope`.
fn flatten(formula: &Formula, scope: &BTreeMap<String, usize>, copies: &mut Vec<Copy>, factors: &mut Vec<Factor>, place: &str) -> Result<(), QueryError> {
    let lookup = |name: &String| scope.get(name).copied().ok_or_else(|| unsupported(place, &format!("it leaves {name} unbound")));
    match formula {
        Formula::Probability { of, given } => {
            let mut before: Vec<usize> = given.iter().map(lookup).collect::<Result<_, _>>()?;
            for o in of {
                let copy = lookup(o)?;
                factors.push(Factor { of: copy, given: before.clone() });
                before.push(copy);
            }
        }
        Formula::Product { factors: parts } => {
            for part in parts {
                flatten(part, scope, copies, factors, place)?;
            }
        }
        Formula::Sum { over, body } => {
            let mut inner = scope.clone();
            for v in over {
                inner.insert(v.clone(), copies.len());
                copies.push(Copy { column: v.clone(), role: Role::Bound });
            }
            flatten(body, &inner, copies, factors, place)?;
        }
        Formula::Ratio { .. } => return Err(unsupported(place, "it divides inside a sum or a product")),
    }
    Ok(())
}

/// The factors in an order where each one's given copies come first,
/// marking those that take the rows' own values: a factor does when every
/// copy taken from the rows so far is exactly what it is given (a chain of
/// observed conditionals), its node is not yet taken from the rows, and it
/// is not the outcome's.
fn chain(copies: &[Copy], mut left: Vec<Factor>, place: &str) -> Result<Vec<(Factor, bool)>, QueryError> {
    let mut ready = vec![false; copies.len()];
    copies.iter().enumerate().filter(|(_, c)| matches!(c.role, Role::Set | Role::Fixed)).for_each(|(i, _)| ready[i] = true);
    let mut rows: Vec<usize> = Vec::new();
    let mut out = Vec::with_capacity(left.len());
    while !left.is_empty() {
        let can_run = |f: &Factor| f.given.iter().all(|&g| ready[g]);
        let takes_rows = |f: &Factor| {
            copies[f.of].role == Role::Bound
                && f.given.len() == rows.len()
                && f.given.iter().all(|g| rows.contains(g))
                && !rows.iter().any(|&r| copies[r].column == copies[f.of].column)
        };
        let pick = left.iter().position(|f| can_run(f) && takes_rows(f)).or_else(|| left.iter().position(can_run));
        let Some(k) = pick else {
            let stuck: Vec<&str> = left.iter().map(|f| copies[f.of].column.as_str()).collect();
            return Err(unsupported(place, &format!("its factors for {} do not chain (each needs another drawn first)", stuck.join(", "))));
        };
        let f = left.remove(k);
        let from_rows = takes_rows(&f);
        if from_rows {
            rows.push(f.of);
        }
        ready[f.of] = true;
        out.push((f, from_rows));
    }
    Ok(out)
}

/// Build and fit `node from given… using T`, with the family of the node's kind.
pub(super) fn fit_conditional(
    table: &Table,
    node: &str,
    given: &[String],
    method: &Method,
    cancel: &AtomicBool,
    progress: &(dyn Fn(Progress) + Sync),
    place: &str,
) -> Result<FittedConditional, QueryError> {
    let category = require_column(table, node, place)?.data.levels().is_some();
    let mut lines = vec![if given.is_empty() {
        format!("{node} using {}", table.name)
    } else {
        format!("{node} from {} using {}", given.join(", "), table.name)
    }];
    if !category {
        let family = family_for(table, node, place)?;
        if family != Family::Normal {
            lines.push(format!("family {}", family.name()));
        }
    }
    let name = if given.is_empty() { format!("formula_{node}") } else { format!("formula_{node}_from_{}", given.join("_")) };
    let spec = ModelSpec::from_lines(&name, lines.iter().enumerate().map(|(i, l)| (i + 1, l.as_str())))?;
    let model = Model::build(&spec, table)?;
    let fit = fit_model(&model, method, cancel, progress).map_err(|e| QueryError::Fit { what: format!("model {name}"), message: e.to_string() })?;
    Ok(FittedConditional { node: node.to_string(), given: given.to_vec(), model, fit, text: lines.join("\n") })
}

/// `E[y | do(x = setting)]` at posterior draw `d`: the chain simulated
/// over the rows, the outcome's mean averaged (for a ratio, weighted by the
/// weight factors' densities), and the weights' effective share of the
/// rows (1 without weights).
#[allow(clippy::too_many_arguments)]
fn mean_under(
    plan: &Plan,
    simulation: &FormulaSimulation,
    setting: &Setting,
    held: &[Option<Setting>],
    conditionals: &[FittedConditional],
    params: &[Vec<Vec<f64>>],
    d: usize,
) -> Result<(f64, f64), QueryError> {
    let table = simulation.rows;
    let n = table.nrows();
    let mut values: Vec<Option<Column>> = vec![None; plan.copies.len()];
    for (i, copy) in plan.copies.iter().enumerate() {
        values[i] = match (copy.role, &held[i]) {
            (Role::Set, _) => Some(setting.column(&copy.column, n)),
            (Role::Fixed, Some(h)) => Some(h.column(&copy.column, n)),
            (Role::Fixed, None) => table.column(&copy.column).cloned(),
            _ => None,
        };
    }
    let given_rows = |f: &Factor, model: &Model, values: &[Option<Column>]| -> Result<crate::model::NewRows, QueryError> {
        let given = Table { name: table.name.clone(), columns: f.given.iter().filter_map(|&g| values[g].clone()).collect() };
        Ok(if f.given.is_empty() { model.new_rows(table)? } else { model.new_rows(&given)? })
    };
    let mut outcome_means = None;
    for (step, (f, source)) in plan.steps.iter().enumerate() {
        let column = &plan.copies[f.of].column;
        let k = match source {
            Source::Rows => {
                values[f.of] = table.column(column).cloned();
                continue;
            }
            Source::Fitted(k) => *k,
        };
        let model = &conditionals[k].model;
        let rows = given_rows(f, model, &values)?;
        if plan.copies[f.of].role == Role::Outcome {
            let mean = model.predict_mean(&params[k][d], &rows)?.mean;
            if !plan.weighted() {
                return Ok((mean.iter().sum::<f64>() / mean.len().max(1) as f64, 1.0));
            }
            outcome_means = Some(mean);
            continue;
        }
        let mut rng = StdRng::seed_from_u64(stream_seed(simulation.seed, d as u64, step as u64 + 1));
        let drawn = model.outcome_draw(&params[k][d], &rows, &mut rng)?;
        values[f.of] = Some(drawn_column(model, column, drawn));
    }
    let means = outcome_means.ok_or_else(|| QueryError::request("the formula's simulation ended before the outcome"))?;
    let mut log_weights = vec![0.0; n];
    for (f, k) in &plan.weights {
        let model = &conditionals[*k].model;
        let rows = given_rows(f, model, &values)?;
        let at = match (&plan.copies[f.of].role, &held[f.of]) {
            (Role::Fixed, Some(h)) => h,
            _ => setting,
        };
        let value = match at {
            Setting::Level { code, .. } => *code as f64,
            Setting::Number(v) => *v,
        };
        let densities = model.log_density_of_rows(&params[*k][d], &rows, &vec![value; n])?;
        log_weights.iter_mut().zip(densities).for_each(|(w, l)| *w += l);
    }
    Ok(weighted_mean(&means, &log_weights))
}

/// The mean of `values` under weights `exp(log_weights)` (scaled by their
/// largest first), and the weights' effective share of the rows,
/// `(Σw)² / (n·Σw²)` (Kish 1965).
fn weighted_mean(values: &[f64], log_weights: &[f64]) -> (f64, f64) {
    let top = log_weights.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    let weights: Vec<f64> = log_weights.iter().map(|l| (l - top).exp()).collect();
    let total: f64 = weights.iter().sum();
    let squares: f64 = weights.iter().map(|w| w * w).sum();
    let mean = weights.iter().zip(values).map(|(w, v)| w * v).sum::<f64>() / total;
    (mean, total * total / (squares * values.len().max(1) as f64))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn s(v: &[&str]) -> Vec<String> {
        v.iter().map(|x| x.to_string()).collect()
    }

    #[test]
    fn front_door_takes_the_exposure_from_the_rows_and_draws_the_mediator() {
        // Pearl 2009, eq. 3.42 (recalled): sum_m P(m|x) sum_x' P(y|x',m) P(x').
        let inner = Formula::sum(s(&["x"]), Formula::product(vec![Formula::probability(s(&["y"]), s(&["x", "m"])), Formula::probability(s(&["x"]), vec![])]));
        let f = Formula::sum(s(&["m"]), Formula::product(vec![Formula::probability(s(&["m"]), s(&["x"])), inner]));
        let plan = plan(&f, "x", "y", &[], "test").unwrap();
        let sources: Vec<(String, bool)> = plan.steps.iter().map(|(f, s)| (plan.copies[f.of].column.clone(), *s == Source::Rows)).collect();
        assert_eq!(sources, vec![("x".into(), true), ("m".into(), false), ("y".into(), false)]);
        assert_eq!(plan.conditionals, vec![("m".to_string(), s(&["x"])), ("y".to_string(), s(&["x", "m"]))]);
        // The outcome's x is the copy from the rows, not the set one.
        let (y_factor, _) = &plan.steps[2];
        assert_eq!(plan.copies[y_factor.given[0]].role, Role::Bound);
    }

    #[test]
    fn two_independent_marginals_are_not_both_taken_from_one_row() {
        // sum_a sum_b P(a) P(b) P(y | x, a, b): a and b independent; one row
        // holds them jointly, so only the first comes from the rows.
        let f = Formula::sum(
            s(&["a", "b"]),
            Formula::product(vec![Formula::probability(s(&["a"]), vec![]), Formula::probability(s(&["b"]), vec![]), Formula::probability(s(&["y"]), s(&["x", "a", "b"]))]),
        );
        let plan = plan(&f, "x", "y", &[], "test").unwrap();
        let from_rows: Vec<bool> = plan.steps.iter().map(|(_, s)| *s == Source::Rows).collect();
        assert_eq!(from_rows, vec![true, false, false]);
    }

    /// The napkin graph's formula as the complete algorithm gives it
    /// (its closed form, Pearl & Mackenzie 2018, ch. 7, recalled:
    /// `sum_w P(x, y | z, w) P(w) / sum_w P(x | z, w) P(w)`, any z).
    fn napkin(denominator_over: &[&str]) -> Formula {
        let body = || {
            Formula::product(vec![
                Formula::probability(s(&["w"]), vec![]),
                Formula::probability(s(&["x"]), s(&["w", "z"])),
                Formula::probability(s(&["y"]), s(&["w", "z", "x"])),
            ])
        };
        Formula::ratio(Formula::sum(s(&["w"]), body()), Formula::sum(s(denominator_over), body()))
    }

    #[test]
    fn the_napkin_ratio_weights_rows_by_the_exposure_density() {
        let plan = plan(&napkin(&["y", "w"]), "x", "y", &s(&["z"]), "test").unwrap();
        let sources: Vec<(String, bool)> = plan.steps.iter().map(|(f, s)| (plan.copies[f.of].column.clone(), *s == Source::Rows)).collect();
        assert_eq!(sources, vec![("w".into(), true), ("y".into(), false)]);
        assert_eq!(plan.weights.len(), 1);
        let (f, k) = &plan.weights[0];
        assert_eq!(plan.copies[f.of].role, Role::Set);
        assert_eq!(plan.conditionals[*k], ("x".to_string(), s(&["w", "z"])));
        assert_eq!(plan.conditionals.last().unwrap(), &("y".to_string(), s(&["w", "z", "x"])));
        // A denominator that keeps y free is not the numerator normalised.
        let e = super::plan(&napkin(&["w"]), "x", "y", &s(&["z"]), "test").unwrap_err().to_string();
        assert!(e.contains("not its numerator with y summed out"), "{e}");
    }

    /// Self-normalised weights: equal weights give the plain mean and a
    /// share of 1; one row carrying all the weight gives its value and a
    /// share of 1/n (Kish's effective number over n).
    #[test]
    fn weighted_mean_and_effective_share() {
        let (m, share) = weighted_mean(&[1.0, 2.0, 3.0, 6.0], &[0.5; 4]);
        assert!((m - 3.0).abs() < 1e-12 && (share - 1.0).abs() < 1e-12);
        let (m, share) = weighted_mean(&[1.0, 2.0, 3.0, 6.0], &[-800.0, 0.0, -800.0, -800.0]);
        assert!((m - 2.0).abs() < 1e-12 && (share - 0.25).abs() < 1e-12);
        // weights 1 and 3 (log 0 and log 3): (1·2 + 3·6) / 4 = 5; (4)² / (2·10) = 0.8.
        let (m, share) = weighted_mean(&[2.0, 6.0], &[0.0, 3f64.ln()]);
        assert!((m - 5.0).abs() < 1e-12 && (share - 0.8).abs() < 1e-12, "{m} {share}");
    }

    #[test]
    fn ratios_and_unchained_factors_are_refused() {
        let ratio = Formula::ratio(Formula::probability(s(&["y"]), s(&["x"])), Formula::probability(s(&["x"]), vec![]));
        let e = plan(&ratio, "x", "y", &[], "test").unwrap_err().to_string();
        assert!(e.contains("not its numerator with y summed out"), "{e}");
        let nested = Formula::product(vec![ratio.clone(), Formula::probability(s(&["m"]), s(&["x"]))]);
        let e = plan(&nested, "x", "y", &[], "test").unwrap_err().to_string();
        assert!(e.contains("divides inside"), "{e}");
        let cycle = Formula::sum(
            s(&["a", "b"]),
            Formula::product(vec![Formula::probability(s(&["a"]), s(&["b"])), Formula::probability(s(&["b"]), s(&["a"])), Formula::probability(s(&["y"]), s(&["x", "a"]))]),
        );
        let e = plan(&cycle, "x", "y", &[], "test").unwrap_err().to_string();
        assert!(e.contains("do not chain"), "{e}");
    }
}
