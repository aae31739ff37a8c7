//! The identifying formula of an effect as a data structure.
//!
//! An effect that no adjustment set identifies may still be a function of
//! the observed distribution: the front-door formula and the output of the
//! complete identification algorithm are built from three operations on
//! probabilities of observed nodes — products, sums over the values of
//! observed nodes, and ratios — around one leaf, the observed probability of
//! some nodes given others. [`Formula`] keeps exactly that tree so that JSON
//! carries it as a structure a program can evaluate, and renders it in
//! Waypath's own notation:
//!
//! * `Pr[y | x, m]` — the observed probability of `y` given `x` and `m`;
//! * `sum over m, x′ of ( … )` — a sum over every value of the listed nodes;
//! * `·` between factors of a product, `( … ) ÷ ( … )` for a ratio;
//! * a node summed over while it is also set by the intervention is written
//!   with a prime (`x′`) inside that sum, since there it runs over its
//!   values instead of standing for the value set.
//!
//! Variable names are node names. A sum binds its nodes for its body, so
//! an inner sum over a node shadows an outer value of that node.

use std::collections::BTreeSet;

use serde::Serialize;

/// One identifying formula in terms of observed probabilities.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
#[serde(tag = "kind", rename_all = "snake_case")]
pub enum Formula {
    /// The observed probability of the nodes `of` given the nodes `given`.
    Probability { of: Vec<String>, given: Vec<String> },
    /// The product of the factors.
    Product { factors: Vec<Formula> },
    /// The sum of `body` over every combination of values of `over`.
    Sum { over: Vec<String>, body: Box<Formula> },
    /// `numerator` divided by `denominator`.
    Ratio { numerator: Box<Formula>, denominator: Box<Formula> },
}

impl Formula {
    /// `Pr[of | given]`.
    pub fn probability(of: Vec<String>, given: Vec<String>) -> Formula {
        Formula::Probability { of, given }
    }

    /// The product of `factors`, flattened; one factor stands alone.
    pub fn product(factors: Vec<Formula>) -> Formula {
        let mut flat = Vec::with_capacity(factors.len());
        for f in factors {
            match f {
                Formula::Product { factors } => flat.extend(factors),
                other => flat.push(other),
            }
        }
        if flat.len() == 1 {
            return flat.pop().expect("one factor");
        }
        Formula::Product { factors: flat }
    }

    /// The sum of `body` over `over`; an empty `over` leaves the body, and
    /// nested sums merge.
    pub fn sum(over: Vec<String>, body: Formula) -> Formula {
        if over.is_empty() {
            return body;
        }
        match body {
            Formula::Sum { over: inner, body } if inner.iter().all(|v| !over.contains(v)) => {
                let mut all = over;
                all.extend(inner);
                Formula::Sum { over: all, body }
            }
            body => Formula::Sum { over, body: Box::new(body) },
        }
    }

    /// `numerator ÷ denominator`.
    pub fn ratio(numerator: Formula, denominator: Formula) -> Formula {
        Formula::Ratio { numerator: Box::new(numerator), denominator: Box::new(denominator) }
    }

    /// Every node the formula names (probabilities and sums), sorted.
    pub fn nodes(&self) -> BTreeSet<String> {
        let mut out = BTreeSet::new();
        self.collect_nodes(&mut out);
        out
    }

    /// The nodes the formula takes as given values (not bound by a sum), sorted.
    pub fn free_nodes(&self) -> BTreeSet<String> {
        match self {
            Formula::Probability { of, given } => of.iter().chain(given).cloned().collect(),
            Formula::Product { factors } => factors.iter().flat_map(Formula::free_nodes).collect(),
            Formula::Sum { over, body } => body.free_nodes().into_iter().filter(|v| !over.contains(v)).collect(),
            Formula::Ratio { numerator, denominator } => numerator.free_nodes().into_iter().chain(denominator.free_nodes()).collect(),
        }
    }

    fn collect_nodes(&self, out: &mut BTreeSet<String>) {
        match self {
            Formula::Probability { of, given } => out.extend(of.iter().chain(given).cloned()),
            Formula::Product { factors } => factors.iter().for_each(|f| f.collect_nodes(out)),
            Formula::Sum { over, body } => {
                out.extend(over.iter().cloned());
                body.collect_nodes(out);
            }
            Formula::Ratio { numerator, denominator } => {
                numerator.collect_nodes(out);
                denominator.collect_nodes(out);
            }
        }
    }

    /// The formula in Waypath's notation; nodes in `set` (those the
    /// question fixes: exposure and outcome) get a prime inside a sum over
    /// them.
    pub fn render(&self, set: &[String]) -> String {
        let mut primed = BTreeSet::new();
        self.render_with(set, &mut primed)
    }

    fn render_with(&self, set: &[String], primed: &mut BTreeSet<String>) -> String {
        let name = |v: &String, primed: &BTreeSet<String>| if primed.contains(v) { format!("{v}′") } else { v.clone() };
        match self {
            Formula::Probability { of, given } => {
                let of: Vec<String> = of.iter().map(|v| name(v, primed)).collect();
                if given.is_empty() {
                    format!("Pr[{}]", of.join(", "))
                } else {
                    let given: Vec<String> = given.iter().map(|v| name(v, primed)).collect();
                    format!("Pr[{} | {}]", of.join(", "), given.join(", "))
                }
            }
            Formula::Product { factors } => {
                factors.iter().map(|f| f.render_factor(set, primed)).collect::<Vec<_>>().join(" · ")
            }
            Formula::Sum { over, body } => {
                let newly: Vec<String> = over.iter().filter(|v| set.contains(v) && !primed.contains(*v)).cloned().collect();
                primed.extend(newly.iter().cloned());
                let names: Vec<String> = over.iter().map(|v| name(v, primed)).collect();
                let text = format!("sum over {} of ( {} )", names.join(", "), body.render_with(set, primed));
                for v in &newly {
                    primed.remove(v);
                }
                text
            }
            Formula::Ratio { numerator, denominator } => {
                format!("( {} ) ÷ ( {} )", numerator.render_with(set, primed), denominator.render_with(set, primed))
            }
        }
    }

    /// A product's factor: a ratio is bracketed so `·` cannot be misread.
    fn render_factor(&self, set: &[String], primed: &mut BTreeSet<String>) -> String {
        match self {
            Formula::Ratio { .. } => format!("[ {} ]", self.render_with(set, primed)),
            other => other.render_with(set, primed),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn s(v: &[&str]) -> Vec<String> {
        v.iter().map(|x| x.to_string()).collect()
    }

    #[test]
    fn front_door_renders_with_a_primed_exposure() {
        // The front-door formula, Pearl 2009, Causality, eq. 3.42 (recalled):
        // sum_m P(m|x) sum_x' P(y|x',m) P(x').
        let inner = Formula::sum(s(&["x"]), Formula::product(vec![Formula::probability(s(&["y"]), s(&["x", "m"])), Formula::probability(s(&["x"]), vec![])]));
        let f = Formula::sum(s(&["m"]), Formula::product(vec![Formula::probability(s(&["m"]), s(&["x"])), inner]));
        assert_eq!(f.render(&s(&["x"])), "sum over m of ( Pr[m | x] · sum over x′ of ( Pr[y | x′, m] · Pr[x′] ) )");
        assert_eq!(f.nodes().into_iter().collect::<Vec<_>>(), s(&["m", "x", "y"]));
    }
}
