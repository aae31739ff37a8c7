//! Outcome families and their links.
//!
//! Each family fixes the link between the linear predictor and the mean:
//! normal — identity; bernoulli, binomial and beta — logit; poisson and
//! gamma-poisson — log. The
//! levels family (a category outcome with K levels) has K − 1 linear
//! predictors, one per level after the first, and a softmax link to the
//! level probabilities. The graded family (an ordered category outcome)
//! has one linear predictor, a latent logistic score cut into the levels
//! at learned, ordered cut points ([`ordered`]). The likelihoods live in [`likelihood`] (row by row,
//! for the GLM families), [`gaussian`] (through sufficient statistics, for
//! the normal family) and [`softmax`] (row by row, for the levels family);
//! pooled groups add their departures to the linear predictor and their
//! population prior to the density through [`pooling`].
//!
//! Besides the coefficients, the normal family has a spread, the
//! gamma-poisson family an overdispersion and the beta family a precision
//! ([`Family::family_parameter`]): one positive parameter, sampled on the
//! log scale, placed after the coefficients. The gamma-poisson and beta
//! rows' arithmetic is in [`shaped`].
//!
//! The time families (exponential, Weibull; log link to the mean time, rows
//! cut short adding their log survival) and the Weibull `shape` are in
//! [`survival`].

pub mod gaussian;
mod kernels;
pub mod likelihood;
pub mod correlated;
pub mod ordered;
pub mod pooling;
pub mod shaped;
pub mod softmax;
pub mod survival;

use super::error::ModelError;
use survival::{parse_time_family, TimeForm};

/// The outcome distribution of a model.
#[derive(Debug, Clone, PartialEq)]
pub enum Family {
    /// Normal outcome, identity link, with a spread parameter.
    Normal,
    /// Yes/no outcome, logit link.
    Bernoulli,
    /// Successes out of a known number of trials (a count column), logit link.
    Binomial { trials: String },
    /// Count outcome, log link.
    Poisson,
    /// Count outcome, log link, more varied than a poisson count: the rate
    /// of each row is the mean times a gamma multiplier of mean 1 and sd
    /// `overdispersion` (learned), so the variance is `μ + overdispersion²·μ²`.
    GammaPoisson,
    /// Share strictly between 0 and 1, logit link to its mean μ, beta
    /// distributed with `precision` φ (learned): shape parameters μφ and
    /// (1 − μ)φ, variance μ(1 − μ)/(1 + φ).
    Beta,
    /// Positive time, log link to its mean, exponential or Weibull
    /// (`shape` learned); rows where the column `cut_short` is yes add their
    /// log survival, and with a `came_by` column each row whose bounds
    /// differ the log chance between its time and that column's
    /// ([`survival`]).
    Times { form: TimeForm, cut_short: Option<String>, came_by: Option<String> },
    /// Category outcome: one linear predictor per level after the first
    /// (the reference, whose predictor is 0), softmax link. The levels come
    /// from the outcome column when the model is built.
    Levels,
    /// Ordered category outcome: one linear predictor, a latent logistic
    /// score cut into the levels at learned, ordered cut points
    /// (cumulative logit, [`ordered`]). The levels and their order come
    /// from the outcome column's declaration.
    Graded,
}

/// The family words of a `family` line (binomial then takes `out of <column>`).
pub const FAMILY_WORDS: &[&str] =
    &[NORMAL, BERNOULLI, POISSON, GAMMA_POISSON, BETA, LEVELS, GRADED, BINOMIAL, survival::EXPONENTIAL, survival::WEIBULL];
const NORMAL: &str = "normal";
const BERNOULLI: &str = "bernoulli";
const POISSON: &str = "poisson";
const GAMMA_POISSON: &str = "gamma_poisson";
const BETA: &str = "beta";
const LEVELS: &str = "levels";
const GRADED: &str = "graded";
/// The label of the normal family's residual sd.
pub const SPREAD: &str = "spread";
/// The label of the gamma-poisson family's sd of the rate multiplier.
pub const OVERDISPERSION: &str = "overdispersion";
/// The label of the beta family's precision.
pub const PRECISION: &str = "precision";
/// The family that takes `out of <column>` after it.
pub const BINOMIAL: &str = "binomial";
/// The words between `binomial` and the column that holds each row's
/// number of trials: successes *out of* that many.
pub const OUT_OF: [&str; 2] = ["out", "of"];

impl Family {
    /// Read the rest of a `family` line: `normal`, `bernoulli`, `poisson`,
    /// `gamma_poisson`, `beta`, `levels`, or `binomial out of <column>`.
    pub fn parse(text: &str) -> Result<Family, ModelError> {
        let words: Vec<&str> = text.split_whitespace().collect();
        if let Some(times) = parse_time_family(&words) {
            return times.map(|(form, c)| Family::Times { form, cut_short: c.cut_short, came_by: c.came_by });
        }
        match words[..] {
            [NORMAL] => Ok(Family::Normal),
            [BERNOULLI] => Ok(Family::Bernoulli),
            [POISSON] => Ok(Family::Poisson),
            [GAMMA_POISSON] => Ok(Family::GammaPoisson),
            [BETA] => Ok(Family::Beta),
            [LEVELS] => Ok(Family::Levels),
            [GRADED] => Ok(Family::Graded),
            [BINOMIAL, out, of, column] if [out, of] == OUT_OF => Ok(Family::Binomial { trials: column.to_string() }),
            [BINOMIAL, ..] => Err(ModelError::syntax(
                "a binomial outcome needs the column that holds each row's number of trials: \
                 write `family binomial out of <column>`",
            )),
            _ => Err(ModelError::syntax(format!(
                "`family {text}`: use normal, bernoulli, poisson, gamma_poisson, beta, levels, graded, binomial out of \
                 <column>, exponential or weibull (either with `cut short by <column>`)"
            ))),
        }
    }

    /// The family's word in the cell language.
    pub fn name(&self) -> &'static str {
        match self {
            Family::Normal => NORMAL,
            Family::Bernoulli => BERNOULLI,
            Family::Binomial { .. } => BINOMIAL,
            Family::Poisson => POISSON,
            Family::GammaPoisson => GAMMA_POISSON,
            Family::Beta => BETA,
            Family::Levels => LEVELS,
            Family::Times { form, .. } => form.word(),
            Family::Graded => GRADED,
        }
    }

    /// The link's name, for printing.
    pub fn link_name(&self) -> &'static str {
        match self {
            Family::Normal => "identity",
            Family::Bernoulli | Family::Binomial { .. } | Family::Beta => "logit",
            Family::Poisson | Family::GammaPoisson | Family::Times { .. } => "log",
            Family::Levels => "softmax",
            Family::Graded => "cumulative logit",
        }
    }

    /// Whether the family has a spread parameter.
    pub fn has_spread(&self) -> bool {
        matches!(self, Family::Normal)
    }

    /// The label of the family's positive parameter beside the
    /// coefficients (sampled as its log): `spread` for the normal family,
    /// `overdispersion` for the gamma-poisson family, `precision` for the
    /// beta family; `None` for the others.
    pub fn family_parameter(&self) -> Option<&'static str> {
        match self {
            Family::Normal => Some(SPREAD),
            Family::GammaPoisson => Some(OVERDISPERSION),
            Family::Beta => Some(PRECISION),
            Family::Times { form: TimeForm::Weibull, .. } => Some(survival::SHAPE),
            _ => None,
        }
    }

    /// The mean of one outcome (per trial, for binomial) from the linear
    /// predictor. For the levels family, the probability of a level against
    /// the reference alone (the two-level softmax); the probabilities of all
    /// levels come from [`softmax::level_probabilities`].
    pub fn inverse_link(&self, eta: f64) -> f64 {
        match self {
            Family::Normal => eta,
            Family::Bernoulli | Family::Binomial { .. } | Family::Beta | Family::Levels | Family::Graded => logistic(eta),
            Family::Poisson | Family::GammaPoisson | Family::Times { .. } => eta.exp(),
        }
    }

    /// The linear predictor that gives mean `mu` (clamped away from the
    /// edges of the mean's range, for starting values and default priors);
    /// for the levels family, the log odds of a level against the reference
    /// when `mu` is its share of the two.
    pub fn link(&self, mu: f64) -> f64 {
        match self {
            Family::Normal => mu,
            Family::Bernoulli | Family::Binomial { .. } | Family::Beta | Family::Levels | Family::Graded => {
                let p = mu.clamp(1e-3, 1.0 - 1e-3);
                (p / (1.0 - p)).ln()
            }
            Family::Poisson | Family::GammaPoisson | Family::Times { .. } => mu.max(1e-3).ln(),
        }
    }
}

/// The logistic function 1 / (1 + e^-x), computed without overflow.
pub fn logistic(x: f64) -> f64 {
    if x >= 0.0 {
        1.0 / (1.0 + (-x).exp())
    } else {
        let e = x.exp();
        e / (1.0 + e)
    }
}

/// log(1 + e^x), computed without overflow or loss of precision.
pub fn softplus(x: f64) -> f64 {
    if x > 0.0 {
        x + (-x).exp().ln_1p()
    } else {
        x.exp().ln_1p()
    }
}
