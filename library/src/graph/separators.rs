//! Every minimal adjustment set, listed with polynomial delay.
//!
//! The sets an effect question lists are the minimal sets of allowed nodes
//! that d-separate exposure `x` and outcome `y` in a modified graph (the
//! backdoor graph without the edges out of `x`, or the single-door graph
//! without the edge `x -> y`). Trying subsets costs 2^m for m candidates;
//! this module walks from one minimal set to the next instead.
//!
//! Following van der Zander, Liśkiewicz & Textor ("Separators and adjustment
//! sets in causal graphs: complete criteria and an algorithmic framework",
//! Artificial Intelligence 2019), every minimal d-separator lies among the
//! ancestors of {x, y}, and there a set d-separates exactly when it separates
//! x and y in the moral graph of that ancestral set (Lauritzen, Dawid,
//! Larsen & Leimer 1990, recalled). So the minimal adjustment sets are the
//! minimal x–y vertex separators of that moral graph whose members are all
//! allowed.
//!
//! A minimal vertex separator Z is fixed by the component C of x left when
//! Z is removed (Z = N(C), and every member of Z borders both C and the
//! component of y). The walk starts from the separator closest to x and, from
//! each separator Z found, moves one member z of Z to the x side: the x side
//! grows to C ∪ {z} plus every node that may not be cut (not allowed) reached
//! from it, and the new separator is the border of y's component beyond that.
//! Every minimal separator inside the allowed nodes is reached this way, since
//! each step can move the x side strictly closer to that of any target
//! separator without passing it (the argument of Berry, Bordat & Cogis 1999
//! for listing all minimal separators, recalled, restricted here to allowed
//! nodes; the exhaustive test against subset search checks the result). A
//! set is listed as soon as its own successors are found, so at most |Z|
//! graph searches, O(n · (n + e)), pass between two sets listed.
//!
//! The brute-force search over subsets stays in the tests as the oracle.

use std::collections::{HashSet, VecDeque};
use std::sync::atomic::{AtomicBool, Ordering};

use super::dag::Dag;

/// The most minimal sets listed.
pub(crate) const SET_LIMIT: usize = 64;

/// The minimal sets found, and whether every one was found.
pub(crate) struct SetSearch {
    pub(crate) sets: Vec<Vec<usize>>,
    pub(crate) complete: bool,
}

/// The walk was stopped by the cancel flag.
pub(crate) struct Cancelled;

/// Every minimal subset of `candidates` that d-separates `x` and `y` in
/// `dag`, smallest first (ties by `order`); at most [`SET_LIMIT`] sets.
///
/// `candidates` must lie among the ancestors of {x, y} and exclude them;
/// the caller has checked that the whole candidate set separates.
pub(crate) fn minimal_adjustment_sets(
    dag: &Dag,
    x: usize,
    y: usize,
    candidates: &[usize],
    order: &[usize],
    cancel: &AtomicBool,
) -> Result<SetSearch, Cancelled> {
    let ancestral = dag.ancestors_of(&[x, y]);
    let moral = dag.moral_graph(&ancestral);
    let allowed = dag.mask_of(candidates);
    let walk = Walk { moral: &moral, inside: &ancestral, allowed: &allowed, y };
    let Some(first) = walk.separator_beyond(&walk.mask(&[x])) else {
        return Ok(SetSearch { sets: Vec::new(), complete: true });
    };
    let mut seen: HashSet<Vec<usize>> = HashSet::from([first.clone()]);
    let mut queue: VecDeque<Vec<usize>> = VecDeque::from([first]);
    let mut sets = Vec::new();
    // A set is listed when it is taken from the queue and its successors are
    // queued at once, so one walk step (|Z| graph searches) separates two sets
    // listed: polynomial delay.
    while sets.len() < SET_LIMIT {
        let Some(z) = queue.pop_front() else { break };
        let x_side = walk.component(x, &walk.mask(&z));
        for &member in &z {
            if cancel.load(Ordering::Relaxed) {
                return Err(Cancelled);
            }
            let mut seed = x_side.clone();
            seed[member] = true;
            if let Some(next) = walk.separator_beyond(&seed) {
                if seen.insert(next.clone()) {
                    queue.push_back(next);
                }
            }
        }
        sets.push(z);
    }
    let complete = queue.is_empty();
    let rank = rank_of(order, dag.len());
    for set in &mut sets {
        set.sort_by_key(|&i| rank[i]);
    }
    sets.sort_by(|a, b| a.len().cmp(&b.len()).then_with(|| a.iter().map(|&i| rank[i]).cmp(b.iter().map(|&i| rank[i]))));
    Ok(SetSearch { sets, complete })
}

/// Position of each node in `order`.
fn rank_of(order: &[usize], n: usize) -> Vec<usize> {
    let mut rank = vec![0; n];
    for (k, &i) in order.iter().enumerate() {
        rank[i] = k;
    }
    rank
}

/// The moral graph of the ancestral set and the nodes that may be cut.
struct Walk<'a> {
    moral: &'a [Vec<usize>],
    inside: &'a [bool],
    allowed: &'a [bool],
    y: usize,
}

impl Walk<'_> {
    fn mask(&self, nodes: &[usize]) -> Vec<bool> {
        let mut mask = vec![false; self.moral.len()];
        for &i in nodes {
            mask[i] = true;
        }
        mask
    }

    /// The minimal separator whose x side contains `seed` and is closest to
    /// it, or `None` when the seed reaches `y` through nodes that may not be cut.
    fn separator_beyond(&self, seed: &[bool]) -> Option<Vec<usize>> {
        let x_side = self.absorb(seed)?;
        let border = self.border(&x_side);
        let y_side = self.component(self.y, &border);
        let separator = self.border(&y_side);
        Some((0..self.moral.len()).filter(|&i| separator[i]).collect())
    }

    /// `seed` plus every node that may not be cut and is reached from it
    /// through such nodes; `None` if that reaches `y`.
    fn absorb(&self, seed: &[bool]) -> Option<Vec<bool>> {
        let mut side = seed.to_vec();
        let mut stack: Vec<usize> = (0..side.len()).filter(|&i| side[i]).collect();
        while let Some(i) = stack.pop() {
            for &j in &self.moral[i] {
                if side[j] || !self.inside[j] || self.allowed[j] {
                    continue;
                }
                if j == self.y {
                    return None;
                }
                side[j] = true;
                stack.push(j);
            }
        }
        (!side[self.y]).then_some(side)
    }

    /// Nodes outside `side` adjacent to it.
    fn border(&self, side: &[bool]) -> Vec<bool> {
        let mut border = vec![false; side.len()];
        for i in (0..side.len()).filter(|&i| side[i]) {
            for &j in &self.moral[i] {
                if !side[j] && self.inside[j] {
                    border[j] = true;
                }
            }
        }
        border
    }

    /// The component of `start` once the nodes of `removed` are taken out.
    fn component(&self, start: usize, removed: &[bool]) -> Vec<bool> {
        let mut seen = vec![false; self.moral.len()];
        seen[start] = true;
        let mut stack = vec![start];
        while let Some(i) = stack.pop() {
            for &j in &self.moral[i] {
                if !seen[j] && !removed[j] && self.inside[j] {
                    seen[j] = true;
                    stack.push(j);
                }
            }
        }
        seen
    }
}

#[cfg(test)]
mod tests {
    use rand::rngs::StdRng;
    use rand::{RngExt, SeedableRng};

    use super::*;

    /// The oracle: every subset of `candidates` in order of size; a valid
    /// subset that holds no set found before it is minimal.
    fn brute_force(dag: &Dag, x: usize, y: usize, candidates: &[usize]) -> Vec<Vec<usize>> {
        let m = candidates.len();
        let mut subsets: Vec<Vec<usize>> = (0u32..1 << m)
            .map(|bits| (0..m).filter(|k| bits >> k & 1 == 1).map(|k| candidates[k]).collect())
            .collect();
        subsets.sort_by_key(Vec::len);
        let mut found: Vec<Vec<usize>> = Vec::new();
        for s in subsets {
            if found.iter().any(|f| f.iter().all(|i| s.contains(i))) {
                continue;
            }
            if dag.d_separated(&[x], &[y], &dag.mask_of(&s)) {
                found.push(s);
            }
        }
        found
    }

    /// A random DAG on `n` nodes: each forward pair (i < j) an edge with probability `p`.
    fn random_dag(rng: &mut StdRng, n: usize, p: f64) -> Dag {
        let mut edges = Vec::new();
        for i in 0..n {
            for j in i + 1..n {
                if rng.random::<f64>() < p {
                    edges.push((i, j));
                }
            }
        }
        Dag::new(n, &edges)
    }

    fn sorted(mut sets: Vec<Vec<usize>>) -> Vec<Vec<usize>> {
        for s in &mut sets {
            s.sort_unstable();
        }
        sets.sort();
        sets
    }

    #[test]
    fn the_walk_finds_exactly_the_minimal_sets_of_the_brute_force() {
        // Oracle: exhaustive subset search with d-separation by reachability
        // (Koller & Friedman 2009, Algorithm 3.1), on 400 seeded random graphs
        // with random forbidden (not allowed) nodes, both backdoor-style (edges
        // out of x removed) and plain.
        let mut rng = StdRng::seed_from_u64(2019);
        let never = AtomicBool::new(false);
        let mut checked = 0;
        for round in 0..400 {
            let n = 4 + round % 8;
            let density = 0.25 + 0.3 * rng.random::<f64>();
            let full = random_dag(&mut rng, n, density);
            let (x, y) = (rng.random_range(0..n - 1), n - 1);
            let dag = if round % 2 == 0 { full.keep_edges(|a, _| a != x) } else { full.keep_edges(|a, b| (a, b) != (x, y)) };
            let ancestral = dag.ancestors_of(&[x, y]);
            let candidates: Vec<usize> =
                (0..n).filter(|&i| i != x && i != y && ancestral[i] && rng.random::<f64>() < 0.8).collect();
            if !dag.d_separated(&[x], &[y], &dag.mask_of(&candidates)) {
                continue;
            }
            let order: Vec<usize> = (0..n).collect();
            let Ok(search) = minimal_adjustment_sets(&dag, x, y, &candidates, &order, &never) else { panic!("cancelled") };
            assert!(search.complete);
            assert_eq!(sorted(search.sets), sorted(brute_force(&dag, x, y, &candidates)), "round {round}");
            checked += 1;
        }
        assert!(checked > 150, "only {checked} graphs had a separating candidate set");
    }

    #[test]
    fn a_set_cancel_flag_stops_the_walk() {
        // One confounder with its own cause: the first set {1} has a member to move, so the walk takes a step.
        let dag = Dag::new(4, &[(1, 0), (1, 3), (2, 1), (2, 3)]);
        let cancel = AtomicBool::new(true);
        assert!(minimal_adjustment_sets(&dag, 0, 3, &[1, 2], &[0, 1, 2, 3], &cancel).is_err());
    }

    /// `k` backdoor paths x <- u_i -> v_i -> y, each blocked by u_i or v_i:
    /// 2^k minimal sets (one choice per path).
    fn choices(k: usize) -> (Dag, Vec<usize>) {
        let (x, y) = (0, 1);
        let mut edges = vec![(x, y)];
        for i in 0..k {
            let (u, v) = (2 + 2 * i, 3 + 2 * i);
            edges.extend([(u, x), (u, v), (v, y)]);
        }
        let dag = Dag::new(2 + 2 * k, &edges).keep_edges(|a, _| a != x);
        (dag, (2..2 + 2 * k).collect())
    }

    #[test]
    fn the_limit_is_reported_only_when_more_sets_exist() {
        // 2^6 = 64 sets: exactly the limit, so the list is complete; 2^7 = 128 is not.
        let never = AtomicBool::new(false);
        let (dag, candidates) = choices(6);
        let order: Vec<usize> = (0..dag.len()).collect();
        let Ok(search) = minimal_adjustment_sets(&dag, 0, 1, &candidates, &order, &never) else { panic!("cancelled") };
        assert_eq!((search.sets.len(), search.complete), (64, true));
        let (dag, candidates) = choices(7);
        let order: Vec<usize> = (0..dag.len()).collect();
        let Ok(search) = minimal_adjustment_sets(&dag, 0, 1, &candidates, &order, &never) else { panic!("cancelled") };
        assert_eq!((search.sets.len(), search.complete), (64, false));
    }
}
