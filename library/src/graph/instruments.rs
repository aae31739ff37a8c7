//! Instruments: observed nodes that move the exposure but reach the outcome
//! only through it.
//!
//! A node Z is an instrument for the total effect of X on Y given a set W
//! of observed nodes (Pearl 2009, *Causality*, §7.4.5; the conditional
//! instrument of Brito & Pearl 2002, recalled; stated for total effects as
//! by van der Zander, Textor & Liśkiewicz 2015) when
//! 1. W holds no descendant of X (nor Z, X, Y themselves);
//! 2. Z and Y are d-separated given W once the edges out of X are removed
//!    (every path from Z to Y that W leaves open goes through X's effects);
//! 3. Z and X are d-connected given W (the instrument moves the exposure).
//!
//! The graph alone never identifies the effect from an instrument; an
//! estimate also needs an assumption about the mechanism: effects linear
//! and the same for everyone (then the effect is the ratio of the two
//! slopes on Z), or, for a yes/no exposure, monotonicity (Z never moves
//! anyone's exposure against its direction; then the ratio is the effect
//! among those whose exposure Z moves; Imbens & Angrist 1994, recalled).
//!
//! For each candidate Z the search first tries the two minimal separators
//! of Z and Y in the graph without X's outgoing edges — the one nearest to
//! Y and the one nearest to Z (van der Zander, Liśkiewicz & Textor 2015,
//! "Efficiently finding conditional instruments for causal inference",
//! IJCAI, search ancestral sets nearest to Y; recalled) — and, when neither
//! leaves Z connected to X, every set of allowed nodes, smallest first. The
//! ancestral sets alone miss instruments: a set may need a node that is no
//! one's ancestor, a collider that opens Z's only path to X (Z ← U₁ → C ←
//! U₂ → X with C observed: Z moves X only given C). When no allowed set
//! separates Z and Y, none is tried, since then the allowed ancestors do
//! not either (Tian, Paz & Pearl 1998, recalled). The subset search stops
//! after [`INSTRUMENT_TRIES`] sets per graph (fewer on a large graph), and
//! the answer then says the list may be short.
//! `tests/python/test_instruments_reference.py` checks the list against
//! networkx d-separation over every conditioning set on random small graphs.

use serde::Serialize;

use super::{Graph, GraphError};

/// The most conditioning sets the subset search tries for one effect.
pub const INSTRUMENT_TRIES: usize = 200_000;

/// The most node-and-edge visits the subset search may make.
const INSTRUMENT_WORK: usize = 40_000_000;

/// The instruments found, and whether every candidate was settled.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct InstrumentSearch {
    pub(crate) found: Vec<Instrument>,
    /// False when the subset search stopped at its limit.
    pub(crate) complete: bool,
}

/// A node that qualifies as an instrument, and what to condition on.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Instrument {
    /// The instrument.
    pub node: String,
    /// The observed nodes to condition on (empty: none).
    pub given: Vec<String>,
}

/// The assumption an instrument-based estimate rests on beyond the graph.
pub const INSTRUMENT_ASSUMPTION: &str = "an instrument identifies the effect only with an assumption the graph does not state: \
linear effects the same for every unit (the effect is then the ratio of the instrument's slopes on outcome and exposure), \
or, for a yes/no exposure, monotonicity (the instrument never pushes anyone's exposure the other way; the ratio is then \
the effect among units whose exposure the instrument moves)";

impl Graph {
    /// Every observed node that is an instrument for the total effect of
    /// `exposure` on `outcome` given some set of observed nodes, each with
    /// one such set.
    pub fn instruments_for(&self, exposure: &str, outcome: &str) -> Result<Vec<Instrument>, GraphError> {
        let (x, y) = self.pair(exposure, outcome)?;
        Ok(self.instruments(x, y).found)
    }

    /// Observed nodes that are instruments for the total effect of `x` on
    /// `y` (indices already resolved), each with a conditioning set.
    pub(crate) fn instruments(&self, x: usize, y: usize) -> InstrumentSearch {
        let cut = self.dag.keep_edges(|a, _| a != x);
        let below_x = self.dag.descendants_of(&[x]);
        let limit = INSTRUMENT_TRIES.min(INSTRUMENT_WORK / (self.nodes.len() + self.edges.len() + 1)).max(1);
        let mut search = Subsets { cut: &cut, tries: 0, limit, complete: true };
        let mut found = Vec::new();
        for &z in &self.order {
            if z == x || z == y || self.nodes[z].hidden || below_x[z] {
                continue;
            }
            let allowed: Vec<bool> =
                (0..self.nodes.len()).map(|i| !self.nodes[i].hidden && !below_x[i] && i != z && i != x && i != y).collect();
            if let Some(w) = self.instrument_set(&mut search, x, y, z, &allowed) {
                found.push(Instrument { node: self.label(z).to_owned(), given: self.owned_names(&self.dag.mask_of(&w)) });
            }
        }
        InstrumentSearch { found, complete: search.complete }
    }

    /// A set given which `z` is an instrument, if the search finds one.
    fn instrument_set(&self, search: &mut Subsets, x: usize, y: usize, z: usize, allowed: &[bool]) -> Option<Vec<usize>> {
        let works = |w: &[bool]| search.cut.d_separated(&[z], &[y], w) && !self.dag.d_separated(&[z], &[x], w);
        let nearest_y = search.cut.minimal_separator(y, z, allowed)?;
        let nearest_z = search.cut.minimal_separator(z, y, allowed)?;
        for w in [nearest_y, nearest_z] {
            if works(&self.dag.mask_of(&w)) {
                return Some(w);
            }
        }
        let members: Vec<usize> = (0..allowed.len()).filter(|&i| allowed[i]).collect();
        for size in 0..=members.len() {
            let mut pick: Vec<usize> = (0..size).collect();
            loop {
                if search.tries >= search.limit {
                    search.complete = false;
                    return None;
                }
                search.tries += 1;
                let w: Vec<usize> = pick.iter().map(|&k| members[k]).collect();
                if works(&self.dag.mask_of(&w)) {
                    return Some(w);
                }
                if !next_combination(&mut pick, members.len()) {
                    break;
                }
            }
        }
        None
    }
}

/// The state of the subset search over one effect's candidates.
struct Subsets<'g> {
    cut: &'g super::dag::Dag,
    tries: usize,
    limit: usize,
    complete: bool,
}

/// Advance `pick` (increasing indices below `n`) to the next combination of
/// its size in lexicographic order; false after the last.
fn next_combination(pick: &mut [usize], n: usize) -> bool {
    let k = pick.len();
    for i in (0..k).rev() {
        if pick[i] < n - k + i {
            pick[i] += 1;
            for j in i + 1..k {
                pick[j] = pick[j - 1] + 1;
            }
            return true;
        }
    }
    false
}

#[cfg(test)]
mod tests {
    use super::next_combination;

    #[test]
    fn combinations_of_two_from_four_in_order() {
        // C(4, 2) = 6 combinations, lexicographic.
        let mut pick = vec![0, 1];
        let mut all = vec![pick.clone()];
        while next_combination(&mut pick, 4) {
            all.push(pick.clone());
        }
        assert_eq!(all, vec![vec![0, 1], vec![0, 2], vec![0, 3], vec![1, 2], vec![1, 3], vec![2, 3]]);
        let mut none: Vec<usize> = Vec::new();
        assert!(!next_combination(&mut none, 3));
    }
}
