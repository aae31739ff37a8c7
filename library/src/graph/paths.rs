//! Path listing: every path between two nodes (edge direction ignored), each
//! with whether it is open given a conditioning set, and why.
//!
//! The reasons follow the definition of d-separation (Pearl 2009,
//! Definition 1.2.3): a path is blocked by a conditioned non-collider, or by
//! a collider that is neither conditioned on nor has a conditioned
//! descendant. Conditioning on a collider (or a descendant of it) opens it,
//! and the report says so, because that is the usual surprise.

use serde::Serialize;

use super::dag::Dag;
use super::{Graph, GraphError};

/// The most paths listed before giving up on a pair.
const PATH_LIMIT: usize = 2000;

/// The direction of one edge along a path, read left to right.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub enum Arrow {
    /// `a -> b`: the edge points along the path.
    #[serde(rename = "->")]
    Forward,
    /// `a <- b`: the edge points back.
    #[serde(rename = "<-")]
    Backward,
}

impl Arrow {
    fn symbol(self) -> &'static str {
        match self {
            Arrow::Forward => "->",
            Arrow::Backward => "<-",
        }
    }
}

/// One path between two nodes and its status given a conditioning set.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct PathReport {
    /// Node names from the first node to the last.
    pub nodes: Vec<String>,
    /// `arrows[i]` joins `nodes[i]` and `nodes[i + 1]`.
    pub arrows: Vec<Arrow>,
    /// True when nothing on the path blocks it.
    pub open: bool,
    /// Why the path is blocked, one entry per blocking node.
    pub blocked_by: Vec<String>,
    /// Colliders on the path that the conditioning set opens.
    pub opened_by: Vec<String>,
    /// True when the path starts with an arrow into its first node.
    pub is_backdoor: bool,
}

impl PathReport {
    /// The path drawn with arrows, e.g. `rootstock -> girth <- soil -> yield`.
    pub fn drawing(&self) -> String {
        let mut out = self.nodes[0].clone();
        for (arrow, node) in self.arrows.iter().zip(&self.nodes[1..]) {
            out.push_str(&format!(" {} {node}", arrow.symbol()));
        }
        out
    }

    /// The path and its status on one line, e.g.
    /// `rootstock -> girth -> yield: blocked by conditioned non-collider girth`.
    pub fn render(&self) -> String {
        let kind = if self.is_backdoor { " (backdoor)" } else { "" };
        let status = if self.open {
            match self.opened_by.as_slice() {
                [] => "open".to_owned(),
                opened => format!("open; {}", opened.join("; ")),
            }
        } else {
            format!("blocked by {}", self.blocked_by.join("; "))
        };
        format!("{}{kind}: {status}", self.drawing())
    }
}

/// A path in index form with the nodes that block or open it.
pub(crate) struct RawPath {
    pub(crate) nodes: Vec<usize>,
    arrows: Vec<Arrow>,
    blocks: Vec<Block>,
    pub(crate) openings: Vec<Opening>,
}

/// A node that blocks a path.
enum Block {
    ConditionedNonCollider(usize),
    ClosedCollider(usize),
}

/// A collider that the conditioning set opens.
pub(crate) enum Opening {
    Conditioned(usize),
    ViaDescendant { collider: usize, descendant: usize },
}

impl RawPath {
    /// True when nothing blocks the path.
    pub(crate) fn is_open(&self) -> bool {
        self.blocks.is_empty()
    }
}

impl Graph {
    /// Every path between `from` and `to`, ignoring edge direction, with its
    /// status given the conditioning set `given`. Shorter paths come first.
    pub fn paths<S: AsRef<str>>(&self, from: &str, to: &str, given: &[S]) -> Result<Vec<PathReport>, GraphError> {
        let a = self.resolve(from)?;
        let b = self.resolve(to)?;
        if a == b {
            return Err(GraphError::SameNode { graph: self.name.clone(), node: from.to_owned() });
        }
        let z = self.resolve_all(given)?;
        self.check_disjoint(&[a], "an end of the paths", &z, "conditioned on")?;
        self.check_disjoint(&[b], "an end of the paths", &z, "conditioned on")?;
        let raw = all_paths(&self.dag, a, b, &self.dag.mask_of(&z)).ok_or_else(|| GraphError::TooManyPaths {
            graph: self.name.clone(),
            from: from.to_owned(),
            to: to.to_owned(),
            limit: PATH_LIMIT,
        })?;
        Ok(raw.iter().map(|p| self.path_report(p)).collect())
    }

    /// Names and reasons for a path in index form.
    pub(crate) fn path_report(&self, raw: &RawPath) -> PathReport {
        let blocked_by = raw
            .blocks
            .iter()
            .map(|b| match *b {
                Block::ConditionedNonCollider(i) => format!("conditioned non-collider {}", self.label(i)),
                Block::ClosedCollider(i) => {
                    format!("unconditioned collider {} (no conditioned descendant)", self.label(i))
                }
            })
            .collect();
        let opened_by = raw
            .openings
            .iter()
            .map(|o| match *o {
                Opening::Conditioned(c) => format!("collider {} opened by conditioning on it", self.label(c)),
                Opening::ViaDescendant { collider, descendant } => format!(
                    "collider {} opened by conditioning on its descendant {}",
                    self.label(collider),
                    self.label(descendant)
                ),
            })
            .collect();
        PathReport {
            nodes: raw.nodes.iter().map(|&i| self.label(i).to_owned()).collect(),
            arrows: raw.arrows.clone(),
            open: raw.is_open(),
            blocked_by,
            opened_by,
            is_backdoor: raw.arrows.first() == Some(&Arrow::Backward),
        }
    }
}

/// Every simple path from `a` to `b` in the skeleton of `dag`, classified
/// given `z`, shortest first; `None` past [`PATH_LIMIT`] paths.
pub(crate) fn all_paths(dag: &Dag, a: usize, b: usize, z: &[bool]) -> Option<Vec<RawPath>> {
    let mut found: Vec<Vec<usize>> = Vec::new();
    let mut on_path = vec![false; dag.len()];
    let mut path = vec![a];
    on_path[a] = true;
    if !extend(dag, b, &mut path, &mut on_path, &mut found) {
        return None;
    }
    found.sort_by(|p, q| p.len().cmp(&q.len()).then_with(|| p.cmp(q)));
    let z_nodes: Vec<usize> = (0..dag.len()).filter(|&i| z[i]).collect();
    let opens = dag.ancestors_of(&z_nodes);
    Some(found.into_iter().map(|nodes| classify(dag, nodes, z, &opens)).collect())
}

/// Depth-first extension of `path` towards `target`; false once the limit is passed.
fn extend(dag: &Dag, target: usize, path: &mut Vec<usize>, on_path: &mut [bool], found: &mut Vec<Vec<usize>>) -> bool {
    let here = path[path.len() - 1];
    let mut next: Vec<usize> = dag.parents[here].iter().chain(&dag.children[here]).copied().collect();
    next.sort_unstable();
    for n in next {
        if on_path[n] {
            continue;
        }
        path.push(n);
        if n == target {
            found.push(path.clone());
            if found.len() > PATH_LIMIT {
                return false;
            }
        } else {
            on_path[n] = true;
            let ok = extend(dag, target, path, on_path, found);
            on_path[n] = false;
            if !ok {
                return false;
            }
        }
        path.pop();
    }
    true
}

/// Arrows, blocking nodes and opened colliders of one path; `opens[i]` is true
/// when `i` is conditioned on or has a conditioned descendant.
fn classify(dag: &Dag, nodes: Vec<usize>, z: &[bool], opens: &[bool]) -> RawPath {
    let arrows: Vec<Arrow> = nodes
        .windows(2)
        .map(|w| if dag.children[w[0]].contains(&w[1]) { Arrow::Forward } else { Arrow::Backward })
        .collect();
    let mut blocks = Vec::new();
    let mut openings = Vec::new();
    for k in 1..nodes.len() - 1 {
        let n = nodes[k];
        let collider = arrows[k - 1] == Arrow::Forward && arrows[k] == Arrow::Backward;
        match (collider, z[n], opens[n]) {
            (false, true, _) => blocks.push(Block::ConditionedNonCollider(n)),
            (false, false, _) => {}
            (true, true, _) => openings.push(Opening::Conditioned(n)),
            (true, false, true) => openings.push(Opening::ViaDescendant { collider: n, descendant: conditioned_descendant(dag, n, z) }),
            (true, false, false) => blocks.push(Block::ClosedCollider(n)),
        }
    }
    RawPath { nodes, arrows, blocks, openings }
}

/// The lowest-index conditioned descendant of `n` (one exists when called).
fn conditioned_descendant(dag: &Dag, n: usize, z: &[bool]) -> usize {
    let below = dag.descendants_of(&[n]);
    (0..dag.len()).find(|&i| below[i] && z[i]).unwrap_or(n)
}
