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
//! **A varying slope** (`pooled block with girth`) gives each level two
//! departures, of the intercept `a₀ⱼ` and of the slope `a₁ⱼ` of a
//! numeric predictor `x`, jointly normal with spreads `τ₀`, `τ₁` and
//! correlation `ρ`. It is sampled non-centred through the Cholesky factor
//! `L = [[1, 0], [ρ, √(1 − ρ²)]]` of the correlation matrix: standard
//! scores `z₀ⱼ, z₁ⱼ` with `a₀ⱼ = τ₀z₀ⱼ`, `a₁ⱼ = τ₁(ρz₀ⱼ + √(1 − ρ²)z₁ⱼ)`.
//! Coordinates: `u₀ = log τ₀`, the `z₀`, `u₁ = log τ₁`, the `z₁`, and
//! `v = atanh ρ`. The correlation matrix has the LKJ prior
//! (Lewandowski, Kurowicka & Joe 2009, J. Multivariate Analysis 100,
//! 1989–2001) `p(Ω) ∝ det(Ω)^(η−1)`; on the Cholesky factor that is
//! `Σₖ₌₂ᴷ (K − k + 2η − 2)·log Lₖₖ`, here `(2η − 2)·log L₂₂ =
//! (η − 1)·log(1 − ρ²)`, and the Jacobian `dρ/dv = 1 − ρ²` adds one more
//! `log(1 − ρ²)`: the density in `v` is `η·log(1 − ρ²)` (without the
//! normalising constant, which does not depend on the parameters).
//!
//! The likelihood sees the departures through the linear predictor:
//! `ηᵢ = xᵢβ + a[level of row i]` (plus `xᵢ·a₁[level of row i]` for a
//! varying slope), so its derivative in `aⱼ` is the sum of the rows'
//! derivatives in η over level `j`'s rows (each times `xᵢ` for `a₁ⱼ`). The caller evaluates
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
    /// A varying slope: its spread's prior and the LKJ η of the
    /// correlation.
    pub slope: Option<SlopePrior>,
    /// The coefficient position of the varying slope's population slope.
    pub slope_coefficient: Option<usize>,
}

/// The priors of a group's varying slope.
#[derive(Debug, Clone, PartialEq)]
pub struct SlopePrior {
    pub spread_prior: Prior,
    /// η of the LKJ prior on the intercept–slope correlation matrix.
    pub lkj: f64,
}

impl PooledGroup {
    /// What the group's intercept and slope coordinates are shifted by
    /// (centred around the intercept and the population slope, else 0).
    fn shifts(&self, anchor: Anchor) -> (f64, f64) {
        if self.around_intercept { (anchor.intercept, anchor.slope) } else { (0.0, 0.0) }
    }

    /// Unconstrained coordinates of the group.
    pub fn dim(&self) -> usize {
        if self.slope.is_some() { 2 * self.levels + 3 } else { 1 + self.levels }
    }

    /// The group's departures on the linear predictor (one or two per level).
    pub fn departure_count(&self) -> usize {
        if self.slope.is_some() { 2 * self.levels } else { self.levels }
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
/// intercept's value and, for a varying slope, the population slope's
/// (both 0 when no group is sampled around them).
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct Anchor {
    pub intercept: f64,
    pub slope: f64,
}

impl Pooling {
    /// The density's view of `terms` with their spreads' priors;
    /// `intercept` is the position of a single intercept column, if the
    /// design has one (the first centred group is then sampled around it).
    /// `slope_priors[k]` is group k's varying slope, if it has one.
    pub fn new(terms: &[GroupTerm], spread_priors: &[Prior], slope_priors: &[Option<SlopePrior>], intercept: Option<usize>) -> Pooling {
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
                    slope: slope_priors.get(k).cloned().flatten(),
                    slope_coefficient: t.slope.as_ref().map(|s| s.design_column),
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
    /// around it, else 0 (nothing to subtract); likewise the population
    /// slope of that group's varying slope.
    pub fn anchor(&self, coefficients: &[f64]) -> Anchor {
        Anchor {
            intercept: self.intercept.map_or(0.0, |j| coefficients[j]),
            slope: self.slope_anchor_position().map_or(0.0, |j| coefficients[j]),
        }
    }

    /// The coefficient position of the population slope that the group
    /// sampled around the intercept is also sampled around (it has a
    /// varying slope).
    pub fn slope_anchor_position(&self) -> Option<usize> {
        self.groups.iter().find(|g| g.around_intercept).and_then(|g| g.slope_coefficient)
    }

    /// Whether the model has no pooled group.
    pub fn is_empty(&self) -> bool {
        self.groups.is_empty()
    }

    /// Unconstrained coordinates of every group (a spread and its departures).
    pub fn dim(&self) -> usize {
        self.groups.iter().map(PooledGroup::dim).sum()
    }

    /// The number of departures of every group together.
    pub fn departure_count(&self) -> usize {
        self.groups.iter().map(PooledGroup::departure_count).sum()
    }

    /// The departures, group after group, at unconstrained `theta` (the
    /// groups' block); `anchor` is [`Pooling::anchor`] of the coefficients.
    pub fn departures(&self, theta: &[f64], anchor: Anchor) -> Vec<f64> {
        let mut out = Vec::with_capacity(self.departure_count());
        let mut at = 0;
        for g in &self.groups {
            if g.slope.is_some() {
                let c = SlopeCoordinates::read(&theta[at..at + g.dim()], g.levels);
                match g.layout {
                    GroupLayout::NonCentred => out.extend(c.departures()),
                    GroupLayout::Centred => {
                        let (s0, s1) = g.shifts(anchor);
                        out.extend(c.z0.iter().map(|b| b - s0));
                        out.extend(c.z1.iter().map(|b| b - s1));
                    }
                }
                at += g.dim();
                continue;
            }
            let spread = theta[at].exp();
            let coordinates = &theta[at + 1..at + 1 + g.levels];
            match g.layout {
                GroupLayout::Centred if g.around_intercept => out.extend(coordinates.iter().map(|b| b - anchor.intercept)),
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
        anchor: Anchor,
        grad: &mut [f64],
    ) -> (f64, Anchor) {
        let mut total = 0.0;
        let mut d_anchor = Anchor::default();
        let (mut at, mut d_at) = (0, 0);
        for g in &self.groups {
            if let Some(slope) = &g.slope {
                let d_lik = &d_departures[d_at..d_at + g.departure_count()];
                let (theta, grad) = (&theta[at..at + g.dim()], &mut grad[at..at + g.dim()]);
                total += match g.layout {
                    GroupLayout::NonCentred => slope_group_density(g, slope, theta, d_lik, grad),
                    GroupLayout::Centred => centred_slope_group_density(g, slope, theta, d_lik, anchor, grad, &mut d_anchor),
                };
                at += g.dim();
                d_at += g.departure_count();
                continue;
            }
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
    pub fn constrain(&self, theta: &[f64], anchor: Anchor) -> Vec<f64> {
        let departures = self.departures(theta, anchor);
        let mut out = Vec::with_capacity(theta.len());
        let (mut at, mut d_at) = (0, 0);
        for g in &self.groups {
            out.push(theta[at].exp());
            out.extend_from_slice(&departures[d_at..d_at + g.levels]);
            if g.slope.is_some() {
                let c = SlopeCoordinates::read(&theta[at..at + g.dim()], g.levels);
                out.push(c.u1.exp());
                out.extend_from_slice(&departures[d_at + g.levels..d_at + 2 * g.levels]);
                out.push(c.v.tanh());
            }
            at += g.dim();
            d_at += g.departure_count();
        }
        out
    }

    /// Unconstrained coordinates from constrained values; an error names
    /// the position of a spread that is not positive.
    pub fn unconstrain(&self, params: &[f64], anchor: Anchor) -> Result<Vec<f64>, usize> {
        let mut out = Vec::with_capacity(params.len());
        let mut at = 0;
        for g in &self.groups {
            let spread = params[at];
            if !(spread > 0.0 && spread.is_finite()) {
                return Err(at);
            }
            if g.slope.is_some() {
                let mut coordinates = slope_coordinates(&params[at..at + g.dim()], g.levels).map_err(|k| at + k)?;
                if g.layout == GroupLayout::Centred {
                    let (s0, s1) = g.shifts(anchor);
                    let n = g.levels;
                    coordinates[1..=n].iter_mut().zip(&params[at + 1..at + 1 + n]).for_each(|(c, a)| *c = a + s0);
                    coordinates[2 + n..2 + 2 * n].iter_mut().zip(&params[at + 2 + n..at + 2 + 2 * n]).for_each(|(c, a)| *c = a + s1);
                }
                out.extend(coordinates);
                at += g.dim();
                continue;
            }
            out.push(spread.ln());
            let departures = &params[at + 1..at + 1 + g.levels];
            match g.layout {
                GroupLayout::Centred if g.around_intercept => out.extend(departures.iter().map(|a| a + anchor.intercept)),
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
    pub fn start(&self, z: &[f64], anchor: Anchor) -> Vec<f64> {
        let mut out = Vec::with_capacity(self.dim());
        let mut at = 0;
        for g in &self.groups {
            let score = |k: usize| z.get(at + k).copied().unwrap_or(0.0);
            if let Some(slope) = &g.slope {
                let (u0, u1) = (
                    g.spread_prior.central_point().ln() + score(0),
                    slope.spread_prior.central_point().ln() + score(g.levels + 1),
                );
                let (s0, s1, t0, t1) = match g.layout {
                    GroupLayout::NonCentred => (0.0, 0.0, 1.0, 1.0),
                    GroupLayout::Centred => {
                        let (s0, s1) = g.shifts(anchor);
                        (s0, s1, u0.exp(), u1.exp())
                    }
                };
                out.push(u0);
                out.extend((1..=g.levels).map(|k| s0 + t0 * score(k)));
                out.push(u1);
                out.extend((g.levels + 2..2 * g.levels + 2).map(|k| s1 + t1 * score(k)));
                // atanh ρ moved by a quarter of a score: the correlation starts near 0.
                out.push(0.25 * score(2 * g.levels + 2));
                at += g.dim();
                continue;
            }
            let u = g.spread_prior.central_point().ln() + score(0);
            out.push(u);
            for k in 1..=g.levels {
                out.push(match g.layout {
                    GroupLayout::Centred if g.around_intercept => anchor.intercept + u.exp() * score(k),
                    GroupLayout::Centred => u.exp() * score(k),
                    GroupLayout::NonCentred => score(k),
                });
            }
            at += 1 + g.levels;
        }
        out
    }
}

/// A varying-slope group's unconstrained coordinates (module docs).
struct SlopeCoordinates<'a> {
    u0: f64,
    z0: &'a [f64],
    u1: f64,
    z1: &'a [f64],
    v: f64,
}

impl<'a> SlopeCoordinates<'a> {
    fn read(theta: &'a [f64], levels: usize) -> Self {
        SlopeCoordinates {
            u0: theta[0],
            z0: &theta[1..1 + levels],
            u1: theta[1 + levels],
            z1: &theta[2 + levels..2 + 2 * levels],
            v: theta[2 + 2 * levels],
        }
    }

    /// The intercept departures, then the slope departures.
    fn departures(&self) -> Vec<f64> {
        let (t0, t1, rho) = (self.u0.exp(), self.u1.exp(), self.v.tanh());
        let s = (1.0 - rho * rho).sqrt();
        let mut out: Vec<f64> = self.z0.iter().map(|z| t0 * z).collect();
        out.extend(self.z0.iter().zip(self.z1).map(|(z0, z1)| t1 * rho.mul_add(*z0, s * z1)));
        out
    }
}

/// `log(1 − tanh²v) = −2·log cosh v`, without overflow for large |v|.
fn log_one_minus_tanh_squared(v: f64) -> f64 {
    let a = v.abs();
    2.0 * (std::f64::consts::LN_2 - a - (-2.0 * a).exp().ln_1p())
}

/// The log prior of a varying-slope group (spread priors with their
/// Jacobians, standard normal scores, the LKJ density in `v` with its
/// Jacobian) at its coordinates `theta`, given the likelihood's
/// derivatives `d_lik` in its departures (intercept run, slope run).
/// Writes the gradient of prior plus likelihood into `grad`.
fn slope_group_density(g: &PooledGroup, slope: &SlopePrior, theta: &[f64], d_lik: &[f64], grad: &mut [f64]) -> f64 {
    let j = g.levels;
    let c = SlopeCoordinates::read(theta, j);
    let (t0, t1, rho) = (c.u0.exp(), c.u1.exp(), c.v.tanh());
    let one_minus = 1.0 - rho * rho;
    let s = one_minus.sqrt();
    let (d0, d1) = d_lik.split_at(j);
    let (lp0, dp0) = g.spread_prior.log_density_and_derivative(t0);
    let (lp1, dp1) = slope.spread_prior.log_density_and_derivative(t1);
    let mut total = lp0 + c.u0 + lp1 + c.u1 + slope.lkj * log_one_minus_tanh_squared(c.v);
    let (mut g_u0, mut g_u1, mut g_rho) = (dp0 * t0 + 1.0, dp1 * t1 + 1.0, 0.0);
    for k in 0..j {
        let (z0, z1) = (c.z0[k], c.z1[k]);
        total += -0.5 * (z0 * z0 + z1 * z1) - 2.0 * HALF_LOG_TWO_PI;
        let a0 = t0 * z0;
        let a1 = t1 * rho.mul_add(z0, s * z1);
        g_u0 += d0[k] * a0;
        g_u1 += d1[k] * a1;
        g_rho += d1[k] * t1 * (z0 - rho / s * z1);
        grad[1 + k] = d0[k] * t0 + d1[k] * t1 * rho - z0;
        grad[2 + j + k] = d1[k] * t1 * s - z1;
    }
    grad[0] = g_u0;
    grad[1 + j] = g_u1;
    grad[2 + 2 * j] = g_rho * one_minus - 2.0 * slope.lkj * rho;
    total
}

/// Unconstrained coordinates of a varying-slope group from its constrained
/// values (spread, departures, slope spread, slope departures,
/// correlation); an error gives the offset of a spread that is not
/// positive or a correlation outside (−1, 1).
fn slope_coordinates(params: &[f64], levels: usize) -> Result<Vec<f64>, usize> {
    let (t0, t1, rho) = (params[0], params[1 + levels], params[2 + 2 * levels]);
    if !(t0 > 0.0 && t0.is_finite()) {
        return Err(0);
    }
    if !(t1 > 0.0 && t1.is_finite()) {
        return Err(1 + levels);
    }
    if !(rho.abs() < 1.0) {
        return Err(2 + 2 * levels);
    }
    let s = (1.0 - rho * rho).sqrt();
    let a0 = &params[1..1 + levels];
    let a1 = &params[2 + levels..2 + 2 * levels];
    let z0: Vec<f64> = a0.iter().map(|a| a / t0).collect();
    let mut out = vec![t0.ln()];
    out.extend_from_slice(&z0);
    out.push(t1.ln());
    out.extend(z0.iter().zip(a1).map(|(z0, a1)| (a1 / t1 - rho * z0) / s));
    out.push(rho.atanh());
    Ok(out)
}

/// The log prior of a centred varying-slope group: coordinates `u₀`, the
/// intercept departures (as level means around the intercept when the
/// group is sampled around it), `u₁`, the slope departures (around the
/// population slope), `v`. Each level's pair is bivariate normal with sds
/// `τ₀, τ₁` and correlation ρ: with `x = a₀/τ₀`, `y = a₁/τ₁`, `D = 1 − ρ²`,
/// `q = x² − 2ρxy + y²`, its log density is
/// `−log 2π − u₀ − u₁ − ½·log D − q/(2D)`. Writes the gradient (prior plus
/// likelihood) into `grad` and subtracts the shifted coordinates' gradient
/// from the anchors' derivatives in `d_anchor`.
fn centred_slope_group_density(
    g: &PooledGroup,
    slope: &SlopePrior,
    theta: &[f64],
    d_lik: &[f64],
    anchor: Anchor,
    grad: &mut [f64],
    d_anchor: &mut Anchor,
) -> f64 {
    let j = g.levels;
    let c = SlopeCoordinates::read(theta, j);
    let (s0, s1) = g.shifts(anchor);
    let (t0, t1, rho) = (c.u0.exp(), c.u1.exp(), c.v.tanh());
    let d = 1.0 - rho * rho;
    let (d0, d1) = d_lik.split_at(j);
    let (lp0, dp0) = g.spread_prior.log_density_and_derivative(t0);
    let (lp1, dp1) = slope.spread_prior.log_density_and_derivative(t1);
    let log_d = log_one_minus_tanh_squared(c.v);
    let mut total = lp0 + c.u0 + lp1 + c.u1 + slope.lkj * log_d;
    let (mut g_u0, mut g_u1, mut g_rho) = (dp0 * t0 + 1.0, dp1 * t1 + 1.0, 0.0);
    for k in 0..j {
        let (x, y) = ((c.z0[k] - s0) / t0, (c.z1[k] - s1) / t1);
        let q = x * x - 2.0 * rho * x * y + y * y;
        total += -2.0 * HALF_LOG_TWO_PI - c.u0 - c.u1 - 0.5 * log_d - 0.5 * q / d;
        let (rx, ry) = ((x - rho * y) / d, (y - rho * x) / d);
        let out0 = d0[k] - rx / t0;
        let out1 = d1[k] - ry / t1;
        grad[1 + k] = out0;
        grad[2 + j + k] = out1;
        if g.around_intercept {
            d_anchor.intercept -= out0;
            d_anchor.slope -= out1;
        }
        g_u0 += x * rx - 1.0;
        g_u1 += y * ry - 1.0;
        g_rho += rho / d + x * y / d - rho * q / (d * d);
    }
    grad[0] = g_u0;
    grad[1 + j] = g_u1;
    grad[2 + 2 * j] = g_rho * d - 2.0 * slope.lkj * rho;
    total
}
