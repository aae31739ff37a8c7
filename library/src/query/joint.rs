//! Joint (whole-graph) models: `joint NAME = GRAPH using TABLE`.
//!
//! One regression per observed node given its observed parents, so that
//! interventions can be simulated through the graph ([`super::intervene`]).
//! The default model of a node:
//!
//! * outcome family from the node's kind: real → normal, count → poisson,
//!   binary → bernoulli, category → levels (softmax over the node's levels,
//!   its first level the reference);
//! * category parents → one intercept per level of the first, offsets for
//!   the others; real parents → slopes, or one slope per level of the first
//!   category parent when there is one (`x per c`);
//! * a category node without parents → its level shares in the data (no
//!   regression is needed to simulate it, and an intervention never changes
//!   a node upstream of it);
//! * a category node with parents → a levels-family regression on its
//!   parents, from which interventions draw the node's level.
//!
//! A node's model can be overridden by model lines (the `using` part may be
//! left out); the override must use only the node's parents, apart from
//! pooled columns (`pooled site`): a pooled column that is a node must be
//! a parent, and one outside the graph marks clusters (a note says so). A
//! node with a hidden parent gets a warning: its model leaves that
//! cause out (and
//! `intervene` turns to the identifying formula where that would bias it).
//!
//! The node models share no parameters and have independent priors, so the
//! joint posterior is the product of the node posteriors and draws of
//! different nodes may be paired by index.

use std::sync::atomic::AtomicBool;

use serde::Serialize;

use crate::graph::Graph;
use crate::infer::fit::{fit_model, Fit, Method};
use crate::infer::nuts::Progress;
use crate::model::{Family, Model, ModelSpec};
use crate::table::{ColumnData, Table};

use super::answer::family_for;
use super::error::QueryError;
use super::support::{require_column, stream_seed};

/// How one node is modelled.
#[derive(Debug, Clone, PartialEq)]
pub enum NodeModel {
    /// A regression on the node's parents; `text` is its model body.
    Regression { text: String, model: Box<Model> },
    /// A parentless category node, simulated from its level shares.
    LevelShares { levels: Vec<String>, shares: Vec<f64> },
}

/// One observed node of a joint model.
#[derive(Debug, Clone, PartialEq)]
pub struct JointNode {
    pub name: String,
    /// Observed parents, in topological order.
    pub parents: Vec<String>,
    /// Hidden parents, which the node model leaves out.
    pub hidden_parents: Vec<String>,
    pub model: NodeModel,
}

/// A whole-graph model: one node model per observed node, in topological order.
#[derive(Debug, Clone)]
pub struct JointModel {
    pub name: String,
    pub graph: Graph,
    pub table: String,
    pub nodes: Vec<JointNode>,
    pub warnings: Vec<String>,
}

/// One node of a joint model, for output.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct JointNodeSummary {
    pub node: String,
    pub parents: Vec<String>,
    /// The model body or the level shares.
    pub model: String,
}

/// The fits of a joint model's regressions, one per node (`None` for nodes
/// without a regression).
#[derive(Debug, Clone)]
pub struct JointFit {
    pub method: Method,
    pub fits: Vec<Option<Fit>>,
}

impl JointModel {
    /// The node called `name`.
    pub fn node(&self, name: &str) -> Option<&JointNode> {
        self.nodes.iter().find(|n| n.name == name)
    }

    /// One line per node, for output.
    pub fn summary(&self) -> Vec<JointNodeSummary> {
        self.nodes
            .iter()
            .map(|n| JointNodeSummary {
                node: n.name.clone(),
                parents: n.parents.clone(),
                model: match &n.model {
                    NodeModel::Regression { text, .. } => text.replace('\n', "; "),
                    NodeModel::LevelShares { levels, shares } => {
                        let parts: Vec<String> =
                            levels.iter().zip(shares).map(|(l, s)| format!("{l} {:.3}", s)).collect();
                        format!("level shares in the data: {}", parts.join(", "))
                    }
                },
            })
            .collect()
    }
}

/// What leaving the hidden parent `h` of `node` out of its model costs: a
/// hidden mediator (an observed node causes `h`) loses a route; a hidden
/// root only confounds.
fn hidden_parent_warning(graph: &Graph, node: &str, h: &str) -> Result<String, QueryError> {
    let mut causes = Vec::new();
    for a in graph.ancestors(h)? {
        if !graph.is_hidden(a)? {
            causes.push(a);
        }
    }
    Ok(if causes.is_empty() {
        format!(
            "{node} has the hidden parent {h}; the node models leave that cause out, so `intervene` takes \
             an effect whose simulation it touches from the identifying formula instead (or refuses when none exists)"
        )
    } else {
        format!(
            "{node} has the hidden parent {h}, a mediator downstream of {}: the node models lose the route \
             through {h} into {node}, so `intervene` setting {} and watching {node} or what it causes takes the \
             identifying formula instead (or refuses when none exists)",
            causes.join(", "),
            causes.join(" or ")
        )
    })
}

/// Build the joint model `name` of `graph` on `table`; `overrides` give a
/// node's model lines in place of the default.
pub fn build_joint(
    name: &str,
    graph: &Graph,
    table: &Table,
    overrides: &[(String, Vec<String>)],
) -> Result<JointModel, QueryError> {
    let place = format!("joint {name}");
    for (node, _) in overrides {
        if graph.is_hidden(node)? {
            return Err(QueryError::request(format!("{place}: {node} is hidden, so it has no model to override")));
        }
    }
    let mut nodes = Vec::new();
    let mut warnings = Vec::new();
    for node in graph.topological_order() {
        if graph.is_hidden(node)? {
            continue;
        }
        require_column(table, node, &place)?;
        let mut parents = Vec::new();
        let mut hidden_parents = Vec::new();
        for p in graph.parents(node)? {
            if graph.is_hidden(p)? {
                hidden_parents.push(p.to_string());
            } else {
                require_column(table, p, &place)?;
                parents.push(p.to_string());
            }
        }
        for h in &hidden_parents {
            warnings.push(hidden_parent_warning(graph, node, h)?);
        }
        let model = match overrides.iter().find(|(n, _)| n == node) {
            Some((_, lines)) => override_model(name, graph, table, node, &parents, lines)?,
            None => default_model(name, table, node, &parents)?,
        };
        warnings.extend(pooled_columns(name, graph, node, &parents, &model)?);
        nodes.push(JointNode { name: node.to_string(), parents, hidden_parents, model });
    }
    Ok(JointModel { name: name.to_string(), graph: graph.clone(), table: table.name.clone(), nodes, warnings })
}

/// Fit every regression of `joint` with `method`; each node gets its own
/// seed stream derived from the method's seed.
pub fn fit_joint(joint: &JointModel, method: &Method, cancel: &AtomicBool) -> Result<JointFit, QueryError> {
    fit_joint_with_progress(joint, method, cancel, &|_, _| {})
}

/// [`fit_joint`], reporting each node's sampler progress (with the node's
/// name) to `progress`.
pub fn fit_joint_with_progress(
    joint: &JointModel,
    method: &Method,
    cancel: &AtomicBool,
    progress: &(dyn Fn(&str, Progress) + Sync),
) -> Result<JointFit, QueryError> {
    let mut fits = Vec::new();
    for (i, node) in joint.nodes.iter().enumerate() {
        let NodeModel::Regression { model, .. } = &node.model else {
            fits.push(None);
            continue;
        };
        let node_method = match method {
            Method::Laplace { draws, seed } => Method::Laplace { draws: *draws, seed: stream_seed(*seed, i as u64, 1) },
            Method::Nuts(settings) => {
                let mut s = settings.clone();
                s.seed = stream_seed(settings.seed, i as u64, 1);
                Method::Nuts(s)
            }
        };
        let fit = fit_model(model, &node_method, cancel, &|p| progress(&node.name, p)).map_err(|e| QueryError::Fit {
            what: format!("the model of {} in joint {}", node.name, joint.name),
            message: e.to_string(),
        })?;
        fits.push(Some(fit));
    }
    Ok(JointFit { method: method.clone(), fits })
}

/// The default model of `node` given its observed `parents`.
fn default_model(joint: &str, table: &Table, node: &str, parents: &[String]) -> Result<NodeModel, QueryError> {
    let place = format!("joint {joint}");
    let family = match &require_column(table, node, &place)?.data {
        ColumnData::Category { codes, levels } if parents.is_empty() => return Ok(level_shares(codes, levels)),
        ColumnData::Category { .. } => Family::Levels,
        _ => family_for(table, node, &place)?,
    };
    let is_category = |p: &String| table.column(p).is_some_and(|c| c.data.levels().is_some());
    let first_category = parents.iter().find(|p| is_category(p));
    let terms: Vec<String> = parents
        .iter()
        .map(|p| match first_category {
            Some(c) if !is_category(p) => format!("{p} per {c}"),
            _ => p.clone(),
        })
        .collect();
    let mut lines = vec![if terms.is_empty() {
        format!("{node} using {}", table.name)
    } else {
        format!("{node} from {} using {}", terms.join(", "), table.name)
    }];
    if family != Family::Normal {
        lines.push(format!("family {}", family.name()));
    }
    regression(joint, table, node, lines)
}

/// A parentless category node: its level shares in the data.
fn level_shares(codes: &[u32], levels: &[String]) -> NodeModel {
    let mut counts = vec![0usize; levels.len()];
    codes.iter().for_each(|&c| counts[c as usize] += 1);
    let n = codes.len().max(1) as f64;
    NodeModel::LevelShares { levels: levels.to_vec(), shares: counts.iter().map(|&c| c as f64 / n).collect() }
}

/// A node model from override lines, checked against the node's parents.
fn override_model(
    joint: &str,
    graph: &Graph,
    table: &Table,
    node: &str,
    parents: &[String],
    lines: &[String],
) -> Result<NodeModel, QueryError> {
    let lines: Vec<String> = lines
        .iter()
        .map(|l| {
            let head = l.split_whitespace().next().unwrap_or("");
            let is_formula = !l.trim().is_empty() && !crate::model::spec::LINE_WORDS.contains(&head) && !l.trim_start().starts_with('#');
            if is_formula && !l.contains(&*format!(" {} ", crate::model::spec::USING)) {
                format!("{} using {}", l.trim(), table.name)
            } else {
                l.clone()
            }
        })
        .collect();
    let model = regression(joint, table, node, lines)?;
    if let NodeModel::Regression { model: m, .. } = &model {
        if m.outcome_name() != node {
            return Err(QueryError::request(format!(
                "joint {joint}: the model given for {node} has outcome {}; its outcome must be {node}",
                m.outcome_name()
            )));
        }
        for used in super::support::predictor_columns(m) {
            if !parents.contains(&used) {
                return Err(QueryError::request(format!(
                    "joint {joint}: the model given for {node} uses {used}, which is not a parent of {node} in graph {}; \
                     use only its parents ({})",
                    graph.name(),
                    if parents.is_empty() { "none".to_string() } else { parents.join(", ") }
                )));
            }
        }
    }
    Ok(model)
}

/// A node model's pooled columns against the graph: a column that is a
/// node must be a parent of `node` (else the model would let it act where
/// the graph has no edge); a column outside the graph marks clusters, taken
/// as fixed before any intervention (said in the returned notes).
fn pooled_columns(joint: &str, graph: &Graph, node: &str, parents: &[String], model: &NodeModel) -> Result<Vec<String>, QueryError> {
    let NodeModel::Regression { model, .. } = model else { return Ok(Vec::new()) };
    let mut notes = Vec::new();
    // A nested group reads its outer category too: both are checked.
    let columns = model.pooled_groups().iter().filter(|g| g.block() == 0).flat_map(|g| std::iter::once(g.column.as_str()).chain(g.outer()));
    for c in columns {
        let c = &c.to_string();
        let is_node = graph.nodes().iter().any(|n| n.name == *c);
        if is_node && !parents.contains(c) {
            return Err(QueryError::request(format!(
                "joint {joint}: the model given for {node} pools {c}, a node of graph {} that is not a parent of {node}; \
                 pool a parent, or a column outside the graph that marks clusters (sites, clinics)",
                graph.name()
            )));
        }
        if !is_node {
            notes.push(format!(
                "{node} pools {c}, which is not a node of graph {}: it is taken as a marker of clusters that no \
                 intervention changes and that causes nothing the graph names beside {node}'s own departures",
                graph.name()
            ));
        }
    }
    Ok(notes)
}

/// Build the regression of `node` from model body lines.
fn regression(joint: &str, table: &Table, node: &str, lines: Vec<String>) -> Result<NodeModel, QueryError> {
    let name = format!("{joint}:{node}");
    let spec = ModelSpec::from_lines(&name, lines.iter().enumerate().map(|(i, l)| (i + 1, l.as_str())))?;
    let model = Model::build(&spec, table)?;
    Ok(NodeModel::Regression { text: lines.join("\n"), model: Box::new(model) })
}
