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
//! W is one minimal separator of Z and Y among the allowed nodes; a node
//! that qualifies only with some other W is not listed, so the list names
//! instruments found, not necessarily every one.

use serde::Serialize;

use super::Graph;

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
    /// Observed nodes that are instruments for the total effect of `x` on
    /// `y` (indices already resolved), each with a conditioning set.
    pub(crate) fn instruments(&self, x: usize, y: usize) -> Vec<Instrument> {
        let cut = self.dag.keep_edges(|a, _| a != x);
        let below_x = self.dag.descendants_of(&[x]);
        let mut out = Vec::new();
        for &z in &self.order {
            if z == x || z == y || self.nodes[z].hidden || below_x[z] {
                continue;
            }
            let allowed: Vec<bool> =
                (0..self.nodes.len()).map(|i| !self.nodes[i].hidden && !below_x[i] && i != z && i != x && i != y).collect();
            let Some(w) = cut.minimal_separator(z, y, &allowed) else {
                continue;
            };
            if self.dag.d_separated(&[z], &[x], &self.dag.mask_of(&w)) {
                continue;
            }
            out.push(Instrument { node: self.label(z).to_owned(), given: self.owned_names(&self.dag.mask_of(&w)) });
        }
        out
    }
}
