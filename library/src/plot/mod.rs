//! Every figure of Waypath as an SVG string, ready to show inline in a
//! notebook cell.
//!
//! The module takes plain data — slices, labels and the small picture
//! structs defined here — and never the types of `graph`, `model`, `draws`
//! or `query`, so it can be drawn, tested and changed on its own; the `cells`
//! module adapts the session's values to these inputs.
//!
//! Each figure function returns `Result<String, PlotError>`. Every SVG opens
//! with a `<title>` of the form `<figure kind>: <subject>` and a `<desc>`
//! sentence, draws on a white background with the Okabe–Ito palette
//! ([`palette`]), writes text at 12 px or more, and keeps its size small by
//! thinning draws, merging lines into single paths and rounding coordinates
//! to one decimal.
//!
//! ```
//! use waypath::plot::{contrast_figure, Quantity};
//! let draws: Vec<f64> = (0..400).map(|i| (i as f64 - 150.0) / 100.0).collect();
//! let svg = contrast_figure("rootstock standard vs dwarf",
//!     &Quantity::with_unit("yield difference", "kg"), &draws).unwrap();
//! assert!(svg.contains("<title>contrast: rootstock standard vs dwarf</title>"));
//! ```

mod canvas;
mod checks;
pub mod density;
mod graph;
pub mod palette;
mod posterior;
mod recovery;
mod robustness;
mod shrinkage;
mod steps;
mod survival;
mod trends;

pub use checks::{
    chain_dashes, implications_figure, level_count_figure, mixing_figure, predictive_figure, predictive_figure_with_cut, quantile_bands,
    rank_bins, rank_departures, ImplicationRow, LevelCount, PredictiveKind,
};
pub use graph::{
    graph_figure, layout, EdgeMark, EdgeRoute, GraphLayout, GraphPicture, NodeBox, NodeMark, Role,
};
pub use posterior::{contrast_figure, posterior_figure, DensityArrangement, ParameterDraws};
pub use robustness::{robustness_figure, RobustnessPicture, StrengthScale};
pub use shrinkage::{shrinkage_figure, ShrinkageRow};
pub use steps::{steps_figure, StepLevel};
pub use survival::{survival_figure, CurveBand, SurvivalMark, SurvivalPicture, SurvivalSetting};
pub use recovery::{calibration_figure, recovery_figure, RecoveryRow};
pub use trends::{
    contrast_grid_figure, lines_figure, spline_figure, BasisPicture, GridContrast, LineGroup,
};

/// A quantity shown on an axis: its name in words and, when known, its unit.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Quantity {
    /// Name in words, e.g. `"trunk girth"`.
    pub name: String,
    /// Unit, e.g. `"cm"`; `None` for unitless quantities.
    pub unit: Option<String>,
}

impl Quantity {
    /// A quantity without a unit.
    pub fn new(name: impl Into<String>) -> Quantity {
        Quantity {
            name: name.into(),
            unit: None,
        }
    }

    /// A quantity with a unit.
    pub fn with_unit(name: impl Into<String>, unit: impl Into<String>) -> Quantity {
        Quantity {
            name: name.into(),
            unit: Some(unit.into()),
        }
    }

    /// The axis title: `"trunk girth (cm)"`, or the bare name without a unit.
    pub fn label(&self) -> String {
        match &self.unit {
            Some(u) if !u.is_empty() => format!("{} ({u})", self.name),
            _ => self.name.clone(),
        }
    }
}

/// Why a figure could not be drawn; each message names the figure and the
/// offending input and says what to change.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum PlotError {
    /// An input the figure needs has no usable values.
    #[error("{figure} figure: {what} holds nothing to draw (empty or not finite); supply at least one finite entry")]
    Empty { figure: &'static str, what: String },
    /// Two inputs that must line up have different lengths.
    #[error("{figure} figure: {what} has {found} values but {expected} were expected; give one value per {per}")]
    Length {
        figure: &'static str,
        what: String,
        found: usize,
        expected: usize,
        per: &'static str,
    },
    /// A value outside the range the figure can show.
    #[error("{figure} figure: {what}; {fix}")]
    OutOfRange {
        figure: &'static str,
        what: String,
        fix: String,
    },
    /// An arrow names a node the picture does not have.
    #[error("graph {graph}: arrow {arrow} refers to node number {node}, but there are only {count} nodes; fix the arrow's ends")]
    MissingNode {
        graph: String,
        arrow: usize,
        node: usize,
        count: usize,
    },
    /// An arrow from a node to itself.
    #[error("graph {graph}: arrow {arrow} runs from {node} to itself; remove it, a causal graph has no self-loops")]
    SelfLoop {
        graph: String,
        arrow: usize,
        node: String,
    },
    /// The arrows form a cycle, so no top-to-bottom drawing exists.
    #[error("graph {graph}: node {node} lies on a cycle of arrows; remove one arrow of the cycle so the graph is acyclic")]
    Cycle { graph: String, node: String },
}
