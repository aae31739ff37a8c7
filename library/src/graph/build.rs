//! Building a graph: body lines of a `graph` cell, or nodes and edges one by
//! one, then a single acyclicity check in [`GraphBuilder::finish`].
//!
//! A body line is a chain of groups joined by `->`; a group is one or more
//! node names separated by commas. Every node of a group points to every node
//! of the next group, so `a -> b -> c` is a chain, `a -> b, c` fans out and
//! `a, b -> c` fans in. A leading `hidden` marks the first group as
//! unobserved; a bare name declares an isolated node.

use std::collections::{BinaryHeap, HashMap, HashSet};
use std::cmp::Reverse;

use super::dag::Dag;
use super::{Graph, GraphError, Node};

/// The most edges a graph may have: every graph question is at least linear
/// in the edges, and a line such as `{a1 … a9999} -> {b1 … b9999}` would
/// otherwise ask for a hundred million of them.
pub const MAX_EDGES: usize = 1_000_000;

/// Collects nodes and edges, then checks them into a [`Graph`].
#[derive(Debug, Clone)]
pub struct GraphBuilder {
    name: String,
    nodes: Vec<Node>,
    index: HashMap<String, usize>,
    edges: Vec<(usize, usize)>,
    /// The edges again, for a constant-time repeat check.
    edge_set: HashSet<(usize, usize)>,
    lines_read: usize,
}

impl GraphBuilder {
    /// An empty graph called `name`.
    pub fn new(name: impl Into<String>) -> GraphBuilder {
        GraphBuilder {
            name: name.into(),
            nodes: Vec::new(),
            index: HashMap::new(),
            edges: Vec::new(),
            edge_set: HashSet::new(),
            lines_read: 0,
        }
    }

    /// Read one body line (comments already stripped). Blank lines are
    /// skipped; errors name the line by its position among the lines given.
    ///
    /// ```
    /// # use waypath::graph::GraphBuilder;
    /// let mut b = GraphBuilder::new("stream");
    /// b.add_line("hidden runoff -> turbidity, nitrate").unwrap();
    /// b.add_line("nitrate -> algae <- turbidity").unwrap_err(); // edges run left to right
    /// ```
    pub fn add_line(&mut self, text: &str) -> Result<(), GraphError> {
        self.lines_read += 1;
        let trimmed = text.trim();
        if trimmed.is_empty() {
            return Ok(());
        }
        let line_error = |problem| GraphError::Line { graph: self.name.clone(), line: self.lines_read, text: trimmed.to_owned(), problem };
        let groups = parse_line(trimmed).map_err(line_error)?;
        let new_edges: usize = groups.groups.windows(2).map(|pair| pair[0].len().saturating_mul(pair[1].len())).fold(0, usize::saturating_add);
        if new_edges.saturating_add(self.edges.len()) > MAX_EDGES {
            return Err(line_error(format!("this line would give the graph more than {MAX_EDGES} edges; a causal graph that large cannot be questioned")));
        }
        for (k, group) in groups.groups.iter().enumerate() {
            for name in group {
                self.add_node(name, k == 0 && groups.hidden);
            }
        }
        for pair in groups.groups.windows(2) {
            for from in &pair[0] {
                for to in &pair[1] {
                    self.add_edge(from, to);
                }
            }
        }
        Ok(())
    }

    /// Declare a node; `hidden = true` marks it unobserved, and once hidden
    /// it stays hidden whatever later declarations say.
    pub fn add_node(&mut self, name: &str, hidden: bool) {
        let i = self.node_index(name);
        self.nodes[i].hidden |= hidden;
    }

    /// Add the edge `from -> to`, declaring either node if new. A repeated
    /// edge is kept once.
    pub fn add_edge(&mut self, from: &str, to: &str) {
        let edge = (self.node_index(from), self.node_index(to));
        if self.edge_set.insert(edge) {
            self.edges.push(edge);
        }
    }

    /// How many distinct edges have been added so far.
    pub fn edge_count(&self) -> usize {
        self.edges.len()
    }

    /// Check the graph (non-empty, acyclic) and freeze it.
    pub fn finish(self) -> Result<Graph, GraphError> {
        if self.nodes.is_empty() {
            return Err(GraphError::Empty { graph: self.name });
        }
        let dag = Dag::new(self.nodes.len(), &self.edges);
        let order = match topological_order(&dag) {
            Ok(order) => order,
            Err(cycle) => {
                return Err(GraphError::Cycle {
                    graph: self.name,
                    cycle: cycle.into_iter().map(|i| self.nodes[i].name.clone()).collect(),
                })
            }
        };
        Ok(Graph { name: self.name, nodes: self.nodes, edges: self.edges, dag, order, index: self.index })
    }

    /// The index of `name`, declaring it (observed) if new.
    fn node_index(&mut self, name: &str) -> usize {
        if let Some(&i) = self.index.get(name) {
            return i;
        }
        self.nodes.push(Node { name: name.to_owned(), hidden: false });
        self.index.insert(name.to_owned(), self.nodes.len() - 1);
        self.nodes.len() - 1
    }
}

/// The word that marks a body line's first node as hidden.
pub const HIDDEN: &str = "hidden";
/// The arrow of an edge in a body line.
pub const ARROW: &str = "->";

/// One parsed body line: the `->`-separated groups and the `hidden` flag.
struct LineGroups {
    hidden: bool,
    groups: Vec<Vec<String>>,
}

/// Split a non-empty line into groups of node names, or say what is wrong.
fn parse_line(text: &str) -> Result<LineGroups, String> {
    if text.contains("<-") {
        return Err("write every edge left to right with `->` (for example `b -> a` instead of `a <- b`)".to_owned());
    }
    let (hidden, rest) = match text.strip_prefix(HIDDEN) {
        Some(rest) if rest.is_empty() || rest.starts_with(char::is_whitespace) => (true, rest.trim()),
        _ => (false, text),
    };
    if hidden && rest.is_empty() {
        return Err("`hidden` needs the node it marks, as in `hidden soil -> girth`".to_owned());
    }
    let mut groups = Vec::new();
    for (k, part) in rest.split(ARROW).enumerate() {
        let part = part.trim();
        if part.is_empty() {
            let place = if k == 0 { "before the first `->`" } else { "after a `->`" };
            return Err(format!("a node name is missing {place}"));
        }
        let mut group = Vec::new();
        for name in part.split(',').map(str::trim) {
            check_name(name)?;
            group.push(name.to_owned());
        }
        groups.push(group);
    }
    Ok(LineGroups { hidden, groups })
}

/// A node name starts with a letter or `_` and continues with letters,
/// digits, `_` or `.`.
fn check_name(name: &str) -> Result<(), String> {
    let mut chars = name.chars();
    let first_ok = chars.next().is_some_and(|c| c.is_alphabetic() || c == '_');
    if name.is_empty() {
        return Err("a node name is missing next to a comma".to_owned());
    }
    if !first_ok || !chars.all(|c| c.is_alphanumeric() || c == '_' || c == '.') {
        return Err(format!(
            "`{name}` is not a node name; use letters, digits and `_`, starting with a letter, and join nodes with `->` or `,`"
        ));
    }
    if name == HIDDEN {
        return Err("`hidden` is a keyword and must come first on the line, as in `hidden soil -> girth`".to_owned());
    }
    Ok(())
}

/// A topological order (Kahn's algorithm, smallest index first among the
/// ready nodes), or one directed cycle as a node list that ends where it starts.
fn topological_order(dag: &Dag) -> Result<Vec<usize>, Vec<usize>> {
    let n = dag.len();
    let mut waiting: Vec<usize> = dag.parents.iter().map(Vec::len).collect();
    let mut ready: BinaryHeap<Reverse<usize>> = (0..n).filter(|&i| waiting[i] == 0).map(Reverse).collect();
    let mut order = Vec::with_capacity(n);
    while let Some(Reverse(i)) = ready.pop() {
        order.push(i);
        for &c in &dag.children[i] {
            waiting[c] -= 1;
            if waiting[c] == 0 {
                ready.push(Reverse(c));
            }
        }
    }
    if order.len() == n {
        return Ok(order);
    }
    Err(find_cycle(dag, &waiting))
}

/// Walk backwards through parents among the nodes left over by Kahn's
/// algorithm (each has an unprocessed parent) until a node repeats; the
/// cycle is returned in edge direction, from its earliest-declared node.
fn find_cycle(dag: &Dag, waiting: &[usize]) -> Vec<usize> {
    let stuck = |i: usize| waiting[i] > 0;
    let first = (0..dag.len()).find(|&i| stuck(i)).unwrap_or(0);
    let mut walk: Vec<usize> = vec![first];
    // Where each node sits on the walk, so a repeat is found in constant time.
    let mut position: Vec<Option<usize>> = vec![None; dag.len()];
    position[first] = Some(0);
    loop {
        let here = walk[walk.len() - 1];
        let Some(&next) = dag.parents[here].iter().find(|&&p| stuck(p)) else {
            return walk;
        };
        if let Some(pos) = position[next] {
            let mut cycle: Vec<usize> = walk[pos..].to_vec();
            cycle.reverse();
            // Start at the earliest-declared node so the message is stable.
            let first = (0..cycle.len()).min_by_key(|&k| cycle[k]).unwrap_or(0);
            cycle.rotate_left(first);
            cycle.push(cycle[0]);
            return cycle;
        }
        position[next] = Some(walk.len());
        walk.push(next);
    }
}
