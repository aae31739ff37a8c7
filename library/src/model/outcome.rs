//! Reading and checking the outcome (and binomial trials) column against the
//! family: a bernoulli outcome is 0/1, binomial successes are whole numbers
//! within their trials, poisson and gamma-poisson counts are whole and
//! non-negative, beta shares lie strictly between 0 and 1, times are
//! positive with a yes/no (or 0/1) `cut short by` column, and a
//! category outcome goes with the levels family (and only it). Errors name
//! the first offending row.

use crate::table::{ColumnData, Table};

use super::columns::{find_column, real_values};
use super::error::ModelError;
use super::family::survival::TimeRow;
use super::family::Family;

/// The outcome as reals, with the number of trials for a binomial family
/// and the level labels for the levels family (whose `y` holds the level
/// index of each row, the reference level being 0).
#[derive(Debug, Clone, PartialEq)]
pub struct OutcomeValues {
    pub y: Vec<f64>,
    pub trials: Option<Vec<f64>>,
    pub levels: Option<Vec<String>>,
    /// Per row, whether its follow-up was cut short before the event (time
    /// families with a `cut short by` column).
    pub cut_short: Option<Vec<bool>>,
    /// Per row, the time by which its event came (time families with a
    /// `came by` column; the outcome is then the last time it had not).
    pub upper: Option<Vec<f64>>,
}

impl OutcomeValues {
    /// A stand-in of two values with mean `mean` and sample sd `sd`, for a
    /// table on disk whose rows are not in memory: the default priors and
    /// starting point of the normal, bernoulli and poisson families read the
    /// outcome only through its mean and sd (`model::defaults`).
    #[cfg(feature = "on_disk")]
    pub(crate) fn with_moments(mean: f64, sd: f64) -> Self {
        let half = sd / std::f64::consts::SQRT_2;
        OutcomeValues { y: vec![mean - half, mean + half], trials: None, levels: None, cut_short: None, upper: None }
    }

    /// The mean outcome per trial (per row for families without trials).
    pub fn mean_per_trial(&self) -> f64 {
        let total: f64 = self.y.iter().sum();
        match &self.trials {
            Some(m) => total / m.iter().sum::<f64>().max(1.0),
            None => total / self.y.len() as f64,
        }
    }

    /// The rows of a time family as its likelihood keeps them (every row an
    /// event when nothing was cut short).
    pub fn time_rows(&self) -> Vec<TimeRow> {
        let cut = |i: usize| self.cut_short.as_ref().is_some_and(|c| c[i]);
        let row = |(i, &t): (usize, &f64)| match &self.upper {
            Some(upper) if !cut(i) => TimeRow::between(t, upper[i]),
            _ => TimeRow::new(t, cut(i)),
        };
        self.y.iter().enumerate().map(row).collect()
    }

    /// The share of rows at each level (levels family; empty otherwise).
    pub fn level_shares(&self) -> Vec<f64> {
        let Some(levels) = &self.levels else { return Vec::new() };
        let mut counts = vec![0.0; levels.len()];
        for &v in &self.y {
            counts[v as usize] += 1.0;
        }
        let n = self.y.len().max(1) as f64;
        counts.iter().map(|c| c / n).collect()
    }
}

/// Read column `name` of `table` as the outcome of `family`.
pub fn read_outcome(table: &Table, name: &str, family: &Family) -> Result<OutcomeValues, ModelError> {
    let column = find_column(table, name)?;
    if table.nrows() == 0 {
        return Err(ModelError::Column {
            column: name.to_string(),
            message: format!("table `{}` has no rows to fit the model to", table.name),
        });
    }
    match (&column.data, family) {
        (ColumnData::Category { codes, levels }, Family::Levels | Family::Graded) => return read_levels(name, codes, levels),
        (ColumnData::Category { levels, .. }, _) => {
            return Err(ModelError::Column {
                column: name.to_string(),
                message: format!(
                    "the outcome is a category ({}), which goes with `family levels` (or leave the family \
                     line out), or `family graded` when its levels are ordered; `family {}` needs a numeric column",
                    levels.join(", "),
                    family.name()
                ),
            })
        }
        _ => {}
    }
    let kind = column.data.kind().name();
    let y = real_values(column, "the outcome")?;
    let place = |row: usize, message: String| ModelError::Value {
        table: table.name.clone(),
        row: row + 1,
        column: name.to_string(),
        message,
    };
    match family {
        Family::Normal => check_varies(&y, name).map(|_| OutcomeValues { y, trials: None, levels: None, cut_short: None, upper: None }),
        Family::Bernoulli => first_bad(&y, |v| v == 0.0 || v == 1.0)
            .map(|row| Err(place(row, format!("{} is not 0 or 1, which a bernoulli outcome must be", y[row]))))
            .unwrap_or(Ok(OutcomeValues { y, trials: None, levels: None, cut_short: None, upper: None })),
        Family::Poisson | Family::GammaPoisson => first_bad(&y, is_count)
            .map(|row| {
                let message = format!("{} is not a whole number ≥ 0, which a {} outcome must be", y[row], family.name());
                Err(place(row, message))
            })
            .unwrap_or(Ok(OutcomeValues { y, trials: None, levels: None, cut_short: None, upper: None })),
        Family::Binomial { trials } => read_binomial(table, name, y, trials),
        Family::Beta => first_bad(&y, |v| v > 0.0 && v < 1.0)
            .map(|row| {
                let hint = if y[row] == 0.0 || y[row] == 1.0 {
                    "a share of exactly 0 or 1 has no beta density: model the counts behind it with `family binomial \
                     out of <column>`"
                } else {
                    "write the outcome as a share of its whole, or choose another family"
                };
                Err(place(row, format!("{} is not strictly between 0 and 1, which a beta outcome (a share) must be; {hint}", y[row])))
            })
            .unwrap_or(Ok(OutcomeValues { y, trials: None, levels: None, cut_short: None, upper: None })),
        Family::Times { cut_short, came_by: None, .. } => read_times(table, name, y, cut_short.as_deref()),
        Family::Times { cut_short, came_by: Some(upper), .. } => read_bounded_times(table, name, y, cut_short.as_deref(), upper),
        Family::Levels | Family::Graded => Err(ModelError::Column {
            column: name.to_string(),
            message: format!(
                "`family {}` needs a category outcome, but this column is {kind}; declare it as a \
                 category in the table{} or choose another family",
                family.name(),
                if *family == Family::Graded { " (its levels lowest first)" } else { "" }
            ),
        }),
    }
}

/// A category outcome for the levels family: the level index of each row.
fn read_levels(name: &str, codes: &[u32], levels: &[String]) -> Result<OutcomeValues, ModelError> {
    if levels.len() < 2 {
        return Err(ModelError::Column {
            column: name.to_string(),
            message: format!(
                "the outcome has a single level ({}), so there is nothing to model",
                levels.join(", ")
            ),
        });
    }
    let y = codes.iter().map(|&c| f64::from(c)).collect();
    Ok(OutcomeValues { y, trials: None, levels: Some(levels.to_vec()), cut_short: None, upper: None })
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
    Ok(OutcomeValues { y, trials: Some(trials), levels: None, cut_short: None, upper: None })
}

/// Positive times, with each row's censoring from the `cut short by`
/// column: a yes/no column, or numbers that are all 0 or 1.
fn read_times(table: &Table, name: &str, y: Vec<f64>, cut_short: Option<&str>) -> Result<OutcomeValues, ModelError> {
    let place = |row: usize, column: &str, message: String| ModelError::Value {
        table: table.name.clone(),
        row: row + 1,
        column: column.to_string(),
        message,
    };
    if let Some(row) = first_bad(&y, |v| v > 0.0 && v.is_finite()) {
        let message = format!(
            "{} is not a positive time, which the outcome of a time family must be (a time of 0 has no density: \
             record when the event was first seen, or leave the row out with `keep where`)",
            y[row]
        );
        return Err(place(row, name, message));
    }
    let Some(column_name) = cut_short else {
        return Ok(OutcomeValues { y, trials: None, levels: None, cut_short: None, upper: None });
    };
    let column = find_column(table, column_name)?;
    let flags = match &column.data {
        ColumnData::Binary(values) => values.clone(),
        ColumnData::Category { levels, .. } => {
            return Err(ModelError::Column {
                column: column_name.to_string(),
                message: format!(
                    "the column after `cut short by` must say yes/no (or 1/0) per row, but it is a category ({}); \
                     declare it as binary in the table",
                    levels.join(", ")
                ),
            })
        }
        _ => {
            let values = real_values(column, "the cut-short column")?;
            if let Some(row) = first_bad(&values, |v| v == 0.0 || v == 1.0) {
                let message = format!("{} is not 0 or 1 (yes: the follow-up ended before the event)", values[row]);
                return Err(place(row, column_name, message));
            }
            values.iter().map(|&v| v == 1.0).collect()
        }
    };
    if !flags.contains(&false) {
        return Err(ModelError::Column {
            column: column_name.to_string(),
            message: "every row's follow-up was cut short, so no event was seen and the times say nothing about \
                      when events happen"
                .into(),
        });
    }
    Ok(OutcomeValues { y, trials: None, levels: None, cut_short: Some(flags), upper: None })
}

/// Times known between two bounds: the outcome is each row's lower bound
/// (0 or more: the last time its event had not come, 0 when it may have
/// come from the start), `upper` the time by which it had come — equal to
/// the outcome for an event seen at that time. Rows the `cut short by`
/// column marks are cut short at their outcome time and their upper bound
/// is not read. Errors name the first offending row and its column.
fn read_bounded_times(table: &Table, name: &str, y: Vec<f64>, cut_short: Option<&str>, upper: &str) -> Result<OutcomeValues, ModelError> {
    let place = |row: usize, column: &str, message: String| ModelError::Value {
        table: table.name.clone(),
        row: row + 1,
        column: column.to_string(),
        message,
    };
    if let Some(row) = first_bad(&y, |v| v >= 0.0 && v.is_finite()) {
        let message = format!("{} is a negative time; with `came by {upper}` the outcome is the last time the event had not come, 0 or more", y[row]);
        return Err(place(row, name, message));
    }
    let bounds = real_values(find_column(table, upper)?, "the `came by` column")?;
    let flags = match cut_short {
        Some(_) => read_times(table, name, y.iter().map(|&v| v.max(f64::MIN_POSITIVE)).collect(), cut_short)?.cut_short,
        None => None,
    };
    let cut = |i: usize| flags.as_ref().is_some_and(|c| c[i]);
    for (i, (&lower, &top)) in y.iter().zip(&bounds).enumerate() {
        if cut(i) {
            if lower == 0.0 {
                return Err(place(i, name, "0 is not a time a row can be cut short at: its follow-up ended before it began".into()));
            }
            continue;
        }
        if !(top.is_finite() && top >= lower) {
            let message = format!(
                "{top} is below the row's {name} {lower}: the time by which the event came cannot come before the last \
                 time it had not (equal times are an event seen then)"
            );
            return Err(place(i, upper, message));
        }
        if top == 0.0 {
            return Err(place(i, upper, "0 is not a time by which an event can have come; times must be positive".into()));
        }
    }
    Ok(OutcomeValues { y, trials: None, levels: None, cut_short: flags, upper: Some(bounds) })
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
