//! What the draws of a `steps(c)` term say beyond the steps themselves
//! (`model::steps`): the whole effect from the lowest level to the
//! highest, each step's share of it, and the effect at every level
//! against the lowest — each computed per draw from the steps' draws and
//! summarised last.

use crate::draws::summary::{summarise_values, Summary, SummarySpec};
use crate::draws::Draws;
use crate::model::steps::{share_label, step_label, whole_effect_label, StepTerm};
use crate::model::Model;

use super::error::QueryError;

/// The draws of each step's effect of `term`, lowest step first.
fn step_draws<'d>(term: &StepTerm, draws: &'d Draws) -> Result<Vec<&'d [f64]>, QueryError> {
    term.levels
        .windows(2)
        .map(|w| draws.require(&step_label(&term.column, &w[0], &w[1])).map_err(|e| QueryError::request(e.to_string())))
        .collect()
}

/// Per steps term of `model`: the whole effect's draws under its label
/// (`grade steps`), then each share's (`grade share[none to mild]`), for
/// the estimates table.
pub fn derived_step_draws(model: &Model, draws: &Draws) -> Result<Vec<(String, Vec<f64>)>, QueryError> {
    let mut out = Vec::new();
    for term in model.step_terms() {
        let steps = step_draws(term, draws)?;
        let whole: Vec<f64> = (0..draws.len()).map(|i| steps.iter().map(|s| s[i]).sum()).collect();
        for (w, step) in term.levels.windows(2).zip(&steps) {
            let shares = step.iter().zip(&whole).map(|(s, t)| s / t).collect();
            out.push((share_label(&term.column, &w[0], &w[1]), shares));
        }
        out.insert(out.len() - steps.len(), (whole_effect_label(&term.column), whole));
    }
    Ok(out)
}

/// One level of an ordered category: its effect against the lowest level
/// (0 at the lowest), summarised.
#[derive(Debug, Clone, PartialEq, serde::Serialize)]
pub struct LevelEffect {
    pub level: String,
    pub mean: f64,
    pub lower: f64,
    pub upper: f64,
}

/// The effect of each level of `column`'s steps term against its lowest
/// level, per draw the sum of the steps below it, with a central interval
/// of `mass`.
pub fn level_effects(model: &Model, draws: &Draws, column: &str, mass: f64) -> Result<Vec<LevelEffect>, QueryError> {
    let terms = model.step_terms();
    let term = terms.iter().find(|t| t.column == column).ok_or_else(|| {
        let named: Vec<&str> = terms.iter().map(|t| t.column.as_str()).collect();
        QueryError::request(if named.is_empty() {
            format!("model {} has no steps(…) term; its outcome line needs one, such as `steps({column})`", model.name())
        } else {
            format!("model {} has no steps term of `{column}`; its steps terms are of {}", model.name(), named.join(", "))
        })
    })?;
    let steps = step_draws(term, draws)?;
    let spec = SummarySpec { mass, hdi: false };
    let mut running = vec![0.0; draws.len()];
    let mut out = vec![LevelEffect { level: term.levels[0].clone(), mean: 0.0, lower: 0.0, upper: 0.0 }];
    for (level, step) in term.levels[1..].iter().zip(&steps) {
        running.iter_mut().zip(step.iter()).for_each(|(r, s)| *r += s);
        let Summary { mean, interval, .. } = summarise_values(&running, &spec).map_err(|e| QueryError::request(e.to_string()))?;
        out.push(LevelEffect { level: level.clone(), mean, lower: interval.lower, upper: interval.upper });
    }
    Ok(out)
}
