//! A normal outcome's regression refitted beside a simulated hidden common
//! cause of one of its predictors (the exposure) and the outcome.
//!
//! Each row gets its own latent value `uᵢ ~ normal(0, 1)`. The exposure is
//! modelled from the model's other design columns plus `a·uᵢ`, the outcome
//! by the model's own design plus `b·uᵢ`:
//!
//! * `xᵢ ~ normal(wᵢ·α + a·uᵢ, σx)` — `w` the design without the exposure's
//!   column, `x` standardised inside (so `α` and `σx` get priors that fit any
//!   scale: `normal(0, 10 / sd of the column)` per non-constant column,
//!   `normal(0, 10)` per constant one, `half_normal(2)` for `σx`), while `a`
//!   stays in the exposure's unit per standard deviation of `u`;
//! * `yᵢ ~ normal(zᵢ·β + b·uᵢ, σy)` with the model's own priors on `β` and
//!   `σy` ([`Model::log_prior_and_gradient`]);
//! * `a` and `b` take the priors the user states.
//!
//! The data cannot tell `b·a` apart from the exposure's own slope, so the
//! priors on the two strengths carry the assumption, and the posterior of
//! the slope widens by what they leave open. With both strengths held at
//! zero the outcome's part is the model's own posterior.
//!
//! Unconstrained parameters, in order: `β` (the model's coefficients),
//! `log σy`, `α`, `log σx`, `a`, `b`, then `u₁ … uₙ`. The gradient is
//! analytic.

use nalgebra::{DMatrix, DVector};

use super::prior::Prior;
use super::{LogDensity, Model};

/// The width of the exposure model's coefficient priors, in standard
/// deviations of the (standardised) exposure per standard deviation of a column.
const EXPOSURE_PRIOR_WIDTH: f64 = 10.0;

/// The scale of the standardised exposure's residual spread prior.
const EXPOSURE_SPREAD_SCALE: f64 = 2.0;

/// The refit's log density.
pub struct HiddenCause<'m> {
    model: &'m Model,
    design: &'m DMatrix<f64>,
    y: &'m [f64],
    /// The exposure, standardised, and its scale.
    x: Vec<f64>,
    x_sd: f64,
    /// The design without the exposure's column.
    others: DMatrix<f64>,
    others_priors: Vec<Prior>,
    spread_prior: Prior,
    to_exposure: Prior,
    to_outcome: Prior,
}

/// Where each block of the parameter vector starts.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct HiddenLayout {
    /// The outcome's coefficients start at 0; its log spread follows.
    pub outcome_spread: usize,
    pub exposure_coefficients: usize,
    pub exposure_spread: usize,
    pub to_exposure: usize,
    pub to_outcome: usize,
    pub latent: usize,
    pub dim: usize,
}

impl<'m> HiddenCause<'m> {
    /// The refit of normal `model` with its design column `slope` as the
    /// exposure; `None` when the model is not a normal regression without
    /// pooled groups or the exposure does not vary.
    pub fn new(model: &'m Model, slope: usize, to_exposure: Prior, to_outcome: Prior) -> Option<HiddenCause<'m>> {
        if !model.has_spread() || model.first_group_index() != model.labels.len() + 1 {
            return None;
        }
        let design = model.design_matrix();
        let raw: Vec<f64> = design.column(slope).iter().copied().collect();
        let (mean, sd) = mean_sd(&raw);
        if !(sd > 0.0 && sd.is_finite()) {
            return None;
        }
        let keep: Vec<usize> = (0..design.ncols()).filter(|&j| j != slope).collect();
        let others = design.select_columns(&keep);
        let others_priors = others
            .column_iter()
            .map(|c| {
                let values: Vec<f64> = c.iter().copied().collect();
                let (_, s) = mean_sd(&values);
                let width = if s > 1e-12 { EXPOSURE_PRIOR_WIDTH / s } else { EXPOSURE_PRIOR_WIDTH / c[0].abs().max(1e-12) };
                Prior::Normal { mean: 0.0, sd: width }
            })
            .collect();
        Some(HiddenCause {
            model,
            design,
            y: model.outcome_values(),
            x: raw.iter().map(|v| (v - mean) / sd).collect(),
            x_sd: sd,
            others,
            others_priors,
            spread_prior: Prior::HalfNormal { sd: EXPOSURE_SPREAD_SCALE },
            to_exposure,
            to_outcome,
        })
    }

    /// The blocks of the parameter vector.
    pub fn layout(&self) -> HiddenLayout {
        let p = self.design.ncols();
        let q = self.others.ncols();
        let exposure_coefficients = p + 1;
        let exposure_spread = exposure_coefficients + q;
        HiddenLayout {
            outcome_spread: p,
            exposure_coefficients,
            exposure_spread,
            to_exposure: exposure_spread + 1,
            to_outcome: exposure_spread + 2,
            latent: exposure_spread + 3,
            dim: exposure_spread + 3 + self.y.len(),
        }
    }

    /// A starting point from standard scores `z` (one per parameter, such
    /// as [`crate::infer::fit::stratified_scores`] gives): the model's own
    /// start for the outcome (given, unconstrained), a tenth of a score for
    /// each exposure coefficient and log spread, each strength a score's
    /// share of its prior's typical distance from the prior's centre, and
    /// each latent its score. Nothing starts exactly at a prior's centre,
    /// where every derivative in a strength would be zero.
    pub fn start(&self, outcome_start: &[f64], z: &[f64]) -> Vec<f64> {
        let l = self.layout();
        let score = |i: usize| z.get(i).copied().unwrap_or(0.0);
        let mut theta: Vec<f64> = (0..l.dim).map(|i| 0.1 * score(i)).collect();
        theta[..=l.outcome_spread].copy_from_slice(&outcome_start[..=l.outcome_spread]);
        for (k, prior) in [(l.to_exposure, &self.to_exposure), (l.to_outcome, &self.to_outcome)] {
            theta[k] = prior.central_point() + 0.5 * score(k) * prior.typical_distance();
        }
        for (i, t) in theta[l.latent..].iter_mut().enumerate() {
            *t = score(l.latent + i);
        }
        theta
    }
}

impl LogDensity for HiddenCause<'_> {
    fn dim(&self) -> usize {
        self.layout().dim
    }

    fn log_density_and_gradient(&self, theta: &[f64], grad: &mut [f64]) -> f64 {
        let l = self.layout();
        let n = self.y.len();
        grad.iter_mut().for_each(|g| *g = 0.0);
        let mut total = self.model.log_prior_and_gradient(&theta[..=l.outcome_spread], &mut grad[..=l.outcome_spread]);
        let (a, b) = (theta[l.to_exposure], theta[l.to_outcome]);
        let a_std = a / self.x_sd;
        let u = &theta[l.latent..];
        let beta = DVector::from_column_slice(&theta[..l.outcome_spread]);
        let alpha = DVector::from_column_slice(&theta[l.exposure_coefficients..l.exposure_spread]);
        let (log_sy, log_sx) = (theta[l.outcome_spread], theta[l.exposure_spread]);
        let (prec_y, prec_x) = ((-2.0 * log_sy).exp(), (-2.0 * log_sx).exp());
        let mean_y = self.design * &beta;
        let mean_x = &self.others * &alpha;
        let mut scaled_y = DVector::zeros(n);
        let mut scaled_x = DVector::zeros(n);
        let (mut sq_y, mut sq_x, mut d_a, mut d_b) = (0.0, 0.0, 0.0, 0.0);
        for i in 0..n {
            let ry = self.y[i] - mean_y[i] - b * u[i];
            let rx = self.x[i] - mean_x[i] - a_std * u[i];
            sq_y += ry * ry;
            sq_x += rx * rx;
            scaled_y[i] = ry * prec_y;
            scaled_x[i] = rx * prec_x;
            d_a += scaled_x[i] * u[i] / self.x_sd;
            d_b += scaled_y[i] * u[i];
            total -= 0.5 * u[i] * u[i];
            grad[l.latent + i] = -u[i] + a_std * scaled_x[i] + b * scaled_y[i];
        }
        let nf = n as f64;
        total += -0.5 * sq_y * prec_y - nf * log_sy - 0.5 * sq_x * prec_x - nf * log_sx;
        let d_beta = self.design.tr_mul(&scaled_y);
        for (g, d) in grad[..l.outcome_spread].iter_mut().zip(d_beta.iter()) {
            *g += d;
        }
        grad[l.outcome_spread] += sq_y * prec_y - nf;
        let d_alpha = self.others.tr_mul(&scaled_x);
        for (k, prior) in self.others_priors.iter().enumerate() {
            let (lp, d) = prior.log_density_and_derivative(alpha[k]);
            total += lp;
            grad[l.exposure_coefficients + k] = d_alpha[k] + d;
        }
        let sx = log_sx.exp();
        let (lp, d_spread) = self.spread_prior.log_density_and_derivative(sx);
        total += lp + log_sx;
        grad[l.exposure_spread] = sq_x * prec_x - nf + d_spread * sx + 1.0;
        let (lp_a, dp_a) = self.to_exposure.log_density_and_derivative(a);
        let (lp_b, dp_b) = self.to_outcome.log_density_and_derivative(b);
        total += lp_a + lp_b;
        grad[l.to_exposure] = d_a + dp_a;
        grad[l.to_outcome] = d_b + dp_b;
        if total.is_finite() {
            total
        } else {
            f64::NEG_INFINITY
        }
    }
}

fn mean_sd(v: &[f64]) -> (f64, f64) {
    let n = v.len() as f64;
    let mean = v.iter().sum::<f64>() / n.max(1.0);
    let var = v.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1.0).max(1.0);
    (mean, var.sqrt())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::ModelSpec;
    use crate::table::{Column, ColumnData, Table};

    fn model() -> Model {
        let x: Vec<f64> = (0..40).map(|i| (i as f64 * 0.37).sin() * 2.0 + 5.0).collect();
        let w: Vec<f64> = (0..40).map(|i| (i as f64 * 0.11).cos()).collect();
        let y: Vec<f64> = x.iter().zip(&w).enumerate().map(|(i, (a, b))| 1.0 + 0.5 * a - b + (i as f64 * 1.7).sin()).collect();
        let table = Table {
            name: "t".into(),
            columns: vec![Column::new("x", ColumnData::Real(x)), Column::new("w", ColumnData::Real(w)), Column::new("y", ColumnData::Real(y))],
        };
        let spec = ModelSpec::from_lines("m", [(1, "y from x, w using t")].into_iter()).unwrap();
        Model::build(&spec, &table).unwrap()
    }

    #[test]
    fn gradient_matches_central_differences() {
        let m = model();
        let slope = m.linear_slope_position("x").unwrap();
        let d = HiddenCause::new(&m, slope, Prior::Normal { mean: 0.4, sd: 0.2 }, Prior::Normal { mean: -0.3, sd: 0.5 }).unwrap();
        let dim = d.dim();
        let theta: Vec<f64> = (0..dim).map(|i| 0.3 * ((i as f64) * 0.7).sin()).collect();
        let mut grad = vec![0.0; dim];
        let f = d.log_density_and_gradient(&theta, &mut grad);
        assert!(f.is_finite());
        let mut scratch = vec![0.0; dim];
        for i in 0..dim {
            let h = 1e-5;
            let (mut up, mut down) = (theta.clone(), theta.clone());
            up[i] += h;
            down[i] -= h;
            let numeric = (d.log_density_and_gradient(&up, &mut scratch) - d.log_density_and_gradient(&down, &mut scratch)) / (2.0 * h);
            assert!((numeric - grad[i]).abs() <= 1e-5 * (1.0 + numeric.abs()), "parameter {i}: analytic {} numeric {numeric}", grad[i]);
        }
    }
}
