//! The joint model's route to a controlled direct effect, for `compare
//! routes for direct effect …`.
//!
//! The controlled direct effect of X on Y sets X and every mediator: the
//! change in Y under do(X = b, M = m) against do(X = a, M = m). In a joint
//! model Y's node regression takes its observed parents; once X and the
//! parents X causes (the mediators next to Y) are set, nothing downstream of
//! X moves Y any more, so the simulation reduces to that one regression
//! evaluated over the rows with X at each setting and each such mediator
//! held at one value (a numeric one at its mean, a category at its first
//! level), the other parents at the rows' own values. That is a route
//! apart from the answer's adjustment set: it conditions on Y's parents,
//! as the graph draws them, rather than on a minimal single-door set.
//!
//! A hidden parent of Y is left out of its node regression; when it also
//! reaches X or another parent of Y, the regression is confounded and the
//! route is not taken (a note says why).

use std::sync::atomic::AtomicBool;

use crate::graph::Graph;
use crate::infer::fit::{fit_model, Method};
use crate::infer::nuts::Progress;
use crate::table::Table;

use super::contrast::{level_contrasts, Contrast, ContrastRequest};
use super::error::QueryError;
use super::joint::{build_joint, NodeModel};
use super::support::require_column;

/// The joint model's controlled direct effect.
pub struct DirectRoute {
    /// The mediators held, `(node, value)`.
    pub held: Vec<(String, String)>,
    /// Y's observed parents other than X: the set its regression
    /// conditions on.
    pub parents: Vec<String>,
    /// Y's node regression body.
    pub model_text: String,
    pub contrast: Contrast,
    pub warnings: Vec<String>,
}

/// The controlled direct effect of `x` on `y` through a joint model of
/// `graph`, comparing `to` with `from` (as written); `Ok(Err(note))` when
/// the route cannot be taken.
#[allow(clippy::too_many_arguments)]
pub fn controlled_direct_route(
    graph: &Graph,
    table: &Table,
    x: &str,
    y: &str,
    settings: (&str, &str),
    method: &Method,
    cancel: &AtomicBool,
    mass: f64,
    progress: &(dyn Fn(Progress) + Sync),
) -> Result<Result<DirectRoute, String>, QueryError> {
    let place = format!("the joint model's route to the direct effect of {x} on {y}");
    let joint = build_joint(&format!("routes_{x}_{y}"), graph, table, &[])?;
    let node = joint.node(y).ok_or_else(|| QueryError::request(format!("{place}: {y} is not an observed node")))?;
    let NodeModel::Regression { model, text } = &node.model else {
        return Ok(Err(format!("{y} has no regression in the joint model, so there is no joint route")));
    };
    let downstream = graph.descendants(x)?;
    for hidden in &node.hidden_parents {
        let reaches = graph.descendants(hidden)?;
        let touched: Vec<&str> = std::iter::once(x).chain(node.parents.iter().map(String::as_str)).filter(|p| *p != y && reaches.contains(p)).collect();
        if downstream.contains(&hidden.as_str()) {
            return Ok(Err(format!("the hidden {hidden} lies between {x} and {y}, so the joint model cannot hold it; no joint route")));
        }
        if !touched.is_empty() {
            return Ok(Err(format!(
                "the hidden {hidden} drives {y} and {}, so {y}'s node regression, which leaves {hidden} out, is confounded; no joint route",
                touched.join(", ")
            )));
        }
    }
    let mut held = Vec::new();
    for parent in node.parents.iter().filter(|p| *p != x && downstream.contains(&p.as_str())) {
        held.push((parent.clone(), reference_value(table, parent, &place)?));
    }
    let fit = fit_model(model, method, cancel, progress).map_err(|e| QueryError::Fit { what: format!("{y}'s node regression"), message: e.to_string() })?;
    let request = ContrastRequest { over_rows: true, mass, held: held.clone(), ..ContrastRequest::new(x) }.between(settings.0, settings.1);
    let contrast = level_contrasts(model, &fit.draws, table, &request)?
        .into_iter()
        .next()
        .ok_or_else(|| QueryError::request(format!("{place}: the regression gave no contrast")))?;
    let parents = node.parents.iter().filter(|p| *p != x).cloned().collect();
    Ok(Ok(DirectRoute { held, parents, model_text: text.replace('\n', "; "), contrast, warnings: fit.warnings.clone() }))
}

/// The value a mediator is held at: a numeric column's mean (four
/// decimals), a category's first level.
fn reference_value(table: &Table, node: &str, place: &str) -> Result<String, QueryError> {
    let column = require_column(table, node, place)?;
    if let Some(levels) = column.data.levels() {
        return Ok(levels[0].clone());
    }
    let values: Vec<f64> = column.data.as_reals().unwrap_or_default().into_iter().filter(|v| v.is_finite()).collect();
    if values.is_empty() {
        return Err(QueryError::request(format!("{place}: {node} has no values to hold it at")));
    }
    Ok(format!("{:.4}", values.iter().sum::<f64>() / values.len() as f64))
}
