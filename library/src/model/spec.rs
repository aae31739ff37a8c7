//! The model specification: the body lines of a `model` cell, read one at a
//! time, and the [`ModelSpec`] they assemble into.
//!
//! ```text
//! model m_direct:
//!     yield from rootstock, girth per rootstock using trees
//!     family normal
//!     prior intercepts: normal(20, 10)
//!     prior spread: exponential(0.5)
//! ```
//!
//! Line forms (one per line, `#` starts a comment):
//! * `<outcome> from <term>, <term>, … using <table>` (or `<outcome> using <table>`
//!   for an intercept-only model). Terms: a column name (a category gives one
//!   intercept per level, a real column a slope), `<x> per <category>` (one
//!   slope of x per level), `powers(<x>, <degree>)` (raw powers 1 to degree of
//!   the standardised x), `spline(<x>, <functions>)`
//!   or `spline(<x>, <functions>, knots <k1> <k2> …)`, `steps(<c>)` or
//!   `steps(<c>: <lowest>, …, <highest>)` (an ordered category whose effect
//!   climbs or falls level by level, [`crate::model::steps`]).
//! * A term `pooled <category>`: each level of the category departs from
//!   the population's prediction by its own amount, the departures drawn
//!   from `normal(0, <category> spread)` with the spread learned (partial
//!   pooling: a level with few rows is pulled towards the population);
//!   `pooled <category> within <outer>` for a category nested in another
//!   whose labels repeat across the outer levels (its levels are the pairs).
//! * `family normal | bernoulli | poisson | gamma_poisson | beta | levels | binomial out of <column>`,
//!   or `family exponential | weibull`, optionally followed by
//!   `cut short by <column>` (a yes/no column: the follow-up ended first).
//!   Without a family line the family follows the outcome column: `levels`
//!   for a category, `normal` otherwise.
//! * `prior <group>: <distribution>`, group one of intercepts, slopes,
//!   weights (spline weights), spread, pooled spreads, overdispersion, precision,
//!   shape, gaps.
//! * `prior for <parameter label>: <distribution>` — one parameter's prior,
//!   by its label as the estimates table prints it (`girth slope[dwarf]`,
//!   `block spread`, `grade cut[severe]`); it takes the place of its group's
//!   prior for that parameter alone. A label may itself hold a colon (a
//!   category outcome's `form[shrub vs herb]: shade slope`): the
//!   distribution follows the last one.
//! * `prior for <c> shares: dirichlet(α)` — the prior of the shares of the
//!   steps term `steps(c)`, the symmetric Dirichlet of concentration α.
//! * `centre on | off` — whether real predictors are centred at their mean
//!   (on by default).
//! * `parameterise <category> centred | noncentred | centred N` — how a
//!   pooled group's departures are sampled (Waypath chooses from the data
//!   otherwise); `centred N` centres the first N effects of a group with
//!   varying slopes (the intercept, then slopes as written) and not the rest.
//!
//! Parsing knows nothing of the data; [`crate::model::Model::build`] checks
//! the names and kinds against the table.

use std::fmt;

use super::error::ModelError;
use super::family::Family;
use super::prior::{Prior, PriorGroup};
pub use super::terms::groups::GroupLayout;

/// The first word of a family line.
pub const FAMILY_LINE: &str = "family";
/// The first word of a prior line.
pub const PRIOR_LINE: &str = "prior";
/// The word after `prior` that turns a prior line to one parameter:
/// `prior for girth slope: normal(0, 1)`.
pub const PRIOR_FOR: &str = "for";
/// The first word of a centring line.
pub const CENTRE_LINE: &str = "centre";
/// The words that start a body line other than the outcome line.
pub const LINE_WORDS: &[&str] = &[FAMILY_LINE, PRIOR_LINE, CENTRE_LINE, PARAMETERISE_LINE];
/// The settings of a centring line: on, off.
pub const CENTRINGS: &[&str] = &["on", "off"];
/// The word between the outcome and its terms.
pub const FROM: &str = "from";
/// The word before the table of the outcome line.
pub const USING: &str = "using";
/// The word between a predictor and the category of its per-level slopes.
pub const PER: &str = "per";
/// The term `powers(x, d)`: raw powers 1 to d of the standardised x (not
/// orthogonal polynomials, so the word names what the columns are).
pub const POWERS: &str = "powers";
/// The B-spline term `spline(x, k[, knots …])`.
pub const SPLINE: &str = "spline";
/// The ordered-category term `steps(c)` or `steps(c: low, …, high)`: one
/// whole effect from the lowest level to the highest, shared out over the
/// steps between neighbouring levels, every step the same sign.
pub const STEPS: &str = "steps";
/// The terms written as calls.
pub const TERM_CALLS: &[&str] = &[POWERS, SPLINE, STEPS];
/// The word before listed interior knots of a spline term.
pub const KNOTS: &str = "knots";
/// The prior of a steps term's shares, `prior for grade shares:
/// dirichlet(α)`: the symmetric Dirichlet with concentration α > 0.
pub const DIRICHLET: &str = "dirichlet";
/// The term `pooled <category>`: one departure per level of the category,
/// drawn from a normal population whose spread the data teach (partial
/// pooling; [`crate::model::terms::groups`]).
pub const POOLED: &str = "pooled";
/// The word after a pooled category that names the numeric predictor whose
/// slope varies with the category's intercept: `pooled block with girth`,
/// or several in brackets: `pooled block with (girth, age)`.
pub const POOLED_WITH: &str = "with";
/// The word after a pooled category that names the category it is nested
/// in: `pooled plot within site` pools the plots of each site, a plot
/// being the pair of its own label and its site's (plot `p1` of site `A` is
/// not plot `p1` of site `B`).
pub const POOLED_WITHIN: &str = "within";
/// The prior group of the correlations between a pooled group's intercept
/// and its varying slopes: `prior pooled correlations: lkj(2)`.
pub const POOLED_CORRELATIONS: &str = "pooled correlations";
/// The only distribution `prior pooled correlations` takes: the LKJ
/// density on correlation matrices, `lkj(η)` with η > 0.
pub const LKJ: &str = "lkj";
/// The first word of a line that sets how a pooled group's departures are
/// sampled: `parameterise <category> centred | noncentred`.
pub const PARAMETERISE_LINE: &str = "parameterise";

/// One term of the right-hand side of the outcome line.
#[derive(Debug, Clone, PartialEq)]
pub enum TermSpec {
    /// A bare column: intercepts per level for a category, a slope otherwise.
    Column(String),
    /// `x per c`: one slope of `x` per level of category `c`.
    Per { predictor: String, by: String },
    /// `powers(x, d)`: powers 1..=d of the standardised predictor.
    Powers { predictor: String, degree: usize },
    /// `spline(x, k)`: k cubic B-spline basis functions of `x`, interior knots
    /// at quantiles unless listed.
    Spline { predictor: String, functions: usize, knots: Option<Vec<f64>> },
    /// `steps(c)` or `steps(c: low, …, high)`: the ordered category `c`
    /// with monotone steps, its levels in the table's declared order or
    /// the order listed.
    Steps { predictor: String, order: Option<Vec<String>> },
    /// `pooled c`: one departure per level of category `c` from the
    /// population, the departures normal around 0 with a learned spread;
    /// `pooled c with x` also gives each level a departure of the slope of
    /// `x`, the two departures jointly normal with a learned correlation;
    /// `pooled c with (x, w)` one per listed slope, all jointly normal;
    /// `pooled c within s …` pools the pairs of `c` and `s` labels (`c`
    /// nested in `s`).
    Pooled { by: String, within: Option<String>, with: Vec<String> },
}

impl TermSpec {
    /// The column whose values enter the term (the `x` of `x per c`).
    pub fn predictor(&self) -> &str {
        match self {
            TermSpec::Column(name) | TermSpec::Pooled { by: name, .. } => name,
            TermSpec::Per { predictor, .. }
            | TermSpec::Powers { predictor, .. }
            | TermSpec::Spline { predictor, .. }
            | TermSpec::Steps { predictor, .. } => predictor,
        }
    }
}

impl fmt::Display for TermSpec {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            TermSpec::Column(name) => write!(f, "{name}"),
            TermSpec::Per { predictor, by } => write!(f, "{predictor} per {by}"),
            TermSpec::Powers { predictor, degree } => write!(f, "{POWERS}({predictor}, {degree})"),
            TermSpec::Steps { predictor, order: None } => write!(f, "{STEPS}({predictor})"),
            TermSpec::Steps { predictor, order: Some(levels) } => write!(f, "{STEPS}({predictor}: {})", levels.join(", ")),
            TermSpec::Pooled { by, within, with } => {
                write!(f, "{POOLED} {by}")?;
                if let Some(outer) = within {
                    write!(f, " {POOLED_WITHIN} {outer}")?;
                }
                match with.as_slice() {
                    [] => Ok(()),
                    [x] => write!(f, " {POOLED_WITH} {x}"),
                    several => write!(f, " {POOLED_WITH} ({})", several.join(", ")),
                }
            }
            TermSpec::Spline { predictor, functions, knots: None } => {
                write!(f, "spline({predictor}, {functions})")
            }
            TermSpec::Spline { predictor, functions, knots: Some(k) } => {
                let listed: Vec<String> = k.iter().map(|v| v.to_string()).collect();
                write!(f, "spline({predictor}, {functions}, knots {})", listed.join(" "))
            }
        }
    }
}

/// The outcome line: `yield from rootstock, girth using trees`.
#[derive(Debug, Clone, PartialEq)]
pub struct Formula {
    pub outcome: String,
    pub terms: Vec<TermSpec>,
    pub table: String,
}

/// One parsed body line of a `model` cell.
#[derive(Debug, Clone, PartialEq)]
pub enum ModelLine {
    Formula(Formula),
    Family(Family),
    Prior { group: PriorGroup, prior: Prior },
    /// `prior for <label>: <distribution>`, the label's spaces collapsed to one.
    ParameterPrior { label: String, prior: Prior },
    /// `prior for <column> shares: dirichlet(α)`, a steps term's shares.
    SharePrior { label: String, concentration: f64 },
    Centring(bool),
    /// `parameterise <category> centred | noncentred`.
    Parameterise { group: String, layout: GroupLayout },
    /// `prior pooled correlations: lkj(η)`.
    CorrelationPrior(f64),
    /// A blank or comment-only line.
    Blank,
}

/// A prior declared for one parameter by its label (`prior for …`).
#[derive(Debug, Clone, PartialEq)]
pub struct ParameterPrior {
    /// The cell line it was declared on (1-based), to place build errors.
    pub line: usize,
    /// The label as the estimates table prints it, spaces collapsed.
    pub label: String,
    pub prior: Prior,
}

/// A whole model specification, ready to be built against a table.
#[derive(Debug, Clone, PartialEq)]
pub struct ModelSpec {
    pub name: String,
    pub outcome: String,
    pub terms: Vec<TermSpec>,
    pub table: String,
    /// The family of the `family` line, or `normal` when there is none
    /// (see [`ModelSpec::family_declared`]).
    pub family: Family,
    /// Whether a `family` line was written; without one, a category outcome
    /// takes the levels family when the model is built.
    pub family_declared: bool,
    /// Declared priors; groups not listed get data-scaled defaults.
    pub priors: Vec<(PriorGroup, Prior)>,
    /// Priors declared for one parameter each, by label (`prior for …`);
    /// each takes the place of its group's prior for that parameter.
    pub parameter_priors: Vec<ParameterPrior>,
    /// Whether real predictors are centred at their mean.
    pub centre: bool,
    /// Cell line of the outcome line (1-based), used to place build errors.
    pub formula_line: Option<usize>,
    /// Pooled groups whose parameterisation a `parameterise` line sets
    /// (otherwise Waypath chooses from the data).
    pub layouts: Vec<(String, GroupLayout)>,
    /// The η of a `prior pooled correlations: lkj(η)` line, if written.
    pub correlation_prior: Option<f64>,
    /// The Dirichlet concentrations declared for steps terms' shares
    /// (`prior for grade shares: dirichlet(3)`).
    pub share_priors: Vec<SharePrior>,
}

/// A declared prior of a steps term's shares.
#[derive(Debug, Clone, PartialEq)]
pub struct SharePrior {
    /// The cell line it was declared on (1-based).
    pub line: usize,
    /// The label as written, spaces collapsed: `grade shares`.
    pub label: String,
    pub concentration: f64,
}

impl ModelSpec {
    /// Assemble a specification from numbered body lines `(line, text)`.
    /// Errors carry the line number.
    pub fn from_lines<'a>(
        name: &str,
        lines: impl IntoIterator<Item = (usize, &'a str)>,
    ) -> Result<ModelSpec, ModelError> {
        let mut formula: Option<(usize, Formula)> = None;
        let mut family: Option<(usize, Family)> = None;
        let mut priors: Vec<(PriorGroup, Prior)> = Vec::new();
        let mut parameter_priors: Vec<ParameterPrior> = Vec::new();
        let mut centre = true;
        let mut layouts: Vec<(String, GroupLayout)> = Vec::new();
        let mut correlation_prior: Option<(usize, f64)> = None;
        let mut share_priors: Vec<SharePrior> = Vec::new();
        for (line, text) in lines {
            let at = |e: ModelError| e.at_line(line);
            match parse_model_line(text).map_err(at)? {
                ModelLine::Formula(f) => set_once(&mut formula, line, f, "outcome line").map_err(at)?,
                ModelLine::Family(f) => set_once(&mut family, line, f, "family line").map_err(at)?,
                ModelLine::Prior { group, prior } => {
                    if priors.iter().any(|(g, _)| *g == group) {
                        return Err(at(ModelError::syntax(format!(
                            "a prior for {} is already declared; keep one",
                            group.name()
                        ))));
                    }
                    priors.push((group, prior));
                }
                ModelLine::ParameterPrior { label, prior } => {
                    if let Some(first) = parameter_priors.iter().find(|p| p.label == label) {
                        return Err(at(ModelError::syntax(format!(
                            "a prior for `{label}` is already declared on line {}; keep one",
                            first.line
                        ))));
                    }
                    parameter_priors.push(ParameterPrior { line, label, prior });
                }
                ModelLine::SharePrior { label, concentration } => {
                    if let Some(first) = share_priors.iter().find(|p| p.label == label) {
                        return Err(at(ModelError::syntax(format!(
                            "a prior for `{label}` is already declared on line {}; keep one",
                            first.line
                        ))));
                    }
                    share_priors.push(SharePrior { line, label, concentration });
                }
                ModelLine::CorrelationPrior(eta) => {
                    set_once(&mut correlation_prior, line, eta, "prior for pooled correlations").map_err(at)?;
                }
                ModelLine::Centring(on) => centre = on,
                ModelLine::Parameterise { group, layout } => {
                    if layouts.iter().any(|(g, _)| *g == group) {
                        return Err(at(ModelError::syntax(format!(
                            "`{group}` is already parameterised on an earlier line; keep one"
                        ))));
                    }
                    layouts.push((group, layout));
                }
                ModelLine::Blank => {}
            }
        }
        let (formula_line, formula) = formula.ok_or_else(|| ModelError::Incomplete {
            message: format!(
                "model `{name}` has no outcome line; add one like `yield from girth using trees`"
            ),
        })?;
        Ok(ModelSpec {
            name: name.to_string(),
            outcome: formula.outcome,
            terms: formula.terms,
            table: formula.table,
            family_declared: family.is_some(),
            family: family.map(|(_, f)| f).unwrap_or(Family::Normal),
            priors,
            parameter_priors,
            centre,
            formula_line: Some(formula_line),
            layouts,
            correlation_prior: correlation_prior.map(|(_, eta)| eta),
            share_priors,
        })
    }

    /// The declared prior for a group, if any.
    pub fn declared_prior(&self, group: PriorGroup) -> Option<&Prior> {
        self.priors.iter().find(|(g, _)| *g == group).map(|(_, p)| p)
    }

    /// The Dirichlet concentration declared for the shares of the steps
    /// term of `column` (`prior for <column> shares: dirichlet(α)`), if any.
    pub fn share_concentration(&self, column: &str) -> Option<f64> {
        let label = super::steps::shares_label(column);
        self.share_priors.iter().find(|p| p.label == label).map(|p| p.concentration)
    }

    /// The prior declared for the parameter `label` itself, if any.
    pub fn declared_for(&self, label: &str) -> Option<&Prior> {
        self.parameter_priors.iter().find(|p| p.label == label).map(|p| &p.prior)
    }
}

fn set_once<T>(slot: &mut Option<(usize, T)>, line: usize, value: T, what: &str) -> Result<(), ModelError> {
    if let Some((first, _)) = slot {
        return Err(ModelError::syntax(format!(
            "a second {what}; the model already has one on line {first}"
        )));
    }
    *slot = Some((line, value));
    Ok(())
}

/// Parse one body line of a `model` cell.
pub fn parse_model_line(text: &str) -> Result<ModelLine, ModelError> {
    let text = text.split('#').next().unwrap_or("").trim();
    if text.is_empty() {
        return Ok(ModelLine::Blank);
    }
    let (head, rest) = text.split_once(char::is_whitespace).unwrap_or((text, ""));
    match head {
        FAMILY_LINE => Family::parse(rest.trim()).map(ModelLine::Family),
        PRIOR_LINE => parse_prior_line(rest.trim()),
        CENTRE_LINE => parse_centring(rest.trim()),
        PARAMETERISE_LINE => parse_parameterise(rest.trim()),
        _ => parse_formula(text).map(ModelLine::Formula),
    }
}

fn parse_prior_line(rest: &str) -> Result<ModelLine, ModelError> {
    if let Some(label) = rest.strip_prefix(PRIOR_FOR).filter(|r| r.starts_with(char::is_whitespace)) {
        return parse_parameter_prior(label.trim());
    }
    let (group_word, dist) = rest.split_once(':').ok_or_else(|| {
        ModelError::syntax(format!(
            "`prior {rest}` needs a colon, like `prior slopes: normal(0, 1)`"
        ))
    })?;
    if group_word.split_whitespace().collect::<Vec<_>>().join(" ") == POOLED_CORRELATIONS {
        return parse_lkj(dist.trim()).map(ModelLine::CorrelationPrior);
    }
    let group = PriorGroup::parse(group_word).ok_or_else(|| {
        ModelError::syntax(format!(
            "`{}` is not a prior group; use {}, `{POOLED_CORRELATIONS}`, or `{PRIOR_LINE} {PRIOR_FOR} <parameter>:` for one \
             parameter by its label",
            group_word.trim(),
            PriorGroup::words().join(", ")
        ))
    })?;
    Ok(ModelLine::Prior { group, prior: Prior::parse(dist)? })
}

/// `<label>: <distribution>` after `prior for`; the distribution follows
/// the last colon, since a label may hold one.
fn parse_parameter_prior(rest: &str) -> Result<ModelLine, ModelError> {
    let usage = || {
        ModelError::syntax(format!(
            "`{PRIOR_LINE} {PRIOR_FOR} {rest}`: write the parameter's label as the estimates table prints it, a colon \
             and the distribution, like `{PRIOR_LINE} {PRIOR_FOR} girth slope: normal(0, 1)`"
        ))
    };
    let (label, dist) = rest.rsplit_once(':').ok_or_else(usage)?;
    let label = label.split_whitespace().collect::<Vec<_>>().join(" ");
    if label.is_empty() {
        return Err(usage());
    }
    if let Some(inner) = call_arguments(dist.trim(), DIRICHLET) {
        let concentration = inner.trim().parse::<f64>().ok().filter(|a| *a > 0.0 && a.is_finite()).ok_or_else(|| {
            ModelError::syntax(format!(
                "`{PRIOR_LINE} {PRIOR_FOR} {rest}`: write `{DIRICHLET}(α)` with α > 0 (1 is flat over the shares, larger \
                 values favour equal steps)"
            ))
        })?;
        return Ok(ModelLine::SharePrior { label, concentration });
    }
    Ok(ModelLine::ParameterPrior { label, prior: Prior::parse(dist)? })
}

/// `lkj(η)`, η a positive finite number.
fn parse_lkj(text: &str) -> Result<f64, ModelError> {
    let usage = || {
        ModelError::syntax(format!(
            "`prior {POOLED_CORRELATIONS}: {text}`: write `{LKJ}(η)` with η > 0 (1 is flat over correlations, \
             larger values favour correlations near 0)"
        ))
    };
    let inner = call_arguments(text, LKJ).ok_or_else(usage)?;
    let eta: f64 = inner.trim().parse().map_err(|_| usage())?;
    if eta > 0.0 && eta.is_finite() { Ok(eta) } else { Err(usage()) }
}

fn parse_centring(rest: &str) -> Result<ModelLine, ModelError> {
    match CENTRINGS.iter().position(|w| *w == rest) {
        Some(i) => Ok(ModelLine::Centring(i == 0)),
        None => Err(ModelError::syntax(format!("`centre {rest}`: write `centre on` or `centre off`"))),
    }
}

fn parse_parameterise(rest: &str) -> Result<ModelLine, ModelError> {
    let usage = || {
        ModelError::syntax(format!(
            "`{PARAMETERISE_LINE} {rest}`: write `{PARAMETERISE_LINE} <pooled category> {}`, `… {}` or, for a group \
             with varying slopes, `… {} N` (the intercept and the first N − 1 slopes centred, the rest non-centred)",
            GroupLayout::Centred.word(),
            GroupLayout::NonCentred.word(),
            GroupLayout::Centred.word()
        ))
    };
    let words: Vec<&str> = rest.split_whitespace().collect();
    let layout = match words[..] {
        [_, layout] => GroupLayout::parse(layout).ok_or_else(usage)?,
        [_, layout, count] if layout == GroupLayout::Centred.word() => {
            let n = crate::limits::whole_number("centred", count, 0, 1000).map_err(|e| {
                ModelError::syntax(format!("`{PARAMETERISE_LINE} {rest}`: {e}; write how many effects are centred, such as `centred 2`"))
            })? as usize;
            if n == 0 {
                return Err(ModelError::syntax(format!(
                    "`{PARAMETERISE_LINE} {rest}`: no effect centred is `{}`; write that, or a count of at least 1",
                    GroupLayout::NonCentred.word()
                )));
            }
            GroupLayout::CentredFirst(n)
        }
        _ => return Err(usage()),
    };
    Ok(ModelLine::Parameterise { group: identifier(words[0], "pooled category")?, layout })
}

fn parse_formula(text: &str) -> Result<Formula, ModelError> {
    let (left, table) = text.rsplit_once(&*format!(" {USING} ")).ok_or_else(|| {
        ModelError::syntax(format!(
            "`{text}` is not a model line; an outcome line ends with `using <table>`, \
             other lines start with family, prior or centre"
        ))
    })?;
    let table = identifier(table.trim(), "table name")?;
    let (outcome, terms) = match left.split_once(&*format!(" {FROM} ")) {
        Some((outcome, terms)) => (outcome, split_terms(terms)?),
        None => (left, Vec::new()),
    };
    let outcome = identifier(outcome.trim(), "outcome")?;
    Ok(Formula { outcome, terms, table })
}

fn split_terms(text: &str) -> Result<Vec<TermSpec>, ModelError> {
    let mut terms = Vec::new();
    let mut depth = 0i32;
    let mut start = 0;
    for (i, ch) in text.char_indices() {
        match ch {
            '(' => depth += 1,
            ')' => depth -= 1,
            ',' if depth == 0 => {
                terms.push(parse_term(&text[start..i])?);
                start = i + 1;
            }
            _ => {}
        }
    }
    if depth != 0 {
        return Err(ModelError::syntax(format!("`{}` has unbalanced brackets", text.trim())));
    }
    terms.push(parse_term(&text[start..])?);
    Ok(terms)
}

/// `pooled c`, `pooled c with x` or `pooled c with (x, w, …)`, each
/// optionally with `within s` after `c` (`rest` is what follows `pooled`).
fn parse_pooled(rest: &str, text: &str) -> Result<TermSpec, ModelError> {
    let form = || {
        ModelError::syntax(format!(
            "`{text}`: write `{POOLED} <category>`, `{POOLED} <category> {POOLED_WITH} <predictor>` or, for several \
             varying slopes, `{POOLED} <category> {POOLED_WITH} (<predictor>, <predictor>, …)`; a category nested \
             in another takes `{POOLED_WITHIN} <outer category>` after its name"
        ))
    };
    let (by, after) = rest.split_once(char::is_whitespace).unwrap_or((rest, ""));
    let by = identifier(by, "category after `pooled`")?;
    let mut after = after.trim();
    let mut within = None;
    if let Some(outer) = after.strip_prefix(POOLED_WITHIN).filter(|l| l.starts_with(char::is_whitespace)) {
        let outer = outer.trim();
        let (name, more) = outer.split_once(char::is_whitespace).unwrap_or((outer, ""));
        let name = identifier(name, &format!("outer category after `{POOLED_WITHIN}`"))?;
        if name == by {
            return Err(ModelError::syntax(format!(
                "`{text}`: `{by}` cannot be nested within itself; name the category its levels sit in"
            )));
        }
        within = Some(name);
        after = more.trim();
    }
    if after.is_empty() {
        return Ok(TermSpec::Pooled { by, within, with: Vec::new() });
    }
    let listed = after
        .strip_prefix(POOLED_WITH)
        .filter(|l| l.starts_with(char::is_whitespace) || l.trim_start().starts_with('('))
        .map(str::trim)
        .ok_or_else(form)?;
    let names: Vec<&str> = match listed.strip_prefix('(') {
        Some(inner) => inner.strip_suffix(')').ok_or_else(form)?.split(',').map(str::trim).collect(),
        None if !listed.contains(char::is_whitespace) => vec![listed],
        None => return Err(form()),
    };
    let mut with: Vec<String> = Vec::with_capacity(names.len());
    for name in names {
        let name = identifier(name, "predictor after `with`")?;
        if with.contains(&name) {
            return Err(ModelError::syntax(format!("`{text}`: `{name}` is listed twice after `{POOLED_WITH}`")));
        }
        with.push(name);
    }
    Ok(TermSpec::Pooled { by, within, with })
}

fn parse_term(text: &str) -> Result<TermSpec, ModelError> {
    let text = text.trim();
    if text.is_empty() {
        return Err(ModelError::syntax("an empty term between commas; remove the extra comma"));
    }
    if let Some(inner) = call_arguments(text, POWERS) {
        return parse_powers(inner, text);
    }
    if let Some(inner) = call_arguments(text, SPLINE) {
        return parse_spline(inner, text);
    }
    if let Some(inner) = call_arguments(text, STEPS) {
        return parse_steps(inner, text);
    }
    if let Some(rest) = text.strip_prefix(POOLED).filter(|rest| rest.starts_with(char::is_whitespace)) {
        return parse_pooled(rest.trim(), text);
    }
    if let Some((x, by)) = text.split_once(&*format!(" {PER} ")) {
        return Ok(TermSpec::Per {
            predictor: identifier(x.trim(), "predictor")?,
            by: identifier(by.trim(), "category after `per`")?,
        });
    }
    Ok(TermSpec::Column(identifier(text, "term")?))
}

/// The text inside `name( … )`, if `text` is such a call.
fn call_arguments<'a>(text: &'a str, name: &str) -> Option<&'a str> {
    let rest = text.strip_prefix(name)?.trim_start();
    rest.strip_prefix('(')?.strip_suffix(')')
}

fn parse_powers(inner: &str, whole: &str) -> Result<TermSpec, ModelError> {
    let parts: Vec<&str> = inner.split(',').map(str::trim).collect();
    let [x, d] = parts[..] else {
        return Err(ModelError::syntax(format!("`{whole}`: write {POWERS}(<column>, <highest power>)")));
    };
    let degree = positive_integer(d, whole, "highest power")?;
    Ok(TermSpec::Powers { predictor: identifier(x, "predictor")?, degree })
}

fn parse_spline(inner: &str, whole: &str) -> Result<TermSpec, ModelError> {
    let parts: Vec<&str> = inner.split(',').map(str::trim).collect();
    let usage = || {
        ModelError::syntax(format!(
            "`{whole}`: write spline(<column>, <functions>) or spline(<column>, <functions>, knots <a> <b> …)"
        ))
    };
    let (x, k, knots) = match parts[..] {
        [x, k] => (x, k, None),
        [x, k, listed] => (x, k, Some(parse_knots(listed, whole).ok_or_else(usage)??)),
        _ => return Err(usage()),
    };
    let functions = positive_integer(k, whole, "number of basis functions")?;
    Ok(TermSpec::Spline { predictor: identifier(x, "predictor")?, functions, knots })
}

/// `c` or `c: low, …, high` inside `steps( … )`.
fn parse_steps(inner: &str, whole: &str) -> Result<TermSpec, ModelError> {
    let usage = || {
        ModelError::syntax(format!(
            "`{whole}`: write {STEPS}(<category>) for its declared level order, or {STEPS}(<category>: <lowest>, …, \
             <highest>) listing every level lowest first"
        ))
    };
    let (name, listed) = match inner.split_once(':') {
        Some((name, listed)) => (name, Some(listed)),
        None => (inner, None),
    };
    let predictor = identifier(name.trim(), "category").map_err(|_| usage())?;
    let order = match listed {
        None => None,
        Some(listed) => {
            let levels: Vec<String> = listed.split(',').map(|l| l.trim().to_string()).collect();
            if levels.iter().any(String::is_empty) {
                return Err(usage());
            }
            if let Some(twice) = levels.iter().enumerate().find(|(i, l)| levels[..*i].contains(l)).map(|(_, l)| l) {
                return Err(ModelError::syntax(format!("`{whole}`: level `{twice}` is listed twice; list each level once")));
            }
            Some(levels)
        }
    };
    Ok(TermSpec::Steps { predictor, order })
}

fn parse_knots(listed: &str, whole: &str) -> Option<Result<Vec<f64>, ModelError>> {
    let values = listed.strip_prefix(KNOTS)?;
    Some(
        values
            .split_whitespace()
            .map(|v| {
                v.parse::<f64>().ok().filter(|x| x.is_finite()).ok_or_else(|| {
                    ModelError::syntax(format!("`{whole}`: knot `{v}` is not a number"))
                })
            })
            .collect(),
    )
}

fn positive_integer(text: &str, whole: &str, what: &str) -> Result<usize, ModelError> {
    text.parse::<usize>().ok().filter(|&v| v > 0).ok_or_else(|| {
        ModelError::syntax(format!("`{whole}`: the {what} `{text}` must be a whole number above 0"))
    })
}

fn identifier(text: &str, what: &str) -> Result<String, ModelError> {
    let mut chars = text.chars();
    let first_ok = chars.next().is_some_and(|c| c.is_alphabetic() || c == '_');
    if first_ok && chars.all(|c| c.is_alphanumeric() || c == '_' || c == '.') {
        Ok(text.to_string())
    } else {
        Err(ModelError::syntax(format!(
            "`{text}` is not a valid {what}; names are letters, digits, `_` and `.`, starting with a letter"
        )))
    }
}
