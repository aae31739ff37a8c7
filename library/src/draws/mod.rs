//! Posterior draws, stored by parameter label.
//!
//! Every query works on draws; summaries (means, intervals) are computed from
//! draws last and never fed back into a calculation.

/// Draws of named parameters from one or more chains.
///
/// `values[p]` holds every draw of parameter `p`, chain after chain:
/// draw `i` of chain `c` is at `c * per_chain + i`.
#[derive(Debug, Clone, PartialEq)]
pub struct Draws {
    pub names: Vec<String>,
    pub chains: usize,
    pub per_chain: usize,
    pub values: Vec<Vec<f64>>,
}

impl Draws {
    /// Draws of the parameter labelled `name`, all chains concatenated.
    pub fn get(&self, name: &str) -> Option<&[f64]> {
        let p = self.names.iter().position(|n| n == name)?;
        Some(&self.values[p])
    }

    /// Total number of draws per parameter.
    pub fn len(&self) -> usize {
        self.chains * self.per_chain
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}
