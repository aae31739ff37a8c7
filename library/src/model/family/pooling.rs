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
//! **The intercept as a score about the level means.** With few levels
//! the intercept, given the level means, is still loose: its spread there
//! is `τ/√J`, which with a loosely known `τ` makes a funnel (NUTS diverges
//! in its neck). When the group sampled around the intercept has no
//! varying slopes, the sampler's coordinate in the intercept's place is
//! therefore its standard score about the level means,
//! `s = (intercept − b̄)·√J/τ`, so that `intercept = b̄ + τ·s/√J`. Since
//! `Σ(bⱼ − intercept)² = Σ(bⱼ − b̄)² + J·(b̄ − intercept)²` (the split of
//! a sum of squares about the mean; any regression text, recalled), the
//! levels' prior times the Jacobian `τ/√J` of the change is
//! `τ^−(J−1)·exp(−Σ(bⱼ − b̄)²/2τ²)·exp(−s²/2)` up to constants: `s` is
//! standard normal and apart from `τ` and the level means, whatever `τ`
//! is (only the intercept's own, usually wide, prior ties them). The
//! model maps the point to one with the intercept before the density and
//! pulls the gradient back ([`Pooling::with_intercept`],
//! [`Pooling::pull_back_intercept`]); every other part of this module sees
//! the intercept itself.
//!
//! **Varying slopes** (`pooled block with girth`, or several:
//! `pooled block with (girth, age)`) give each level `K = 1 + k`
//! departures — the intercept's `a₀ⱼ` and one per slope of a numeric
//! predictor — jointly normal with learned spreads and a learned `K × K`
//! correlation matrix under the LKJ prior (Lewandowski, Kurowicka & Joe
//! 2009). Their coordinates, centred or non-centred, the correlation
//! matrix's transform and its density are in [`super::correlated`].
//!
//! The likelihood sees the departures through the linear predictor:
//! `ηᵢ = xᵢβ + a[level of row i]` (plus `xᵢ·aₑ[level of row i]` for
//! each varying slope of `x`), so its derivative in `aⱼ` is the sum of the rows'
//! derivatives in η over level `j`'s rows (each times `xᵢ` for a slope's). The caller evaluates
//! the likelihood on the fixed-effect coefficients followed by the
//! departures (the normal family through sufficient statistics of the
//! design with the level indicators appended, the GLM families by each
//! row's level index) and hands their derivatives here; [`Pooling::log_density_and_gradient`]
//! adds the chain rule through `a = τz` and the priors.

use super::super::prior::Prior;
use super::super::terms::groups::GroupTerm;
use super::correlated::Correlated;

/// One pooled group as the density sees it.
#[derive(Debug, Clone, PartialEq)]
pub struct PooledGroup {
    pub levels: usize,
    /// How many effects (intercept, then slopes) are sampled centred.
    pub centred: usize,
    pub spread_prior: Prior,
    /// Sampled as level means around the intercept (module docs).
    pub around_intercept: bool,
    /// The spread priors of the group's varying slopes (empty without).
    pub slopes: Vec<Prior>,
    /// η of the LKJ prior on the correlation matrix of a group with slopes.
    pub lkj: f64,
    /// The coefficient positions of the varying slopes' population slopes.
    pub slope_coefficients: Vec<usize>,
}

impl PooledGroup {
    /// What the group's coordinates are shifted by, effect by effect
    /// (centred around the intercept and the population slopes, else 0).
    fn shifts(&self, anchor: &Anchor) -> Vec<f64> {
        if self.around_intercept {
            std::iter::once(anchor.intercept).chain(anchor.slopes.iter().copied()).collect()
        } else {
            vec![0.0; 1 + self.slopes.len()]
        }
    }

    /// The group's effects (intercept and slopes) as a correlated group.
    fn correlated(&self) -> Correlated<'_> {
        Correlated {
            levels: self.levels,
            effects: 1 + self.slopes.len(),
            centred: self.centred,
            spread_priors: std::iter::once(&self.spread_prior).chain(&self.slopes).collect(),
            lkj: self.lkj,
        }
    }

    /// Unconstrained coordinates of the group.
    pub fn dim(&self) -> usize {
        if self.slopes.is_empty() { 1 + self.levels } else { self.correlated().dim() }
    }

    /// The group's departures on the linear predictor (one per level and effect).
    pub fn departure_count(&self) -> usize {
        (1 + self.slopes.len()) * self.levels
    }
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

/// What a group sampled around the intercept is sampled around: the
/// intercept's value and, for varying slopes, the population slopes'
/// (0 and none when no group is sampled around them).
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Anchor {
    pub intercept: f64,
    pub slopes: Vec<f64>,
}

impl Pooling {
    /// The density's view of `terms` with their spreads' priors;
    /// `intercept` is the position of a single intercept column, if the
    /// design has one (the first centred group is then sampled around it).
    /// `slope_priors[k]` are group k's varying slopes' spread priors, `lkj`
    /// the η of their correlation matrices.
    ///
    /// A category outcome's groups (`GroupTerm::block`) sit on their
    /// outcome level's run of `width` coefficients: the intercept and
    /// slopes they are sampled around are that run's.
    pub fn new(
        terms: &[GroupTerm],
        spread_priors: &[Prior],
        slope_priors: &[Vec<Prior>],
        lkj: f64,
        intercept: Option<usize>,
        width: usize,
    ) -> Pooling {
        let centred = |t: &GroupTerm| t.layout.centred_effects(1 + t.slopes.len());
        let around = intercept.and_then(|_| terms.iter().position(|t| centred(t) > 0));
        Pooling {
            groups: terms
                .iter()
                .zip(spread_priors)
                .enumerate()
                .map(|(k, (t, p))| PooledGroup {
                    levels: t.levels.len(),
                    centred: centred(t),
                    spread_prior: p.clone(),
                    around_intercept: around == Some(k),
                    slopes: slope_priors.get(k).cloned().unwrap_or_default(),
                    lkj,
                    slope_coefficients: t.slopes.iter().map(|s| s.design_column + t.block() * width).collect(),
                })
                .collect(),
            intercept: around.and_then(|k| intercept.map(|j| j + terms[k].block() * width)),
        }
    }

    /// Whether a group is sampled around the intercept.
    pub fn around_intercept(&self) -> bool {
        self.groups.iter().any(|g| g.around_intercept)
    }

    /// The intercept's value in `coefficients` when a group is sampled
    /// around it, else 0 (nothing to subtract); likewise the population
    /// slopes of that group's varying slopes.
    pub fn anchor(&self, coefficients: &[f64]) -> Anchor {
        Anchor {
            intercept: self.intercept.map_or(0.0, |j| coefficients[j]),
            slopes: self.slope_anchor_positions().iter().map(|&j| coefficients[j]).collect(),
        }
    }

    /// The coefficient positions of the population slopes that the group
    /// sampled around the intercept is also sampled around (its varying
    /// slopes).
    pub fn slope_anchor_positions(&self) -> &[usize] {
        self.groups.iter().find(|g| g.around_intercept).map_or(&[], |g| g.slope_coefficients.as_slice())
    }

    /// Where the intercept's standard score stands in for the intercept
    /// (module docs), when it does: the intercept's position in the
    /// model's point, the group's `log(spread)` position (the level means
    /// follow it), both counted from the start of a point whose groups'
    /// block starts at `first_group`, and the number of levels.
    pub fn scored_intercept(&self, first_group: usize) -> Option<(usize, usize, usize)> {
        let j = self.intercept?;
        let mut at = first_group;
        for g in &self.groups {
            if g.around_intercept {
                return g.slopes.is_empty().then_some((j, at, g.levels));
            }
            at += g.dim();
        }
        None
    }

    /// The intercept `b̄ + τ·s/√J` from the score at `theta[j]` (positions
    /// of [`Pooling::scored_intercept`]).
    fn intercept_of(theta: &[f64], (j, u, levels): (usize, usize, usize)) -> f64 {
        let means = &theta[u + 1..u + 1 + levels];
        let mean = means.iter().sum::<f64>() / levels as f64;
        mean + theta[u].exp() * theta[j] / (levels as f64).sqrt()
    }

    /// The sampler's point `theta` with the intercept's score replaced by
    /// the intercept itself (unchanged when no score stands in for it):
    /// the point every other part of the density reads.
    pub fn with_intercept(&self, theta: &[f64], first_group: usize) -> Vec<f64> {
        let mut point = theta.to_vec();
        if let Some(at) = self.scored_intercept(first_group) {
            point[at.0] = Self::intercept_of(theta, at);
        }
        point
    }

    /// The inverse of [`Pooling::with_intercept`]: a point holding the
    /// intercept becomes the sampler's, holding its score
    /// `(intercept − b̄)·√J/τ`.
    pub fn with_intercept_score(&self, point: &[f64], first_group: usize) -> Vec<f64> {
        let mut theta = point.to_vec();
        if let Some((j, u, levels)) = self.scored_intercept(first_group) {
            let means = &point[u + 1..u + 1 + levels];
            let mean = means.iter().sum::<f64>() / levels as f64;
            theta[j] = (point[j] - mean) * (levels as f64).sqrt() / point[u].exp();
        }
        theta
    }

    /// The chain rule through [`Pooling::with_intercept`]: `grad` holds the
    /// gradient in the point with the intercept and becomes the gradient in
    /// the sampler's `theta`; returns the log Jacobian `log τ − ½·log J`
    /// of the change (its derivative in `log τ`, 1, added). With `G` the
    /// derivative in the intercept: `∂/∂s = G·τ/√J`, each level mean gains
    /// `G/J`, `log τ` gains `G·τ·s/√J`.
    pub fn pull_back_intercept(&self, theta: &[f64], first_group: usize, grad: &mut [f64]) -> f64 {
        let Some((j, u, levels)) = self.scored_intercept(first_group) else { return 0.0 };
        let (tau, root) = (theta[u].exp(), (levels as f64).sqrt());
        let d = grad[j];
        grad[j] = d * tau / root;
        grad[u] += d * tau * theta[j] / root + 1.0;
        grad[u + 1..u + 1 + levels].iter_mut().for_each(|g| *g += d / levels as f64);
        theta[u] - root.ln()
    }

    /// Whether the model has no pooled group.
    pub fn is_empty(&self) -> bool {
        self.groups.is_empty()
    }

    /// Unconstrained coordinates of every group.
    pub fn dim(&self) -> usize {
        self.groups.iter().map(PooledGroup::dim).sum()
    }

    /// The number of departures of every group together.
    pub fn departure_count(&self) -> usize {
        self.groups.iter().map(PooledGroup::departure_count).sum()
    }

    /// The departures, group after group (a group with slopes: effect after
    /// effect), at unconstrained `theta` (the groups' block); `anchor` is
    /// [`Pooling::anchor`] of the coefficients.
    pub fn departures(&self, theta: &[f64], anchor: &Anchor) -> Vec<f64> {
        let mut out = Vec::with_capacity(self.departure_count());
        let mut at = 0;
        for g in &self.groups {
            let theta = &theta[at..at + g.dim()];
            at += g.dim();
            if !g.slopes.is_empty() {
                out.extend(g.correlated().departures(theta, &g.shifts(anchor)));
                continue;
            }
            let spread = theta[0].exp();
            let coordinates = &theta[1..];
            match g.centred > 0 {
                true if g.around_intercept => out.extend(coordinates.iter().map(|b| b - anchor.intercept)),
                true => out.extend_from_slice(coordinates),
                false => out.extend(coordinates.iter().map(|z| spread * z)),
            }
        }
        out
    }

    /// The groups' log prior (population prior of the departures, spread
    /// priors, the Jacobian of `spread = eᵘ`) at unconstrained `theta`,
    /// given the likelihood's derivatives `d_departures` in each departure.
    /// Writes the gradient of prior plus likelihood in the groups'
    /// coordinates into `grad` (overwriting it) and returns the log prior
    /// and what it adds to the anchors' derivatives (non-zero when a group
    /// is sampled around the intercept).
    pub fn log_density_and_gradient(
        &self,
        theta: &[f64],
        d_departures: &[f64],
        anchor: &Anchor,
        grad: &mut [f64],
    ) -> (f64, Anchor) {
        let mut total = 0.0;
        let mut d_anchor = Anchor { intercept: 0.0, slopes: vec![0.0; anchor.slopes.len()] };
        let (mut at, mut d_at) = (0, 0);
        for g in &self.groups {
            let d_lik = &d_departures[d_at..d_at + g.departure_count()];
            let (theta, grad) = (&theta[at..at + g.dim()], &mut grad[at..at + g.dim()]);
            at += g.dim();
            d_at += g.departure_count();
            if !g.slopes.is_empty() {
                let mut d_shifts = vec![0.0; 1 + g.slopes.len()];
                total += g.correlated().density(theta, d_lik, &g.shifts(anchor), grad, &mut d_shifts);
                if g.around_intercept {
                    d_anchor.intercept += d_shifts[0];
                    d_anchor.slopes.iter_mut().zip(&d_shifts[1..]).for_each(|(a, d)| *a += d);
                }
                continue;
            }
            let u = theta[0];
            let spread = u.exp();
            let coordinates = &theta[1..];
            let (lp, d_spread) = g.spread_prior.log_density_and_derivative(spread);
            total += lp + u;
            let mut d_u = d_spread * spread + 1.0;
            let grads = &mut grad[1..];
            match g.centred > 0 {
                true => {
                    let precision = (-2.0 * u).exp();
                    let shift = if g.around_intercept { anchor.intercept } else { 0.0 };
                    for ((out, &b), &d) in grads.iter_mut().zip(coordinates).zip(d_lik) {
                        let a = b - shift;
                        total += -0.5 * a * a * precision - u - HALF_LOG_TWO_PI;
                        *out = d - a * precision;
                        d_u += a * a * precision - 1.0;
                        if g.around_intercept {
                            d_anchor.intercept -= *out;
                        }
                    }
                }
                false => {
                    for ((out, &z), &d) in grads.iter_mut().zip(coordinates).zip(d_lik) {
                        total += -0.5 * z * z - HALF_LOG_TWO_PI;
                        *out = d * spread - z;
                        d_u += d * spread * z;
                    }
                }
            }
            grad[0] = d_u;
        }
        (total, d_anchor)
    }

    /// Constrained values from unconstrained `theta`: each group's spread,
    /// then its departures; a group with slopes goes on with each slope's
    /// spread and departures, then its correlations (row by row of the
    /// lower triangle, [`super::correlated`]).
    pub fn constrain(&self, theta: &[f64], anchor: &Anchor) -> Vec<f64> {
        let departures = self.departures(theta, anchor);
        let mut out = Vec::with_capacity(theta.len());
        let (mut at, mut d_at) = (0, 0);
        for g in &self.groups {
            let group_departures = &departures[d_at..d_at + g.departure_count()];
            if g.slopes.is_empty() {
                out.push(theta[at].exp());
                out.extend_from_slice(group_departures);
            } else {
                out.extend(g.correlated().constrain(&theta[at..at + g.dim()], group_departures));
            }
            at += g.dim();
            d_at += g.departure_count();
        }
        out
    }

    /// Unconstrained coordinates from constrained values; an error names
    /// the position of a spread that is not positive (or of a group's first
    /// correlation when its correlations are not a correlation matrix).
    pub fn unconstrain(&self, params: &[f64], anchor: &Anchor) -> Result<Vec<f64>, usize> {
        let mut out = Vec::with_capacity(params.len());
        let mut at = 0;
        for g in &self.groups {
            let spread = params[at];
            if !(spread > 0.0 && spread.is_finite()) {
                return Err(at);
            }
            if !g.slopes.is_empty() {
                out.extend(g.correlated().unconstrain(&params[at..at + g.dim()], &g.shifts(anchor)).map_err(|k| at + k)?);
                at += g.dim();
                continue;
            }
            out.push(spread.ln());
            let departures = &params[at + 1..at + 1 + g.levels];
            match g.centred > 0 {
                true if g.around_intercept => out.extend(departures.iter().map(|a| a + anchor.intercept)),
                true => out.extend_from_slice(departures),
                false => out.extend(departures.iter().map(|a| a / spread)),
            }
            at += 1 + g.levels;
        }
        Ok(out)
    }

    /// A starting point: each spread at its prior's central point, every
    /// departure 0; moved by standard scores `z` (one unit of `log(spread)`,
    /// and one spread of departure per unit). `anchor` is the intercept's
    /// (and population slopes') starting value.
    pub fn start(&self, z: &[f64], anchor: &Anchor) -> Vec<f64> {
        let mut out = Vec::with_capacity(self.dim());
        let mut at = 0;
        for g in &self.groups {
            let score = |k: usize| z.get(at + k).copied().unwrap_or(0.0);
            if !g.slopes.is_empty() {
                out.extend(g.correlated().start(&score, &g.shifts(anchor)));
                at += g.dim();
                continue;
            }
            let u = g.spread_prior.central_point().ln() + score(0);
            out.push(u);
            for k in 1..=g.levels {
                out.push(match g.centred > 0 {
                    true if g.around_intercept => anchor.intercept + u.exp() * score(k),
                    true => u.exp() * score(k),
                    false => score(k),
                });
            }
            at += 1 + g.levels;
        }
        out
    }
}
