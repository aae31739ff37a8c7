//! Path listing: every path between two nodes (edge direction ignored), each
//! with whether it is open given a conditioning set, and why.
//!
//! The reasons follow the definition of d-separation (Pearl 2009,
//! Definition 1.2.3): a path is blocked by a conditioned non-collider, or by
//! a collider that is neither conditioned on nor has a conditioned
//! descendant. Conditioning on a collider (or a descendant of it) opens it,
//! and the report says so, because that is the usual surprise.
//!
//! A dense graph has exponentially many paths, so the listing is lazy and
//! bounded: where the depth-first search has a choice, it only steps to a
//! node from which the far end can still be reached without revisiting the
//! path (one graph search per branching step, so no step is wasted on dead
//! ends once the search has made its first choice), it
//! stops after [`PATH_LIMIT`] paths or [`WORK_BUDGET`] visited nodes, and it
//! says when it stopped. What stays exact however large the graph: whether
//! the ends are d-separated, and the number of directed paths between them
//! (dynamic programming over the causal order). Counting every undirected
//! path exactly is #P-complete (Valiant 1979), so that total is not given.

use std::sync::atomic::{AtomicBool, Ordering};

use serde::Serialize;

use super::dag::Dag;
use super::{Graph, GraphError};

/// The most paths listed before the list is cut.
pub const PATH_LIMIT: usize = 2000;
/// The most node visits one listing may spend (about a second of work).
pub const WORK_BUDGET: usize = 50_000_000;

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

/// The paths between two nodes, as far as they were listed, and what is
/// known exactly whatever the size of the graph.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PathListing {
    /// The paths listed, shorter first.
    pub paths: Vec<PathReport>,
    /// False when the search stopped at [`PATH_LIMIT`] paths or its work
    /// budget, so more paths exist than are listed.
    pub complete: bool,
    /// True when every path is blocked (d-separation, computed directly).
    pub separated: bool,
    /// The number of directed paths from the first node to the second plus
    /// those from the second to the first (one of the two is always zero).
    pub directed_paths: f64,
}

impl Graph {
    /// Every path between `from` and `to`, ignoring edge direction, with its
    /// status given the conditioning set `given`. Shorter paths come first.
    /// More than [`PATH_LIMIT`] paths (or more work than [`WORK_BUDGET`]) is
    /// an error; [`Graph::path_listing`] gives the first ones instead.
    pub fn paths<S: AsRef<str>>(&self, from: &str, to: &str, given: &[S]) -> Result<Vec<PathReport>, GraphError> {
        let listing = self.path_listing(from, to, given, &AtomicBool::new(false))?;
        if !listing.complete {
            return Err(GraphError::TooManyPaths { graph: self.name.clone(), from: from.to_owned(), to: to.to_owned(), limit: PATH_LIMIT });
        }
        Ok(listing.paths)
    }

    /// The paths between `from` and `to` as far as the limits allow, with
    /// the d-separation verdict and the number of directed paths; stops with
    /// [`GraphError::Interrupted`] soon after `cancel` is set.
    pub fn path_listing<S: AsRef<str>>(&self, from: &str, to: &str, given: &[S], cancel: &AtomicBool) -> Result<PathListing, GraphError> {
        let a = self.resolve(from)?;
        let b = self.resolve(to)?;
        if a == b {
            return Err(GraphError::SameNode { graph: self.name.clone(), node: from.to_owned() });
        }
        let z = self.resolve_all(given)?;
        self.check_disjoint(&[a], "an end of the paths", &z, "conditioned on")?;
        self.check_disjoint(&[b], "an end of the paths", &z, "conditioned on")?;
        let mask = self.dag.mask_of(&z);
        let (raw, complete) = list_paths(&self.dag, a, b, &mask, cancel, PATH_LIMIT)
            .map_err(|_| GraphError::Interrupted { graph: self.name.clone() })?;
        Ok(PathListing {
            paths: raw.iter().map(|p| self.path_report(p)).collect(),
            complete,
            separated: self.dag.d_separated(&[a], &[b], &mask),
            directed_paths: self.directed_path_count(a, b) + self.directed_path_count(b, a),
        })
    }

    /// The number of directed paths from `a` to `b`: paths into each node
    /// summed over its parents, in causal order (dynamic programming).
    fn directed_path_count(&self, a: usize, b: usize) -> f64 {
        let mut count = vec![0.0_f64; self.dag.len()];
        count[a] = 1.0;
        for &v in &self.order {
            if count[v] == 0.0 {
                continue;
            }
            for &c in &self.dag.children[v] {
                count[c] += count[v];
            }
        }
        count[b]
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
/// given `z`, shortest first; `None` when the limits cut the list.
pub(crate) fn all_paths(dag: &Dag, a: usize, b: usize, z: &[bool]) -> Option<Vec<RawPath>> {
    match list_paths(dag, a, b, z, &AtomicBool::new(false), PATH_LIMIT) {
        Ok((paths, true)) => Some(paths),
        _ => None,
    }
}

/// The search was stopped by the cancel flag.
pub(crate) struct Cancelled;

/// Up to `limit` simple paths from `a` to `b` in the skeleton of `dag`,
/// classified given `z`, shortest first, and whether that is all of them.
fn list_paths(dag: &Dag, a: usize, b: usize, z: &[bool], cancel: &AtomicBool, limit: usize) -> Result<(Vec<RawPath>, bool), Cancelled> {
    let mut search = PathSearch { dag, target: b, on_path: vec![false; dag.len()], work: 0, cancel };
    let (mut found, complete) = search.run(a, limit)?;
    found.sort_by(|p, q| p.len().cmp(&q.len()).then_with(|| p.cmp(q)));
    let z_nodes: Vec<usize> = (0..dag.len()).filter(|&i| z[i]).collect();
    let opens = dag.ancestors_of(&z_nodes);
    Ok((found.into_iter().map(|nodes| classify(dag, nodes, z, &opens)).collect(), complete))
}

/// A depth-first search with an explicit stack (a path may be as long as
/// the graph, too deep for recursion).
struct PathSearch<'a> {
    dag: &'a Dag,
    target: usize,
    on_path: Vec<bool>,
    /// Node visits spent so far.
    work: usize,
    cancel: &'a AtomicBool,
}

/// The neighbours still to try from one node of the path.
struct Frame {
    next: Vec<usize>,
    at: usize,
}

impl PathSearch<'_> {
    /// The paths found from `start`, and false if a limit cut the search.
    fn run(&mut self, start: usize, limit: usize) -> Result<(Vec<Vec<usize>>, bool), Cancelled> {
        let mut found = Vec::new();
        let mut path = vec![start];
        self.on_path[start] = true;
        let mut stack = vec![Frame { next: self.viable(start)?, at: 0 }];
        while let Some(frame) = stack.last_mut() {
            let Some(&n) = frame.next.get(frame.at) else {
                stack.pop();
                if let Some(left) = path.pop() {
                    self.on_path[left] = false;
                }
                continue;
            };
            frame.at += 1;
            if n == self.target {
                if found.len() == limit {
                    return Ok((found, false));
                }
                let mut complete_path = path.clone();
                complete_path.push(n);
                found.push(complete_path);
                continue;
            }
            if self.work > WORK_BUDGET {
                return Ok((found, false));
            }
            path.push(n);
            self.on_path[n] = true;
            stack.push(Frame { next: self.viable(n)?, at: 0 });
        }
        Ok((found, true))
    }

    /// The neighbours of `here` (path end) from which the target can still be
    /// reached without touching the path, in index order.
    ///
    /// With one free neighbour there is nothing to choose: if the target
    /// was reachable from `here`, it is reachable through that neighbour, so
    /// the search steps on without a graph search (a long chain then costs
    /// its length, not its length squared).
    fn viable(&mut self, here: usize) -> Result<Vec<usize>, Cancelled> {
        if self.cancel.load(Ordering::Relaxed) {
            return Err(Cancelled);
        }
        let dag = self.dag;
        let free: Vec<usize> = dag.parents[here].iter().chain(&dag.children[here]).copied().filter(|&n| !self.on_path[n]).collect();
        self.work += 1 + free.len();
        if free.len() <= 1 {
            return Ok(free);
        }
        let mut reach = vec![false; dag.len()];
        reach[self.target] = true;
        let mut stack = vec![self.target];
        while let Some(i) = stack.pop() {
            self.work += 1 + dag.parents[i].len() + dag.children[i].len();
            for &j in dag.parents[i].iter().chain(&dag.children[i]) {
                if !reach[j] && !self.on_path[j] {
                    reach[j] = true;
                    stack.push(j);
                }
            }
        }
        self.work += dag.len();
        let mut next: Vec<usize> = free.into_iter().filter(|&n| reach[n]).collect();
        next.sort_unstable();
        Ok(next)
    }
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
