//! Inference: turning a [`crate::model::LogDensity`] into posterior draws.
//!
//! Each method sees only the log density and its gradient on the
//! unconstrained scale, never a model's terms or data, so any density
//! (a regression, a joint model, a test target) can be fitted the same way.
//! [`laplace`] approximates the posterior by a normal distribution at its
//! mode.

pub mod laplace;
