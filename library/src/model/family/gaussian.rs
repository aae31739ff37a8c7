//! The normal family through sufficient statistics.
//!
//! With residuals `r = y − Xβ`, the log-likelihood
//! `−n/2·log 2π − n·log σ − rᵀr / (2σ²)` depends on the data only through
//! `XᵀX`, `Xᵀy`, `yᵀy` and `n`, computed once when the model is built; each
//! evaluation then costs O(p²) whatever the number of rows.
//!
//! To keep `rᵀr` accurate when the outcome's mean is large against its
//! spread, the statistics are of the centred outcome `y − ȳ`. Every row has
//! exactly one intercept column equal to 1 (the overall intercept, or one
//! level of the first category), so `Xβ − ȳ = X(β − ȳ·e)` with `e` the
//! indicator of the intercept columns.

use nalgebra::{DMatrix, DVector};

/// Sufficient statistics of a normal linear model.
#[derive(Debug, Clone, PartialEq)]
pub struct GaussianStats {
    xtx: DMatrix<f64>,
    xty: DVector<f64>,
    yty: f64,
    n: f64,
    y_mean: f64,
    intercept_columns: Vec<usize>,
}

impl GaussianStats {
    /// Statistics of design `x` and outcome `y`; `intercept_columns` are
    /// the columns that sum to one in every row.
    pub fn new(x: &DMatrix<f64>, y: &[f64], intercept_columns: Vec<usize>) -> Self {
        let n = y.len() as f64;
        let y_mean = y.iter().sum::<f64>() / n;
        let yc = DVector::from_iterator(y.len(), y.iter().map(|v| v - y_mean));
        GaussianStats {
            xtx: x.transpose() * x,
            xty: x.transpose() * &yc,
            yty: yc.dot(&yc),
            n,
            y_mean,
            intercept_columns,
        }
    }

    /// Statistics gathered elsewhere (a table on disk, `model::disk_sums`):
    /// `xty` and `yty` of the outcome centred at `y_mean`.
    #[cfg(feature = "on_disk")]
    pub(crate) fn from_sums(xtx: DMatrix<f64>, xty: DVector<f64>, yty: f64, n: f64, y_mean: f64, intercept_columns: Vec<usize>) -> Self {
        GaussianStats { xtx, xty, yty, n, y_mean, intercept_columns }
    }

    /// The log-likelihood at `beta` and `sigma = e^log_sigma`, with its
    /// gradient in `beta` added to `grad_beta`; returns the value and the
    /// derivative in `log_sigma`.
    pub fn log_likelihood_and_gradient(&self, beta: &[f64], log_sigma: f64, grad_beta: &mut [f64]) -> (f64, f64) {
        let shifted = self.shifted(beta);
        let xtx_beta = &self.xtx * &shifted;
        let rss = self.yty - 2.0 * shifted.dot(&self.xty) + shifted.dot(&xtx_beta);
        let precision = (-2.0 * log_sigma).exp();
        for (g, (a, b)) in grad_beta.iter_mut().zip(self.xty.iter().zip(xtx_beta.iter())) {
            *g += (a - b) * precision;
        }
        let value = -0.5 * self.n * (2.0 * std::f64::consts::PI).ln() - self.n * log_sigma - 0.5 * rss * precision;
        (value, -self.n + rss * precision)
    }

    /// `(XᵀX, Xᵀyc, ycᵀyc, n, ȳ, intercept columns)` with `yc = y − ȳ`.
    #[allow(clippy::type_complexity)]
    pub(crate) fn parts(&self) -> (&DMatrix<f64>, &DVector<f64>, f64, f64, f64, &[usize]) {
        (&self.xtx, &self.xty, self.yty, self.n, self.y_mean, &self.intercept_columns)
    }

    fn shifted(&self, beta: &[f64]) -> DVector<f64> {
        let mut shifted = DVector::from_column_slice(beta);
        for &j in &self.intercept_columns {
            shifted[j] -= self.y_mean;
        }
        shifted
    }
}
