//! Evaluating term recipes on a table: the design matrix and the label,
//! prior group and scale of each of its columns.
//!
//! Labels (documented for users in [`crate::model`]) read as words: the
//! column, then the coefficient's role, then a level in square brackets or
//! a number. `intercept`; `rootstock[dwarf]` (intercept of a level);
//! `soil[sandy vs loam]` (offset of a level from the first level);
//! `girth slope`; `girth slope[dwarf]` (slope within a level);
//! `day power 2` (coefficient of the squared standardised day);
//! `age spline 3` (weight of B-spline function 3); `grade step[none to
//! mild]` (the effect of one step of an ordered category); for a pooled group
//! `block spread` and `block departure[B1]`. Column names hold no
//! spaces, so a label with a role word never equals a column-based one.

use nalgebra::DMatrix;

use crate::table::Table;

use super::super::columns::{category_levels, find_column, real_values};
use super::super::error::ModelError;
use super::super::prior::PriorGroup;
use super::groups::GroupTerm;
use super::recipe::TermRecipe;
use super::super::steps::step_label;

/// The role word of a slope's label.
pub const SLOPE: &str = "slope";
/// The role word of a power's label.
pub const POWER: &str = "power";
/// The role word of a spline weight's label.
pub const SPLINE: &str = "spline";

/// The role word of a pooled group's departures.
pub const DEPARTURE: &str = "departure";
/// The word after a pooled group's column in its spread's label.
pub const GROUP_SPREAD: &str = "spread";
/// The word of a pooled group's intercept–slope correlation label.
pub const CORRELATION: &str = "correlation";

/// Whether `label` names a spread — the residual `spread` or a pooled
/// group's `block spread` (also behind a joint model's `node: ` prefix) —
/// a parameter that cannot be negative.
pub fn is_spread_label(label: &str) -> bool {
    label == GROUP_SPREAD || label.ends_with(&format!(" {GROUP_SPREAD}"))
}

/// The label of the spread of pooled group `column`: `block spread`.
pub fn group_spread_label(column: &str) -> String {
    format!("{column} {GROUP_SPREAD}")
}

impl GroupTerm {
    /// Labels of the group's parameters: its spread, then one departure per
    /// level (`block spread`, `block departure[B1]`, …); a category
    /// outcome's group starts each with its outcome level's prefix
    /// (`form[shrub vs herb]: block spread`).
    ///
    /// A group with varying slopes goes on with each slope's spread and
    /// departures (`block girth spread`, `block girth departure[B1]`, …),
    /// then the correlations of its effects, row by row of the lower
    /// triangle: `block correlation[intercept, girth]`, and with a second
    /// slope `block correlation[intercept, age]`,
    /// `block correlation[girth, age]`.
    pub fn labels(&self) -> Vec<String> {
        let mut labels: Vec<String> = std::iter::once(group_spread_label(&self.column))
            .chain(self.levels.iter().map(|l| format!("{} {DEPARTURE}[{l}]", self.column)))
            .collect();
        for slope in &self.slopes {
            let prefix = format!("{} {}", self.column, slope.column);
            labels.push(group_spread_label(&prefix));
            labels.extend(self.levels.iter().map(|l| format!("{prefix} {DEPARTURE}[{l}]")));
        }
        let effects: Vec<&str> = std::iter::once("intercept").chain(self.slopes.iter().map(|s| s.column.as_str())).collect();
        for i in 1..effects.len() {
            for j in 0..i {
                labels.push(correlation_label(&self.column, effects[j], effects[i]));
            }
        }
        let prefix = self.label_prefix();
        if !prefix.is_empty() {
            labels.iter_mut().for_each(|l| l.insert_str(0, prefix));
        }
        labels
    }

    /// Labels of the group's unconstrained parameters: `log(block spread)`,
    /// then the departures (centred), the level means when the group is
    /// sampled `around_intercept` (`intercept + block departure[B1]`), or
    /// the departures' standard scores (`block departure[B1] / block spread`,
    /// non-centred). A slope's run is alike (`girth slope + block girth
    /// departure[B1]` around the population slope; `block girth
    /// departure[B1]: girth score` for the standard score that the Cholesky
    /// factor mixes into it), and each correlation's coordinate is the
    /// `atanh` of the partial correlation that stands for it
    /// (`model::family::correlated`): the correlation itself for a pair
    /// with the intercept, `atanh(block correlation[girth, age] given
    /// intercept)` for a later pair.
    pub fn unconstrained_labels(&self, around_intercept: bool) -> Vec<String> {
        let mut labels = self.labels();
        let n = self.levels.len();
        let effects: Vec<Option<&str>> = std::iter::once(None).chain(self.slopes.iter().map(|s| Some(s.column.as_str()))).collect();
        for (e, effect) in effects.iter().enumerate() {
            let at = e * (1 + n);
            let spread = labels[at].clone();
            for label in &mut labels[at + 1..at + 1 + n] {
                let centred = e < self.layout.centred_effects(effects.len());
                *label = match (centred, effect) {
                    (false, None) => format!("{label} / {spread}"),
                    (false, Some(x)) => format!("{label}: {x} score"),
                    (true, None) if around_intercept => format!("intercept + {label}"),
                    (true, Some(x)) if around_intercept => format!("{} + {label}", slope_label(x)),
                    (true, _) => label.clone(),
                };
            }
            labels[at] = format!("log({spread})");
        }
        let mut at = effects.len() * (1 + n);
        for i in 1..effects.len() {
            for j in 0..i {
                let label = &mut labels[at];
                *label = match j {
                    0 => format!("atanh({label})"),
                    _ => format!("atanh({label} given {})", names_of(&effects[..j]).join(", ")),
                };
                at += 1;
            }
        }
        labels
    }
}

/// The names of a group's effects (`intercept` for `None`).
fn names_of(effects: &[Option<&str>]) -> Vec<String> {
    effects.iter().map(|e| e.unwrap_or("intercept").to_string()).collect()
}

/// The label of the correlation of effects `first` and `second` (each
/// `intercept` or a slope's column) of pooled group `column`:
/// `block correlation[intercept, girth]`.
pub fn correlation_label(column: &str, first: &str, second: &str) -> String {
    format!("{column} {CORRELATION}[{first}, {second}]")
}

/// The label of the slope of real column `column`: `girth slope`.
pub fn slope_label(column: &str) -> String {
    format!("{column} {SLOPE}")
}

/// The unit of a slope of `column`: outcome unit per predictor unit.
pub fn slope_unit(outcome_unit: Option<&str>, predictor_unit: Option<&str>, column: &str) -> Option<String> {
    match (outcome_unit, predictor_unit) {
        (Some(o), Some(p)) => Some(format!("{o} per {p}")),
        (Some(o), None) => Some(format!("{o} per unit of {column}")),
        (None, Some(p)) => Some(format!("per {p}")),
        (None, None) => None,
    }
}

impl TermRecipe {
    /// Labels of the term's coefficients.
    pub fn labels(&self) -> Vec<String> {
        match self {
            TermRecipe::Intercept => vec!["intercept".to_string()],
            TermRecipe::LevelIntercepts { column, levels } => {
                levels.iter().map(|l| format!("{column}[{l}]")).collect()
            }
            TermRecipe::LevelOffsets { column, levels } => {
                levels[1..].iter().map(|l| format!("{column}[{l} vs {}]", levels[0])).collect()
            }
            TermRecipe::Slope { column, .. } => vec![slope_label(column)],
            TermRecipe::SlopePer { column, levels, .. } => {
                levels.iter().map(|l| format!("{}[{l}]", slope_label(column))).collect()
            }
            TermRecipe::Powers { column, degree, .. } => (1..=*degree).map(|j| format!("{column} {POWER} {j}")).collect(),
            TermRecipe::Spline { column, basis } => (2..=basis.len()).map(|j| format!("{column} {SPLINE} {j}")).collect(),
            TermRecipe::Steps { column, levels } => levels.windows(2).map(|w| step_label(column, &w[0], &w[1])).collect(),
        }
    }

    /// The unit of each coefficient of the term on an identity link, given
    /// the outcome's unit and the table (for a slope's predictor unit).
    /// Intercepts, level offsets, power coefficients (of a standardised,
    /// unitless column) and spline weights (of unitless basis functions)
    /// are in the outcome's unit; a slope is outcome unit per predictor
    /// unit (`kg per cm`, or `kg per unit of age` when age has none, or
    /// `per cm` when the outcome has none). `None` where no unit is known.
    pub fn units(&self, outcome_unit: Option<&str>, table: &Table) -> Vec<Option<String>> {
        let n = self.labels().len();
        match self {
            TermRecipe::Slope { column, .. } | TermRecipe::SlopePer { column, .. } => {
                vec![slope_unit(outcome_unit, table.column(column).and_then(|c| c.unit.as_deref()), column); n]
            }
            _ => vec![outcome_unit.map(str::to_string); n],
        }
    }

    /// The prior group of the term's coefficients.
    pub fn group(&self) -> PriorGroup {
        match self {
            TermRecipe::Intercept | TermRecipe::LevelIntercepts { .. } => PriorGroup::Intercepts,
            TermRecipe::Spline { .. } => PriorGroup::Weights,
            _ => PriorGroup::Slopes,
        }
    }

    /// The sd of the predictor behind each coefficient on the fitted data
    /// (1 for indicators and basis functions), for scaling default priors.
    pub fn scales(&self) -> Vec<f64> {
        match self {
            TermRecipe::Slope { scale, .. } => vec![*scale],
            TermRecipe::SlopePer { scale, levels, .. } => vec![*scale; levels.len()],
            TermRecipe::Powers { power_scales, .. } => power_scales.clone(),
            other => vec![1.0; other.labels().len()],
        }
    }

    /// The term's design columns for every row of `table`.
    pub fn columns(&self, table: &Table) -> Result<Vec<Vec<f64>>, ModelError> {
        let n = table.nrows();
        Ok(match self {
            TermRecipe::Intercept => vec![vec![1.0; n]],
            TermRecipe::LevelIntercepts { column, levels } => indicators(table, column, levels, 0)?,
            TermRecipe::LevelOffsets { column, levels } => indicators(table, column, levels, 1)?,
            TermRecipe::Slope { column, centre, .. } => vec![centred(table, column, *centre)?],
            TermRecipe::SlopePer { column, centre, by, levels, .. } => {
                let x = centred(table, column, *centre)?;
                indicators(table, by, levels, 0)?
                    .into_iter()
                    .map(|ind| ind.iter().zip(&x).map(|(a, b)| a * b).collect())
                    .collect()
            }
            TermRecipe::Powers { column, centre, scale, degree, .. } => {
                let z: Vec<f64> = centred(table, column, *centre)?.iter().map(|v| v / scale).collect();
                (1..=*degree).map(|j| z.iter().map(|v| v.powi(j as i32)).collect()).collect()
            }
            TermRecipe::Spline { column, basis } => {
                let (lower, upper) = basis.range();
                let x = real_values(find_column(table, column)?, "a spline")?;
                let rows: Vec<Vec<f64>> = x.iter().map(|v| basis.row(v.clamp(lower, upper))).collect();
                (1..basis.len()).map(|j| rows.iter().map(|r| r[j]).collect()).collect()
            }
            TermRecipe::Steps { column, levels } => {
                let mut at_or_above = indicators(table, column, levels, 1)?;
                for k in (0..at_or_above.len().saturating_sub(1)).rev() {
                    let (lower, upper) = at_or_above.split_at_mut(k + 1);
                    lower[k].iter_mut().zip(&upper[0]).for_each(|(a, b)| *a += b);
                }
                at_or_above
            }
        })
    }
}

/// The design matrix of `recipes` on `table` (rows × coefficients).
pub fn design_matrix(recipes: &[TermRecipe], table: &Table) -> Result<DMatrix<f64>, ModelError> {
    let mut columns = Vec::new();
    for recipe in recipes {
        columns.extend(recipe.columns(table)?);
    }
    let n = table.nrows();
    Ok(DMatrix::from_fn(n, columns.len(), |i, j| columns[j][i]))
}

fn centred(table: &Table, column: &str, centre: f64) -> Result<Vec<f64>, ModelError> {
    let x = real_values(find_column(table, column)?, "a slope")?;
    Ok(x.into_iter().map(|v| v - centre).collect())
}

/// 0/1 columns for `levels[skip..]` of category `column`, matching the
/// table's labels to the planned levels by name.
fn indicators(table: &Table, column: &str, levels: &[String], skip: usize) -> Result<Vec<Vec<f64>>, ModelError> {
    let found = find_column(table, column)?;
    let (codes, table_levels) = category_levels(found, "this term")?;
    let mapping: Vec<Option<usize>> =
        table_levels.iter().map(|label| levels.iter().position(|p| p == label)).collect();
    let mut out = vec![vec![0.0; codes.len()]; levels.len() - skip];
    for (row, &code) in codes.iter().enumerate() {
        let level = mapping[code as usize].ok_or_else(|| ModelError::Value {
            table: table.name.clone(),
            row: row + 1,
            column: column.to_string(),
            message: format!(
                "level `{}` was not in the data the model was built on (levels: {}); predict for known levels only",
                table_levels[code as usize],
                levels.join(", ")
            ),
        })?;
        if level >= skip {
            out[level - skip][row] = 1.0;
        }
    }
    Ok(out)
}
