//! A controlled direct effect that no single-door set identifies, by the
//! complete algorithm.
//!
//! The controlled direct effect of X on Y compares Y under do(X = b, M = m)
//! with do(X = a, M = m), M the parents of Y that X causes: once they are
//! set, only the edge X → Y carries X's effect. When hidden causes leave no
//! set that blocks every other path, `Pr[y | do(x, m)]` may still be a
//! function of the observed distribution: the complete algorithm
//! ([`crate::graph::Graph::identify_controlled_direct`]) decides, and its
//! formula is evaluated on the chain of normal regressions
//! ([`super::formula_chain`]) when every node it names is a real column,
//! else on the chain over the levels of its discrete nodes
//! ([`super::formula_levels`]), with X at the settings compared and each
//! mediator held at its mean (a discrete one at its usual level) or at the
//! value `at M v` states.

use std::sync::atomic::AtomicBool;

use crate::graph::{Complete, Graph, GraphError};
use crate::infer::fit::{Fit, Method};
use crate::infer::nuts::Progress;
use crate::model::Model;
use crate::table::{ColumnData, Table};

use super::answer::{AskOptions, EffectAnswer};
use super::error::QueryError;
use super::formula_chain::{chain_estimate, chain_nodes};
use super::formula_estimate::{settings, FormulaSimulation};
use super::formula_levels::{level_estimate, level_nodes, level_settings, usual_level};
use super::support::{column_mean, require_column, Setting};

/// The route's name in answers and `compare routes`.
pub const DIRECT_FORMULA_ROUTE: &str = "complete algorithm (controlled direct effect)";

/// Fill `answer` for a direct effect without a single-door set: the
/// formula and its estimate, or why nothing was fitted.
#[allow(clippy::too_many_arguments)]
pub(super) fn direct_by_formula(
    graph: &Graph,
    table: &Table,
    x: &str,
    y: &str,
    options: &AskOptions,
    method: &Method,
    cancel: &AtomicBool,
    mass: f64,
    progress: &(dyn Fn(Progress) + Sync),
    mut answer: EffectAnswer,
) -> Result<EffectAnswer, QueryError> {
    let place = format!("ask direct effect of {x} on {y}");
    let found = match graph.identify_controlled_direct(x, y, cancel) {
        Err(e @ (GraphError::Hidden { .. } | GraphError::TooHard { .. })) => {
            answer.why.push(format!("the controlled direct effect was not identified: {e}; nothing was fitted"));
            return Ok(answer);
        }
        other => other?,
    };
    let Some(direct) = found else {
        answer.why.push(format!("a parent of {y} that {x} causes is hidden, so the controlled direct effect cannot hold it; nothing was fitted"));
        return Ok(answer);
    };
    let m = direct.mediators;
    let set: Vec<String> = std::iter::once(x.to_string()).chain(m.iter().cloned()).collect();
    let (formula, also_set) = match direct.complete {
        Complete::Identified { formula, also_set } => (formula, also_set),
        Complete::NotIdentified { hedge } => {
            answer.why.push(format!(
                "the controlled direct effect, {y} under {x} and {} set, is not identifiable either (Shpitser & Pearl 2006): the hedge {{{}}} ⊃ {{{}}}, \
                 joined by {}; nothing was fitted",
                words(&m),
                hedge.outer.join(", "),
                hedge.inner.join(", "),
                hedge.hidden_causes.join(", ")
            ));
            return Ok(answer);
        }
    };
    let mut free = set.clone();
    free.push(y.to_string());
    answer.why.push(format!(
        "the controlled direct effect sets {x} and the parents of {y} it causes ({}); the complete identification algorithm (Shpitser & Pearl 2006) \
         gives Pr[{y} | do({})] = {}",
        words(&m),
        set.join(", "),
        formula.render(&free)
    ));
    let by_levels = match (chain_nodes(table, &formula, x, y, &also_set, &place), level_nodes(table, &formula, x, y, &also_set, &place)) {
        (Ok(_), _) => false,
        (Err(_), Ok(_)) => true,
        (Err(normal), Err(levels)) => {
            let levels = levels.to_string();
            answer.why.push(format!("{normal}; {}; nothing was fitted", levels.trim_start_matches(&format!("{place}: "))));
            return Ok(answer);
        }
    };
    let column = require_column(table, x, &place)?;
    let compared = match &options.settings {
        Some((to, from)) => vec![(Setting::read(column, to, &place)?, Setting::read(column, from, &place)?)],
        None if by_levels => level_settings(column, &place)?,
        None => settings(column, &place)?,
    };
    let simulation = FormulaSimulation { settings: compared, rows: table, seed: super::formula_estimate::FORMULA_SEED };
    let held = held_values(table, &m, options, &place)?;
    let estimate = if by_levels {
        level_estimate(table, x, y, &formula, &also_set, method, cancel, mass, progress, &simulation, &held)?
    } else {
        let numbers: Vec<(String, f64)> = held.iter().map(|(n, s)| (n.clone(), if let Setting::Number(v) = s { *v } else { 0.0 })).collect();
        chain_estimate(table, x, y, &formula, &also_set, method, cancel, mass, progress, &simulation, &numbers)?
    };
    let held_words: Vec<String> = held
        .iter()
        .map(|(n, v)| match v {
            Setting::Number(v) => format!("{n} = {v:.4}"),
            level => format!("{n} = {}", level.text()),
        })
        .collect();
    answer.estimand = Some(format!(
        "controlled direct effect on the mean outcome with {} held, by the identifying formula of the complete algorithm, evaluated {}",
        if held_words.is_empty() { "nothing else".to_string() } else { held_words.join(", ") },
        if by_levels {
            "over every combination of the levels of the nodes it names, on a chain of regressions with each column's family"
        } else {
            "on the normal joint of the nodes it names"
        }
    ));
    answer.method = Some(method.describe());
    answer.warnings.extend(estimate.warnings);
    answer.contrasts = estimate.contrasts;
    answer.route = Some(DIRECT_FORMULA_ROUTE.to_string());
    let mut fitted: Vec<(Model, Fit, String)> = estimate.conditionals.into_iter().map(|c| (c.model, c.fit, c.text)).collect();
    let (y_model, y_fit, y_text) = fitted.pop().expect("the outcome's regression is fitted last");
    answer.model_text = Some(y_text);
    answer.model = Some(y_model);
    answer.fit = Some(y_fit);
    answer.other_models = fitted;
    Ok(answer)
}

/// Each mediator's value: stated by `at M v` (a level's label for a
/// category), else its mean, or for a yes/no, count or category mediator
/// its usual level ([`usual_level`]).
fn held_values(table: &Table, m: &[String], options: &AskOptions, place: &str) -> Result<Vec<(String, Setting)>, QueryError> {
    if let Some((name, _)) = options.held.iter().find(|(n, _)| !m.contains(n)) {
        return Err(QueryError::request(format!("{place}: `at {name} …` holds a node the controlled direct effect does not set; it sets {}", words(m))));
    }
    m.iter()
        .map(|node| {
            let column = require_column(table, node, place)?;
            let value = match options.held.iter().find(|(n, _)| n == node) {
                Some((_, text)) => Setting::read(column, text, place)?,
                None => match &column.data {
                    ColumnData::Real(_) => {
                        Setting::Number(column_mean(column).ok_or_else(|| QueryError::request(format!("{place}: {node} has no values to hold it at")))?)
                    }
                    ColumnData::Category { levels, .. } => Setting::Level { code: usual_level(column) as u32, levels: levels.clone() },
                    _ => Setting::Number(usual_level(column) as f64),
                },
            };
            Ok((node.clone(), value))
        })
        .collect()
}

fn words(m: &[String]) -> String {
    if m.is_empty() {
        "none".to_string()
    } else {
        m.join(", ")
    }
}
