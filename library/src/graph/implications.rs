//! Testable implications: the conditional independences between observed
//! nodes that the graph claims, which the data can contradict.
//!
//! Every pair of observed nodes without an edge between them should be
//! d-separated by some set. For each such pair we report one minimal set of
//! observed nodes that separates it (built as in `dag::minimal_separator`),
//! or say that only hidden nodes could separate it, so the data cannot test
//! the claim directly.

use std::sync::atomic::{AtomicBool, Ordering};

use serde::Serialize;

use super::{Graph, GraphError};

/// "`a` is independent of `b` given `given`", claimed by the graph.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Implication {
    /// The earlier node of the pair in topological order.
    pub a: String,
    /// The later node of the pair.
    pub b: String,
    /// A minimal set of observed nodes to condition on (may be empty).
    pub given: Vec<String>,
}

/// A non-adjacent observed pair that no set of observed nodes separates.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct UntestablePair {
    /// The earlier node of the pair in topological order.
    pub a: String,
    /// The later node of the pair.
    pub b: String,
}

/// All implications of a graph, pairs in topological order.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Implications {
    /// Independences the data can check.
    pub testable: Vec<Implication>,
    /// Pairs the graph says are separated only through hidden nodes.
    pub untestable: Vec<UntestablePair>,
}

impl Implications {
    /// One line per implication, then the untestable pairs.
    pub fn render(&self) -> String {
        let mut lines: Vec<String> = self
            .testable
            .iter()
            .map(|i| match i.given.as_slice() {
                [] => format!("{} is independent of {}", i.a, i.b),
                given => format!("{} is independent of {} given {}", i.a, i.b, given.join(", ")),
            })
            .collect();
        lines.extend(self.untestable.iter().map(|p| {
            format!("{} and {}: only hidden nodes could separate them, so the data cannot test this pair", p.a, p.b)
        }));
        if lines.is_empty() {
            lines.push("every pair of observed nodes is joined by an edge, so the graph implies no independence".to_owned());
        }
        lines.join("\n")
    }
}

impl Graph {
    /// One minimal separating set of observed nodes for every non-adjacent
    /// pair of observed nodes, or the pair marked untestable.
    pub fn implications(&self) -> Implications {
        let never = AtomicBool::new(false);
        self.implications_with_cancel(&never).unwrap_or(Implications { testable: Vec::new(), untestable: Vec::new() })
    }

    /// [`Graph::implications`], reading `cancel` before each pair and
    /// stopping with [`GraphError::Interrupted`] once it is set.
    pub fn implications_with_cancel(&self, cancel: &AtomicBool) -> Result<Implications, GraphError> {
        let observed = self.observed();
        let mut out = Implications { testable: Vec::new(), untestable: Vec::new() };
        for (k, &a) in self.order.iter().enumerate() {
            for &b in &self.order[k + 1..] {
                if cancel.load(Ordering::Relaxed) {
                    return Err(GraphError::Interrupted { graph: self.name.clone() });
                }
                if !observed[a] || !observed[b] || self.dag.adjacent(a, b) {
                    continue;
                }
                let (a_name, b_name) = (self.label(a).to_owned(), self.label(b).to_owned());
                // Shrinking from the later node's side first keeps the set near b,
                // which for a fully observed graph is usually b's parents.
                match self.dag.minimal_separator(b, a, &observed) {
                    Some(set) => out.testable.push(Implication {
                        a: a_name,
                        b: b_name,
                        given: self.owned_names(&self.dag.mask_of(&set)),
                    }),
                    None => out.untestable.push(UntestablePair { a: a_name, b: b_name }),
                }
            }
        }
        Ok(out)
    }
}
