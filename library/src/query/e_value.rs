//! How strong a hidden common cause would have to be to explain away a
//! yes/no, binomial or count outcome's effect on a ratio scale.
//!
//! For a bernoulli model the exposure's contrast is taken as a ratio of
//! risks: per posterior draw, the model's probability of a yes averaged
//! over the table's rows with the exposure set to one value, divided by the
//! same with it set to the other (standardisation; summaries last). A
//! binomial model's ratio is of the probability of a success per trial
//! (a risk ratio per trial); a poisson model's of the mean count (a rate
//! ratio). The bound and the E-value below are proven for risk ratios; a
//! rate ratio takes them as VanderWeele & Ding (2017) do, as an
//! approximation that holds when the outcome is rare (recalled), and the
//! result says so with the share of rows whose count is 0.
//!
//! A hidden cause U whose risk ratio with the exposure is at most `a` and
//! with the outcome (given the exposure) at most `b` can move the risk
//! ratio by at most the bounding factor `a·b / (a + b − 1)` (Ding &
//! VanderWeele 2016, *Epidemiology*, "Sensitivity analysis without
//! assumptions" — recalled). Every draw is divided by it (multiplied, for a
//! ratio below 1), the direction towards no effect, over a grid of both
//! strengths. Where the two strengths are equal the factor reaches a risk
//! ratio `RR ≥ 1` at the E-value `RR + √(RR·(RR − 1))` (VanderWeele & Ding
//! 2017, *Annals of Internal Medicine*; `1/RR` for a ratio below 1).
//!
//! Observed predictors serve as yardsticks when the exposure takes two
//! values that rows hold (a category, or a yes/no column): a predictor is
//! split into its levels (a numeric one at its median into halves); its
//! strength with the exposure is the largest ratio of a part's share of
//! rows between the two exposure groups, and its strength with the outcome
//! the largest ratio of the model's risks, averaged over rows, with the
//! predictor set to each part (a half at its mean) — per draw, then the
//! posterior mean.

use serde::Serialize;

use crate::draws::Draws;
use crate::model::{Family, Model};
use crate::table::{ColumnData, Table};

use super::contrast::{contrast, ContrastRequest};
use super::error::QueryError;
use super::support::{interval_words, parameter_rows, predictor_columns, require_column, with_column, ContrastSummary, Setting};

/// Points along each strength axis.
pub const RISK_RATIO_STEPS: usize = 25;

/// The E-value of a risk ratio (VanderWeele & Ding 2017): `RR + √(RR·(RR − 1))`
/// for `RR ≥ 1`, computed on `1/RR` below 1. `None` unless `rr` is
/// positive and finite.
pub fn e_value(rr: f64) -> Option<f64> {
    if !(rr.is_finite() && rr > 0.0) {
        return None;
    }
    let r = if rr < 1.0 { 1.0 / rr } else { rr };
    Some(r + (r * (r - 1.0)).sqrt())
}

/// The most a hidden cause with risk ratios `a` (with the exposure) and `b`
/// (with the outcome), both at least 1, can move a risk ratio by (Ding &
/// VanderWeele 2016).
pub fn bounding_factor(a: f64, b: f64) -> f64 {
    a * b / (a + b - 1.0)
}

/// An observed predictor placed on the two risk-ratio axes.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RatioYardstick {
    pub node: String,
    /// Its largest ratio of shares between the two exposure groups.
    pub to_exposure: f64,
    /// Its largest ratio of the outcome's risks, posterior mean.
    pub to_outcome: f64,
    /// The risk ratio's mean once a hidden cause this strong is allowed for.
    pub adjusted_mean: f64,
}

/// The ratio under assumed hidden common causes of growing strength.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RiskRatioRobustness {
    pub model: String,
    pub exposure: String,
    pub outcome: String,
    /// `risk ratio` (bernoulli, binomial) or `rate ratio` (poisson).
    pub ratio: String,
    /// What each side of the ratio is, averaged over the rows: `probability
    /// that y is yes`, `probability of a success per trial of y`, `mean count of y`.
    pub measure: String,
    /// The two exposure settings compared, `to` over `from`.
    pub to: String,
    pub from: String,
    /// Posterior means of the risks averaged over rows at each setting.
    pub risk_to: f64,
    pub risk_from: f64,
    /// The risk ratio: posterior mean and interval.
    pub mean: f64,
    pub lower: f64,
    pub upper: f64,
    pub mass: f64,
    pub interval: String,
    /// Share of draws whose ratio is above 1.
    pub share_above_one: f64,
    /// The E-value of the posterior mean.
    pub e_value_of_mean: f64,
    /// The E-value of the interval's end nearer 1 (1 when it holds 1).
    pub e_value_of_interval: f64,
    /// The axis of the hidden cause's risk ratio with the exposure.
    pub to_exposure: Vec<f64>,
    /// The axis of its risk ratio with the outcome.
    pub to_outcome: Vec<f64>,
    /// The moved mean at `[outcome index][exposure index]`.
    pub adjusted_mean: Vec<Vec<f64>>,
    /// Whether the moved interval still excludes 1 at `[outcome][exposure]`.
    pub still_excludes_one: Vec<Vec<bool>>,
    pub yardsticks: Vec<RatioYardstick>,
    pub notes: Vec<String>,
}

/// The robustness of the risk ratio of `x` in bernoulli `model` (fitted as
/// `draws` on `table`) to a hidden common cause of `x` and the outcome.
pub fn risk_ratio_robustness(
    model: &Model,
    draws: &Draws,
    table: &Table,
    x: &str,
    mass: f64,
) -> Result<RiskRatioRobustness, QueryError> {
    let place = format!("robustness of {}: {x}", model.name());
    let y = model.outcome_name();
    let (ratio, measure) = match model.family() {
        Family::Bernoulli => (RISK_RATIO, format!("probability that {y} is yes")),
        Family::Binomial { trials } => (RISK_RATIO, format!("probability of a success per trial of {y} (out of {trials})")),
        Family::Poisson => (RATE_RATIO, format!("mean count of {y}")),
        other => {
            return Err(QueryError::request(format!(
                "{place}: model {} has a {} outcome; the ratio scale and E-value are for a yes/no (bernoulli), binomial or poisson outcome",
                model.name(),
                other.name()
            )))
        }
    };
    // A binomial model's trials column is read with the rows, not a predictor.
    let trials = match model.family() {
        Family::Binomial { trials } => Some(trials.clone()),
        _ => None,
    };
    let predictors: Vec<String> = predictor_columns(model).into_iter().filter(|p| Some(p) != trials.as_ref()).collect();
    if !predictors.iter().any(|p| p == x) {
        return Err(QueryError::request(format!("{place}: {x} is not a predictor of model {} ({})", model.name(), predictors.join(", "))));
    }
    let column = require_column(table, x, &place)?;
    let mut request = ContrastRequest { over_rows: true, mass, ..ContrastRequest::new(x) };
    if let ColumnData::Binary(_) = column.data {
        request = request.between("1", "0");
    }
    let c = contrast(model, draws, table, &request)?;
    let ratios: Vec<f64> = c.means.iter().map(|(a, b)| a / b).collect();
    if ratios.iter().any(|r| !(r.is_finite() && *r > 0.0)) {
        return Err(QueryError::request(format!(
            "{place}: some draws give a {measure} of 0 at {x} = {}, so the ratio is undefined",
            c.from
        )));
    }
    let s = ContrastSummary::of(&ratios, mass)?;
    let above = s.mean >= 1.0;
    let nearer_one = if above { s.lower } else { s.upper };
    let holds_one = s.lower <= 1.0 && s.upper >= 1.0;
    let e_value_of_mean = e_value(s.mean).unwrap_or(1.0);
    let e_value_of_interval = if holds_one { 1.0 } else { e_value(nearer_one).unwrap_or(1.0) };
    let share_above_one = ratios.iter().filter(|r| **r > 1.0).count() as f64 / ratios.len() as f64;
    let n = c.means.len().max(1) as f64;
    let risk_to = c.means.iter().map(|m| m.0).sum::<f64>() / n;
    let risk_from = c.means.iter().map(|m| m.1).sum::<f64>() / n;
    let mut notes = vec![
        format!("{ratio} per draw: the {measure} averaged over the {} rows with {x} = {}, over the same with {x} = {}", table.nrows(), c.to, c.from),
        "each draw is moved towards 1 by the most a hidden cause of the two strengths can move it (bounding factor a·b/(a + b − 1), Ding & VanderWeele 2016); a weaker or differently built hidden cause moves it less".to_string(),
        format!("E-value: the {ratio} a hidden cause would need with both the exposure and the outcome to move the estimate to 1 (VanderWeele & Ding 2017)"),
    ];
    if ratio == RATE_RATIO {
        notes.push(rare_outcome_caveat(table, y, &place)?);
    }
    notes.extend(c.notes.iter().cloned());
    let yardsticks = ratio_yardsticks(model, draws, table, x, &c.to, &c.from, s.mean, &predictors, &place, &mut notes)?;
    let strongest = yardsticks.iter().map(|y| y.to_exposure.max(y.to_outcome)).fold(e_value_of_mean, f64::max);
    let top = 1.0 + (strongest - 1.0) * 1.25;
    let axis = (0..RISK_RATIO_STEPS).map(|i| 1.0 + (top - 1.0) * i as f64 / (RISK_RATIO_STEPS - 1) as f64).collect::<Vec<f64>>();
    let moved = |v: f64, factor: f64| if above { v / factor } else { v * factor };
    let mut adjusted_mean = Vec::with_capacity(RISK_RATIO_STEPS);
    let mut still = Vec::with_capacity(RISK_RATIO_STEPS);
    for &b in &axis {
        let factors: Vec<f64> = axis.iter().map(|&a| bounding_factor(a, b)).collect();
        adjusted_mean.push(factors.iter().map(|&f| moved(s.mean, f)).collect());
        still.push(factors.iter().map(|&f| moved(s.lower, f) > 1.0 || moved(s.upper, f) < 1.0).collect());
    }
    Ok(RiskRatioRobustness {
        model: model.name().to_string(),
        exposure: x.to_string(),
        outcome: model.outcome_name().to_string(),
        ratio: ratio.to_string(),
        measure,
        to: c.to.clone(),
        from: c.from.clone(),
        risk_to,
        risk_from,
        mean: s.mean,
        lower: s.lower,
        upper: s.upper,
        mass,
        interval: interval_words(mass),
        share_above_one,
        e_value_of_mean,
        e_value_of_interval,
        to_exposure: axis.clone(),
        to_outcome: axis,
        adjusted_mean,
        still_excludes_one: still,
        yardsticks,
        notes,
    })
}

/// A rate ratio's caveat: the bound and the E-value hold for risk ratios,
/// and a rate ratio approximates one when events are rare; the share of
/// rows with no event says how rare they are here.
fn rare_outcome_caveat(table: &Table, y: &str, place: &str) -> Result<String, QueryError> {
    let counts = require_column(table, y, place)?.data.as_reals().unwrap_or_default();
    let zeros = counts.iter().filter(|v| **v == 0.0).count();
    let share = zeros as f64 / counts.len().max(1) as f64;
    Ok(format!(
        "{y} is a count, so the ratio is a rate ratio; the bounding factor and the E-value are proven for risk ratios, and apply to a rate ratio \
         as an approximation when the outcome is rare (VanderWeele & Ding 2017): {zeros} of the {} rows ({:.0}%) have a count of 0{}",
        counts.len(),
        100.0 * share,
        if share < RARE_ZERO_SHARE { ", so events are not rare here and these E-values are rough" } else { "" }
    ))
}

/// Below this share of rows without an event, a count outcome is not
/// called rare (a risk of an event under 10% per row, a common reading of
/// "rare" beside the E-value, recalled).
const RARE_ZERO_SHARE: f64 = 0.9;

/// The ratio of a yes/no or binomial outcome.
pub const RISK_RATIO: &str = "risk ratio";
/// The ratio of a count outcome.
pub const RATE_RATIO: &str = "rate ratio";

/// Observed predictors on the risk-ratio axes; none (with a note) when the
/// exposure does not split the rows into the two groups compared.
#[allow(clippy::too_many_arguments)]
fn ratio_yardsticks(
    model: &Model,
    draws: &Draws,
    table: &Table,
    x: &str,
    to: &str,
    from: &str,
    mean: f64,
    predictors: &[String],
    place: &str,
    notes: &mut Vec<String>,
) -> Result<Vec<RatioYardstick>, QueryError> {
    let exposure = require_column(table, x, place)?;
    let group = |value: &str| -> Vec<bool> {
        match &exposure.data {
            ColumnData::Category { codes, levels } => {
                let k = levels.iter().position(|l| l == value);
                codes.iter().map(|c| Some(*c as usize) == k).collect()
            }
            ColumnData::Binary(v) => v.iter().map(|b| *b == (value == "1")).collect(),
            _ => Vec::new(),
        }
    };
    let (in_to, in_from) = (group(to), group(from));
    if in_to.is_empty() {
        notes.push(format!("{x} is numeric: observed predictors are placed as yardsticks only for a category or yes/no exposure"));
        return Ok(Vec::new());
    }
    let params = parameter_rows(model, draws)?;
    let n = table.nrows();
    let mut out = Vec::new();
    for name in predictors.iter().filter(|p| p.as_str() != x) {
        let Some((parts, settings)) = parts_of(table, name, place)? else { continue };
        // Strength with the exposure: the largest ratio of a part's share between the two groups.
        let share = |group: &[bool], part: usize| {
            let rows = group.iter().filter(|g| **g).count() as f64;
            let hits = parts.iter().zip(group).filter(|(p, g)| **g && **p == part).count() as f64;
            hits / rows.max(1.0)
        };
        let mut to_exposure: f64 = 1.0;
        for part in 0..settings.len() {
            let (a, b) = (share(&in_to, part), share(&in_from, part));
            if a > 0.0 && b > 0.0 {
                to_exposure = to_exposure.max(a / b).max(b / a);
            }
        }
        // Strength with the outcome: the largest ratio of averaged risks across the parts, per draw.
        let rows: Vec<_> = settings
            .iter()
            .map(|s| model.new_rows(&with_column(table, s.column(name, n))))
            .collect::<Result<_, _>>()?;
        let mut total = 0.0;
        for theta in &params {
            let risks: Vec<f64> = rows
                .iter()
                .map(|r| model.predict_mean(theta, r).map(|p| p.mean.iter().sum::<f64>() / n as f64))
                .collect::<Result<_, _>>()?;
            let hi = risks.iter().cloned().fold(f64::MIN, f64::max);
            let lo = risks.iter().cloned().fold(f64::MAX, f64::min);
            total += hi / lo;
        }
        let to_outcome = total / params.len().max(1) as f64;
        let factor = bounding_factor(to_exposure, to_outcome);
        let adjusted_mean = if mean >= 1.0 { mean / factor } else { mean * factor };
        out.push(RatioYardstick { node: name.clone(), to_exposure, to_outcome, adjusted_mean });
    }
    Ok(out)
}

/// Each row's part index, and the setting that stands for each part.
type Parts = (Vec<usize>, Vec<Setting>);

/// Each row's part of predictor `name` (its level or yes/no value, or for a numeric column
/// the half at or below the median (0) or above it (1)) and the setting
/// that stands for each part; `None` when it has a single part.
fn parts_of(table: &Table, name: &str, place: &str) -> Result<Option<Parts>, QueryError> {
    let column = require_column(table, name, place)?;
    if let ColumnData::Binary(v) = &column.data {
        let parts: Vec<usize> = v.iter().map(|b| usize::from(*b)).collect();
        let both = parts.contains(&0) && parts.contains(&1);
        return Ok(both.then(|| (parts, vec![Setting::Number(0.0), Setting::Number(1.0)])));
    }
    if let ColumnData::Category { codes, levels } = &column.data {
        let settings = (0..levels.len()).map(|k| Setting::Level { code: k as u32, levels: levels.clone() }).collect();
        return Ok((levels.len() > 1).then(|| (codes.iter().map(|c| *c as usize).collect(), settings)));
    }
    let Some(v) = column.data.as_reals() else { return Ok(None) };
    let mut sorted = v.clone();
    sorted.sort_by(f64::total_cmp);
    let median = crate::draws::summary::quantile_sorted(&sorted, 0.5);
    let parts: Vec<usize> = v.iter().map(|x| usize::from(*x > median)).collect();
    let mean_of = |p: usize| {
        let picked: Vec<f64> = v.iter().zip(&parts).filter(|(_, q)| **q == p).map(|(x, _)| *x).collect();
        (!picked.is_empty()).then(|| picked.iter().sum::<f64>() / picked.len() as f64)
    };
    Ok(match (mean_of(0), mean_of(1)) {
        (Some(a), Some(b)) => Some((parts, vec![Setting::Number(a), Setting::Number(b)])),
        _ => None,
    })
}
