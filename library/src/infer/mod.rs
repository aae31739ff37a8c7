//! Inference: turning a [`crate::model::LogDensity`] into posterior draws.
//!
//! Each method sees only the log density and its gradient on the
//! unconstrained scale, never a model's terms or data, so any density
//! (a regression, a joint model, a test target) can be fitted the same way.
//! [`laplace`] approximates the posterior by a normal distribution at its
//! mode ([`normal_exact`] replaces it with exact draws for a normal model
//! whose coefficient priors are normal); [`nuts`] runs several chains of the No-U-Turn sampler in parallel;
//! [`diagnostics`] judges those chains (rank-normalised split R-hat, bulk and
//! tail effective sample size) and words the warnings a scientist reads
//! after a fit.

pub mod diagnostics;
pub mod fit;
pub mod laplace;
pub mod normal_exact;
pub mod nuts;
#[cfg(feature = "on_disk")]
pub mod on_disk;
