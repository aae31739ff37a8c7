//! The further routes of `compare routes`: the graph's other adjustment
//! sets (for a total or a direct effect) as rows beside the first set's,
//! and the whole answer for a direct effect — the adjustment set's
//! contrast beside the joint model's controlled direct effect
//! ([`crate::query::controlled_direct_route`]), in the same table shape as
//! the total effect's routes.

use serde_json::{json, Value};

use super::questions::{summary_cells, summary_grid, CAUSAL_NOTE};
use crate::cells::figures;
use crate::cells::format::with_unit;
use crate::cells::output::Display;
use crate::plot::DensityArrangement;
use crate::query::{Contrast, ContrastSummary, DirectRoute, EffectAnswer, QueryError, SetRoute};
use crate::table::Table;

/// The other sets' rows — each set's estimate, then its difference from
/// the first set's — their JSON, and their warnings as notes.
pub(super) struct OtherSetRows {
    pub rows: Vec<(String, ContrastSummary)>,
    pub json: Vec<Value>,
    pub notes: Vec<String>,
}

/// Rows for `others` beside the `first` set's contrast.
pub(super) fn other_set_rows(first: &Contrast, others: &[SetRoute], mass: f64) -> Result<OtherSetRows, QueryError> {
    let mut out = OtherSetRows { rows: Vec::new(), json: Vec::new(), notes: Vec::new() };
    for route in others {
        let words = set_words(&route.set);
        let estimate = route.contrast.summary();
        let difference = paired_difference(&first.draws, &route.contrast.draws, mass)?;
        out.rows.push((format!("adjustment (stratify by {words})"), estimate.clone()));
        out.rows.push(("difference (first set − this set)".to_string(), difference.clone()));
        let mut j = json_of(&estimate);
        j["adjustment_set"] = json!(route.set);
        j["model"] = json!(route.model_text);
        j["difference"] = json_of(&difference);
        out.json.push(j);
        out.notes.extend(route.warnings.iter().map(|w| format!("set {{{words}}}: {w}")));
    }
    Ok(out)
}

/// The direct effect's routes: the first set's contrast, the other sets',
/// and the joint model's controlled direct effect (or the note why it was
/// not taken).
pub(super) struct DirectRoutes<'a> {
    pub answer: &'a EffectAnswer,
    pub first: &'a Contrast,
    pub others: OtherSetRows,
    pub others_note: Option<String>,
    pub joint: Result<DirectRoute, String>,
    pub graph_name: &'a str,
    pub method: String,
    pub mass: f64,
}

impl DirectRoutes<'_> {
    /// The table, notes, figure and JSON of the comparison.
    pub(super) fn display(self, table: &Table, x: &str, y: &str) -> Result<Display, QueryError> {
        let (first, mass, g) = (self.first, self.mass, self.graph_name);
        let unit = first.unit.as_deref();
        let set = self.answer.adjustment_set.clone().unwrap_or_default();
        let first_summary = first.summary();
        // A direct effect no single-door set identifies comes by the
        // complete algorithm's formula instead of an adjustment set.
        let by_formula = self.answer.route.as_deref() != Some("adjustment");
        let (first_name, first_short) = if by_formula { ("identifying formula".to_string(), "formula") } else { (format!("adjustment (stratify by {})", set_words(&set)), "adjustment") };
        let mut rows: Vec<(String, ContrastSummary)> = vec![(first_name, first_summary.clone())];
        rows.extend(self.others.rows.iter().cloned());
        let mut notes: Vec<String> = self.answer.estimand.iter().map(|e| format!("{first_short} route's estimand: {e}")).collect();
        if by_formula {
            notes.extend(self.answer.why.iter().cloned());
        }
        let (joint_json, difference_json, joint_mean) = match &self.joint {
            Ok(route) => {
                let s = route.contrast.summary();
                let d = paired_difference(&first.draws, &route.contrast.draws, mass)?;
                rows.push((format!("joint model (controlled direct effect, {} held)", held_words(&route.held)), s.clone()));
                rows.push((format!("difference ({first_short} − joint)"), d.clone()));
                notes.push(format!(
                    "the joint model's route sets {x} and holds the parents of {y} that {x} causes ({}); {y}'s node regression ({}) is then all the simulation needs, averaged over the rows' other parents",
                    held_words(&route.held),
                    route.model_text
                ));
                let same = |set: &[String]| set.len() == route.parents.len() && set.iter().all(|m| route.parents.contains(m));
                if same(&set) || self.answer.identification.adjustment_sets.iter().take(1 + self.others.json.len()).any(|s| same(s)) {
                    notes.push(format!(
                        "{y}'s parents other than {x} ({}) are also a set fitted above, so the joint route conditions on the same nodes; \
                         it checks more than that set's route only where the joint model's node regression differs from the additive one (per-level slopes, another family)",
                        set_words(&route.parents)
                    ));
                }
                notes.extend(route.warnings.iter().map(|w| format!("joint route: {w}")));
                let mut j = json_of(&s);
                j["route"] = json!("controlled direct effect");
                j["held"] = json!(route.held);
                j["model"] = json!(route.model_text);
                (j, json_of(&d), Some(s.mean))
            }
            Err(why) => {
                notes.push(why.clone());
                (Value::Null, Value::Null, None)
            }
        };
        notes.extend(self.others_note.iter().cloned());
        notes.extend(self.others.notes.iter().cloned());
        notes.push("the routes are fitted separately, so each difference pairs draws at random; it is wide by design".to_string());
        notes.extend(self.answer.warnings.iter().map(|w| format!("{first_short} route: {w}")));
        notes.push(format!("fitted with {}; intervals are {}s", self.method, first.interval));
        notes.push(CAUSAL_NOTE.to_string());
        let count = 1 + self.others.json.len() + usize::from(joint_mean.is_some());
        let heading = match joint_mean {
            Some(m) => format!(
                "direct effect of {x} on {y} in {g}, {}: {count} routes, {first_short} {} vs joint model {}",
                first.contrast,
                with_unit(first.mean, unit),
                with_unit(m, unit)
            ),
            None => format!("direct effect of {x} on {y} in {g}, {}: {count} route{}, {first_short} {}", first.contrast, if count == 1 { "" } else { "s" }, with_unit(first.mean, unit)),
        };
        let mut grid = summary_grid(&["route"], mass);
        for (name, s) in &rows {
            let mut row = vec![name.clone()];
            row.extend(summary_cells(s, unit));
            grid.push(row);
        }
        let (plain, html) = super::questions::render(&heading, &[], &[("", &grid)], &notes);
        let mut named: Vec<(String, &[f64])> = vec![(format!("{first_short} route"), first.draws.as_slice())];
        if let Ok(route) = &self.joint {
            named.push(("joint route".to_string(), route.contrast.draws.as_slice()));
        }
        let svg = figures::differences(&format!("direct effect of {x} on {y}, {}: routes", first.contrast), table, y, &named, DensityArrangement::Shared).ok();
        let mut first_json = json_of(&first_summary);
        first_json["model"] = json!(self.answer.model_text);
        let (adjustment_json, formula_json) = if by_formula {
            first_json["route"] = json!(self.answer.route);
            (Value::Null, first_json)
        } else {
            first_json["adjustment_set"] = json!(set);
            (first_json, Value::Null)
        };
        let json = json!({
            "question": self.answer.question, "contrast": first.contrast, "to": first.to, "from": first.from,
            "unit": first.unit, "interval_mass": mass, "identifiable": !by_formula, "formula_route": formula_json,
            "adjustment": adjustment_json, "joint": joint_json, "difference": difference_json,
            "other_sets": self.others.json, "front_door": null, "difference_front_door": null, "notes": notes,
        });
        Ok(Display { plain, html: Some(html), svg, json: Some(json) })
    }
}

/// `a − b` over draws of two separate fits (as many as the shorter has),
/// summarised. Draw `i` of `a` meets draw `n − 1 − i` of `b`: two fits with
/// the same method and seed take the same random numbers in the same order
/// (a normal approximation's draws above all), so pairing by index would
/// make their draws move together and the difference look far surer than
/// two separate fits allow.
pub(super) fn paired_difference(a: &[f64], b: &[f64], mass: f64) -> Result<ContrastSummary, QueryError> {
    let n = a.len().min(b.len());
    let d: Vec<f64> = (0..n).map(|i| a[i] - b[n - 1 - i]).collect();
    ContrastSummary::of(&d, mass)
}

fn json_of(s: &ContrastSummary) -> Value {
    serde_json::to_value(s).unwrap_or(Value::Null)
}

fn set_words(set: &[String]) -> String {
    if set.is_empty() {
        "nothing".to_string()
    } else {
        set.join(", ")
    }
}

fn held_words(held: &[(String, String)]) -> String {
    if held.is_empty() {
        "no mediator next to the outcome".to_string()
    } else {
        held.iter().map(|(n, v)| format!("{n} = {v}")).collect::<Vec<_>>().join(", ")
    }
}
