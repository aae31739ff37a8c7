//! Inference: turning a [`crate::model::LogDensity`] into posterior draws.
//!
//! Each sampler sees only the log density and its gradient on the
//! unconstrained space, so any model the `model` module builds can be fitted
//! by any method here. [`nuts`] runs several chains of the No-U-Turn sampler
//! in parallel; [`diagnostics`] judges those chains (rank-normalised split
//! R-hat, bulk and tail effective sample size) and words the warnings a
//! scientist reads after a fit.

pub mod nuts;
pub mod diagnostics;
