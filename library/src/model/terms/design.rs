//! Evaluating term recipes on a table: the design matrix and the label,
//! prior group and scale of each of its columns.
//!
//! Labels (documented for users in [`crate::model`]) read as words: the
//! column, then the coefficient's role, then a level in square brackets or
//! a number. `intercept`; `rootstock[dwarf]` (intercept of a level);
//! `soil[sandy vs loam]` (offset of a level from the first level);
//! `girth slope`; `girth slope[dwarf]` (slope within a level);
//! `day power 2` (coefficient of the squared standardised day);
//! `age spline 3` (weight of B-spline function 3); for a pooled group
//! `block spread` and `block departure[B1]`. Column names hold no
//! spaces, so a label with a role word never equals a column-based one.

use nalgebra::DMatrix;

use crate::table::Table;

use super::super::columns::{category_levels, find_column, real_values};
use super::super::error::ModelError;
use super::super::prior::PriorGroup;
use super::groups::{GroupLayout, GroupTerm};
use super::recipe::TermRecipe;

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
    /// level (`block spread`, `block departure[B1]`, …).
    ///
    /// A group with a varying slope of `girth` goes on with the slope's
    /// spread, its departures and the correlation: `block girth spread`,
    /// `block girth departure[B1]`, …, `block correlation[intercept, girth]`.
    pub fn labels(&self) -> Vec<String> {
        let mut labels: Vec<String> = std::iter::once(group_spread_label(&self.column))
            .chain(self.levels.iter().map(|l| format!("{} {DEPARTURE}[{l}]", self.column)))
            .collect();
        if let Some(slope) = &self.slope {
            let prefix = format!("{} {}", self.column, slope.column);
            labels.push(group_spread_label(&prefix));
            labels.extend(self.levels.iter().map(|l| format!("{prefix} {DEPARTURE}[{l}]")));
            labels.push(format!("{} {CORRELATION}[intercept, {}]", self.column, slope.column));
        }
        labels
    }

    /// Labels of the group's unconstrained parameters: `log(block spread)`,
    /// then the departures (centred), the level means when the group is
    /// sampled `around_intercept` (`intercept + block departure[B1]`), or
    /// the departures' standard scores (`block departure[B1] / block spread`,
    /// non-centred).
    pub fn unconstrained_labels(&self, around_intercept: bool) -> Vec<String> {
        let spread = group_spread_label(&self.column);
        let mut labels = self.labels();
        if let Some(slope) = &self.slope {
            // Standard scores of the Cholesky form, or the departures
            // (around the population's intercept and slope) when centred.
            let n = self.levels.len();
            let slope_spread = labels[1 + n].clone();
            let correlation = labels[2 + 2 * n].clone();
            let population_slope = slope_label(&slope.column);
            for label in &mut labels[1..=n] {
                match self.layout {
                    GroupLayout::NonCentred => *label = format!("{label} / {spread}"),
                    GroupLayout::Centred if around_intercept => *label = format!("intercept + {label}"),
                    GroupLayout::Centred => {}
                }
            }
            for label in &mut labels[2 + n..2 + 2 * n] {
                match self.layout {
                    GroupLayout::NonCentred => *label = format!("{label}: {} score", slope.column),
                    GroupLayout::Centred if around_intercept => *label = format!("{population_slope} + {label}"),
                    GroupLayout::Centred => {}
                }
            }
            labels[0] = format!("log({spread})");
            labels[1 + n] = format!("log({slope_spread})");
            labels[2 + 2 * n] = format!("atanh({correlation})");
            return labels;
        }
        labels[0] = format!("log({spread})");
        for label in &mut labels[1..] {
            match self.layout {
                GroupLayout::NonCentred => *label = format!("{label} / {spread}"),
                GroupLayout::Centred if around_intercept => *label = format!("intercept + {label}"),
                GroupLayout::Centred => {}
            }
        }
        labels
    }
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
