//! Identifying formulas of any shape whose nodes are counts, yes/no or
//! category columns, evaluated exactly on a chain of fitted conditionals.
//!
//! The normal chain ([`super::formula_chain`]) turns every factor of a
//! formula into a Gaussian function; that needs real columns. When the
//! nodes the formula names are discrete, the observed joint distribution
//! is a table, and a formula is a finite sum over it:
//!
//! 1. *One chain for the observed joint.* Every node the formula names is
//!    regressed on every node before it (the outcome last) with the
//!    family its column calls for (bernoulli for yes/no, `levels` for a
//!    category, poisson for a count; [`super::formula_estimate::fit_conditional`]).
//!    The product of the chain's conditionals is the joint distribution of
//!    those nodes (the chain rule of probability), so per posterior draw
//!    the chain gives the joint's table: the probability of every
//!    combination of levels. A count enters with its values `0 … K`, `K`
//!    well above the largest value seen ([`count_top`]); the probability
//!    the chain puts beyond `K` is left out and its largest share over
//!    the draws is reported.
//! 2. *Every factor from the table.* `Pr[A | B]` at the levels in scope is
//!    the table's marginal of `A ∪ B` over its marginal of `B` (marginals
//!    computed once per draw and node set).
//! 3. *Sums enumerate.* A sum over nodes runs over every combination of
//!    their levels; a product multiplies, a ratio divides. Evaluated at
//!    each level of the outcome, the formula gives its distribution under
//!    the exposure as set; its mean is the answer under that draw (for a
//!    category outcome, which has no mean, each level's probability is
//!    compared instead), and its mass (1 for a formula that is a
//!    distribution) is checked.
//!
//! A real outcome may join discrete nodes: regressed last, on every
//! discrete node, it adds to the table each combination's probability
//! times the outcome's mean there (its first moment). When the outcome
//! appears in exactly one factor of the formula, as a node drawn and not
//! given, and in no divisor, the formula's mean of the outcome is the same
//! formula with that factor's probability replaced by its first moment
//! (sums and products are linear in it); a sum over a copy of the outcome
//! under the same condition integrates it out (`∫ Pr[y, A | B] dy =
//! Pr[A | B]`). Both are exact, so this route adds no Monte Carlo error
//! to the posterior's.
//!
//! A real node elsewhere (a real mediator, a real exposure) cannot be
//! enumerated, so it joins the table as a node of `S` drawn values
//! ([`realise`]): one per stratum of a normal `q` about its column, each
//! carrying the weight `1/(S·q(value))` beside its fitted conditional
//! density (a normal regression's, or a discrete child's GLM at that
//! value). A factor given the node's value is a ratio in which the weight
//! cancels, so it stays exact; a sum over the node becomes an importance
//! sum of its density (self-normalised where the formula divides by the
//! table's total). The values the answer sets are added with a negligible
//! weight, so they can be given without moving any sum. This is the one
//! place the route adds Monte Carlo error, so it runs on two independent
//! draw sets, averages them, and reports half their root mean square
//! difference against the posterior sd.

use std::cell::RefCell;
use std::collections::{BTreeMap, HashMap};
use std::sync::atomic::{AtomicBool, Ordering};

use crate::graph::Formula;
use crate::infer::fit::Method;
use crate::infer::nuts::Progress;
use crate::limits::{bytes_for, check_memory};
use crate::model::{Model, NewRows};
use crate::table::{Column, ColumnData, Table};

use super::contrast::{level_scale_words, On};
use super::error::QueryError;
use super::formula_estimate::{fit_conditional, formula_contrast, FittedConditional, FormulaFit, FormulaSimulation};
use super::support::{column_mean, parameter_rows, require_column, stream_seed, Setting};

/// How far the formula's mass may stray from 1 (after the left-out count
/// tail is allowed for) before a warning.
const MASS_TOLERANCE: f64 = 1e-6;

/// Above this share of probability left beyond a count's top value the
/// answer warns.
const TAIL_WARNING: f64 = 1e-4;

/// How many terms of the formula's sums pass between checks for an
/// interrupt.
const CANCEL_EVERY: u64 = 4096;

/// How many values a real node takes in one draw set.
pub const REAL_DRAWS: usize = 200;

/// Room kept in a real node's values for the values the answer sets
/// (the exposure's settings, a held node's value).
const SET_SLOTS: usize = 8;

/// The weight of a set value against the drawn ones: small enough that a
/// sum over the node does not feel it, large enough that no product
/// underflows.
const SET_WEIGHT: f64 = 1e-9;

/// The proposal's spread over the column's standard deviation: wider than
/// the column, so that the tails of each conditional are drawn too.
const PROPOSAL_WIDENING: f64 = 1.25;

/// With a real node, the formula is evaluated on at most this many
/// posterior draws, evenly spaced: each draw's sums run over the real
/// node's values, and the interval needs no more.
const REAL_POSTERIOR_DRAWS: usize = 400;

/// Above this Monte Carlo error, as a share of the posterior sd, the
/// answer warns that the draw sets disagree.
const DRAW_ERROR_WARNING: f64 = 0.1;

/// The levels one node takes in the chain: a discrete node's levels, or
/// a real node's drawn values.
#[derive(Debug, Clone, PartialEq)]
pub struct Support {
    pub name: String,
    /// The value each level stands for: 0 and 1 for yes/no, a
    /// category's code, a count's value.
    pub values: Vec<f64>,
    /// A category's labels (a level's column is built from its code).
    pub labels: Option<Vec<String>>,
    /// Whether the node is a count (its top level leaves a tail out).
    pub count: bool,
    /// A real node's weight per value, `1/(S·q(value))` for a value drawn
    /// from the proposal `q`, [`SET_WEIGHT`] times that for a value set;
    /// `None` for a discrete node. Empty until [`realise`] draws them.
    pub weights: Option<Vec<f64>>,
}

impl Support {
    /// The support of a discrete `column`, or `None` for a real column.
    fn of(column: &Column) -> Option<Support> {
        let name = column.name.clone();
        let discrete = |values, labels, count| Some(Support { name: name.clone(), values, labels, count, weights: None });
        match &column.data {
            ColumnData::Real(_) => None,
            ColumnData::Binary(_) => discrete(vec![0.0, 1.0], None, false),
            ColumnData::Category { levels, .. } => discrete((0..levels.len()).map(|c| c as f64).collect(), Some(levels.clone()), false),
            ColumnData::Count(v) => {
                let top = count_top(v.iter().copied().max().unwrap_or(0));
                discrete((0..=top).map(|k| k as f64).collect(), None, true)
            }
        }
    }

    /// A real node, its values not yet drawn.
    fn real(name: &str) -> Support {
        Support { name: name.to_string(), values: Vec::new(), labels: None, count: false, weights: Some(Vec::new()) }
    }

    /// Whether the node is real (its values drawn, weighted).
    pub fn is_real(&self) -> bool {
        self.weights.is_some()
    }

    /// The level that stands for `setting`, or why there is none.
    fn level_of(&self, setting: &Setting) -> Result<usize, String> {
        let value = match setting {
            Setting::Level { code, .. } => *code as f64,
            Setting::Number(v) => *v,
        };
        self.values.iter().position(|&v| v == value).ok_or_else(|| {
            format!(
                "{} = {} is not one of the values the chain enumerates for it ({} … {})",
                self.name,
                setting.text(),
                self.values[0],
                self.values[self.values.len() - 1]
            )
        })
    }

    /// A column holding `levels` (indices into this support).
    fn column(&self, levels: &[usize]) -> Column {
        let data = match &self.labels {
            Some(labels) => ColumnData::Category { codes: levels.iter().map(|&l| l as u32).collect(), levels: labels.clone() },
            None => ColumnData::Real(levels.iter().map(|&l| self.values[l]).collect()),
        };
        Column::new(&self.name, data)
    }
}

/// How many levels a discrete column takes in the chain (`None` for a
/// real column), without building them.
fn level_count(column: &Column) -> usize {
    match &column.data {
        ColumnData::Real(_) => REAL_DRAWS + SET_SLOTS,
        ColumnData::Binary(_) => 2,
        ColumnData::Category { levels, .. } => levels.len(),
        ColumnData::Count(v) => usize::try_from(count_top(v.iter().copied().max().unwrap_or(0))).unwrap_or(usize::MAX).saturating_add(1),
    }
}

/// The top value a count is enumerated to, from the largest value seen:
/// six standard deviations of a Poisson count at that mean above it, and
/// ten more, so that only a chain far off the data leaves mass beyond.
pub fn count_top(largest: u64) -> u64 {
    let m = largest as f64;
    largest.saturating_add((6.0 * m.sqrt()).ceil() as u64).saturating_add(10)
}

/// The joint distribution of the chain's discrete nodes under one draw: a
/// table over every combination of their levels (the first node varies
/// slowest), and, with a real outcome, each combination's probability
/// times the outcome's mean there.
#[derive(Debug, Clone)]
pub struct LevelJoint {
    pub sizes: Vec<usize>,
    pub p: Vec<f64>,
    pub moment: Option<Vec<f64>>,
}

impl LevelJoint {
    /// The marginal over the nodes `keep` (indices, in that order) of the
    /// probabilities, or of the first moments.
    fn marginal(&self, keep: &[usize], moment: bool) -> Vec<f64> {
        let table = if moment { self.moment.as_ref().expect("a first moment is asked only with a real outcome") } else { &self.p };
        let out_sizes: Vec<usize> = keep.iter().map(|&k| self.sizes[k]).collect();
        let mut out = vec![0.0; out_sizes.iter().product()];
        let mut levels = vec![0usize; self.sizes.len()];
        for &value in table {
            let at = keep.iter().fold(0usize, |acc, &k| acc * self.sizes[k] + levels[k]);
            out[at] += value;
            for i in (0..levels.len()).rev() {
                levels[i] += 1;
                if levels[i] < self.sizes[i] {
                    break;
                }
                levels[i] = 0;
            }
        }
        out
    }
}

/// What a name of the formula stands for inside a scope.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Slot {
    /// A discrete node at a level.
    Level(usize),
    /// The real outcome, whose first moment the formula gives.
    Moment,
    /// A copy of the real outcome a sum integrates out.
    Integrated,
}

/// The marginals computed so far, by node indices and whether they are
/// first moments.
type Marginals = HashMap<(Vec<usize>, bool), Vec<f64>>;

/// Evaluates a formula on one [`LevelJoint`].
struct Evaluator<'a> {
    joint: &'a LevelJoint,
    /// The discrete nodes, in the joint's order.
    nodes: &'a [Support],
    /// The real outcome's name, if the outcome is real.
    real: Option<&'a str>,
    cancel: &'a AtomicBool,
    cache: RefCell<Marginals>,
    terms: RefCell<u64>,
}

impl Evaluator<'_> {
    fn index(&self, name: &str) -> Result<usize, String> {
        self.nodes.iter().position(|s| s.name == name).ok_or_else(|| format!("the chain has no node {name}"))
    }

    fn lookup(&self, names: &[&String], scope: &BTreeMap<String, Slot>, moment: bool) -> Result<f64, String> {
        let mut keep = Vec::with_capacity(names.len());
        let mut at = Vec::with_capacity(names.len());
        for name in names {
            let Slot::Level(level) = scope.get(*name).copied().ok_or_else(|| format!("the formula leaves {name} unbound"))? else {
                continue;
            };
            keep.push(self.index(name)?);
            at.push(level);
        }
        let key = (keep.clone(), moment);
        let mut cache = self.cache.borrow_mut();
        let table = cache.entry(key).or_insert_with(|| self.joint.marginal(&keep, moment));
        let flat = keep.iter().zip(&at).fold(0usize, |acc, (&k, &l)| acc * self.joint.sizes[k] + l);
        Ok(table[flat])
    }

    fn eval(&self, formula: &Formula, scope: &BTreeMap<String, Slot>) -> Result<f64, String> {
        match formula {
            Formula::Probability { of, given } => {
                let mut all: Vec<&String> = Vec::with_capacity(of.len() + given.len());
                for v in given.iter().chain(of) {
                    if !all.contains(&v) {
                        all.push(v);
                    }
                }
                let moment = of.iter().any(|v| scope.get(v) == Some(&Slot::Moment));
                let given: Vec<&String> = given.iter().collect();
                let below = self.lookup(&given, scope, false)?;
                if below <= 0.0 {
                    return Err("the formula conditions on a combination of levels the chain gives no probability".into());
                }
                Ok(self.lookup(&all, scope, moment)? / below)
            }
            Formula::Product { factors } => factors.iter().try_fold(1.0, |acc, f| Ok(acc * self.eval(f, scope)?)),
            Formula::Ratio { numerator, denominator } => {
                let below = self.eval(denominator, scope)?;
                if below == 0.0 {
                    return Err("a divisor of the formula is zero under this draw".into());
                }
                Ok(self.eval(numerator, scope)? / below)
            }
            Formula::Sum { over, body } => {
                let mut inner = scope.clone();
                let mut discrete = Vec::with_capacity(over.len());
                for v in over {
                    if Some(v.as_str()) == self.real {
                        inner.insert(v.clone(), Slot::Integrated);
                    } else {
                        discrete.push((v.clone(), self.nodes[self.index(v)?].values.len()));
                    }
                }
                let mut levels = vec![0usize; discrete.len()];
                let mut total = 0.0;
                loop {
                    for ((name, _), &l) in discrete.iter().zip(&levels) {
                        inner.insert(name.clone(), Slot::Level(l));
                    }
                    self.count_term()?;
                    total += self.eval(body, &inner)?;
                    let Some(i) = (0..levels.len()).rev().find(|&i| levels[i] + 1 < discrete[i].1) else {
                        return Ok(total);
                    };
                    levels[i] += 1;
                    levels[i + 1..].iter_mut().for_each(|l| *l = 0);
                }
            }
        }
    }

    /// Count one term of a sum, and honour an interrupt every so often.
    fn count_term(&self) -> Result<(), String> {
        let mut terms = self.terms.borrow_mut();
        *terms += 1;
        if terms.is_multiple_of(CANCEL_EVERY) && self.cancel.load(Ordering::Relaxed) {
            return Err("interrupted".into());
        }
        Ok(())
    }
}

/// How often the free `name` appears in the formula's factors: an error
/// when it is given (conditioned on), or appears in a divisor, or a sum
/// over a copy of it does not meet that copy exactly once.
fn appearances(formula: &Formula, name: &str) -> Result<usize, String> {
    match formula {
        Formula::Probability { of, given } => {
            if given.iter().any(|g| g == name) {
                return Err(format!("it conditions on {name}"));
            }
            Ok(usize::from(of.iter().any(|o| o == name)))
        }
        Formula::Product { factors } => factors.iter().try_fold(0, |acc, f| Ok(acc + appearances(f, name)?)),
        Formula::Ratio { numerator, denominator } => {
            if appearances(denominator, name)? > 0 {
                return Err(format!("it divides by a factor of {name}"));
            }
            appearances(numerator, name)
        }
        Formula::Sum { over, body } => {
            let inner = appearances(body, name)?;
            if over.iter().any(|o| o == name) {
                if inner != 1 {
                    return Err(format!("a sum over {name} meets it in {inner} factors"));
                }
                return Ok(0);
            }
            Ok(inner)
        }
    }
}

/// `E[y | do(x = level)]` of `formula` on `joint`, with the nodes of `held`
/// at their levels, and the mass of the formula's distribution of `y`.
/// `nodes` are the joint's discrete nodes; a real `y` is not among them
/// and is read from the joint's first moments.
#[allow(clippy::too_many_arguments)]
pub fn effect_on_levels(
    formula: &Formula,
    x: &str,
    y: &str,
    x_level: usize,
    held: &BTreeMap<String, usize>,
    nodes: &[Support],
    joint: &LevelJoint,
    cancel: &AtomicBool,
) -> Result<(f64, f64), String> {
    let outcome = nodes.iter().find(|s| s.name == y);
    let real = if outcome.is_none() { Some(y) } else { None };
    let evaluator = Evaluator { joint, nodes, real, cancel, cache: RefCell::new(HashMap::new()), terms: RefCell::new(0) };
    let mut scope: BTreeMap<String, Slot> = held.iter().map(|(k, v)| (k.clone(), Slot::Level(*v))).collect();
    scope.insert(x.to_string(), Slot::Level(x_level));
    let Some(outcome) = outcome else {
        match appearances(formula, y) {
            Ok(1) => {}
            Ok(n) => return Err(format!("the real outcome {y} appears in {n} of the formula's factors, not one")),
            Err(why) => return Err(format!("with the real outcome {y} {why}")),
        }
        scope.insert(y.to_string(), Slot::Moment);
        let mean = evaluator.eval(formula, &scope)?;
        // The mass: the same formula with the outcome integrated out.
        scope.insert(y.to_string(), Slot::Integrated);
        return Ok((mean, evaluator.eval(formula, &scope)?));
    };
    let shares = shares_of(&evaluator, formula, y, outcome, scope)?;
    Ok((outcome.values.iter().zip(&shares).map(|(v, s)| v * s).sum(), shares.iter().sum()))
}

/// `Pr[y = level | do(x = x_level)]` of `formula` on `joint` for every
/// level of the discrete outcome `y`, with the nodes of `held` at their
/// levels (they add to 1 for a formula that is a distribution).
#[allow(clippy::too_many_arguments)]
pub fn shares_on_levels(
    formula: &Formula,
    x: &str,
    y: &str,
    x_level: usize,
    held: &BTreeMap<String, usize>,
    nodes: &[Support],
    joint: &LevelJoint,
    cancel: &AtomicBool,
) -> Result<Vec<f64>, String> {
    let outcome = nodes.iter().find(|s| s.name == y).ok_or_else(|| format!("the chain has no discrete node {y}"))?;
    let evaluator = Evaluator { joint, nodes, real: None, cancel, cache: RefCell::new(HashMap::new()), terms: RefCell::new(0) };
    let mut scope: BTreeMap<String, Slot> = held.iter().map(|(k, v)| (k.clone(), Slot::Level(*v))).collect();
    scope.insert(x.to_string(), Slot::Level(x_level));
    shares_of(&evaluator, formula, y, outcome, scope)
}

fn shares_of(evaluator: &Evaluator, formula: &Formula, y: &str, outcome: &Support, mut scope: BTreeMap<String, Slot>) -> Result<Vec<f64>, String> {
    (0..outcome.values.len())
        .map(|level| {
            scope.insert(y.to_string(), Slot::Level(level));
            evaluator.eval(formula, &scope)
        })
        .collect()
}

/// The chain's nodes (the outcome last) and their supports (a real node's
/// values not yet drawn, [`realise`]), or why this route does not apply: a
/// real outcome the formula does not meet in one factor, a real node
/// without spread, or a table too large.
pub(crate) fn level_nodes(table: &Table, formula: &Formula, x: &str, y: &str, also_set: &[String], place: &str) -> Result<Vec<Support>, QueryError> {
    let mut names: Vec<String> = formula.nodes().into_iter().filter(|v| v != y).collect();
    for v in std::iter::once(x).chain(also_set.iter().map(String::as_str)) {
        if !names.iter().any(|n| n == v) {
            names.push(v.to_string());
        }
    }
    let names = causal_order(formula, names);
    let refuse = |why: String| QueryError::request(format!("{place}: the formula is evaluated on a chain of fitted conditionals over the levels of its nodes, and {why}"));
    let outcome = require_column(table, y, place)?;
    let mut sizes = Vec::with_capacity(names.len() + 1);
    for v in &names {
        let column = require_column(table, v, place)?;
        if matches!(column.data, ColumnData::Real(_)) && proposal(column).is_none() {
            return Err(refuse(format!("the real node {v} has no spread to draw its values from")));
        }
        sizes.push((v.as_str(), level_count(column)));
    }
    if !matches!(outcome.data, ColumnData::Real(_)) {
        sizes.push((y, level_count(outcome)));
    }
    let cells = sizes.iter().fold(1usize, |acc, (_, k)| acc.saturating_mul(*k));
    let columns = sizes.iter().fold(4usize, |acc, (_, k)| acc.saturating_add(*k));
    let listed: Vec<String> = sizes.iter().map(|(v, k)| format!("{v} ({k} values)")).collect();
    check_memory(&format!("{place}: the table of every combination of the levels of {} ({cells} combinations)", listed.join(", ")), bytes_for(&[cells, columns]))
        .map_err(QueryError::request)?;
    let mut nodes = Vec::with_capacity(names.len() + 1);
    for v in &names {
        nodes.push(Support::of(require_column(table, v, place)?).unwrap_or_else(|| Support::real(v)));
    }
    match Support::of(outcome) {
        Some(support) => nodes.push(support),
        None => match appearances(formula, y) {
            Ok(1) => {}
            Ok(n) => return Err(refuse(format!("the real outcome {y} appears in {n} of its factors, not one"))),
            Err(why) => return Err(refuse(format!("with the real outcome {y} {why}"))),
        },
    }
    Ok(nodes)
}

/// `names` ordered so that, where the formula's conditionals allow, the
/// nodes a conditional is given come before the nodes it draws (and the
/// nodes of one joint factor keep their order): the complete algorithm
/// writes `Pr[v | the nodes before v]` in the graph's order, so this is
/// the graph's order over the formula's nodes, and each regression of the
/// chain is then a node on the nodes that may cause it. The joint's table
/// is the same in any order with saturated conditionals; with additive
/// ones the causal order keeps them closest to the structure. Ties, and
/// nodes the formula does not relate, keep their order in `names`.
fn causal_order(formula: &Formula, names: Vec<String>) -> Vec<String> {
    fn edges(f: &Formula, out: &mut Vec<(String, String)>) {
        match f {
            Formula::Probability { of, given } => {
                for (i, o) in of.iter().enumerate() {
                    out.extend(given.iter().chain(&of[..i]).map(|g| (g.clone(), o.clone())));
                }
            }
            Formula::Product { factors } => factors.iter().for_each(|g| edges(g, out)),
            Formula::Sum { body, .. } => edges(body, out),
            Formula::Ratio { numerator, denominator } => {
                edges(numerator, out);
                edges(denominator, out);
            }
        }
    }
    let mut pairs = Vec::new();
    edges(formula, &mut pairs);
    pairs.retain(|(a, b)| a != b && names.contains(a) && names.contains(b));
    let mut left = names;
    let mut order = Vec::with_capacity(left.len());
    while !left.is_empty() {
        let free = left.iter().position(|v| !pairs.iter().any(|(a, b)| b == v && left.contains(a))).unwrap_or(0);
        order.push(left.remove(free));
    }
    order
}

/// The number of combinations of the nodes' levels, saturating.
fn combinations(nodes: &[Support]) -> usize {
    nodes.iter().fold(1usize, |acc, s| acc.saturating_mul(s.values.len()))
}

/// One conditional of the chain, ready to give its level probabilities
/// per draw: the rows are every combination of the nodes before it.
struct Link {
    rows: NewRows,
    params: Vec<Vec<f64>>,
}

impl Link {
    fn of(c: &FittedConditional, before: &[Support]) -> Result<Link, QueryError> {
        let n = combinations(before);
        let mut columns: Vec<Vec<usize>> = vec![Vec::with_capacity(n); before.len()];
        for row in 0..n {
            let mut rest = row;
            for (i, s) in before.iter().enumerate().rev() {
                columns[i].push(rest % s.values.len());
                rest /= s.values.len();
            }
        }
        let probe = Table { name: c.model.table_name().to_string(), columns: before.iter().zip(&columns).map(|(s, l)| s.column(l)).collect() };
        let rows = if before.is_empty() { NewRows::from_design(nalgebra::DMatrix::from_element(1, 1, 1.0), None) } else { c.model.new_rows(&probe)? };
        Ok(Link { rows, params: parameter_rows(&c.model, &c.fit.draws)? })
    }
}

/// The chain's joint table under draw `d` (a real node's density times
/// its value's weight), and the largest probability any count's
/// conditional puts beyond its top value.
fn joint_at(chain: &[(&Model, Link)], nodes: &[Support], real_outcome: bool, d: usize) -> Result<(LevelJoint, f64), QueryError> {
    let mut p = vec![1.0];
    let mut tail = 0.0_f64;
    let discrete = if real_outcome { chain.len() - 1 } else { chain.len() };
    for (i, (model, link)) in chain[..discrete].iter().enumerate() {
        let support = &nodes[i];
        let k = support.values.len();
        let mut next = vec![0.0; p.len() * k];
        let mut kept = vec![0.0; p.len()];
        for (level, value) in support.values.iter().enumerate() {
            let log = model.log_density_of_rows(&link.params[d], &link.rows, &vec![*value; p.len()])?;
            let weight = support.weights.as_ref().map_or(1.0, |w| w[level]);
            for (row, l) in log.iter().enumerate() {
                let share = l.exp();
                next[row * k + level] = p[row] * share * weight;
                kept[row] += share;
            }
        }
        if support.count {
            tail = kept.iter().fold(tail, |t, s| t.max(1.0 - s));
        }
        p = next;
    }
    let moment = if real_outcome {
        let (model, link) = &chain[discrete];
        let mean = model.predict_mean(&link.params[d], &link.rows)?.mean;
        Some(p.iter().zip(&mean).map(|(q, m)| q * m).collect())
    } else {
        None
    };
    let sizes = nodes.iter().map(|s| s.values.len()).collect();
    Ok((LevelJoint { sizes, p, moment }, tail))
}

/// The per-draw answers of one evaluation of the formula over the chain:
/// for each setting pair and compared quantity, the change and the two
/// means per draw.
struct Run {
    changes: Vec<Vec<Vec<f64>>>,
    means: Vec<Vec<Vec<(f64, f64)>>>,
    worst_mass: f64,
    worst_tail: f64,
}

/// What one evaluation needs besides its nodes.
struct Setup<'a> {
    table: &'a Table,
    formula: &'a Formula,
    x: &'a str,
    y: &'a str,
    also_set: &'a [String],
    stated: &'a [(String, Setting)],
    simulation: &'a FormulaSimulation<'a>,
    conditionals: &'a [FittedConditional],
    real_outcome: bool,
    labels: Option<&'a Vec<String>>,
    cancel: &'a AtomicBool,
    place: &'a str,
}

/// Evaluate the formula under every posterior draw on the chain over
/// `nodes` (real nodes' values drawn); `warnings` hears of unpaired draws.
fn run_draws(setup: &Setup, nodes: &[Support], warnings: &mut Vec<String>) -> Result<Run, QueryError> {
    let Setup { table, formula, x, y, cancel, place, .. } = *setup;
    let links: Vec<Link> = setup.conditionals.iter().enumerate().map(|(i, c)| Link::of(c, &nodes[..i.min(nodes.len())])).collect::<Result<_, _>>()?;
    let draws = links.iter().map(|l| l.params.len()).min().unwrap_or(0);
    if links.iter().any(|l| l.params.len() != draws) {
        let note = format!("the chain's fits kept different numbers of draws; the first {draws} of each are paired");
        if !warnings.contains(&note) {
            warnings.push(note);
        }
    }
    if draws == 0 {
        return Err(QueryError::request(format!("{place}: the fits kept no draws")));
    }
    let chain: Vec<(&Model, Link)> = setup.conditionals.iter().map(|c| &c.model).zip(links).collect();
    let held = held_levels(table, nodes, setup.also_set, setup.stated, place)?;
    let x_support = nodes.iter().find(|s| s.name == x).expect("the exposure is a node of the chain");
    let settings: Vec<(usize, usize)> = setup
        .simulation
        .settings
        .iter()
        .map(|(to, from)| Ok((x_support.level_of(to)?, x_support.level_of(from)?)))
        .collect::<Result<_, String>>()
        .map_err(|e| QueryError::request(format!("{place}: {e}")))?;
    let quantities = setup.labels.map_or(1, Vec::len);
    let mut run = Run {
        changes: vec![vec![Vec::with_capacity(draws); quantities]; settings.len()],
        means: vec![vec![Vec::with_capacity(draws); quantities]; settings.len()],
        worst_mass: 0.0,
        worst_tail: 0.0,
    };
    let step = if nodes.iter().any(Support::is_real) { draws.div_ceil(REAL_POSTERIOR_DRAWS) } else { 1 };
    for d in (0..draws).step_by(step) {
        QueryError::stop_if(cancel, place)?;
        let (joint, tail) = joint_at(&chain, nodes, setup.real_outcome, d)?;
        run.worst_tail = run.worst_tail.max(tail);
        let at = |level| -> Result<(Vec<f64>, f64), QueryError> {
            let read = if setup.labels.is_some() {
                shares_on_levels(formula, x, y, level, &held, nodes, &joint, cancel).map(|s| {
                    let total = s.iter().sum();
                    (s, total)
                })
            } else {
                effect_on_levels(formula, x, y, level, &held, nodes, &joint, cancel).map(|(m, total)| (vec![m], total))
            };
            read.map_err(|e| QueryError::request(format!("{place}: {e}")))
        };
        for (k, (to, from)) in settings.iter().enumerate() {
            let (under_to, mass_to) = at(*to)?;
            let (under_from, mass_from) = at(*from)?;
            run.worst_mass = run.worst_mass.max((mass_to - 1.0).abs()).max((mass_from - 1.0).abs());
            for q in 0..quantities {
                run.changes[k][q].push(under_to[q] - under_from[q]);
                run.means[k][q].push((under_to[q], under_from[q]));
            }
        }
    }
    Ok(run)
}

/// Two runs on independent draw sets of the real nodes, averaged per
/// posterior draw, and the Monte Carlo error of that average as a share
/// of the posterior sd: half the root mean square of the runs' difference
/// (each run's error is that difference over √2, the average's over 2),
/// the largest over the compared quantities.
fn average_runs(a: Run, b: Run) -> (Run, f64) {
    let mut share = 0.0_f64;
    let mut changes = a.changes.clone();
    let mut means = a.means.clone();
    for k in 0..changes.len() {
        for q in 0..changes[k].len() {
            let (ca, cb) = (&a.changes[k][q], &b.changes[k][q]);
            let n = ca.len().min(cb.len());
            let average: Vec<f64> = (0..n).map(|d| 0.5 * (ca[d] + cb[d])).collect();
            let error = ((0..n).map(|d| (ca[d] - cb[d]).powi(2)).sum::<f64>() / n.max(1) as f64).sqrt() / 2.0;
            let centre = average.iter().sum::<f64>() / n.max(1) as f64;
            let sd = (average.iter().map(|c| (c - centre).powi(2)).sum::<f64>() / (n.max(2) - 1) as f64).sqrt();
            share = share.max(if sd > 0.0 { error / sd } else if error > 0.0 { f64::INFINITY } else { 0.0 });
            changes[k][q] = average;
            let (ma, mb) = (&a.means[k][q], &b.means[k][q]);
            means[k][q] = (0..n).map(|d| (0.5 * (ma[d].0 + mb[d].0), 0.5 * (ma[d].1 + mb[d].1))).collect();
        }
    }
    let run = Run { changes, means, worst_mass: a.worst_mass.max(b.worst_mass), worst_tail: a.worst_tail.max(b.worst_tail) };
    (run, share)
}

/// The values the answer sets on each real node: the exposure's settings,
/// a held node's mean, a stated node's value.
fn set_values(table: &Table, nodes: &[Support], x: &str, simulation: &FormulaSimulation, also_set: &[String], stated: &[(String, Setting)], place: &str) -> Result<BTreeMap<String, Vec<f64>>, QueryError> {
    let mut set: BTreeMap<String, Vec<f64>> = BTreeMap::new();
    let number = |s: &Setting| match s {
        Setting::Number(v) => Some(*v),
        Setting::Level { .. } => None,
    };
    for node in nodes.iter().filter(|s| s.is_real()) {
        let values = set.entry(node.name.clone()).or_default();
        if node.name == x {
            values.extend(simulation.settings.iter().flat_map(|(to, from)| [number(to), number(from)]).flatten());
        }
        if also_set.contains(&node.name) {
            values.extend(column_mean(require_column(table, &node.name, place)?));
        }
        values.extend(stated.iter().filter(|(n, _)| *n == node.name).filter_map(|(_, s)| number(s)));
    }
    Ok(set)
}

/// The mean and spread of the normal a real column's values are drawn
/// from, or `None` when the column has no spread.
fn proposal(column: &Column) -> Option<(f64, f64)> {
    let values = column.data.as_reals()?;
    let n = values.len() as f64;
    let mean = values.iter().sum::<f64>() / n;
    let sd = (values.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
    (sd.is_finite() && sd > 0.0 && mean.is_finite()).then_some((mean, PROPOSAL_WIDENING * sd))
}

/// `nodes` with every real node's values drawn: [`REAL_DRAWS`] values
/// from the normal `q` of [`proposal`], one in each of its `S` strata of
/// equal probability (a uniform draw within the stratum through the
/// normal's quantile; the sum stays unbiased and its error falls far
/// faster than with independent draws for the smooth densities here),
/// each weighted `1/(S·q(value))`, so
/// that a sum over the node is an importance sum of its conditional
/// density (self-normalised where the formula divides by the table's
/// total); then each value `set` names, weighted [`SET_WEIGHT`] times the
/// drawn weights' mean, so that a conditional given it is exact (the
/// weight cancels) and a sum barely feels it.
fn realise(nodes: &[Support], table: &Table, set: &BTreeMap<String, Vec<f64>>, seed: u64, place: &str) -> Result<Vec<Support>, QueryError> {
    use rand::{RngExt, SeedableRng};
    use statrs::distribution::ContinuousCDF;
    let standard = statrs::distribution::Normal::standard();
    nodes
        .iter()
        .enumerate()
        .map(|(i, node)| {
            if !node.is_real() {
                return Ok(node.clone());
            }
            let (mean, sd) = proposal(require_column(table, &node.name, place)?)
                .ok_or_else(|| QueryError::request(format!("{place}: the real node {} has no spread to draw its values from", node.name)))?;
            let mut rng = rand::rngs::StdRng::seed_from_u64(stream_seed(seed, i as u64, 0x4EA1));
            let mut values: Vec<f64> = (0..REAL_DRAWS)
                .map(|i| {
                    let u = (i as f64 + rng.random::<f64>()) / REAL_DRAWS as f64;
                    mean + sd * standard.inverse_cdf(u.clamp(f64::MIN_POSITIVE, 1.0 - f64::EPSILON))
                })
                .collect();
            let density = |v: f64| (-0.5 * ((v - mean) / sd).powi(2)).exp() / (sd * (2.0 * std::f64::consts::PI).sqrt());
            let mut weights: Vec<f64> = values.iter().map(|&v| 1.0 / (REAL_DRAWS as f64 * density(v))).collect();
            let set_weight = SET_WEIGHT * weights.iter().sum::<f64>() / REAL_DRAWS as f64;
            for &v in set.get(&node.name).into_iter().flatten() {
                if !values.contains(&v) {
                    values.push(v);
                    weights.push(set_weight);
                }
            }
            Ok(Support { values, weights: Some(weights), ..node.clone() })
        })
        .collect()
}

/// Fit the chain over the formula's nodes and contrast `E[y | do(x)]`
/// between the settings of `simulation`, evaluating the formula on the
/// chain's table per posterior draw (exactly over discrete nodes; over a
/// real node as an importance sum on two independent draw sets, averaged,
/// whose disagreement gives the Monte Carlo error); `also_set` are held at
/// their most frequent level (a count at its rounded mean, a real node at
/// its mean), the nodes of `stated` at the values given (a controlled
/// direct effect's mediators).
#[allow(clippy::too_many_arguments)]
pub(crate) fn level_estimate(
    table: &Table,
    x: &str,
    y: &str,
    formula: &Formula,
    also_set: &[String],
    method: &Method,
    cancel: &AtomicBool,
    mass: f64,
    progress: &(dyn Fn(Progress) + Sync),
    simulation: &FormulaSimulation,
    stated: &[(String, Setting)],
) -> Result<FormulaFit, QueryError> {
    let place = format!("ask total effect of {x} on {y} by its identifying formula");
    let supports = level_nodes(table, formula, x, y, also_set, &place)?;
    let real_outcome = supports.last().is_none_or(|s| s.name != y);
    let mut names: Vec<String> = supports.iter().map(|s| s.name.clone()).collect();
    if real_outcome {
        names.push(y.to_string());
    }
    let mut conditionals = Vec::with_capacity(names.len());
    for (i, node) in names.iter().enumerate() {
        QueryError::stop_if(cancel, &place)?;
        conditionals.push(fit_conditional(table, node, &names[..i], method, cancel, progress, &place)?);
    }
    let mut warnings: Vec<String> = conditionals.iter().flat_map(|c| c.fit.warnings.iter().cloned()).collect();
    // One compared quantity per outcome level for a category (its
    // probability), else one: the outcome's mean.
    let labels = supports.last().filter(|s| s.name == y).and_then(|s| s.labels.clone());
    let setup = Setup { table, formula, x, y, also_set, stated, simulation, conditionals: &conditionals, real_outcome, labels: labels.as_ref(), cancel, place: &place };
    let reals: Vec<&str> = supports.iter().filter(|s| s.is_real()).map(|s| s.name.as_str()).collect();
    let (run, draw_error) = if reals.is_empty() {
        (run_draws(&setup, &supports, &mut warnings)?, None)
    } else {
        let set = set_values(table, &supports, x, simulation, also_set, stated, &place)?;
        let mut runs = Vec::with_capacity(2);
        for k in 0..2 {
            let nodes = realise(&supports, table, &set, stream_seed(simulation.seed, 0x17, k), &place)?;
            runs.push(run_draws(&setup, &nodes, &mut warnings)?);
        }
        let second = runs.pop().expect("two runs");
        let (run, share) = average_runs(runs.pop().expect("two runs"), second);
        (run, Some(share))
    };
    let counts: Vec<&Support> = supports.iter().filter(|s| s.count).collect();
    let held_words = held_words(table, &supports, also_set, stated, &place)?;
    let used = run.changes.first().and_then(|c| c.first()).map_or(0, Vec::len);
    let real_words = draw_error.map(|share| (reals.as_slice(), share, simulation.seed, used));
    let how = how_words(x, y, &names, &held_words, &counts, run.worst_tail, labels.is_some(), real_words);
    let outcome_model = &conditionals.last().expect("the outcome's conditional is fitted").model;
    let mut contrasts = Vec::with_capacity(run.changes.len() * labels.as_ref().map_or(1, Vec::len));
    for (((to, from), changes), means) in simulation.settings.iter().zip(run.changes).zip(run.means) {
        for (q, (changes, means)) in changes.into_iter().zip(means).enumerate() {
            let mut c = formula_contrast(table, x, y, outcome_model, to, from, changes, means, mass, how.clone(), None)?;
            if let Some(labels) = &labels {
                c.contrast = format!("{}, {y} {}", c.contrast, labels[q]);
                c.scale = level_scale_words(y, &labels[q], On::Means);
                c.level = Some(labels[q].clone());
                c.in_outcome_unit = false;
                c.unit = None;
            }
            contrasts.push(c);
        }
    }
    if let Some(share) = draw_error.filter(|&s| s > DRAW_ERROR_WARNING) {
        warnings.push(format!(
            "the two independent draw sets of {} disagree: the Monte Carlo error of the averaged answer is {:.0}% of its posterior sd; the real node's conditionals may be far from the normal its values are drawn from",
            reals.join(", "),
            100.0 * share
        ));
    }
    if run.worst_tail > TAIL_WARNING {
        warnings.push(format!(
            "under some draw a count's conditional puts {:.2e} of its probability beyond the top value enumerated ({}); the formula leaves that tail out",
            run.worst_tail,
            counts.iter().map(|s| format!("{} ≤ {}", s.name, s.values.len() - 1)).collect::<Vec<_>>().join(", ")
        ));
    }
    if run.worst_mass > MASS_TOLERANCE + 2.0 * run.worst_tail * counts.len() as f64 {
        warnings.push(format!(
            "under some draw the formula's distribution of {y} has mass {:.6} instead of 1; the chain's joint may strain the graph's constraints there",
            1.0 + run.worst_mass
        ));
    }
    Ok(FormulaFit { conditionals, from_rows: Vec::new(), contrasts, warnings })
}

/// The level each held node is held at: as stated, else a category's or
/// yes/no node's most frequent level, a count's rounded mean, a real
/// node's mean (a value [`realise`] adds).
fn held_levels(table: &Table, nodes: &[Support], also_set: &[String], stated: &[(String, Setting)], place: &str) -> Result<BTreeMap<String, usize>, QueryError> {
    let mut held = BTreeMap::new();
    for name in also_set {
        let support = nodes.iter().find(|s| &s.name == name).expect("a node held is a node of the chain");
        let column = require_column(table, name, place)?;
        let level = match column_mean(column).filter(|_| support.is_real()) {
            Some(mean) => support.level_of(&Setting::Number(mean)).map_err(|e| QueryError::request(format!("{place}: {e}")))?,
            None => usual_level(column),
        };
        debug_assert!(level < support.values.len());
        held.insert(name.clone(), level);
    }
    for (name, setting) in stated {
        let support = nodes
            .iter()
            .find(|s| &s.name == name)
            .ok_or_else(|| QueryError::request(format!("{place}: {name} is held but is not a discrete node of the formula's chain")))?;
        held.insert(name.clone(), support.level_of(setting).map_err(|e| QueryError::request(format!("{place}: {e}")))?);
    }
    Ok(held)
}

/// The settings compared by default: every level against the first for a
/// category, yes against no for a yes/no column, a count's rounded mean
/// plus one against it.
pub(crate) fn level_settings(column: &Column, place: &str) -> Result<Vec<(Setting, Setting)>, QueryError> {
    match &column.data {
        ColumnData::Binary(_) => Ok(vec![(Setting::Number(1.0), Setting::Number(0.0))]),
        ColumnData::Count(_) => {
            let centre = usual_level(column) as f64;
            Ok(vec![(Setting::Number(centre + 1.0), Setting::Number(centre))])
        }
        _ => super::formula_estimate::settings(column, place),
    }
}

/// A discrete column's usual level: its most frequent level (the first of
/// equals), or a count's rounded mean.
pub(crate) fn usual_level(column: &Column) -> usize {
    let frequent = |codes: &mut dyn Iterator<Item = usize>, k: usize| {
        let mut tally = vec![0usize; k];
        codes.for_each(|c| tally[c] += 1);
        (0..k).max_by_key(|&i| (tally[i], std::cmp::Reverse(i))).unwrap_or(0)
    };
    match &column.data {
        ColumnData::Binary(v) => frequent(&mut v.iter().map(|&b| usize::from(b)), 2),
        ColumnData::Category { codes, levels } => frequent(&mut codes.iter().map(|&c| c as usize), levels.len()),
        ColumnData::Count(v) => (v.iter().sum::<u64>() as f64 / v.len().max(1) as f64).round() as usize,
        ColumnData::Real(_) => 0,
    }
}

/// The held nodes in words: each at its stated value, else at its level
/// or (a real node) its mean.
fn held_words(table: &Table, nodes: &[Support], also_set: &[String], stated: &[(String, Setting)], place: &str) -> Result<Vec<String>, QueryError> {
    let mut words = Vec::with_capacity(also_set.len() + stated.len());
    for name in also_set.iter().filter(|a| !stated.iter().any(|(n, _)| n == *a)) {
        let column = require_column(table, name, place)?;
        let real = nodes.iter().any(|s| &s.name == name && s.is_real());
        words.push(match column_mean(column).filter(|_| real) {
            Some(mean) => format!("{name} at its mean {mean:.4}"),
            None => format!("{name} at level {}", usual_level(column)),
        });
    }
    words.extend(stated.iter().map(|(name, setting)| format!("{name} at {}", setting.text())));
    Ok(words)
}

/// The route in words, for the contrast's `held_how`; `reals` names the
/// real nodes drawn, the Monte Carlo error's share of the posterior sd,
/// the seed and the posterior draws used.
#[allow(clippy::too_many_arguments)]
fn how_words(x: &str, y: &str, names: &[String], at: &[String], counts: &[&Support], tail: f64, category: bool, reals: Option<(&[&str], f64, u64, usize)>) -> String {
    let counted: Vec<String> = counts.iter().map(|s| format!("{} enumerated to {}", s.name, s.values.len() - 1)).collect();
    let drawn = reals.map_or(String::new(), |(reals, share, seed, used)| {
        format!(
            "; the real node{} {} taken at {REAL_DRAWS} values drawn, one per stratum of equal probability, from a normal about its column \
             and weighted as an importance sum, averaged over two independent draw sets (seed {seed}) whose disagreement puts the Monte Carlo \
             error at {:.1}% of the posterior sd (on {used} posterior draws, evenly spaced)",
            if reals.len() == 1 { "" } else { "s" },
            reals.join(", "),
            100.0 * share
        )
    });
    format!(
        "identifying formula evaluated exactly over every combination of the levels of {} (each regressed on the ones before it with its column's family) \
         with {x} set{}{}{drawn}; {y}'s {} under each posterior draw",
        names.join(", "),
        if at.is_empty() { String::new() } else { format!(" and {} held", at.join(", ")) },
        if counted.is_empty() { String::new() } else { format!("; {} (largest tail left out {tail:.1e})", counted.join(", ")) },
        if category { "level probabilities" } else { "mean" }
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    fn s(v: &[&str]) -> Vec<String> {
        v.iter().map(|x| x.to_string()).collect()
    }

    fn binary(name: &str) -> Support {
        Support { name: name.into(), values: vec![0.0, 1.0], labels: None, count: false, weights: None }
    }

    #[test]
    fn marginals_sum_the_other_nodes_out() {
        // A 2 × 3 table p(a, b) = (a + 1)(b + 1) / 18, by hand.
        let p: Vec<f64> = (0..2).flat_map(|a| (0..3).map(move |b| ((a + 1) * (b + 1)) as f64 / 18.0)).collect();
        let joint = LevelJoint { sizes: vec![2, 3], p, moment: None };
        let b = joint.marginal(&[1], false);
        assert!((b[0] - 3.0 / 18.0).abs() < 1e-15 && (b[2] - 9.0 / 18.0).abs() < 1e-15);
        let swapped = joint.marginal(&[1, 0], false);
        assert!((swapped[2 * 2 + 1] - 6.0 / 18.0).abs() < 1e-15, "b = 2, a = 1 is (2)(3)/18");
        assert!((joint.marginal(&[], false)[0] - 1.0).abs() < 1e-15);
    }

    #[test]
    fn the_real_outcome_must_meet_the_formula_once_as_a_node_drawn() {
        let py = Formula::probability(s(&["y"]), s(&["x"]));
        assert_eq!(appearances(&py, "y").unwrap(), 1);
        let given = Formula::probability(s(&["m"]), s(&["y"]));
        assert!(appearances(&given, "y").unwrap_err().contains("conditions on y"));
        let twice = Formula::product(vec![py.clone(), Formula::probability(s(&["y", "m"]), s(&["x"]))]);
        assert_eq!(appearances(&twice, "y").unwrap(), 2);
        let divided = Formula::ratio(Formula::probability(s(&["x"]), vec![]), py.clone());
        assert!(appearances(&divided, "y").unwrap_err().contains("divides"));
    }

    #[test]
    fn the_chain_follows_the_order_the_conditionals_give() {
        // Pr[c | a, b] · Pr[b | a] · Pr[a]: a, then b, then c, whatever the
        // names' own order.
        let f = Formula::product(vec![
            Formula::probability(s(&["c"]), s(&["a", "b"])),
            Formula::probability(s(&["b"]), s(&["a"])),
            Formula::probability(s(&["a"]), vec![]),
        ]);
        assert_eq!(causal_order(&f, s(&["c", "b", "a", "d"])), s(&["a", "b", "c", "d"]));
        // A joint factor keeps its order: Pr[b, a] puts b first.
        let joint = Formula::probability(s(&["b", "a"]), vec![]);
        assert_eq!(causal_order(&joint, s(&["a", "b"])), s(&["b", "a"]));
    }

    #[test]
    fn a_real_node_s_weighted_values_integrate_a_density_to_one() {
        // ∫ N(v; m, s) dv = 1 for a conditional narrower than the column and
        // off its centre: the weighted sum over the drawn values is an
        // importance estimate of that integral.
        let values: Vec<f64> = (0..500).map(|i| 10.0 + 2.0 * ((i as f64 * 0.37).sin())).collect();
        let table = Table { name: "t".into(), columns: vec![Column::new("r", ColumnData::Real(values))] };
        let set = BTreeMap::from([("r".to_string(), vec![11.5])]);
        let nodes = realise(&[Support::real("r")], &table, &set, 7, "test").unwrap();
        let (v, w) = (&nodes[0].values, nodes[0].weights.as_ref().unwrap());
        assert_eq!(v.len(), REAL_DRAWS + 1);
        assert_eq!(v[REAL_DRAWS], 11.5, "the set value is added last");
        let normal = |x: f64, m: f64, s: f64| (-0.5 * ((x - m) / s).powi(2)).exp() / (s * (2.0 * std::f64::consts::PI).sqrt());
        let total: f64 = v[..REAL_DRAWS].iter().zip(w).map(|(&x, &wt)| wt * normal(x, 11.0, 0.8)).sum();
        assert!((total - 1.0).abs() < 1e-3, "{total}");
        assert!(w[REAL_DRAWS] * normal(11.5, 11.0, 0.8) < 1e-8, "the set value barely counts in a sum");
        let constant = Column::new("c", ColumnData::Real(vec![3.0; 10]));
        assert!(proposal(&constant).is_none(), "a column without spread has no proposal");
    }

    #[test]
    fn an_interrupt_stops_a_long_sum() {
        // Twelve binary nodes summed over: 4096 terms reach the check.
        let nodes: Vec<Support> = (0..13).map(|i| binary(&format!("v{i}"))).collect();
        let joint = LevelJoint { sizes: vec![2; 13], p: vec![1.0 / 8192.0; 8192], moment: None };
        let over: Vec<String> = (1..13).map(|i| format!("v{i}")).collect();
        let f = Formula::sum(over.clone(), Formula::probability(s(&["v0"]), over));
        let stop = AtomicBool::new(true);
        let e = effect_on_levels(&f, "v1", "v0", 0, &BTreeMap::new(), &nodes, &joint, &stop).unwrap_err();
        assert_eq!(e, "interrupted");
    }
}
