//! Prior distributions and the parameter groups they are declared for.
//!
//! A prior is declared per group (`prior slopes: normal(0, 2)`); undeclared
//! groups get defaults scaled to the data (see [`crate::model::defaults`]).
//! Each prior gives its full log density (normalising constant included, so
//! it can be checked against a reference library) and the derivative of that
//! log density, which the model's analytic gradient needs.

use std::f64::consts::PI;
use std::fmt;

use statrs::function::gamma::ln_gamma;

use super::error::ModelError;

/// The parameter groups a `prior` line can address.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum PriorGroup {
    /// The intercept, or one intercept per level of the first category term.
    Intercepts,
    /// Slopes of real predictors (plain, per level, polynomial) and offsets
    /// of later category terms.
    Slopes,
    /// Weights of spline basis functions.
    Weights,
    /// The residual spread of a normal outcome (positive).
    Spread,
    /// The spreads of pooled groups' departures (positive).
    PooledSpreads,
    /// The overdispersion of a gamma-poisson outcome (positive).
    Overdispersion,
    /// The precision of a beta outcome (positive).
    Precision,
    /// The shape of a Weibull time (positive).
    Shape,
    /// The gaps between the cut points of a graded outcome (positive).
    Gaps,
}

impl PriorGroup {
    /// Every group, in the order prior lines are documented.
    pub const ALL: [PriorGroup; 9] = [
        PriorGroup::Intercepts,
        PriorGroup::Slopes,
        PriorGroup::Weights,
        PriorGroup::Spread,
        PriorGroup::PooledSpreads,
        PriorGroup::Overdispersion,
        PriorGroup::Precision,
        PriorGroup::Shape,
        PriorGroup::Gaps,
    ];

    /// The group words of a `prior` line.
    pub fn words() -> Vec<&'static str> {
        Self::ALL.iter().map(|g| g.name()).collect()
    }

    /// The word used for the group in a `prior` line.
    pub fn name(self) -> &'static str {
        match self {
            PriorGroup::Intercepts => "intercepts",
            PriorGroup::Slopes => "slopes",
            PriorGroup::Weights => "weights",
            PriorGroup::Spread => "spread",
            PriorGroup::PooledSpreads => "pooled spreads",
            PriorGroup::Overdispersion => "overdispersion",
            PriorGroup::Precision => "precision",
            PriorGroup::Shape => "shape",
            PriorGroup::Gaps => "gaps",
        }
    }

    /// Read a group word (`spline weights` is accepted for `weights`).
    pub fn parse(word: &str) -> Option<Self> {
        let word = word.split_whitespace().collect::<Vec<_>>().join(" ");
        if let Some(group) = Self::ALL.iter().find(|g| g.name() == word) {
            return Some(*group);
        }
        match word.as_str() {
            "intercept" => Some(PriorGroup::Intercepts),
            "slope" => Some(PriorGroup::Slopes),
            "spline weights" => Some(PriorGroup::Weights),
            _ => None,
        }
    }

    /// Whether the group's parameters are positive.
    pub fn is_positive(self) -> bool {
        matches!(
            self,
            PriorGroup::Spread
                | PriorGroup::PooledSpreads
                | PriorGroup::Overdispersion
                | PriorGroup::Precision
                | PriorGroup::Shape
                | PriorGroup::Gaps
        )
    }
}

/// A prior distribution for one parameter.
#[derive(Debug, Clone, PartialEq)]
pub enum Prior {
    Normal { mean: f64, sd: f64 },
    StudentT { df: f64, location: f64, scale: f64 },
    Exponential { rate: f64 },
    HalfNormal { sd: f64 },
    LogNormal { log_mean: f64, log_sd: f64 },
    /// The law of `1/G` for `G` gamma with shape `shape` and rate `scale`:
    /// density `scaleᵃ/Γ(a) · x^(−a−1) · e^(−scale/x)` on x > 0.
    InverseGamma { shape: f64, scale: f64 },
    Uniform { lower: f64, upper: f64 },
}

impl Prior {
    /// Read a prior such as `normal(0, 2)` or `student(0, 1, 3)` (Student's t
    /// written like the normal, centre and scale first, then the degrees of
    /// freedom that set how heavy its tails are).
    pub fn parse(text: &str) -> Result<Prior, ModelError> {
        let text = text.trim();
        let open = text.find('(').filter(|_| text.ends_with(')')).ok_or_else(|| {
            ModelError::syntax(format!(
                "`{text}` is not a distribution; write it like `normal(0, 2)`"
            ))
        })?;
        let name = text[..open].trim();
        let args = parse_numbers(&text[open + 1..text.len() - 1], text)?;
        let prior = build_prior(name, &args, text)?;
        prior.check_parameters(text)?;
        Ok(prior)
    }

    /// Whether the prior puts all its mass on positive values.
    pub fn is_positive_only(&self) -> bool {
        match self {
            Prior::Exponential { .. } | Prior::HalfNormal { .. } | Prior::LogNormal { .. } | Prior::InverseGamma { .. } => true,
            Prior::Uniform { lower, .. } => *lower >= 0.0,
            Prior::Normal { .. } | Prior::StudentT { .. } => false,
        }
    }

    /// Whether the prior gives positive mass to negative values.
    pub fn allows_negative(&self) -> bool {
        match self {
            Prior::Uniform { lower, .. } => *lower < 0.0,
            _ => !self.is_positive_only(),
        }
    }

    /// Log density at `x` (full normalising constant) and its derivative.
    /// Outside the support the log density is `-inf` and the derivative 0.
    pub fn log_density_and_derivative(&self, x: f64) -> (f64, f64) {
        match *self {
            Prior::Normal { mean, sd } => normal_log_density(x, mean, sd),
            Prior::StudentT { df, location, scale } => student_t_log_density(x, df, location, scale),
            Prior::Exponential { rate } if x >= 0.0 => (rate.ln() - rate * x, -rate),
            Prior::HalfNormal { sd } if x >= 0.0 => {
                let (lp, d) = normal_log_density(x, 0.0, sd);
                (lp + 2f64.ln(), d)
            }
            Prior::LogNormal { log_mean, log_sd } if x > 0.0 => {
                let (lp, d) = normal_log_density(x.ln(), log_mean, log_sd);
                (lp - x.ln(), (d - 1.0) / x)
            }
            Prior::InverseGamma { shape, scale } if x > 0.0 => inverse_gamma_log_density(x, shape, scale),
            Prior::Uniform { lower, upper } if x >= lower && x <= upper => (-(upper - lower).ln(), 0.0),
            _ => (f64::NEG_INFINITY, 0.0),
        }
    }

    /// A point well inside the support, used to start optimisers and
    /// samplers when the data-based start falls outside it.
    pub fn central_point(&self) -> f64 {
        match *self {
            Prior::Normal { mean, .. } => mean,
            Prior::StudentT { location, .. } => location,
            Prior::Exponential { rate } => 1.0 / rate,
            Prior::HalfNormal { sd } => sd * (2.0 / PI).sqrt(),
            Prior::LogNormal { log_mean, .. } => log_mean.exp(),
            // the mode, which every inverse-gamma has (its mean needs shape > 1)
            Prior::InverseGamma { shape, scale } => scale / (shape + 1.0),
            Prior::Uniform { lower, upper } => 0.5 * (lower + upper),
        }
    }

    /// A typical distance of a draw from [`Prior::central_point`]: the sd or
    /// scale where the prior has one, a quarter of a uniform's width.
    /// Chains start this many units apart (see `infer::fit`).
    pub fn typical_distance(&self) -> f64 {
        match *self {
            Prior::Normal { sd, .. } | Prior::HalfNormal { sd } => sd,
            Prior::StudentT { scale, .. } => scale,
            Prior::Exponential { rate } => 1.0 / rate,
            Prior::LogNormal { log_mean, log_sd } => log_mean.exp() * log_sd,
            // the log of an inverse-gamma draw has sd √ψ′(a) ≈ 1/√a, so a
            // draw lies about mode/√a from the mode (its sd needs shape > 2)
            Prior::InverseGamma { shape, scale } => scale / (shape + 1.0) / shape.sqrt(),
            Prior::Uniform { lower, upper } => 0.25 * (upper - lower),
        }
    }

    /// Whether `x` is in the prior's support.
    pub fn contains(&self, x: f64) -> bool {
        self.log_density_and_derivative(x).0 > f64::NEG_INFINITY
    }

    fn check_parameters(&self, text: &str) -> Result<(), ModelError> {
        let bad = |what: &str| Err(ModelError::syntax(format!("`{text}`: {what}")));
        match *self {
            Prior::Normal { sd, .. } | Prior::HalfNormal { sd } if sd <= 0.0 => bad("the sd must be positive"),
            Prior::LogNormal { log_sd, .. } if log_sd <= 0.0 => bad("the sd of the log must be positive"),
            Prior::StudentT { df, scale, .. } if df <= 0.0 || scale <= 0.0 => {
                bad("degrees of freedom and scale must be positive")
            }
            Prior::Exponential { rate } if rate <= 0.0 => bad("the rate must be positive"),
            Prior::InverseGamma { shape, scale } if shape <= 0.0 || scale <= 0.0 => bad("the shape and the scale must be positive"),
            Prior::Uniform { lower, upper } if lower >= upper => bad("the lower end must be below the upper end"),
            _ => Ok(()),
        }
    }
}

impl fmt::Display for Prior {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let n = short_number;
        match *self {
            Prior::Normal { mean, sd } => write!(f, "normal({}, {})", n(mean), n(sd)),
            Prior::StudentT { df, location, scale } => {
                write!(f, "{STUDENT}({}, {}, {})", n(location), n(scale), n(df))
            }
            Prior::Exponential { rate } => write!(f, "exponential({})", n(rate)),
            Prior::HalfNormal { sd } => write!(f, "half_normal({})", n(sd)),
            Prior::LogNormal { log_mean, log_sd } => write!(f, "lognormal({}, {})", n(log_mean), n(log_sd)),
            Prior::InverseGamma { shape, scale } => write!(f, "{INVERSE_GAMMA}({}, {})", n(shape), n(scale)),
            Prior::Uniform { lower, upper } => write!(f, "uniform({}, {})", n(lower), n(upper)),
        }
    }
}

/// A number with four significant digits and no trailing zeros, for
/// printing priors and notes.
pub fn short_number(x: f64) -> String {
    if x == 0.0 || !x.is_finite() {
        return format!("{x}");
    }
    let magnitude = x.abs().log10().floor() as i32;
    if !(-4..6).contains(&magnitude) {
        return format!("{x:.3e}");
    }
    let decimals = (3 - magnitude).max(0) as usize;
    let text = format!("{x:.decimals$}");
    if text.contains('.') {
        text.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        text
    }
}

fn normal_log_density(x: f64, mean: f64, sd: f64) -> (f64, f64) {
    let z = (x - mean) / sd;
    (-0.5 * z * z - sd.ln() - 0.5 * (2.0 * PI).ln(), -z / sd)
}

fn student_t_log_density(x: f64, df: f64, location: f64, scale: f64) -> (f64, f64) {
    let z = (x - location) / scale;
    let constant = ln_gamma(0.5 * (df + 1.0)) - ln_gamma(0.5 * df) - 0.5 * (df * PI).ln() - scale.ln();
    let lp = constant - 0.5 * (df + 1.0) * (z * z / df).ln_1p();
    let d = -(df + 1.0) * z / (scale * (df + z * z));
    (lp, d)
}

/// `ln p(x)` and its derivative for the inverse gamma of `shape` a and
/// `scale` b: `a·ln b − ln Γ(a) − (a + 1)·ln x − b/x`, derivative
/// `−(a + 1)/x + b/x²`.
fn inverse_gamma_log_density(x: f64, shape: f64, scale: f64) -> (f64, f64) {
    let lp = shape * scale.ln() - ln_gamma(shape) - (shape + 1.0) * x.ln() - scale / x;
    (lp, (scale / x - (shape + 1.0)) / x)
}

fn parse_numbers(inner: &str, whole: &str) -> Result<Vec<f64>, ModelError> {
    inner
        .split(',')
        .map(|a| {
            let a = a.trim();
            a.parse::<f64>().ok().filter(|v| v.is_finite()).ok_or_else(|| {
                ModelError::syntax(format!("`{whole}`: `{a}` is not a number"))
            })
        })
        .collect()
}

/// Student's t as a `prior` line writes it: `student(centre, scale, df)`.
pub const STUDENT: &str = "student";
/// The inverse gamma as a `prior` line writes it: `inverse_gamma(shape, scale)`.
pub const INVERSE_GAMMA: &str = "inverse_gamma";
/// The distributions a `prior` line may name, each written as a call.
pub const PRIOR_DISTRIBUTIONS: &[&str] =
    &["normal", STUDENT, "exponential", "half_normal", "lognormal", INVERSE_GAMMA, "uniform"];
/// The distributions a positive parameter (a spread, a shape, a gap) may take.
pub const POSITIVE_DISTRIBUTIONS: &[&str] = &["exponential", "half_normal", "lognormal", INVERSE_GAMMA];

fn build_prior(name: &str, args: &[f64], text: &str) -> Result<Prior, ModelError> {
    if !PRIOR_DISTRIBUTIONS.contains(&name) {
        return Err(unknown_prior(name, args.len(), text));
    }
    match (name, args) {
        ("normal", [mean, sd]) => Ok(Prior::Normal { mean: *mean, sd: *sd }),
        (STUDENT, [location, scale, df]) => Ok(Prior::StudentT { df: *df, location: *location, scale: *scale }),
        ("exponential", [rate]) => Ok(Prior::Exponential { rate: *rate }),
        ("half_normal", [sd]) => Ok(Prior::HalfNormal { sd: *sd }),
        ("lognormal", [m, s]) => Ok(Prior::LogNormal { log_mean: *m, log_sd: *s }),
        (INVERSE_GAMMA, [shape, scale]) => Ok(Prior::InverseGamma { shape: *shape, scale: *scale }),
        ("uniform", [lower, upper]) => Ok(Prior::Uniform { lower: *lower, upper: *upper }),
        _ => Err(unknown_prior(name, args.len(), text)),
    }
}

fn unknown_prior(name: &str, given: usize, text: &str) -> ModelError {
    let wanted = match name {
        "normal" => "2 numbers (mean, sd)",
        STUDENT => "3 numbers (centre, scale, degrees of freedom)",
        "exponential" => "1 number (rate)",
        "half_normal" => "1 number (sd)",
        "lognormal" => "2 numbers (mean and sd of the log)",
        INVERSE_GAMMA => "2 numbers (shape, scale)",
        "uniform" => "2 numbers (lower, upper)",
        _ => {
            return ModelError::syntax(format!(
                "`{text}`: unknown distribution `{name}`; use {} or {}",
                PRIOR_DISTRIBUTIONS[..PRIOR_DISTRIBUTIONS.len() - 1].join(", "),
                PRIOR_DISTRIBUTIONS[PRIOR_DISTRIBUTIONS.len() - 1]
            ))
        }
    };
    ModelError::syntax(format!("`{text}`: {name} takes {wanted}, not {given}"))
}

impl Prior {
    /// One draw from the prior with `rng` (for prior predictive checks and
    /// simulation-based calibration; seed the generator).
    pub fn sample<R: rand::Rng + ?Sized>(&self, rng: &mut R) -> f64 {
        use rand_distr::{Distribution, Exp, Gamma, LogNormal, StandardNormal, StudentT};
        match *self {
            Prior::Normal { mean, sd } => {
                let e: f64 = StandardNormal.sample(rng);
                mean + sd * e
            }
            Prior::StudentT { df, location, scale } => match StudentT::new(df) {
                Ok(t) => location + scale * t.sample(rng),
                Err(_) => location,
            },
            Prior::Exponential { rate } => Exp::new(rate).map(|e| e.sample(rng)).unwrap_or(1.0 / rate),
            Prior::HalfNormal { sd } => {
                let e: f64 = StandardNormal.sample(rng);
                (sd * e).abs()
            }
            Prior::LogNormal { log_mean, log_sd } => {
                LogNormal::new(log_mean, log_sd).map(|d| d.sample(rng)).unwrap_or(log_mean.exp())
            }
            // 1/G with G gamma of shape a and rate b (scale 1/b)
            Prior::InverseGamma { shape, scale } => {
                Gamma::new(shape, 1.0 / scale).map(|g| 1.0 / g.sample(rng)).unwrap_or(scale / (shape + 1.0))
            }
            Prior::Uniform { lower, upper } => lower + (upper - lower) * rand::RngExt::random::<f64>(rng),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Every distribution completion offers is one the parser builds: the
    /// list and the parser's match stay in step. Arguments inside each
    /// distribution's support (README "Statements": `prior slopes: normal(0, 2)`).
    #[test]
    fn every_listed_distribution_parses() {
        for name in PRIOR_DISTRIBUTIONS {
            let built = ["(1)", "(0, 2)", "(1, 2)", "(0, 2, 3)"].iter().any(|args| Prior::parse(&format!("{name}{args}")).is_ok());
            assert!(built, "{name} is listed but no argument count parses");
        }
        assert!(Prior::parse("cauchy(0, 1)").is_err());
        let groups: Vec<Option<PriorGroup>> = PriorGroup::words().iter().map(|w| PriorGroup::parse(w)).collect();
        assert_eq!(groups, PriorGroup::ALL.map(Some));
    }
}
