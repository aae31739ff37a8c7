//! `robustness of M: X`: how a fitted contrast moves under an assumed
//! hidden common cause of X and M's outcome.
//!
//! A normal outcome's one-unit slope is moved by the product of the two
//! strengths ([`crate::query::robustness`]); a yes/no or binomial outcome's
//! risk ratio, or a poisson outcome's rate ratio, by the most two ratios
//! can move it, with its E-value ([`crate::query::risk_ratio_robustness`]). Both render the same way: a
//! heading sentence, the yardsticks' table, notes, JSON and the figure over
//! the two strengths. With `refit with hidden to X PRIOR and to Y PRIOR`
//! the model is refitted beside a simulated hidden node instead
//! ([`crate::query::hidden_refit`]), and the slope's interval is shown as
//! fitted and as refitted, with both densities; `exposure priors …` after
//! the strengths states the exposure model's priors in X's own unit, in
//! place of Waypath's, which are set on X's observed spread.

use super::fitting::require_fit;
use super::grammar::{EXPOSURE_PRIORS_WORDS, REFIT_WORDS, ROBUSTNESS};
use super::questions::{bounds, check_cancel, method_or, query_error, render, sampler_progress, stopped_or, summary_cells, summary_grid, CAUSAL_NOTE};
use super::{header, interval_option};
use crate::cells::format::{num, with_unit};
use crate::cells::output::{CellError, Display, Grid};
use crate::cells::parse::Statement;
use crate::cells::session::{RunControl, Session};
use crate::infer::fit::Method;
use crate::infer::nuts::NutsSettings;
use crate::model::{ExposurePriors, Family, Prior, PriorGroup};
use crate::plot::{DensityArrangement, RobustnessPicture, StrengthScale};
use crate::query::hidden_refit::RefitPriors;
use crate::query::{HiddenRefit, Robustness, RiskRatioRobustness};
use crate::table::Table;

/// `robustness of M: X [refit with hidden to X PRIOR and to Y PRIOR [exposure priors …] [with nuts …]] [intervals P%]`.
pub(crate) fn robustness(session: &mut Session, st: &Statement, control: &RunControl) -> Result<Vec<Display>, CellError> {
    let line = st.header.number;
    let ([name, x], options) = header(st, &ROBUSTNESS)?;
    let (mass, rest) = interval_option(options, line)?;
    let mass = session.interval_mass(mass);
    let fit = require_fit(session, name, line)?;
    let model = &session.models[name];
    let table = session.require_table(model.table_name(), line)?;
    if !rest.trim().is_empty() {
        let refit = read_refit(&rest, x, model.outcome_name()).map_err(|m| CellError::at(line, format!("{m}; the form is: {}", ROBUSTNESS.usage)))?;
        let default = Method::Nuts(NutsSettings::default());
        let settings = match method_or(&refit.method, default, line)? {
            Method::Nuts(settings) => settings,
            Method::Laplace { .. } => {
                return Err(CellError::at(line, "the refit's posterior runs along a ridge the data cannot resolve (the strengths' product against the slope), which a normal approximation at the mode describes poorly; use `with nuts …` or no method"))
            }
        };
        let label = format!("robustness of {name}: {x} refit");
        let progress = sampler_progress(control, &label);
        (control.progress)(&format!("{label}: NUTS beside a hidden value per row, integrated out"));
        let r = crate::query::hidden_refit(model, &fit.draws, table, x, &refit.priors, &settings, mass, control.cancel, &progress)
            .map_err(|e| stopped_or(control, &label, line, e))?;
        check_cancel(control, &label, line)?;
        return Ok(vec![refit_display(name, table, &r)]);
    }
    if matches!(model.family(), Family::Bernoulli | Family::Binomial { .. } | Family::Poisson) {
        let r = crate::query::risk_ratio_robustness(model, &fit.draws, table, x, mass).map_err(|e| query_error(e, line))?;
        return Ok(vec![risk_ratio_display(name, &r)]);
    }
    let r = crate::query::robustness(model, &fit.draws, table, x, mass).map_err(|e| query_error(e, line))?;
    Ok(vec![slope_display(name, &r)])
}

/// The refit option as read: the priors (each strength's as written and
/// parsed, the exposure model's) and the sampler options after them.
struct RefitOption {
    priors: RefitPriors,
    method: String,
}

/// Read `refit with hidden to X PRIOR and to Y PRIOR [exposure priors …]
/// [with …]`, the two strengths in either order.
fn read_refit(text: &str, x: &str, y: &str) -> Result<RefitOption, String> {
    let text = text.trim();
    let words: Vec<&str> = text.split_whitespace().collect();
    if words.len() < 4 || words[..4] != REFIT_WORDS[..] {
        return Err(format!("`{text}` is not an option of robustness"));
    }
    let body = text.splitn(4, char::is_whitespace).nth(3).unwrap_or("").trim_start();
    let (priors, method) = match body.find(" with ") {
        Some(at) => (&body[..at], body[at + 1..].trim()),
        None => (body, ""),
    };
    let (priors, exposure) = match priors.find(&format!(" {EXPOSURE_PRIORS_WORDS}")) {
        Some(at) => (&priors[..at], read_exposure_priors(priors[at + EXPOSURE_PRIORS_WORDS.len() + 1..].trim(), x)?),
        None => (priors, ExposurePriors::ObservedSpread),
    };
    let parts: Vec<&str> = priors.split(" and ").map(str::trim).collect();
    let [first, second] = parts.as_slice() else {
        return Err(format!("name both strengths, `to {x} PRIOR and to {y} PRIOR`"));
    };
    let read = |part: &str| -> Result<(String, String, Prior), String> {
        let part = part.strip_prefix("to ").unwrap_or(part).trim();
        let (node, prior) = part.split_once(char::is_whitespace).ok_or_else(|| format!("`{part}` names no prior; write `to NODE normal(…)`"))?;
        let parsed = Prior::parse(prior).map_err(|e| format!("the strength to {node}: {e}"))?;
        Ok((node.to_string(), prior.trim().to_string(), parsed))
    };
    let (a, b) = (read(first)?, read(second)?);
    let (ex, out) = match (a.0.as_str(), b.0.as_str()) {
        (p, q) if p == x && q == y => (a, b),
        (p, q) if p == y && q == x => (b, a),
        _ => return Err(format!("the strengths go to the exposure {x} and the outcome {y}; name those two")),
    };
    Ok(RefitOption {
        priors: RefitPriors { to_exposure: (ex.1, ex.2), to_outcome: (out.1, out.2), exposure },
        method: method.to_string(),
    })
}

/// The groups of the exposure model's priors, by their word.
const EXPOSURE_GROUPS: [(&str, PriorGroup); 3] =
    [("intercepts", PriorGroup::Intercepts), ("slopes", PriorGroup::Slopes), ("spread", PriorGroup::Spread)];

/// Read `intercepts PRIOR, slopes PRIOR, spread PRIOR` (any order, each
/// once, all three): the exposure model's priors in `x`'s own unit.
fn read_exposure_priors(text: &str, x: &str) -> Result<ExposurePriors, String> {
    let form = format!("`{EXPOSURE_PRIORS_WORDS} intercepts PRIOR, slopes PRIOR, spread PRIOR`, each in {x}'s own unit");
    let mut found: [Option<Prior>; 3] = [None, None, None];
    for item in split_outside_brackets(text) {
        let (word, prior) = item.split_once(char::is_whitespace).unwrap_or((item, ""));
        let k = EXPOSURE_GROUPS.iter().position(|(w, _)| *w == word).ok_or_else(|| format!("`{item}` is not one of the exposure priors; write {form}"))?;
        if found[k].is_some() {
            return Err(format!("the exposure prior `{word}` is written twice; write it once"));
        }
        let what = format!("exposure {word}");
        let parsed = Prior::parse(prior).map_err(|e| format!("the {what}: {e}"))?;
        crate::model::check_prior_suits(EXPOSURE_GROUPS[k].1, &parsed, &what).map_err(|e| e.to_string())?;
        found[k] = Some(parsed);
    }
    match found {
        [Some(intercepts), Some(slopes), Some(spread)] => Ok(ExposurePriors::Stated { intercepts, slopes, spread }),
        _ => {
            let missing: Vec<&str> = EXPOSURE_GROUPS.iter().zip(&found).filter(|(_, f)| f.is_none()).map(|((w, _), _)| *w).collect();
            Err(format!(
                "the exposure priors miss {}: state all three, {form} (left out, all three are Waypath's, set on {x}'s observed spread)",
                missing.join(" and ")
            ))
        }
    }
}

/// `text` cut at the commas outside parentheses, each part trimmed.
fn split_outside_brackets(text: &str) -> Vec<&str> {
    let mut parts = Vec::new();
    let (mut depth, mut start) = (0i32, 0);
    for (i, c) in text.char_indices() {
        match c {
            '(' => depth += 1,
            ')' => depth -= 1,
            ',' if depth == 0 => {
                parts.push(text[start..i].trim());
                start = i + 1;
            }
            _ => {}
        }
    }
    parts.push(text[start..].trim());
    parts
}

/// The slope fitted without and with the simulated hidden node, the
/// strengths' posteriors beside their priors, and both slopes' densities.
fn refit_display(name: &str, table: &Table, r: &HiddenRefit) -> Display {
    let (x, y) = (&r.exposure, &r.outcome);
    let unit = r.unit.as_deref();
    let yes_no = r.scale == crate::query::hidden_refit::LOG_ODDS;
    let on = if yes_no { format!("{y}'s log odds") } else { y.clone() };
    let heading = format!(
        "robustness of {name}: {x}'s slope on {on} refitted beside a hidden common cause with stated strengths: {} ({} {} to {}), against {} ({} to {}) as fitted",
        with_unit(r.refitted.mean, unit),
        r.interval,
        num(r.refitted.lower),
        num(r.refitted.upper),
        with_unit(r.fitted.mean, unit),
        num(r.fitted.lower),
        num(r.fitted.upper)
    );
    let mut slopes = summary_grid(&["fit"], r.mass);
    for (label, s) in [("as fitted".to_string(), &r.fitted), ("refitted with the hidden cause".to_string(), &r.refitted)] {
        let mut row = vec![label];
        row.extend(summary_cells(s, unit));
        slopes.push(row);
    }
    let (lower, upper) = bounds(r.mass);
    let mut strengths = Grid::new(&["strength", "prior", "posterior mean", &lower, &upper]).numeric_columns(&[2, 3, 4]);
    for s in &r.strengths {
        strengths.push(vec![s.strength.clone(), s.prior.clone(), num(s.mean), num(s.lower), num(s.upper)]);
    }
    let stated = r.exposure_priors.set_by == crate::query::hidden_refit::STATED_IN_THE_CELL;
    let set_by = if stated { r.exposure_priors.set_by.as_str() } else { "Waypath default" };
    let mut exposure = Grid::new(&["parameter", "prior", "set by"]);
    for p in &r.exposure_priors.parameters {
        exposure.push(vec![p.parameter.clone(), p.prior.clone(), set_by.to_string()]);
    }
    let exposure_heading = format!("{x}'s own model beside the hidden cause, its priors in {x}'s unit:");
    let widened = (r.refitted.upper - r.refitted.lower) / (r.fitted.upper - r.fitted.lower).max(f64::MIN_POSITIVE);
    let mut notes = vec![
        if yes_no {
            format!(
                "the refit gives each of the {} rows its own hidden value, standard normal, which moves {x} by the first strength and {y}'s log odds by the second (each per standard deviation of the hidden value), and integrates it out (given {x}, the hidden value is normal, and the chance of a yes is averaged over it by a trapezoid sum); {y}'s regression keeps the model's priors",
                r.rows
            )
        } else {
            format!(
                "the refit gives each of the {} rows its own hidden value, standard normal, which moves {x} by the first strength and {y} by the second (each per standard deviation of the hidden value), and integrates it out: each row's {x} and {y} are then jointly normal; {y}'s regression keeps the model's priors",
                r.rows
            )
        },
        format!(
            "the data say little about the strengths' product ({} on average, {} {} to {}) apart from {x}'s own slope, so the stated priors carry the assumption; the interval is {}× as wide as fitted",
            num(r.product.mean),
            r.interval,
            num(r.product.lower),
            num(r.product.upper),
            num(widened)
        ),
        if stated {
            format!("{x}'s own model (from the model's other terms) takes the exposure priors stated in the cell, in {x}'s unit; none of the refit's added priors reads the data")
        } else {
            format!(
                "the priors of {x}'s own model (from the model's other terms): {}; `{EXPOSURE_PRIORS_WORDS} intercepts …, slopes …, spread …` states them in {x}'s unit instead, without a look at the data",
                r.exposure_priors.set_by
            )
        },
        if r.refitted.excludes_zero() { format!("the refitted {} still excludes zero", r.interval) } else { format!("the refitted {} holds zero", r.interval) },
        format!("sampled with {}", r.method),
    ];
    notes.extend(r.warnings.iter().map(|w| format!("warning: {w}")));
    notes.push("a hidden cause of this strength is an assumption stated in the priors, not a finding".to_string());
    notes.push(CAUSAL_NOTE.to_string());
    let (plain, html) = render(&heading, &[], &[("", &slopes), ("strengths of the hidden cause:", &strengths), (&exposure_heading, &exposure)], &notes);
    let named: Vec<(String, &[f64])> = vec![("as fitted".to_string(), r.fitted_draws.as_slice()), ("with the hidden cause".to_string(), r.refitted_draws.as_slice())];
    let subject = format!("{x}'s slope on {on}, as fitted and beside a hidden cause");
    let svg = if yes_no {
        let params: Vec<crate::plot::ParameterDraws> = named.iter().map(|(n, d)| crate::plot::ParameterDraws { name: n, draws: d }).collect();
        crate::plot::posterior_figure(&subject, &crate::plot::Quantity::new(format!("change in {y}'s log odds per unit of {x}")), &params, DensityArrangement::Shared).ok()
    } else {
        crate::cells::figures::differences(&subject, table, y, &named, DensityArrangement::Shared).ok()
    };
    let json = serde_json::to_value(r).unwrap_or_default();
    Display { plain, html: Some(html), svg, json: Some(json) }
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

/// A yes/no or binomial outcome's risk ratio (a count's rate ratio), its
/// E-values and the figure over the two ratios of a hidden cause.
fn risk_ratio_display(name: &str, r: &RiskRatioRobustness) -> Display {
    let (x, y) = (&r.exposure, &r.outcome);
    let ratio = r.ratio.as_str();
    let heading = format!(
        "robustness of {name}: {ratio} of {y} for {x} {} vs {} = {} ({} {} to {}); E-value {} for the mean, {} for the interval",
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
        "{}, averaged over the rows: {} with {x} = {}, {} with {x} = {} (posterior means); {} of the draws give a ratio above 1",
        r.measure,
        num(r.risk_to),
        r.to,
        num(r.risk_from),
        r.from,
        crate::cells::fit_summary::share_above_zero(r.share_above_one)
    )];
    let with_outcome = format!("with the outcome ({ratio})");
    let mut grid = Grid::new(&[
        "yardstick",
        "with the exposure (risk ratio)",
        &with_outcome,
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
            "a hidden cause tied to both {x} and {y} by a {ratio} of {} each, beyond the model's predictors, could move the mean to 1; one weaker on both could not",
            num(r.e_value_of_mean)
        ),
        if r.e_value_of_interval > 1.0 {
            format!("to move the {}'s end nearer 1 to 1, both ratios must reach {}", r.interval, num(r.e_value_of_interval))
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
        scale: if ratio == crate::query::RATE_RATIO { StrengthScale::RateRatio } else { StrengthScale::RiskRatio },
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
    json["scale"] = ratio.into();
    Display { plain, html: Some(html), svg, json: Some(json) }
}
