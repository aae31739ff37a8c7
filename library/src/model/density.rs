/// A log posterior density on an unconstrained parameter space.
///
/// Positive parameters are represented on the log scale by the implementor
/// (with the Jacobian included), so every point of `R^dim` is valid.
/// Samplers and optimisers in [`crate::infer`] see nothing else of a model.
pub trait LogDensity: Sync {
    /// Number of unconstrained parameters.
    fn dim(&self) -> usize;

    /// The log density (up to an additive constant) at `theta`, with its
    /// gradient written into `grad` (same length as `theta`). A point where
    /// the density is not finite returns `f64::NEG_INFINITY`.
    fn log_density_and_gradient(&self, theta: &[f64], grad: &mut [f64]) -> f64;
}
