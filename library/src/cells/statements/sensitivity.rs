//! `robustness of M: X`: how a fitted contrast moves under an assumed
//! hidden common cause of X and M's outcome.
//!
//! A normal outcome's one-unit slope is moved by the product of the two
//! strengths ([`crate::query::robustness`]); a yes/no outcome's risk ratio
//! by the most two risk ratios can move it, with its E-value
//! ([`crate::query::risk_ratio_robustness`]). Both render the same way: a
//! heading sentence, the yardsticks' table, notes, JSON and the figure over
//! the two strengths.

use super::fitting::require_fit;
use super::grammar::ROBUSTNESS;
use super::questions::{query_error, render, CAUSAL_NOTE};
use super::{header, interval_option};
use crate::cells::format::num;
use crate::cells::output::{CellError, Display, Grid};
use crate::cells::parse::Statement;
use crate::cells::session::Session;
use crate::model::Family;
use crate::plot::{RobustnessPicture, StrengthScale};
use crate::query::{Robustness, RiskRatioRobustness};

/// `robustness of M: X [intervals P%]`.
pub(crate) fn robustness(session: &mut Session, st: &Statement) -> Result<Vec<Display>, CellError> {
    let line = st.header.number;
    let ([name, x], options) = header(st, &ROBUSTNESS)?;
    let (mass, _) = interval_option(options, line)?;
    let mass = session.interval_mass(mass);
    let fit = require_fit(session, name, line)?;
    let model = &session.models[name];
    let table = session.require_table(model.table_name(), line)?;
    if *model.family() == Family::Bernoulli {
        let r = crate::query::risk_ratio_robustness(model, &fit.draws, table, x, mass).map_err(|e| query_error(e, line))?;
        return Ok(vec![risk_ratio_display(name, &r)]);
    }
    let r = crate::query::robustness(model, &fit.draws, table, x, mass).map_err(|e| query_error(e, line))?;
    Ok(vec![slope_display(name, &r)])
}

/// A normal outcome's slope moved by γ·δ.
fn slope_display(name: &str, r: &Robustness) -> Display {
    let (x, y) = (&r.exposure, &r.outcome);
    let heading = format!(
        "robustness of {name}: {x} on {y} = {} ({} {} to {}); a hidden common cause moves it to zero once γ·δ reaches {}",
        num(r.mean),
        r.interval,
        num(r.lower),
        num(r.upper),
        num(r.explain_away)
    );
    let mut grid = Grid::new(&["yardstick", "δ (→ exposure)", "γ (→ outcome)", "γ·δ", "mean if a hidden cause were as strong"])
        .numeric_columns(&[1, 2, 3, 4]);
    for ys in &r.yardsticks {
        grid.push(vec![ys.node.clone(), num(ys.to_exposure), num(ys.to_outcome), num(ys.to_exposure * ys.to_outcome), num(ys.adjusted_mean)]);
    }
    let mut notes = vec![
        format!("δ: the hidden cause's mean difference, in its standard deviations, per unit of {x}, given the other predictors"),
        format!("γ: the change in {y}'s mean per standard deviation of the hidden cause, given {x} and the other predictors"),
        format!("the mean reaches zero where γ·δ = {}", num(r.explain_away)),
        if r.interval_reaches_zero > 0.0 {
            format!("the {} first holds zero where γ·δ = {}", r.interval, num(r.interval_reaches_zero))
        } else {
            format!("the fitted {} already holds zero", r.interval)
        },
    ];
    notes.extend(r.notes.iter().cloned());
    notes.push("a yardstick places an observed predictor on the same axes; a hidden cause like it is an assumption, not a finding".to_string());
    notes.push(CAUSAL_NOTE.to_string());
    let grids: Vec<(&str, &Grid)> = if grid.rows.is_empty() { Vec::new() } else { vec![("observed predictors as yardsticks:", &grid)] };
    let (plain, html) = render(&heading, &[], &grids, &notes);
    let yard: Vec<(String, f64, f64)> = r.yardsticks.iter().map(|y| (y.node.clone(), y.to_exposure, y.to_outcome)).collect();
    let sign = if r.mean >= 0.0 { 1.0 } else { -1.0 };
    let crossed: Vec<Vec<bool>> = r.adjusted_mean.iter().map(|row| row.iter().map(|m| m * sign < 0.0).collect()).collect();
    let picture = RobustnessPicture {
        subject: name,
        exposure: x,
        outcome: y,
        scale: StrengthScale::Product,
        to_exposure: &r.to_exposure,
        to_outcome: &r.to_outcome,
        crossed: &crossed,
        still_excludes: &r.still_excludes_zero,
        explain_away: r.explain_away,
        interval_reaches: r.interval_reaches_zero,
        interval: &r.interval,
        e_value: None,
        yardsticks: &yard,
    };
    let svg = crate::plot::robustness_figure(&picture).ok();
    let mut json = serde_json::to_value(r).unwrap_or_default();
    json["scale"] = "difference".into();
    Display { plain, html: Some(html), svg, json: Some(json) }
}

/// A yes/no outcome's risk ratio, its E-values and the figure over the two
/// risk ratios of a hidden cause.
fn risk_ratio_display(name: &str, r: &RiskRatioRobustness) -> Display {
    let (x, y) = (&r.exposure, &r.outcome);
    let heading = format!(
        "robustness of {name}: risk ratio of {y} for {x} {} vs {} = {} ({} {} to {}); E-value {} for the mean, {} for the interval",
        r.to,
        r.from,
        num(r.mean),
        r.interval,
        num(r.lower),
        num(r.upper),
        num(r.e_value_of_mean),
        num(r.e_value_of_interval)
    );
    let lead = vec![format!(
        "probability that {y} is yes, averaged over the rows: {} with {x} = {}, {} with {x} = {} (posterior means); {} of the draws give a ratio above 1",
        num(r.risk_to),
        r.to,
        num(r.risk_from),
        r.from,
        crate::cells::fit_summary::share_above_zero(r.share_above_one)
    )];
    let mut grid = Grid::new(&[
        "yardstick",
        "with the exposure (risk ratio)",
        "with the outcome (risk ratio)",
        "most they move the ratio by",
        "mean if a hidden cause were as strong",
    ])
    .numeric_columns(&[1, 2, 3, 4]);
    for ys in &r.yardsticks {
        grid.push(vec![
            ys.node.clone(),
            num(ys.to_exposure),
            num(ys.to_outcome),
            num(crate::query::bounding_factor(ys.to_exposure, ys.to_outcome)),
            num(ys.adjusted_mean),
        ]);
    }
    let mut notes = vec![
        format!(
            "a hidden cause tied to both {x} and {y} by a risk ratio of {} each, beyond the model's predictors, could move the mean to 1; one weaker on both could not",
            num(r.e_value_of_mean)
        ),
        if r.e_value_of_interval > 1.0 {
            format!("to move the {}'s end nearer 1 to 1, both risk ratios must reach {}", r.interval, num(r.e_value_of_interval))
        } else {
            format!("the fitted {} already holds 1, so its E-value is 1", r.interval)
        },
    ];
    notes.extend(r.notes.iter().cloned());
    if !r.yardsticks.is_empty() {
        notes.push("a yardstick places an observed predictor on the same axes; a hidden cause like it is an assumption, not a finding".to_string());
    }
    notes.push(CAUSAL_NOTE.to_string());
    let grids: Vec<(&str, &Grid)> = if grid.rows.is_empty() { Vec::new() } else { vec![("observed predictors as yardsticks:", &grid)] };
    let (plain, html) = render(&heading, &lead, &grids, &notes);
    let yard: Vec<(String, f64, f64)> = r.yardsticks.iter().map(|y| (y.node.clone(), y.to_exposure, y.to_outcome)).collect();
    let above = r.mean >= 1.0;
    let crossed: Vec<Vec<bool>> =
        r.adjusted_mean.iter().map(|row| row.iter().map(|m| if above { *m < 1.0 } else { *m > 1.0 }).collect()).collect();
    // The bounding factors at which the mean and the interval's end reach 1.
    let factor = |v: f64| if v >= 1.0 { v } else { 1.0 / v };
    let interval_factor = if r.e_value_of_interval > 1.0 { factor(if above { r.lower } else { r.upper }) } else { 1.0 };
    let subject = format!("{name}: {x} {} vs {}", r.to, r.from);
    let picture = RobustnessPicture {
        subject: &subject,
        exposure: x,
        outcome: y,
        scale: StrengthScale::RiskRatio,
        to_exposure: &r.to_exposure,
        to_outcome: &r.to_outcome,
        crossed: &crossed,
        still_excludes: &r.still_excludes_one,
        explain_away: factor(r.mean),
        interval_reaches: interval_factor,
        interval: &r.interval,
        e_value: Some(r.e_value_of_mean),
        yardsticks: &yard,
    };
    let svg = crate::plot::robustness_figure(&picture).ok();
    let mut json = serde_json::to_value(r).unwrap_or_default();
    json["scale"] = "risk ratio".into();
    Display { plain, html: Some(html), svg, json: Some(json) }
}
