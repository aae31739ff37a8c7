//! Causal queries answered from posterior draws: what the scientist came for.
//!
//! Everything here takes fitted models (or a graph and a table) and returns
//! plain result structs that serialise to JSON; the `cells` layer renders
//! them. Every uncertain number is computed draw by draw and summarised last
//! (paired draws, never "means first"), and every random step takes a seed.
//!
//! * [`contrast`]: contrasts between two settings of a predictor on the
//!   posterior mean or on simulated outcomes, at stated values of the other
//!   predictors or averaged over the table's rows, optionally along a grid.
//! * [`answer`]: one call from a graph, a table and an effect to a fitted
//!   adjustment model and its contrasts, with the reason for the set, or,
//!   where no set exists but a formula identifies the effect,
//!   [`formula_estimate`]: the formula evaluated per posterior draw from
//!   fitted conditionals, or, for shapes that simulation over the rows
//!   cannot take, [`formula_chain`]: evaluated exactly on a fitted chain
//!   of normal regressions, or [`formula_levels`]: evaluated exactly over
//!   the levels of count, yes/no and category nodes (a real node among
//!   them summed over weighted draws of its values).
//! * [`joint`]: one regression per observed node of a graph (a whole-graph
//!   model), and [`intervene`]: simulated interventions through it.
//! * [`mechanism`] and [`simulate`]: synthetic data from stated mechanisms,
//!   with the true effect of an intervention; [`recover`]: posterior
//!   intervals beside the true values.
//! * [`calibrate`]: simulation-based calibration over the prior and prior /
//!   posterior predictive outcome sets.
//! * [`implications`]: the graph's testable implications checked against data.
//! * [`left_out`]: fitted models of one outcome scored by their predictions
//!   of left-out rows (Pareto-smoothed importance sampling, exact refits
//!   of the rows it cannot handle).
//! * [`robustness`] and [`e_value`]: how a fitted contrast moves under an
//!   assumed hidden common cause (a normal outcome's slope; a yes/no
//!   outcome's risk ratio with its E-value), and [`hidden_refit`]: the
//!   model refitted beside a simulated hidden node whose strengths have
//!   stated priors.
//! * [`routes`], [`set_routes`] and [`direct_route`]: the further routes of
//!   `compare routes` — the front door, the graph's other adjustment sets,
//!   and a joint model's controlled direct effect.
//!
//! * [`steps`]: the whole effect, the shares and the effect per level of
//!   an ordered category's `steps(c)` term, from the steps' draws.
//!
//! The query layer never reads files and never renders.

pub mod answer;
pub mod calibrate;
pub mod contrast;
pub mod e_value;
mod error;
mod direct_formula;
pub mod formula_chain;
pub mod formula_estimate;
pub mod formula_levels;
pub mod hidden_refit;
pub mod implications;
pub mod intervene;
mod intervene_formula;
pub mod joint;
pub mod left_out;
pub mod mechanism;
pub mod recover;
pub mod routes;
pub mod set_routes;
pub mod direct_route;
pub mod robustness;
pub mod shrinkage;
pub mod simulate;
pub mod steps;
mod support;
pub mod time_curves;

pub use answer::{answer_effect, answer_effect_with_progress, AskOptions, EffectAnswer};
pub use calibrate::{calibrate, calibrate_with_progress, posterior_predictive, prior_predictive, CalibratedParameter, Calibration, PredictiveSets};
pub use contrast::{contrast, level_contrasts, Contrast, ContrastRequest, GridPoint, GridRequest, HeldValue, On};
pub use e_value::{bounding_factor, e_value, risk_ratio_robustness, RatioYardstick, RiskRatioRobustness, RATE_RATIO, RISK_RATIO, RISK_RATIO_STEPS};
pub use error::QueryError;
pub use direct_formula::DIRECT_FORMULA_ROUTE;
pub use formula_estimate::{formula_estimate, FittedConditional, FormulaFit, FORMULA_SEED};
pub use hidden_refit::{hidden_refit, HiddenRefit, RefitDiagnostics, StrengthSummary};
pub use implications::{check_implications, ImplicationCheck, ImplicationsReport};
pub use intervene::{compare_routes, intervene, intervene_with_cancel, GroupQuestion, InterventionRequest, InterventionResult, RouteComparison, WatchedContrast, FORMULA_ROUTE, JOINT_ROUTE};
pub use intervene_formula::FormulaUsed;
pub use joint::{build_joint, fit_joint, fit_joint_with_progress, JointFit, JointModel, JointNode, NodeModel};
pub use left_out::{score_predictions, HardRow, ModelScore, PredictiveScores};
pub use mechanism::{parse_mechanism_line, Expr, Mechanism};
pub use robustness::{robustness, Robustness, Yardstick, ROBUSTNESS_STEPS};
pub use routes::{front_door_route, FrontDoorRoute};
pub use set_routes::{other_set_routes, SetRoute, MOST_OTHER_SETS};
pub use direct_route::{controlled_direct_route, DirectRoute};
pub use recover::{recover, recover_fitted, Recovery, RecoveryParameter};
pub use shrinkage::{level_shrinkages, shrinkage, LevelShrinkage, Shrinkage};
pub use simulate::{Simulation, SimulationSettings};
pub use support::ContrastSummary;
pub use time_curves::{Band, SettingCurves, TimeCurves};
