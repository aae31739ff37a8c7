//! The posterior survival and hazard curves of a time model at the two
//! settings a contrast compares, for its figure.
//!
//! A contrast of a time gives one number per draw; the curves show where
//! along the time axis the two settings part. For each draw and each time
//! on a grid, the survival function `S(t) = P(T > t)` is averaged over the
//! contrast's rows (one held row, or every row of the table with `over
//! rows`: then it is the survival of a unit drawn from the table), and the
//! hazard is that average's own, `Σ f_i(t) / Σ S_i(t)` — each row's hazard
//! weighted by its share of the units still without the event, which for
//! one row is the row's hazard `(k/t)·(t/λ)^k`. The weights are formed from
//! log survival less its largest value, so late times, where every S_i
//! underflows, keep a hazard. Summaries (mean and central interval of the
//! contrast's mass) come last, per grid time.

use serde::Serialize;

use crate::draws::summary::summarise_values;
use crate::draws::SummarySpec;
use crate::model::family::survival::{hazard, log_survival, TimeShape};

use super::error::QueryError;

/// Grid times of the curves.
pub const CURVE_POINTS: usize = 60;

/// A curve summarised per grid time.
#[derive(Debug, Clone, PartialEq, Serialize, Default)]
pub struct Band {
    pub mean: Vec<f64>,
    pub lower: Vec<f64>,
    pub upper: Vec<f64>,
}

/// The curves at one setting of the contrasted predictor.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SettingCurves {
    /// The setting, as the contrast writes it (`25`, `peat`).
    pub setting: String,
    /// `S(t)`, the share of units still without the event at each time.
    pub survival: Band,
    /// The hazard at each time, events per unit of time among those
    /// still without one.
    pub hazard: Band,
}

/// Survival and hazard curves at the contrast's two settings.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TimeCurves {
    /// Grid times, increasing, all positive.
    pub times: Vec<f64>,
    /// The `to` setting, then the `from` setting.
    pub settings: Vec<SettingCurves>,
    /// Interval mass of the bands.
    pub mass: f64,
}

/// Most posterior draws the curves are summarised from: a band's ends
/// settle long before, and over rows every draw costs a pass over the
/// table at every grid time.
pub const CURVE_DRAWS: usize = 400;

/// The draws the curves use: all of `total` up to [`CURVE_DRAWS`], else
/// that many spread evenly through them.
pub fn curve_draws(total: usize) -> Vec<usize> {
    if total <= CURVE_DRAWS {
        return (0..total).collect();
    }
    (0..CURVE_DRAWS).map(|i| i * total / CURVE_DRAWS).collect()
}

/// `CURVE_POINTS` evenly spaced times from `end / CURVE_POINTS` to `end`
/// (the hazard of a shape below 1 is infinite at 0, so the grid starts
/// after it).
pub fn curve_times(end: f64) -> Vec<f64> {
    (1..=CURVE_POINTS).map(|i| end * i as f64 / CURVE_POINTS as f64).collect()
}

/// One draw's averaged survival and hazard at each time of `times`, from
/// the rows' log mean times `etas` and the draw's shape.
pub fn curves_of_draw(etas: &[f64], shape: TimeShape, times: &[f64]) -> (Vec<f64>, Vec<f64>) {
    let n = etas.len() as f64;
    times
        .iter()
        .map(|&t| {
            let logs: Vec<f64> = etas.iter().map(|&eta| log_survival(t, eta, shape)).collect();
            let top = logs.iter().copied().fold(f64::NEG_INFINITY, f64::max);
            let (mut weights, mut weighted) = (0.0, 0.0);
            for (&eta, &l) in etas.iter().zip(&logs) {
                let w = (l - top).exp();
                weights += w;
                weighted += w * hazard(t, eta, shape);
            }
            let survival = logs.iter().map(|l| l.exp()).sum::<f64>() / n;
            (survival, weighted / weights)
        })
        .unzip()
}

/// Summarise per-draw curves (`per_draw[d][i]`, draw d at time i) into a
/// band of `mass` per time.
pub fn band_of(per_draw: &[Vec<f64>], times: usize, mass: f64) -> Result<Band, QueryError> {
    let spec = SummarySpec { mass, hdi: false };
    let mut band = Band::default();
    for i in 0..times {
        let values: Vec<f64> = per_draw.iter().map(|d| d[i]).collect();
        let s = summarise_values(&values, &spec)?;
        band.mean.push(s.mean);
        band.lower.push(s.interval.lower);
        band.upper.push(s.interval.upper);
    }
    Ok(band)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Source: for one row the hazard of a Weibull time is
    /// `(k/λ)(t/λ)^(k−1)` and its survival `exp(−(t/λ)^k)` (Johnson, Kotz &
    /// Balakrishnan 1994, ch. 21; recalled), λ = e^η/Γ(1 + 1/k); for two
    /// rows the averaged curve's hazard is `−d log S̄/dt`, here by central
    /// differences of the averaged survival.
    #[test]
    fn one_row_is_the_weibull_and_two_rows_the_derivative_of_their_mean() {
        let shape = TimeShape::from_log_shape(0.4);
        let k = shape.k;
        let lambda = |eta: f64| eta.exp() / statrs::function::gamma::gamma(1.0 + 1.0 / k);
        let times = [0.5, 3.0, 11.0];
        let (s, h) = curves_of_draw(&[2.0], shape, &times);
        for (i, &t) in times.iter().enumerate() {
            let l = lambda(2.0);
            assert!((s[i] - (-(t / l).powf(k)).exp()).abs() < 1e-12);
            let want = k / l * (t / l).powf(k - 1.0);
            assert!((h[i] - want).abs() < 1e-10 * want, "t {t}: {} vs {want}", h[i]);
        }
        let etas = [1.2, 2.6];
        let mean_s = |t: f64| curves_of_draw(&etas, shape, &[t]).0[0];
        for &t in &times {
            let step = 1e-5 * t;
            let want = -(mean_s(t + step).ln() - mean_s(t - step).ln()) / (2.0 * step);
            let got = curves_of_draw(&etas, shape, &[t]).1[0];
            assert!((got - want).abs() < 1e-6 * want, "t {t}: {got} vs {want}");
        }
    }

    #[test]
    fn many_draws_are_thinned_evenly_and_few_kept_whole() {
        assert_eq!(curve_draws(7), (0..7).collect::<Vec<_>>());
        let kept = curve_draws(4000);
        assert_eq!((kept.len(), kept[0], kept[1], kept[399]), (CURVE_DRAWS, 0, 10, 3990));
    }

    /// Far in the tail every row's survival underflows to 0; the units
    /// still without the event are then all of the longest-lived row, so
    /// the averaged hazard is that row's own.
    #[test]
    fn late_times_keep_a_hazard() {
        let shape = TimeShape::from_log_shape(0.8);
        let (s, h) = curves_of_draw(&[0.0, 0.5], shape, &[400.0]);
        assert_eq!(s[0], 0.0);
        let alone = curves_of_draw(&[0.5], shape, &[400.0]).1[0];
        assert!(h[0].is_finite() && (h[0] - alone).abs() < 1e-9 * alone, "{} vs {alone}", h[0]);
    }
}
