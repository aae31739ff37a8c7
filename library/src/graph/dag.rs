//! Index-level graph algorithms: ancestral sets, d-separation by
//! reachability, and the construction of a minimal separator.
//!
//! Everything here works on node indices and boolean masks so that the
//! subset searches in `identify` can call d-separation hundreds of thousands
//! of times without touching names.

use std::collections::VecDeque;

/// Parent and child lists of an acyclic directed graph.
#[derive(Debug, Clone)]
pub(crate) struct Dag {
    pub(crate) parents: Vec<Vec<usize>>,
    pub(crate) children: Vec<Vec<usize>>,
}

impl Dag {
    /// A graph on `n` nodes with the given edges (duplicates already removed).
    pub(crate) fn new(n: usize, edges: &[(usize, usize)]) -> Dag {
        let mut dag = Dag { parents: vec![Vec::new(); n], children: vec![Vec::new(); n] };
        for &(a, b) in edges {
            dag.parents[b].push(a);
            dag.children[a].push(b);
        }
        dag
    }

    /// Number of nodes.
    pub(crate) fn len(&self) -> usize {
        self.parents.len()
    }

    /// The same graph with only the edges for which `keep(from, to)` holds.
    pub(crate) fn keep_edges(&self, keep: impl Fn(usize, usize) -> bool) -> Dag {
        let edges: Vec<(usize, usize)> = (0..self.len())
            .flat_map(|a| self.children[a].iter().map(move |&b| (a, b)))
            .filter(|&(a, b)| keep(a, b))
            .collect();
        Dag::new(self.len(), &edges)
    }

    /// True when `a` and `b` are joined by an edge in either direction.
    pub(crate) fn adjacent(&self, a: usize, b: usize) -> bool {
        self.children[a].contains(&b) || self.children[b].contains(&a)
    }

    /// The nodes of `nodes` as a mask.
    pub(crate) fn mask_of(&self, nodes: &[usize]) -> Vec<bool> {
        let mut mask = vec![false; self.len()];
        for &i in nodes {
            mask[i] = true;
        }
        mask
    }

    /// The seeds and every node with a directed path into a seed.
    pub(crate) fn ancestors_of(&self, seeds: &[usize]) -> Vec<bool> {
        self.closure(seeds, &self.parents)
    }

    /// The seeds and every node reached by a directed path from a seed.
    pub(crate) fn descendants_of(&self, seeds: &[usize]) -> Vec<bool> {
        self.closure(seeds, &self.children)
    }

    /// Seeds plus everything reachable along `step` lists.
    fn closure(&self, seeds: &[usize], step: &[Vec<usize>]) -> Vec<bool> {
        let mut seen = self.mask_of(seeds);
        let mut stack = seeds.to_vec();
        while let Some(i) = stack.pop() {
            for &j in &step[i] {
                if !seen[j] {
                    seen[j] = true;
                    stack.push(j);
                }
            }
        }
        seen
    }

    /// True when conditioning on `z` blocks every path between `xs` and `ys`.
    ///
    /// Reachability along active trails ("Bayes ball"; Koller & Friedman 2009,
    /// Algorithm 3.1, recalled): a trail may pass a non-collider that is not
    /// conditioned on, and a collider that is conditioned on or has a
    /// conditioned descendant. `xs`, `ys` and `z` must be disjoint.
    pub(crate) fn d_separated(&self, xs: &[usize], ys: &[usize], z: &[bool]) -> bool {
        let reached = self.reachable(xs, z);
        !ys.iter().any(|&y| reached[y])
    }

    /// Nodes joined to some node of `xs` by a trail that is active given `z`.
    fn reachable(&self, xs: &[usize], z: &[bool]) -> Vec<bool> {
        let z_nodes: Vec<usize> = (0..self.len()).filter(|&i| z[i]).collect();
        let opens_collider = self.ancestors_of(&z_nodes);
        // Visit states: (node, arrived from a child or start = 0 / from a parent = 1).
        let mut visited = vec![[false; 2]; self.len()];
        let mut reached = vec![false; self.len()];
        let mut queue: VecDeque<(usize, usize)> = xs.iter().map(|&x| (x, 0)).collect();
        while let Some((n, from_parent)) = queue.pop_front() {
            if visited[n][from_parent] {
                continue;
            }
            visited[n][from_parent] = true;
            if !z[n] {
                reached[n] = true;
            }
            if from_parent == 0 {
                if !z[n] {
                    queue.extend(self.parents[n].iter().map(|&p| (p, 0)));
                    queue.extend(self.children[n].iter().map(|&c| (c, 1)));
                }
            } else {
                if !z[n] {
                    queue.extend(self.children[n].iter().map(|&c| (c, 1)));
                }
                if opens_collider[n] {
                    queue.extend(self.parents[n].iter().map(|&p| (p, 0)));
                }
            }
        }
        reached
    }

    /// A minimal set of allowed nodes that d-separates `x` and `y`, or `None`
    /// when no subset of `allowed` does.
    ///
    /// Follows the construction of Tian, Paz & Pearl (1998) as restated by
    /// van der Zander, Liśkiewicz & Textor (2019) (recalled): if any allowed set
    /// separates, then the allowed ancestors of {x, y} do; shrink that set to the
    /// members reachable from `x` in the moral graph of the ancestral set
    /// without passing another member, then to those of the rest reachable
    /// from `y` likewise. The result separates and no proper subset does.
    pub(crate) fn minimal_separator(&self, x: usize, y: usize, allowed: &[bool]) -> Option<Vec<usize>> {
        let ancestral = self.ancestors_of(&[x, y]);
        let start: Vec<bool> = (0..self.len()).map(|i| ancestral[i] && allowed[i] && i != x && i != y).collect();
        if !self.d_separated(&[x], &[y], &start) {
            return None;
        }
        let moral = self.moral_graph(&ancestral);
        let from_x = moral_reach(&moral, x, &start);
        let from_y = moral_reach(&moral, y, &from_x);
        Some((0..self.len()).filter(|&i| from_y[i]).collect())
    }

    /// Undirected neighbours in the moral graph of the sub-graph on `keep`
    /// (an ancestral set): parent–child links plus links between co-parents.
    pub(crate) fn moral_graph(&self, keep: &[bool]) -> Vec<Vec<usize>> {
        let mut nbrs = vec![Vec::new(); self.len()];
        for child in (0..self.len()).filter(|&c| keep[c]) {
            let ps = &self.parents[child];
            for (k, &p) in ps.iter().enumerate() {
                nbrs[p].push(child);
                nbrs[child].push(p);
                for &q in &ps[k + 1..] {
                    nbrs[p].push(q);
                    nbrs[q].push(p);
                }
            }
        }
        // Two children of the same co-parents link them twice; keep one link.
        for list in &mut nbrs {
            list.sort_unstable();
            list.dedup();
        }
        nbrs
    }
}

/// Members of `stop` reachable from `start` in an undirected graph along
/// paths whose inner nodes avoid `stop`.
fn moral_reach(nbrs: &[Vec<usize>], start: usize, stop: &[bool]) -> Vec<bool> {
    let mut seen = vec![false; nbrs.len()];
    let mut hit = vec![false; nbrs.len()];
    let mut stack = vec![start];
    seen[start] = true;
    while let Some(i) = stack.pop() {
        for &j in &nbrs[i] {
            if seen[j] {
                continue;
            }
            seen[j] = true;
            if stop[j] {
                hit[j] = true;
            } else {
                stack.push(j);
            }
        }
    }
    hit
}
