//! Causal graphs and the questions asked of them.
//!
//! This module owns everything a researcher asks of the graph before any data
//! is touched: reading it (cell body lines through [`GraphBuilder`], Graphviz
//! DOT through [`from_dot`]), refusing cycles, d-separation, listing the paths
//! between two nodes with the reason each is open or blocked, the adjustment
//! sets for a total effect (backdoor criterion), the sets that isolate a
//! direct effect (single-door criterion), and the conditional independences
//! the graph implies for the data. When no adjustment set exists, a total
//! effect may still be identified through a measured mechanism (the front
//! door, `front_door`) or by the complete algorithm on the graph with its
//! hidden nodes projected to hidden common causes (`projection`,
//! `complete`), whose answer is a [`Formula`] or a [`Hedge`]; instruments
//! are named too (`instruments`).
//!
//! A [`Graph`] is immutable once built and speaks node *names* at its
//! boundary: every query takes names, every answer carries names, and an
//! unknown name is an error that lists near matches. Inside, nodes are indices
//! into a small parent/child adjacency ([`dag::Dag`]) so that the subset
//! searches of the identification questions stay cheap. Nothing here reads
//! files or knows about notebooks; rendering to text is a method on each
//! answer so the `cells` layer only decides where the text goes.
//!
//! ```
//! use waypath::graph::GraphBuilder;
//! let mut b = GraphBuilder::new("orchard");
//! for line in ["rootstock -> girth -> yield", "rootstock -> yield", "hidden soil -> girth, yield"] {
//!     b.add_line(line).unwrap();
//! }
//! let g = b.finish().unwrap();
//! let total = g.total_effect("rootstock", "yield").unwrap();
//! assert!(total.identifiable);
//! assert!(!g.direct_effect("rootstock", "yield").unwrap().identifiable);
//! ```

mod build;
mod complete;
mod dag;
mod dot;
mod error;
mod formula;
mod front_door;
mod identify;
mod implications;
mod instruments;
mod paths;
mod projection;
mod separators;

use std::collections::HashMap;

pub use build::{GraphBuilder, ARROW, HIDDEN, MAX_EDGES};
pub use dot::{from_dot, MAX_DOT_NESTING};
pub use error::GraphError;
pub use complete::{Complete, ControlledDirect, Hedge, IDENTIFY_STEPS};
pub use formula::Formula;
pub use front_door::FRONT_DOOR_TRIES;
pub use identify::{Beyond, EffectKind, Identification};
pub use instruments::{Instrument, INSTRUMENT_ASSUMPTION};
pub use implications::{Implication, Implications, UntestablePair};
pub use paths::{Arrow, PathListing, PathReport};

use dag::Dag;

/// One node of a causal graph.
#[derive(Debug, Clone, PartialEq, Eq, serde::Serialize)]
pub struct Node {
    /// The name used in cells, queries and output.
    pub name: String,
    /// True when the variable is not measured (declared with `hidden`).
    pub hidden: bool,
}

/// An acyclic causal graph with named nodes, some of them hidden.
#[derive(Debug, Clone)]
pub struct Graph {
    name: String,
    nodes: Vec<Node>,
    edges: Vec<(usize, usize)>,
    dag: Dag,
    order: Vec<usize>,
    index: HashMap<String, usize>,
}

impl Graph {
    /// The graph's name, as written after `graph` in the cell.
    pub fn name(&self) -> &str {
        &self.name
    }

    /// The nodes in the order they were first mentioned.
    pub fn nodes(&self) -> &[Node] {
        &self.nodes
    }

    /// The edges `(from, to)` in the order they were first written.
    pub fn edges(&self) -> Vec<(&str, &str)> {
        self.edges.iter().map(|&(a, b)| (self.label(a), self.label(b))).collect()
    }

    /// The node names in a topological order (every parent before its
    /// children; ties broken by the order of first mention).
    pub fn topological_order(&self) -> Vec<&str> {
        self.order.iter().map(|&i| self.label(i)).collect()
    }

    /// Whether `node` is hidden (unobserved).
    pub fn is_hidden(&self, node: &str) -> Result<bool, GraphError> {
        Ok(self.nodes[self.resolve(node)?].hidden)
    }

    /// The direct causes of `node`, in topological order.
    pub fn parents(&self, node: &str) -> Result<Vec<&str>, GraphError> {
        let i = self.resolve(node)?;
        Ok(self.names_in_order(&self.dag.mask_of(&self.dag.parents[i])))
    }

    /// The direct effects of `node`, in topological order.
    pub fn children(&self, node: &str) -> Result<Vec<&str>, GraphError> {
        let i = self.resolve(node)?;
        Ok(self.names_in_order(&self.dag.mask_of(&self.dag.children[i])))
    }

    /// Every node with a directed path into `node` (not `node` itself).
    pub fn ancestors(&self, node: &str) -> Result<Vec<&str>, GraphError> {
        let i = self.resolve(node)?;
        let mut mask = self.dag.ancestors_of(&[i]);
        mask[i] = false;
        Ok(self.names_in_order(&mask))
    }

    /// Every node reached by a directed path from `node` (not `node` itself).
    pub fn descendants(&self, node: &str) -> Result<Vec<&str>, GraphError> {
        let i = self.resolve(node)?;
        let mut mask = self.dag.descendants_of(&[i]);
        mask[i] = false;
        Ok(self.names_in_order(&mask))
    }

    /// True when every path between a node of `xs` and a node of `ys` is
    /// blocked by conditioning on `zs` (d-separation, Pearl 2009, Definition 1.2.3).
    ///
    /// The three sets must not share a node; an empty `xs` or `ys` is
    /// trivially separated.
    pub fn d_separated<S: AsRef<str>>(&self, xs: &[S], ys: &[S], zs: &[S]) -> Result<bool, GraphError> {
        let x = self.resolve_all(xs)?;
        let y = self.resolve_all(ys)?;
        let z = self.resolve_all(zs)?;
        self.check_disjoint(&x, "in the first set", &y, "in the second set")?;
        self.check_disjoint(&x, "in the first set", &z, "conditioned on")?;
        self.check_disjoint(&y, "in the second set", &z, "conditioned on")?;
        Ok(self.dag.d_separated(&x, &y, &self.dag.mask_of(&z)))
    }

    /// The name of node `i`.
    fn label(&self, i: usize) -> &str {
        &self.nodes[i].name
    }

    /// Names of the nodes in `mask`, in topological order.
    fn names_in_order(&self, mask: &[bool]) -> Vec<&str> {
        self.order.iter().filter(|&&i| mask[i]).map(|&i| self.label(i)).collect()
    }

    /// Owned names of the nodes in `mask`, in topological order.
    fn owned_names(&self, mask: &[bool]) -> Vec<String> {
        self.names_in_order(mask).into_iter().map(str::to_owned).collect()
    }

    /// The mask of observed nodes.
    fn observed(&self) -> Vec<bool> {
        self.nodes.iter().map(|n| !n.hidden).collect()
    }

    /// The index of a node name, or an error listing near matches.
    fn resolve(&self, name: &str) -> Result<usize, GraphError> {
        self.index.get(name).copied().ok_or_else(|| GraphError::UnknownNode {
            graph: self.name.clone(),
            name: name.to_owned(),
            near: error::near_matches(name, self.nodes.iter().map(|n| n.name.as_str())),
        })
    }

    /// The indices of several node names (duplicates dropped).
    fn resolve_all<S: AsRef<str>>(&self, names: &[S]) -> Result<Vec<usize>, GraphError> {
        let mut out = Vec::with_capacity(names.len());
        let mut seen = vec![false; self.nodes.len()];
        for name in names {
            let i = self.resolve(name.as_ref())?;
            if !std::mem::replace(&mut seen[i], true) {
                out.push(i);
            }
        }
        Ok(out)
    }

    /// An error when a node appears in two sets that must be disjoint.
    fn check_disjoint(&self, a: &[usize], a_role: &str, b: &[usize], b_role: &str) -> Result<(), GraphError> {
        let in_b = self.dag.mask_of(b);
        match a.iter().find(|&&i| in_b[i]) {
            Some(&i) => Err(GraphError::Overlap {
                graph: self.name.clone(),
                node: self.label(i).to_owned(),
                roles: format!("{a_role} and {b_role}"),
            }),
            None => Ok(()),
        }
    }
}
