//! The pooled groups' part of the log posterior: their contribution to the
//! linear predictor, the population prior of their departures, the prior of
//! each group's spread, and the gradient of all of it.
//!
//! Unconstrained coordinates, group after group: `u = log(spread)`, then
//! one coordinate per level — the departure `a` itself (centred) or its
//! standard score `z` with `a = spread·z` (non-centred). The density over
//! (u, coordinates) is, for one group with `J` levels and spread `τ = eᵘ`,
//!
//! * centred: `log p(τ) + u + Σ log normal(aⱼ | 0, τ)`;
//! * non-centred: `log p(τ) + u + Σ log normal(zⱼ | 0, 1)` — the same
//!   target, since `normal(τz | 0, τ)·τ = normal(z | 0, 1)` (the Jacobian
//!   `τ` of each `aⱼ = τzⱼ` cancels the `1/τ` of its density).
//!
//! **Around the intercept.** With a single intercept column, the first
//! centred group is sampled around it (hierarchical centring, Gelfand,
//! Sahu & Carlin 1995, Biometrika 82, 479–488; recalled): its coordinates
//! are the level means `bⱼ = intercept + aⱼ`, so the intercept meets the
//! data only through the levels' prior `normal(bⱼ | intercept, τ)`. When
//! each level's rows pin its mean, the intercept and the departures are
//! otherwise nearly perfectly correlated (only their sum is known), which a
//! diagonal mass matrix follows badly; the change `(intercept, b) →
//! (intercept, a)` has unit Jacobian. The constrained draws are still the
//! departures `aⱼ`.
//!
//! The likelihood sees the departures through the linear predictor:
//! `ηᵢ = xᵢβ + a[level of row i]`, so its derivative in `aⱼ` is the sum of
//! the rows' derivatives in η over level `j`'s rows. The caller evaluates
//! the likelihood on the fixed-effect coefficients followed by the
//! departures (the normal family through sufficient statistics of the
//! design with the level indicators appended, the GLM families by each
//! row's level index) and hands their derivatives here; [`Pooling::log_density_and_gradient`]
//! adds the chain rule through `a = τz` and the priors.

use super::super::prior::Prior;
use super::super::terms::groups::{GroupLayout, GroupTerm};

/// One pooled group as the density sees it.
#[derive(Debug, Clone, PartialEq)]
pub struct PooledGroup {
    pub levels: usize,
    pub layout: GroupLayout,
    pub spread_prior: Prior,
    /// Sampled as level means around the intercept (module docs).
    pub around_intercept: bool,
}

/// Every pooled group of a model (empty when it has none).
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Pooling {
    pub groups: Vec<PooledGroup>,
    /// The position of the single intercept among the coefficients, when
    /// a group is sampled around it.
    pub intercept: Option<usize>,
}

const HALF_LOG_TWO_PI: f64 = 0.918_938_533_204_672_7;

impl Pooling {
    /// The density's view of `terms` with their spreads' priors;
    /// `intercept` is the position of a single intercept column, if the
    /// design has one (the first centred group is then sampled around it).
    pub fn new(terms: &[GroupTerm], spread_priors: &[Prior], intercept: Option<usize>) -> Pooling {
        let around = intercept.and_then(|_| terms.iter().position(|t| t.layout == GroupLayout::Centred));
        Pooling {
            groups: terms
                .iter()
                .zip(spread_priors)
                .enumerate()
                .map(|(k, (t, p))| PooledGroup {
                    levels: t.levels.len(),
                    layout: t.layout,
                    spread_prior: p.clone(),
                    around_intercept: around == Some(k),
                })
                .collect(),
            intercept: around.and(intercept),
        }
    }

    /// Whether a group is sampled around the intercept.
    pub fn around_intercept(&self) -> bool {
        self.groups.iter().any(|g| g.around_intercept)
    }

    /// The intercept's value in `coefficients` when a group is sampled
    /// around it, else 0 (nothing to subtract).
    pub fn anchor(&self, coefficients: &[f64]) -> f64 {
        self.intercept.map_or(0.0, |j| coefficients[j])
    }

    /// Whether the model has no pooled group.
    pub fn is_empty(&self) -> bool {
        self.groups.is_empty()
    }

    /// Unconstrained coordinates of every group (a spread and its departures).
    pub fn dim(&self) -> usize {
        self.groups.iter().map(|g| 1 + g.levels).sum()
    }

    /// The number of departures of every group together.
    pub fn departure_count(&self) -> usize {
        self.groups.iter().map(|g| g.levels).sum()
    }

    /// The departures, group after group, at unconstrained `theta` (the
    /// groups' block); `anchor` is [`Pooling::anchor`] of the coefficients.
    pub fn departures(&self, theta: &[f64], anchor: f64) -> Vec<f64> {
        let mut out = Vec::with_capacity(self.departure_count());
        let mut at = 0;
        for g in &self.groups {
            let spread = theta[at].exp();
            let coordinates = &theta[at + 1..at + 1 + g.levels];
            match g.layout {
                GroupLayout::Centred if g.around_intercept => out.extend(coordinates.iter().map(|b| b - anchor)),
                GroupLayout::Centred => out.extend_from_slice(coordinates),
                GroupLayout::NonCentred => out.extend(coordinates.iter().map(|z| spread * z)),
            }
            at += 1 + g.levels;
        }
        out
    }

    /// The groups' log prior (population prior of the departures, spread
    /// priors, the Jacobian of `spread = eᵘ`) at unconstrained `theta`,
    /// given the likelihood's derivatives `d_departures` in each departure.
    /// Writes the gradient of prior plus likelihood in the groups'
    /// coordinates into `grad` (overwriting it) and returns the log prior
    /// and what it adds to the intercept's derivative (non-zero when a
    /// group is sampled around the intercept).
    pub fn log_density_and_gradient(
        &self,
        theta: &[f64],
        d_departures: &[f64],
        anchor: f64,
        grad: &mut [f64],
    ) -> (f64, f64) {
        let mut total = 0.0;
        let mut d_anchor = 0.0;
        let (mut at, mut d_at) = (0, 0);
        for g in &self.groups {
            let u = theta[at];
            let spread = u.exp();
            let coordinates = &theta[at + 1..at + 1 + g.levels];
            let d_lik = &d_departures[d_at..d_at + g.levels];
            let (lp, d_spread) = g.spread_prior.log_density_and_derivative(spread);
            total += lp + u;
            let mut d_u = d_spread * spread + 1.0;
            let grads = &mut grad[at + 1..at + 1 + g.levels];
            match g.layout {
                GroupLayout::Centred => {
                    let precision = (-2.0 * u).exp();
                    let shift = if g.around_intercept { anchor } else { 0.0 };
                    for ((out, &b), &d) in grads.iter_mut().zip(coordinates).zip(d_lik) {
                        let a = b - shift;
                        total += -0.5 * a * a * precision - u - HALF_LOG_TWO_PI;
                        *out = d - a * precision;
                        d_u += a * a * precision - 1.0;
                        if g.around_intercept {
                            d_anchor -= *out;
                        }
                    }
                }
                GroupLayout::NonCentred => {
                    for ((out, &z), &d) in grads.iter_mut().zip(coordinates).zip(d_lik) {
                        total += -0.5 * z * z - HALF_LOG_TWO_PI;
                        *out = d * spread - z;
                        d_u += d * spread * z;
                    }
                }
            }
            grad[at] = d_u;
            at += 1 + g.levels;
            d_at += g.levels;
        }
        (total, d_anchor)
    }

    /// Constrained values (each group's spread, then its departures) from
    /// unconstrained `theta`.
    pub fn constrain(&self, theta: &[f64], anchor: f64) -> Vec<f64> {
        let departures = self.departures(theta, anchor);
        let mut out = Vec::with_capacity(theta.len());
        let (mut at, mut d_at) = (0, 0);
        for g in &self.groups {
            out.push(theta[at].exp());
            out.extend_from_slice(&departures[d_at..d_at + g.levels]);
            at += 1 + g.levels;
            d_at += g.levels;
        }
        out
    }

    /// Unconstrained coordinates from constrained values; an error names
    /// the position of a spread that is not positive.
    pub fn unconstrain(&self, params: &[f64], anchor: f64) -> Result<Vec<f64>, usize> {
        let mut out = Vec::with_capacity(params.len());
        let mut at = 0;
        for g in &self.groups {
            let spread = params[at];
            if !(spread > 0.0 && spread.is_finite()) {
                return Err(at);
            }
            out.push(spread.ln());
            let departures = &params[at + 1..at + 1 + g.levels];
            match g.layout {
                GroupLayout::Centred if g.around_intercept => out.extend(departures.iter().map(|a| a + anchor)),
                GroupLayout::Centred => out.extend_from_slice(departures),
                GroupLayout::NonCentred => out.extend(departures.iter().map(|a| a / spread)),
            }
            at += 1 + g.levels;
        }
        Ok(out)
    }

    /// A starting point: each spread at its prior's central point, every
    /// departure 0; moved by standard scores `z` (one unit of `log(spread)`,
    /// and one spread of departure per unit). `anchor` is the intercept's
    /// starting value.
    pub fn start(&self, z: &[f64], anchor: f64) -> Vec<f64> {
        let mut out = Vec::with_capacity(self.dim());
        let mut at = 0;
        for g in &self.groups {
            let score = |k: usize| z.get(at + k).copied().unwrap_or(0.0);
            let u = g.spread_prior.central_point().ln() + score(0);
            out.push(u);
            for k in 1..=g.levels {
                out.push(match g.layout {
                    GroupLayout::Centred if g.around_intercept => anchor + u.exp() * score(k),
                    GroupLayout::Centred => u.exp() * score(k),
                    GroupLayout::NonCentred => score(k),
                });
            }
            at += 1 + g.levels;
        }
        out
    }
}
