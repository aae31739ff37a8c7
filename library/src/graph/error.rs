//! Errors of graph reading and graph questions, each one sentence that names
//! the graph, the line or node, and what to change.

use thiserror::Error;

use crate::names::edit_distance;

/// Everything that can go wrong while reading a graph or asking it a question.
#[derive(Debug, Clone, PartialEq, Eq, Error)]
pub enum GraphError {
    /// A body line of a `graph` cell could not be read.
    #[error("graph {graph}, line {line} `{text}`: {problem}")]
    Line { graph: String, line: usize, text: String, problem: String },

    /// A DOT text could not be read.
    #[error("graph {graph}, DOT line {line}: {problem}")]
    Dot { graph: String, line: usize, problem: String },

    /// The edges form a directed cycle; `cycle` starts and ends at the same node.
    #[error("graph {graph} has a cycle {}; a causal graph must be acyclic, so remove or reverse one of these edges", cycle_words(cycle))]
    Cycle { graph: String, cycle: Vec<String> },

    /// The graph has no node at all.
    #[error("graph {graph} has no nodes; add a line such as `a -> b` or a single node name")]
    Empty { graph: String },

    /// A query named a node the graph does not have.
    #[error("graph {graph} has no node `{name}`{}", hint(near))]
    UnknownNode { graph: String, name: String, near: Vec<String> },

    /// A node was placed in two sets that must not share nodes.
    #[error("graph {graph}: node `{node}` is both {roles}; name it in one place only")]
    Overlap { graph: String, node: String, roles: String },

    /// Exposure and outcome are the same node.
    #[error("graph {graph}: `{node}` is named as both exposure and outcome; name two different nodes")]
    SameNode { graph: String, node: String },

    /// The cancel flag was set (an interrupt) while a question was answered.
    #[error("graph {graph}: the question was interrupted before it was answered")]
    Interrupted { graph: String },

    /// An intervention or outcome named a hidden node.
    #[error("graph {graph}: `{node}` is hidden, so an effect on or of it cannot be estimated from data; name observed nodes")]
    Hidden { graph: String, node: String },

    /// A question whose answer would take longer than its step limit.
    #[error("graph {graph}: {what}; ask about a smaller part of the graph")]
    TooHard { graph: String, what: String },

    /// Too many paths to list.
    #[error("graph {graph} has more than {limit} paths between {from} and {to}; ask about a smaller graph or a closer pair of nodes")]
    TooManyPaths { graph: String, from: String, to: String, limit: usize },
}

/// The most nodes of a cycle an error spells out.
const CYCLE_SHOWN: usize = 12;

/// A cycle as `a -> b -> a`; a long one shows its first and last nodes and
/// how many are left out between them.
fn cycle_words(cycle: &[String]) -> String {
    if cycle.len() <= CYCLE_SHOWN {
        return cycle.join(" -> ");
    }
    let head = cycle[..CYCLE_SHOWN / 2].join(" -> ");
    let tail = cycle[cycle.len() - CYCLE_SHOWN / 2..].join(" -> ");
    format!("{head} -> … ({} more nodes) … -> {tail}", cycle.len() - CYCLE_SHOWN)
}

/// The tail of an unknown-node message: near matches, or none.
fn hint(near: &[String]) -> String {
    match near {
        [] => "; check the spelling against the graph's node list".to_owned(),
        [one] => format!("; did you mean `{one}`?"),
        many => format!("; did you mean one of {}?", many.iter().map(|n| format!("`{n}`")).collect::<Vec<_>>().join(", ")),
    }
}

/// Up to three names within a small edit distance of `name`, closest first.
///
/// The allowance grows with the length of the name (one edit per three
/// characters, at least two), and a difference of letter case alone counts as
/// a match.
pub(crate) fn near_matches<'a>(name: &str, candidates: impl Iterator<Item = &'a str>) -> Vec<String> {
    let allowance = (name.chars().count() / 3).max(2);
    let lower = name.to_lowercase();
    let mut scored: Vec<(usize, &str)> = candidates
        .map(|c| (edit_distance(&lower, &c.to_lowercase()), c))
        .filter(|&(d, _)| d <= allowance)
        .collect();
    scored.sort();
    scored.into_iter().take(3).map(|(_, c)| c.to_owned()).collect()
}
