//! The Bayesian estimate of a total effect identified through the front
//! door (Pearl 2009, *Causality*, eq. 3.42, recalled):
//!
//! `E[y | do(x)] = sum over m of ( Pr[m | x] · sum over x′ of ( E[y | x′, m] · Pr[x′] ) )`.
//!
//! Two regressions are fitted with the ordinary model builder: the
//! mediator from the exposure, and the outcome from the mediator and the
//! exposure. Their likelihoods factorise and their priors are independent,
//! so their posteriors are independent and pairing draws by index gives
//! draws of the joint posterior. For each posterior draw and each row, the
//! mediator is simulated from its model with the exposure set (`Pr[m | x]`),
//! and the outcome model's mean is evaluated at that simulated mediator and
//! the row's *observed* exposure (the inner sum over `x′`, weighted by the
//! rows, i.e. `Pr[x′]`); the row mean is that draw's `E[y | do(x)]`. The two
//! settings share the mediator's noise stream, so their difference is a
//! paired contrast, summarised last.

use std::sync::atomic::AtomicBool;

use rand::rngs::StdRng;
use rand::SeedableRng;

use crate::infer::fit::{fit_model, Fit, Method};
use crate::infer::nuts::Progress;
use crate::model::{Family, Model, ModelSpec};
use crate::table::{Column, ColumnData, Table};

use super::answer::family_for;
use super::contrast::{scale_words, Contrast, On};
use super::error::QueryError;
use super::support::{column_mean, interval_words, parameter_rows, require_column, stream_seed, with_column, ContrastSummary, Setting};

/// The seed of the simulated mediator values.
pub const FRONT_DOOR_SEED: u64 = 27_182;

/// The fitted parts of a front-door estimate.
pub struct FrontDoorFit {
    /// The mediator's model (`m from x`) and its fit.
    pub mediator: (Model, Fit),
    /// The outcome's model (`y from m, x`) and its fit.
    pub outcome: (Model, Fit),
    /// The two model bodies, as written.
    pub texts: [String; 2],
    /// One contrast per comparison of exposure settings.
    pub contrasts: Vec<Contrast>,
    /// Sampler warnings of both fits.
    pub warnings: Vec<String>,
}

/// Fit the two regressions of the front-door formula for `x -> m -> y` and
/// contrast `E[y | do(x)]` between the settings the answer compares.
#[allow(clippy::too_many_arguments)]
pub fn front_door_estimate(
    table: &Table,
    x: &str,
    m: &str,
    y: &str,
    method: &Method,
    cancel: &AtomicBool,
    mass: f64,
    progress: &(dyn Fn(Progress) + Sync),
) -> Result<FrontDoorFit, QueryError> {
    let place = format!("ask total effect of {x} on {y} through the front door");
    let m_family = family_for(table, m, &place)?;
    let y_family = family_for(table, y, &place)?;
    require_column(table, x, &place)?;
    let build = |name: &str, line: String, family: &Family| -> Result<(Model, String), QueryError> {
        let mut lines = vec![line];
        if *family != Family::Normal {
            lines.push(format!("family {}", family.name()));
        }
        let spec = ModelSpec::from_lines(name, lines.iter().enumerate().map(|(i, l)| (i + 1, l.as_str())))?;
        Ok((Model::build(&spec, table)?, lines.join("\n")))
    };
    let (m_model, m_text) = build(&format!("front_door_{m}_from_{x}"), format!("{m} from {x} using {}", table.name), &m_family)?;
    let (y_model, y_text) = build(&format!("front_door_{y}_from_{m}"), format!("{y} from {m}, {x} using {}", table.name), &y_family)?;
    let fit = |model: &Model| {
        fit_model(model, method, cancel, progress).map_err(|e| QueryError::Fit { what: format!("model {}", model.name()), message: e.to_string() })
    };
    let m_fit = fit(&m_model)?;
    let y_fit = fit(&y_model)?;
    let mut warnings: Vec<String> = m_fit.warnings.iter().chain(&y_fit.warnings).cloned().collect();
    let m_params = parameter_rows(&m_model, &m_fit.draws)?;
    let y_params = parameter_rows(&y_model, &y_fit.draws)?;
    let draws = m_params.len().min(y_params.len());
    if m_params.len() != y_params.len() {
        warnings.push(format!("the two fits kept {} and {} draws; the first {draws} of each are paired", m_params.len(), y_params.len()));
    }
    let column = require_column(table, x, &place)?;
    let mut contrasts = Vec::new();
    for (to, from) in settings(column, &place)? {
        QueryError::stop_if(cancel, &place)?;
        let mut changes = Vec::with_capacity(draws);
        let mut means = Vec::with_capacity(draws);
        for d in 0..draws {
            QueryError::stop_if(cancel, &place)?;
            let under_to = mean_under(table, x, &to, m, &m_model, &m_params[d], &y_model, &y_params[d], d)?;
            let under_from = mean_under(table, x, &from, m, &m_model, &m_params[d], &y_model, &y_params[d], d)?;
            changes.push(under_to - under_from);
            means.push((under_to, under_from));
        }
        let s = ContrastSummary::of(&changes, mass)?;
        let is_probability = matches!(y_family, Family::Bernoulli | Family::Binomial { .. });
        contrasts.push(Contrast {
            contrast: format!("{x} {} vs {}", to.text(), from.text()),
            level: None,
            model: y_model.name().to_string(),
            variable: x.to_string(),
            to: to.text(),
            from: from.text(),
            on: "means".to_string(),
            scale: scale_words(&y_model, On::Means, true),
            in_outcome_unit: !is_probability,
            unit: if is_probability { None } else { table.column(y).and_then(|c| c.unit.clone()) },
            mean: s.mean,
            lower: s.lower,
            upper: s.upper,
            share_above_zero: s.share_above_zero,
            share_below_zero: s.share_below_zero,
            mass,
            interval: interval_words(mass),
            held: Vec::new(),
            held_how: format!(
                "front-door formula by simulation: in every row {m} is drawn from its model with {x} set, and {y}'s mean is \
                 taken at that {m} and the row's observed {x}, then averaged over the {} rows (seed {FRONT_DOOR_SEED})",
                table.nrows()
            ),
            over_rows: true,
            along: None,
            grid: Vec::new(),
            seed: Some(FRONT_DOOR_SEED),
            notes: Vec::new(),
            draws: changes,
            means,
        });
    }
    Ok(FrontDoorFit { mediator: (m_model, m_fit), outcome: (y_model, y_fit), texts: [m_text, y_text], contrasts, warnings })
}

/// Every level against the first for a category exposure; mean + 1 vs mean
/// for a numeric one (as the adjustment answer compares).
fn settings(column: &Column, place: &str) -> Result<Vec<(Setting, Setting)>, QueryError> {
    if let Some(levels) = column.data.levels() {
        let first = Setting::read(column, &levels[0], place)?;
        return levels[1..].iter().map(|l| Ok((Setting::read(column, l, place)?, first.clone()))).collect();
    }
    let centre = column_mean(column).ok_or_else(|| QueryError::request(format!("{place}: {} has no values", column.name)))?;
    Ok(vec![(Setting::Number(centre + 1.0), Setting::Number(centre))])
}

/// `E[y | do(x = setting)]` at one posterior draw: the row mean of `y`'s
/// mean at a simulated `m` and the row's own `x`.
#[allow(clippy::too_many_arguments)]
fn mean_under(
    table: &Table,
    x: &str,
    setting: &Setting,
    m: &str,
    m_model: &Model,
    m_params: &[f64],
    y_model: &Model,
    y_params: &[f64],
    d: usize,
) -> Result<f64, QueryError> {
    let set = with_column(table, setting.column(x, table.nrows()));
    let mut rng = StdRng::seed_from_u64(stream_seed(FRONT_DOOR_SEED, d as u64, 1));
    let simulated = m_model.outcome_draw(m_params, &m_model.new_rows(&set)?, &mut rng)?;
    let rows = with_column(table, Column::new(m, ColumnData::Real(simulated)));
    let mean = y_model.predict_mean(y_params, &y_model.new_rows(&rows)?)?.mean;
    Ok(mean.iter().sum::<f64>() / mean.len().max(1) as f64)
}
