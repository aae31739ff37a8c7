//! The complete identification algorithm for graphs with hidden common
//! causes, and its hedge when an effect is not identifiable.
//!
//! Shpitser & Pearl (2006), "Identification of joint interventional
//! distributions in recursive semi-Markovian causal models", Figure 3 (the
//! algorithm `ID`, recalled), building on the c-component factorisation of
//! Tian & Pearl (2002). It works on the projection of the graph onto its
//! observed nodes ([`super::projection`]) and answers whether the
//! distribution of the outcomes under an intervention that sets the
//! exposures is a function of the observed distribution. The algorithm is
//! complete: when it fails, it returns a *hedge* — two sets of observed
//! nodes F' ⊂ F, each joined by hidden common causes, with the same roots,
//! F meeting the exposures and F' not — and the hedge proves that two causal
//! models agree on every observed probability yet disagree on the effect.
//!
//! The seven lines, on a sub-graph with nodes V, outcomes y, exposures x and
//! a distribution P over V:
//! 1. no exposure left: sum P over V \ y;
//! 2. drop the nodes that are not ancestors of y (summing P over them);
//! 3. set also every node that has no path to y once the exposures' incoming
//!    edges are cut (it changes nothing);
//! 4. several c-components once the exposures are removed: the product of
//!    their own effects, summed over what is neither outcome nor exposure;
//! 5. one c-component that is the whole graph: fail with the hedge;
//! 6. that c-component is a c-component of the whole graph: the product of
//!    each member's probability given the nodes before it;
//! 7. otherwise recurse into the larger c-component that contains it.

use std::sync::atomic::{AtomicBool, Ordering};

use serde::Serialize;

use super::formula::Formula;
use super::projection::{hidden_reach, Projection, MAX_HIDDEN_PAIRS};
use super::{Graph, GraphError};

/// The most recursive steps of one identification (the algorithm is
/// polynomial, but a guard keeps a pathological graph from running long).
pub const IDENTIFY_STEPS: usize = 20_000;

/// The most node-and-edge visits one identification may make; a large
/// graph gets fewer steps.
const IDENTIFY_WORK: usize = 400_000_000;

/// The witness that an effect is not identifiable (Shpitser & Pearl 2006,
/// Definition 5 and Theorem 4, recalled).
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Hedge {
    /// F: the larger set, joined by hidden common causes, meeting the exposures.
    pub outer: Vec<String>,
    /// F′ ⊂ F: the smaller set, same roots, holding no exposure.
    pub inner: Vec<String>,
    /// The hidden nodes that are common causes of two nodes of F.
    pub hidden_causes: Vec<String>,
}

/// The answer of the complete algorithm.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
#[serde(tag = "verdict", rename_all = "snake_case")]
pub enum Complete {
    /// The effect equals this function of the observed distribution.
    /// `also_set` lists nodes the algorithm set as well because they
    /// cannot reach an outcome once the exposures are set (line 3): the
    /// formula takes a value for each but equals the effect at every value.
    Identified { formula: Formula, also_set: Vec<String> },
    /// Not identifiable; the hedge shows why.
    NotIdentified { hedge: Hedge },
}

/// The current distribution P over the sub-graph's nodes V.
#[derive(Debug, Clone)]
enum Dist {
    /// The observed distribution of V given the fixed nodes `given`.
    Observed { given: Vec<usize> },
    /// A product of conditionals, one per node of V in topological order
    /// (each a distribution over its node given nodes before it).
    Chain(Vec<(usize, Formula)>),
    /// Any formula for the joint distribution of V.
    General(Formula),
}

/// Why the algorithm stopped without an answer.
enum Stop {
    Hedge(Vec<bool>, Vec<bool>),
    Interrupted,
    Budget,
}

struct Run<'g> {
    graph: &'g Graph,
    proj: Projection,
    steps: usize,
    limit: usize,
    cancel: &'g AtomicBool,
}

impl Graph {
    /// Whether the joint distribution of `outcomes` under an intervention
    /// setting `exposures` is identifiable from the observed nodes, with its
    /// formula or its hedge (Shpitser & Pearl 2006).
    pub fn identify_intervention<S: AsRef<str>>(&self, exposures: &[S], outcomes: &[S]) -> Result<Complete, GraphError> {
        self.identify_intervention_with_cancel(exposures, outcomes, &AtomicBool::new(false))
    }

    /// [`Graph::identify_intervention`], stopping with
    /// [`GraphError::Interrupted`] soon after `cancel` is set.
    pub fn identify_intervention_with_cancel<S: AsRef<str>>(
        &self,
        exposures: &[S],
        outcomes: &[S],
        cancel: &AtomicBool,
    ) -> Result<Complete, GraphError> {
        let x = self.resolve_all(exposures)?;
        let y = self.resolve_all(outcomes)?;
        self.check_disjoint(&x, "set", &y, "watched")?;
        if let Some(&h) = x.iter().chain(&y).find(|&&i| self.nodes[i].hidden) {
            return Err(GraphError::Hidden { graph: self.name.clone(), node: self.label(h).to_owned() });
        }
        let observed = self.observed();
        let n = self.nodes.len();
        let Some(proj) = Projection::new(&self.dag, &observed) else {
            return Err(GraphError::TooHard {
                graph: self.name.clone(),
                what: format!("its hidden nodes join more than {MAX_HIDDEN_PAIRS} pairs of observed nodes, too many to identify an effect among"),
            });
        };
        let limit = IDENTIFY_STEPS.min(IDENTIFY_WORK / (n + self.edges.len() + 1)).max(1);
        let mut run = Run { graph: self, proj, steps: 0, limit, cancel };
        let (xm, ym) = (self.dag.mask_of(&x), self.dag.mask_of(&y));
        match run.id(&ym, &xm, Dist::Observed { given: Vec::new() }, &observed) {
            Ok(formula) => {
                let free = formula.free_nodes();
                let also: Vec<usize> = (0..n).filter(|&i| free.contains(self.label(i)) && !xm[i] && !ym[i]).collect();
                Ok(Complete::Identified { formula, also_set: self.owned_names(&self.dag.mask_of(&also)) })
            }
            Err(Stop::Hedge(outer, inner)) => {
                let joining: Vec<bool> = (0..n)
                    .map(|h| self.nodes[h].hidden && hidden_reach(&self.dag, &observed, &self.dag.children[h]).iter().filter(|&&a| outer[a]).count() >= 2)
                    .collect();
                let hedge = Hedge { outer: self.owned_names(&outer), inner: self.owned_names(&inner), hidden_causes: self.owned_names(&joining) };
                Ok(Complete::NotIdentified { hedge })
            }
            Err(Stop::Interrupted) => Err(GraphError::Interrupted { graph: self.name.clone() }),
            Err(Stop::Budget) => Err(GraphError::TooHard {
                graph: self.name.clone(),
                what: format!("identifying the effect took more than {limit} steps on {n} nodes"),
            }),
        }
    }
}

/// The intervention behind a controlled direct effect: the exposure and
/// the observed parents of the outcome it causes, set together.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct ControlledDirect {
    /// The parents of the outcome the exposure causes, set beside it.
    pub mediators: Vec<String>,
    /// The complete algorithm's answer for `Pr[y | do(x, mediators)]`.
    pub complete: Complete,
}

impl Graph {
    /// The controlled direct effect of `exposure` on `outcome` as the
    /// effect of setting the exposure and the outcome's parents that it
    /// causes (then no path from the exposure to the outcome but the edge
    /// carries anything; Pearl 2001, "Direct and indirect effects", recalled),
    /// identified by the complete algorithm; `None` when such a parent is
    /// hidden, since a hidden node cannot be set.
    pub fn identify_controlled_direct(&self, exposure: &str, outcome: &str, cancel: &AtomicBool) -> Result<Option<ControlledDirect>, GraphError> {
        let (x, y) = self.pair(exposure, outcome)?;
        let below_x = self.dag.descendants_of(&[x]);
        let parents: Vec<usize> = self.order.iter().copied().filter(|&p| p != x && below_x[p] && self.dag.parents[y].contains(&p)).collect();
        if parents.iter().any(|&p| self.nodes[p].hidden) {
            return Ok(None);
        }
        let mediators: Vec<String> = parents.iter().map(|&p| self.label(p).to_owned()).collect();
        let mut set = vec![exposure.to_owned()];
        set.extend(mediators.iter().cloned());
        let complete = self.identify_intervention_with_cancel(&set, &[outcome.to_owned()], cancel)?;
        Ok(Some(ControlledDirect { mediators, complete }))
    }
}

impl Run<'_> {
    fn id(&mut self, y: &[bool], x: &[bool], p: Dist, v: &[bool]) -> Result<Formula, Stop> {
        self.steps += 1;
        if self.steps > self.limit {
            return Err(Stop::Budget);
        }
        if self.cancel.load(Ordering::Relaxed) {
            return Err(Stop::Interrupted);
        }
        let n = v.len();
        let none = vec![false; n];
        let x: Vec<bool> = (0..n).map(|i| x[i] && v[i]).collect();
        // Line 1.
        if !x.iter().any(|&b| b) {
            let drop = minus(v, y);
            return Ok(self.formula(self.marginal(p, v, &drop), &minus(v, &drop)));
        }
        // Line 2.
        let an = self.proj.ancestors_within(y, v, &none);
        if an != v {
            let drop = minus(v, &an);
            let x2 = and(&x, &an);
            let p2 = self.marginal(p, v, &drop);
            return self.id(y, &x2, p2, &an);
        }
        // Line 3.
        let an_cut = self.proj.ancestors_within(y, v, &x);
        let w: Vec<bool> = (0..n).map(|i| v[i] && !x[i] && !an_cut[i]).collect();
        if w.iter().any(|&b| b) {
            return self.id(y, &or(&x, &w), p, v);
        }
        // Line 4.
        let rest = minus(v, &x);
        let parts = self.proj.c_components(&rest);
        if parts.len() > 1 {
            let mut factors = Vec::with_capacity(parts.len());
            for s in &parts {
                factors.push(self.id(s, &minus(v, s), p.clone(), v)?);
            }
            let over = minus(&minus(v, y), &x);
            return Ok(Formula::sum(self.names(&over), Formula::product(factors)));
        }
        let s = parts.into_iter().next().unwrap_or(none.clone());
        let whole = self.proj.c_components(v);
        // Line 5.
        if whole.len() == 1 {
            return Err(Stop::Hedge(v.to_vec(), s));
        }
        // Line 6.
        if whole.contains(&s) {
            let factors: Vec<Formula> = self.in_order(&s).into_iter().map(|i| self.conditional(&p, v, i)).collect();
            return Ok(Formula::sum(self.names(&minus(&s, y)), Formula::product(factors)));
        }
        // Line 7.
        let Some(larger) = whole.into_iter().find(|c| (0..n).all(|i| !s[i] || c[i])) else {
            return Err(Stop::Hedge(v.to_vec(), s));
        };
        let chain: Vec<(usize, Formula)> = self.in_order(&larger).into_iter().map(|i| (i, self.conditional(&p, v, i))).collect();
        self.id(y, &and(&x, &larger), Dist::Chain(chain), &larger)
    }

    /// P summed over the nodes `drop` of V.
    fn marginal(&self, p: Dist, v: &[bool], drop: &[bool]) -> Dist {
        if !drop.iter().any(|&b| b) {
            return p;
        }
        match p {
            Dist::Observed { given } => Dist::Observed { given },
            Dist::Chain(factors) => {
                // Summing the last factors of a chain of conditionals out drops them.
                let last_kept = factors.iter().rposition(|(i, _)| !drop[*i]);
                let first_dropped = factors.iter().position(|(i, _)| drop[*i]);
                match (last_kept, first_dropped) {
                    (Some(k), Some(d)) if k < d => Dist::Chain(factors.into_iter().filter(|(i, _)| !drop[*i]).collect()),
                    _ => {
                        let body = Formula::product(factors.into_iter().map(|(_, f)| f).collect());
                        Dist::General(Formula::sum(self.names(&and(drop, v)), body))
                    }
                }
            }
            Dist::General(f) => Dist::General(Formula::sum(self.names(&and(drop, v)), f)),
        }
    }

    /// The formula of P over the nodes `v`.
    fn formula(&self, p: Dist, v: &[bool]) -> Formula {
        match p {
            Dist::Observed { given } => Formula::probability(self.names(v), self.graph.owned_names(&self.graph.dag.mask_of(&given))),
            Dist::Chain(factors) => Formula::product(factors.into_iter().map(|(_, f)| f).collect()),
            Dist::General(f) => f,
        }
    }

    /// P(v_i | the nodes of V before v_i in topological order).
    fn conditional(&self, p: &Dist, v: &[bool], i: usize) -> Formula {
        let order = self.in_order(v);
        let at = order.iter().position(|&j| j == i).unwrap_or(0);
        let before = self.graph.dag.mask_of(&order[..at]);
        match p {
            Dist::Observed { given } => {
                let mut cond = before.clone();
                given.iter().for_each(|&g| cond[g] = true);
                Formula::probability(vec![self.graph.label(i).to_owned()], self.names(&cond))
            }
            Dist::Chain(factors) if factors.iter().map(|(j, _)| *j).eq(order.iter().copied()) => factors[at].1.clone(),
            _ => {
                let whole = self.formula(p.clone(), v);
                let after = self.graph.dag.mask_of(&order[at + 1..]);
                let numerator = Formula::sum(self.names(&after), whole.clone());
                if at == 0 {
                    return numerator;
                }
                let mut from_i = after;
                from_i[i] = true;
                Formula::ratio(numerator, Formula::sum(self.names(&from_i), whole))
            }
        }
    }

    /// The nodes of a mask in topological order.
    fn in_order(&self, mask: &[bool]) -> Vec<usize> {
        self.graph.order.iter().copied().filter(|&i| mask[i]).collect()
    }

    /// The names of a mask in topological order.
    fn names(&self, mask: &[bool]) -> Vec<String> {
        self.graph.owned_names(mask)
    }
}

fn minus(a: &[bool], b: &[bool]) -> Vec<bool> {
    a.iter().zip(b).map(|(&p, &q)| p && !q).collect()
}

fn and(a: &[bool], b: &[bool]) -> Vec<bool> {
    a.iter().zip(b).map(|(&p, &q)| p && q).collect()
}

fn or(a: &[bool], b: &[bool]) -> Vec<bool> {
    a.iter().zip(b).map(|(&p, &q)| p || q).collect()
}
