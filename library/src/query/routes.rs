//! The front door as a further route to a total effect that an adjustment
//! set already identifies, for `compare routes`.
//!
//! Where the graph holds both an adjustment set and a front-door set
//! (Pearl 2009, §3.3.2), the two formulas use different parts of the data
//! — the outcome given the exposure and the set, against the mediators'
//! response to the exposure and the outcome's to the mediators — so their
//! agreement is a check on the graph. The front door is evaluated by the
//! one formula evaluator ([`super::formula_estimate`]) at the settings the
//! adjustment route compares.

use std::sync::atomic::AtomicBool;

use crate::graph::Graph;
use crate::infer::fit::Method;
use crate::table::Table;

use super::contrast::Contrast;
use super::error::QueryError;
use super::formula_estimate::{formula_estimate_with, FormulaSimulation, FORMULA_SEED};
use super::support::{require_column, Setting};

/// The front-door route's estimate.
pub struct FrontDoorRoute {
    /// The mediators it goes through (the smallest front-door set).
    pub mediators: Vec<String>,
    /// `Pr[y | do(x)] = …` in Waypath's notation.
    pub formula: String,
    /// Its regressions' bodies, one line each.
    pub fitted: Vec<String>,
    pub contrast: Contrast,
    pub warnings: Vec<String>,
}

/// The front-door estimate of the effect of `x` on `y` comparing `to`
/// with `from` (as written), or `None` when no front-door set exists.
#[allow(clippy::too_many_arguments)]
pub fn front_door_route(
    graph: &Graph,
    table: &Table,
    x: &str,
    y: &str,
    to: &str,
    from: &str,
    method: &Method,
    cancel: &AtomicBool,
    mass: f64,
) -> Result<Option<FrontDoorRoute>, QueryError> {
    let Some((mediators, formula)) = graph.front_door_with_cancel(x, y, cancel)? else { return Ok(None) };
    let place = format!("the front-door route of {x} on {y}");
    let column = require_column(table, x, &place)?;
    let settings = vec![(Setting::read(column, to, &place)?, Setting::read(column, from, &place)?)];
    let simulation = FormulaSimulation { settings, rows: table, seed: FORMULA_SEED };
    let estimate = formula_estimate_with(table, x, y, &formula, &[], method, cancel, mass, &|_| {}, &simulation)?;
    let contrast = estimate.contrasts.into_iter().next().ok_or_else(|| QueryError::request(format!("{place}: the formula gave no contrast")))?;
    Ok(Some(FrontDoorRoute {
        formula: format!("Pr[{y} | do({x})] = {}", formula.render(&[x.to_string(), y.to_string()])),
        mediators,
        fitted: estimate.conditionals.iter().map(|c| c.text.replace('\n', "; ")).collect(),
        contrast,
        warnings: estimate.warnings,
    }))
}
