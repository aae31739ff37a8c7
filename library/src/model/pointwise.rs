//! Each fitted row's log density at one posterior draw, and the same model
//! with a row left out.
//!
//! Predictive comparison of models (`score predictions of …`) needs, per
//! draw and per fitted row, `log p(yᵢ | θ)`: the row's own term of the
//! log-likelihood. The samplers never need it row by row (the likelihood
//! sums its terms in one fused pass, `family::likelihood`), so it is
//! computed here from the model's predictions, with every normalising
//! constant kept (the binomial coefficient, `log yᵢ!`, `½ log 2π`) so that
//! a value is a proper log density, checkable against a reference library:
//!
//! * normal: `−½ log 2π − log σ − ½ ((y − μ)/σ)²`;
//! * bernoulli: `y log p + (1 − y) log(1 − p)` from the log odds η, as
//!   `−softplus(−η)` and `−softplus(η)` (no `log 0` for a confident draw);
//! * binomial out of m: `log C(m, y)` plus the same with y successes and
//!   m − y failures;
//! * poisson: `y η − e^η − log y!`;
//! * gamma-poisson: the negative binomial row of `family::shaped`, minus
//!   `log y!`;
//! * beta: the beta row of `family::shaped`, minus `log y + log(1 − y)`;
//! * exponential and Weibull times: the log density, or for a row cut short
//!   (`NewRows::cut_short`) the log survival function, `family::survival`;
//! * levels: the log of the observed level's probability (floored at the
//!   smallest positive double, which only a share below 10⁻³⁰⁸ reaches).
//!
//! Pooled departures enter through [`Model::predict_mean`] on the fitted
//! rows, so a row's density is conditional on its group's departure.
//!
//! [`Model::leaving_out`] rebuilds the likelihood without one row and keeps
//! everything else — design recipes, priors (defaults included, which were
//! set from the full data), pooled groups and their layout — so a refit is
//! the exact leave-one-out posterior of the same model.

use statrs::function::gamma::ln_gamma;

use super::build::{glm_data, group_indices, intercept_columns, softmax_data, with_departure_columns};
use super::error::ModelError;
use super::family::gaussian::GaussianStats;
use super::family::shaped::{beta_row, gamma_poisson_row, BetaPrecision, BetaShare, GammaShape};
use super::family::survival::{time_row_log_density, TimeForm, TimeRow, TimeShape};
use super::family::Family;
use super::outcome::OutcomeValues;
use super::posterior::{Likelihood, Model};
use super::predict::NewRows;

const HALF_LOG_TWO_PI: f64 = 0.918_938_533_204_672_7;

/// `log(1 + eˣ)` without overflow or loss of precision at either end.
fn softplus(x: f64) -> f64 {
    x.max(0.0) + (-x.abs()).exp().ln_1p()
}

impl Model {
    /// The log density of every fitted row at constrained parameters
    /// `params` (one draw, [`Model::parameter_names`] order), with the
    /// fitted rows laid out once by the caller ([`Model::fitted_rows`]).
    pub fn pointwise_log_likelihood(&self, params: &[f64], rows: &NewRows) -> Result<Vec<f64>, ModelError> {
        self.log_density_of_rows(params, rows, &self.y)
    }

    /// The log density of outcomes `y` (level indices for the levels
    /// family) in `rows` (laid out by [`Model::fitted_rows`], or a
    /// selection of them) at constrained parameters `params`.
    pub fn log_density_of_rows(&self, params: &[f64], rows: &NewRows, y: &[f64]) -> Result<Vec<f64>, ModelError> {
        if rows.design.nrows() != y.len() {
            return Err(ModelError::Parameters {
                message: format!(
                    "model `{}`: {} outcome values were given for {} rows",
                    self.name,
                    y.len(),
                    rows.design.nrows()
                ),
            });
        }
        if self.outcome_levels().is_some() {
            let probabilities = self.level_probabilities(params, rows)?;
            return Ok(probabilities.iter().zip(y).map(|(p, &y)| p.get(y as usize).copied().unwrap_or(0.0).max(f64::MIN_POSITIVE).ln()).collect());
        }
        let linear = self.predict_mean(params, rows)?.linear;
        Ok(match &self.family {
            Family::Normal => {
                let spread = params[self.labels.len()];
                let log_spread = spread.ln();
                linear.iter().zip(y).map(|(&mu, &v)| -HALF_LOG_TWO_PI - log_spread - 0.5 * ((v - mu) / spread).powi(2)).collect()
            }
            Family::Bernoulli => linear.iter().zip(y).map(|(&eta, &v)| -softplus(if v == 1.0 { -eta } else { eta })).collect(),
            Family::Binomial { trials } => {
                let m = rows.trials.as_ref().ok_or_else(|| ModelError::Column {
                    column: trials.clone(),
                    message: "the row-by-row log densities of a binomial model need each row's number of trials".into(),
                })?;
                linear
                    .iter()
                    .zip(y)
                    .zip(m)
                    .map(|((&eta, &v), &m)| {
                        let m = m as f64;
                        let choose = ln_gamma(m + 1.0) - ln_gamma(v + 1.0) - ln_gamma(m - v + 1.0);
                        choose - v * softplus(-eta) - (m - v) * softplus(eta)
                    })
                    .collect()
            }
            Family::Poisson => linear.iter().zip(y).map(|(&eta, &v)| v * eta - eta.exp() - ln_gamma(v + 1.0)).collect(),
            Family::GammaPoisson => {
                let shape = GammaShape::from_log_overdispersion(params[self.labels.len()].ln());
                linear.iter().zip(y).map(|(&eta, &v)| gamma_poisson_row(v, eta, shape).0 - ln_gamma(v + 1.0)).collect()
            }
            Family::Beta => {
                let precision = BetaPrecision::from_log_precision(params[self.labels.len()].ln());
                linear
                    .iter()
                    .zip(y)
                    .map(|(&eta, &v)| {
                        let share = BetaShare::new(v);
                        beta_row(share, eta, precision).0 - v.ln() - share.log_complement
                    })
                    .collect()
            }
            Family::Times { form, .. } => {
                let shape = match form {
                    TimeForm::Exponential => TimeShape::exponential(),
                    TimeForm::Weibull => TimeShape::from_log_shape(params[self.labels.len()].ln()),
                };
                let cut = |i: usize| rows.cut_short.as_ref().is_some_and(|c| c[i]);
                let row = |i: usize, v: f64| match &rows.upper {
                    Some(upper) if !cut(i) => TimeRow::between(v, upper[i]),
                    _ => TimeRow::new(v, cut(i)),
                };
                linear.iter().zip(y).enumerate().map(|(i, (&eta, &v))| time_row_log_density(row(i, v), eta, shape)).collect()
            }
            Family::Levels | Family::Graded => unreachable!("a model of a category outcome answered above"),
        })
    }

    /// The same model without fitted row `row` (0-based): the likelihood
    /// loses the row, while the priors, recipes and pooled groups stay as
    /// they were built on every row, so that fitting it gives the exact
    /// leave-one-out posterior. Its parameters are laid out as this model's.
    pub fn leaving_out(&self, row: usize) -> Result<Model, ModelError> {
        let n = self.y.len();
        if row >= n {
            return Err(ModelError::Parameters { message: format!("model `{}` has {n} fitted rows, not a row {}", self.name, row + 1) });
        }
        if n < 2 {
            return Err(ModelError::Parameters { message: format!("model `{}` has a single row; none is left to fit", self.name) });
        }
        let design = self.design.clone().remove_row(row);
        let without = |values: &[f64]| -> Vec<f64> { values.iter().enumerate().filter(|(i, _)| *i != row).map(|(_, v)| *v).collect() };
        let y = without(&self.y);
        let group_rows: Vec<Vec<usize>> =
            self.group_rows.iter().map(|g| g.iter().enumerate().filter(|(i, _)| *i != row).map(|(_, l)| *l).collect()).collect();
        let likelihood = match &self.likelihood {
            Likelihood::Gaussian { spread_prior, .. } => Likelihood::Gaussian {
                stats: GaussianStats::new(&with_departure_columns(&design, &self.groups, &group_rows), &y, intercept_columns(&self.recipes)),
                spread_prior: spread_prior.clone(),
            },
            Likelihood::Glm(glm) => {
                let cut_short = self.cut_short_rows().map(|c| c.into_iter().enumerate().filter(|(i, _)| *i != row).map(|(_, c)| c).collect());
                let upper = self.upper_bounds().map(|u| without(&u));
                let outcome = OutcomeValues { y: y.clone(), trials: glm.trials().map(without), levels: None, cut_short, upper };
                Likelihood::Glm(
                    glm_data(&design, &self.family, &outcome).with_groups(group_indices(&design, &self.groups, &group_rows)),
                )
            }
            Likelihood::Softmax(_) => Likelihood::Softmax(softmax_data(&design, &y, self.outcome_levels().map_or(0, <[String]>::len), &self.groups, &group_rows)),
            Likelihood::Graded(graded) => {
                Likelihood::Graded(graded.with_rows(design.transpose().as_slice().to_vec(), y.iter().map(|&v| v as usize).collect()))
            }
        };
        Ok(Model { design, y, group_rows, likelihood, ..self.clone() })
    }
}

#[cfg(test)]
mod tests {
    use super::softplus;

    #[test]
    fn softplus_keeps_both_ends() {
        // log(1 + e^x): x for large x, e^x for very negative x (series of log1p).
        assert_eq!(softplus(800.0), 800.0);
        assert!((softplus(-800.0) - (-800.0f64).exp()).abs() <= f64::MIN_POSITIVE);
        assert!((softplus(0.0) - std::f64::consts::LN_2).abs() < 1e-15);
    }
}
