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
//! | real `girth` | `b_girth` | slope per unit of girth |
//! | `girth per rootstock` | `b_girth[dwarf]`, … | slope within each level |
//! | `poly(girth, 2)` | `b_girth^1`, `b_girth^2` | coefficients of powers of standardised girth |
//! | `spline(age, 8)` | `w_age[2]` … `w_age[8]` | weights of basis functions 2–8 |
//! | normal family | `spread` | residual sd (sampled as `log(spread)`) |
//!
//! A column enters at most one term, so these labels never collide.
//!
//! # Choices (also reported by [`Model::notes`])
//! * Real predictors are centred at their mean unless `centre off`.
//! * `poly(x, d)` uses raw powers of `z = (x − mean) / sd`, not orthogonal
//!   polynomials: the coefficients keep a plain meaning on the z scale.
//! * `spline(x, k)` is a clamped cubic B-spline basis with `k` functions;
//!   the first is dropped because the intercepts already span their sum.

mod build;
mod columns;
mod defaults;
mod density;
pub mod error;
pub mod family;
mod inputs;
mod outcome;
mod posterior;
mod predict;
pub mod prior;
pub mod spec;
pub mod spline;
pub mod terms;

pub use defaults::PriorUse;
pub use density::LogDensity;
pub use error::ModelError;
pub use family::Family;
pub use inputs::{Input, SplineTerm};
pub use posterior::Model;
pub use predict::{NewRows, Prediction};
pub use prior::{Prior, PriorGroup};
pub use spec::{parse_model_line, Formula, ModelLine, ModelSpec, TermSpec};
pub use spline::BSplineBasis;
