//! Predictions for new rows: the linear predictor, the mean, and simulated
//! outcomes for posterior predictive checks and contrasts on outcomes. A
//! levels-family model (category outcome) has no mean: it predicts the
//! probability of every level ([`Model::level_probabilities`]) and draws a
//! level.
//!
//! New rows are turned into a design with the recipes planned on the fitted
//! data (same centres, polynomial scaling, spline knots and level coding),
//! so a prediction means the same thing as a fitted value.

use nalgebra::DMatrix;
use rand::{Rng, RngExt};
use rand_distr::{Beta, Binomial, Distribution, Gamma, Normal, Poisson};

use crate::table::Table;

use super::build::{glm_data, group_indices, intercept_columns, softmax_data, with_departure_columns};
use super::columns::real_values;
use super::error::ModelError;
use super::family::correlated::{cholesky_of_correlations, lower_times, pair_count};
use super::family::gaussian::GaussianStats;
use super::family::ordered::level_probabilities as graded_level_probabilities;
use super::family::softmax::level_probabilities;
use super::family::survival::{self, draw_time, TimeForm, TimeShape};
use super::family::Family;
use super::outcome::{read_outcome, OutcomeValues};
use super::posterior::{Likelihood, Model};
use super::terms::design_matrix;

/// The design of new rows, with their numbers of trials for a binomial model.
#[derive(Debug, Clone, PartialEq)]
pub struct NewRows {
    pub design: DMatrix<f64>,
    /// Trials per row (binomial family, when the table has the trials column).
    pub trials: Option<Vec<u64>>,
    /// Per pooled group, each row's level (`None`: a level the fitted data
    /// did not have, or a table without the group's column — a new group,
    /// whose departure is taken as 0, the population's own prediction).
    pub groups: Vec<Vec<Option<usize>>>,
    /// Per row, whether its follow-up was cut short (time families, when the
    /// table has the `cut short by` column; `None`: every row an event).
    pub cut_short: Option<Vec<bool>>,
    /// Per row, the time by which its event came (time families, when the
    /// table has the `came by` column; the outcome is then each row's lower
    /// bound, equal to this for an event seen then).
    pub upper: Option<Vec<f64>>,
}

impl NewRows {
    /// Rows without pooled groups (or of a new group in each).
    pub fn from_design(design: DMatrix<f64>, trials: Option<Vec<u64>>) -> NewRows {
        NewRows { design, trials, groups: Vec::new(), cut_short: None, upper: None }
    }

    /// The rows at `indices`, in that order.
    pub fn select(&self, indices: &[usize]) -> NewRows {
        NewRows {
            design: self.design.select_rows(indices),
            trials: self.trials.as_ref().map(|t| indices.iter().map(|&i| t[i]).collect()),
            groups: self.groups.iter().map(|g| indices.iter().map(|&i| g[i]).collect()).collect(),
            cut_short: self.cut_short.as_ref().map(|c| indices.iter().map(|&i| c[i]).collect()),
            upper: self.upper.as_ref().map(|u| indices.iter().map(|&i| u[i]).collect()),
        }
    }
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
        let groups = self.groups.iter().map(|g| g.level_of_rows(table)).collect::<Result<_, _>>()?;
        let (cut_short, upper) = match &self.family {
            Family::Times { cut_short, came_by, .. }
                if cut_short.iter().chain(came_by).any(|c| table.column(c).is_some()) =>
            {
                read_outcome(table, &self.outcome, &self.family).ok().map_or((None, None), |o| (o.cut_short, o.upper))
            }
            _ => (None, None),
        };
        Ok(NewRows { design, trials, groups, cut_short, upper })
    }

    /// Linear predictor and mean at constrained parameters `params` (one
    /// draw, in [`Model::parameter_names`] order). A levels-family model has
    /// no mean and answers with an error naming
    /// [`Model::level_probabilities`].
    pub fn predict_mean(&self, params: &[f64], rows: &NewRows) -> Result<Prediction, ModelError> {
        self.predict_mean_in_new_groups(params, rows, &[])
    }

    /// [`Model::predict_mean`], with `new_group` as the departures of
    /// every row that belongs to no fitted level of a pooled group (a new
    /// group): one per group, and a second, of the slope, for a group with
    /// a varying slope (0 where `new_group` is shorter). Draw them with
    /// [`Model::new_group_departures`].
    pub fn predict_mean_in_new_groups(&self, params: &[f64], rows: &NewRows, new_group: &[f64]) -> Result<Prediction, ModelError> {
        self.check_length(params)?;
        if let Some(levels) = self.outcome_levels() {
            return Err(ModelError::Family {
                message: format!(
                    "model `{}` has a category outcome, {} ({}): it predicts the probability of each level \
                     rather than a mean, so a summary of means is not available for it",
                    self.name,
                    self.outcome,
                    levels.join(", ")
                ),
            });
        }
        let beta = nalgebra::DVector::from_column_slice(&params[..self.labels.len()]);
        let mut linear = vec![(&rows.design * beta).iter().copied().collect::<Vec<f64>>()];
        self.add_departures(params, rows, new_group, &mut linear);
        let linear = linear.swap_remove(0);
        let mean = linear.iter().map(|&eta| self.family.inverse_link(eta)).collect();
        Ok(Prediction { linear, mean })
    }

    /// Each new row's linear predictor at constrained `params`, with
    /// `new_group` as in [`Model::predict_mean_in_new_groups`]: a graded
    /// outcome's latent score without its logistic error, a time's log mean
    /// time. Models with one linear predictor only (every family but
    /// `levels`).
    pub fn linear_predictor_in_new_groups(&self, params: &[f64], rows: &NewRows, new_group: &[f64]) -> Result<Vec<f64>, ModelError> {
        self.check_length(params)?;
        if self.family == Family::Levels {
            return Err(ModelError::Family {
                message: format!(
                    "model `{}` has one linear predictor per level of {} after the first, not one score",
                    self.name, self.outcome
                ),
            });
        }
        let beta = nalgebra::DVector::from_column_slice(&params[..self.labels.len()]);
        let mut linear = vec![(&rows.design * beta).iter().copied().collect::<Vec<f64>>()];
        self.add_departures(params, rows, new_group, &mut linear);
        Ok(linear.swap_remove(0))
    }

    /// Each new row's median time (time families): `λ·(ln 2)^(1/k)` with
    /// the scale λ whose mean is the row's mean time
    /// ([`survival::median_time`]).
    pub fn median_time_in_new_groups(&self, params: &[f64], rows: &NewRows, new_group: &[f64]) -> Result<Vec<f64>, ModelError> {
        let (linear, shape) = self.time_predictors_in_new_groups(params, rows, new_group)?;
        Ok(linear.into_iter().map(|eta| survival::median_time(eta, shape)).collect())
    }

    /// Each new row's time by which a share `q` of its events has come
    /// ([`survival::quantile_time`]); time families only.
    pub fn quantile_time_in_new_groups(&self, params: &[f64], rows: &NewRows, new_group: &[f64], q: f64) -> Result<Vec<f64>, ModelError> {
        let (linear, shape) = self.time_predictors_in_new_groups(params, rows, new_group)?;
        Ok(linear.into_iter().map(|eta| survival::quantile_time(q, eta, shape)).collect())
    }

    /// Each new row's chance that its event has come by time `t`
    /// ([`survival::event_chance_by`]); time families only.
    pub fn event_chance_in_new_groups(&self, params: &[f64], rows: &NewRows, new_group: &[f64], t: f64) -> Result<Vec<f64>, ModelError> {
        let (linear, shape) = self.time_predictors_in_new_groups(params, rows, new_group)?;
        Ok(linear.into_iter().map(|eta| survival::event_chance_by(t, eta, shape)).collect())
    }

    /// Each new row's log mean time η with the shape at `params` (the
    /// exponential's k = 1): what every summary of a time is computed from.
    pub fn time_predictors_in_new_groups(
        &self,
        params: &[f64],
        rows: &NewRows,
        new_group: &[f64],
    ) -> Result<(Vec<f64>, TimeShape), ModelError> {
        let Family::Times { form, .. } = &self.family else {
            return Err(ModelError::Family { message: format!("model `{}` does not model times", self.name) });
        };
        let shape = match form {
            TimeForm::Exponential => TimeShape::exponential(),
            TimeForm::Weibull => TimeShape::from_log_shape(params[self.labels.len()].ln()),
        };
        Ok((self.linear_predictor_in_new_groups(params, rows, new_group)?, shape))
    }

    /// The probability of every outcome level (reference first, in
    /// [`Model::outcome_levels`] order) for each new row, at constrained
    /// parameters `params`: the softmax of the levels' linear predictors.
    /// Levels family only.
    pub fn level_probabilities(&self, params: &[f64], rows: &NewRows) -> Result<Vec<Vec<f64>>, ModelError> {
        self.level_probabilities_in_new_groups(params, rows, &[])
    }

    /// [`Model::level_probabilities`] with `new_group` as in
    /// [`Model::predict_mean_in_new_groups`]: for a category outcome one
    /// departure per outcome level after the reference (and per varying
    /// slope), in parameter order.
    pub fn level_probabilities_in_new_groups(&self, params: &[f64], rows: &NewRows, new_group: &[f64]) -> Result<Vec<Vec<f64>>, ModelError> {
        self.check_length(params)?;
        let levels = self.outcome_levels().ok_or_else(|| ModelError::Family {
            message: format!("model `{}` has a {} outcome, not a category, so it has no level probabilities", self.name, self.family.name()),
        })?;
        if let Likelihood::Graded(_) = self.likelihood {
            return Ok(self.graded_probabilities(params, rows));
        }
        let width = rows.design.ncols();
        let blocks: Vec<nalgebra::DVector<f64>> = (1..levels.len())
            .map(|k| nalgebra::DVector::from_column_slice(&params[(k - 1) * width..k * width]))
            .collect();
        let mut eta: Vec<Vec<f64>> = blocks.iter().map(|b| (&rows.design * b).iter().copied().collect()).collect();
        self.add_departures(params, rows, new_group, &mut eta);
        Ok((0..rows.design.nrows())
            .map(|i| level_probabilities(&eta.iter().map(|e| e[i]).collect::<Vec<f64>>()))
            .collect())
    }

    /// A graded model's level probabilities (lowest first) for each new
    /// row: the differences of the cumulative logistic probabilities at
    /// the cuts ([`super::family::ordered`]).
    fn graded_probabilities(&self, params: &[f64], rows: &NewRows) -> Vec<Vec<f64>> {
        let p = self.labels.len();
        let mut cuts = vec![0.0];
        cuts.extend_from_slice(&params[p..self.first_group_index()]);
        let eta = &rows.design * nalgebra::DVector::from_column_slice(&params[..p]);
        eta.iter().map(|&e| graded_level_probabilities(e, &cuts)).collect()
    }

    /// One simulated outcome per new row at constrained parameters `params`,
    /// drawn with `rng` (seed it for reproducible draws). For the levels
    /// family each value is the index of the drawn level in
    /// [`Model::outcome_levels`] (0 for the reference level), drawn from
    /// [`Model::level_probabilities`]; callers turn it into a label.
    pub fn outcome_draw<R: Rng + ?Sized>(&self, params: &[f64], rows: &NewRows, rng: &mut R) -> Result<Vec<f64>, ModelError> {
        self.outcome_draw_in_new_groups(params, rows, &[], rng)
    }

    /// [`Model::outcome_draw`] with `new_group` as in
    /// [`Model::predict_mean_in_new_groups`].
    pub fn outcome_draw_in_new_groups<R: Rng + ?Sized>(
        &self,
        params: &[f64],
        rows: &NewRows,
        new_group: &[f64],
        rng: &mut R,
    ) -> Result<Vec<f64>, ModelError> {
        if self.outcome_levels().is_some() {
            let probabilities = self.level_probabilities_in_new_groups(params, rows, new_group)?;
            return Ok(probabilities.iter().map(|p| draw_level(p, rng.random::<f64>()) as f64).collect());
        }
        let prediction = self.predict_mean_in_new_groups(params, rows, new_group)?;
        let mut draws = Vec::with_capacity(prediction.mean.len());
        for (i, &mu) in prediction.mean.iter().enumerate() {
            draws.push(self.draw_one(params, rows, i, mu, rng)?);
        }
        Ok(draws)
    }

    /// Add each row's departure in every pooled group to its linear
    /// predictor (`new_group[run]`, or nothing, for a row of a new group;
    /// one run per group and per varying slope, in parameter order). A
    /// varying slope's departure is multiplied by the row's value of the
    /// predictor's design column. `linear` holds one linear predictor per
    /// block (a category outcome's levels after the reference; one for
    /// other families), and each group adds to its own block's.
    fn add_departures(&self, params: &[f64], rows: &NewRows, new_group: &[f64], linear_by_block: &mut [Vec<f64>]) {
        let mut at = self.first_group_index();
        let mut run = 0;
        for (group, levels) in self.groups.iter().zip(&rows.groups) {
            let n = group.levels.len();
            let linear = &mut linear_by_block[group.block()];
            let weights = std::iter::once(None).chain(group.slopes.iter().map(|s| Some(rows.design.column(s.design_column))));
            for weight in weights {
                let departures = &params[at + 1..at + 1 + n];
                let new = new_group.get(run).copied().unwrap_or(0.0);
                for (i, (eta, level)) in linear.iter_mut().zip(levels).enumerate() {
                    *eta += weight.map_or(1.0, |x| x[i]) * level.map_or(new, |l| departures[l]);
                }
                run += 1;
                at += 1 + n;
            }
            at += pair_count(1 + group.slopes.len());
        }
    }

    /// One departure per pooled group and varying slope for a new group
    /// drawn from the population at constrained `params`: `spread · z`, z
    /// standard normal, for intercepts only; a group with varying slopes
    /// draws its departures jointly, `τₑ·(L·z)ₑ` with `L` the Cholesky
    /// factor of its correlation matrix.
    pub fn new_group_departures<R: Rng + ?Sized>(&self, params: &[f64], rng: &mut R) -> Vec<f64> {
        let mut at = self.first_group_index();
        let mut out = Vec::with_capacity(2 * self.groups.len());
        for group in &self.groups {
            let (n, k) = (group.levels.len(), 1 + group.slopes.len());
            let z: Vec<f64> = (0..k).map(|_| rand_distr::StandardNormal.sample(rng)).collect();
            let correlations = &params[at + k * (1 + n)..at + k * (1 + n) + pair_count(k)];
            // The constrained correlations come from a Cholesky factor, so they are positive definite.
            let l = cholesky_of_correlations(correlations, k).unwrap_or_else(|| identity(k));
            for (e, mixed) in lower_times(&l, &z, k).into_iter().enumerate() {
                out.push(params[at + e * (1 + n)] * mixed);
            }
            at += k * (1 + n) + pair_count(k);
        }
        out
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
            Family::Poisson => poisson_draw(mu, rng).map_err(invalid)?,
            Family::GammaPoisson => {
                // The rate is the mean times a gamma multiplier of mean 1 and sd κ (shape 1/κ²).
                let kappa = params[self.labels.len()];
                let shape = 1.0 / (kappa * kappa);
                let gamma = Gamma::new(shape, mu / shape)
                    .map_err(|e| invalid(format!("cannot draw a gamma-poisson outcome's rate ({e})")))?;
                poisson_draw(gamma.sample(rng), rng).map_err(invalid)?
            }
            Family::Beta => {
                let precision = params[self.labels.len()];
                let beta = Beta::new(mu * precision, (1.0 - mu) * precision)
                    .map_err(|e| invalid(format!("cannot draw a beta outcome ({e})")))?;
                // A draw rounded onto 0 or 1 (tiny shapes) is moved just inside, where a share must lie.
                beta.sample(rng).clamp(f64::MIN_POSITIVE, 1.0 - f64::EPSILON)
            }
            Family::Times { form, .. } => {
                let shape = match form {
                    TimeForm::Exponential => TimeShape::exponential(),
                    TimeForm::Weibull => TimeShape::from_log_shape(params[self.labels.len()].ln()),
                };
                draw_time(mu.ln(), shape, rng)
            }
            Family::Levels | Family::Graded => return Err(invalid("a category outcome is drawn as a level".into())),
        })
    }
}

/// A poisson count of rate `rate` (0 for a rate of 0).
fn poisson_draw<R: Rng + ?Sized>(rate: f64, rng: &mut R) -> Result<f64, String> {
    if rate == 0.0 {
        return Ok(0.0);
    }
    let poisson = Poisson::new(rate).map_err(|e| format!("cannot draw a poisson outcome ({e})"))?;
    Ok(poisson.sample(rng))
}

/// The level whose stretch of the cumulative probabilities holds `u` (in
/// [0, 1)); the last level takes any rounding left over.
fn draw_level(probabilities: &[f64], u: f64) -> usize {
    let mut cumulative = 0.0;
    for (k, p) in probabilities.iter().enumerate() {
        cumulative += p;
        if u < cumulative {
            return k;
        }
    }
    probabilities.len() - 1
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
            Likelihood::Gaussian { .. } | Likelihood::Softmax(_) | Likelihood::Graded(_) => None,
        };
        let groups = self.group_rows.iter().map(|g| g.iter().map(|&l| Some(l)).collect()).collect();
        NewRows { design: self.design.clone(), trials, groups, cut_short: self.cut_short_rows(), upper: self.upper_bounds() }
    }

    /// The same model — design, recipes, priors and binomial trials
    /// unchanged — with new outcome values `y` for the fitted rows:
    /// outcomes simulated from the prior for simulation-based calibration,
    /// where the priors must not move with the simulated data. For the
    /// levels family `y` holds level indices; a time model cuts the new
    /// times short where the data were ([`Model::cut_like_the_data`]), and
    /// one with rows between bounds sees them at the data's looks
    /// ([`Model::bounded_like_the_data`]).
    pub fn with_outcome(&self, y: Vec<f64>) -> Result<Model, ModelError> {
        if y.len() != self.y.len() {
            return Err(ModelError::Parameters {
                message: format!("{} outcome values were given for the {} rows of model `{}`", y.len(), self.y.len(), self.name),
            });
        }
        if let Some(outcome) = self.bounded_like_the_data(&y) {
            let likelihood = Likelihood::Glm(
                glm_data(&self.design, &self.family, &outcome).with_groups(group_indices(&self.design, &self.groups, &self.group_rows)),
            );
            return Ok(Model { y: outcome.y, likelihood, ..self.clone() });
        }
        let (y, cut_short) = self.cut_like_the_data(y);
        let likelihood = match &self.likelihood {
            Likelihood::Gaussian { spread_prior, .. } => Likelihood::Gaussian {
                stats: GaussianStats::new(&self.likelihood_design(), &y, intercept_columns(&self.recipes)),
                spread_prior: spread_prior.clone(),
            },
            Likelihood::Glm(glm) => {
                let outcome = OutcomeValues { y: y.clone(), trials: glm.trials().map(<[f64]>::to_vec), levels: None, cut_short, upper: None };
                Likelihood::Glm(
                    glm_data(&self.design, &self.family, &outcome).with_groups(group_indices(&self.design, &self.groups, &self.group_rows)),
                )
            }
            Likelihood::Softmax(_) => {
                let count = self.outcome_levels().map_or(0, <[String]>::len);
                if let Some(bad) = y.iter().find(|&&v| !(v >= 0.0 && v.fract() == 0.0 && (v as usize) < count)) {
                    return Err(ModelError::Parameters {
                        message: format!("model `{}`: {bad} is not the index of one of its {count} outcome levels", self.name),
                    });
                }
                Likelihood::Softmax(softmax_data(&self.design, &y, count, &self.groups, &self.group_rows))
            }
            Likelihood::Graded(graded) => {
                let count = graded.levels();
                if let Some(bad) = y.iter().find(|&&v| !(v >= 0.0 && v.fract() == 0.0 && (v as usize) < count)) {
                    return Err(ModelError::Parameters {
                        message: format!("model `{}`: {bad} is not the index of one of its {count} outcome levels", self.name),
                    });
                }
                Likelihood::Graded(graded.with_rows(self.design.transpose().as_slice().to_vec(), y.iter().map(|&v| v as usize).collect()))
            }
        };
        Ok(Model { y, likelihood, ..self.clone() })
    }
}

impl Model {
    /// The design the normal likelihood's sufficient statistics come from:
    /// the fitted design followed by the pooled groups' level indicators.
    fn likelihood_design(&self) -> DMatrix<f64> {
        with_departure_columns(&self.design, &self.groups, &self.group_rows)
    }
}

/// The `k × k` identity, row-major.
fn identity(k: usize) -> Vec<f64> {
    (0..k * k).map(|i| if i % (k + 1) == 0 { 1.0 } else { 0.0 }).collect()
}
