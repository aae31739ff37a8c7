//! Adapters from session objects to the plain inputs of [`crate::plot`].

use crate::graph::Graph;
use crate::infer::fit::Fit;
use crate::model::Model;
use crate::plot::{
    graph_figure, posterior_figure, trace_figure, DensityArrangement, EdgeMark, GraphPicture, NodeMark,
    ParameterDraws, PlotError, Quantity, Role,
};

/// How to mark a graph drawing: exposure, outcome, an adjustment set, and
/// edges to highlight (by cause and effect names).
#[derive(Debug, Default)]
pub struct GraphMarks<'a> {
    pub exposure: Option<&'a str>,
    pub outcome: Option<&'a str>,
    pub adjusted: &'a [String],
    pub highlight: Vec<(String, String)>,
}

/// The causal graph with the question's marks.
pub fn graph(graph: &Graph, title: &str, marks: &GraphMarks) -> Result<String, PlotError> {
    let nodes: Vec<NodeMark> = graph
        .nodes()
        .iter()
        .map(|n| {
            let role = if Some(n.name.as_str()) == marks.exposure {
                Role::Exposure
            } else if Some(n.name.as_str()) == marks.outcome {
                Role::Outcome
            } else if marks.adjusted.contains(&n.name) {
                Role::Adjusted
            } else {
                Role::Plain
            };
            NodeMark { name: n.name.clone(), hidden: n.hidden, role }
        })
        .collect();
    let index = |name: &str| graph.nodes().iter().position(|n| n.name == name).unwrap_or(0);
    let edges = graph
        .edges()
        .iter()
        .map(|(a, b)| EdgeMark {
            from: index(a),
            to: index(b),
            highlight: marks.highlight.iter().any(|(x, y)| x == a && y == b),
        })
        .collect();
    graph_figure(&GraphPicture { title: title.to_string(), nodes, edges })
}

/// Posterior densities of the coefficients (the spread is left out: it is
/// on another scale and rarely the question).
pub fn posterior(model: &Model, fit: &Fit) -> Result<String, PlotError> {
    posterior_of(model, fit, &[])
}

/// Posterior densities of the chosen parameters (all coefficients if none chosen).
pub fn posterior_of(model: &Model, fit: &Fit, chosen: &[String]) -> Result<String, PlotError> {
    let names = chosen_or_coefficients(model, chosen);
    let params: Vec<ParameterDraws> = names
        .iter()
        .filter_map(|n| fit.draws.get(n).map(|d| ParameterDraws { name: n.as_str(), draws: d }))
        .collect();
    let subject = format!("{} parameters", model.name());
    posterior_figure(&subject, &Quantity::new("parameter value"), &params, DensityArrangement::Stacked)
}

/// Trace and rank plots per chain.
pub fn trace(model: &Model, fit: &Fit, chosen: &[String]) -> Result<String, PlotError> {
    let names = chosen_or_coefficients(model, chosen);
    let params: Vec<ParameterDraws> = names
        .iter()
        .filter_map(|n| fit.draws.get(n).map(|d| ParameterDraws { name: n.as_str(), draws: d }))
        .collect();
    trace_figure(model.name(), fit.draws.chains, &params)
}

fn chosen_or_coefficients(model: &Model, chosen: &[String]) -> Vec<String> {
    if chosen.is_empty() {
        model.coefficient_names().iter().take(8).cloned().collect()
    } else {
        chosen.to_vec()
    }
}
