//! The row arithmetic of the two GLM families with a positive parameter
//! beside the coefficients: gamma-poisson counts and beta shares.
//!
//! # Gamma-poisson
//!
//! A count whose rate is
//! its mean `μ = e^η` times a gamma multiplier of mean 1 and sd `κ` (the
//! `overdispersion`). Mixed over the multiplier, the count is negative
//! binomial with shape `φ = 1/κ²` and variance `μ + κ²μ²`:
//!
//! `log p(y) = log Γ(y + φ) − log Γ(φ) − log y! + y·log(μ/(φ + μ)) + φ·log(φ/(φ + μ))`
//!
//! (the "NB2" form of Hilbe, *Negative Binomial Regression*, 2nd ed.,
//! 2011; recalled). κ → 0 gives back the poisson family.
//!
//! **Why κ.** The sampler sees `u = log κ`. κ is the sd of the gamma
//! multiplier, so for small κ it is the sd of the log rate's row-to-row
//! noise that no predictor explains (the log of a gamma variable with shape
//! φ has variance ψ′(φ) ≈ 1/φ = κ²): it lives on the same log scale as the
//! coefficients, which is what lets its default prior come from the same
//! budget as theirs (`model::defaults`), and a prior with positive density
//! at κ = 0 keeps the poisson model within reach.
//!
//! **Stable form.** With `t = η − log φ` (the log of μ/φ),
//! `y·log(μ/(φ + μ)) = −y·softplus(−t)` and `φ·log(φ/(φ + μ)) = −φ·softplus(t)`,
//! so nothing overflows or cancels when φ is far above or below μ. The
//! gamma difference `log Γ(y + φ) − log Γ(φ)` is the sum `Σ_{k<y} log(φ + k)`
//! for counts below [`SUMMED_BELOW`] (exact, and free of the cancellation
//! between two huge gamma values when φ is large), the gamma functions
//! themselves above.
//!
//! **Derivatives.** In η: `φ·(y − μ)/(φ + μ)`, which is
//! `y·logistic(−t) − φ·logistic(t)`. In u (with `dφ/du = −2φ`, `dt/du = 2`):
//! `−2φ·[ψ(y + φ) − ψ(φ)] + 2·(η-derivative) + 2φ·softplus(t)`.
//!
//! # Beta
//!
//! A share y in (0, 1) with mean `μ = logistic(η)` and precision φ: beta
//! with shapes `a = μφ` and `b = (1 − μ)φ` (the mean–precision form of
//! Ferrari & Cribari-Neto 2004, "Beta regression for modelling rates and
//! proportions", J. Applied Statistics 31, eq. 2; recalled), so
//!
//! `log p(y) = log Γ(φ) − log Γ(a) − log Γ(b) + (a − 1)·log y + (b − 1)·log(1 − y)`.
//!
//! The sampler sees `u = log φ`. The part free of the parameters,
//! `−log y − log(1 − y)`, is the likelihood's constant; each row keeps
//! `log Γ(φ) − log Γ(a) − log Γ(b) + a·(log y − log(1 − y)) + φ·log(1 − y)`.
//! With `ℓ = log y − log(1 − y)` (the logit of y), its derivatives are
//! `φ·μ(1 − μ)·[ℓ − ψ(a) + ψ(b)]` in η and
//! `φ·[ψ(φ) − μ·ψ(a) − (1 − μ)·ψ(b) + μ·ℓ + log(1 − y)]` in u.
//! `1 − μ` is computed as `logistic(−η)`, so a mean near 1 keeps its
//! small complement.

use statrs::function::gamma::{digamma, ln_gamma};

use super::kernels::{ln_gamma_and_digamma, softplus_and_logistic};
use super::{logistic, softplus};

/// Counts below this take the gamma difference as a sum of logs.
const SUMMED_BELOW: f64 = 64.0;

/// The shape `φ = 1/κ² = e^(−2u)` of the gamma multiplier with its log,
/// computed once per evaluation.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct GammaShape {
    pub phi: f64,
    pub log_phi: f64,
}

impl GammaShape {
    /// From `u = log κ`.
    pub fn from_log_overdispersion(u: f64) -> GammaShape {
        GammaShape { phi: (-2.0 * u).exp(), log_phi: -2.0 * u }
    }
}

/// `(log Γ(y + φ) − log Γ(φ), ψ(y + φ) − ψ(φ))` for a whole count `y ≥ 0`.
fn gamma_difference(y: f64, phi: f64) -> (f64, f64) {
    if y < SUMMED_BELOW {
        let mut logs = 0.0;
        let mut inverses = 0.0;
        let mut k = 0.0;
        while k < y {
            logs += (phi + k).ln();
            inverses += 1.0 / (phi + k);
            k += 1.0;
        }
        (logs, inverses)
    } else {
        (ln_gamma(y + phi) - ln_gamma(phi), digamma(y + phi) - digamma(phi))
    }
}

/// The counts of a gamma-poisson outcome as (value, rows with it), in
/// increasing order: the gamma difference depends on the count and φ only,
/// so a likelihood pass takes it once per distinct count
/// ([`gamma_difference_total`]) instead of once per row.
pub fn count_tally(y: &[f64]) -> Vec<(f64, f64)> {
    let mut sorted = y.to_vec();
    sorted.sort_by(f64::total_cmp);
    let mut tally: Vec<(f64, f64)> = Vec::new();
    for v in sorted {
        match tally.last_mut() {
            Some((last, n)) if *last == v => *n += 1.0,
            _ => tally.push((v, 1.0)),
        }
    }
    tally
}

/// `Σ_rows (log Γ(y + φ) − log Γ(φ))` and `Σ_rows (ψ(y + φ) − ψ(φ))` from
/// the tally of [`count_tally`]: the small counts share one running sum of
/// `log(φ + k)` and `1/(φ + k)` up to the largest of them, the others take
/// the gamma functions, one call per distinct count.
pub fn gamma_difference_total(tally: &[(f64, f64)], phi: f64) -> (f64, f64) {
    let (mut logs, mut inverses, mut k) = (0.0, 0.0, 0.0);
    let (mut total, mut d_total) = (0.0, 0.0);
    for &(y, rows) in tally {
        let (difference, d_difference) = if y < SUMMED_BELOW {
            while k < y {
                logs += (phi + k).ln();
                inverses += 1.0 / (phi + k);
                k += 1.0;
            }
            (logs, inverses)
        } else {
            gamma_difference(y, phi)
        };
        total += rows * difference;
        d_total += rows * d_difference;
    }
    (total, d_total)
}

/// One row's log probability without `−log y!`, and its derivatives in η
/// and in `u = log κ` (module doc).
pub fn gamma_poisson_row(y: f64, eta: f64, shape: GammaShape) -> (f64, f64, f64) {
    let GammaShape { phi, log_phi } = shape;
    let t = eta - log_phi;
    let (difference, d_difference) = gamma_difference(y, phi);
    let softplus_t = softplus(t);
    let term = difference - y * softplus(-t) - phi * softplus_t;
    let d_eta = y * logistic(-t) - phi * logistic(t);
    let d_u = 2.0 * (phi * (softplus_t - d_difference) + d_eta);
    (term, d_eta, d_u)
}

/// A beta share as the likelihood keeps it: `log y − log(1 − y)` and
/// `log(1 − y)`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BetaShare {
    pub logit: f64,
    pub log_complement: f64,
}

impl BetaShare {
    /// From a share strictly between 0 and 1.
    pub fn new(y: f64) -> BetaShare {
        let log_complement = (-y).ln_1p();
        BetaShare { logit: y.ln() - log_complement, log_complement }
    }
}

/// One beta row's log density without `−log y − log(1 − y)`, and its
/// derivatives in η and in `u = log φ` (module doc); `precision` is φ with
/// `log Γ(φ)` and `ψ(φ)`, computed once per evaluation.
pub fn beta_row(share: BetaShare, eta: f64, precision: BetaPrecision) -> (f64, f64, f64) {
    let (term, d_eta, d_u) = beta_rows(&[share], &[eta], precision);
    (term[0], d_eta[0], d_u[0])
}

/// [`beta_row`] of `N` rows at once, through the vector kernels (the
/// logistic, and `log Γ` with `ψ` of both shapes), so the likelihood's
/// blocks run in wide registers like the other logit-link families.
#[inline(always)]
pub fn beta_rows<const N: usize>(shares: &[BetaShare; N], eta: &[f64; N], precision: BetaPrecision) -> ([f64; N], [f64; N], [f64; N]) {
    let BetaPrecision { phi, log_gamma, digamma: digamma_phi } = precision;
    let mut minus = [0.0; N];
    for k in 0..N {
        minus[k] = -eta[k];
    }
    let (_, mu) = softplus_and_logistic(eta);
    let (_, complement) = softplus_and_logistic(&minus);
    let (mut a, mut b) = ([0.0; N], [0.0; N]);
    for k in 0..N {
        a[k] = mu[k] * phi;
        b[k] = complement[k] * phi;
    }
    let (ln_gamma_a, digamma_a) = ln_gamma_and_digamma(&a);
    let (ln_gamma_b, digamma_b) = ln_gamma_and_digamma(&b);
    let (mut term, mut d_eta, mut d_u) = ([0.0; N], [0.0; N], [0.0; N]);
    for k in 0..N {
        let BetaShare { logit, log_complement } = shares[k];
        term[k] = phi.mul_add(log_complement, a[k].mul_add(logit, log_gamma - ln_gamma_a[k] - ln_gamma_b[k]));
        d_eta[k] = phi * mu[k] * complement[k] * (logit - digamma_a[k] + digamma_b[k]);
        let mean_part = mu[k].mul_add(logit - digamma_a[k], log_complement);
        d_u[k] = phi * (complement[k].mul_add(-digamma_b[k], digamma_phi) + mean_part);
    }
    (term, d_eta, d_u)
}

/// The precision φ = e^u with `log Γ(φ)` and `ψ(φ)`, computed once per
/// evaluation.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BetaPrecision {
    pub phi: f64,
    pub log_gamma: f64,
    pub digamma: f64,
}

impl BetaPrecision {
    /// From `u = log φ`.
    pub fn from_log_precision(u: f64) -> BetaPrecision {
        let phi = u.exp();
        BetaPrecision { phi, log_gamma: ln_gamma(phi), digamma: digamma(phi) }
    }
}

/// A starting precision from the moments of the shares: the φ with
/// `var = mean·(1 − mean)/(1 + φ)`, kept within [1, 1000].
pub fn moment_precision(y: &[f64]) -> f64 {
    let n = y.len().max(1) as f64;
    let mean = y.iter().sum::<f64>() / n;
    let variance = y.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / n;
    (mean * (1.0 - mean) / variance.max(1e-12) - 1.0).clamp(1.0, 1000.0)
}

/// A starting overdispersion from the moments of the counts: the κ with
/// `var = mean + κ²·mean²`, kept within [0.1, 2] (a count no more varied
/// than a poisson one still starts at 0.1, inside every prior's bulk).
pub fn moment_overdispersion(y: &[f64]) -> f64 {
    let n = y.len().max(1) as f64;
    let mean = y.iter().sum::<f64>() / n;
    let variance = y.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / n;
    let squared = (variance - mean) / (mean * mean).max(1e-6);
    squared.max(0.0).sqrt().clamp(0.1, 2.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Source: the definition with the standard gamma function,
    /// `log Γ(y + φ) − log Γ(φ) + y log(μ/(φ+μ)) + φ log(φ/(φ+μ))`, at
    /// moderate φ and μ where the plain form is accurate; the derivatives
    /// against central differences of that plain form.
    #[test]
    fn row_matches_the_plain_definition() {
        let plain = |y: f64, eta: f64, u: f64| {
            let (phi, mu) = ((-2.0 * u).exp(), eta.exp());
            ln_gamma(y + phi) - ln_gamma(phi) + y * (mu / (phi + mu)).ln() + phi * (phi / (phi + mu)).ln()
        };
        for &(y, eta, u) in &[(0.0, 0.3, -0.5), (3.0, 1.2, 0.2), (17.0, 2.0, -1.0), (80.0, 4.1, -0.3), (150.0, 4.0, 0.4)] {
            let (term, d_eta, d_u) = gamma_poisson_row(y, eta, GammaShape::from_log_overdispersion(u));
            let want = plain(y, eta, u);
            assert!((term - want).abs() < 1e-10 * (1.0 + want.abs()), "y {y}: {term} vs {want}");
            let h = 1e-6;
            let fd_eta = (plain(y, eta + h, u) - plain(y, eta - h, u)) / (2.0 * h);
            let fd_u = (plain(y, eta, u + h) - plain(y, eta, u - h)) / (2.0 * h);
            assert!((d_eta - fd_eta).abs() < 1e-6 * (1.0 + fd_eta.abs()), "y {y}: d_eta {d_eta} vs {fd_eta}");
            assert!((d_u - fd_u).abs() < 1e-6 * (1.0 + fd_u.abs()), "y {y}: d_u {d_u} vs {fd_u}");
        }
    }

    /// Source: the beta density with the standard gamma function,
    /// `Γ(φ)/(Γ(a)Γ(b))·y^(a−1)(1 − y)^(b−1)` (Ferrari & Cribari-Neto 2004;
    /// recalled), written plainly, plus `log y + log(1 − y)` (the part the
    /// row leaves to the constant); derivatives against central differences.
    #[test]
    fn beta_row_matches_the_plain_definition() {
        let plain = |y: f64, eta: f64, u: f64| {
            let (phi, mu) = (u.exp(), 1.0 / (1.0 + (-eta).exp()));
            let (a, b) = (mu * phi, (1.0 - mu) * phi);
            ln_gamma(phi) - ln_gamma(a) - ln_gamma(b) + (a - 1.0) * y.ln() + (b - 1.0) * (1.0 - y).ln()
        };
        for &(y, eta, u) in &[(0.3, 0.2, 1.5), (0.02, -2.5, 3.0), (0.97, 2.0, 0.4), (0.5, 0.0, 5.0), (0.81, -1.0, 2.2)] {
            let row = |eta: f64, u: f64| beta_row(BetaShare::new(y), eta, BetaPrecision::from_log_precision(u));
            let (term, d_eta, d_u) = row(eta, u);
            let want = plain(y, eta, u);
            let with_constant = term - y.ln() - (1.0 - y).ln();
            assert!((with_constant - want).abs() < 1e-10 * (1.0 + want.abs()), "y {y}: {with_constant} vs {want}");
            let h = 1e-6;
            let fd_eta = (plain(y, eta + h, u) - plain(y, eta - h, u)) / (2.0 * h);
            let fd_u = (plain(y, eta, u + h) - plain(y, eta, u - h)) / (2.0 * h);
            assert!((d_eta - fd_eta).abs() < 1e-6 * (1.0 + fd_eta.abs()), "y {y}: d_eta {d_eta} vs {fd_eta}");
            assert!((d_u - fd_u).abs() < 1e-6 * (1.0 + fd_u.abs()), "y {y}: d_u {d_u} vs {fd_u}");
        }
    }

    /// Source: as κ → 0 the gamma multiplier is 1 and the count poisson
    /// (Hilbe 2011; recalled): at κ = 1e-6 (φ = 1e12) the row equals the
    /// poisson row `y·η − μ` (both without `log y!`) to within φ's
    /// influence, about μ²/φ.
    #[test]
    fn small_overdispersion_gives_the_poisson_row() {
        for &(y, eta) in &[(0.0, -1.0), (4.0, 1.5), (30.0, 3.2)] {
            let (term, d_eta, d_u) = gamma_poisson_row(y, eta, GammaShape::from_log_overdispersion(1e-6f64.ln()));
            let poisson = y * eta - eta.exp();
            assert!((term - poisson).abs() < 1e-6, "y {y}: {term} vs {poisson}");
            assert!((d_eta - (y - eta.exp())).abs() < 1e-6);
            assert!(d_u.abs() < 1e-6, "the overdispersion no longer matters: {d_u}");
        }
    }
}
