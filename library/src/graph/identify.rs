//! Identification of total and direct effects by adjustment.
//!
//! * Total effect: the backdoor criterion (Pearl 2009, Definition 3.3.1) — a
//!   set of observed nodes, none a descendant of the exposure, that blocks
//!   every path between exposure and outcome that starts with an arrow into
//!   the exposure. Equivalently: it d-separates them once the edges out of the
//!   exposure are removed.
//! * Direct effect: the single-door criterion (Pearl 2009, Theorem 5.3.1) —
//!   a set of observed nodes, none a descendant of the outcome, that
//!   d-separates exposure and outcome once the edge exposure -> outcome is
//!   removed. It holds the mediators fixed and must also close the paths
//!   that conditioning on a mediator opens.
//!
//! Both answers list every *minimal* valid set (no proper subset is valid),
//! smallest first, found by the walk over minimal separators in
//! [`super::separators`].

use std::sync::atomic::AtomicBool;

use serde::Serialize;

use super::complete::{Complete, Hedge};
use super::dag::Dag;
use super::formula::Formula;
use super::instruments::{Instrument, INSTRUMENT_ASSUMPTION, INSTRUMENT_TRIES};
use super::paths::{all_paths, Opening, RawPath};
use super::separators::{minimal_adjustment_sets, SetSearch};
use super::{Graph, GraphError};

/// Which effect a question asks about.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
pub enum EffectKind {
    /// The effect through every path out of the exposure.
    #[serde(rename = "total effect")]
    Total,
    /// The effect along the edge exposure -> outcome alone, mediators held fixed.
    #[serde(rename = "direct effect")]
    Direct,
}

impl EffectKind {
    fn words(self) -> &'static str {
        match self {
            EffectKind::Total => "total effect",
            EffectKind::Direct => "direct effect",
        }
    }
}

/// The answer to "can this effect be estimated by adjustment, and how?".
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Identification {
    /// Which effect was asked for.
    pub query: EffectKind,
    /// The node whose effect is wanted.
    pub exposure: String,
    /// The node the effect is on.
    pub outcome: String,
    /// True when the graph says the effect can be estimated from the observed nodes.
    pub identifiable: bool,
    /// Every minimal set of observed nodes to condition on (names in
    /// topological order; smaller sets first). `[[]]` means "condition on nothing".
    pub adjustment_sets: Vec<Vec<String>>,
    /// One or two sentences saying why.
    pub reason: String,
    /// False when the search stopped at its limits, so more minimal sets may exist.
    pub search_complete: bool,
    /// True when the graph itself says the effect is zero (no directed path
    /// for a total effect, no edge for a direct one); the sets listed then
    /// serve to check that zero against data.
    pub zero_by_graph: bool,
    /// For a total effect no adjustment set identifies: the front door, the
    /// complete algorithm's formula or hedge, and any instruments.
    pub beyond: Option<Beyond>,
}

/// What identifies a total effect when adjustment cannot.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct Beyond {
    /// True when a formula identifies the effect.
    pub identified: bool,
    /// `front door`, `complete algorithm`, `none`, or `undetermined` (the
    /// graph was too large for the algorithm's step limits).
    pub route: String,
    /// The mediators of the front-door formula (empty for other routes).
    pub front_door_set: Vec<String>,
    /// The identifying formula of the outcome's distribution under the intervention.
    pub formula: Option<Formula>,
    /// The formula in Waypath's notation.
    pub formula_text: Option<String>,
    /// The observed nodes the formula uses.
    pub formula_nodes: Vec<String>,
    /// Nodes the formula takes a value of without depending on it (see [`Complete::Identified`]).
    pub also_set: Vec<String>,
    /// Why the effect is not identifiable, when it is not.
    pub hedge: Option<Hedge>,
    /// Observed nodes that qualify as instruments for the effect.
    pub instruments: Vec<Instrument>,
    /// Whether the instrument search settled every candidate (false when
    /// its subset search reached its limit; the list may then be short).
    pub instruments_complete: bool,
    /// Sentences saying what was found and why.
    pub reason: String,
}

impl Beyond {
    /// The text lines of this part of an answer.
    pub fn lines(&self) -> Vec<String> {
        let mut out = vec![self.reason.clone()];
        if let Some(text) = &self.formula_text {
            out.push(format!("identifying formula: {text}"));
        }
        for i in &self.instruments {
            let given = if i.given.is_empty() { String::new() } else { format!(" given {}", i.given.join(", ")) };
            out.push(format!("instrument: {}{given}", i.node));
        }
        if !self.instruments.is_empty() {
            out.push(INSTRUMENT_ASSUMPTION.to_owned());
        }
        if !self.instruments_complete {
            out.push(format!(
                "the instrument search stopped at its limit of conditioning sets ({INSTRUMENT_TRIES}, fewer on a large graph), so a node that is an instrument only given some larger set may be missing"
            ));
        }
        out
    }
}

impl Identification {
    /// The same answer, marked as the graph's zero.
    fn zero(self) -> Self {
        Identification { zero_by_graph: true, ..self }
    }

    /// A short text block: verdict, one line per set, the reason.
    pub fn render(&self) -> String {
        let verdict = match (self.zero_by_graph, self.identifiable) {
            (true, _) => "zero by the graph",
            (false, true) => "identifiable",
            (false, false) => "not identifiable by adjustment",
        };
        let mut out = format!("{} of {} on {}: {verdict}\n", self.query.words(), self.exposure, self.outcome);
        for set in &self.adjustment_sets {
            let members = if set.is_empty() { "nothing".to_owned() } else { set.join(", ") };
            let lead = if self.zero_by_graph { "to check it, condition on" } else { "condition on" };
            out.push_str(&format!("  {lead}: {members}\n"));
        }
        out.push_str(&self.reason);
        if !self.search_complete {
            out.push_str(" The search stopped at its limit, so further minimal sets may exist.");
        }
        for line in self.beyond.iter().flat_map(Beyond::lines) {
            out.push_str(&format!("\n{line}"));
        }
        out
    }
}

impl Graph {
    /// Which sets identify the total effect of `exposure` on `outcome`
    /// (backdoor criterion, Pearl 2009 §3.3).
    pub fn total_effect(&self, exposure: &str, outcome: &str) -> Result<Identification, GraphError> {
        self.total_effect_with_cancel(exposure, outcome, &AtomicBool::new(false))
    }

    /// [`Graph::total_effect`], stopping with [`GraphError::Interrupted`]
    /// soon after `cancel` is set.
    pub fn total_effect_with_cancel(&self, exposure: &str, outcome: &str, cancel: &AtomicBool) -> Result<Identification, GraphError> {
        let (x, y) = self.pair(exposure, outcome)?;
        let answer = |identifiable, sets, reason: String, complete| self.identification(EffectKind::Total, x, y, identifiable, sets, reason, complete);
        // Backdoor paths are exactly the paths left once the edges out of x are removed.
        let cut = self.dag.keep_edges(|a, _| a != x);
        let forbidden = self.dag.descendants_of(&[x]);
        let candidates = self.candidates(&cut, x, y, &forbidden);
        let valid = |z: &[bool]| cut.d_separated(&[x], &[y], z);
        if !self.dag.ancestors_of(&[y])[x] {
            // The zero is the graph's claim; a backdoor set of the cut graph
            // is what an estimate checking that claim must condition on.
            let zero = format!("{exposure} is not an ancestor of {outcome}, so by the graph's assumptions its total effect on {outcome} is zero.");
            if self.hidden_end(x, y).is_some() || !valid(&self.dag.mask_of(&candidates)) {
                let reason = format!("{zero} No set of observed nodes blocks every backdoor path, so the data cannot check that zero.");
                return Ok(answer(true, Vec::new(), reason, true).zero());
            }
            let search = self.minimal_sets(&cut, x, y, &candidates, cancel)?;
            let reason = format!("{zero} Each set listed blocks every backdoor path (backdoor criterion), so an estimate given it can check that zero.");
            return Ok(answer(true, search.sets, reason, search.complete).zero());
        }
        if let Some(reason) = self.hidden_end(x, y) {
            return Ok(answer(false, Vec::new(), reason, true));
        }
        if !valid(&self.dag.mask_of(&candidates)) {
            let reason = format!(
                "No set of observed nodes blocks every backdoor path from {exposure} to {outcome}{}.",
                self.open_path_story(&cut, x, y, &candidates)
            );
            let beyond = self.beyond_adjustment(x, y, cancel)?;
            return Ok(Identification { beyond: Some(beyond), ..answer(false, Vec::new(), reason, true) });
        }
        let search = self.minimal_sets(&cut, x, y, &candidates, cancel)?;
        let reason = if search.sets == [Vec::<usize>::new()] {
            format!("No backdoor path from {exposure} to {outcome} is open, so no adjustment is needed.")
        } else {
            format!("Each set blocks every backdoor path from {exposure} to {outcome} and holds no descendant of {exposure} (backdoor criterion).")
        };
        Ok(answer(true, search.sets, reason, search.complete))
    }

    /// Which sets identify the controlled direct effect of `exposure` on
    /// `outcome` (single-door criterion, Pearl 2009 Theorem 5.3.1).
    pub fn direct_effect(&self, exposure: &str, outcome: &str) -> Result<Identification, GraphError> {
        self.direct_effect_with_cancel(exposure, outcome, &AtomicBool::new(false))
    }

    /// [`Graph::direct_effect`], stopping with [`GraphError::Interrupted`]
    /// soon after `cancel` is set.
    pub fn direct_effect_with_cancel(&self, exposure: &str, outcome: &str, cancel: &AtomicBool) -> Result<Identification, GraphError> {
        let (x, y) = self.pair(exposure, outcome)?;
        let answer = |identifiable, sets, reason: String, complete| self.identification(EffectKind::Direct, x, y, identifiable, sets, reason, complete);
        let has_edge = self.dag.children[x].contains(&y);
        let cut = self.dag.keep_edges(|a, b| (a, b) != (x, y));
        let forbidden = self.dag.descendants_of(&[y]);
        let candidates = self.candidates(&cut, x, y, &forbidden);
        let valid = |z: &[bool]| cut.d_separated(&[x], &[y], z);
        let separable = valid(&self.dag.mask_of(&candidates));
        if !has_edge {
            let zero = format!("The graph has no edge {exposure} -> {outcome}, so by its assumptions the direct effect is zero.");
            if !separable {
                return Ok(answer(true, Vec::new(), format!("{zero} No set of observed nodes separates them, so the data cannot check that zero."), true).zero());
            }
            let search = self.minimal_sets(&cut, x, y, &candidates, cancel)?;
            return Ok(answer(true, search.sets, format!("{zero} Each set listed separates them, which the data can check."), search.complete).zero());
        }
        if let Some(reason) = self.hidden_end(x, y) {
            return Ok(answer(false, Vec::new(), reason, true));
        }
        if !separable {
            let reason = format!(
                "No set of observed nodes blocks every path from {exposure} to {outcome} other than the edge {exposure} -> {outcome}{}.",
                self.open_path_story(&cut, x, y, &candidates)
            );
            return Ok(answer(false, Vec::new(), reason, true));
        }
        let search = self.minimal_sets(&cut, x, y, &candidates, cancel)?;
        let reason = format!(
            "Each set blocks every path from {exposure} to {outcome} other than the edge {exposure} -> {outcome} and holds no descendant of {outcome} (single-door criterion)."
        );
        Ok(answer(true, search.sets, reason, search.complete))
    }

    /// The front door, then the complete algorithm, and the instruments,
    /// for a total effect no adjustment set identifies.
    fn beyond_adjustment(&self, x: usize, y: usize, cancel: &AtomicBool) -> Result<Beyond, GraphError> {
        let (exposure, outcome) = (self.label(x).to_owned(), self.label(y).to_owned());
        let search = self.instruments(x, y);
        let (instruments, instruments_complete) = (search.found, search.complete);
        let set = [exposure.clone()];
        // Bound copies of the exposure and of the outcome are written primed.
        let free = [exposure.clone(), outcome.clone()];
        let found = |route: &str, m: Vec<String>, formula: Formula, also: Vec<String>, reason: String| Beyond {
            identified: true,
            route: route.to_owned(),
            front_door_set: m,
            formula_text: Some(format!(
                "Pr[{outcome} | do({exposure})] = {}{}",
                formula.render(&free),
                if also.is_empty() {
                    String::new()
                } else {
                    format!(", at any values of {} (the formula takes them but does not depend on them)", also.join(", "))
                }
            )),
            also_set: also,
            formula_nodes: self.owned_names(&self.dag.mask_of(&self.resolve_all(&formula.nodes().into_iter().collect::<Vec<_>>()).unwrap_or_default())),
            formula: Some(formula),
            hedge: None,
            instruments: instruments.clone(),
            instruments_complete,
            reason,
        };
        if let Some((m, formula)) = self.front_door_with_cancel(&exposure, &outcome, cancel)? {
            let reason = format!(
                "The front-door criterion holds through {} (Pearl 2009, Causality, §3.3.2): {} carries every directed path from {exposure} to {outcome}, \
                 no backdoor path from {exposure} to it is open, and {exposure} blocks its backdoor paths to {outcome}. The effect is identifiable by the formula below.",
                m.join(", "),
                if m.len() == 1 { "it" } else { "together they" }
            );
            return Ok(found("front door", m, formula, Vec::new(), reason));
        }
        let complete = match self.identify_intervention_with_cancel(&set, std::slice::from_ref(&outcome), cancel) {
            Err(e @ GraphError::TooHard { .. }) => {
                return Ok(Beyond {
                    identified: false,
                    route: "undetermined".to_owned(),
                    front_door_set: Vec::new(),
                    formula: None,
                    formula_text: None,
                    formula_nodes: Vec::new(),
                    also_set: Vec::new(),
                    hedge: None,
                    instruments,
                    instruments_complete,
                    reason: format!("No front-door set was found, and the complete identification algorithm was not run to the end: {e}."),
                })
            }
            other => other?,
        };
        match complete {
            Complete::Identified { formula, also_set } => {
                let reason = format!(
                    "No front-door set exists, but the complete identification algorithm (Shpitser & Pearl 2006; Tian & Pearl 2002) \
                     expresses the effect of {exposure} on {outcome} through observed probabilities: it is identifiable by the formula below."
                );
                Ok(found("complete algorithm", Vec::new(), formula, also_set, reason))
            }
            Complete::NotIdentified { hedge } => {
                let reason = format!(
                    "Not identifiable from the observed nodes by any route (Shpitser & Pearl 2006): the hedge {{{}}} ⊃ {{{}}} — \
                     both sets are joined by hidden common causes and share their last nodes, and only the larger holds {exposure} — \
                     lets two causal models agree on every observed probability yet differ in the effect.",
                    hedge.outer.join(", "),
                    hedge.inner.join(", ")
                );
                Ok(Beyond {
                    identified: false,
                    route: "none".to_owned(),
                    front_door_set: Vec::new(),
                    formula: None,
                    formula_text: None,
                    formula_nodes: Vec::new(),
                    also_set: Vec::new(),
                    hedge: Some(hedge),
                    instruments,
                    instruments_complete,
                    reason,
                })
            }
        }
    }

    /// Every minimal adjustment set among `candidates` in `cut`.
    fn minimal_sets(&self, cut: &Dag, x: usize, y: usize, candidates: &[usize], cancel: &AtomicBool) -> Result<SetSearch, GraphError> {
        minimal_adjustment_sets(cut, x, y, candidates, &self.order, cancel)
            .map_err(|_| GraphError::Interrupted { graph: self.name.clone() })
    }

    /// Resolve exposure and outcome, which must differ.
    pub(super) fn pair(&self, exposure: &str, outcome: &str) -> Result<(usize, usize), GraphError> {
        let x = self.resolve(exposure)?;
        let y = self.resolve(outcome)?;
        if x == y {
            return Err(GraphError::SameNode { graph: self.name.clone(), node: exposure.to_owned() });
        }
        Ok((x, y))
    }

    /// A reason when exposure or outcome is hidden, so nothing can be estimated.
    fn hidden_end(&self, x: usize, y: usize) -> Option<String> {
        [(x, "exposure"), (y, "outcome")]
            .iter()
            .find(|(i, _)| self.nodes[*i].hidden)
            .map(|(i, role)| format!("The {role} {} is hidden, so no data on it can be adjusted.", self.label(*i)))
    }

    /// Observed nodes that may join a set: not `x`, `y` or forbidden, and
    /// ancestors of `x` or `y` in `cut`.
    ///
    /// Restricting to ancestors loses nothing: if any allowed set separates
    /// x and y, its members that are ancestors of {x, y} still do, so every
    /// minimal set lies among those ancestors, and the whole ancestral
    /// candidate set separates whenever any allowed set does (Tian, Paz &
    /// Pearl 1998; van der Zander, Liśkiewicz & Textor 2019, recalled).
    fn candidates(&self, cut: &Dag, x: usize, y: usize, forbidden: &[bool]) -> Vec<usize> {
        let ancestral = cut.ancestors_of(&[x, y]);
        self.order
            .iter()
            .copied()
            .filter(|&i| i != x && i != y && ancestral[i] && !forbidden[i] && !self.nodes[i].hidden)
            .collect()
    }

    /// ": given …, the path … stays open …" for the first open path in `cut`
    /// given all `candidates`, preferring one through a hidden node.
    fn open_path_story(&self, cut: &Dag, x: usize, y: usize, candidates: &[usize]) -> String {
        let z = cut.mask_of(candidates);
        let Some(paths) = all_paths(cut, x, y, &z) else {
            return String::new();
        };
        let through_hidden = |p: &RawPath| p.nodes.iter().any(|&i| self.nodes[i].hidden);
        let open: Vec<&RawPath> = paths.iter().filter(|p| p.is_open()).collect();
        let Some(path) = open.iter().find(|p| through_hidden(p)).or(open.first()) else {
            return String::new();
        };
        let lead = if candidates.is_empty() {
            ": the path".to_owned()
        } else {
            format!(": even given {}, the path", self.owned_names(&z).join(", "))
        };
        let mut story = format!("{lead} {} stays open", self.path_report(path).drawing());
        let colliders: Vec<&str> = path
            .openings
            .iter()
            .map(|o| match *o {
                Opening::Conditioned(c) => self.label(c),
                Opening::ViaDescendant { collider, .. } => self.label(collider),
            })
            .collect();
        if !colliders.is_empty() {
            story.push_str(&format!(" because conditioning opens the collider {}", colliders.join(", ")));
        }
        let hidden: Vec<&str> = path.nodes.iter().filter(|&&i| self.nodes[i].hidden).map(|&i| self.label(i)).collect();
        if !hidden.is_empty() {
            story.push_str(&format!(" and it runs through the hidden node {}", hidden.join(", ")));
        }
        story
    }

    /// Assemble an answer with names in topological order.
    #[allow(clippy::too_many_arguments)]
    fn identification(
        &self,
        query: EffectKind,
        x: usize,
        y: usize,
        identifiable: bool,
        sets: Vec<Vec<usize>>,
        reason: String,
        search_complete: bool,
    ) -> Identification {
        Identification {
            query,
            exposure: self.label(x).to_owned(),
            outcome: self.label(y).to_owned(),
            identifiable,
            adjustment_sets: sets.iter().map(|s| self.owned_names(&self.dag.mask_of(s))).collect(),
            reason,
            search_complete,
            zero_by_graph: false,
            beyond: None,
        }
    }
}
