//! Posterior draws, stored by parameter label.
//!
//! Every query works on draws; summaries (means, intervals) are computed from
//! draws last and never fed back into a calculation. Derived quantities —
//! a contrast between two category means, a prediction at a new point — are
//! made draw by draw with [`Draws::derive`], so their uncertainty carries the
//! full joint posterior (paired differences, not differences of summaries).
//!
//! * [`summary`] — mean, sd, quantile interval, HDI and the share of draws above zero per parameter;
//! * [`export`] — the draws as CSV, one row per draw;
//! * [`pareto`] — the generalised Pareto distribution and its fit to a tail of draws;
//! * [`importance`] — Pareto-smoothed importance sampling of a row's left-out predictive density.

pub mod export;
pub mod importance;
pub mod pareto;
pub mod summary;

pub use summary::{hdi, quantile_interval, Interval, Summary, SummarySpec};

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

/// What went wrong building, deriving from, summarising or writing draws.
#[derive(Debug, thiserror::Error)]
pub enum DrawsError {
    #[error("chain {chain}, draw {draw} has {got} values but {expected} parameter names were given; give one name per parameter")]
    RowLength { chain: usize, draw: usize, expected: usize, got: usize },
    #[error("chain {chain} has {got} draws but chain 1 has {expected}; give every chain the same number of draws")]
    ChainLength { chain: usize, expected: usize, got: usize },
    #[error("parameter name `{0}` appears twice; give every parameter its own name")]
    DuplicateName(String),
    #[error("no parameter named `{name}`; the draws hold: {known}")]
    UnknownParameter { name: String, known: String },
    #[error("interval mass {0} must lie strictly between 0 and 1 (for example 0.9)")]
    BadMass(f64),
    #[error("there are no draws to summarise; run the sampler with at least one draw")]
    NoDraws,
    #[error("writing the draws failed: {0}")]
    Write(String),
}

impl Draws {
    /// Build draws from a sampler's `[chain][draw][parameter]` output, with
    /// one name per parameter. Every chain must hold the same number of draws.
    pub fn from_chains(names: Vec<String>, chains: Vec<Vec<Vec<f64>>>) -> Result<Draws, DrawsError> {
        for (i, name) in names.iter().enumerate() {
            if names[..i].contains(name) {
                return Err(DrawsError::DuplicateName(name.clone()));
            }
        }
        let per_chain = chains.first().map_or(0, Vec::len);
        let mut values = vec![Vec::with_capacity(chains.len() * per_chain); names.len()];
        for (c, chain) in chains.iter().enumerate() {
            if chain.len() != per_chain {
                return Err(DrawsError::ChainLength { chain: c + 1, expected: per_chain, got: chain.len() });
            }
            for (d, row) in chain.iter().enumerate() {
                if row.len() != names.len() {
                    return Err(DrawsError::RowLength {
                        chain: c + 1,
                        draw: d + 1,
                        expected: names.len(),
                        got: row.len(),
                    });
                }
                for (column, &v) in values.iter_mut().zip(row) {
                    column.push(v);
                }
            }
        }
        Ok(Draws { names, chains: chains.len(), per_chain, values })
    }

    /// Draws of the parameter labelled `name`, all chains concatenated.
    pub fn get(&self, name: &str) -> Option<&[f64]> {
        let p = self.names.iter().position(|n| n == name)?;
        Some(&self.values[p])
    }

    /// Like [`Draws::get`], with an error that lists the known names.
    pub fn require(&self, name: &str) -> Result<&[f64], DrawsError> {
        self.get(name).ok_or_else(|| DrawsError::UnknownParameter {
            name: name.to_string(),
            known: self.names.join(", "),
        })
    }

    /// Draws of `name`, one slice per chain (the shape the diagnostics take).
    pub fn by_chain(&self, name: &str) -> Result<Vec<&[f64]>, DrawsError> {
        let all = self.require(name)?;
        Ok((0..self.chains).map(|c| &all[c * self.per_chain..(c + 1) * self.per_chain]).collect())
    }

    /// Total number of draws per parameter.
    pub fn len(&self) -> usize {
        self.chains * self.per_chain
    }

    /// True when there are no draws.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// A derived quantity, computed draw by draw from the named inputs.
    ///
    /// `f` receives the inputs' values at one draw, in the order of `inputs`.
    /// Because each draw keeps its pairing across parameters, a contrast is
    /// simply
    ///
    /// ```
    /// # use waypath::draws::Draws;
    /// let d = Draws::from_chains(
    ///     vec!["standard".into(), "dwarf".into()],
    ///     vec![vec![vec![5.0, 3.0], vec![6.0, 3.5]]],
    /// ).unwrap();
    /// let contrast = d.derive(&["standard", "dwarf"], |v| v[0] - v[1]).unwrap();
    /// assert_eq!(contrast, vec![2.0, 2.5]);
    /// ```
    pub fn derive(&self, inputs: &[&str], f: impl Fn(&[f64]) -> f64) -> Result<Vec<f64>, DrawsError> {
        let columns = inputs.iter().map(|n| self.require(n)).collect::<Result<Vec<_>, _>>()?;
        let mut at_draw = vec![0.0; columns.len()];
        Ok((0..self.len())
            .map(|i| {
                for (slot, column) in at_draw.iter_mut().zip(&columns) {
                    *slot = column[i];
                }
                f(&at_draw)
            })
            .collect())
    }

    /// [`Draws::derive`], kept alongside the other parameters as `name`.
    pub fn add_derived(
        &mut self,
        name: &str,
        inputs: &[&str],
        f: impl Fn(&[f64]) -> f64,
    ) -> Result<(), DrawsError> {
        if self.names.iter().any(|n| n == name) {
            return Err(DrawsError::DuplicateName(name.to_string()));
        }
        let column = self.derive(inputs, f)?;
        self.names.push(name.to_string());
        self.values.push(column);
        Ok(())
    }
}
