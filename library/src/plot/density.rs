//! Kernel density estimates and order statistics for the density figures.
//!
//! A Gaussian kernel with Silverman's rule-of-thumb bandwidth: no tuning to
//! expose, and smooth enough for a few thousand posterior draws.

use std::f64::consts::PI;

/// A density evaluated on an even grid.
#[derive(Debug, Clone, PartialEq)]
pub struct DensityCurve {
    /// Grid points, increasing.
    pub xs: Vec<f64>,
    /// Estimated density at each grid point.
    pub ys: Vec<f64>,
}

/// The `p`-quantile of sorted finite values, interpolating linearly between
/// order statistics (Hyndman & Fan 1996, definition 7).
pub fn quantile(sorted: &[f64], p: f64) -> f64 {
    match sorted.len() {
        0 => f64::NAN,
        1 => sorted[0],
        n => {
            let h = (n - 1) as f64 * p.clamp(0.0, 1.0);
            let lo = h.floor() as usize;
            let hi = (lo + 1).min(n - 1);
            sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
        }
    }
}

/// The finite values, sorted.
pub fn sorted_finite(values: &[f64]) -> Vec<f64> {
    let mut v: Vec<f64> = values.iter().copied().filter(|x| x.is_finite()).collect();
    v.sort_by(f64::total_cmp);
    v
}

/// Silverman's rule-of-thumb bandwidth, 0.9 · min(sd, IQR/1.34) · n^(-1/5)
/// (Silverman 1986, *Density Estimation*, eq. 3.31). Falls back to the
/// standard deviation alone when the IQR is zero, and to a small positive
/// width when every value is the same.
pub fn silverman_bandwidth(values: &[f64]) -> f64 {
    let sorted = sorted_finite(values);
    let n = sorted.len();
    if n < 2 {
        return 1.0;
    }
    let mean = sorted.iter().sum::<f64>() / n as f64;
    let sd = (sorted.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1) as f64).sqrt();
    let iqr = quantile(&sorted, 0.75) - quantile(&sorted, 0.25);
    let spread = if iqr > 0.0 { sd.min(iqr / 1.34) } else { sd };
    let h = 0.9 * spread * (n as f64).powf(-0.2);
    if h > 0.0 {
        h
    } else {
        1e-3 * mean.abs().max(1.0)
    }
}

/// Gaussian kernel density estimate of `values` on `points` even steps over
/// `[lo, hi]`, with Silverman's bandwidth.
pub fn kde(values: &[f64], lo: f64, hi: f64, points: usize) -> DensityCurve {
    kde_with_bandwidth(values, silverman_bandwidth(values), lo, hi, points)
}

/// Gaussian kernel density estimate with a given bandwidth `h`.
pub fn kde_with_bandwidth(values: &[f64], h: f64, lo: f64, hi: f64, points: usize) -> DensityCurve {
    let sorted = sorted_finite(values);
    let points = points.max(2);
    let step = (hi - lo) / (points - 1) as f64;
    let xs: Vec<f64> = (0..points).map(|i| lo + step * i as f64).collect();
    let norm = 1.0 / (sorted.len().max(1) as f64 * h * (2.0 * PI).sqrt());
    let reach = 6.0 * h;
    let ys = xs
        .iter()
        .map(|&x| {
            let start = sorted.partition_point(|v| *v < x - reach);
            let end = sorted.partition_point(|v| *v <= x + reach);
            let sum: f64 = sorted[start..end]
                .iter()
                .map(|v| (-0.5 * ((x - v) / h).powi(2)).exp())
                .sum();
            sum * norm
        })
        .collect();
    DensityCurve { xs, ys }
}

/// Evenly spaced picks of at most `keep` indices out of `0..n`, first and
/// last included, for thinning many draws down to what a figure can show.
pub fn thin_indices(n: usize, keep: usize) -> Vec<usize> {
    if n <= keep {
        return (0..n).collect();
    }
    if keep <= 1 {
        return vec![0];
    }
    (0..keep)
        .map(|i| (i as f64 * (n - 1) as f64 / (keep - 1) as f64).round() as usize)
        .collect()
}
