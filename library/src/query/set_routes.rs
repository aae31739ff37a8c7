//! The graph's other adjustment sets as routes of their own, for
//! `compare routes`.
//!
//! An effect that one set identifies is often identified by several: the
//! backdoor criterion for a total effect, the single-door criterion for a
//! direct one, each lists every minimal set. The sets condition on
//! different columns, so when the graph is right their estimates differ by
//! Monte Carlo and sampling error only, and a difference beyond that points
//! at a missing arrow or common cause. The answer's own route takes the
//! first set; this module fits the next ones, at most [`MOST_OTHER_SETS`]
//! (each is a full fit), with the model the answer would build for it and
//! the answer's own two settings.

use std::sync::atomic::AtomicBool;

use crate::graph::EffectKind;
use crate::infer::fit::{fit_model, Method};
use crate::infer::nuts::Progress;
use crate::table::Table;

use super::answer::{comparisons, set_model, AskOptions, EffectAnswer, SetModel};
use super::contrast::{level_contrasts, Contrast};
use super::error::QueryError;

/// Most further sets fitted as routes; the others are named, not fitted.
pub const MOST_OTHER_SETS: usize = 3;

/// One further set's estimate.
pub struct SetRoute {
    pub set: Vec<String>,
    /// The model body, lines joined by `; `.
    pub model_text: String,
    pub contrast: Contrast,
    pub warnings: Vec<String>,
}

/// The further sets of `answer` (after its first) fitted and contrasted at
/// `settings` (`(to, from)` as written), with a note naming the sets left
/// out when there are more than [`MOST_OTHER_SETS`].
#[allow(clippy::too_many_arguments)]
pub fn other_set_routes(
    answer: &EffectAnswer,
    table: &Table,
    x: &str,
    y: &str,
    kind: EffectKind,
    settings: (&str, &str),
    method: &Method,
    cancel: &AtomicBool,
    mass: f64,
    progress: &(dyn Fn(Progress) + Sync),
) -> Result<(Vec<SetRoute>, Option<String>), QueryError> {
    let sets = answer.identification.adjustment_sets.get(1..).unwrap_or_default();
    let options = AskOptions { settings: Some((settings.0.to_string(), settings.1.to_string())), ..AskOptions::default() };
    let kind_words = if kind == EffectKind::Total { "total" } else { "direct" };
    let mut routes = Vec::new();
    for (i, set) in sets.iter().take(MOST_OTHER_SETS).enumerate() {
        let name = format!("{kind_words}_{x}_on_{y}_set{}", i + 2);
        let place = format!("compare routes: the set {}", words(set));
        let SetModel { model, lines, .. } = set_model(table, x, y, set, &options, &name, &place)?;
        let fit = fit_model(&model, method, cancel, progress).map_err(|e| QueryError::Fit { what: format!("model {name}"), message: e.to_string() })?;
        let request = comparisons(table, x, mass, &options)?.into_iter().next().ok_or_else(|| QueryError::request(format!("{place}: no comparison")))?;
        let contrast = level_contrasts(&model, &fit.draws, table, &request)?
            .into_iter()
            .next()
            .ok_or_else(|| QueryError::request(format!("{place}: the model gave no contrast")))?;
        routes.push(SetRoute { set: set.clone(), model_text: lines.join("; "), contrast, warnings: fit.warnings.clone() });
    }
    let left = sets.get(MOST_OTHER_SETS..).unwrap_or_default();
    let note = (!left.is_empty()).then(|| {
        format!(
            "{} further set{} also qualif{} and {} not fitted (at most {MOST_OTHER_SETS} further sets are): {}",
            left.len(),
            if left.len() == 1 { "" } else { "s" },
            if left.len() == 1 { "ies" } else { "y" },
            if left.len() == 1 { "is" } else { "are" },
            left.iter().map(|s| format!("{{{}}}", words(s))).collect::<Vec<_>>().join(", ")
        )
    });
    Ok((routes, note))
}

/// A set in words: its members, or `nothing`.
fn words(set: &[String]) -> String {
    if set.is_empty() {
        "nothing".to_string()
    } else {
        set.join(", ")
    }
}
