//! Predictions for new rows: the linear predictor, the mean, and simulated
//! outcomes for posterior predictive checks and contrasts on outcomes.
//!
//! New rows are turned into a design with the recipes planned on the fitted
//! data (same centres, polynomial scaling, spline knots and level coding),
//! so a prediction means the same thing as a fitted value.

use nalgebra::DMatrix;
use rand::{Rng, RngExt};
use rand_distr::{Binomial, Distribution, Normal, Poisson};

use crate::table::Table;

use super::build::{glm_data, intercept_columns};
use super::columns::real_values;
use super::error::ModelError;
use super::family::gaussian::GaussianStats;
use super::family::Family;
use super::outcome::OutcomeValues;
use super::posterior::{Likelihood, Model};
use super::terms::design_matrix;

/// The design of new rows, with their numbers of trials for a binomial model.
#[derive(Debug, Clone, PartialEq)]
pub struct NewRows {
    pub design: DMatrix<f64>,
    /// Trials per row (binomial family, when the table has the trials column).
    pub trials: Option<Vec<u64>>,
}

/// The linear predictor and the mean of each new row (per trial for binomial).
#[derive(Debug, Clone, PartialEq)]
pub struct Prediction {
    pub linear: Vec<f64>,
    pub mean: Vec<f64>,
}

impl Model {
    /// The design of the rows of `table`, which needs the predictor columns
    /// (not the outcome).
    pub fn new_rows(&self, table: &Table) -> Result<NewRows, ModelError> {
        let design = design_matrix(&self.recipes, table)?;
        let trials = match &self.family {
            Family::Binomial { trials } => match table.column(trials) {
                Some(column) => Some(whole_numbers(table, trials, &real_values(column, "the trials column")?)?),
                None => None,
            },
            _ => None,
        };
        Ok(NewRows { design, trials })
    }

    /// Linear predictor and mean at constrained parameters `params` (one
    /// draw, in [`Model::parameter_names`] order).
    pub fn predict_mean(&self, params: &[f64], rows: &NewRows) -> Result<Prediction, ModelError> {
        self.check_length(params)?;
        let beta = nalgebra::DVector::from_column_slice(&params[..self.labels.len()]);
        let linear: Vec<f64> = (&rows.design * beta).iter().copied().collect();
        let mean = linear.iter().map(|&eta| self.family.inverse_link(eta)).collect();
        Ok(Prediction { linear, mean })
    }

    /// One simulated outcome per new row at constrained parameters `params`,
    /// drawn with `rng` (seed it for reproducible draws).
    pub fn outcome_draw<R: Rng + ?Sized>(&self, params: &[f64], rows: &NewRows, rng: &mut R) -> Result<Vec<f64>, ModelError> {
        let prediction = self.predict_mean(params, rows)?;
        let mut draws = Vec::with_capacity(prediction.mean.len());
        for (i, &mu) in prediction.mean.iter().enumerate() {
            draws.push(self.draw_one(params, rows, i, mu, rng)?);
        }
        Ok(draws)
    }

    fn draw_one<R: Rng + ?Sized>(&self, params: &[f64], rows: &NewRows, i: usize, mu: f64, rng: &mut R) -> Result<f64, ModelError> {
        let invalid = |what: String| ModelError::Parameters { message: format!("row {}: {what}", i + 1) };
        Ok(match &self.family {
            Family::Normal => {
                let spread = params[self.labels.len()];
                let normal = Normal::new(mu, spread).map_err(|e| invalid(format!("cannot draw a normal outcome ({e})")))?;
                normal.sample(rng)
            }
            Family::Bernoulli => f64::from(u8::from(rng.random::<f64>() < mu)),
            Family::Binomial { trials } => {
                let m = rows.trials.as_ref().ok_or_else(|| ModelError::Column {
                    column: trials.clone(),
                    message: "simulated binomial outcomes need the number of trials in the new rows; add this column".into(),
                })?[i];
                let binomial = Binomial::new(m, mu).map_err(|e| invalid(format!("cannot draw a binomial outcome ({e})")))?;
                binomial.sample(rng) as f64
            }
            Family::Poisson if mu == 0.0 => 0.0,
            Family::Poisson => {
                let poisson = Poisson::new(mu).map_err(|e| invalid(format!("cannot draw a poisson outcome ({e})")))?;
                poisson.sample(rng)
            }
        })
    }
}

fn whole_numbers(table: &Table, column: &str, values: &[f64]) -> Result<Vec<u64>, ModelError> {
    values
        .iter()
        .enumerate()
        .map(|(row, &v)| {
            if v >= 0.0 && v.fract() == 0.0 {
                Ok(v as u64)
            } else {
                Err(ModelError::Value {
                    table: table.name.clone(),
                    row: row + 1,
                    column: column.to_string(),
                    message: format!("{v} is not a whole number ≥ 0, which a number of trials must be"),
                })
            }
        })
        .collect()
}

impl Model {
    /// The design of the fitted rows, with their numbers of trials for a
    /// binomial model: the rows outcomes are simulated for in
    /// simulation-based calibration.
    pub fn fitted_rows(&self) -> NewRows {
        let trials = match &self.likelihood {
            Likelihood::Glm(glm) => glm.trials().map(|m| m.iter().map(|&v| v as u64).collect()),
            Likelihood::Gaussian { .. } => None,
        };
        NewRows { design: self.design.clone(), trials }
    }

    /// The same model — design, recipes, priors and binomial trials
    /// unchanged — with new outcome values `y` for the fitted rows:
    /// outcomes simulated from the prior for simulation-based calibration,
    /// where the priors must not move with the simulated data.
    pub fn with_outcome(&self, y: Vec<f64>) -> Result<Model, ModelError> {
        if y.len() != self.y.len() {
            return Err(ModelError::Parameters {
                message: format!("{} outcome values were given for the {} rows of model `{}`", y.len(), self.y.len(), self.name),
            });
        }
        let likelihood = match &self.likelihood {
            Likelihood::Gaussian { spread_prior, .. } => Likelihood::Gaussian {
                stats: GaussianStats::new(&self.design, &y, intercept_columns(&self.recipes)),
                spread_prior: spread_prior.clone(),
            },
            Likelihood::Glm(glm) => {
                let outcome = OutcomeValues { y: y.clone(), trials: glm.trials().map(<[f64]>::to_vec) };
                Likelihood::Glm(glm_data(&self.design, &self.family, &outcome))
            }
        };
        Ok(Model { y, likelihood, ..self.clone() })
    }
}
