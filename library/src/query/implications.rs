//! The graph's testable implications checked against data.
//!
//! For each implied independence `a ⊥ b | Z` ([`crate::graph::Graph::implications`])
//! one node is regressed on the other and on Z, and the other's
//! coefficient(s) are read off. The later node `b` is the response when its
//! kind allows (real → normal, count → poisson, binary or two-level category
//! → bernoulli), else `a`; of a pair of categories with more than two
//! levels each, `b` is the response of a softmax regression and the
//! associations are the changes in its level shares between the levels of
//! `a`, averaged over rows (coefficients of a softmax regression are log
//! odds against a reference level, harder to read). The data contradict the
//! implication when an interval of the coefficient excludes zero; at a 90%
//! interval about one check in ten is flagged by chance when the graph is
//! right (more for a category with several levels, one interval per level).

use std::sync::atomic::AtomicBool;

use serde::Serialize;

use crate::graph::Graph;
use crate::infer::fit::{fit_model, Method};
use crate::model::{Model, ModelSpec};
use crate::table::{Column, ColumnData, Table};

use super::answer::family_for;
use super::contrast::{level_contrasts, ContrastRequest};
use super::error::QueryError;
use super::support::{interval_words, require_column, with_column, ContrastSummary};

/// The estimated association of the predictor with the response.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Association {
    /// The coefficient's label, e.g. `girth slope` or `soil[sandy vs loam]`.
    pub label: String,
    pub mean: f64,
    pub lower: f64,
    pub upper: f64,
}

/// One implication and what the data say of it.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ImplicationCheck {
    /// E.g. `soil ⊥ rootstock | girth`.
    pub statement: String,
    pub a: String,
    pub b: String,
    pub given: Vec<String>,
    /// The regression fitted, e.g. `rootstock from soil, girth`.
    pub regression: Option<String>,
    pub associations: Vec<Association>,
    pub checked: bool,
    /// True when an interval excludes zero.
    pub contradicted: bool,
    /// Why it was not checked, or how a category was coded.
    pub note: Option<String>,
}

/// Every implication of a graph checked against one table.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ImplicationsReport {
    pub graph: String,
    pub table: String,
    pub method: String,
    pub mass: f64,
    pub interval: String,
    pub checks: Vec<ImplicationCheck>,
    /// Pairs only hidden nodes could separate.
    pub untestable: Vec<String>,
    pub checked: usize,
    pub contradicted: usize,
}

/// Check every testable implication of `graph` against `table`.
pub fn check_implications(
    graph: &Graph,
    table: &Table,
    method: &Method,
    cancel: &AtomicBool,
    mass: f64,
) -> Result<ImplicationsReport, QueryError> {
    let implications = graph.implications_with_cancel(cancel)?;
    let mut checks = Vec::new();
    for imp in &implications.testable {
        let place = format!("implications of {}", graph.name());
        QueryError::stop_if(cancel, &place)?;
        for name in std::iter::once(&imp.a).chain(std::iter::once(&imp.b)).chain(&imp.given) {
            require_column(table, name, &place)?;
        }
        let statement = if imp.given.is_empty() {
            format!("{} ⊥ {}", imp.a, imp.b)
        } else {
            format!("{} ⊥ {} | {}", imp.a, imp.b, imp.given.join(", "))
        };
        let mut check = ImplicationCheck {
            statement,
            a: imp.a.clone(),
            b: imp.b.clone(),
            given: imp.given.clone(),
            regression: None,
            associations: Vec::new(),
            checked: false,
            contradicted: false,
            note: None,
        };
        match check_one(table, &imp.a, &imp.b, &imp.given, method, cancel, mass) {
            Ok((regression, associations, note)) => {
                check.contradicted = associations.iter().any(|a| a.lower > 0.0 || a.upper < 0.0);
                check.regression = Some(regression);
                check.associations = associations;
                check.checked = true;
                check.note = note;
            }
            Err(reason) => check.note = Some(reason),
        }
        checks.push(check);
    }
    Ok(ImplicationsReport {
        graph: graph.name().to_string(),
        table: table.name.clone(),
        method: method.describe(),
        mass,
        interval: interval_words(mass),
        checked: checks.iter().filter(|c| c.checked).count(),
        contradicted: checks.iter().filter(|c| c.contradicted).count(),
        checks,
        untestable: implications.untestable.iter().map(|p| format!("{} and {}", p.a, p.b)).collect(),
    })
}

/// Fit the regression for one implication; the error is the reason it
/// could not be checked.
fn check_one(
    table: &Table,
    a: &str,
    b: &str,
    given: &[String],
    method: &Method,
    cancel: &AtomicBool,
    mass: f64,
) -> Result<(String, Vec<Association>, Option<String>), String> {
    let (response, predictor) = if response_kind_ok(table, b) {
        (b, a)
    } else if response_kind_ok(table, a) {
        (a, b)
    } else {
        return check_categories(table, a, b, given, method, cancel, mass);
    };
    let (data, note) = as_binary_if_two_levels(table, response);
    let family = family_for(&data, response, "implications").map_err(|e| e.to_string())?;
    let mut terms = vec![predictor.to_string()];
    terms.extend(given.iter().cloned());
    let regression = format!("{response} from {}", terms.join(", "));
    let mut lines = vec![format!("{regression} using {}", table.name)];
    if family != crate::model::Family::Normal {
        lines.push(format!("family {}", family.name()));
    }
    let spec = ModelSpec::from_lines("implication", lines.iter().enumerate().map(|(i, l)| (i + 1, l.as_str())))
        .map_err(|e| e.to_string())?;
    let model = Model::build(&spec, &data).map_err(|e| format!("the regression could not be built: {e}"))?;
    let fit = fit_model(&model, method, cancel, &|_| {}).map_err(|e| format!("the regression could not be fitted: {e}"))?;
    let associations = associations(&model, &fit.draws, predictor, mass).map_err(|e| e.to_string())?;
    Ok((regression, associations, note))
}

/// The check of two categories with more than two levels each: `b` is the
/// response of a levels-family (softmax) regression on `a` and the given
/// nodes, and the associations are the changes in each level's share of
/// `b` between each level of `a` and its first, averaged over the rows
/// (all zero when the implication holds).
fn check_categories(
    table: &Table,
    a: &str,
    b: &str,
    given: &[String],
    method: &Method,
    cancel: &AtomicBool,
    mass: f64,
) -> Result<(String, Vec<Association>, Option<String>), String> {
    let mut terms = vec![a.to_string()];
    terms.extend(given.iter().cloned());
    let regression = format!("{b} from {}", terms.join(", "));
    let lines = [format!("{regression} using {}", table.name), format!("family {}", crate::model::Family::Levels.name())];
    let spec = ModelSpec::from_lines("implication", lines.iter().enumerate().map(|(i, l)| (i + 1, l.as_str())))
        .map_err(|e| e.to_string())?;
    let model = Model::build(&spec, table).map_err(|e| format!("the regression could not be built: {e}"))?;
    let fit = fit_model(&model, method, cancel, &|_| {}).map_err(|e| format!("the regression could not be fitted: {e}"))?;
    let levels = require_column(table, a, "implications").map_err(|e| e.to_string())?.data.levels().unwrap_or_default().to_vec();
    let mut associations = Vec::new();
    for level in levels.iter().skip(1) {
        let request = ContrastRequest { over_rows: true, mass, ..ContrastRequest::new(a) }.between(level.clone(), levels[0].clone());
        for c in level_contrasts(&model, &fit.draws, table, &request).map_err(|e| e.to_string())? {
            let share = c.level.unwrap_or_default();
            associations.push(Association { label: format!("{b} {share}: {a} {level} vs {}", levels[0]), mean: c.mean, lower: c.lower, upper: c.upper });
        }
    }
    let note = format!(
        "{b} and {a} both have more than two levels: each association is the change in one level's share of {b} between \
         a level of {a} and its first, averaged over the rows (softmax regression)"
    );
    Ok((regression, associations, Some(note)))
}

/// Whether a node can be the response of a check.
fn response_kind_ok(table: &Table, name: &str) -> bool {
    table.column(name).is_some_and(|c| c.data.levels().is_none_or(|l| l.len() == 2))
}

/// A two-level category response becomes binary (1 at the second level).
fn as_binary_if_two_levels(table: &Table, name: &str) -> (Table, Option<String>) {
    match table.column(name).map(|c| &c.data) {
        Some(ColumnData::Category { codes, levels }) if levels.len() == 2 => {
            let column = Column::new(name, ColumnData::Binary(codes.iter().map(|&c| c == 1).collect()));
            let note = format!("{name} coded 1 for {} and 0 for {}", levels[1], levels[0]);
            (with_column(table, column), Some(note))
        }
        _ => (table.clone(), None),
    }
}

/// The predictor's coefficient(s): its slope, or for a category each
/// level's difference from the first level.
fn associations(model: &Model, draws: &crate::draws::Draws, predictor: &str, mass: f64) -> Result<Vec<Association>, QueryError> {
    let names = model.parameter_names();
    let slope = crate::model::terms::design::slope_label(predictor);
    let summarise = |label: String, values: Vec<f64>| -> Result<Association, QueryError> {
        let s = ContrastSummary::of(&values, mass)?;
        Ok(Association { label, mean: s.mean, lower: s.lower, upper: s.upper })
    };
    if names.contains(&slope) {
        return Ok(vec![summarise(slope.clone(), draws.require(&slope)?.to_vec())?]);
    }
    let prefix = format!("{predictor}[");
    let levels: Vec<&String> = names.iter().filter(|n| n.starts_with(&prefix)).collect();
    if levels.iter().any(|n| n.contains(" vs ")) {
        return levels.into_iter().map(|n| summarise(n.clone(), draws.require(n)?.to_vec())).collect();
    }
    let Some((first, rest)) = levels.split_first() else {
        return Err(QueryError::request(format!("the regression has no coefficient for {predictor}")));
    };
    rest.iter()
        .map(|n| {
            let level = n.trim_start_matches(&prefix).trim_end_matches(']');
            let base = first.trim_start_matches(&prefix).trim_end_matches(']');
            summarise(format!("{predictor}[{level} vs {base}]"), draws.derive(&[n.as_str(), first.as_str()], |v| v[0] - v[1])?)
        })
        .collect()
}
