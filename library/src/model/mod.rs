//! Model specification → log posterior density.
//!
//! A model names an outcome, a family and link, a list of terms and priors.
//! Built against a [`crate::table::Table`], it becomes a [`LogDensity`]: a
//! function of the unconstrained parameter vector with an analytic gradient,
//! which is all the samplers in [`crate::infer`] need.

mod density;
pub use density::LogDensity;
