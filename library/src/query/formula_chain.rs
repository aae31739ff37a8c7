//! Identifying formulas of any shape, evaluated exactly on a fitted chain
//! of normal regressions.
//!
//! The row-weighting evaluator ([`super::formula_estimate`]) simulates a
//! formula that is a product of observed conditionals, or the outcome's
//! expectation normalised. The complete algorithm ([`crate::graph::Complete`])
//! also returns ratios inside sums and products, several ratios, and nested
//! sums (its line 7 conditions on a distribution that is itself a formula).
//! Such a formula is a function of the observed joint distribution, so
//! this module fits that joint once and evaluates the formula on it:
//!
//! 1. *One chain for the observed joint.* Every node the formula names is
//!    regressed on every node before it (the outcome last): a chain of
//!    conditionals whose product is the joint distribution of those nodes.
//!    With normal regressions the chain is a multivariate normal, and since
//!    each node is given all the nodes before it, any covariance can be
//!    reached (any order gives the same set of joints; the order only
//!    changes the priors). Per posterior draw the chain's intercepts,
//!    slopes and spreads give the mean vector and covariance of the joint
//!    (`v = a + B·v + D^½·e`, so `Σ = (I − B)⁻¹ D (I − B)⁻ᵀ`).
//! 2. *Every factor from the joint.* Each `Pr[A | B]` of the formula is
//!    the normal conditional of the joint (Schur complement), a Gaussian
//!    function of the node copies it names.
//! 3. *Exact algebra of Gaussian functions.* `c·exp(−½ zᵀKz + hᵀz)` over
//!    the formula's copies is closed under the formula's three operations:
//!    a product adds (K, h, log c), a ratio subtracts them, and a sum over
//!    copies integrates them out (the canonical-form operations of Gaussian
//!    graphical models, Lauritzen 1992, *JASA* 87, and Koller & Friedman
//!    2009, *Probabilistic Graphical Models* §14.2 — recalled). The value set
//!    and nodes held enter as constants. What is left is a Gaussian function
//!    of the outcome, whose mean is `E[y | do(x)]` under that draw; its mass
//!    is reported when it strays from 1 (a formula of the algorithm is a
//!    distribution, so the mass checks the algebra).
//!
//! A sum over observed values is thus an exact integral, not an average
//! over rows: no Monte Carlo error is added to the posterior's. The route
//! needs every node the formula names to be a real column (a normal
//! regression); others are refused with the reason.

use std::collections::BTreeMap;
use std::sync::atomic::AtomicBool;

use nalgebra::{DMatrix, DVector};

use crate::graph::Formula;
use crate::infer::nuts::Progress;
use crate::limits::{bytes_for, check_memory};
use crate::model::{Model, NewRows};
use crate::table::{Column, ColumnData, Table};

use super::error::QueryError;
use super::formula_estimate::{fit_conditional, formula_contrast, FittedConditional, FormulaFit, FormulaSimulation};
use super::support::{column_mean, parameter_rows, require_column, Setting};

/// How far the outcome's mass may stray from 1 before a warning.
const MASS_TOLERANCE: f64 = 1e-6;

/// The nodes of the chain (the outcome last), or why the route does not
/// apply: a node that is not a real column.
pub(crate) fn chain_nodes(table: &Table, formula: &Formula, x: &str, y: &str, also_set: &[String], place: &str) -> Result<Vec<String>, QueryError> {
    let mut nodes: Vec<String> = formula.nodes().into_iter().filter(|v| v != y).collect();
    for v in std::iter::once(x).chain(also_set.iter().map(String::as_str)) {
        if !nodes.iter().any(|n| n == v) {
            nodes.push(v.to_string());
        }
    }
    nodes.push(y.to_string());
    for v in &nodes {
        if !matches!(require_column(table, v, place)?.data, ColumnData::Real(_)) {
            return Err(QueryError::request(format!(
                "{place}: the formula is evaluated on a chain of normal regressions, which needs every node it names to be a real column, \
                 and {v} is not"
            )));
        }
    }
    Ok(nodes)
}

/// Fit the chain over the formula's nodes and contrast `E[y | do(x)]`
/// between the settings of `simulation` (numbers), evaluating the formula
/// exactly per posterior draw; `also_set` are held at their means over
/// the simulation's rows, the nodes of `stated` at the values given
/// (a controlled direct effect's mediators).
#[allow(clippy::too_many_arguments)]
pub(crate) fn chain_estimate(
    table: &Table,
    x: &str,
    y: &str,
    formula: &Formula,
    also_set: &[String],
    method: &crate::infer::fit::Method,
    cancel: &AtomicBool,
    mass: f64,
    progress: &(dyn Fn(Progress) + Sync),
    simulation: &FormulaSimulation,
    stated: &[(String, f64)],
) -> Result<FormulaFit, QueryError> {
    let place = format!("ask total effect of {x} on {y} by its identifying formula");
    let nodes = chain_nodes(table, formula, x, y, also_set, &place)?;
    let m = nodes.len();
    check_memory(&format!("{place}: a chain of {m} regressions"), bytes_for(&[m, m, 8])).map_err(QueryError::request)?;
    let mut conditionals = Vec::with_capacity(m);
    for (i, node) in nodes.iter().enumerate() {
        QueryError::stop_if(cancel, &place)?;
        conditionals.push(fit_conditional(table, node, &nodes[..i], method, cancel, progress, &place)?);
    }
    let mut warnings: Vec<String> = conditionals.iter().flat_map(|c| c.fit.warnings.iter().cloned()).collect();
    let slopes: Vec<Linear> = conditionals.iter().map(|c| Linear::of(c, &place)).collect::<Result<_, _>>()?;
    let draws = slopes.iter().map(|s| s.draws.len()).min().unwrap_or(0);
    if slopes.iter().any(|s| s.draws.len() != draws) {
        warnings.push(format!("the chain's fits kept different numbers of draws; the first {draws} of each are paired"));
    }
    if draws == 0 {
        return Err(QueryError::request(format!("{place}: the fits kept no draws")));
    }
    let held: BTreeMap<String, f64> = also_set
        .iter()
        .map(|a| {
            let column = require_column(simulation.rows, a, &place)?;
            column_mean(column).map(|v| (a.clone(), v)).ok_or_else(|| QueryError::request(format!("{place}: {a} has no values to hold it at")))
        })
        .collect::<Result<_, _>>()?;
    let held: BTreeMap<String, f64> = held.into_iter().chain(stated.iter().cloned()).collect();
    let mut contrasts = Vec::new();
    let mut worst_mass = 0.0_f64;
    for (to, from) in &simulation.settings {
        let (Setting::Number(b), Setting::Number(a)) = (to, from) else {
            return Err(QueryError::request(format!("{place}: the chain of normal regressions sets {x} to numbers, not levels")));
        };
        let mut changes = Vec::with_capacity(draws);
        let mut means = Vec::with_capacity(draws);
        for d in 0..draws {
            QueryError::stop_if(cancel, &place)?;
            let joint = Joint::of(&slopes, d, &place)?;
            let (under_to, mass_to) = effect_on_joint(formula, x, y, *b, &held, &nodes, &joint).map_err(|e| QueryError::request(format!("{place}: {e}")))?;
            let (under_from, mass_from) = effect_on_joint(formula, x, y, *a, &held, &nodes, &joint).map_err(|e| QueryError::request(format!("{place}: {e}")))?;
            worst_mass = worst_mass.max((mass_to - 1.0).abs()).max((mass_from - 1.0).abs());
            changes.push(under_to - under_from);
            means.push((under_to, under_from));
        }
        let how = how_words(x, y, &nodes, &held);
        let outcome_model = &conditionals.last().expect("the outcome's regression is fitted").model;
        contrasts.push(formula_contrast(table, x, y, outcome_model, to, from, changes, means, mass, how, None)?);
    }
    if worst_mass > MASS_TOLERANCE {
        warnings.push(format!(
            "under some draw the formula's distribution of {y} has mass {:.6} instead of 1; the chain's joint may strain the graph's constraints there",
            1.0 + worst_mass
        ));
    }
    Ok(FormulaFit { conditionals, from_rows: Vec::new(), contrasts, warnings })
}

/// The route in words, for the contrast's `held_how`.
fn how_words(x: &str, y: &str, nodes: &[String], held: &BTreeMap<String, f64>) -> String {
    let at: Vec<String> = held.iter().map(|(a, v)| format!("{a} = {v:.4}")).collect();
    format!(
        "identifying formula evaluated exactly on the normal joint of {} (each regressed on the ones before it) with {x} set{}; \
         {y}'s mean under each posterior draw",
        nodes.join(", "),
        if at.is_empty() { String::new() } else { format!(" and {} held", at.join(", ")) }
    )
}

/// One regression of the chain as intercept, slopes and spread per draw.
struct Linear {
    /// Per draw: (intercept, slopes on the nodes before, spread).
    draws: Vec<(f64, Vec<f64>, f64)>,
}

impl Linear {
    /// Read the regression's intercept and slopes off its predictions at
    /// zero and at each unit vector (the design is affine in the values).
    fn of(c: &FittedConditional, place: &str) -> Result<Linear, QueryError> {
        let model = &c.model;
        if !model.has_spread() {
            return Err(QueryError::request(format!("{place}: the chain's regression of {} is not normal", c.node)));
        }
        let k = c.given.len();
        let columns: Vec<Column> = c
            .given
            .iter()
            .enumerate()
            .map(|(j, g)| Column::new(g, ColumnData::Real((0..=k).map(|r| if r == j + 1 { 1.0 } else { 0.0 }).collect())))
            .collect();
        let probe = Table { name: model.table_name().to_string(), columns };
        let rows: NewRows = if k == 0 { NewRows::from_design(DMatrix::from_element(1, 1, 1.0), None) } else { model.new_rows(&probe)? };
        let spread_at = model.coefficient_names().len();
        let params = parameter_rows(model, &c.fit.draws)?;
        let draws = params
            .iter()
            .map(|p| {
                let linear = prediction(model, p, &rows)?;
                let slopes = linear[1..].iter().map(|v| v - linear[0]).collect();
                Ok((linear[0], slopes, p[spread_at]))
            })
            .collect::<Result<_, QueryError>>()?;
        Ok(Linear { draws })
    }
}

fn prediction(model: &Model, params: &[f64], rows: &NewRows) -> Result<Vec<f64>, QueryError> {
    Ok(model.predict_mean(params, rows)?.linear)
}

/// The joint normal distribution of the chain's nodes under one draw.
pub struct Joint {
    pub mean: DVector<f64>,
    pub cov: DMatrix<f64>,
}

impl Joint {
    /// A joint normal from its mean and the rows of its covariance.
    pub fn from_rows(mean: &[f64], cov: &[Vec<f64>]) -> Joint {
        let m = mean.len();
        Joint { mean: DVector::from_column_slice(mean), cov: DMatrix::from_fn(m, m, |i, j| cov[i][j]) }
    }

    fn of(chain: &[Linear], d: usize, place: &str) -> Result<Joint, QueryError> {
        let m = chain.len();
        let mut ib = DMatrix::<f64>::identity(m, m);
        let mut a = DVector::<f64>::zeros(m);
        let mut noise = DMatrix::<f64>::zeros(m, m);
        for (i, link) in chain.iter().enumerate() {
            let (intercept, slopes, spread) = &link.draws[d];
            a[i] = *intercept;
            slopes.iter().enumerate().for_each(|(j, b)| ib[(i, j)] = -b);
            noise[(i, i)] = spread * spread;
        }
        let inverse = ib.try_inverse().ok_or_else(|| QueryError::request(format!("{place}: the chain's coefficients do not give a joint distribution")))?;
        Ok(Joint { mean: &inverse * a, cov: &inverse * noise * inverse.transpose() })
    }
}

/// A Gaussian function `exp(g − ½ zᵀKz + hᵀz)` of the formula's copies;
/// `uses[i]` says whether it depends on copy i.
#[derive(Debug, Clone)]
struct Gauss {
    k: DMatrix<f64>,
    h: DVector<f64>,
    g: f64,
    uses: Vec<bool>,
}

impl Gauss {
    fn one(n: usize) -> Gauss {
        Gauss { k: DMatrix::zeros(n, n), h: DVector::zeros(n), g: 0.0, uses: vec![false; n] }
    }

    fn times(mut self, other: &Gauss, sign: f64) -> Gauss {
        self.k += &other.k * sign;
        self.h += &other.h * sign;
        self.g += sign * other.g;
        self.uses.iter_mut().zip(&other.uses).for_each(|(u, o)| *u |= *o);
        self
    }

    /// The integral over the copies `over`.
    fn integrate(self, over: &[usize]) -> Result<Gauss, String> {
        if let Some(&i) = over.iter().find(|&&i| !self.uses[i]) {
            return Err(format!("the formula sums over copy {i} of a node it does not depend on there, which has no finite value"));
        }
        let rest: Vec<usize> = (0..self.uses.len()).filter(|&i| self.uses[i] && !over.contains(&i)).collect();
        let kss = self.k.select_rows(over).select_columns(over);
        let chol = kss.cholesky().ok_or("a sum of the formula does not converge under this draw (its terms do not fall off)")?;
        let hs = self.h.select_rows(over);
        let solved_h = chol.solve(&hs);
        let log_det: f64 = 2.0 * chol.l().diagonal().iter().map(|v| v.ln()).sum::<f64>();
        let n = self.uses.len();
        let mut out = Gauss::one(n);
        out.g = self.g + 0.5 * hs.dot(&solved_h) + 0.5 * over.len() as f64 * (2.0 * std::f64::consts::PI).ln() - 0.5 * log_det;
        let krs = self.k.select_rows(&rest).select_columns(over);
        let solved_k = chol.solve(&krs.transpose());
        let k_rest = self.k.select_rows(&rest).select_columns(&rest) - &krs * &solved_k;
        let h_rest = self.h.select_rows(&rest) - &krs * &solved_h;
        for (a, &i) in rest.iter().enumerate() {
            out.uses[i] = true;
            out.h[i] = h_rest[a];
            for (b, &j) in rest.iter().enumerate() {
                out.k[(i, j)] = k_rest[(a, b)];
            }
        }
        Ok(out)
    }
}

/// What a name of the formula stands for inside a scope.
#[derive(Debug, Clone, Copy)]
enum Slot {
    /// A fixed value (the exposure as set, a node held).
    Value(f64),
    /// A copy bound by a sum (or the outcome, copy 0).
    Copy(usize),
}

/// `E[y | do(x = value)]` of `formula` under the joint normal `joint` of
/// `nodes`, with the nodes of `held` at their values, and the mass of the
/// formula's distribution of `y` (1 for a formula that is a distribution).
pub fn effect_on_joint(
    formula: &Formula,
    x: &str,
    y: &str,
    value: f64,
    held: &BTreeMap<String, f64>,
    nodes: &[String],
    joint: &Joint,
) -> Result<(f64, f64), String> {
    let n = 1 + copies_bound(formula);
    let mut scope: BTreeMap<String, Slot> = held.iter().map(|(k, v)| (k.clone(), Slot::Value(*v))).collect();
    scope.insert(x.to_string(), Slot::Value(value));
    scope.insert(y.to_string(), Slot::Copy(0));
    let mut next = 1;
    let form = evaluate(formula, &scope, &mut next, n, nodes, joint)?;
    if form.uses.iter().skip(1).any(|&u| u) {
        return Err("the formula leaves nodes other than the outcome free".into());
    }
    let (k, h) = (form.k[(0, 0)], form.h[0]);
    if k.is_nan() || k <= 0.0 {
        return Err(format!("the formula gives {y} no proper distribution under this draw"));
    }
    let log_mass = form.g + 0.5 * h * h / k + 0.5 * (2.0 * std::f64::consts::PI).ln() - 0.5 * k.ln();
    Ok((h / k, log_mass.exp()))
}

/// How many copies the sums of `formula` bind.
fn copies_bound(formula: &Formula) -> usize {
    match formula {
        Formula::Probability { .. } => 0,
        Formula::Product { factors } => factors.iter().map(copies_bound).sum(),
        Formula::Sum { over, body } => over.len() + copies_bound(body),
        Formula::Ratio { numerator, denominator } => copies_bound(numerator) + copies_bound(denominator),
    }
}

fn evaluate(formula: &Formula, scope: &BTreeMap<String, Slot>, next: &mut usize, n: usize, nodes: &[String], joint: &Joint) -> Result<Gauss, String> {
    match formula {
        Formula::Probability { of, given } => conditional(of, given, scope, n, nodes, joint),
        Formula::Product { factors } => {
            let mut out = Gauss::one(n);
            for f in factors {
                out = out.times(&evaluate(f, scope, next, n, nodes, joint)?, 1.0);
            }
            Ok(out)
        }
        Formula::Ratio { numerator, denominator } => {
            let top = evaluate(numerator, scope, next, n, nodes, joint)?;
            Ok(top.times(&evaluate(denominator, scope, next, n, nodes, joint)?, -1.0))
        }
        Formula::Sum { over, body } => {
            let mut inner = scope.clone();
            let mut bound = Vec::with_capacity(over.len());
            for v in over {
                inner.insert(v.clone(), Slot::Copy(*next));
                bound.push(*next);
                *next += 1;
            }
            evaluate(body, &inner, next, n, nodes, joint)?.integrate(&bound)
        }
    }
}

/// `Pr[of | given]` of the joint as a Gaussian function of the copies:
/// the residual `r = a − L·b − (μ_A − L·μ_B)` with `L = Σ_AB Σ_BB⁻¹` has
/// covariance `S = Σ_AA − L·Σ_BA`, and the density is
/// `exp(−½ rᵀS⁻¹r) / √det(2πS)`.
fn conditional(of: &[String], given: &[String], scope: &BTreeMap<String, Slot>, n: usize, nodes: &[String], joint: &Joint) -> Result<Gauss, String> {
    let index = |v: &String| nodes.iter().position(|m| m == v).ok_or_else(|| format!("the chain has no node {v}"));
    let slot = |v: &String| scope.get(v).copied().ok_or_else(|| format!("the formula leaves {v} unbound"));
    let a: Vec<usize> = of.iter().map(index).collect::<Result<_, _>>()?;
    let b: Vec<usize> = given.iter().map(index).collect::<Result<_, _>>()?;
    let saa = joint.cov.select_rows(&a).select_columns(&a);
    let (l, s, c) = if b.is_empty() {
        (DMatrix::zeros(a.len(), 0), saa, joint.mean.select_rows(&a))
    } else {
        let sbb = joint.cov.select_rows(&b).select_columns(&b);
        let sab = joint.cov.select_rows(&a).select_columns(&b);
        let chol = sbb.cholesky().ok_or("the joint's covariance is not positive definite under this draw")?;
        let l = chol.solve(&sab.transpose()).transpose();
        let s = saa - &l * sab.transpose();
        let c = joint.mean.select_rows(&a) - &l * joint.mean.select_rows(&b);
        (l, s, c)
    };
    // r = M·z + r0 over the copies z.
    let mut m = DMatrix::<f64>::zeros(a.len(), n);
    let mut r0 = -c;
    for (i, v) in of.iter().enumerate() {
        match slot(v)? {
            Slot::Copy(k) => m[(i, k)] += 1.0,
            Slot::Value(value) => r0[i] += value,
        }
    }
    for (j, v) in given.iter().enumerate() {
        match slot(v)? {
            Slot::Copy(k) => (0..a.len()).for_each(|i| m[(i, k)] -= l[(i, j)]),
            Slot::Value(value) => (0..a.len()).for_each(|i| r0[i] -= l[(i, j)] * value),
        }
    }
    let chol = s.cholesky().ok_or("a conditional of the joint has no positive spread under this draw")?;
    let log_det: f64 = 2.0 * chol.l().diagonal().iter().map(|v| v.ln()).sum::<f64>();
    let precision = chol.inverse();
    let mut out = Gauss::one(n);
    out.k = m.transpose() * &precision * &m;
    out.h = -(m.transpose() * &precision * &r0);
    out.g = -0.5 * r0.dot(&(&precision * &r0)) - 0.5 * (a.len() as f64 * (2.0 * std::f64::consts::PI).ln() + log_det);
    out.uses = (0..n).map(|k| m.column(k).iter().any(|&v| v != 0.0)).collect();
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn s(v: &[&str]) -> Vec<String> {
        v.iter().map(|x| x.to_string()).collect()
    }

    /// The joint of observed nodes of a linear SEM with unit-variance
    /// noises: `v = B v + C u + e`, u hidden standard normal, zero means.
    fn sem_joint(b: &[(usize, usize, f64)], hidden: &[(usize, usize, f64, f64)], m: usize) -> Joint {
        let mut ib = DMatrix::<f64>::identity(m, m);
        b.iter().for_each(|&(from, to, w)| ib[(to, from)] -= w);
        let mut noise = DMatrix::<f64>::identity(m, m);
        for &(p, q, wp, wq) in hidden {
            noise[(p, p)] += wp * wp;
            noise[(q, q)] += wq * wq;
            noise[(p, q)] += wp * wq;
            noise[(q, p)] += wp * wq;
        }
        let inv = ib.try_inverse().unwrap();
        Joint { mean: DVector::from_element(m, 0.5), cov: &inv * noise * inv.transpose() }
    }

    fn slope(f: &Formula, joint: &Joint, nodes: &[String], held: &BTreeMap<String, f64>) -> (f64, f64) {
        let (e1, m1) = effect_on_joint(f, "x", "y", 1.0, held, nodes, joint).unwrap();
        let (e0, m0) = effect_on_joint(f, "x", "y", 0.0, held, nodes, joint).unwrap();
        assert!((m1 - 1.0).abs() < 1e-9 && (m0 - 1.0).abs() < 1e-9, "masses {m1} {m0}");
        (e1 - e0, e0)
    }

    #[test]
    fn front_door_on_a_linear_joint_gives_the_path_traced_effect() {
        // x → m → y with a hidden cause of x and y. Front-door formula,
        // Pearl 2009, eq. 3.42 (recalled); truth by path tracing
        // (Wright 1934): 0.8 · -1.5.
        let nodes = s(&["x", "m", "y"]);
        let joint = sem_joint(&[(0, 1, 0.8), (1, 2, -1.5)], &[(0, 2, 1.2, 0.9)], 3);
        let inner = Formula::sum(s(&["x"]), Formula::product(vec![Formula::probability(s(&["y"]), s(&["x", "m"])), Formula::probability(s(&["x"]), vec![])]));
        let f = Formula::sum(s(&["m"]), Formula::product(vec![Formula::probability(s(&["m"]), s(&["x"])), inner]));
        let (effect, _) = slope(&f, &joint, &nodes, &BTreeMap::new());
        assert!((effect - 0.8 * -1.5).abs() < 1e-9, "{effect}");
    }

    #[test]
    fn napkin_ratio_on_a_linear_joint_gives_the_path_traced_effect() {
        // Napkin: w → z → x → y, hidden w–x and w–y (Pearl & Mackenzie
        // 2018 ch. 7, recalled); truth 0.7 by path tracing.
        let nodes = s(&["w", "z", "x", "y"]);
        let joint = sem_joint(&[(0, 1, 1.1), (1, 2, 0.9), (2, 3, 0.7)], &[(0, 2, 1.0, 0.5), (0, 3, 0.8, 1.3)], 4);
        let body = || {
            Formula::product(vec![
                Formula::probability(s(&["w"]), vec![]),
                Formula::probability(s(&["x"]), s(&["w", "z"])),
                Formula::probability(s(&["y"]), s(&["w", "z", "x"])),
            ])
        };
        let f = Formula::ratio(Formula::sum(s(&["w"]), body()), Formula::sum(s(&["y", "w"]), body()));
        let held = BTreeMap::from([("z".to_string(), 0.3)]);
        let (effect, _) = slope(&f, &joint, &nodes, &held);
        assert!((effect - 0.7).abs() < 1e-9, "{effect}");
    }

    #[test]
    fn observed_conditional_mean_matches_regression_by_hand() {
        // No intervention at all: Pr[y | x] is the regression of y on x,
        // slope cov(x, y) / var(x) (the normal conditional).
        let nodes = s(&["x", "y"]);
        let joint = sem_joint(&[(0, 1, 2.0)], &[(0, 1, 1.0, 1.0)], 2);
        let f = Formula::probability(s(&["y"]), s(&["x"]));
        let (effect, _) = slope(&f, &joint, &nodes, &BTreeMap::new());
        let expected = joint.cov[(0, 1)] / joint.cov[(0, 0)];
        assert!((effect - expected).abs() < 1e-9, "{effect} {expected}");
    }

    #[test]
    fn a_sum_over_a_node_the_body_ignores_is_refused() {
        let nodes = s(&["x", "m", "y"]);
        let joint = sem_joint(&[(0, 1, 0.8), (1, 2, -1.5)], &[], 3);
        let f = Formula::sum(s(&["m"]), Formula::probability(s(&["y"]), s(&["x"])));
        let e = effect_on_joint(&f, "x", "y", 1.0, &BTreeMap::new(), &nodes, &joint).unwrap_err();
        assert!(e.contains("no finite value"), "{e}");
    }
}
