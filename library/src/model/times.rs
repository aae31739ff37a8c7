//! What a time model (exponential, Weibull) knows of its rows cut short,
//! for the code that simulates outcomes like the data's.
//!
//! A row cut short has, as its time, the end of its follow-up; a row with
//! its event was followed at least that long, by an amount the data do not
//! say. Simulated times (for calibration and predictive checks) are cut the
//! same way: at each cut-short row's follow-up end, and not at all on the
//! rows with an event. The ends are fixed, not drawn from the parameters, so
//! calibration stays exact (the cutting does not depend on what is
//! estimated), and a predictive set of times has the data's censoring.

use super::family::survival::cut_at_follow_up;
use super::error::ModelError;
use super::outcome::OutcomeValues;
use super::family::Family;
use super::posterior::{Likelihood, Model};

impl Model {
    /// The `came by` column of a time model whose rows may lie between two
    /// bounds.
    pub fn came_by_column(&self) -> Option<&str> {
        match &self.family {
            Family::Times { came_by, .. } => came_by.as_deref(),
            _ => None,
        }
    }

    /// Per fitted row of a model with rows between bounds, the time by
    /// which its event came: its upper bound, or its own time for an event
    /// seen then or a row cut short (which [`Model::cut_short_rows`] marks).
    pub fn upper_bounds(&self) -> Option<Vec<f64>> {
        self.came_by_column()?;
        let Likelihood::Glm(glm) = &self.likelihood else { return None };
        let rows = glm.time_rows()?;
        Some(rows.iter().zip(&self.y).map(|(r, &y)| if r.log_upper.is_finite() { r.log_upper.exp() } else { y }).collect())
    }

    /// Refuse `what` for a model with rows between bounds: predictive
    /// checks do not yet draw bounds (README, Limits).
    pub fn refuse_bounded_times(&self, what: &str) -> Result<(), ModelError> {
        match self.came_by_column() {
            Some(column) => Err(ModelError::Family {
                message: format!(
                    "model `{}` reads times between bounds (`came by {column}`); {what} is not available for such a \
                     model yet — fit it and ask contrasts, or model the rows with `cut short by` alone",
                    self.name
                ),
            }),
            None => Ok(()),
        }
    }

    /// Per fitted row, whether its follow-up was cut short (`None` for a
    /// model that is not a time model with a `cut short by` column).
    pub fn cut_short_rows(&self) -> Option<Vec<bool>> {
        match (&self.family, &self.likelihood) {
            (Family::Times { cut_short: Some(_), .. }, Likelihood::Glm(glm)) => {
                glm.time_rows().map(|rows| rows.iter().map(|r| !r.had_event()).collect())
            }
            _ => None,
        }
    }

    /// Per fitted row, the end of its follow-up when it was cut short.
    fn follow_up_ends(&self) -> Option<Vec<Option<f64>>> {
        let cut = self.cut_short_rows()?;
        Some(cut.iter().zip(&self.y).map(|(&c, &t)| c.then_some(t)).collect())
    }

    /// Simulated times `y` of the fitted rows seen the way the data's were,
    /// for a model with rows between bounds (`None` for any other model):
    /// a row seen at its time keeps the simulated time; a row cut short is
    /// cut at its end again; a row between looks l < u is looked at at l
    /// and u only, so its simulated time t gives `(0, l]` when t ≤ l,
    /// `(l, u]` when l < t ≤ u, and a row cut short at u when t > u (a row
    /// from 0 has only the look at u). The looks are the data's, fixed, so
    /// calibration stays exact.
    pub fn bounded_like_the_data(&self, y: &[f64]) -> Option<OutcomeValues> {
        self.came_by_column()?;
        let Likelihood::Glm(glm) = &self.likelihood else { return None };
        let rows = glm.time_rows()?;
        let mut bounds = Vec::with_capacity(rows.len());
        for (row, &t) in rows.iter().zip(y) {
            let l = row.log_time.exp();
            bounds.push(if row.log_upper.is_finite() {
                let u = row.log_upper.exp();
                if t > u {
                    (u, u, true)
                } else if t > l || l == 0.0 {
                    (l, u, false)
                } else {
                    (0.0, l, false)
                }
            } else if row.event == 0.0 && t > l {
                (l, l, true)
            } else {
                (t, t, false)
            });
        }
        let lower = bounds.iter().map(|b| b.0).collect();
        let upper = bounds.iter().map(|b| b.1).collect();
        let cut = bounds.iter().map(|b| b.2).collect();
        Some(OutcomeValues { y: lower, trials: None, levels: None, cut_short: Some(cut), upper: Some(upper) })
    }

    /// Simulated outcomes `y` of the fitted rows, cut like the data's (module
    /// doc), with whether each was cut; other models' outcomes unchanged.
    pub fn cut_like_the_data(&self, y: Vec<f64>) -> (Vec<f64>, Option<Vec<bool>>) {
        match self.follow_up_ends() {
            Some(ends) if ends.len() == y.len() => {
                let (times, cut) = cut_at_follow_up(&y, &ends);
                (times, Some(cut))
            }
            _ => (y, None),
        }
    }
}
