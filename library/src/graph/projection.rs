//! The observed nodes' graph once hidden nodes are projected out.
//!
//! Identification beyond adjustment works on the observed nodes alone: a
//! hidden node is replaced by what it does between observed ones (the
//! latent projection, Verma 1993, as used by Tian & Pearl 2002, recalled):
//!
//! * `a -> b` when the original graph has a directed path from `a` to `b`
//!   whose inner nodes are all hidden;
//! * `a <-> b` (a *hidden common cause*) when some hidden node reaches both
//!   `a` and `b` along directed paths whose inner nodes are all hidden.
//!
//! The bidirected edges split every set of observed nodes into
//! *c-components* (confounded components): the classes of nodes joined by
//! chains of `<->` inside the set.

use std::collections::HashSet;

use super::dag::Dag;

/// The most pairs of observed nodes joined by hidden common causes a
/// projection builds (a hidden node with k observed children joins k²/2).
pub const MAX_HIDDEN_PAIRS: usize = 2_000_000;

/// Directed and bidirected edges among the observed nodes of a graph;
/// indices are those of the original graph, hidden nodes have no edges.
#[derive(Debug, Clone)]
pub(crate) struct Projection {
    pub(crate) parents: Vec<Vec<usize>>,
    pub(crate) siblings: Vec<Vec<usize>>,
}

impl Projection {
    /// Project the hidden nodes of `dag` out; `None` when the hidden common
    /// causes would make more than [`MAX_HIDDEN_PAIRS`] bidirected edges.
    pub(crate) fn new(dag: &Dag, observed: &[bool]) -> Option<Projection> {
        let n = dag.len();
        let mut p = Projection { parents: vec![Vec::new(); n], siblings: vec![Vec::new(); n] };
        for a in (0..n).filter(|&a| observed[a]) {
            for b in hidden_reach(dag, observed, &dag.children[a]) {
                p.parents[b].push(a);
            }
        }
        let mut pairs = 0usize;
        for h in (0..n).filter(|&h| !observed[h]) {
            let reached = hidden_reach(dag, observed, &dag.children[h]);
            pairs = pairs.saturating_add(reached.len().saturating_mul(reached.len()) / 2);
            if pairs > MAX_HIDDEN_PAIRS {
                return None;
            }
            for (k, &a) in reached.iter().enumerate() {
                for &b in &reached[k + 1..] {
                    p.siblings[a].push(b);
                    p.siblings[b].push(a);
                }
            }
        }
        for list in p.parents.iter_mut().chain(p.siblings.iter_mut()) {
            list.sort_unstable();
            list.dedup();
        }
        Some(p)
    }

    /// Nodes of `within` with a directed path (inside `within`) into a node
    /// of `seeds ∩ within`, the seeds included; edges into `cut` nodes are
    /// left out.
    pub(crate) fn ancestors_within(&self, seeds: &[bool], within: &[bool], cut: &[bool]) -> Vec<bool> {
        let mut seen: Vec<bool> = (0..seeds.len()).map(|i| seeds[i] && within[i]).collect();
        let mut stack: Vec<usize> = (0..seeds.len()).filter(|&i| seen[i]).collect();
        while let Some(i) = stack.pop() {
            if cut[i] {
                continue;
            }
            for &p in &self.parents[i] {
                if within[p] && !seen[p] {
                    seen[p] = true;
                    stack.push(p);
                }
            }
        }
        seen
    }

    /// The c-components of the sub-graph on `within`, each a mask; ordered
    /// by their first node index.
    pub(crate) fn c_components(&self, within: &[bool]) -> Vec<Vec<bool>> {
        let n = within.len();
        let mut assigned = vec![false; n];
        let mut out = Vec::new();
        for start in 0..n {
            if !within[start] || assigned[start] {
                continue;
            }
            let mut comp = vec![false; n];
            comp[start] = true;
            assigned[start] = true;
            let mut stack = vec![start];
            while let Some(i) = stack.pop() {
                for &s in &self.siblings[i] {
                    if within[s] && !assigned[s] {
                        assigned[s] = true;
                        comp[s] = true;
                        stack.push(s);
                    }
                }
            }
            out.push(comp);
        }
        out
    }
}

/// Observed nodes reached from `starts` along directed paths whose nodes
/// before the last are hidden (an observed start is reached itself).
pub(crate) fn hidden_reach(dag: &Dag, observed: &[bool], starts: &[usize]) -> Vec<usize> {
    let mut seen = HashSet::new();
    let mut out = Vec::new();
    let mut stack = starts.to_vec();
    while let Some(i) = stack.pop() {
        if !seen.insert(i) {
            continue;
        }
        if observed[i] {
            out.push(i);
        } else {
            stack.extend(dag.children[i].iter().copied());
        }
    }
    out
}
