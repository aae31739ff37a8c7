//! Mechanisms of a `simulate` cell, one line per node:
//!
//! ```text
//! rootstock = category(dwarf 0.5, standard 0.5)
//! girth = normal(28 + 6 * [rootstock = standard], 4)
//! healthy = bernoulli(logit = -1 + 0.1 * (girth - 28))
//! fruit = poisson(log = 1 + 0.02 * girth)
//! ```
//!
//! Distributions: `category(level share, …)` (shares sum to 1),
//! `normal(mean, sd)`, `bernoulli(p)` or `bernoulli(logit = η)`,
//! `poisson(rate)` or `poisson(log = η)`, and `gamma_poisson(rate, κ)` or
//! `gamma_poisson(log = η, κ)`: a poisson count whose rate is multiplied,
//! row by row, by a gamma variable of mean 1 and sd κ (a positive
//! expression, the overdispersion of a `gamma_poisson` model), and
//! `beta(mean, φ)` or `beta(logit = η, φ)`: a share in (0, 1) with that
//! mean and precision φ (a positive expression, the precision of a `beta`
//! model), and `exponential(mean)` or `exponential(log = η)` and
//! `weibull(mean, k)` or `weibull(log = η, k)`: a positive time with that
//! mean (Weibull with shape k, a positive expression, the shape of a
//! `weibull` model), and `graded(score, lowest, level cut, …)`: an ordered category
//! whose row falls in the level between the cuts around its latent score,
//! `score` plus a standard logistic error — the levels lowest first, each
//! after the first with the cut below it (increasing numbers), what a
//! `graded` model assumes. Expressions use numbers, parent
//! names, `+ - * /`, parentheses, `log(…)`, `exp(…)` and indicators
//! `[c = level]` (1 when category c is at that level, else 0),
//! `steps(c, whole: level share, …)` (monotone steps of an ordered
//! category, written out as indicators of the named levels), and
//! `departure(c, spread)`: clustered data. Each level of category c gets its
//! own departure, drawn once per simulation from `normal(0, spread)` (the
//! spread a positive number), and a row takes the departure of its level —
//! what a pooled group (`pooled c`) of a model assumes.
//! `departure(c, spread, x)` is a departure of the slope of numeric parent
//! `x` instead: each level of c gets its own slope departure, drawn once
//! from `normal(0, spread)` independently of every other departure, and a
//! row takes its level's slope departure times its own `x` — what a varying
//! slope (`pooled c with x`) assumes, with every correlation 0.
//! `departure(c, spread, x, correlation r)` states the correlation `r`
//! (strictly between −1 and 1) of the slope's departures with the
//! intercept's `departure(c, …)` of the same mechanism, which must be
//! there: level j's slope departure is `spread·(r·z₀ⱼ + √(1 − r²)·zⱼ)`,
//! `z₀ⱼ` the intercept departure's standard score, so two slopes each
//! correlated with the intercept correlate with each other by the product
//! of their correlations, unless a `correlation q with w` part of one of
//! them states the correlation with slope w's departures (of the same
//! category, in the same mechanism). A category's departures are drawn
//! jointly through the Cholesky factor of that correlation matrix, which
//! the parser checks is positive definite. A node's
//! mechanism may name each category in at most one `departure(c, …)` and
//! each pair of category and slope in at most one `departure(c, …, x)`.
//!
//! A time mechanism may end with a follow-up rule,
//! `followed until END cut short by COLUMN`: each row is followed until END
//! (an expression of numbers and parents, or `uniform(LO, HI)` for an end
//! drawn per row between two such expressions), and a row whose time comes
//! later is written with its follow-up end as its time and yes in COLUMN, a
//! column of the table that is not a node — what a time model's
//! `cut short by COLUMN` reads. The rule is how the rows are observed, not
//! part of the world: other nodes read the times before the cut.
//!
//! Parsing knows nothing of the graph; [`super::simulate`] checks the names.

use std::fmt;

use crate::model::family::survival::{CAME_BY, CUT_SHORT_BY};

/// The distributions of a mechanism, each written as a call.
pub const DISTRIBUTIONS: &[&str] = &[CATEGORY, NORMAL, BERNOULLI, POISSON, GAMMA_POISSON, BETA, GRADED, LEVELS, EXPONENTIAL, WEIBULL];
pub const CATEGORY: &str = "category";
pub const NORMAL: &str = "normal";
pub const BERNOULLI: &str = "bernoulli";
pub const POISSON: &str = "poisson";
pub const GAMMA_POISSON: &str = "gamma_poisson";
pub const BETA: &str = "beta";
pub const EXPONENTIAL: &str = "exponential";
pub const WEIBULL: &str = "weibull";
pub const GRADED: &str = "graded";
/// A category drawn by softmax from each level's log odds against the
/// first: `levels(herb, shrub = 0.4 + departure(site, 0.8), tree = -0.2)`.
pub const LEVELS: &str = "levels";
/// The words before a time mechanism's follow-up end.
pub const FOLLOWED_UNTIL: [&str; 2] = ["followed", "until"];
/// A follow-up end drawn per row, uniformly between two values.
pub const UNIFORM: &str = "uniform";
/// The keyword of a bernoulli mechanism given on the logit scale.
pub const LOGIT: &str = "logit";
/// The keyword of a poisson mechanism given on the log scale.
pub const LOG: &str = "log";
/// The functions of a mechanism expression: `log(…)`, `exp(…)`,
/// `departure(category, spread)`, `steps(category, whole: level share, …)`.
pub const FUNCTIONS: &[&str] = &[LOG, EXP, DEPARTURE, STEPS];
/// Monotone steps of an ordered category parent: `steps(canopy, 4:
/// sparse 0.25, partial 0.1, dense 0.5, closed 0.15)` adds, at each level
/// named, the whole effect times the shares of the steps up to it (0 at
/// the lowest level, left unnamed), the same effects a model's
/// `steps(canopy)` term learns. It is written out as indicators, so every
/// other part of a simulation reads it as such.
pub const STEPS: &str = "steps";
/// The most levels a `steps(…)` of a mechanism may name.
const MOST_STEP_LEVELS: usize = 100;
const EXP: &str = "exp";
/// The word of a per-level departure drawn from a stated spread.
pub const DEPARTURE: &str = "departure";
/// The word before a slope departure's stated correlation with the
/// intercept's (`departure(block, 0.1, girth, correlation 0.5)`).
pub const CORRELATION_WORD: &str = "correlation";
/// The word before the other slope of a correlation between two slopes'
/// departures (`departure(block, 0.1, age, correlation 0.3 with girth)`).
pub const CORRELATION_WITH: &str = "with";
/// The word between a nested category and the category it sits in
/// (`departure(plot within site, 0.5)`), as in a model's pooled term.
pub const DEPARTURE_WITHIN: &str = "within";
/// The deepest an expression may nest: parentheses, signs, functions and
/// every operator of a chain each add one level. Evaluation recurses this
/// deep, so the limit keeps a hostile line from overflowing the stack.
pub const MAX_EXPRESSION_DEPTH: usize = 200;

/// An arithmetic expression of a mechanism.
#[derive(Debug, Clone, PartialEq)]
pub enum Expr {
    Number(f64),
    /// The value of a numeric node (binary as 0/1).
    Name(String),
    /// `[c = level]`.
    Indicator { name: String, level: String },
    Negate(Box<Expr>),
    Add(Box<Expr>, Box<Expr>),
    Subtract(Box<Expr>, Box<Expr>),
    Multiply(Box<Expr>, Box<Expr>),
    Divide(Box<Expr>, Box<Expr>),
    Log(Box<Expr>),
    Exp(Box<Expr>),
    /// `departure(group, spread)`: the departure of the row's level of
    /// category `group`, the levels' departures drawn from `normal(0, spread)`;
    /// with a `slope` (`departure(group, spread, x)`), the level's slope
    /// departure times the row's `x`.
    Departure(DepartureTerm),
}

/// One `departure(…)` of a mechanism.
#[derive(Debug, Clone, PartialEq)]
pub struct DepartureTerm {
    /// The category whose levels depart.
    pub group: String,
    /// In a `levels(…)` mechanism, the outcome level whose log odds the
    /// departure moves (set by [`Mechanism::departures`]; `None` elsewhere).
    pub outcome_level: Option<String>,
    /// The stated spread of the departures.
    pub spread: f64,
    /// The numeric parent whose slope departs (`None`: the intercept's departure).
    pub slope: Option<String>,
    /// A slope's stated correlation with the intercept's departures
    /// (`None`: drawn independently of them).
    pub correlation: Option<f64>,
    /// A slope's stated correlations with other slopes' departures of the
    /// same category (`correlation q with x`), by the other slope's parent.
    pub with_slopes: Vec<(String, f64)>,
    /// For departures of `group` nested in another category
    /// (`departure(plot within site, spread)`), that category: one
    /// departure per pair of their levels.
    pub within: Option<String>,
}

impl DepartureTerm {
    /// `departure(block, 0.8)` or `departure(block, 0.1, girth)`, with the
    /// spread written out by `spread`.
    pub fn written(&self, spread: &str) -> String {
        let group = match &self.within {
            Some(outer) => format!("{} {DEPARTURE_WITHIN} {outer}", self.group),
            None => self.group.clone(),
        };
        let Some(x) = &self.slope else { return format!("{DEPARTURE}({group}, {spread})") };
        let mut parts = vec![group, spread.to_string(), x.clone()];
        parts.extend(self.correlation.map(|r| format!("{CORRELATION_WORD} {r}")));
        parts.extend(self.with_slopes.iter().map(|(w, q)| format!("{CORRELATION_WORD} {q} {CORRELATION_WITH} {w}")));
        format!("{DEPARTURE}({})", parts.join(", "))
    }
}

/// How an expression reads a node.
#[derive(Debug, Clone, PartialEq)]
pub enum Use {
    /// Its value, as a number.
    Number,
    /// Whether a category is at this level (`[c = level]`).
    Level(String),
    /// A category's levels, each with its own departure (`departure(c, …)`).
    Group,
}

impl Expr {
    /// Evaluate with `value(name)` for numeric nodes, `is_level(name,
    /// level)` for indicators and `departure(term)` for the row's departure
    /// in a group (its level's slope departure for a slope's term, which the
    /// evaluation multiplies by the row's value of the slope's parent).
    pub fn eval(&self, value: &dyn Fn(&str) -> f64, is_level: &dyn Fn(&str, &str) -> bool, departure: &dyn Fn(&DepartureTerm) -> f64) -> f64 {
        let e = |x: &Expr| x.eval(value, is_level, departure);
        match self {
            Expr::Number(x) => *x,
            Expr::Name(n) => value(n),
            Expr::Indicator { name, level } => f64::from(u8::from(is_level(name, level))),
            Expr::Negate(a) => -e(a),
            Expr::Add(a, b) => e(a) + e(b),
            Expr::Subtract(a, b) => e(a) - e(b),
            Expr::Multiply(a, b) => e(a) * e(b),
            Expr::Divide(a, b) => e(a) / e(b),
            Expr::Log(a) => e(a).ln(),
            Expr::Exp(a) => e(a).exp(),
            Expr::Departure(term) => departure(term) * term.slope.as_deref().map_or(1.0, value),
        }
    }

    /// Every node the expression reads, and how.
    pub fn uses(&self) -> Vec<(String, Use)> {
        let mut out = Vec::new();
        self.collect_uses(&mut out);
        out
    }

    /// Every `departure(…)` of the expression, in reading order.
    pub fn departures(&self) -> Vec<DepartureTerm> {
        match self {
            Expr::Departure(term) => vec![term.clone()],
            Expr::Number(_) | Expr::Name(_) | Expr::Indicator { .. } => Vec::new(),
            Expr::Negate(a) | Expr::Log(a) | Expr::Exp(a) => a.departures(),
            Expr::Add(a, b) | Expr::Subtract(a, b) | Expr::Multiply(a, b) | Expr::Divide(a, b) => {
                let mut out = a.departures();
                out.extend(b.departures());
                out
            }
        }
    }

    fn collect_uses(&self, out: &mut Vec<(String, Use)>) {
        match self {
            Expr::Number(_) => {}
            Expr::Name(n) => out.push((n.clone(), Use::Number)),
            Expr::Indicator { name, level } => out.push((name.clone(), Use::Level(level.clone()))),
            Expr::Departure(term) => {
                out.push((term.group.clone(), Use::Group));
                out.extend(term.within.iter().map(|outer| (outer.clone(), Use::Group)));
                if let Some(x) = &term.slope {
                    out.push((x.clone(), Use::Number));
                }
            }
            Expr::Negate(a) | Expr::Log(a) | Expr::Exp(a) => a.collect_uses(out),
            Expr::Add(a, b) | Expr::Subtract(a, b) | Expr::Multiply(a, b) | Expr::Divide(a, b) => {
                a.collect_uses(out);
                b.collect_uses(out);
            }
        }
    }
}

/// How one node is generated.
#[derive(Debug, Clone, PartialEq)]
pub enum Mechanism {
    /// Levels in declared order, drawn with fixed shares, or for a graded
    /// category (`score` given) by cutting each row's latent score.
    /// With `log_odds` (one per level after the first, `levels(…)`), each
    /// row's level is drawn by softmax from them, the first level's 0.
    Category { levels: Vec<String>, shares: Vec<f64>, score: Option<LatentScore>, log_odds: Vec<Expr> },
    Normal { mean: Expr, sd: Expr },
    /// `p` is the probability, or its logit when `logit` is true.
    Bernoulli { p: Expr, logit: bool },
    /// `rate` is the rate, or its log when `log` is true; with an
    /// `overdispersion` κ (gamma-poisson) the rate is multiplied by a gamma
    /// variable of mean 1 and sd κ.
    Poisson { rate: Expr, log: bool, overdispersion: Option<Expr> },
    /// A share with mean `mean` (or its logit when `logit` is true) and
    /// precision `precision`.
    Beta { mean: Expr, logit: bool, precision: Expr },
    /// A positive time with mean `mean` (or its log when `log` is true):
    /// exponential without a `shape`, Weibull with one; with a follow-up
    /// rule, rows observed past their end are cut short.
    Time { mean: Expr, log: bool, shape: Option<Expr>, follow_up: Option<FollowUp> },
}

/// `followed until END cut short by COLUMN [looked at every GAP came by
/// UPPER]` after a time mechanism.
#[derive(Debug, Clone, PartialEq)]
pub struct FollowUp {
    pub end: FollowUpEnd,
    /// The yes/no column written beside the time: yes where the row was cut short.
    pub column: String,
    /// Looks every so often instead of watching: the event is seen only
    /// between two looks.
    pub looks: Option<Looks>,
}

/// `looked at every GAP came by UPPER`: each row is looked at at GAP, 2·GAP,
/// … before its follow-up's end and at the end; the time written is the
/// last look before the event (0 when the event came before the first)
/// and UPPER the first look at or after it.
#[derive(Debug, Clone, PartialEq)]
pub struct Looks {
    pub gap: f64,
    /// The numeric column of the first look at or after the event.
    pub column: String,
}

impl Looks {
    /// The bounds `(lower, upper)` the looks give an event at time `t > 0`
    /// within a follow-up ending at `end` (t ≤ end): the last look before
    /// t and the first at or after it, the end being a look too; always
    /// `lower < t ≤ upper`.
    pub fn bounds(&self, t: f64, end: f64) -> (f64, f64) {
        let looks_to_t = (t / self.gap).ceil();
        ((looks_to_t - 1.0).max(0.0) * self.gap, (looks_to_t * self.gap).min(end))
    }
}

/// The words before the gap between looks.
pub const LOOKED_AT_EVERY: [&str; 3] = ["looked", "at", "every"];

/// The end of a row's follow-up.
#[derive(Debug, Clone, PartialEq)]
pub enum FollowUpEnd {
    /// The same expression for every row (a number, or of the parents).
    At(Expr),
    /// Drawn per row uniformly between the two expressions.
    Uniform(Expr, Expr),
}

impl FollowUpEnd {
    fn exprs(&self) -> Vec<&Expr> {
        match self {
            FollowUpEnd::At(e) => vec![e],
            FollowUpEnd::Uniform(a, b) => vec![a, b],
        }
    }
}

/// The latent score of a graded category: `score` plus a standard
/// logistic error, cut at `cuts` (one below each level after the first,
/// increasing).
#[derive(Debug, Clone, PartialEq)]
pub struct LatentScore {
    pub score: Expr,
    pub cuts: Vec<f64>,
}

impl Mechanism {
    /// Every `departure(…)` the mechanism draws, in reading order.
    pub fn departures(&self) -> Vec<DepartureTerm> {
        match self {
            Mechanism::Category { score, .. } => {
                score.iter().flat_map(|s| s.score.departures()).chain(self.level_departures()).collect()
            }
            Mechanism::Normal { mean, sd } => mean.departures().into_iter().chain(sd.departures()).collect(),
            Mechanism::Bernoulli { p, .. } => p.departures(),
            Mechanism::Poisson { rate, overdispersion, .. } => {
                rate.departures().into_iter().chain(overdispersion.iter().flat_map(Expr::departures)).collect()
            }
            Mechanism::Beta { mean, precision, .. } => mean.departures().into_iter().chain(precision.departures()).collect(),
            Mechanism::Time { mean, shape, follow_up, .. } => mean
                .departures()
                .into_iter()
                .chain(shape.iter().flat_map(Expr::departures))
                .chain(follow_up.iter().flat_map(|f| f.end.exprs()).flat_map(Expr::departures))
                .collect(),
        }
    }

    /// The `departure(…)`s written in the linear predictor on the link
    /// scale (the mean of a normal, `logit =` of a bernoulli, `log =` of a
    /// poisson): those a pooled group of a model of the node stands for.
    pub fn link_departures(&self) -> Vec<DepartureTerm> {
        match self {
            Mechanism::Normal { mean, .. } => mean.departures(),
            Mechanism::Bernoulli { p, logit: true } => p.departures(),
            Mechanism::Poisson { rate, log: true, .. } => rate.departures(),
            Mechanism::Beta { mean, logit: true, .. } => mean.departures(),
            Mechanism::Time { mean, log: true, .. } => mean.departures(),
            Mechanism::Category { score: Some(s), .. } => s.score.departures(),
            Mechanism::Category { .. } => self.level_departures(),
            _ => Vec::new(),
        }
    }

    /// The departures of a `levels(…)` mechanism, each tagged with the
    /// outcome level whose log odds it moves.
    fn level_departures(&self) -> Vec<DepartureTerm> {
        let Mechanism::Category { levels, log_odds, .. } = self else { return Vec::new() };
        levels[1..]
            .iter()
            .zip(log_odds)
            .flat_map(|(level, e)| e.departures().into_iter().map(|t| DepartureTerm { outcome_level: Some(level.clone()), ..t }))
            .collect()
    }

    /// Every node the mechanism reads.
    pub fn uses(&self) -> Vec<(String, Use)> {
        match self {
            Mechanism::Category { score, log_odds, .. } => {
                score.iter().flat_map(|s| s.score.uses()).chain(log_odds.iter().flat_map(Expr::uses)).collect()
            }
            Mechanism::Normal { mean, sd } => mean.uses().into_iter().chain(sd.uses()).collect(),
            Mechanism::Bernoulli { p, .. } => p.uses(),
            Mechanism::Poisson { rate, overdispersion, .. } => {
                rate.uses().into_iter().chain(overdispersion.iter().flat_map(Expr::uses)).collect()
            }
            Mechanism::Beta { mean, precision, .. } => mean.uses().into_iter().chain(precision.uses()).collect(),
            Mechanism::Time { mean, shape, follow_up, .. } => mean
                .uses()
                .into_iter()
                .chain(shape.iter().flat_map(Expr::uses))
                .chain(follow_up.iter().flat_map(|f| f.end.exprs()).flat_map(Expr::uses))
                .collect(),
        }
    }

    /// The follow-up rule of a time mechanism, if it has one.
    pub fn follow_up(&self) -> Option<&FollowUp> {
        match self {
            Mechanism::Time { follow_up, .. } => follow_up.as_ref(),
            _ => None,
        }
    }
}

impl fmt::Display for Mechanism {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let name = match self {
            Mechanism::Category { score: None, log_odds, .. } if !log_odds.is_empty() => LEVELS,
            Mechanism::Category { score: None, .. } => CATEGORY,
            Mechanism::Category { score: Some(_), .. } => GRADED,
            Mechanism::Normal { .. } => NORMAL,
            Mechanism::Bernoulli { .. } => BERNOULLI,
            Mechanism::Poisson { overdispersion: None, .. } => POISSON,
            Mechanism::Poisson { overdispersion: Some(_), .. } => GAMMA_POISSON,
            Mechanism::Beta { .. } => BETA,
            Mechanism::Time { shape: None, .. } => EXPONENTIAL,
            Mechanism::Time { shape: Some(_), .. } => WEIBULL,
        };
        f.write_str(name)
    }
}

/// A time mechanism from its mean argument (`log = η` or the mean) and shape.
fn time_mechanism(mean: &str, shape: Option<Expr>) -> Result<Mechanism, String> {
    Ok(match keyword_argument(mean, LOG) {
        Some(eta) => Mechanism::Time { mean: parse_expr(eta)?, log: true, shape, follow_up: None },
        None => Mechanism::Time { mean: parse_expr(mean)?, log: false, shape, follow_up: None },
    })
}

/// Split `dist(…) followed until END cut short by COLUMN` into the
/// distribution and its follow-up rule, read.
fn split_follow_up<'a>(name: &str, rest: &'a str) -> Result<(&'a str, Option<FollowUp>), String> {
    let marker = format!(" {} ", FOLLOWED_UNTIL.join(" "));
    let Some(at) = rest.find(&marker) else { return Ok((rest, None)) };
    let usage = || {
        format!(
            "the follow-up rule of {name} reads `{} END {} COLUMN`, END a number, an expression of the parents or \
             `{UNIFORM}(LO, HI)` for an end drawn per row, COLUMN a new yes/no column (such as `{} 30 {} unsprouted`)",
            FOLLOWED_UNTIL.join(" "),
            CUT_SHORT_BY.join(" "),
            FOLLOWED_UNTIL.join(" "),
            CUT_SHORT_BY.join(" ")
        )
    };
    let rule = &rest[at + marker.len()..];
    let cut = format!(" {} ", CUT_SHORT_BY.join(" "));
    let (end, column) = rule.rsplit_once(&cut).ok_or_else(usage)?;
    let (column, looks) = split_looks(name, column)?;
    let column = column.trim();
    if !is_name(column) {
        return Err(usage());
    }
    let end = end.trim();
    let end = match end.strip_prefix(UNIFORM).map(str::trim_start).filter(|e| e.starts_with('(') && e.ends_with(')')) {
        Some(call) => match split_top_level(&call[1..call.len() - 1]).as_slice() {
            [lo, hi] => FollowUpEnd::Uniform(parse_expr(lo)?, parse_expr(hi)?),
            _ => return Err(usage()),
        },
        None if end.is_empty() => return Err(usage()),
        None => FollowUpEnd::At(parse_expr(end)?),
    };
    Ok((rest[..at].trim_end(), Some(FollowUp { end, column: column.to_string(), looks })))
}

/// Split `COLUMN looked at every GAP came by UPPER` into the cut-short
/// column and the looks.
fn split_looks<'a>(name: &str, text: &'a str) -> Result<(&'a str, Option<Looks>), String> {
    let marker = format!(" {} ", LOOKED_AT_EVERY.join(" "));
    let Some(at) = text.find(&marker) else { return Ok((text, None)) };
    let usage = || {
        format!(
            "the looks of {name} read `{} GAP {} COLUMN` after the cut-short column, GAP a positive number (the time \
             between looks) and COLUMN a new numeric column (such as `{} 4 {} sprouted_by`)",
            LOOKED_AT_EVERY.join(" "),
            CAME_BY.join(" "),
            LOOKED_AT_EVERY.join(" "),
            CAME_BY.join(" ")
        )
    };
    let words: Vec<&str> = text[at + marker.len()..].split_whitespace().collect();
    let [gap, c, b, column] = words.as_slice() else { return Err(usage()) };
    let gap: f64 = gap.parse().map_err(|_| usage())?;
    if [*c, *b] != CAME_BY || !is_name(column) || !(gap.is_finite() && gap > 0.0) {
        return Err(usage());
    }
    Ok((&text[..at], Some(Looks { gap, column: column.to_string() })))
}

/// Read one body line: `None` for a blank or comment line, else the node
/// name and its mechanism. The error is a sentence without the line number.
pub fn parse_mechanism_line(text: &str) -> Result<Option<(String, Mechanism)>, String> {
    let text = text.split('#').next().unwrap_or("").trim();
    if text.is_empty() {
        return Ok(None);
    }
    let (name, rest) = text.split_once('=').ok_or_else(|| {
        format!("`{text}` is not a mechanism; write `node = normal(mean, sd)` or another distribution")
    })?;
    let name = name.trim();
    if !is_name(name) {
        return Err(format!("`{name}` is not a node name; names are letters, digits and `_`, starting with a letter"));
    }
    let (rest, follow_up) = split_follow_up(name, rest.trim())?;
    let open = rest.find('(').filter(|_| rest.ends_with(')')).ok_or_else(|| {
        format!("the mechanism of {name} must be a distribution such as normal(mean, sd), not `{rest}`")
    })?;
    let dist = rest[..open].trim();
    let args = split_top_level(&rest[open + 1..rest.len() - 1]);
    let mechanism = match (dist, args.as_slice()) {
        (CATEGORY, items) => parse_category(name, items)?,
        (GRADED, [score, lowest, rest @ ..]) if !rest.is_empty() => parse_graded(name, score, lowest, rest)?,
        (LEVELS, [reference, rest @ ..]) if !rest.is_empty() => parse_levels(name, reference, rest)?,
        (LEVELS, _) => {
            return Err(format!(
                "levels takes the first level, then each other level with its log odds against the first \
                 (`levels(herb, shrub = 0.4 + departure(site, 0.8), tree = -0.2)`), not {} argument{}",
                args.len(),
                if args.len() == 1 { "" } else { "s" }
            ))
        }
        (GRADED, _) => {
            return Err(format!(
                "graded takes the latent score, the lowest level, then each higher level with the cut below it \
                 (`graded(0.3 * shade, none, mild 0, marked 1.5)`), not {} arguments",
                args.len()
            ))
        }
        (NORMAL, [mean, sd]) => Mechanism::Normal { mean: parse_expr(mean)?, sd: parse_expr(sd)? },
        (BERNOULLI, [p]) => match keyword_argument(p, LOGIT) {
            Some(eta) => Mechanism::Bernoulli { p: parse_expr(eta)?, logit: true },
            None => Mechanism::Bernoulli { p: parse_expr(p)?, logit: false },
        },
        (POISSON, [rate]) => match keyword_argument(rate, LOG) {
            Some(eta) => Mechanism::Poisson { rate: parse_expr(eta)?, log: true, overdispersion: None },
            None => Mechanism::Poisson { rate: parse_expr(rate)?, log: false, overdispersion: None },
        },
        (GAMMA_POISSON, [rate, kappa]) => {
            let overdispersion = Some(parse_expr(kappa)?);
            match keyword_argument(rate, LOG) {
                Some(eta) => Mechanism::Poisson { rate: parse_expr(eta)?, log: true, overdispersion },
                None => Mechanism::Poisson { rate: parse_expr(rate)?, log: false, overdispersion },
            }
        }
        (NORMAL, _) => return Err(format!("normal takes 2 arguments (mean, sd), not {}", args.len())),
        (BERNOULLI, _) => return Err(format!("bernoulli takes 1 argument (p, or logit = …), not {}", args.len())),
        (POISSON, _) => return Err(format!("poisson takes 1 argument (rate, or log = …), not {}", args.len())),
        (BETA, [mean, precision]) => {
            let precision = parse_expr(precision)?;
            match keyword_argument(mean, LOGIT) {
                Some(eta) => Mechanism::Beta { mean: parse_expr(eta)?, logit: true, precision },
                None => Mechanism::Beta { mean: parse_expr(mean)?, logit: false, precision },
            }
        }
        (EXPONENTIAL, [mean]) => time_mechanism(mean, None)?,
        (WEIBULL, [mean, shape]) => time_mechanism(mean, Some(parse_expr(shape)?))?,
        (EXPONENTIAL, _) => return Err(format!("exponential takes 1 argument (the mean time, or log = …), not {}", args.len())),
        (WEIBULL, _) => {
            return Err(format!("weibull takes 2 arguments (the mean time, or log = …, then the shape), not {}", args.len()))
        }
        (BETA, _) => return Err(format!("beta takes 2 arguments (mean, or logit = …, then the precision), not {}", args.len())),
        (GAMMA_POISSON, _) => {
            return Err(format!(
                "gamma_poisson takes 2 arguments (rate, or log = …, then the overdispersion), not {}",
                args.len()
            ))
        }
        _ => {
            return Err(format!(
                "unknown distribution `{dist}`; use {} or {}",
                DISTRIBUTIONS[..DISTRIBUTIONS.len() - 1].join(", "),
                DISTRIBUTIONS[DISTRIBUTIONS.len() - 1]
            ))
        }
    };
    let mechanism = match (mechanism, follow_up) {
        (Mechanism::Time { mean, log, shape, .. }, Some(rule)) => Mechanism::Time { mean, log, shape, follow_up: Some(rule) },
        (other, Some(_)) => {
            return Err(format!(
                "only a time ({EXPONENTIAL} or {WEIBULL}) has a follow-up rule; {name} is {other}, so leave out `{} …`",
                FOLLOWED_UNTIL.join(" ")
            ))
        }
        (mechanism, None) => mechanism,
    };
    let terms = mechanism.departures();
    let same = |a: &DepartureTerm, b: &DepartureTerm| a.key() == b.key() && a.slope == b.slope;
    if let Some(term) = terms.iter().enumerate().find(|(i, t)| terms[..*i].iter().any(|u| same(u, t))).map(|(_, t)| t) {
        let group = &term.group;
        return Err(match &term.slope {
            None => format!(
                "the mechanism of {name} names departure({group}, …) twice; each level of {group} has one departure, so write it once"
            ),
            Some(x) => format!(
                "the mechanism of {name} names departure({group}, …, {x}) twice; each level of {group} has one departure of the {x} slope, so write it once"
            ),
        });
    }
    if let Some(term) = terms.iter().find(|t| t.correlation.is_some() && !terms.iter().any(|u| u.key() == t.key() && u.slope.is_none())) {
        return Err(format!(
            "the mechanism of {name} states a correlation for departure({g}, …, {x}) with the intercept's departures, but draws \
             no departure({g}, spread) for the intercept; add one, or leave the correlation out",
            g = term.group,
            x = term.slope.as_deref().unwrap_or("")
        ));
    }
    check_slope_correlations(name, &terms)?;
    Ok(Some((name.to_string(), mechanism)))
}

/// Each `correlation q with x` names another slope departure of the same
/// category in the mechanism, each pair once, and every category's stated
/// correlations make a correlation matrix (positive definite).
fn check_slope_correlations(name: &str, terms: &[DepartureTerm]) -> Result<(), String> {
    for term in terms {
        for (w, _) in &term.with_slopes {
            let other = terms.iter().find(|u| u.key() == term.key() && u.slope.as_deref() == Some(w.as_str()));
            let x = term.slope.as_deref().unwrap_or("");
            let Some(other) = other else {
                return Err(format!(
                    "the mechanism of {name} states a correlation of departure({g}, …, {x}) with {w}'s, but draws no \
                     departure({g}, spread, {w}); add one, or leave the correlation out",
                    g = term.group
                ));
            };
            if other.with_slopes.iter().any(|(v, _)| v == x) {
                return Err(format!(
                    "the mechanism of {name} states the correlation of the {x} and {w} slopes' departures of {} twice \
                     (once in each departure); keep one",
                    term.group
                ));
            }
        }
    }
    for key in departure_groups(terms) {
        let group = key.0;
        let effects: Vec<&DepartureTerm> = group_effects(terms, key);
        if effects.len() > 1 && correlation_factor(&effects).is_none() {
            return Err(format!(
                "the correlations stated for the departures of {group} in the mechanism of {name} do not make a \
                 correlation matrix (it is not positive definite; between two slopes without a stated correlation it \
                 is the product of their correlations with the intercept); state smaller or other correlations"
            ));
        }
    }
    Ok(())
}

/// What makes departures one group: the category, the category it is
/// nested in and the outcome level they move (each if any).
pub type GroupKey<'t> = (&'t str, Option<&'t str>, Option<&'t str>);

impl DepartureTerm {
    /// The group this departure belongs to.
    pub fn key(&self) -> GroupKey<'_> {
        (self.group.as_str(), self.within.as_deref(), self.outcome_level.as_deref())
    }
}

/// The groups `terms` draw departures for, each once.
pub fn departure_groups(terms: &[DepartureTerm]) -> Vec<GroupKey<'_>> {
    let mut groups: Vec<GroupKey<'_>> = terms.iter().map(DepartureTerm::key).collect();
    groups.sort_unstable();
    groups.dedup();
    groups
}

/// The departures of group `key` among `terms`: the intercept's first
/// (when drawn), then the slopes' in reading order.
pub fn group_effects<'t>(terms: &'t [DepartureTerm], key: GroupKey<'_>) -> Vec<&'t DepartureTerm> {
    let of = terms.iter().filter(|t| t.key() == key);
    of.clone().filter(|t| t.slope.is_none()).chain(of.filter(|t| t.slope.is_some())).collect()
}

/// The stated correlation of two departures of one category: 1 with
/// itself; a slope's with the intercept's as stated (0 without); two
/// slopes' as stated by either (`correlation q with x`), else the product
/// of their correlations with the intercept.
pub fn stated_correlation(a: &DepartureTerm, b: &DepartureTerm) -> f64 {
    match (&a.slope, &b.slope) {
        (None, None) => 1.0,
        (None, Some(_)) => b.correlation.unwrap_or(0.0),
        (Some(_), None) => a.correlation.unwrap_or(0.0),
        (Some(x), Some(w)) if x == w => 1.0,
        (Some(x), Some(w)) => {
            let named = |t: &DepartureTerm, other: &str| t.with_slopes.iter().find(|(v, _)| v == other).map(|(_, q)| *q);
            named(a, w).or_else(|| named(b, x)).unwrap_or(a.correlation.unwrap_or(0.0) * b.correlation.unwrap_or(0.0))
        }
    }
}

/// The lower Cholesky factor of the stated correlation matrix of
/// `effects` (in their order), `None` when it is not positive definite.
pub fn correlation_factor(effects: &[&DepartureTerm]) -> Option<nalgebra::DMatrix<f64>> {
    let k = effects.len();
    let matrix = nalgebra::DMatrix::from_fn(k, k, |i, j| stated_correlation(effects[i], effects[j]));
    matrix.cholesky().map(|c| c.l())
}

/// A `correlation r` (with the intercept's departures) or `correlation q
/// with x` (with slope x's) of `departure(c, spread, x, …)`: the number
/// strictly between −1 and 1, and the other slope if named.
fn read_correlation(stated: &str, inside: &str, form: &str) -> Result<(f64, Option<String>), String> {
    let rest = stated.strip_prefix(CORRELATION_WORD).map(str::trim).ok_or_else(|| {
        format!(
            "`departure({inside})` needs the form {form}: the parts after the slope must read `{CORRELATION_WORD} r` or \
             `{CORRELATION_WORD} q {CORRELATION_WITH} <slope>`, not `{stated}`"
        )
    })?;
    let (value, other) = match rest.split_once(char::is_whitespace) {
        Some((value, tail)) => {
            let other = tail.trim().strip_prefix(CORRELATION_WITH).filter(|o| o.starts_with(char::is_whitespace)).map(str::trim);
            match other {
                Some(o) if !o.is_empty() => (value, Some(o.to_string())),
                _ => return Err(format!("`{stated}` in `departure({inside})`: write `{CORRELATION_WORD} q {CORRELATION_WITH} <slope>`")),
            }
        }
        None => (rest, None),
    };
    let r = value.parse().ok().filter(|r: &f64| r.abs() < 1.0).ok_or_else(|| {
        format!("the correlation `{value}` in `departure({inside})` must be a number strictly between −1 and 1")
    })?;
    Ok((r, other))
}

/// `logit = expr` → `expr` when the argument starts with that keyword.
fn keyword_argument<'a>(arg: &'a str, keyword: &str) -> Option<&'a str> {
    let rest = arg.trim().strip_prefix(keyword)?.trim_start();
    rest.strip_prefix('=').filter(|r| !r.starts_with('=')).map(str::trim)
}

fn parse_category(name: &str, items: &[&str]) -> Result<Mechanism, String> {
    let mut levels = Vec::new();
    let mut shares = Vec::new();
    for item in items {
        let item = item.trim();
        let (level, share) = item
            .rsplit_once(char::is_whitespace)
            .ok_or_else(|| format!("category item `{item}` needs a level and its share, like `dwarf 0.5`"))?;
        let share: f64 = share
            .parse()
            .ok()
            .filter(|s: &f64| (0.0..=1.0).contains(s))
            .ok_or_else(|| format!("the share `{share}` of level {} must be a number from 0 to 1", level.trim()))?;
        let level = level.trim().to_string();
        if levels.contains(&level) {
            return Err(format!("level {level} of {name} is listed twice; list each level once"));
        }
        levels.push(level);
        shares.push(share);
    }
    if levels.len() < 2 {
        return Err(format!("the category {name} needs at least two levels with their shares"));
    }
    let total: f64 = shares.iter().sum();
    if (total - 1.0).abs() > 1e-6 {
        return Err(format!("the shares of {name} add up to {}, not 1; adjust them", crate::model::prior::short_number(total)));
    }
    Ok(Mechanism::Category { levels, shares, score: None, log_odds: Vec::new() })
}

/// `levels(first, level = log odds, …)`: the first level the reference,
/// each other level with its log odds against it.
fn parse_levels(name: &str, reference: &str, rest: &[&str]) -> Result<Mechanism, String> {
    let mut levels = vec![reference.trim().to_string()];
    if !is_name(&levels[0]) {
        return Err(format!("`{}` is not a level name for {name}; the first argument of levels is the reference level", levels[0]));
    }
    let mut log_odds = Vec::with_capacity(rest.len());
    for item in rest {
        let (level, expr) = item
            .split_once('=')
            .map(|(l, e)| (l.trim().to_string(), e))
            .filter(|(l, _)| is_name(l))
            .ok_or_else(|| format!("levels item `{}` needs a level and its log odds, like `shrub = 0.4 + 0.1 * girth`", item.trim()))?;
        if levels.contains(&level) {
            return Err(format!("level {level} of {name} is listed twice; list each level once"));
        }
        levels.push(level);
        log_odds.push(parse_expr(expr)?);
    }
    Ok(Mechanism::Category { levels, shares: Vec::new(), score: None, log_odds })
}

/// `graded(score, lowest, level cut, …)`: the levels lowest first, each
/// after the first with the cut below it; the cuts must increase.
fn parse_graded(name: &str, score: &str, lowest: &str, rest: &[&str]) -> Result<Mechanism, String> {
    let mut levels = vec![lowest.trim().to_string()];
    if !is_name(&levels[0]) {
        return Err(format!("`{}` is not a level name for {name}; the second argument of graded is the lowest level", levels[0]));
    }
    let mut cuts: Vec<f64> = Vec::new();
    for item in rest {
        let item = item.trim();
        let (level, cut) = item
            .rsplit_once(char::is_whitespace)
            .ok_or_else(|| format!("graded item `{item}` needs a level and the cut below it, like `mild 0.5`"))?;
        let level = level.trim().to_string();
        let cut: f64 = cut
            .parse()
            .ok()
            .filter(|c: &f64| c.is_finite())
            .ok_or_else(|| format!("the cut `{cut}` below level {level} of {name} must be a number"))?;
        if levels.contains(&level) {
            return Err(format!("level {level} of {name} is listed twice; list each level once"));
        }
        if let Some(&below) = cuts.last().filter(|&&below| cut <= below) {
            return Err(format!(
                "the cut below level {level} of {name} is {cut}, not above the cut before it ({below}); cuts must increase"
            ));
        }
        levels.push(level);
        cuts.push(cut);
    }
    Ok(Mechanism::Category { levels, shares: Vec::new(), score: Some(LatentScore { score: parse_expr(score)?, cuts }), log_odds: Vec::new() })
}

/// Split at commas outside brackets.
fn split_top_level(text: &str) -> Vec<&str> {
    let mut parts = Vec::new();
    let (mut depth, mut start) = (0i32, 0);
    for (i, ch) in text.char_indices() {
        match ch {
            '(' | '[' => depth += 1,
            ')' | ']' => depth -= 1,
            ',' if depth == 0 => {
                parts.push(&text[start..i]);
                start = i + 1;
            }
            _ => {}
        }
    }
    parts.push(&text[start..]);
    parts
}

fn is_name(text: &str) -> bool {
    let mut chars = text.chars();
    chars.next().is_some_and(|c| c.is_alphabetic() || c == '_') && chars.all(|c| c.is_alphanumeric() || c == '_')
}

/// Parse an expression.
pub fn parse_expr(text: &str) -> Result<Expr, String> {
    let mut parser = Parser { text, chars: text.char_indices().collect(), at: 0, nesting: 0 };
    let (expr, _) = parser.sum()?;
    parser.skip_space();
    match parser.peek() {
        None => Ok(expr),
        Some(c) => Err(format!("unexpected `{c}` in `{}`", text.trim())),
    }
}

/// A recursive-descent parser over the characters of one expression. Each
/// step returns the expression and the depth of its tree; `nesting` counts
/// the open recursive calls. Both stop at [`MAX_EXPRESSION_DEPTH`].
struct Parser<'a> {
    text: &'a str,
    chars: Vec<(usize, char)>,
    at: usize,
    nesting: usize,
}

/// A parsed expression and the depth of its tree.
type Parsed = (Expr, usize);

fn too_deep() -> String {
    format!(
        "the expression nests deeper than {MAX_EXPRESSION_DEPTH} levels (brackets, signs, functions and chained operators); \
         write it more simply"
    )
}

/// The depth of a node over children of depths `a` and `b`, within the limit.
fn deeper(a: usize, b: usize) -> Result<usize, String> {
    let depth = a.max(b) + 1;
    if depth > MAX_EXPRESSION_DEPTH {
        return Err(too_deep());
    }
    Ok(depth)
}

impl Parser<'_> {
    fn peek(&self) -> Option<char> {
        self.chars.get(self.at).map(|&(_, c)| c)
    }

    fn skip_space(&mut self) {
        while self.peek().is_some_and(char::is_whitespace) {
            self.at += 1;
        }
    }

    /// Count one more open recursive call, refusing past the limit.
    fn enter(&mut self) -> Result<(), String> {
        self.nesting += 1;
        if self.nesting > MAX_EXPRESSION_DEPTH {
            return Err(too_deep());
        }
        Ok(())
    }

    fn sum(&mut self) -> Result<Parsed, String> {
        self.enter()?;
        let (mut left, mut depth) = self.product()?;
        loop {
            self.skip_space();
            let op: fn(Box<Expr>, Box<Expr>) -> Expr = match self.peek() {
                Some('+') => Expr::Add,
                Some('-') => Expr::Subtract,
                _ => break,
            };
            self.at += 1;
            let (right, right_depth) = self.product()?;
            depth = deeper(depth, right_depth)?;
            left = op(Box::new(left), Box::new(right));
        }
        self.nesting -= 1;
        Ok((left, depth))
    }

    fn product(&mut self) -> Result<Parsed, String> {
        let (mut left, mut depth) = self.unary()?;
        loop {
            self.skip_space();
            let op: fn(Box<Expr>, Box<Expr>) -> Expr = match self.peek() {
                Some('*') => Expr::Multiply,
                Some('/') => Expr::Divide,
                _ => return Ok((left, depth)),
            };
            self.at += 1;
            let (right, right_depth) = self.unary()?;
            depth = deeper(depth, right_depth)?;
            left = op(Box::new(left), Box::new(right));
        }
    }

    fn unary(&mut self) -> Result<Parsed, String> {
        self.skip_space();
        if self.peek() == Some('-') {
            self.at += 1;
            self.enter()?;
            let (inner, depth) = self.unary()?;
            self.nesting -= 1;
            return Ok((Expr::Negate(Box::new(inner)), deeper(depth, 0)?));
        }
        self.primary()
    }

    fn primary(&mut self) -> Result<Parsed, String> {
        self.skip_space();
        match self.peek() {
            None => Err(format!("`{}` ends where a number or a name is expected", self.text.trim())),
            Some('(') => {
                self.at += 1;
                let inner = self.sum()?;
                self.expect(')')?;
                Ok(inner)
            }
            Some('[') => Ok((self.indicator()?, 1)),
            Some(c) if c.is_ascii_digit() || c == '.' => Ok((self.number()?, 1)),
            Some(c) if c.is_alphabetic() || c == '_' => {
                let word = self.word();
                self.skip_space();
                match (word.as_str(), self.peek()) {
                    (DEPARTURE, Some('(')) => {
                        self.at += 1;
                        Ok((self.departure()?, 1))
                    }
                    (STEPS, Some('(')) => {
                        self.at += 1;
                        self.steps()
                    }
                    (LOG | EXP, Some('(')) => {
                        self.at += 1;
                        let (inner, depth) = self.sum()?;
                        self.expect(')')?;
                        let inner = Box::new(inner);
                        Ok((if word == LOG { Expr::Log(inner) } else { Expr::Exp(inner) }, deeper(depth, 0)?))
                    }
                    (_, Some('(')) => Err(format!("unknown function `{word}`; use {}", FUNCTIONS.join(" or "))),
                    _ => Ok((Expr::Name(word), 1)),
                }
            }
            Some(c) => Err(format!("unexpected `{c}` in `{}`", self.text.trim())),
        }
    }

    fn expect(&mut self, wanted: char) -> Result<(), String> {
        self.skip_space();
        if self.peek() == Some(wanted) {
            self.at += 1;
            Ok(())
        } else {
            Err(format!("a `{wanted}` is missing in `{}`", self.text.trim()))
        }
    }

    fn word(&mut self) -> String {
        let start = self.at;
        while self.peek().is_some_and(|c| c.is_alphanumeric() || c == '_') {
            self.at += 1;
        }
        self.chars[start..self.at].iter().map(|&(_, c)| c).collect()
    }

    fn number(&mut self) -> Result<Expr, String> {
        let start = self.at;
        while self.peek().is_some_and(|c| c.is_ascii_digit() || c == '.' || c == 'e' || c == 'E') {
            let exponent = matches!(self.peek(), Some('e' | 'E'));
            self.at += 1;
            if exponent && matches!(self.peek(), Some('-' | '+')) {
                self.at += 1;
            }
        }
        let text: String = self.chars[start..self.at].iter().map(|&(_, c)| c).collect();
        text.parse::<f64>().map(Expr::Number).map_err(|_| format!("`{text}` is not a number"))
    }

    /// The inside of `departure(group, spread)` or `departure(group,
    /// spread, slope)` after its `(`, up to and including the `)`.
    fn departure(&mut self) -> Result<Expr, String> {
        let form = "departure(category, spread) with a category parent and a positive number, like departure(block, 0.8), \
                    or departure(category, spread, parent) for a slope's departure, like departure(block, 0.1, girth), \
                    optionally correlated with the intercept's, like departure(block, 0.1, girth, correlation 0.5), and \
                    with another slope's departures, like departure(block, 0.1, age, correlation 0.3 with girth)";
        let start = self.chars.get(self.at).map_or(self.text.len(), |&(i, _)| i);
        let close = self.text[start..].find(')').ok_or_else(|| format!("a `)` is missing in `{}`; write {form}", self.text.trim()))?;
        let inside = &self.text[start..start + close];
        let parts: Vec<&str> = inside.split(',').map(str::trim).collect();
        let (group, spread, slope, stated) = match parts[..] {
            [group, spread] => (group, spread, None, &[][..]),
            [group, spread, slope, ref stated @ ..] => (group, spread, Some(slope), stated),
            _ => return Err(format!("`departure({inside})` needs the form {form}")),
        };
        let mut correlation = None;
        let mut with_slopes: Vec<(String, f64)> = Vec::new();
        for part in stated {
            match read_correlation(part, inside, form)? {
                (r, None) if correlation.is_none() => correlation = Some(r),
                (_, None) => return Err(format!("`departure({inside})` states the correlation with the intercept twice; keep one")),
                (q, Some(w)) => {
                    if slope == Some(w.as_str()) || with_slopes.iter().any(|(v, _)| *v == w) {
                        return Err(format!(
                            "`departure({inside})` states a correlation with {w} {}; name each other slope once",
                            if slope == Some(w.as_str()) { "for the departures of the same slope" } else { "twice" }
                        ));
                    }
                    with_slopes.push((w, q));
                }
            }
        }
        let (group, within) = match group.split_once(&*format!(" {DEPARTURE_WITHIN} ")) {
            Some((inner, outer)) => (inner.trim(), Some(outer.trim())),
            None => (group, None),
        };
        if within == Some(group) {
            return Err(format!("`departure({inside})`: {group} cannot be nested within itself"));
        }
        for name in std::iter::once(group).chain(within).chain(slope).chain(with_slopes.iter().map(|(w, _)| w.as_str())) {
            if !is_name(name) {
                return Err(format!("`{name}` in `departure({inside})` is not a node name; write {form}"));
            }
        }
        let spread: f64 = spread
            .parse()
            .ok()
            .filter(|s: &f64| s.is_finite() && *s > 0.0)
            .ok_or_else(|| format!("the spread `{spread}` in `departure({inside})` must be a positive number; write {form}"))?;
        let end = start + close + 1;
        while self.chars.get(self.at).is_some_and(|&(i, _)| i < end) {
            self.at += 1;
        }
        Ok(Expr::Departure(DepartureTerm {
            group: group.to_string(),
            outcome_level: None,
            spread,
            slope: slope.map(str::to_string),
            correlation,
            with_slopes,
            within: within.map(str::to_string),
        }))
    }

    /// The inside of `steps(category, whole: level share, …)` after its
    /// `(`, up to and including the `)`: the sum over the named levels of
    /// `whole · (shares up to the level) · [category = level]`.
    fn steps(&mut self) -> Result<Parsed, String> {
        let form = "steps(category, whole: level share, level share, …) with each level above the lowest, lowest first, and \
                    the share of the whole effect its step takes (shares at least 0, adding to 1), like steps(canopy, 4: \
                    sparse 0.25, partial 0.1, dense 0.5, closed 0.15)";
        let start = self.chars.get(self.at).map_or(self.text.len(), |&(i, _)| i);
        let close = self.text[start..].find(')').ok_or_else(|| format!("a `)` is missing in `{}`; write {form}", self.text.trim()))?;
        let inside = &self.text[start..start + close];
        let usage = || format!("`steps({inside})` needs the form {form}");
        let (head, listed) = inside.split_once(':').ok_or_else(usage)?;
        let (name, whole) = head.split_once(',').ok_or_else(usage)?;
        let name = name.trim();
        let whole: f64 = whole.trim().parse().ok().filter(|w: &f64| w.is_finite()).ok_or_else(usage)?;
        if !is_name(name) {
            return Err(usage());
        }
        let mut steps: Vec<(String, f64)> = Vec::new();
        for item in listed.split(',') {
            let (level, share) = item.trim().rsplit_once(char::is_whitespace).ok_or_else(usage)?;
            let share: f64 = share.parse().ok().filter(|s: &f64| *s >= 0.0 && s.is_finite()).ok_or_else(|| {
                format!("`steps({inside})`: the share of {} must be a number of at least 0", level.trim())
            })?;
            let level = level.trim().to_string();
            if steps.iter().any(|(l, _)| *l == level) {
                return Err(format!("`steps({inside})`: level {level} is named twice; name each level above the lowest once"));
            }
            steps.push((level, share));
        }
        if steps.len() > MOST_STEP_LEVELS {
            return Err(format!("`steps(…)` of {name} names {} levels; at most {MOST_STEP_LEVELS}", steps.len()));
        }
        let total: f64 = steps.iter().map(|(_, s)| s).sum();
        if (total - 1.0).abs() > 1e-9 {
            return Err(format!("`steps({inside})`: the shares add to {total}, not 1; each is the part of the whole effect its step takes"));
        }
        let end = start + close + 1;
        while self.chars.get(self.at).is_some_and(|&(i, _)| i < end) {
            self.at += 1;
        }
        let mut reached = 0.0;
        let mut sum: Option<Expr> = None;
        let mut depth = 1;
        for (level, share) in steps {
            reached += share;
            let term = Expr::Multiply(
                Box::new(Expr::Number(whole * reached)),
                Box::new(Expr::Indicator { name: name.to_string(), level }),
            );
            sum = Some(match sum {
                None => term,
                Some(before) => {
                    depth = deeper(depth, 2)?;
                    Expr::Add(Box::new(before), Box::new(term))
                }
            });
        }
        Ok((sum.ok_or_else(usage)?, deeper(depth, 1)?))
    }

    fn indicator(&mut self) -> Result<Expr, String> {
        let start = self.chars[self.at].0 + 1;
        let close = self.text[start..].find(']').ok_or_else(|| format!("a `]` is missing in `{}`", self.text.trim()))?;
        let inside = &self.text[start..start + close];
        let (name, level) = inside
            .split_once('=')
            .ok_or_else(|| format!("the indicator `[{inside}]` needs the form [category = level]"))?;
        let (name, level) = (name.trim(), level.trim());
        if !is_name(name) || level.is_empty() {
            return Err(format!("the indicator `[{inside}]` needs the form [category = level]"));
        }
        let end = start + close + 1;
        while self.chars.get(self.at).is_some_and(|&(i, _)| i < end) {
            self.at += 1;
        }
        Ok(Expr::Indicator { name: name.to_string(), level: level.to_string() })
    }
}
