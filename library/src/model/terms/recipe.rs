//! Planning terms: from a term of the specification and the data, the fixed
//! recipe (levels, centre, scale, knots) that turns any table with the same
//! columns into design columns.
//!
//! Recipes are planned once, on the data the model is fitted to, and reused
//! unchanged for new data, so predictions use the same centring and knots.

use crate::table::Table;

use super::super::columns::{category_levels, find_column, real_values};
use super::super::error::ModelError;
use super::super::prior::short_number;
use super::super::spec::{ModelSpec, TermSpec, POWERS, STEPS};
use super::super::steps::{whole_effect_label, DEFAULT_STEP_CONCENTRATION};
use super::super::spline::{quantile_knots, BSplineBasis};

/// Degree of spline bases (cubic).
pub const SPLINE_DEGREE: usize = 3;

/// How one term becomes design columns.
#[derive(Debug, Clone, PartialEq)]
pub enum TermRecipe {
    /// A column of ones (when no category term gives per-level intercepts).
    Intercept,
    /// One indicator per level of the first category term (index coding).
    LevelIntercepts { column: String, levels: Vec<String> },
    /// Indicators for every level but the first, of a later category term.
    LevelOffsets { column: String, levels: Vec<String> },
    /// `x − centre`.
    Slope { column: String, centre: f64, scale: f64 },
    /// `(x − centre) · [c = level]`, one column per level of `c`.
    SlopePer { column: String, centre: f64, scale: f64, by: String, levels: Vec<String> },
    /// `z^1 … z^degree` with `z = (x − centre) / scale`; `power_scales`
    /// are the sample sds of the powers on the fitted data.
    Powers { column: String, centre: f64, scale: f64, degree: usize, power_scales: Vec<f64> },
    /// B-spline basis functions 2..=k of `x` (the first is dropped).
    Spline { column: String, basis: BSplineBasis },
    /// `[c ≥ level]` for every level of ordered category `c` after the
    /// lowest: the steps of a `steps(c)` term ([`crate::model::steps`]).
    Steps { column: String, levels: Vec<String> },
}

/// Plan every term of `spec` on `table`; also returns the notes that explain
/// the choices made (coding, centres, knots).
pub fn plan_terms(spec: &ModelSpec, table: &Table) -> Result<(Vec<TermRecipe>, Vec<String>), ModelError> {
    let mut planner = Planner { spec, table, recipes: Vec::new(), notes: Vec::new(), used: Vec::new() };
    for term in &spec.terms {
        planner.plan(term).map_err(|e| term_error(term, e))?;
    }
    let has_level_intercepts = planner.recipes.iter().any(|r| matches!(r, TermRecipe::LevelIntercepts { .. }));
    if !has_level_intercepts {
        planner.recipes.insert(0, TermRecipe::Intercept);
    }
    Ok((planner.recipes, planner.notes))
}

fn term_error(term: &TermSpec, error: ModelError) -> ModelError {
    match error {
        ModelError::Syntax { message } => ModelError::Term { term: term.to_string(), message },
        other => other,
    }
}

struct Planner<'a> {
    spec: &'a ModelSpec,
    table: &'a Table,
    recipes: Vec<TermRecipe>,
    notes: Vec<String>,
    used: Vec<String>,
}

impl Planner<'_> {
    fn plan(&mut self, term: &TermSpec) -> Result<(), ModelError> {
        self.claim(term)?;
        match term {
            TermSpec::Column(name) => self.plan_column(name),
            TermSpec::Per { predictor, by } => self.plan_per(predictor, by),
            TermSpec::Powers { predictor, degree } => self.plan_powers(predictor, *degree),
            TermSpec::Spline { predictor, functions, knots } => {
                self.plan_spline(predictor, *functions, knots.as_deref())
            }
            TermSpec::Steps { predictor, order } => self.plan_steps(predictor, order.as_deref()),
            // Planned as a group (`terms::groups`), not as design columns.
            TermSpec::Pooled { .. } => Ok(()),
        }
    }

    /// Each column enters at most one term, and never the outcome.
    fn claim(&mut self, term: &TermSpec) -> Result<(), ModelError> {
        let name = term.predictor();
        if name == self.spec.outcome {
            return Err(ModelError::syntax(format!("`{name}` is the outcome; it cannot also be a predictor")));
        }
        if self.used.iter().any(|u| u == name) {
            return Err(ModelError::syntax(format!(
                "`{name}` already enters the model through another term; keep one term per column"
            )));
        }
        self.used.push(name.to_string());
        Ok(())
    }

    fn plan_column(&mut self, name: &str) -> Result<(), ModelError> {
        let column = find_column(self.table, name)?;
        if let Ok((_, levels)) = category_levels(column, "") {
            return Ok(self.plan_category(name, levels.to_vec()));
        }
        let (centre, scale) = self.centre_and_scale(name)?;
        self.recipes.push(TermRecipe::Slope { column: name.to_string(), centre, scale });
        Ok(())
    }

    fn plan_category(&mut self, name: &str, levels: Vec<String>) {
        let first = !self.recipes.iter().any(|r| matches!(r, TermRecipe::LevelIntercepts { .. }));
        if first {
            self.notes.push(format!(
                "{name}: one intercept per level ({}); no separate overall intercept",
                levels.join(", ")
            ));
            self.recipes.push(TermRecipe::LevelIntercepts { column: name.to_string(), levels });
        } else {
            self.notes.push(format!(
                "{name}: offsets of each level from the first level, {}, which is the reference",
                levels[0]
            ));
            self.recipes.push(TermRecipe::LevelOffsets { column: name.to_string(), levels });
        }
    }

    /// The levels of an ordered category, lowest first: as listed in the
    /// term (every level of the column once), else the table's stated
    /// order; a column whose levels only came in order of appearance is
    /// refused.
    fn plan_steps(&mut self, name: &str, listed: Option<&[String]>) -> Result<(), ModelError> {
        let column = find_column(self.table, name)?;
        let (_, present) = category_levels(column, &format!("the column of `{STEPS}({name})`"))?;
        let levels = match listed {
            Some(listed) => {
                let missing: Vec<&str> = present.iter().filter(|l| !listed.contains(l)).map(String::as_str).collect();
                let extra: Vec<&str> = listed.iter().filter(|l| !present.contains(l)).map(String::as_str).collect();
                if !missing.is_empty() || !extra.is_empty() {
                    return Err(ModelError::Column {
                        column: name.to_string(),
                        message: format!(
                            "the levels listed in `{STEPS}({name}: …)` must be the column's levels, each once ({}){}{}",
                            present.join(", "),
                            if missing.is_empty() { String::new() } else { format!("; not listed: {}", missing.join(", ")) },
                            if extra.is_empty() { String::new() } else { format!("; not in the column: {}", extra.join(", ")) },
                        ),
                    });
                }
                listed.to_vec()
            }
            None if column.ordered => present.to_vec(),
            None => {
                return Err(ModelError::Column {
                    column: name.to_string(),
                    message: format!(
                        "`{STEPS}({name})` needs the levels' order, but they are in order of first appearance ({}); declare \
                         them lowest first in the table cell, `{name}: category({})`, or list them in the term, \
                         `{STEPS}({name}: {})`",
                        present.join(", "),
                        present.join(", "),
                        present.join(", ")
                    ),
                });
            }
        };
        if levels.len() < 3 {
            return Err(ModelError::Column {
                column: name.to_string(),
                message: format!(
                    "has {} levels, a single step at most; `{STEPS}(…)` shares an effect over two steps or more, so list \
                     `{name}` as a plain term",
                    levels.len()
                ),
            });
        }
        self.notes.push(format!(
            "{STEPS}({name}): {} in that order; the whole effect from {} to {}, `{}`, is shared out over the {} steps, \
             every step of its sign, the shares with the prior dirichlet({}); the estimates are each step's effect",
            levels.join(" < "),
            levels[0],
            levels[levels.len() - 1],
            whole_effect_label(name),
            levels.len() - 1,
            short_number(self.spec.share_concentration(name).unwrap_or(DEFAULT_STEP_CONCENTRATION))
        ));
        self.recipes.push(TermRecipe::Steps { column: name.to_string(), levels });
        Ok(())
    }

    fn plan_per(&mut self, predictor: &str, by: &str) -> Result<(), ModelError> {
        let x_column = find_column(self.table, predictor)?;
        if category_levels(x_column, "").is_ok() {
            return Err(ModelError::Column {
                column: predictor.to_string(),
                message: format!(
                    "a category has no slope, so `{predictor} per {by}` cannot be built; \
                     list `{predictor}` as a term on its own for one intercept per level"
                ),
            });
        }
        let (_, levels) = category_levels(find_column(self.table, by)?, "the column after `per`")?;
        let levels = levels.to_vec();
        let (centre, scale) = self.centre_and_scale(predictor)?;
        self.recipes.push(TermRecipe::SlopePer {
            column: predictor.to_string(),
            centre,
            scale,
            by: by.to_string(),
            levels,
        });
        Ok(())
    }

    fn plan_powers(&mut self, predictor: &str, degree: usize) -> Result<(), ModelError> {
        let x = self.numeric(predictor, "a powers term")?;
        if distinct_count(&x) <= degree {
            return Err(ModelError::syntax(format!(
                "{predictor} has only {} distinct values, too few for powers up to {degree}; lower the highest power",
                distinct_count(&x)
            )));
        }
        let (centre, scale) = mean_and_sd(&x);
        check_spread(predictor, scale)?;
        let power_scales = (1..=degree)
            .map(|j| mean_and_sd(&x.iter().map(|v| ((v - centre) / scale).powi(j as i32)).collect::<Vec<_>>()).1)
            .collect();
        self.notes.push(format!(
            "{POWERS}({predictor}, {degree}): raw powers 1 to {degree} of z = ({predictor} − {}) / {} \
             (centred and scaled by its mean and sd, not orthogonalised)",
            short_number(centre),
            short_number(scale)
        ));
        self.recipes.push(TermRecipe::Powers { column: predictor.to_string(), centre, scale, degree, power_scales });
        Ok(())
    }

    fn plan_spline(&mut self, predictor: &str, functions: usize, listed: Option<&[f64]>) -> Result<(), ModelError> {
        let x = self.numeric(predictor, "a spline")?;
        let minimum_functions = SPLINE_DEGREE + 1;
        if functions < minimum_functions {
            return Err(ModelError::syntax(format!(
                "a cubic spline needs at least {minimum_functions} basis functions, not {functions}"
            )));
        }
        let (lower, upper) = x.iter().fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| (a.min(v), b.max(v)));
        let interior = match listed {
            Some(k) => check_listed_knots(k, functions, lower, upper, predictor)?,
            None => check_quantile_knots(quantile_knots(&x, functions, SPLINE_DEGREE), lower, upper, predictor)?,
        };
        let knot_text: Vec<String> = interior.iter().map(|&k| short_number(k)).collect();
        self.notes.push(format!(
            "spline({predictor}, {functions}): cubic B-spline basis on [{}, {}] with interior knots [{}] ({}); \
             the first basis function is dropped because the intercepts already span the sum of all \
             functions, leaving {} weights; new values outside the range are held at the nearer end",
            short_number(lower),
            short_number(upper),
            knot_text.join(", "),
            if listed.is_some() { "as listed" } else { "at equally spaced quantiles" },
            functions - 1
        ));
        let basis = BSplineBasis::clamped(lower, upper, &interior, SPLINE_DEGREE);
        self.recipes.push(TermRecipe::Spline { column: predictor.to_string(), basis });
        Ok(())
    }

    fn numeric(&self, name: &str, role: &str) -> Result<Vec<f64>, ModelError> {
        let column = find_column(self.table, name)?;
        if category_levels(column, "").is_ok() {
            return Err(ModelError::Column {
                column: name.to_string(),
                message: format!("{role} needs a numeric column, but this is a category"),
            });
        }
        real_values(column, role)
    }

    /// Centre (the mean, or 0 with `centre off`) and sd of a numeric predictor.
    fn centre_and_scale(&mut self, name: &str) -> Result<(f64, f64), ModelError> {
        let x = self.numeric(name, "a slope")?;
        let (mean, sd) = mean_and_sd(&x);
        check_spread(name, sd)?;
        if self.spec.centre {
            self.notes.push(format!(
                "{name} centred at {} (its mean); intercepts are for that value",
                short_number(mean)
            ));
            Ok((mean, sd))
        } else {
            Ok((0.0, sd))
        }
    }
}

fn check_spread(name: &str, sd: f64) -> Result<(), ModelError> {
    if sd > 0.0 && sd.is_finite() {
        Ok(())
    } else {
        Err(ModelError::Column {
            column: name.to_string(),
            message: "has the same value in every row, so its effect cannot be learned; drop the term".into(),
        })
    }
}

fn check_listed_knots(k: &[f64], functions: usize, lower: f64, upper: f64, x: &str) -> Result<Vec<f64>, ModelError> {
    let wanted = functions - SPLINE_DEGREE - 1;
    if k.len() != wanted {
        return Err(ModelError::syntax(format!(
            "{functions} cubic basis functions need {wanted} interior knots, but {} are listed",
            k.len()
        )));
    }
    let increasing = k.windows(2).all(|w| w[0] < w[1]);
    let inside = k.iter().all(|&v| v > lower && v < upper);
    if !(increasing && inside) {
        return Err(ModelError::syntax(format!(
            "knots must increase and lie strictly inside the range of {x}, {} to {}",
            short_number(lower),
            short_number(upper)
        )));
    }
    Ok(k.to_vec())
}

fn check_quantile_knots(k: Vec<f64>, lower: f64, upper: f64, x: &str) -> Result<Vec<f64>, ModelError> {
    let increasing = k.windows(2).all(|w| w[0] < w[1]);
    let inside = k.iter().all(|&v| v > lower && v < upper);
    if increasing && inside {
        Ok(k)
    } else {
        Err(ModelError::syntax(format!(
            "{x} has too few distinct values for knots at its quantiles; use fewer basis functions \
             or list the knots"
        )))
    }
}

fn distinct_count(x: &[f64]) -> usize {
    let mut sorted = x.to_vec();
    sorted.sort_by(f64::total_cmp);
    sorted.dedup();
    sorted.len()
}

/// Mean and sample sd (divisor n − 1; 0 for fewer than two values).
pub fn mean_and_sd(x: &[f64]) -> (f64, f64) {
    let n = x.len() as f64;
    let mean = x.iter().sum::<f64>() / n;
    if x.len() < 2 {
        return (mean, 0.0);
    }
    let ss: f64 = x.iter().map(|v| (v - mean).powi(2)).sum();
    (mean, (ss / (n - 1.0)).sqrt())
}
