//! One-statement answers: from a graph, a table, an exposure, an outcome and
//! the kind of effect to a fitted adjustment model and its contrasts.
//!
//! The graph's first (smallest) adjustment set is used; the model is
//! `outcome from exposure, set…` with the family read from the outcome's
//! kind (real → normal, count → poisson, binary → bernoulli). Every term
//! enters additively: for a direct effect the mediators are held in the
//! model but the exposure's effect is taken to be the same at every mediator
//! value (write a `model` cell with `x per c` terms for more). The
//! contrasts are averaged over the table's rows (standardisation), the
//! estimand a simulated intervention also targets: every level against the
//! first for a category exposure, one unit above the mean against the mean
//! for a numeric one. A total effect that no set identifies but a formula
//! does (the front door, the complete algorithm) is estimated from that
//! formula ([`super::formula_estimate`]); a direct effect that no
//! single-door set identifies, as a controlled direct effect by the
//! complete algorithm ([`super::direct_formula`]). When the graph says the effect is
//! not identifiable, nothing is fitted and the answer says why. When the graph itself says the
//! effect is zero (no directed path, or no edge for a direct effect), that is
//! the answer: nothing is fitted unless the caller asks to check the zero,
//! which then fits the model given the first set that blocks the backdoor
//! (or other) paths — never an unadjusted association.

use std::sync::atomic::AtomicBool;

use serde::Serialize;

use crate::graph::{EffectKind, Graph, Identification};
use crate::infer::fit::{fit_model, Fit, Method};
use crate::infer::nuts::Progress;
use crate::model::{Family, Model, ModelSpec};
use crate::table::{ColumnData, Table};

use super::contrast::{level_contrasts, Contrast, ContrastRequest};
use super::direct_formula::direct_by_formula;
use super::error::QueryError;
use super::formula_estimate::{check_formula, formula_estimate};
use super::support::require_column;

/// Most paths listed in the reason for a set.
const PATHS_SHOWN: usize = 12;

/// The answer to "what is the effect of X on Y?".
#[derive(Debug, Clone, Serialize)]
pub struct EffectAnswer {
    /// The question in words.
    pub question: String,
    pub identification: Identification,
    /// The set conditioned on, when the effect is identifiable.
    pub adjustment_set: Option<Vec<String>>,
    /// The model body the answer built (one line per model line).
    pub model_text: Option<String>,
    /// Why the set: the criterion and every path with its status given the set.
    pub why: Vec<String>,
    /// What the contrasts estimate, in words.
    pub estimand: Option<String>,
    /// One contrast per comparison made.
    pub contrasts: Vec<Contrast>,
    /// The fit's method in words.
    pub method: Option<String>,
    /// Sampler warnings and notes on the choices made.
    pub warnings: Vec<String>,
    /// The built model (not serialised).
    #[serde(skip)]
    pub model: Option<Model>,
    /// The fit (not serialised).
    #[serde(skip)]
    pub fit: Option<Fit>,
    /// How the effect was estimated: `adjustment`, `front door`,
    /// `complete algorithm`, or none.
    pub route: Option<String>,
    /// The other conditionals an identifying formula needed (a front
    /// door's mediators, …), each with its fit and body (not serialised);
    /// the outcome's model is `model`, its body `model_text`.
    #[serde(skip)]
    pub other_models: Vec<(Model, Fit, String)>,
}

/// Identify, build, fit and contrast the `kind` effect of `exposure` on
/// `outcome` in `graph`, with data from `table`, fitted by `method`.
#[allow(clippy::too_many_arguments)]
pub fn answer_effect(
    graph: &Graph,
    table: &Table,
    exposure: &str,
    outcome: &str,
    kind: EffectKind,
    method: &Method,
    cancel: &AtomicBool,
    mass: f64,
) -> Result<EffectAnswer, QueryError> {
    answer_effect_with_progress(graph, table, exposure, outcome, kind, &AskOptions::default(), method, cancel, mass, &|_| {})
}

/// What a question may ask beyond the defaults.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct AskOptions {
    /// Fit a model even where the graph says the effect is zero.
    pub check_zero: bool,
    /// For a direct effect: nodes of the set held at stated values in every
    /// row, `(name, value)` — the controlled direct effect at those values.
    pub held: Vec<(String, String)>,
    /// The two settings of the exposure to compare, `(to, from)` as
    /// written; `None`: every level against the first (a category), or
    /// one unit above the mean against the mean (a number).
    pub settings: Option<(String, String)>,
    /// Category columns whose clusters the model pools (`pooling c`): each
    /// enters as `pooled c`, and the contrasts average over its observed levels.
    pub pooled: Vec<String>,
    /// A category of the set by whose levels the numeric exposure's slope
    /// varies (`varying by c`): the exposure enters as `x per c`.
    pub varying_by: Option<String>,
}

/// [`answer_effect`] with `options`, reporting the sampler's progress to `progress`.
#[allow(clippy::too_many_arguments)]
pub fn answer_effect_with_progress(
    graph: &Graph,
    table: &Table,
    exposure: &str,
    outcome: &str,
    kind: EffectKind,
    options: &AskOptions,
    method: &Method,
    cancel: &AtomicBool,
    mass: f64,
    progress: &(dyn Fn(Progress) + Sync),
) -> Result<EffectAnswer, QueryError> {
    let identification = match kind {
        EffectKind::Total => graph.total_effect_with_cancel(exposure, outcome, cancel)?,
        EffectKind::Direct => graph.direct_effect_with_cancel(exposure, outcome, cancel)?,
    };
    let kind_words = match kind {
        EffectKind::Total => "total",
        EffectKind::Direct => "direct",
    };
    let question = format!("{kind_words} effect of {exposure} on {outcome} in {}", graph.name());
    let mut answer = EffectAnswer {
        question: question.clone(),
        identification: identification.clone(),
        adjustment_set: None,
        model_text: None,
        why: vec![identification.reason.clone()],
        estimand: None,
        contrasts: Vec::new(),
        method: None,
        warnings: Vec::new(),
        model: None,
        fit: None,
        route: None,
        other_models: Vec::new(),
    };
    if identification.zero_by_graph && !options.check_zero {
        answer.why.push(format!(
            "the graph says this effect is zero, so nothing was fitted; add `checking zero` to the statement to estimate it{}",
            if identification.adjustment_sets.is_empty() { " (no set of observed nodes allows that here)" } else { " given the first set listed" }
        ));
        return Ok(answer);
    }
    let formula_route = identification.beyond.as_ref().filter(|b| b.identified && kind == EffectKind::Total);
    if let (false, Some(beyond), Some(formula)) = (identification.identifiable, formula_route, formula_route.and_then(|b| b.formula.as_ref())) {
        if let Err(why) = check_formula(table, formula, exposure, outcome, &beyond.also_set) {
            answer.why.extend(beyond.lines());
            answer.why.push(format!("{why}; nothing was fitted"));
            return Ok(answer);
        }
        let estimate = formula_estimate(table, exposure, outcome, formula, &beyond.also_set, method, cancel, mass, progress)?;
        answer.why.extend(beyond.lines());
        let mut estimand = formula_estimand(beyond, exposure, outcome);
        if estimate.contrasts.iter().any(|c| c.level.is_some()) {
            estimand = estimand.replacen("on the mean outcome", &format!("on the probability of each level of {outcome}"), 1);
        }
        answer.estimand = Some(estimand);
        answer.method = Some(method.describe());
        answer.warnings.extend(estimate.warnings);
        answer.contrasts = estimate.contrasts;
        answer.route = Some(beyond.route.clone());
        let mut fitted: Vec<(Model, Fit, String)> = estimate.conditionals.into_iter().map(|c| (c.model, c.fit, c.text)).collect();
        let (y_model, y_fit, y_text) = fitted.pop().expect("the outcome's conditional is fitted last");
        answer.model_text = Some(y_text);
        answer.model = Some(y_model);
        answer.fit = Some(y_fit);
        answer.other_models = fitted;
        return Ok(answer);
    }
    if kind == EffectKind::Direct && !identification.identifiable && !identification.zero_by_graph {
        return direct_by_formula(graph, table, exposure, outcome, options, method, cancel, mass, progress, answer);
    }
    let Some(set) = identification.adjustment_sets.first().filter(|_| identification.identifiable) else {
        if identification.identifiable {
            answer.why.push("no set of observed nodes lets the data check the graph's claim, so nothing was fitted".into());
        } else {
            answer.why.push("nothing was fitted".into());
        }
        return Ok(answer);
    };
    let place = format!("ask {question}");
    for name in std::iter::once(exposure).chain(std::iter::once(outcome)).chain(set.iter().map(String::as_str)) {
        require_column(table, name, &place)?;
    }
    check_held(kind, set, &options.held, &place)?;
    answer.why.extend(set_reasons(graph, exposure, outcome, set, &identification)?);
    let name = format!("{kind_words}_{exposure}_on_{outcome}");
    let SetModel { model, family, lines } = set_model(table, exposure, outcome, set, options, &name, &place)?;
    let fit = fit_model(&model, method, cancel, progress)
        .map_err(|e| QueryError::Fit { what: format!("model {name}"), message: e.to_string() })?;
    answer.warnings.extend(fit.warnings.iter().cloned());
    if kind == EffectKind::Direct && options.varying_by.is_none() && set.iter().any(|s| table.column(s).is_some_and(|c| c.data.levels().is_none())) {
        answer.warnings.push(format!(
            "the model takes the direct effect of {exposure} to be the same at every value of {}; \
             add `varying by C` for a category C of the set, or write a model cell, to let it vary",
            set.join(", ")
        ));
    }
    if let Some(c) = &options.varying_by {
        answer.warnings.push(format!(
            "{exposure}'s slope is fitted for each level of {c}; the contrasts average each row's own level's slope over the rows \
             (hold {c} with `at {c} LEVEL` for one level's)"
        ));
    }
    answer.estimand = Some(estimand(kind, &family, set, &options.held));
    answer.contrasts = comparisons(table, exposure, mass, options)?
        .iter()
        .map(|request| level_contrasts(&model, &fit.draws, table, request))
        .collect::<Result<Vec<_>, _>>()?
        .into_iter()
        .flatten()
        .collect();
    answer.adjustment_set = Some(set.clone());
    answer.route = Some("adjustment".into());
    answer.model_text = Some(lines.join("\n"));
    answer.method = Some(method.describe());
    answer.model = Some(model);
    answer.fit = Some(fit);
    Ok(answer)
}

/// The model an adjustment set asks for, its family and its body.
pub(crate) struct SetModel {
    pub model: Model,
    pub family: Family,
    pub lines: Vec<String>,
}

/// Build `outcome from exposure, set…` (with `options`' varying slope and
/// pooled columns) on `table` as model `name`: the family from the
/// outcome's kind, a category outcome's a levels model.
pub(crate) fn set_model(
    table: &Table,
    exposure: &str,
    outcome: &str,
    set: &[String],
    options: &AskOptions,
    name: &str,
    place: &str,
) -> Result<SetModel, QueryError> {
    for column in std::iter::once(exposure).chain(std::iter::once(outcome)).chain(set.iter().map(String::as_str)) {
        require_column(table, column, place)?;
    }
    let family = match require_column(table, outcome, place)?.data {
        ColumnData::Category { .. } => Family::Levels,
        _ => family_for(table, outcome, place)?,
    };
    let mut terms = vec![exposure_term(table, exposure, set, options.varying_by.as_deref(), place)?];
    terms.extend(set.iter().cloned());
    for cluster in &options.pooled {
        require_column(table, cluster, place)?;
        if terms.contains(cluster) || cluster == outcome {
            return Err(QueryError::request(format!(
                "{place}: {cluster} already enters the model as the exposure, the outcome or a member of the \
                 adjustment set, so it cannot also be pooled; pool a column that only marks the clusters"
            )));
        }
        terms.push(format!("pooled {cluster}"));
    }
    let mut lines = vec![format!("{outcome} from {} using {}", terms.join(", "), table.name)];
    if family != Family::Normal {
        lines.push(format!("family {}", family.name()));
    }
    let spec = ModelSpec::from_lines(name, lines.iter().enumerate().map(|(i, l)| (i + 1, l.as_str())))?;
    let model = Model::build(&spec, table)?;
    Ok(SetModel { model, family, lines })
}

/// The exposure's term: `x`, or `x per c` when its slope varies by the
/// levels of category `c`, which must be in the set and `x` numeric.
fn exposure_term(table: &Table, exposure: &str, set: &[String], varying_by: Option<&str>, place: &str) -> Result<String, QueryError> {
    let Some(c) = varying_by else { return Ok(exposure.to_string()) };
    if !set.iter().any(|s| s == c) {
        return Err(QueryError::request(format!(
            "{place}: `varying by {c}` needs {c} in the set conditioned on ({}); name one of those",
            if set.is_empty() { "nothing".to_string() } else { set.join(", ") }
        )));
    }
    if require_column(table, c, place)?.data.levels().is_none() {
        return Err(QueryError::request(format!("{place}: `varying by {c}`: {c} is numeric; slopes vary by the levels of a category")));
    }
    if require_column(table, exposure, place)?.data.levels().is_some() {
        return Err(QueryError::request(format!(
            "{place}: `varying by {c}`: {exposure} is a category, so it has no slope; its level contrasts already come per row"
        )));
    }
    Ok(format!("{exposure} per {c}"))
}

/// What a formula route's contrasts estimate, in words.
fn formula_estimand(beyond: &crate::graph::Beyond, exposure: &str, outcome: &str) -> String {
    if beyond.route == "front door" {
        let m = beyond.front_door_set.join(", ");
        return format!(
            "average total effect on the mean outcome by the front-door formula through {m}: the response of {m} to {exposure}, \
             combined with {outcome}'s response to {m} given the rows' own {exposure}"
        );
    }
    format!(
        "average total effect on the mean outcome by the identifying formula of the complete algorithm, evaluated from \
         regressions of the observed conditionals it names ({})",
        beyond.formula_nodes.join(", ")
    )
}

/// `at …` holds members of a direct effect's conditioning set only.
fn check_held(kind: EffectKind, set: &[String], held: &[(String, String)], place: &str) -> Result<(), QueryError> {
    if held.is_empty() {
        return Ok(());
    }
    if kind == EffectKind::Total {
        return Err(QueryError::request(format!(
            "{place}: `at` holds mediators fixed, which a total effect does not do; ask the direct effect with `at`"
        )));
    }
    match held.iter().find(|(name, _)| !set.contains(name)) {
        Some((name, _)) => Err(QueryError::request(format!(
            "{place}: {name} is not in the set conditioned on ({}), so it cannot be held; hold one of those",
            if set.is_empty() { "nothing".to_string() } else { set.join(", ") }
        ))),
        None => Ok(()),
    }
}

/// What the answer's contrasts estimate, in words.
///
/// A total effect standardised over the rows is the average total effect
/// on the outcome's mean (the g-formula by standardisation). A direct
/// effect averaged over rows holds the conditioning set at each row's
/// observed values: on an identity link with additive terms that equals
/// the controlled direct effect at any mediator value, but under a logit or
/// log link it is an average of controlled direct effects over the observed
/// mediator values — neither the controlled direct effect at one value nor
/// a natural direct effect. `at m v` sets m to v in every row, which gives
/// the controlled direct effect at that value (averaged over the rest).
pub fn estimand(kind: EffectKind, family: &Family, set: &[String], held: &[(String, String)]) -> String {
    let others = || if set.is_empty() { "no other node".to_string() } else { set.join(", ") };
    let on = if *family == Family::Levels { "each outcome level's probability" } else { "the mean outcome" };
    match kind {
        EffectKind::Total => format!("average total effect on {on}, standardised over the rows' {}", others()),
        EffectKind::Direct if !held.is_empty() => {
            let at: Vec<String> = held.iter().map(|(n, v)| format!("{n} = {v}")).collect();
            let rest: Vec<&str> = set.iter().filter(|s| !held.iter().any(|(n, _)| n == *s)).map(String::as_str).collect();
            let averaged = if rest.is_empty() { String::new() } else { format!(", averaged over the rows' {}", rest.join(", ")) };
            format!("controlled direct effect with {} set in every row{averaged}", at.join(", "))
        }
        EffectKind::Direct if *family == Family::Normal => format!(
            "controlled direct effect on the mean outcome: with additive terms on the identity link it is the same at \
             every value of {}",
            others()
        ),
        EffectKind::Direct => format!(
            "average of controlled direct effects, each with {} at a row's observed values, averaged over rows; \
             under the {} link this differs from the controlled direct effect at any one value (state values \
             with `at NODE VALUE`) and from a natural direct effect",
            others(),
            family.link_name()
        ),
    }
}

/// The family of a model of `outcome`, from its kind.
pub(crate) fn family_for(table: &Table, outcome: &str, place: &str) -> Result<Family, QueryError> {
    match &require_column(table, outcome, place)?.data {
        ColumnData::Real(_) => Ok(Family::Normal),
        ColumnData::Count(_) => Ok(Family::Poisson),
        ColumnData::Binary(_) => Ok(Family::Bernoulli),
        ColumnData::Category { levels, .. } => Err(QueryError::request(format!(
            "{place}: {outcome} is a category ({}), and this answer compares means, which a category does not \
             have; watch {outcome} in a joint model's `intervene` for the change in its level shares",
            levels.join(", ")
        ))),
    }
}

/// The two settings asked for; else every level against the first for a
/// category exposure, centre + 1 vs centre for a numeric one; each
/// averaged over rows.
pub(crate) fn comparisons(table: &Table, exposure: &str, mass: f64, options: &AskOptions) -> Result<Vec<ContrastRequest>, QueryError> {
    let column = require_column(table, exposure, "ask")?;
    let base = ContrastRequest { over_rows: true, mass, held: options.held.clone(), ..ContrastRequest::new(exposure) };
    if let Some((to, from)) = &options.settings {
        return Ok(vec![base.between(to.clone(), from.clone())]);
    }
    Ok(match column.data.levels() {
        Some(levels) => levels[1..].iter().map(|l| base.clone().between(l.clone(), levels[0].clone())).collect(),
        None => vec![base],
    })
}

/// The criterion's verdict on the chosen set, and each path between
/// exposure and outcome with its status given the set.
fn set_reasons(
    graph: &Graph,
    exposure: &str,
    outcome: &str,
    set: &[String],
    identification: &Identification,
) -> Result<Vec<String>, QueryError> {
    let mut why = Vec::new();
    let members = if set.is_empty() { "nothing".to_string() } else { set.join(", ") };
    why.push(format!("conditioning on {members}, the first (smallest) of the sets the graph allows"));
    if identification.adjustment_sets.len() > 1 {
        let others: Vec<String> = identification.adjustment_sets[1..]
            .iter()
            .map(|s| if s.is_empty() { "nothing".into() } else { s.join(", ") })
            .collect();
        why.push(format!("these sets would do as well: {}", others.join("; ")));
    }
    let paths = graph.paths(exposure, outcome, set)?;
    let shown = paths.len().min(PATHS_SHOWN);
    why.extend(paths[..shown].iter().map(|p| format!("path {}", p.render())));
    if paths.len() > shown {
        why.push(format!("… and {} longer paths", paths.len() - shown));
    }
    Ok(why)
}
