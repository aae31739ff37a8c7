//! Summaries of draws: mean, standard deviation, a central quantile interval,
//! the highest-density interval (HDI) on request, and the posterior
//! probability of being above zero.
//!
//! The interval's probability mass travels with it ([`Interval::mass`]) so
//! every table can print the width it shows. Quantiles interpolate linearly
//! between order statistics (position `p (n − 1)` in the sorted draws), the
//! rule most numerical libraries use by default.

use super::{Draws, DrawsError};

/// The default interval mass.
pub const DEFAULT_MASS: f64 = 0.9;

/// An interval of a parameter's posterior together with the probability
/// mass it was asked to hold.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Interval {
    pub lower: f64,
    pub upper: f64,
    /// Posterior mass the interval was built to contain, e.g. 0.9.
    pub mass: f64,
}

/// What to put in a summary.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SummarySpec {
    /// Mass of the intervals, strictly between 0 and 1; default 0.9.
    pub mass: f64,
    /// Also compute the highest-density interval.
    pub hdi: bool,
}

impl Default for SummarySpec {
    fn default() -> Self {
        SummarySpec { mass: DEFAULT_MASS, hdi: false }
    }
}

/// Summary of one parameter's draws.
#[derive(Debug, Clone, PartialEq)]
pub struct Summary {
    pub name: String,
    pub mean: f64,
    /// Standard deviation of the draws (divisor `n − 1`).
    pub sd: f64,
    /// Central interval between the `(1 − mass)/2` and `(1 + mass)/2` quantiles.
    pub interval: Interval,
    /// Shortest interval holding `mass` of the draws, when asked for.
    pub hdi: Option<Interval>,
    /// Share of draws above zero.
    pub prob_positive: f64,
}

impl Draws {
    /// Summaries of every parameter, in storage order.
    pub fn summarise(&self, spec: &SummarySpec) -> Result<Vec<Summary>, DrawsError> {
        self.names.iter().map(|n| self.summary_of(n, spec)).collect()
    }

    /// Summary of the parameter labelled `name`.
    pub fn summary_of(&self, name: &str, spec: &SummarySpec) -> Result<Summary, DrawsError> {
        let mut s = summarise_values(self.require(name)?, spec)?;
        s.name = name.to_string();
        Ok(s)
    }
}

/// Summary of a bare vector of draws (a derived quantity, say); `name` is
/// left empty for the caller to fill.
pub fn summarise_values(draws: &[f64], spec: &SummarySpec) -> Result<Summary, DrawsError> {
    check_mass(spec.mass)?;
    if draws.is_empty() {
        return Err(DrawsError::NoDraws);
    }
    let n = draws.len() as f64;
    let mean = draws.iter().sum::<f64>() / n;
    let sd = if draws.len() > 1 {
        (draws.iter().map(|x| (x - mean) * (x - mean)).sum::<f64>() / (n - 1.0)).sqrt()
    } else {
        f64::NAN
    };
    let sorted = sorted(draws);
    Ok(Summary {
        name: String::new(),
        mean,
        sd,
        interval: central_interval(&sorted, spec.mass),
        hdi: spec.hdi.then(|| shortest_interval(&sorted, spec.mass)),
        prob_positive: draws.iter().filter(|&&x| x > 0.0).count() as f64 / n,
    })
}

/// Central quantile interval holding `mass` of the draws.
pub fn quantile_interval(draws: &[f64], mass: f64) -> Result<Interval, DrawsError> {
    check_mass(mass)?;
    if draws.is_empty() {
        return Err(DrawsError::NoDraws);
    }
    Ok(central_interval(&sorted(draws), mass))
}

/// Highest-density interval: the shortest interval between two draws that
/// holds at least `ceil(mass · n)` of the `n` draws.
pub fn hdi(draws: &[f64], mass: f64) -> Result<Interval, DrawsError> {
    check_mass(mass)?;
    if draws.is_empty() {
        return Err(DrawsError::NoDraws);
    }
    Ok(shortest_interval(&sorted(draws), mass))
}

/// The `p` quantile of draws sorted ascending, interpolating linearly
/// between order statistics at position `p (n − 1)`.
pub fn quantile_sorted(sorted: &[f64], p: f64) -> f64 {
    let h = p * (sorted.len() - 1) as f64;
    let lo = h.floor() as usize;
    let hi = (lo + 1).min(sorted.len() - 1);
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

/// The `p` quantile of unsorted draws; see [`quantile_sorted`].
pub fn quantile(draws: &[f64], p: f64) -> f64 {
    quantile_sorted(&sorted(draws), p)
}

fn check_mass(mass: f64) -> Result<(), DrawsError> {
    if mass > 0.0 && mass < 1.0 {
        Ok(())
    } else {
        Err(DrawsError::BadMass(mass))
    }
}

fn sorted(draws: &[f64]) -> Vec<f64> {
    let mut s = draws.to_vec();
    s.sort_by(f64::total_cmp);
    s
}

fn central_interval(sorted: &[f64], mass: f64) -> Interval {
    let tail = (1.0 - mass) / 2.0;
    Interval { lower: quantile_sorted(sorted, tail), upper: quantile_sorted(sorted, 1.0 - tail), mass }
}

fn shortest_interval(sorted: &[f64], mass: f64) -> Interval {
    let n = sorted.len();
    let inside = ((mass * n as f64).ceil() as usize).clamp(1, n);
    let (start, _) = (0..=n - inside)
        .map(|i| (i, sorted[i + inside - 1] - sorted[i]))
        .fold((0, f64::INFINITY), |best, (i, w)| if w < best.1 { (i, w) } else { best });
    Interval { lower: sorted[start], upper: sorted[start + inside - 1], mass }
}
