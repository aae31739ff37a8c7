//! Synthetic data with known truth: `simulate NAME from GRAPH rows N seed S:`
//! with one mechanism per node ([`super::mechanism`]).
//!
//! Every node of the graph, hidden ones included, needs a mechanism that
//! reads only its parents; nodes are generated in topological order, each
//! from its own seeded random stream, so setting one node by intervention
//! leaves the noise of every other node unchanged (common random numbers).
//! Hidden nodes are generated but not written to the table. The same
//! mechanisms give the true effect of an intervention by simulating it
//! directly ([`Simulation::true_effect`]).
//!
//! A `departure(c, spread)` in a mechanism draws one departure per level of
//! category c from `normal(0, spread)`, once per simulation and from the
//! node's own stream, before its rows; they are kept with the generated
//! values ([`GroupDraw`]) so that `recover` can set them beside a pooled
//! model's departures, and an intervention elsewhere leaves them as they were.
//!
//! A time's follow-up rule (`followed until END cut short by COLUMN`) draws
//! each row's follow-up end from a stream of its own after the node's
//! times, and keeps it beside them ([`Generated::follow_up_ends`]); the
//! times stay whole for the nodes that read them and for true effects, and
//! only the observed table cuts them and writes COLUMN beside the time.

use std::sync::atomic::AtomicBool;

use rand::rngs::StdRng;
use rand::{RngExt, SeedableRng};
use rand_distr::{Beta, Distribution, Gamma, Poisson, StandardNormal};

use crate::graph::Graph;
use crate::limits::{bytes_for, check_memory};
use crate::model::family::logistic;
use crate::model::family::survival::{draw_time, TimeShape};
use crate::table::{Column, ColumnData, Table};

use super::error::QueryError;
use super::mechanism::{parse_mechanism_line, DepartureTerm, FollowUpEnd, Mechanism, Use};
use super::support::{short, stream_seed};
use crate::model::terms::groups::nested_level;

/// Rows generated between two reads of the cancel flag.
const CANCEL_EVERY: usize = 4096;

/// Rows and seed of a simulation.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SimulationSettings {
    pub rows: usize,
    pub seed: u64,
}

/// One node's mechanism and the cell line it was written on.
#[derive(Debug, Clone, PartialEq)]
struct NodeMechanism {
    node: String,
    line: usize,
    mechanism: Mechanism,
}

/// A checked set of mechanisms for every node of a graph.
#[derive(Debug, Clone)]
pub struct Simulation {
    pub name: String,
    pub graph: Graph,
    pub settings: SimulationSettings,
    /// In topological order.
    nodes: Vec<NodeMechanism>,
}

/// Generated values of one node.
#[derive(Debug, Clone, PartialEq)]
pub(crate) enum NodeValues {
    Real(Vec<f64>),
    Count(Vec<u64>),
    Binary(Vec<bool>),
    Category(Vec<u32>),
}

impl NodeValues {
    fn len(&self) -> usize {
        match self {
            NodeValues::Real(v) => v.len(),
            NodeValues::Count(v) => v.len(),
            NodeValues::Binary(v) => v.len(),
            NodeValues::Category(v) => v.len(),
        }
    }

    fn real_at(&self, i: usize) -> f64 {
        match self {
            NodeValues::Real(v) => v[i],
            NodeValues::Count(v) => v[i] as f64,
            NodeValues::Binary(v) => f64::from(u8::from(v[i])),
            NodeValues::Category(v) => v[i] as f64,
        }
    }
}

/// The departures one node's mechanism drew for the levels of a category.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct GroupDraw {
    /// The category.
    pub(crate) group: String,
    /// Its levels, in declared order.
    pub(crate) levels: Vec<String>,
    /// The stated spread.
    pub(crate) spread: f64,
    /// The numeric parent whose slope departs (`departure(c, spread, x)`),
    /// `None` for the intercept's departure.
    pub(crate) slope: Option<String>,
    /// The stated correlation of a slope's departures with the
    /// intercept's (`None`: independent).
    pub(crate) correlation: Option<f64>,
    /// The stated correlations of a slope's departures with other slopes'
    /// (`correlation q with x`).
    pub(crate) with_slopes: Vec<(String, f64)>,
    /// The category `group` is nested in (`departure(plot within site, …)`):
    /// then `levels` are every pair, shown `p1 in A` like a nested pooled
    /// group's, outer level by outer level.
    pub(crate) within: Option<String>,
    /// In a `levels(…)` mechanism, the outcome level whose log odds these
    /// departures move.
    pub(crate) outcome_level: Option<String>,
    /// One departure per level.
    pub(crate) departures: Vec<f64>,
}

impl GroupDraw {
    /// The `departure(…)` this draw comes from.
    pub(crate) fn term(&self) -> DepartureTerm {
        DepartureTerm {
            group: self.group.clone(),
            outcome_level: self.outcome_level.clone(),
            spread: self.spread,
            slope: self.slope.clone(),
            correlation: self.correlation,
            with_slopes: self.with_slopes.clone(),
            within: self.within.clone(),
        }
    }
}

/// Give each category's departures their stated correlations: with `L`
/// the lower Cholesky factor of the stated correlation matrix of the
/// category's effects (intercept first, then slopes in reading order;
/// `mechanism::stated_correlation`) and `zₘⱼ` effect m's own standard
/// normal draw for level j, effect e's departure of level j becomes
/// `spreadₑ·Σₘ Lₑₘ·zₘⱼ`, so the effects of a level are jointly normal with
/// that correlation matrix (`L·Lᵀ`). With only correlations with the
/// intercept stated, a slope's row of `L` is `(r, 0, …, √(1 − r²))`: the
/// slope's departure is `spread·(r·z₀ⱼ + √(1 − r²)·zⱼ)`. The mechanism's
/// parser made sure the matrix is positive definite.
fn correlate_departures(draws: &mut [GroupDraw]) {
    let terms: Vec<DepartureTerm> = draws.iter().map(GroupDraw::term).collect();
    for key in super::mechanism::departure_groups(&terms) {
        let effects = super::mechanism::group_effects(&terms, key);
        if effects.iter().all(|t| t.correlation.is_none() && t.with_slopes.is_empty()) {
            continue;
        }
        let Some(l) = super::mechanism::correlation_factor(&effects) else { continue };
        let at: Vec<usize> = effects.iter().filter_map(|e| terms.iter().position(|t| std::ptr::eq(t, *e))).collect();
        let scores: Vec<Vec<f64>> = at.iter().map(|&i| draws[i].departures.iter().map(|a| a / draws[i].spread).collect()).collect();
        for (e, &i) in at.iter().enumerate() {
            let spread = draws[i].spread;
            for (j, a) in draws[i].departures.iter_mut().enumerate() {
                *a = spread * (0..=e).map(|m| l[(e, m)] * scores[m][j]).sum::<f64>();
            }
        }
    }
}

/// Every node's generated values, in the simulation's node order.
pub(crate) struct Generated {
    pub(crate) values: Vec<NodeValues>,
    /// Per node, the departures its mechanism drew.
    pub(crate) departures: Vec<Vec<GroupDraw>>,
    /// Per node, each row's follow-up end under its follow-up rule (`None`
    /// for a node without one).
    pub(crate) follow_up_ends: Vec<Option<Vec<f64>>>,
}

/// How many rows of a time node the follow-up rule cut short.
#[derive(Debug, Clone, PartialEq)]
pub struct CutShort {
    pub node: String,
    pub column: String,
    pub rows: usize,
    pub of: usize,
}

/// A value an intervention sets a node to.
enum Forced {
    Code(u32),
    Number(f64),
}

impl Simulation {
    /// Check numbered body lines `(line, text)` against `graph`.
    pub fn parse<'a>(
        name: &str,
        graph: &Graph,
        settings: SimulationSettings,
        lines: impl IntoIterator<Item = (usize, &'a str)>,
    ) -> Result<Simulation, QueryError> {
        let mut found: Vec<NodeMechanism> = Vec::new();
        for (line, text) in lines {
            let at = |message: String| QueryError::Mechanism { line, message };
            let Some((node, mechanism)) = parse_mechanism_line(text).map_err(at)? else {
                continue;
            };
            graph.is_hidden(&node).map_err(|_| {
                let nodes: Vec<&str> = graph.nodes().iter().map(|n| n.name.as_str()).collect();
                at(format!("{node} is not a node of graph {} (its nodes: {}); give mechanisms for its nodes only", graph.name(), nodes.join(", ")))
            })?;
            if let Some(first) = found.iter().find(|m| m.node == node) {
                return Err(at(format!("{node} already has a mechanism on line {}; keep one", first.line)));
            }
            found.push(NodeMechanism { node, line, mechanism });
        }
        let mut nodes = Vec::new();
        for node in graph.topological_order() {
            let Some(m) = found.iter().find(|m| m.node == node) else {
                return Err(QueryError::request(format!(
                    "simulate {name}: node {node} of graph {} has no mechanism; add a line such as `{node} = normal(0, 1)`",
                    graph.name()
                )));
            };
            nodes.push(m.clone());
        }
        for m in &nodes {
            check_uses(graph, &nodes, m)?;
        }
        check_follow_up_columns(graph, &nodes)?;
        // Generated values and the table made of them: two copies of every
        // node's rows, and of each follow-up rule's ends and column.
        let rules = nodes.iter().filter(|m| m.mechanism.follow_up().is_some()).count();
        let bytes = bytes_for(&[settings.rows, nodes.len().max(1) + rules, 2]);
        check_memory(&format!("simulate {name}: {} rows of {} nodes", settings.rows, nodes.len()), bytes).map_err(QueryError::request)?;
        Ok(Simulation { name: name.to_string(), graph: graph.clone(), settings, nodes })
    }

    /// The synthetic table: every observed node, in the graph's order of
    /// mention, with category levels in declared order.
    pub fn table(&self) -> Result<Table, QueryError> {
        self.table_with_cancel(&AtomicBool::new(false))
    }

    /// [`Simulation::table`], stopping with [`QueryError::Interrupted`]
    /// soon after `cancel` is set.
    pub fn table_with_cancel(&self, cancel: &AtomicBool) -> Result<Table, QueryError> {
        let generated = self.generate(self.settings.rows, self.settings.seed, None, cancel)?;
        self.observed_table(&generated)
    }

    /// The table of the observed nodes of `generated`.
    pub(crate) fn observed_table(&self, generated: &Generated) -> Result<Table, QueryError> {
        let mut columns = Vec::new();
        for node in self.graph.nodes().iter().filter(|n| !n.hidden) {
            let Some(k) = self.nodes.iter().position(|m| m.node == node.name) else { continue };
            if let (Some(rule), Some(ends), NodeValues::Real(times)) =
                (self.nodes[k].mechanism.follow_up(), &generated.follow_up_ends[k], &generated.values[k])
            {
                let cut: Vec<bool> = times.iter().zip(ends).map(|(t, e)| t > e).collect();
                let seen: Vec<f64> = times.iter().zip(ends).map(|(t, e)| t.min(*e)).collect();
                match &rule.looks {
                    Some(looks) => {
                        let (lower, upper): (Vec<f64>, Vec<f64>) = seen
                            .iter()
                            .zip(ends)
                            .zip(&cut)
                            .map(|((&t, &e), &c)| if c { (e, e) } else { looks.bounds(t, e) })
                            .unzip();
                        columns.push(Column::new(node.name.clone(), ColumnData::Real(lower)));
                        columns.push(Column::new(rule.column.clone(), ColumnData::Binary(cut)));
                        columns.push(Column::new(looks.column.clone(), ColumnData::Real(upper)));
                    }
                    None => {
                        columns.push(Column::new(node.name.clone(), ColumnData::Real(seen)));
                        columns.push(Column::new(rule.column.clone(), ColumnData::Binary(cut)));
                    }
                }
                continue;
            }
            let data = match (&generated.values[k], &self.nodes[k].mechanism) {
                (NodeValues::Category(codes), Mechanism::Category { levels, .. }) => {
                    ColumnData::Category { codes: codes.clone(), levels: levels.clone() }
                }
                (NodeValues::Real(v), _) => ColumnData::Real(v.clone()),
                (NodeValues::Count(v), _) => ColumnData::Count(v.clone()),
                (NodeValues::Binary(v), _) => ColumnData::Binary(v.clone()),
                (NodeValues::Category(codes), _) => ColumnData::Count(codes.iter().map(|&c| c as u64).collect()),
            };
            let stated = matches!(data, ColumnData::Category { .. });
            let column = Column::new(node.name.clone(), data);
            columns.push(if stated { column.with_stated_order() } else { column });
        }
        Ok(Table::from_columns(self.name.clone(), columns)?)
    }

    /// The looks of time node `node`'s follow-up rule, when it has them.
    pub(crate) fn looks_of(&self, node: &str) -> Option<&super::mechanism::Looks> {
        self.nodes.iter().find(|m| m.node == node)?.mechanism.follow_up()?.looks.as_ref()
    }

    /// Per time node with a follow-up rule, how many of the generated rows
    /// the rule cut short.
    pub(crate) fn cut_short(&self, generated: &Generated) -> Vec<CutShort> {
        self.nodes
            .iter()
            .zip(generated.values.iter().zip(&generated.follow_up_ends))
            .filter_map(|(m, (values, ends))| {
                let (rule, ends, NodeValues::Real(times)) = (m.mechanism.follow_up()?, ends.as_ref()?, values) else { return None };
                let rows = times.iter().zip(ends).filter(|(t, e)| t > e).count();
                Some(CutShort { node: m.node.clone(), column: rule.column.clone(), rows, of: times.len() })
            })
            .collect()
    }

    /// Generate `rows` rows with `seed`, and the full set of node values
    /// (hidden nodes included) with the data's own seed.
    pub(crate) fn generate_default(&self) -> Result<Generated, QueryError> {
        self.generate(self.settings.rows, self.settings.seed, None, &AtomicBool::new(false))
    }

    /// The true effect of setting `variable` to `to` vs `from` on the mean
    /// of `watch`, from `rows` units simulated under each setting with the
    /// same noise (seeded); the large-sample truth a fitted model should find.
    pub fn true_effect(&self, variable: &str, to: &str, from: &str, watch: &str, rows: usize, seed: u64) -> Result<f64, QueryError> {
        let place = format!("simulate {}", self.name);
        let k = self.index(variable, &place)?;
        let w = self.index(watch, &place)?;
        if matches!(self.nodes[w].mechanism, Mechanism::Category { .. }) {
            return Err(QueryError::request(format!("{place}: {watch} is a category; watch a numeric node")));
        }
        let read = |text: &str| -> Result<Forced, QueryError> {
            match &self.nodes[k].mechanism {
                Mechanism::Category { levels, .. } => levels.iter().position(|l| l == text).map(|c| Forced::Code(c as u32)).ok_or_else(|| {
                    QueryError::request(format!("{place}: `{text}` is not a level of {variable} (levels: {})", levels.join(", ")))
                }),
                _ => text.trim().parse::<f64>().map(Forced::Number).map_err(|_| {
                    QueryError::request(format!("{place}: `{text}` is not a number, and {variable} is numeric"))
                }),
            }
        };
        let never = AtomicBool::new(false);
        let under_to = self.generate(rows, seed, Some((k, read(to)?)), &never)?;
        let under_from = self.generate(rows, seed, Some((k, read(from)?)), &never)?;
        let mean = |g: &Generated| (0..rows).map(|i| g.values[w].real_at(i)).sum::<f64>() / rows.max(1) as f64;
        Ok(mean(&under_to) - mean(&under_from))
    }

    /// Parents in the graph that a node's mechanism does not read, as
    /// `(node, cell line, unused parents)`: the simulated data then carry no
    /// effect along an edge the graph draws, which is rarely what was meant.
    pub fn unused_parents(&self) -> Result<Vec<(String, usize, Vec<String>)>, QueryError> {
        let mut found = Vec::new();
        for m in &self.nodes {
            let used: Vec<String> = m.mechanism.uses().into_iter().map(|(name, _)| name).collect();
            let unused: Vec<String> =
                self.graph.parents(&m.node)?.into_iter().filter(|p| !used.iter().any(|u| u == p)).map(str::to_string).collect();
            if !unused.is_empty() {
                found.push((m.node.clone(), m.line, unused));
            }
        }
        Ok(found)
    }

    /// Every observed time node with a follow-up rule: the node and the
    /// column its rule writes.
    pub fn follow_up_columns(&self) -> Vec<(String, String)> {
        self.nodes
            .iter()
            .filter_map(|m| m.mechanism.follow_up().map(|rule| (m.node.clone(), rule.column.clone())))
            .filter(|(node, _)| !self.graph.is_hidden(node).unwrap_or(true))
            .collect()
    }

    /// The node's mechanism, if it has one.
    pub fn mechanism(&self, node: &str) -> Option<&Mechanism> {
        self.nodes.iter().find(|m| m.node == node).map(|m| &m.mechanism)
    }

    /// The node's linear predictor on its link scale (identity for normal,
    /// logit for bernoulli, log for poisson) in every generated row, and the
    /// spread of a normal mechanism when it is a constant.
    pub(crate) fn link_scale_truth(&self, node: &str, generated: &Generated) -> Option<(Vec<f64>, Option<f64>)> {
        let k = self.nodes.iter().position(|m| m.node == node)?;
        let n = generated.values.first().map_or(0, |v| match v {
            NodeValues::Real(x) => x.len(),
            NodeValues::Count(x) => x.len(),
            NodeValues::Binary(x) => x.len(),
            NodeValues::Category(x) => x.len(),
        });
        let own = &generated.departures[k];
        let eval = |e: &super::mechanism::Expr, i: usize| self.eval_at(e, generated, own, i);
        match &self.nodes[k].mechanism {
            // The model fixes its first cut at 0, so its linear predictor is the score less that cut.
            Mechanism::Category { score: Some(latent), .. } => {
                let first = latent.cuts.first().copied().unwrap_or(0.0);
                Some(((0..n).map(|i| eval(&latent.score, i) - first).collect(), None))
            }
            Mechanism::Category { .. } => None,
            Mechanism::Normal { mean, sd } => {
                let spread = sd.uses().is_empty().then(|| eval(sd, 0));
                Some(((0..n).map(|i| eval(mean, i)).collect(), spread))
            }
            Mechanism::Bernoulli { p, logit } => Some((
                (0..n).map(|i| if *logit { eval(p, i) } else { let q = eval(p, i); (q / (1.0 - q)).ln() }).collect(),
                None,
            )),
            Mechanism::Poisson { rate, log, overdispersion } => {
                // A gamma-poisson node's second truth is its overdispersion, when it is one number.
                let kappa = overdispersion.as_ref().and_then(|k| k.uses().is_empty().then(|| eval(k, 0)));
                Some(((0..n).map(|i| if *log { eval(rate, i) } else { eval(rate, i).ln() }).collect(), kappa))
            }
            Mechanism::Beta { mean, logit, precision } => {
                let phi = precision.uses().is_empty().then(|| eval(precision, 0));
                let eta = |i: usize| if *logit { eval(mean, i) } else { let q = eval(mean, i); (q / (1.0 - q)).ln() };
                Some(((0..n).map(eta).collect(), phi))
            }
            Mechanism::Time { mean, log, shape, .. } => {
                // A Weibull node's second truth is its shape, when it is one number.
                let k = shape.as_ref().and_then(|k| k.uses().is_empty().then(|| eval(k, 0)));
                Some(((0..n).map(|i| if *log { eval(mean, i) } else { eval(mean, i).ln() }).collect(), k))
            }
        }
    }

    /// A `levels(…)` node's log odds of each level after the first against
    /// it, in every generated row (`None` for any other node).
    pub(crate) fn level_log_odds_truth(&self, node: &str, generated: &Generated) -> Option<Vec<Vec<f64>>> {
        let k = self.nodes.iter().position(|m| m.node == node)?;
        let Mechanism::Category { levels, log_odds, .. } = &self.nodes[k].mechanism else { return None };
        if log_odds.is_empty() {
            return None;
        }
        let n = generated.values[k].len();
        let own = &generated.departures[k];
        Some(
            levels[1..]
                .iter()
                .zip(log_odds)
                .map(|(level, e)| {
                    let mine: Vec<GroupDraw> = own.iter().filter(|d| d.outcome_level.as_deref() == Some(level.as_str())).cloned().collect();
                    (0..n).map(|i| self.eval_at(e, generated, &mine, i)).collect()
                })
                .collect(),
        )
    }

    fn index(&self, node: &str, place: &str) -> Result<usize, QueryError> {
        self.nodes.iter().position(|m| m.node == node).ok_or_else(|| {
            QueryError::request(format!("{place}: {node} is not a node of graph {}", self.graph.name()))
        })
    }

    /// The generated values of numeric node `node`.
    pub(crate) fn values_of(&self, node: &str, generated: &Generated) -> Option<Vec<f64>> {
        let k = self.nodes.iter().position(|m| m.node == node)?;
        let n = generated.values[k].len();
        Some((0..n).map(|i| generated.values[k].real_at(i)).collect())
    }

    /// The departures node `node`'s mechanism drew, when it drew any.
    pub(crate) fn group_draws<'g>(&self, node: &str, generated: &'g Generated) -> &'g [GroupDraw] {
        self.nodes.iter().position(|m| m.node == node).and_then(|k| generated.departures.get(k)).map_or(&[], Vec::as_slice)
    }

    /// Each generated row's departure in `draw` (that of its level of the
    /// category; for a slope's departure, times the row's value of the slope's parent).
    pub(crate) fn departure_in_rows(&self, draw: &GroupDraw, generated: &Generated) -> Vec<f64> {
        let slope = draw.slope.as_ref().map(|x| self.nodes.iter().position(|m| m.node == *x));
        let Some(codes) = self.departure_levels(&draw.group, draw.within.as_deref(), generated) else { return Vec::new() };
        codes
            .iter()
            .enumerate()
            .map(|(i, &c)| {
                let times = match slope {
                    None => 1.0,
                    Some(k) => k.map_or(f64::NAN, |k| generated.values[k].real_at(i)),
                };
                draw.departures.get(c as usize).copied().unwrap_or(f64::NAN) * times
            })
            .collect()
    }

    /// Each generated row's level index among the departures of `group`
    /// (nested `within` another category: the pair's index, outer level by
    /// outer level); `None` when a category was not generated.
    fn departure_levels(&self, group: &str, within: Option<&str>, generated: &Generated) -> Option<Vec<u32>> {
        let codes_of = |c: &str| {
            self.nodes.iter().position(|m| m.node == c).and_then(|k| match generated.values.get(k)? {
                NodeValues::Category(codes) => Some(codes),
                _ => None,
            })
        };
        let inner = codes_of(group)?;
        let Some(outer) = within else { return Some(inner.clone()) };
        let width = match self.mechanism(group) {
            Some(Mechanism::Category { levels, .. }) => levels.len() as u32,
            _ => return None,
        };
        Some(codes_of(outer)?.iter().zip(inner).map(|(o, i)| o * width + i).collect())
    }

    fn eval_at(&self, expr: &super::mechanism::Expr, generated: &Generated, own: &[GroupDraw], i: usize) -> f64 {
        let position = |name: &str| self.nodes.iter().position(|m| m.node == name);
        let value = |name: &str| position(name).map_or(f64::NAN, |k| generated.values[k].real_at(i));
        let is_level = |name: &str, level: &str| {
            position(name).is_some_and(|k| match (&self.nodes[k].mechanism, &generated.values[k]) {
                (Mechanism::Category { levels, .. }, NodeValues::Category(codes)) => levels[codes[i] as usize] == level,
                _ => false,
            })
        };
        let departure = |term: &DepartureTerm| {
            let code = |c: &str| {
                position(c).and_then(|k| match &generated.values[k] {
                    NodeValues::Category(codes) => Some(codes[i] as usize),
                    _ => None,
                })
            };
            let level = match &term.within {
                None => code(&term.group),
                Some(outer) => match self.mechanism(&term.group) {
                    Some(Mechanism::Category { levels, .. }) => code(outer).zip(code(&term.group)).map(|(o, c)| o * levels.len() + c),
                    _ => None,
                },
            };
            own.iter()
                .find(|d| d.group == term.group && d.within == term.within && d.slope == term.slope)
                .zip(level)
                .and_then(|(d, l)| d.departures.get(l).copied())
                .unwrap_or(f64::NAN)
        };
        expr.eval(&value, &is_level, &departure)
    }

    /// Generate `rows` rows, optionally with node `forced.0` set to a value.
    fn generate(&self, rows: usize, seed: u64, forced: Option<(usize, Forced)>, cancel: &AtomicBool) -> Result<Generated, QueryError> {
        let n = self.nodes.len();
        let mut generated =
            Generated { values: Vec::with_capacity(n), departures: Vec::with_capacity(n), follow_up_ends: Vec::with_capacity(n) };
        for (k, m) in self.nodes.iter().enumerate() {
            QueryError::stop_if(cancel, &format!("simulate {}", self.name))?;
            let own = self.draw_departures(k, seed);
            let values = match &forced {
                Some((f, value)) if *f == k => forced_values(&m.mechanism, value, rows),
                _ => self.draw_node(k, rows, seed, &generated, &own, cancel)?,
            };
            let ends = match m.mechanism.follow_up() {
                Some(rule) => Some(self.follow_up_ends(k, &rule.end, rows, seed, &generated, &own, cancel)?),
                None => None,
            };
            generated.values.push(values);
            generated.departures.push(own);
            generated.follow_up_ends.push(ends);
        }
        Ok(generated)
    }

    /// Each row's follow-up end for node `k`'s rule, from a stream of its
    /// own (so the rule leaves the node's times as they were drawn); an
    /// end must be positive and finite.
    #[allow(clippy::too_many_arguments)]
    fn follow_up_ends(
        &self,
        k: usize,
        end: &FollowUpEnd,
        rows: usize,
        seed: u64,
        so_far: &Generated,
        own: &[GroupDraw],
        cancel: &AtomicBool,
    ) -> Result<Vec<f64>, QueryError> {
        let m = &self.nodes[k];
        let mut rng = StdRng::seed_from_u64(stream_seed(seed, k as u64, 1));
        let what = format!("simulate {}", self.name);
        let mut out = Vec::with_capacity(rows);
        for i in 0..rows {
            if i % CANCEL_EVERY == 0 {
                QueryError::stop_if(cancel, &what)?;
            }
            let eval = |e: &super::mechanism::Expr| self.eval_at(e, so_far, own, i);
            let value = match end {
                FollowUpEnd::At(e) => eval(e),
                FollowUpEnd::Uniform(lo, hi) => {
                    let (lo, hi) = (eval(lo), eval(hi));
                    if !(lo <= hi) {
                        return Err(QueryError::Mechanism {
                            line: m.line,
                            message: format!(
                                "in simulated row {}, the follow-up end of {} is drawn between {} and {}, but the first must not exceed the second",
                                i + 1,
                                m.node,
                                short(lo),
                                short(hi)
                            ),
                        });
                    }
                    lo + (hi - lo) * rng.random::<f64>()
                }
            };
            // Written so that a NaN end is refused too.
            if !(value.is_finite() && value > 0.0) {
                return Err(QueryError::Mechanism {
                    line: m.line,
                    message: format!(
                        "in simulated row {}, the follow-up end of {} is {}, but it must be a positive time; change the rule",
                        i + 1,
                        m.node,
                        short(value)
                    ),
                });
            }
            out.push(value);
        }
        Ok(out)
    }

    /// The departures of node `k`'s mechanism: for its `g`-th
    /// `departure(c, spread[, x])`, one `normal(0, spread)` draw per level of c,
    /// in declared order, from a stream of their own.
    fn draw_departures(&self, k: usize, seed: u64) -> Vec<GroupDraw> {
        let m = &self.nodes[k];
        let mut draws: Vec<GroupDraw> = m
            .mechanism
            .departures()
            .into_iter()
            .enumerate()
            .map(|(g, DepartureTerm { group, spread, slope, correlation, with_slopes, within, outcome_level })| {
                let levels_of = |c: &str| match self.mechanism(c) {
                    Some(Mechanism::Category { levels, .. }) => levels.clone(),
                    _ => Vec::new(),
                };
                let levels = match &within {
                    Some(outer) => {
                        let inner = levels_of(&group);
                        levels_of(outer).iter().flat_map(|o| inner.iter().map(move |i| nested_level(i, o))).collect()
                    }
                    None => levels_of(&group),
                };
                let mut rng = StdRng::seed_from_u64(stream_seed(seed, k as u64, 3 + g as u64));
                let departures = levels.iter().map(|_| { let z: f64 = StandardNormal.sample(&mut rng); spread * z }).collect::<Vec<f64>>();
                GroupDraw { group, levels, spread, slope, correlation, with_slopes, within, outcome_level, departures }
            })
            .collect();
        correlate_departures(&mut draws);
        draws
    }

    /// Draw node `k` for every row from its own stream.
    fn draw_node(&self, k: usize, rows: usize, seed: u64, so_far: &Generated, own: &[GroupDraw], cancel: &AtomicBool) -> Result<NodeValues, QueryError> {
        let m = &self.nodes[k];
        let mut rng = StdRng::seed_from_u64(stream_seed(seed, k as u64, 2));
        let bad = |i: usize, what: String| QueryError::Mechanism {
            line: m.line,
            message: format!("in simulated row {}, {what}; change the mechanism of {}", i + 1, m.node),
        };
        let eval = |e: &super::mechanism::Expr, i: usize| self.eval_at(e, so_far, own, i);
        let what = format!("simulate {}", self.name);
        let stop = |i: usize| if i % CANCEL_EVERY == 0 { QueryError::stop_if(cancel, &what) } else { Ok(()) };
        Ok(match &m.mechanism {
            Mechanism::Category { levels, log_odds, .. } if !log_odds.is_empty() => {
                let by_level: Vec<Vec<GroupDraw>> = levels[1..]
                    .iter()
                    .map(|l| own.iter().filter(|d| d.outcome_level.as_deref() == Some(l.as_str())).cloned().collect())
                    .collect();
                let mut out = Vec::with_capacity(rows);
                let mut eta = vec![0.0; levels.len()];
                for i in 0..rows {
                    stop(i)?;
                    for (k, (e, mine)) in log_odds.iter().zip(&by_level).enumerate() {
                        eta[k + 1] = self.eval_at(e, so_far, mine, i);
                        if !eta[k + 1].is_finite() {
                            return Err(bad(i, format!("the log odds of {} is {}, but it must be a finite number", levels[k + 1], short(eta[k + 1]))));
                        }
                    }
                    let top = eta.iter().copied().fold(f64::NEG_INFINITY, f64::max);
                    let weights: Vec<f64> = eta.iter().map(|e| (e - top).exp()).collect();
                    let u: f64 = rng.random::<f64>() * weights.iter().sum::<f64>();
                    let mut total = 0.0;
                    out.push(weights.iter().position(|w| { total += w; u < total }).unwrap_or(levels.len() - 1) as u32);
                }
                NodeValues::Category(out)
            }
            Mechanism::Category { score: Some(latent), .. } => {
                let mut out = Vec::with_capacity(rows);
                for i in 0..rows {
                    stop(i)?;
                    let score = eval(&latent.score, i);
                    if !score.is_finite() {
                        return Err(bad(i, format!("the latent score is {}, but it must be a finite number", short(score))));
                    }
                    // A standard logistic error by inversion of its distribution function.
                    let u: f64 = rng.random::<f64>().max(f64::MIN_POSITIVE);
                    let value = score + (u / (1.0 - u)).ln();
                    out.push(latent.cuts.iter().filter(|&&c| value >= c).count() as u32);
                }
                NodeValues::Category(out)
            }
            Mechanism::Category { shares, .. } => {
                let mut out = Vec::with_capacity(rows);
                for i in 0..rows {
                    stop(i)?;
                    let u: f64 = rng.random();
                    let mut total = 0.0;
                    out.push(shares.iter().position(|s| { total += s; u < total }).unwrap_or(shares.len() - 1) as u32);
                }
                NodeValues::Category(out)
            }
            Mechanism::Normal { mean, sd } => {
                let mut out = Vec::with_capacity(rows);
                for i in 0..rows {
                    stop(i)?;
                    let (mu, s) = (eval(mean, i), eval(sd, i));
                    if !mu.is_finite() || !s.is_finite() || s <= 0.0 {
                        return Err(bad(i, format!("the mean is {} and the sd {}, but the sd must be positive and both finite", short(mu), short(s))));
                    }
                    let z: f64 = StandardNormal.sample(&mut rng);
                    out.push(mu + s * z);
                }
                NodeValues::Real(out)
            }
            Mechanism::Bernoulli { p, logit } => {
                let mut out = Vec::with_capacity(rows);
                for i in 0..rows {
                    stop(i)?;
                    let q = if *logit { logistic(eval(p, i)) } else { eval(p, i) };
                    if !(0.0..=1.0).contains(&q) {
                        return Err(bad(i, format!("the probability is {}, outside 0 to 1", short(q))));
                    }
                    out.push(rng.random::<f64>() < q);
                }
                NodeValues::Binary(out)
            }
            Mechanism::Poisson { rate, log, overdispersion } => {
                let mut out = Vec::with_capacity(rows);
                for i in 0..rows {
                    stop(i)?;
                    let mut r = if *log { eval(rate, i).exp() } else { eval(rate, i) };
                    if !r.is_finite() || r < 0.0 {
                        return Err(bad(i, format!("the rate is {}, but it must be a finite number ≥ 0", short(r))));
                    }
                    if let Some(kappa) = overdispersion {
                        let k = eval(kappa, i);
                        if !k.is_finite() || k <= 0.0 {
                            return Err(bad(i, format!("the overdispersion is {}, but it must be a positive number", short(k))));
                        }
                        // Gamma multiplier of mean 1 and sd k: shape 1/k², scale k².
                        let multiplier = Gamma::new(1.0 / (k * k), k * k).map_err(|e| bad(i, e.to_string()))?;
                        r *= multiplier.sample(&mut rng);
                    }
                    out.push(if r == 0.0 { 0 } else { Poisson::new(r).map_err(|e| bad(i, e.to_string()))?.sample(&mut rng) as u64 });
                }
                NodeValues::Count(out)
            }
            Mechanism::Beta { mean, logit, precision } => {
                let mut out = Vec::with_capacity(rows);
                for i in 0..rows {
                    stop(i)?;
                    let q = if *logit { logistic(eval(mean, i)) } else { eval(mean, i) };
                    let phi = eval(precision, i);
                    // Written so that a mean of NaN is refused too.
                    let inside = q > 0.0 && q < 1.0;
                    if !inside || !phi.is_finite() || phi <= 0.0 {
                        return Err(bad(i, format!(
                            "the mean is {} and the precision {}, but the mean must lie strictly between 0 and 1 and the precision be positive",
                            short(q),
                            short(phi)
                        )));
                    }
                    let share = Beta::new(q * phi, (1.0 - q) * phi).map_err(|e| bad(i, e.to_string()))?.sample(&mut rng);
                    // A draw rounded onto 0 or 1 (tiny shapes) is moved just inside, where a share lies.
                    out.push(share.clamp(f64::MIN_POSITIVE, 1.0 - f64::EPSILON));
                }
                NodeValues::Real(out)
            }
            Mechanism::Time { mean, log, shape, .. } => {
                let mut out = Vec::with_capacity(rows);
                for i in 0..rows {
                    stop(i)?;
                    let eta = if *log { eval(mean, i) } else { eval(mean, i).ln() };
                    let k = shape.as_ref().map_or(1.0, |k| eval(k, i));
                    // Written so that a NaN mean or shape is refused too.
                    if !(eta.is_finite() && k.is_finite() && k > 0.0) {
                        return Err(bad(i, format!(
                            "the mean time is {} and the shape {}, but both must be positive and finite",
                            short(eta.exp()),
                            short(k)
                        )));
                    }
                    let time = draw_time(eta, TimeShape::from_log_shape(k.ln()), &mut rng);
                    // A draw rounded to 0 (a tiny shape) is moved up to the smallest positive time.
                    out.push(time.max(f64::MIN_POSITIVE));
                }
                NodeValues::Real(out)
            }
        })
    }
}

/// A node's values when an intervention sets it.
fn forced_values(mechanism: &Mechanism, value: &Forced, rows: usize) -> NodeValues {
    match (mechanism, value) {
        (_, Forced::Code(c)) => NodeValues::Category(vec![*c; rows]),
        (Mechanism::Poisson { .. }, Forced::Number(x)) => NodeValues::Count(vec![x.max(0.0).round() as u64; rows]),
        (Mechanism::Bernoulli { .. }, Forced::Number(x)) => NodeValues::Binary(vec![*x > 0.5; rows]),
        (_, Forced::Number(x)) => NodeValues::Real(vec![*x; rows]),
    }
}

/// A follow-up rule's column is new: not a node of the graph, and named by
/// one rule only.
fn check_follow_up_columns(graph: &Graph, nodes: &[NodeMechanism]) -> Result<(), QueryError> {
    for (i, m) in nodes.iter().enumerate() {
        let Some(rule) = m.mechanism.follow_up() else { continue };
        let at = |message: String| QueryError::Mechanism { line: m.line, message };
        if graph.nodes().iter().any(|n| n.name == rule.column) {
            return Err(at(format!(
                "the follow-up rule of {} writes its cut-short column as {c}, but {c} is a node of graph {}; name a new column",
                m.node,
                graph.name(),
                c = rule.column
            )));
        }
        if let Some(looks) = &rule.looks {
            if looks.column == rule.column || graph.nodes().iter().any(|n| n.name == looks.column) {
                return Err(at(format!(
                    "the looks of {} write their column as {}, which is a node of graph {} or the cut-short column; name a new column",
                    m.node,
                    looks.column,
                    graph.name()
                )));
            }
        }
        if let Some(other) = nodes[..i].iter().find(|o| o.mechanism.follow_up().is_some_and(|r| r.column == rule.column)) {
            return Err(at(format!(
                "the follow-up rule of {} writes column {}, which the rule of {} on line {} writes already; name another",
                m.node, rule.column, other.node, other.line
            )));
        }
    }
    Ok(())
}

/// A mechanism may read only its node's parents: numeric parents by name,
/// category parents through indicators of their declared levels or their
/// departures.
fn check_uses(graph: &Graph, nodes: &[NodeMechanism], m: &NodeMechanism) -> Result<(), QueryError> {
    let at = |message: String| QueryError::Mechanism { line: m.line, message };
    let parents = graph.parents(&m.node)?;
    for (name, level) in m.mechanism.uses() {
        if !parents.contains(&name.as_str()) {
            let known = nodes.iter().any(|n| n.node == name);
            let listed = if parents.is_empty() { "none".to_string() } else { parents.join(", ") };
            return Err(at(if known {
                format!("the mechanism of {} uses {name}, which is not its parent in graph {} (its parents: {listed}); add the edge {name} -> {} or leave {name} out", m.node, graph.name(), m.node)
            } else {
                format!("the mechanism of {} uses {name}, which is not a node of graph {}; use its parents ({listed})", m.node, graph.name())
            }));
        }
        let Some(parent) = nodes.iter().find(|n| n.node == name) else { continue };
        match (&parent.mechanism, level) {
            (Mechanism::Category { levels, .. }, Use::Level(level)) if !levels.contains(&level) => {
                return Err(at(format!("{name} has no level `{level}` (its levels: {}); use one of them", levels.join(", "))))
            }
            (Mechanism::Category { .. }, Use::Number) => {
                return Err(at(format!("{name} is a category, so the mechanism of {} cannot use it as a number; write an indicator such as [{name} = level] or departure({name}, spread)", m.node)))
            }
            (other, Use::Level(_)) if !matches!(other, Mechanism::Category { .. }) => {
                return Err(at(format!("[{name} = …] needs a category, but {name} is {other}; use {name} as a number", )))
            }
            (other, Use::Group) if !matches!(other, Mechanism::Category { .. }) => {
                return Err(at(format!("departure({name}, …) needs a category whose levels each get a departure, but {name} is {other}; use {name} as a number")))
            }
            _ => {}
        }
    }
    Ok(())
}
