//! Model specification → log posterior density.
//!
//! A model names an outcome, a family and link, a list of terms and priors
//! ([`spec`]). Built against a [`crate::table::Table`] ([`Model::build`]), it
//! becomes a [`LogDensity`]: a function of the unconstrained parameter
//! vector with an analytic gradient, which is all the samplers in
//! [`crate::infer`] need. The built [`Model`] also keeps the term recipes,
//! so [`Model::new_rows`] can lay out new data with the same centring,
//! coding and knots for predictions.
//!
//! # Parameter labels
//!
//! | term | labels | meaning |
//! |---|---|---|
//! | (no category term) | `intercept` | mean outcome (link scale) at the centres |
//! | first category `rootstock` | `rootstock[dwarf]`, `rootstock[standard]` | one intercept per level |
//! | later category `soil` | `soil[sandy vs loam]` | offset of a level from the first level |
//! | real `girth` | `girth slope` | slope per unit of girth |
//! | `girth per rootstock` | `girth slope[dwarf]`, … | slope within each level |
//! | `powers(girth, 2)` | `girth power 1`, `girth power 2` | coefficients of powers of standardised girth |
//! | `spline(age, 8)` | `age spline 2` … `age spline 8` | weights of basis functions 2–8 |
//! | normal family | `spread` | residual sd (sampled as `log(spread)`) |
//! | graded family, outcome `blight` | `blight cut[marked]`, … | the cut below each level after the second on the latent scale (the cut below the second is 0) |
//! | levels family, outcome `form` | `form[shrub vs herb]: girth slope`, … | each label above, once per level after the first (`herb`, the reference): that level's coefficient on the log odds against the reference |
//!
//! Labels read as words, the column first, then the role (`slope`, `power`,
//! `spline`), then a level in square brackets or a number; square brackets
//! always hold a category level. A column enters at most one term and
//! column names hold no spaces, so these labels never collide.
//! [`terms::design::slope_label`] writes a slope's label for code that looks
//! one up.
//!
//! # The levels family
//! A category outcome with K levels (`family levels`, or no family line)
//! has K − 1 linear predictors with the same terms, the first level's
//! predictor fixed at 0, and a softmax link ([`family::softmax`]). The
//! design matrix is shared; the coefficients run level by level. Priors
//! come from the same groups, once per level. Such a model predicts level
//! probabilities ([`Model::level_probabilities`]) and draws levels
//! ([`Model::outcome_draw`] returns level indices), not means.
//!
//! # Choices (also reported by [`Model::notes`])
//! * Real predictors are centred at their mean unless `centre off`.
//! * `powers(x, d)` uses raw powers of `z = (x − mean) / sd`, not orthogonal
//!   polynomials (hence its name): the coefficients keep a plain meaning on
//!   the z scale.
//! * `spline(x, k)` is a clamped cubic B-spline basis with `k` functions;
//!   the first is dropped because the intercepts already span their sum.

mod build;
mod columns;
mod conjugate;
mod defaults;
mod density;
#[cfg(feature = "on_disk")]
mod disk_sums;
pub mod guards;
mod hidden_cause;
mod hidden_yes_no;
pub mod error;
pub mod family;
mod inputs;
#[cfg(feature = "on_disk")]
pub mod on_disk;
#[cfg(feature = "across_machines")]
pub mod plan_codec;
mod outcome;
mod pointwise;
mod posterior;
mod predict;
mod times;
pub mod prior;
pub mod spec;
pub mod spline;
pub mod steps;
pub mod terms;

pub use conjugate::NormalLinear;
pub use defaults::PriorUse;
pub(crate) use defaults::check_suits as check_prior_suits;
pub use density::LogDensity;
pub use error::ModelError;
pub use family::Family;
pub use hidden_cause::{ExposurePriors, HiddenCause, HiddenLayout};
pub use inputs::{Input, SplineTerm};
pub use posterior::Model;
pub use predict::{NewRows, Prediction};
pub use prior::{Prior, PriorGroup};
pub use spec::{parse_model_line, Formula, ModelLine, ModelSpec, TermSpec};
pub use spline::BSplineBasis;
