//! The fit summary: what the posterior says about each parameter, and,
//! kept apart from it, whether the sampler's draws can be trusted.
//!
//! A scientist reads a fit in two steps, so it is printed in two parts.
//! The estimates table gives each parameter one readable cell, the
//! posterior mean with its central interval (`24.81 (23.10 to 26.52)`,
//! the interval's mass in the column head), then the sd of the draws and
//! the share of draws above zero. Sampler health follows as one sentence
//! that names, for each check, the parameter that fares worst (largest
//! R-hat, fewest effective draws in the bulk and in the tails) beside the
//! run's divergent trajectories and deepest trajectory; every parameter's
//! own values travel in the JSON (`health.by_parameter`). The thresholds
//! are those of [`crate::infer::diagnostics`] (R-hat ≤ 1.01, bulk and tail
//! ESS ≥ 400, after Vehtari et al. 2021).
//!
//! The same pieces serve `fit`, `show` and the fit of a joint model, whose
//! rows carry the node as a leading column.

use serde_json::{json, Value};

use crate::cells::format::num;
use crate::cells::output::Grid;
use crate::draws::Summary;
use crate::infer::diagnostics::{ParamDiagnostics, ESS_BULK_LIMIT, ESS_TAIL_LIMIT, RHAT_LIMIT};
use crate::infer::fit::{Fit, Method};
use crate::model::prior::short_number;

/// Head of the estimate column, naming the interval's mass.
pub fn estimate_head(mass: f64) -> String {
    format!("mean ({}% interval)", short_number(mass * 100.0))
}

/// Head of the column with the share of draws above zero.
pub const ABOVE_ZERO_HEAD: &str = "draws above 0";

/// The estimates table: `lead` columns (e.g. `node`, `parameter`) given per
/// row, then the unit of the parameter (blank where it has none), the
/// estimate with its interval, the sd and the share above zero.
pub fn estimates_grid(lead: &[&str], rows: &[EstimateRow], mass: f64) -> Grid {
    let estimate = estimate_head(mass);
    let mut heads: Vec<&str> = lead.to_vec();
    heads.extend([UNIT_HEAD, estimate.as_str(), "sd", ABOVE_ZERO_HEAD]);
    let first = lead.len() + 1;
    let marked = rows.iter().any(|r| r.rows_behind.is_some_and(is_sparse));
    if marked {
        heads.push(SPARSE_HEAD);
    }
    let mut grid = Grid::new(&heads).numeric_columns(&[first, first + 1, first + 2]);
    let cells = estimate_cells(&rows.iter().map(|r| r.summary).collect::<Vec<_>>());
    for (r, estimate) in rows.iter().zip(cells) {
        let mut row = r.lead.clone();
        let above =
            if r.lead.last().is_some_and(|l| positive_only(l)) { "—".to_string() } else { share_above_zero(r.summary.prob_positive) };
        row.extend([r.unit.clone().unwrap_or_default(), estimate, num(r.summary.sd), above]);
        if marked {
            row.push(r.rows_behind.map(sparse_marker).unwrap_or_default());
        }
        grid.push(row);
    }
    grid
}

/// Fewer fitted rows than this behind a parameter (or a level) and its
/// estimate leans mostly on the prior: the output marks it.
pub const FEW_ROWS: usize = 5;

/// Head of the column that marks parameters resting on few or no rows
/// (shown only when one does).
pub const SPARSE_HEAD: &str = "rows behind";

/// Whether `rows` fitted rows are too few to inform a parameter.
pub fn is_sparse(rows: usize) -> bool {
    rows < FEW_ROWS
}

/// The marker of a parameter informed by `rows` rows: blank when enough,
/// else `⚠ none: prior only` or `⚠ 3 rows`.
pub fn sparse_marker(rows: usize) -> String {
    match rows {
        0 => "⚠ none: prior only".to_string(),
        1 => "⚠ 1 row".to_string(),
        n if is_sparse(n) => format!("⚠ {n} rows"),
        _ => String::new(),
    }
}

/// Head of the unit column of estimate tables.
pub const UNIT_HEAD: &str = "unit";

/// One row of an estimates table: its lead cells (the parameter label
/// last), the parameter's unit, the fitted rows behind it (when known) and
/// its summary.
pub struct EstimateRow<'s> {
    pub lead: Vec<String>,
    pub unit: Option<String>,
    pub rows_behind: Option<usize>,
    pub summary: &'s Summary,
}

/// `mean (lower to upper)` per summary: the means padded to the widest
/// and the bracketed intervals to the widest, so that in a right-aligned
/// column of them the means and the brackets line up in plain text.
pub fn estimate_cells(summaries: &[&Summary]) -> Vec<String> {
    let parts: Vec<(String, String)> = summaries
        .iter()
        .map(|s| (num(s.mean), format!("({} to {})", num(s.interval.lower), num(s.interval.upper))))
        .collect();
    let wm = parts.iter().map(|p| p.0.chars().count()).max().unwrap_or(0);
    let wi = parts.iter().map(|p| p.1.chars().count()).max().unwrap_or(0);
    let pad = |s: &str, w: usize| format!("{}{s}", " ".repeat(w.saturating_sub(s.chars().count())));
    parts.iter().map(|(m, i)| format!("{} {}", pad(m, wm), pad(i, wi))).collect()
}

/// A share of draws as a percentage: `100%` and `0%` only when every draw
/// (or none) lies above zero, otherwise one decimal kept off the ends
/// (`>99.9%`, `<0.1%`) so a share that is almost all never reads as all.
pub fn share_above_zero(share: f64) -> String {
    if share.is_nan() {
        return "—".into();
    }
    if share >= 1.0 {
        return "100%".into();
    }
    if share <= 0.0 {
        return "0%".into();
    }
    let pct = share * 100.0;
    if pct > 99.95 {
        ">99.9%".into()
    } else if pct < 0.05 {
        "<0.1%".into()
    } else {
        format!("{pct:.1}%")
    }
}

/// Parameters that cannot be negative (the residual spread, pooled groups'
/// spreads): their share of draws above zero is always all of them and says
/// nothing, so it is left out.
pub fn positive_only(label: &str) -> bool {
    crate::model::terms::design::is_spread_label(label)
}

/// One parameter's estimate in the fit JSON (`share_above_zero` null for a
/// parameter that cannot be negative; `unit` null where it has none;
/// `sparse` true when fewer than [`FEW_ROWS`] fitted rows inform it).
pub fn estimate_json(label: &str, unit: Option<&str>, rows_behind: Option<usize>, s: &Summary) -> Value {
    json!({
        "parameter": label, "unit": unit, "rows_behind": rows_behind, "sparse": rows_behind.is_some_and(is_sparse),
        "mean": s.mean, "sd": s.sd,
        "interval": {"lower": s.interval.lower, "upper": s.interval.upper},
        "share_above_zero": (!positive_only(label)).then_some(s.prob_positive),
    })
}

/// The sampler's health over one or more NUTS fits: the sentence a reader
/// sees and its JSON. `None` for draws that have no diagnostics (Laplace).
#[derive(Debug, Clone, PartialEq)]
pub struct Health {
    /// Every check passed (no warning from any fit).
    pub sound: bool,
    pub sentence: String,
    pub json: Value,
}

/// The value of one check at the parameter that fares worst.
struct Worst {
    label: String,
    value: f64,
}

/// Health of the fits listed, each with the labels of its parameters (in
/// draw order). Parameters whose draws never moved (R-hat and ESS NaN) are
/// named on their own.
pub fn health(fits: &[(&Fit, Vec<String>)]) -> Option<Health> {
    let mut entries: Vec<(String, ParamDiagnostics)> = Vec::new();
    let (mut divergent, mut depth_hits, mut deepest, mut limit, mut sound, mut any) = (0, 0, 0, 0, true, false);
    for (fit, labels) in fits {
        let Some(diagnostics) = &fit.diagnostics else { continue };
        any = true;
        entries.extend(labels.iter().cloned().zip(diagnostics.iter().copied()));
        divergent += fit.divergences;
        depth_hits += fit.depth_hits;
        deepest = deepest.max(fit.deepest);
        if let Method::Nuts(s) = &fit.method {
            limit = limit.max(s.doublings);
        }
        sound &= fit.warnings.is_empty();
    }
    if !any {
        return None;
    }
    let stuck: Vec<&str> = entries.iter().filter(|(_, d)| d.rhat.is_nan()).map(|(l, _)| l.as_str()).collect();
    let worst = |value: &dyn Fn(&ParamDiagnostics) -> f64, largest: bool| -> Option<Worst> {
        entries
            .iter()
            .filter(|(_, d)| !value(d).is_nan())
            .map(|(l, d)| Worst { label: l.clone(), value: value(d) })
            .reduce(|a, b| if (b.value > a.value) == largest && b.value != a.value { b } else { a })
    };
    let rhat = worst(&|d| d.rhat, true);
    let bulk = worst(&|d| d.ess_bulk, false);
    let tail = worst(&|d| d.ess_tail, false);

    let mut parts = Vec::new();
    if let Some(r) = &rhat {
        let over = if r.value > RHAT_LIMIT { format!("; wanted ≤ {RHAT_LIMIT}") } else { String::new() };
        parts.push(format!("largest R-hat {:.3} ({}{over})", r.value, r.label));
    }
    if let (Some(b), Some(t)) = (&bulk, &tail) {
        let short = |w: &Worst, limit: f64| if w.value < limit { format!("; wanted ≥ {limit:.0}") } else { String::new() };
        parts.push(format!(
            "fewest effective draws {} in the bulk ({}{}) and {} in the tails ({}{})",
            whole(b.value),
            b.label,
            short(b, ESS_BULK_LIMIT),
            whole(t.value),
            t.label,
            short(t, ESS_TAIL_LIMIT)
        ));
    }
    if !stuck.is_empty() {
        parts.push(format!("never moved: {}", stuck.join(", ")));
    }
    parts.push(match divergent {
        0 => "no divergent trajectories".to_string(),
        1 => "1 divergent trajectory".to_string(),
        n => format!("{} divergent trajectories", whole(n as f64)),
    });
    let mut depth = format!("deepest trajectory {deepest} of {limit} doublings");
    if depth_hits > 0 {
        depth.push_str(&format!(" ({} draws reached the limit)", whole(depth_hits as f64)));
    }
    parts.push(depth);
    let verdict = if sound { "sound" } else { "needs attention (see the warnings)" };
    let sentence = format!("sampler health: {verdict} — {}", parts.join("; "));

    let worst_json = |w: &Option<Worst>| w.as_ref().map(|w| json!({"parameter": w.label, "value": w.value}));
    let by_parameter: Vec<Value> = entries
        .iter()
        .map(|(label, d)| {
            json!({"parameter": label, "r_hat": finite(d.rhat),
                   "effective_draws": {"bulk": finite(d.ess_bulk), "tail": finite(d.ess_tail)}})
        })
        .collect();
    let json = json!({
        "sound": sound,
        "wanted": {"r_hat_at_most": RHAT_LIMIT, "effective_draws_at_least": {"bulk": ESS_BULK_LIMIT, "tail": ESS_TAIL_LIMIT}},
        "worst": {"r_hat": worst_json(&rhat), "bulk": worst_json(&bulk), "tail": worst_json(&tail)},
        "never_moved": stuck,
        "divergent_trajectories": divergent,
        "doublings": {"deepest": deepest, "limit": limit, "draws_at_limit": depth_hits},
        "by_parameter": by_parameter,
    });
    Some(Health { sound, sentence, json })
}

/// A count with thousands separated by commas.
fn whole(x: f64) -> String {
    let digits = format!("{:.0}", x.max(0.0));
    let mut out = String::new();
    for (i, c) in digits.chars().enumerate() {
        if i > 0 && (digits.len() - i) % 3 == 0 {
            out.push(',');
        }
        out.push(c);
    }
    out
}

/// JSON has no NaN: a value that cannot be computed is `null`.
fn finite(x: f64) -> Value {
    if x.is_finite() { json!(x) } else { Value::Null }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_share_that_is_almost_all_never_reads_as_all() {
        assert_eq!(share_above_zero(1.0), "100%");
        assert_eq!(share_above_zero(0.99996), ">99.9%");
        assert_eq!(share_above_zero(0.0002), "<0.1%");
        assert_eq!(share_above_zero(0.0), "0%");
        assert_eq!(share_above_zero(0.4375), "43.8%");
    }

    #[test]
    fn estimates_line_up_by_mean_and_by_bracket() {
        let summary = |mean: f64, lower: f64, upper: f64| Summary {
            name: "p".into(),
            mean,
            sd: 1.0,
            interval: crate::draws::Interval { lower, upper, mass: 0.9 },
            hdi: None,
            prob_positive: 1.0,
        };
        let (a, b) = (summary(29.89, 28.92, 30.84), summary(1.113, 0.9257, 1.296));
        let cells = estimate_cells(&[&a, &b]);
        assert_eq!(cells, ["29.89  (28.92 to 30.84)", "1.113 (0.9257 to 1.296)"]);
    }

    #[test]
    fn counts_are_grouped_by_thousands() {
        assert_eq!(whole(987.4), "987");
        assert_eq!(whole(1530.0), "1,530");
        assert_eq!(whole(1_234_567.0), "1,234,567");
    }
}
