//! `intervene` when hidden nodes touch what the joint model would simulate.
//!
//! The joint model fits every observed node from its observed parents. A
//! hidden mediator on the way from the exposure to a watched node, or a
//! hidden common cause of a simulated node and the exposure, another
//! simulated node or a simulated node's parent, would be left out of that
//! simulation and bias it. Then each watched node's effect is asked of the
//! complete identification algorithm (Shpitser & Pearl 2006): where it
//! gives a formula, the formula is evaluated by the same machinery as
//! `ask total effect … using` ([`super::formula_estimate`]) — its
//! conditionals fitted with the joint fit's method, simulated over the
//! intervention's rows with its seed and settings; where it gives a hedge,
//! the intervention is refused, naming the hedge and the hidden causes that
//! join it. Every watched node is identified before anything is fitted, so
//! a refusal costs no fit.

use std::sync::atomic::AtomicBool;

use serde::Serialize;

use crate::graph::{Complete, Formula, Graph, Hedge};
use crate::table::Table;

use super::error::QueryError;
use super::formula_estimate::{check_formula, formula_estimate_with, FormulaSimulation};
use super::intervene::{mean, InterventionRequest, InterventionResult, Target, WatchedContrast, FORMULA_ROUTE};
use super::joint::{JointFit, JointModel};
use super::support::{interval_words, require_column, ContrastSummary, Setting};

/// The formula one watched node's change was taken from.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FormulaUsed {
    pub node: String,
    /// `Pr[w | do(x)] = …` in Waypath's notation.
    pub formula: String,
    /// The regressions fitted for it, one body per conditional (the
    /// watched node's last).
    pub fitted: Vec<String>,
    /// Nodes whose values are the rows' own.
    pub from_rows: Vec<String>,
}

/// Why the joint model cannot simulate the intervention, in words, or
/// `None` when no hidden node touches what it simulates.
pub(super) fn hidden_obstacle(graph: &Graph, x: &str, watch: &[String], simulated: &[String]) -> Result<Option<String>, QueryError> {
    let descendants = graph.descendants(x)?;
    for w in watch {
        let ancestors = graph.ancestors(w)?;
        let hidden = descendants.iter().copied().find(|h| ancestors.contains(h) && graph.is_hidden(h).unwrap_or(false));
        if let Some(h) = hidden {
            return Ok(Some(format!(
                "part of the effect of {x} on {w} runs through the hidden node {h} ({x} → … → {h} → … → {w}), which the joint model cannot simulate"
            )));
        }
    }
    let mut touched: Vec<String> = vec![x.to_string()];
    touched.extend(simulated.iter().cloned());
    for s in simulated {
        touched.extend(graph.parents(s)?.into_iter().map(str::to_string));
    }
    for h in graph.nodes().iter().filter(|n| n.hidden) {
        let reached = hidden_reach(graph, &h.name)?;
        let a = reached.iter().find(|r| simulated.contains(r));
        let b = a.and_then(|a| reached.iter().find(|r| *r != a && touched.contains(r)));
        if let (Some(a), Some(b)) = (a, b) {
            return Ok(Some(format!(
                "the hidden node {} is a common cause of {a} and {b}, which the joint model (one regression per node from its observed parents) cannot simulate",
                h.name
            )));
        }
    }
    Ok(None)
}

/// Observed nodes reached from the hidden node `h` along directed paths
/// whose inner nodes are hidden.
fn hidden_reach(graph: &Graph, h: &str) -> Result<Vec<String>, QueryError> {
    let mut out = Vec::new();
    let mut seen = vec![h.to_string()];
    let mut stack = vec![h.to_string()];
    while let Some(node) = stack.pop() {
        for c in graph.children(&node)? {
            if seen.iter().any(|s| s == c) {
                continue;
            }
            seen.push(c.to_string());
            if graph.is_hidden(c)? {
                stack.push(c.to_string());
            } else {
                out.push(c.to_string());
            }
        }
    }
    Ok(out)
}

/// An intervention taken through the identifying formulas of its watched nodes.
pub(super) struct FormulaRoute<'a> {
    pub joint: &'a JointModel,
    pub fit: &'a JointFit,
    /// The table the conditionals are fitted on.
    pub table: &'a Table,
    /// The rows simulated over (the table's, or resampled from it).
    pub base: &'a Table,
    pub request: &'a InterventionRequest,
    pub to: &'a Setting,
    pub from: &'a Setting,
    /// Observed descendants of the exposure that lead to a watched node.
    pub simulated: &'a [String],
    pub place: &'a str,
}

impl FormulaRoute<'_> {
    /// Identify every watched node's effect, then fit and simulate each
    /// formula; `obstacle` says why the joint model was not used.
    pub(super) fn estimate(&self, obstacle: String, rows_source: String, cancel: &AtomicBool) -> Result<InterventionResult, QueryError> {
        let x = &self.request.variable;
        let mut formulas = Vec::new();
        for w in self.request.watch.iter().filter(|w| self.simulated.contains(w)) {
            formulas.push(self.identify(w, &obstacle, cancel)?);
        }
        let mut found = Vec::new();
        let mut warnings = vec![format!("{obstacle}; the change is taken from the identifying formula instead")];
        for (w, formula, also_set) in &formulas {
            QueryError::stop_if(cancel, self.place)?;
            let simulation = FormulaSimulation { settings: vec![(self.to.clone(), self.from.clone())], rows: self.base, seed: self.request.seed };
            let estimate = formula_estimate_with(self.table, x, w, formula, also_set, &self.fit.method, cancel, self.request.mass, &|_| {}, &simulation)?;
            warnings.extend(estimate.warnings.iter().map(|m| format!("{w}'s formula: {m}")));
            let contrast = estimate.contrasts.into_iter().next().ok_or_else(|| QueryError::request(format!("{}: the formula of {w} gave no contrast", self.place)))?;
            let used = FormulaUsed {
                node: w.clone(),
                formula: formula_text(x, w, formula, also_set),
                fitted: estimate.conditionals.iter().map(|c| c.text.replace('\n', "; ")).collect(),
                from_rows: estimate.from_rows.clone(),
            };
            found.push((used, contrast));
        }
        let draws = found.iter().map(|(_, c)| c.draws.len()).min().unwrap_or(1);
        let mut watched = Vec::new();
        for w in &self.request.watch {
            match found.iter().find(|(u, _)| &u.node == w) {
                Some((_, c)) => {
                    let unit = self.table.column(w).and_then(|col| col.unit.clone());
                    let s = ContrastSummary::of(&c.draws, self.request.mass)?;
                    watched.push(WatchedContrast {
                        node: w.clone(),
                        level: None,
                        mean_under_to: mean(&c.means.iter().map(|m| m.0).collect::<Vec<_>>()),
                        mean_under_from: mean(&c.means.iter().map(|m| m.1).collect::<Vec<_>>()),
                        unit,
                        mean: s.mean,
                        lower: s.lower,
                        upper: s.upper,
                        share_above_zero: s.share_above_zero,
                        share_below_zero: s.share_below_zero,
                        draws: c.draws.clone(),
                    });
                }
                None => {
                    warnings.push(format!("{w} is not a descendant of {x}, so the intervention leaves it unchanged"));
                    watched.extend(self.unchanged(w, draws)?);
                }
            }
        }
        Ok(InterventionResult {
            joint: self.joint.name.clone(),
            intervention: format!("set {x} {} vs {}", self.to.text(), self.from.text()),
            rows: self.base.nrows(),
            rows_source,
            seed: self.request.seed,
            mass: self.request.mass,
            interval: interval_words(self.request.mass),
            simulated: self.simulated.to_vec(),
            watched,
            pooled: Vec::new(),
            route: FORMULA_ROUTE.to_string(),
            formulas: found.into_iter().map(|(u, _)| u).collect(),
            warnings,
        })
    }

    /// The formula of watched node `w`, or the refusal: a category node
    /// (the formula's evaluator gives a mean), a hedge, or a formula the
    /// evaluator cannot simulate.
    fn identify(&self, w: &str, obstacle: &str, cancel: &AtomicBool) -> Result<(String, Formula, Vec<String>), QueryError> {
        let (x, place, g) = (&self.request.variable, self.place, self.joint.graph.name());
        if require_column(self.table, w, place)?.data.levels().is_some() {
            return Err(QueryError::request(format!(
                "{place}: {obstacle}, and its identifying formula is evaluated for a numeric or yes/no node's mean, while {w} is a category; \
                 watch a numeric node, or measure the hidden node"
            )));
        }
        match self.joint.graph.identify_intervention_with_cancel(&[x.as_str()], &[w], cancel)? {
            Complete::Identified { formula, also_set } => {
                check_formula(self.table, &formula, x, w, &also_set).map_err(|e| {
                    QueryError::request(format!("{place}: {obstacle}; the effect of {x} on {w} is identifiable by {}, but {e}", formula_text(x, w, &formula, &also_set)))
                })?;
                Ok((w.to_string(), formula, also_set))
            }
            Complete::NotIdentified { hedge } => Err(not_identifiable(place, g, x, w, obstacle, &hedge)),
        }
    }

    /// Watched node `w` that the exposure does not cause: the same row
    /// mean (or level share) under both settings, `draws` zero changes.
    fn unchanged(&self, w: &str, draws: usize) -> Result<Vec<WatchedContrast>, QueryError> {
        let column = require_column(self.base, w, self.place)?;
        Target::of(w, column)
            .into_iter()
            .map(|target| {
                let value = target.value(self.base);
                let zeros = vec![0.0; draws];
                let s = ContrastSummary::of(&zeros, self.request.mass)?;
                let unit = if target.level.is_none() { column.unit.clone() } else { None };
                Ok(WatchedContrast {
                    node: target.node,
                    level: target.level,
                    mean_under_to: value,
                    mean_under_from: value,
                    unit,
                    mean: s.mean,
                    lower: s.lower,
                    upper: s.upper,
                    share_above_zero: s.share_above_zero,
                    share_below_zero: s.share_below_zero,
                    draws: zeros,
                })
            })
            .collect()
    }
}

/// `Pr[w | do(x)] = …`, naming the nodes it takes at any value.
fn formula_text(x: &str, w: &str, formula: &Formula, also_set: &[String]) -> String {
    let text = format!("Pr[{w} | do({x})] = {}", formula.render(&[x.to_string(), w.to_string()]));
    if also_set.is_empty() {
        text
    } else {
        format!("{text}, at any values of {}", also_set.join(", "))
    }
}

/// The refusal when the hedge proves the effect not identifiable.
fn not_identifiable(place: &str, g: &str, x: &str, w: &str, obstacle: &str, hedge: &Hedge) -> QueryError {
    let one = hedge.hidden_causes.len() == 1;
    QueryError::request(format!(
        "{place}: {obstacle}, and the effect of setting {x} on {w} is not identifiable in graph {g}: the hidden common cause{} {} join{} \
         {{{}}} and {{{}}} (a hedge, Shpitser & Pearl 2006), so models that agree on every observed value differ in this effect; \
         measure one of the hidden causes",
        if one { "" } else { "s" },
        hedge.hidden_causes.join(", "),
        if one { "s" } else { "" },
        hedge.outer.join(", "),
        hedge.inner.join(", "),
    ))
}
