//! The front-door criterion: identifying a total effect through a measured
//! mechanism when a hidden common cause blocks every adjustment set.
//!
//! Pearl (2009), *Causality*, Definition 3.3.3 and Theorem 3.3.4
//! (recalled): a set M of observed nodes satisfies the front-door criterion
//! relative to (X, Y) when
//! 1. M intercepts every directed path from X to Y;
//! 2. no backdoor path from X to M is open (X and M are d-separated once
//!    the edges out of X are removed);
//! 3. X blocks every backdoor path from M to Y (M and Y are d-separated
//!    given X once the edges out of M are removed).
//!
//! The effect is then
//! `sum over m of ( Pr[m | x] · sum over x′ of ( Pr[y | x′, m] · Pr[x′] ) )`.
//! The search tries the smallest sets first among the observed nodes that
//! lie on directed paths from X to Y (a smallest valid set needs no other:
//! a member off those paths changes none of the three conditions'
//! directed-path part and only adds paths to block).

use std::sync::atomic::{AtomicBool, Ordering};

use super::formula::Formula;
use super::{Graph, GraphError};

/// The most candidate sets the front-door search tests.
pub const FRONT_DOOR_TRIES: usize = 20_000;

/// The most node-and-edge visits the whole search may make (each try walks
/// the graph a few times), so a large graph tries fewer sets.
const FRONT_DOOR_WORK: usize = 200_000_000;

impl Graph {
    /// The smallest set of observed nodes satisfying the front-door
    /// criterion for the effect of `exposure` on `outcome`, with its formula,
    /// or `None` when no set among the observed mediators does (or the
    /// search reached [`FRONT_DOOR_TRIES`], fewer on a large graph).
    pub fn front_door(&self, exposure: &str, outcome: &str) -> Result<Option<(Vec<String>, Formula)>, GraphError> {
        self.front_door_with_cancel(exposure, outcome, &AtomicBool::new(false))
    }

    /// [`Graph::front_door`], stopping with [`GraphError::Interrupted`]
    /// soon after `cancel` is set.
    pub fn front_door_with_cancel(&self, exposure: &str, outcome: &str, cancel: &AtomicBool) -> Result<Option<(Vec<String>, Formula)>, GraphError> {
        let (x, y) = self.pair(exposure, outcome)?;
        if self.nodes[x].hidden || self.nodes[y].hidden {
            return Ok(None);
        }
        let from_x = self.dag.descendants_of(&[x]);
        let to_y = self.dag.ancestors_of(&[y]);
        let candidates: Vec<usize> =
            self.order.iter().copied().filter(|&i| i != x && i != y && from_x[i] && to_y[i] && !self.nodes[i].hidden).collect();
        let size = self.nodes.len() + self.edges.len() + 1;
        let limit = FRONT_DOOR_TRIES.min(FRONT_DOOR_WORK / size).max(1);
        let cut_x = self.dag.keep_edges(|a, _| a != x);
        let mut tries = 0;
        for size in 1..=candidates.len() {
            let mut chosen: Vec<usize> = (0..size).collect();
            loop {
                tries += 1;
                if tries > limit {
                    return Ok(None);
                }
                if cancel.load(Ordering::Relaxed) {
                    return Err(GraphError::Interrupted { graph: self.name.clone() });
                }
                let m: Vec<usize> = chosen.iter().map(|&k| candidates[k]).collect();
                if self.is_front_door(&cut_x, x, y, &m) {
                    let names = self.owned_names(&self.dag.mask_of(&m));
                    return Ok(Some((names.clone(), front_door_formula(self.label(x), self.label(y), &names))));
                }
                if !next_combination(&mut chosen, candidates.len()) {
                    break;
                }
            }
        }
        Ok(None)
    }

    /// The three conditions of the front-door criterion for the set `m`.
    fn is_front_door(&self, cut_x: &super::dag::Dag, x: usize, y: usize, m: &[usize]) -> bool {
        let in_m = self.dag.mask_of(m);
        let intercepts = !self.dag.keep_edges(|_, b| !in_m[b]).descendants_of(&[x])[y];
        let none = vec![false; self.nodes.len()];
        intercepts
            && cut_x.d_separated(&[x], m, &none)
            && self.dag.keep_edges(|a, _| !in_m[a]).d_separated(m, &[y], &self.dag.mask_of(&[x]))
    }
}

/// Pearl 2009, eq. (3.42) for a set of mediators.
fn front_door_formula(x: &str, y: &str, m: &[String]) -> Formula {
    let x = x.to_owned();
    let mut given = vec![x.clone()];
    given.extend(m.iter().cloned());
    let inner = Formula::sum(
        vec![x.clone()],
        Formula::product(vec![Formula::probability(vec![y.to_owned()], given), Formula::probability(vec![x.clone()], Vec::new())]),
    );
    Formula::sum(m.to_vec(), Formula::product(vec![Formula::probability(m.to_vec(), vec![x]), inner]))
}

/// Step `chosen` (increasing indices below `n`) to the next combination of
/// its size; false after the last.
fn next_combination(chosen: &mut [usize], n: usize) -> bool {
    let k = chosen.len();
    for pos in (0..k).rev() {
        if chosen[pos] < n - k + pos {
            chosen[pos] += 1;
            for later in pos + 1..k {
                chosen[later] = chosen[later - 1] + 1;
            }
            return true;
        }
    }
    false
}
