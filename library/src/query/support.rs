//! Pieces shared by the queries: summaries of per-draw values, per-draw
//! parameter rows, seed streams, and reading a stated value of a column.

use serde::Serialize;

use crate::draws::summary::summarise_values;
use crate::draws::{Draws, SummarySpec};
use crate::model::terms::TermRecipe;
use crate::model::{Family, Model};
use crate::table::{Column, ColumnData, Table};

use super::error::QueryError;

/// The summary of a contrast's per-draw values, computed last.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ContrastSummary {
    /// Mean of the per-draw values.
    pub mean: f64,
    /// Lower end of the central quantile interval.
    pub lower: f64,
    /// Upper end of the central quantile interval.
    pub upper: f64,
    /// Share of draws above zero.
    pub share_above_zero: f64,
    /// Share of draws below zero.
    pub share_below_zero: f64,
    /// Probability mass of the interval (0.9 by default).
    pub mass: f64,
}

impl ContrastSummary {
    /// Summarise per-draw values with a central interval of `mass`.
    pub fn of(values: &[f64], mass: f64) -> Result<ContrastSummary, QueryError> {
        let s = summarise_values(values, &SummarySpec { mass, hdi: false })?;
        let below = values.iter().filter(|&&v| v < 0.0).count() as f64 / values.len() as f64;
        Ok(ContrastSummary {
            mean: s.mean,
            lower: s.interval.lower,
            upper: s.interval.upper,
            share_above_zero: s.prob_positive,
            share_below_zero: below,
            mass,
        })
    }

    /// True when the interval excludes zero.
    pub fn excludes_zero(&self) -> bool {
        self.lower > 0.0 || self.upper < 0.0
    }
}

/// The words for an interval of `mass`, e.g. "90% central quantile interval".
pub fn interval_words(mass: f64) -> String {
    format!("{}% central quantile interval", short(mass * 100.0))
}

/// A number without trailing zeros.
pub fn short(x: f64) -> String {
    crate::model::prior::short_number(x)
}

/// One row of constrained parameters per draw, in the model's parameter order.
pub fn parameter_rows(model: &Model, draws: &Draws) -> Result<Vec<Vec<f64>>, QueryError> {
    let columns = model
        .parameter_names()
        .iter()
        .map(|name| draws.require(name))
        .collect::<Result<Vec<_>, _>>()?;
    Ok((0..draws.len()).map(|d| columns.iter().map(|c| c[d]).collect()).collect())
}

/// A seed for stream `a`, sub-stream `b` of `seed` (splitmix64 mixing), so
/// that streams do not depend on the order other streams are used in.
pub fn stream_seed(seed: u64, a: u64, b: u64) -> u64 {
    let mut z = seed ^ a.wrapping_mul(0x9E37_79B9_7F4A_7C15) ^ b.wrapping_mul(0xD1B5_4A32_D192_ED03);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// The column of values `model` drew for its outcome (a category's drawn
/// level indices turned back into labels), named `name`.
pub fn drawn_column(model: &Model, name: &str, drawn: Vec<f64>) -> Column {
    let data = match model.outcome_levels() {
        Some(levels) => ColumnData::Category { codes: drawn.iter().map(|&v| v as u32).collect(), levels: levels.to_vec() },
        None => ColumnData::Real(drawn),
    };
    Column::new(name, data)
}

/// A value a column is set to: a level of a category, or a number.
#[derive(Debug, Clone, PartialEq)]
pub enum Setting {
    Level { code: u32, levels: Vec<String> },
    Number(f64),
}

impl Setting {
    /// Read `text` as a value of `column` (a level label for a category,
    /// a number otherwise); `place` names the query for the error.
    pub fn read(column: &Column, text: &str, place: &str) -> Result<Setting, QueryError> {
        match &column.data {
            ColumnData::Category { levels, .. } => match levels.iter().position(|l| l == text) {
                Some(code) => Ok(Setting::Level { code: code as u32, levels: levels.clone() }),
                None => Err(QueryError::request(format!(
                    "{place}: `{text}` is not a level of {} (levels: {}); use one of those labels",
                    column.name,
                    levels.join(", ")
                ))),
            },
            _ => text.trim().parse::<f64>().ok().filter(|v| v.is_finite()).map(Setting::Number).ok_or_else(|| {
                QueryError::request(format!("{place}: `{text}` is not a number, and {} is numeric; give a number", column.name))
            }),
        }
    }

    /// The label or number as text.
    pub fn text(&self) -> String {
        match self {
            Setting::Level { code, levels } => levels[*code as usize].clone(),
            Setting::Number(x) => short(*x),
        }
    }

    /// A column of `n` copies of this value.
    pub fn column(&self, name: &str, n: usize) -> Column {
        let data = match self {
            Setting::Level { code, levels } => ColumnData::Category { codes: vec![*code; n], levels: levels.clone() },
            Setting::Number(x) => ColumnData::Real(vec![*x; n]),
        };
        Column::new(name, data)
    }
}

/// The column `name` of `table`, or an error naming the query.
pub fn require_column<'t>(table: &'t Table, name: &str, place: &str) -> Result<&'t Column, QueryError> {
    table.column(name).ok_or_else(|| {
        QueryError::request(format!(
            "{place}: table {} has no column `{name}` (its columns: {}); name a column of the table",
            table.name,
            table.column_names().join(", ")
        ))
    })
}

/// The mean of a numeric column (`None` for a category).
pub fn column_mean(column: &Column) -> Option<f64> {
    let x = column.data.as_reals()?;
    Some(x.iter().sum::<f64>() / x.len().max(1) as f64)
}

/// The columns a model reads from new rows: every predictor (and the
/// category behind per-level slopes), then the trials column of a binomial
/// model.
pub fn predictor_columns(model: &Model) -> Vec<String> {
    let mut names: Vec<String> = Vec::new();
    let mut add = |n: &str| {
        if !names.iter().any(|m| m == n) {
            names.push(n.to_string());
        }
    };
    for recipe in &model.recipes {
        match recipe {
            TermRecipe::Intercept => {}
            TermRecipe::LevelIntercepts { column, .. }
            | TermRecipe::LevelOffsets { column, .. }
            | TermRecipe::Slope { column, .. }
            | TermRecipe::Powers { column, .. }
            | TermRecipe::Spline { column, .. }
            | TermRecipe::Steps { column, .. } => add(column),
            TermRecipe::SlopePer { column, by, .. } => {
                add(column);
                add(by);
            }
        }
    }
    if let Family::Binomial { trials } = model.family() {
        add(trials);
    }
    names
}

/// `table` with column `column` replaced (or added).
pub fn with_column(table: &Table, column: Column) -> Table {
    let mut out = table.clone();
    match out.columns.iter_mut().find(|c| c.name == column.name) {
        Some(slot) => *slot = column,
        None => out.columns.push(column),
    }
    out
}
