//! Reading and checking the outcome (and binomial trials) column against the
//! family: a bernoulli outcome is 0/1, binomial successes are whole numbers
//! within their trials, poisson counts are whole and non-negative, and no
//! outcome is a category. Errors name the first offending row.

use crate::table::{ColumnData, Table};

use super::columns::{find_column, real_values};
use super::error::ModelError;
use super::family::Family;

/// The outcome as reals, with the number of trials for a binomial family.
#[derive(Debug, Clone, PartialEq)]
pub struct OutcomeValues {
    pub y: Vec<f64>,
    pub trials: Option<Vec<f64>>,
}

impl OutcomeValues {
    /// The mean outcome per trial (per row for families without trials).
    pub fn mean_per_trial(&self) -> f64 {
        let total: f64 = self.y.iter().sum();
        match &self.trials {
            Some(m) => total / m.iter().sum::<f64>().max(1.0),
            None => total / self.y.len() as f64,
        }
    }
}

/// Read column `name` of `table` as the outcome of `family`.
pub fn read_outcome(table: &Table, name: &str, family: &Family) -> Result<OutcomeValues, ModelError> {
    let column = find_column(table, name)?;
    if let ColumnData::Category { levels, .. } = &column.data {
        return Err(ModelError::Column {
            column: name.to_string(),
            message: format!(
                "the outcome is a category ({}); use a binary column with `family bernoulli` \
                 or a numeric column",
                levels.join(", ")
            ),
        });
    }
    let y = real_values(column, "the outcome")?;
    if table.nrows() == 0 {
        return Err(ModelError::Column {
            column: name.to_string(),
            message: format!("table `{}` has no rows to fit the model to", table.name),
        });
    }
    let place = |row: usize, message: String| ModelError::Value {
        table: table.name.clone(),
        row: row + 1,
        column: name.to_string(),
        message,
    };
    match family {
        Family::Normal => check_varies(&y, name).map(|_| OutcomeValues { y, trials: None }),
        Family::Bernoulli => first_bad(&y, |v| v == 0.0 || v == 1.0)
            .map(|row| Err(place(row, format!("{} is not 0 or 1, which a bernoulli outcome must be", y[row]))))
            .unwrap_or(Ok(OutcomeValues { y, trials: None })),
        Family::Poisson => first_bad(&y, is_count)
            .map(|row| Err(place(row, format!("{} is not a whole number ≥ 0, which a poisson outcome must be", y[row]))))
            .unwrap_or(Ok(OutcomeValues { y, trials: None })),
        Family::Binomial { trials } => read_binomial(table, name, y, trials),
    }
}

fn read_binomial(table: &Table, name: &str, y: Vec<f64>, trials_name: &str) -> Result<OutcomeValues, ModelError> {
    let trials = real_values(find_column(table, trials_name)?, "the trials column")?;
    let place = |row: usize, column: &str, message: String| ModelError::Value {
        table: table.name.clone(),
        row: row + 1,
        column: column.to_string(),
        message,
    };
    if let Some(row) = first_bad(&trials, is_count) {
        let message = format!("{} is not a whole number ≥ 0, which a number of trials must be", trials[row]);
        return Err(place(row, trials_name, message));
    }
    let fits = |i: usize| is_count(y[i]) && y[i] <= trials[i];
    if let Some(row) = (0..y.len()).find(|&i| !fits(i)) {
        let message = format!(
            "{} successes is not a whole number between 0 and the {} trials in `{trials_name}`",
            y[row], trials[row]
        );
        return Err(place(row, name, message));
    }
    Ok(OutcomeValues { y, trials: Some(trials) })
}

fn check_varies(y: &[f64], name: &str) -> Result<(), ModelError> {
    if y.iter().any(|&v| v != y[0]) {
        Ok(())
    } else {
        Err(ModelError::Column {
            column: name.to_string(),
            message: "the outcome has the same value in every row, so there is nothing to model".into(),
        })
    }
}

fn is_count(v: f64) -> bool {
    v >= 0.0 && v.fract() == 0.0
}

fn first_bad(values: &[f64], ok: impl Fn(f64) -> bool) -> Option<usize> {
    values.iter().position(|&v| !ok(v))
}
