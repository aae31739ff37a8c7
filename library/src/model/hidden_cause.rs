//! A normal or yes/no outcome's regression refitted beside a simulated
//! hidden common cause of one of its predictors (the exposure) and the
//! outcome.
//!
//! Each row has its own hidden value `uᵢ ~ normal(0, 1)`. The exposure is
//! modelled from the model's other design columns plus `a·uᵢ`, the outcome
//! by the model's own design plus `b·uᵢ`:
//!
//! * `xᵢ ~ normal(wᵢ·α + a·uᵢ, σx)` — `w` the design without the exposure's
//!   column; `a` in the exposure's unit per standard deviation of `u`. The
//!   priors of `α` and `σx` come one of two ways ([`ExposurePriors`]).
//!   Waypath's default standardises `x` inside by its observed mean and sd
//!   (so `α` and `σx` get priors that fit any scale: `normal(0, 10 / sd of
//!   the column)` per non-constant column, `normal(0, 10)` per constant one,
//!   `half_normal(2)` for `σx`); those priors move with the data, which a
//!   calibration over the prior cannot allow. Stated priors are in the
//!   exposure's own unit (`x` as in the table, the design column plus the
//!   centre the model took off it): one for the intercept columns, one for
//!   every other column, one for `σx`, none of them reading the data;
//! * `yᵢ ~ normal(zᵢ·β + b·uᵢ, σy)` with the model's own priors on `β` and
//!   `σy` ([`Model::log_prior_and_gradient`]);
//! * `a` and `b` take the priors the user states.
//!
//! The hidden values are not sampled: they are integrated out. Given the
//! other terms, the strengths and the spreads, a row's residuals
//! `rx = x − w·α` and `ry = y − z·β` are `(a_s·u + εx, b·u + εy)` with
//! `a_s = a / sd(x)`, a bivariate normal with variances `a_s² + σx²`,
//! `b² + σy²` and covariance `a_s·b` (the outcome's mean takes the observed
//! `x`, and the change from `(x, y)` to `(x, ry)` has Jacobian 1). Sampling
//! one latent per row instead gives a posterior of n + p dimensions whose
//! strengths mix slowly; the marginal one has the model's parameters and
//! four more. The whole likelihood needs only the residuals' three sums of
//! squares and products, and its gradient is analytic.
//!
//! The data cannot tell `b·a` apart from the exposure's own slope, so the
//! priors on the two strengths carry the assumption, and the posterior of
//! the slope widens by what they leave open. With both strengths held at
//! zero the outcome's part is the model's own posterior.
//!
//! A yes/no (bernoulli) outcome takes `logistic(zᵢ·β + b·uᵢ)` as its
//! chance of a yes in place of the normal outcome line. The hidden value is
//! integrated out the same way, but the outcome's part then has no closed
//! form: given the exposure's residual the hidden value is normal, and the
//! logistic's mean over it is a trapezoid sum per row
//! ([`super::hidden_yes_no`]). `b` is then on the log-odds scale.
//!
//! Unconstrained parameters, in order: `β` (the model's coefficients),
//! `log σy` (a normal outcome only), `α`, `log σx`, `a`, `b`.

use nalgebra::{DMatrix, DVector};

use super::hidden_yes_no::yes_no_row;
use super::prior::Prior;
use super::{Family, LogDensity, Model};

/// The width of the exposure model's coefficient priors, in standard
/// deviations of the (standardised) exposure per standard deviation of a column.
const EXPOSURE_PRIOR_WIDTH: f64 = 10.0;

/// The scale of the standardised exposure's residual spread prior.
const EXPOSURE_SPREAD_SCALE: f64 = 2.0;

/// Where the exposure model's priors come from.
#[derive(Debug, Clone, PartialEq)]
pub enum ExposurePriors {
    /// Waypath's: set on the exposure standardised by its observed mean and
    /// sd (they move with the data).
    ObservedSpread,
    /// Stated in the exposure's own unit: `intercepts` for every intercept
    /// column (the intercept, or one per level of the first category term),
    /// `slopes` for every other column, `spread` for the residual spread.
    Stated { intercepts: Prior, slopes: Prior, spread: Prior },
}

/// The refit's log density.
pub struct HiddenCause<'m> {
    model: &'m Model,
    design: &'m DMatrix<f64>,
    y: &'m [f64],
    /// The exposure as the density sees it, `(d − shift) / scale` with `d`
    /// the design column: standardised under Waypath's priors, in its own
    /// unit (`shift` minus the model's centre, `scale` 1) under stated ones.
    x: Vec<f64>,
    x_shift: f64,
    x_sd: f64,
    /// The exposure's design column and the centre the model took off it.
    slope: usize,
    centre: f64,
    stated: bool,
    /// A yes/no outcome ([`super::hidden_yes_no`]) rather than a normal one.
    yes_no: bool,
    /// The design without the exposure's column.
    others: DMatrix<f64>,
    others_priors: Vec<Prior>,
    spread_prior: Prior,
    to_exposure: Prior,
    to_outcome: Prior,
}

/// Where each block of the parameter vector starts.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct HiddenLayout {
    /// The outcome model's parameters are `0..outcome_end`: its
    /// coefficients from 0, then a normal outcome's log spread.
    pub outcome_end: usize,
    /// A normal outcome's log spread (a yes/no outcome has none).
    pub outcome_spread: Option<usize>,
    pub exposure_coefficients: usize,
    pub exposure_spread: usize,
    pub to_exposure: usize,
    pub to_outcome: usize,
    pub dim: usize,
}

impl<'m> HiddenCause<'m> {
    /// The refit of normal or bernoulli `model` with its design column
    /// `slope` as the exposure, whose model takes `exposure` priors; `None`
    /// when the model is not such a regression without pooled groups or
    /// steps, or the exposure does not vary. `centre` is what the model took off the exposure's
    /// column ([`Model::linear_slope_centre`]).
    pub fn new(model: &'m Model, slope: usize, centre: f64, exposure: &ExposurePriors, to_exposure: Prior, to_outcome: Prior) -> Option<HiddenCause<'m>> {
        // A steps term's slots are not linear coefficients (`model::steps`);
        // a pooled group's would follow the family's parameters.
        let yes_no = matches!(model.family(), Family::Bernoulli);
        let plain = model.first_group_index() == model.labels.len() + usize::from(!yes_no);
        if !(model.has_spread() || yes_no) || !plain || !model.steps.is_empty() {
            return None;
        }
        let design = model.design_matrix();
        let raw: Vec<f64> = design.column(slope).iter().copied().collect();
        let (mean, sd) = mean_sd(&raw);
        if !(sd > 0.0 && sd.is_finite()) {
            return None;
        }
        let keep: Vec<usize> = (0..design.ncols()).filter(|&j| j != slope).collect();
        let others = design.select_columns(&keep);
        let (x_shift, x_sd, others_priors, spread_prior) = match exposure {
            ExposurePriors::ObservedSpread => (mean, sd, observed_spread_priors(&others), Prior::HalfNormal { sd: EXPOSURE_SPREAD_SCALE }),
            ExposurePriors::Stated { intercepts, slopes, spread } => {
                let intercept_columns = model.intercept_columns();
                let priors = keep.iter().map(|j| if intercept_columns.contains(j) { intercepts.clone() } else { slopes.clone() }).collect();
                (-centre, 1.0, priors, spread.clone())
            }
        };
        Some(HiddenCause {
            model,
            design,
            y: model.outcome_values(),
            x: raw.iter().map(|v| (v - x_shift) / x_sd).collect(),
            x_shift,
            x_sd,
            slope,
            centre,
            stated: matches!(exposure, ExposurePriors::Stated { .. }),
            yes_no,
            others,
            others_priors,
            spread_prior,
            to_exposure,
            to_outcome,
        })
    }

    /// The exposure model's priors in the exposure's own unit, one per
    /// coefficient (design order without the exposure's column) and then
    /// the spread's: a stated prior as stated; Waypath's standardised prior
    /// `normal(0, w)` turned back into the unit, `normal(0, w·sd)` for a
    /// slope, `normal(mean, w·sd)` for an intercept column, and
    /// `half_normal(2·sd)` for the spread.
    pub fn exposure_priors_in_unit(&self) -> Vec<Prior> {
        if self.stated {
            let mut priors = self.others_priors.clone();
            priors.push(self.spread_prior.clone());
            return priors;
        }
        let intercept_columns = self.model.intercept_columns();
        let mut priors: Vec<Prior> = self
            .others_priors
            .iter()
            .zip((0..self.design.ncols()).filter(|&j| j != self.slope))
            .map(|(prior, j)| match *prior {
                Prior::Normal { mean, sd } => {
                    let shift = if intercept_columns.contains(&j) { self.x_shift + self.centre } else { 0.0 };
                    Prior::Normal { mean: mean * self.x_sd + shift, sd: sd * self.x_sd }
                }
                ref other => other.clone(),
            })
            .collect();
        priors.push(Prior::HalfNormal { sd: EXPOSURE_SPREAD_SCALE * self.x_sd });
        priors
    }

    /// The exposure's mean, in its own unit, and its sd over the fitted rows.
    pub fn exposure_observed(&self) -> (f64, f64) {
        let own: Vec<f64> = self.x.iter().map(|v| v * self.x_sd + self.x_shift + self.centre).collect();
        mean_sd(&own)
    }

    /// The labels of the exposure model's parameters, in
    /// [`HiddenCause::exposure_priors_in_unit`] order: `exposure LABEL` for
    /// each of the model's coefficient labels but the exposure's slope, then
    /// `exposure spread`.
    pub fn exposure_labels(&self) -> Vec<String> {
        let labels = self.model.coefficient_names();
        let mut out: Vec<String> = (0..labels.len()).filter(|&j| j != self.slope).map(|j| format!("exposure {}", labels[j])).collect();
        out.push("exposure spread".to_string());
        out
    }

    /// The blocks of the parameter vector.
    pub fn layout(&self) -> HiddenLayout {
        let p = self.design.ncols();
        let q = self.others.ncols();
        let exposure_coefficients = if self.yes_no { p } else { p + 1 };
        let exposure_spread = exposure_coefficients + q;
        HiddenLayout {
            outcome_end: exposure_coefficients,
            outcome_spread: (!self.yes_no).then_some(p),
            exposure_coefficients,
            exposure_spread,
            to_exposure: exposure_spread + 1,
            to_outcome: exposure_spread + 2,
            dim: exposure_spread + 3,
        }
    }

    /// A starting point from standard scores `z` (one per parameter, such
    /// as [`crate::infer::fit::stratified_scores`] gives): the model's own
    /// start for the outcome (given, unconstrained), a tenth of a score for
    /// each exposure coefficient and log spread, and each strength a score's
    /// share of its prior's typical distance from the prior's centre.
    /// Nothing starts exactly at a prior's centre, where every derivative in
    /// a strength centred at 0 would be zero.
    pub fn start(&self, outcome_start: &[f64], z: &[f64]) -> Vec<f64> {
        let l = self.layout();
        let score = |i: usize| z.get(i).copied().unwrap_or(0.0);
        let mut theta: Vec<f64> = (0..l.dim).map(|i| 0.1 * score(i)).collect();
        theta[..l.outcome_end].copy_from_slice(&outcome_start[..l.outcome_end]);
        for (k, prior) in [(l.to_exposure, &self.to_exposure), (l.to_outcome, &self.to_outcome)] {
            theta[k] = prior.central_point() + 0.5 * score(k) * prior.typical_distance();
        }
        theta
    }

    /// Each row's log density of its exposure (on the density's scale) and
    /// its outcome with the hidden value integrated out, at `theta` (every
    /// constant kept).
    pub fn row_log_densities(&self, theta: &[f64]) -> Vec<f64> {
        let (rx, ry) = self.residuals(theta);
        if self.yes_no {
            let l = self.layout();
            let (a, sx, b) = (theta[l.to_exposure] / self.x_sd, theta[l.exposure_spread].exp(), theta[l.to_outcome]);
            let eta = self.linear_predictor(theta);
            return (0..self.y.len()).map(|i| yes_no_row(rx[i], eta[i], self.y[i] > 0.5, a, sx, b).log_density).collect();
        }
        let pair = self.pair(theta);
        (0..self.y.len()).map(|i| pair.log_density(rx[i] * rx[i], ry[i] * ry[i], rx[i] * ry[i], 1.0)).collect()
    }

    /// The outcome's linear predictor `z·β` per row.
    fn linear_predictor(&self, theta: &[f64]) -> DVector<f64> {
        self.design * DVector::from_column_slice(&theta[..self.design.ncols()])
    }

    /// The residuals of the exposure (on the density's scale) from `w·α`
    /// and of the outcome from `z·β`.
    fn residuals(&self, theta: &[f64]) -> (DVector<f64>, DVector<f64>) {
        let l = self.layout();
        let beta = DVector::from_column_slice(&theta[..self.design.ncols()]);
        let alpha = DVector::from_column_slice(&theta[l.exposure_coefficients..l.exposure_spread]);
        let mean_y = self.design * &beta;
        let mean_x = &self.others * &alpha;
        let rx = DVector::from_iterator(self.x.len(), self.x.iter().zip(mean_x.iter()).map(|(x, m)| x - m));
        let ry = DVector::from_iterator(self.y.len(), self.y.iter().zip(mean_y.iter()).map(|(y, m)| y - m));
        (rx, ry)
    }

    /// The residual pair's covariance at `theta`.
    fn pair(&self, theta: &[f64]) -> Pair {
        let l = self.layout();
        let a_std = theta[l.to_exposure] / self.x_sd;
        let b = theta[l.to_outcome];
        let log_sy = l.outcome_spread.map_or(0.0, |k| theta[k]);
        let (vx, vy) = ((2.0 * theta[l.exposure_spread]).exp(), (2.0 * log_sy).exp());
        Pair { xx: a_std * a_std + vx, yy: b * b + vy, xy: a_std * b }
    }
}

/// The covariance of a row's two residuals once the hidden value is
/// integrated out: `[[xx, xy], [xy, yy]]`.
#[derive(Debug, Clone, Copy)]
struct Pair {
    xx: f64,
    yy: f64,
    xy: f64,
}

impl Pair {
    fn determinant(&self) -> f64 {
        self.xx * self.yy - self.xy * self.xy
    }

    /// The log density of `rows` residual pairs with sums of squares
    /// `sxx`, `syy` and of products `sxy` (one row: its own squares).
    fn log_density(&self, sxx: f64, syy: f64, sxy: f64, rows: f64) -> f64 {
        let det = self.determinant();
        let form = (self.yy * sxx - 2.0 * self.xy * sxy + self.xx * syy) / det;
        -rows * (std::f64::consts::TAU.ln() + 0.5 * det.ln()) - 0.5 * form
    }

    /// The derivatives of [`Pair::log_density`] in `xx`, `yy` and `xy`.
    fn derivatives(&self, sxx: f64, syy: f64, sxy: f64, rows: f64) -> (f64, f64, f64) {
        let det = self.determinant();
        let form = (self.yy * sxx - 2.0 * self.xy * sxy + self.xx * syy) / det;
        let d_xx = -0.5 * rows * self.yy / det - 0.5 * (syy - form * self.yy) / det;
        let d_yy = -0.5 * rows * self.xx / det - 0.5 * (sxx - form * self.xx) / det;
        let d_xy = rows * self.xy / det - 0.5 * (-2.0 * sxy + 2.0 * self.xy * form) / det;
        (d_xx, d_yy, d_xy)
    }
}

impl LogDensity for HiddenCause<'_> {
    fn dim(&self) -> usize {
        self.layout().dim
    }

    fn log_density_and_gradient(&self, theta: &[f64], grad: &mut [f64]) -> f64 {
        let l = self.layout();
        grad.iter_mut().for_each(|g| *g = 0.0);
        let mut total = self.model.log_prior_and_gradient(&theta[..l.outcome_end], &mut grad[..l.outcome_end]);
        total += if self.yes_no { self.yes_no_likelihood(theta, grad) } else { self.normal_likelihood(theta, grad) };
        total += self.exposure_priors(theta, grad);
        if total.is_finite() {
            total
        } else {
            f64::NEG_INFINITY
        }
    }
}

impl HiddenCause<'_> {
    /// A normal outcome's likelihood from the residuals' sums of squares
    /// and products; its gradient added to `grad`.
    fn normal_likelihood(&self, theta: &[f64], grad: &mut [f64]) -> f64 {
        let l = self.layout();
        let n = self.y.len() as f64;
        let (rx, ry) = self.residuals(theta);
        let (sxx, syy, sxy) = (rx.dot(&rx), ry.dot(&ry), rx.dot(&ry));
        let pair = self.pair(theta);
        // Each row's residuals: d/drx = −(yy·rx − xy·ry)/det, d/dry = −(xx·ry − xy·rx)/det;
        // a residual falls by its design row, so the coefficients' gradients are Xᵀ of the negatives.
        let det = pair.determinant();
        let pull_x = (&rx * pair.yy - &ry * pair.xy) / det;
        let pull_y = (&ry * pair.xx - &rx * pair.xy) / det;
        self.add_row_gradients(grad, &pull_y, &pull_x);
        let (d_xx, d_yy, d_xy) = pair.derivatives(sxx, syy, sxy, n);
        let (a, b) = (theta[l.to_exposure], theta[l.to_outcome]);
        let a_std = a / self.x_sd;
        let spread = l.outcome_spread.expect("a normal outcome has a spread");
        let (vy, vx) = ((2.0 * theta[spread]).exp(), (2.0 * theta[l.exposure_spread]).exp());
        grad[spread] += d_yy * 2.0 * vy;
        grad[l.exposure_spread] += d_xx * 2.0 * vx;
        grad[l.to_exposure] += (d_xx * 2.0 * a_std + d_xy * b) / self.x_sd;
        grad[l.to_outcome] += d_yy * 2.0 * b + d_xy * a_std;
        pair.log_density(sxx, syy, sxy, n)
    }

    /// A yes/no outcome's likelihood, row by row; its gradient added to `grad`.
    fn yes_no_likelihood(&self, theta: &[f64], grad: &mut [f64]) -> f64 {
        let l = self.layout();
        let (rx, _) = self.residuals(theta);
        let eta = self.linear_predictor(theta);
        let (a, sx, b) = (theta[l.to_exposure] / self.x_sd, theta[l.exposure_spread].exp(), theta[l.to_outcome]);
        let n = self.y.len();
        let (mut d_eta, mut d_rx) = (DVector::zeros(n), DVector::zeros(n));
        let (mut total, mut d_a, mut d_sx, mut d_b) = (0.0, 0.0, 0.0, 0.0);
        for i in 0..n {
            let row = yes_no_row(rx[i], eta[i], self.y[i] > 0.5, a, sx, b);
            total += row.log_density;
            d_eta[i] = row.d_eta;
            // The pull of a residual is minus its derivative.
            d_rx[i] = -row.d_rx;
            d_a += row.d_a;
            d_sx += row.d_spread;
            d_b += row.d_b;
        }
        self.add_row_gradients(grad, &d_eta, &d_rx);
        grad[l.exposure_spread] += d_sx * sx;
        grad[l.to_exposure] += d_a / self.x_sd;
        grad[l.to_outcome] += d_b;
        total
    }

    /// Add `Zᵀ·d_outcome` to the outcome's coefficients and `Wᵀ·pull_x`
    /// (the exposure residual falls as `w·α` rises) to the exposure's.
    fn add_row_gradients(&self, grad: &mut [f64], d_outcome: &DVector<f64>, pull_x: &DVector<f64>) {
        let l = self.layout();
        let d_beta = self.design.tr_mul(d_outcome);
        for (g, d) in grad[..self.design.ncols()].iter_mut().zip(d_beta.iter()) {
            *g += d;
        }
        let d_alpha = self.others.tr_mul(pull_x);
        for (g, d) in grad[l.exposure_coefficients..l.exposure_spread].iter_mut().zip(d_alpha.iter()) {
            *g += d;
        }
    }

    /// The exposure model's and the strengths' priors (the exposure
    /// spread's with the Jacobian of its log); their gradient added to `grad`.
    fn exposure_priors(&self, theta: &[f64], grad: &mut [f64]) -> f64 {
        let l = self.layout();
        let mut total = 0.0;
        let alpha = &theta[l.exposure_coefficients..l.exposure_spread];
        for (k, prior) in self.others_priors.iter().enumerate() {
            let (lp, d) = prior.log_density_and_derivative(alpha[k]);
            total += lp;
            grad[l.exposure_coefficients + k] += d;
        }
        let log_sx = theta[l.exposure_spread];
        let sx = log_sx.exp();
        let (lp, d_spread) = self.spread_prior.log_density_and_derivative(sx);
        total += lp + log_sx;
        grad[l.exposure_spread] += d_spread * sx + 1.0;
        let (lp_a, dp_a) = self.to_exposure.log_density_and_derivative(theta[l.to_exposure]);
        let (lp_b, dp_b) = self.to_outcome.log_density_and_derivative(theta[l.to_outcome]);
        grad[l.to_exposure] += dp_a;
        grad[l.to_outcome] += dp_b;
        total + lp_a + lp_b
    }
}

/// Waypath's priors of the exposure model's coefficients on the
/// standardised exposure: `normal(0, 10 / sd)` per column of `others`, a
/// constant column's width set by its value.
fn observed_spread_priors(others: &DMatrix<f64>) -> Vec<Prior> {
    others
        .column_iter()
        .map(|c| {
            let values: Vec<f64> = c.iter().copied().collect();
            let (_, s) = mean_sd(&values);
            let width = if s > 1e-12 { EXPOSURE_PRIOR_WIDTH / s } else { EXPOSURE_PRIOR_WIDTH / c[0].abs().max(1e-12) };
            Prior::Normal { mean: 0.0, sd: width }
        })
        .collect()
}

fn mean_sd(v: &[f64]) -> (f64, f64) {
    let n = v.len() as f64;
    let mean = v.iter().sum::<f64>() / n.max(1.0);
    let var = v.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (n - 1.0).max(1.0);
    (mean, var.sqrt())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::model::ModelSpec;
    use crate::table::{Column, ColumnData, Table};

    fn exposure_values() -> Vec<f64> {
        (0..40).map(|i| (i as f64 * 0.37).sin() * 2.0 + 5.0).collect()
    }

    fn model() -> Model {
        let x = exposure_values();
        let w: Vec<f64> = (0..40).map(|i| (i as f64 * 0.11).cos()).collect();
        let y: Vec<f64> = x.iter().zip(&w).enumerate().map(|(i, (a, b))| 1.0 + 0.5 * a - b + (i as f64 * 1.7).sin()).collect();
        let table = Table {
            name: "t".into(),
            columns: vec![Column::new("x", ColumnData::Real(x)), Column::new("w", ColumnData::Real(w)), Column::new("y", ColumnData::Real(y))],
        };
        let spec = ModelSpec::from_lines("m", [(1, "y from x, w using t")].into_iter()).unwrap();
        Model::build(&spec, &table).unwrap()
    }

    fn stated() -> ExposurePriors {
        ExposurePriors::Stated {
            intercepts: Prior::Normal { mean: 5.0, sd: 3.0 },
            slopes: Prior::Normal { mean: 0.0, sd: 2.0 },
            spread: Prior::LogNormal { log_mean: 0.0, log_sd: 0.5 },
        }
    }

    /// The same rows with a yes/no outcome, yes where y is above its middle.
    fn yes_no_model() -> Model {
        let x = exposure_values();
        let w: Vec<f64> = (0..40).map(|i| (i as f64 * 0.11).cos()).collect();
        let y: Vec<bool> = x.iter().zip(&w).enumerate().map(|(i, (a, b))| 0.5 * a - b + (i as f64 * 1.7).sin() > 2.2).collect();
        let table = Table {
            name: "t".into(),
            columns: vec![Column::new("x", ColumnData::Real(x)), Column::new("w", ColumnData::Real(w)), Column::new("y", ColumnData::Binary(y))],
        };
        let spec = ModelSpec::from_lines("m", [(1, "y from x, w using t"), (2, "family bernoulli")].into_iter()).unwrap();
        Model::build(&spec, &table).unwrap()
    }

    fn density<'m>(m: &'m Model, exposure: &ExposurePriors) -> HiddenCause<'m> {
        let slope = m.linear_slope_position("x").unwrap();
        let centre = m.linear_slope_centre("x").unwrap();
        HiddenCause::new(m, slope, centre, exposure, Prior::Normal { mean: 0.4, sd: 0.2 }, Prior::Normal { mean: -0.3, sd: 0.5 }).unwrap()
    }

    /// Points away from every symmetry: strengths of both signs, spreads
    /// off 1, coefficients near their fitted size.
    fn points(dim: usize) -> Vec<Vec<f64>> {
        [0.3, 1.1, -0.7].iter().map(|&scale| (0..dim).map(|i| scale * ((i as f64) * 0.7 + scale).sin()).collect()).collect()
    }

    #[test]
    fn gradient_matches_central_differences() {
        let (normal, yes_no) = (model(), yes_no_model());
        let cases = [(&normal, ExposurePriors::ObservedSpread), (&normal, stated()), (&yes_no, ExposurePriors::ObservedSpread), (&yes_no, stated())];
        for (m, exposure, theta) in cases.iter().flat_map(|(m, e)| points(density(m, e).dim()).into_iter().map(move |t| (*m, e, t))) {
            let d = density(m, exposure);
            let dim = d.dim();
            let mut grad = vec![0.0; dim];
            let f = d.log_density_and_gradient(&theta, &mut grad);
            assert!(f.is_finite());
            let mut scratch = vec![0.0; dim];
            for i in 0..dim {
                let h = 1e-5;
                let (mut up, mut down) = (theta.clone(), theta.clone());
                up[i] += h;
                down[i] -= h;
                let numeric = (d.log_density_and_gradient(&up, &mut scratch) - d.log_density_and_gradient(&down, &mut scratch)) / (2.0 * h);
                assert!((numeric - grad[i]).abs() <= 1e-5 * (1.0 + numeric.abs()), "parameter {i}: analytic {} numeric {numeric}", grad[i]);
            }
        }
    }

    /// The row density with the hidden value integrated out, against the
    /// definition integrated numerically: `∫ φ(u)·N(rx; a_s·u, σx)·N(ry; b·u, σy) du`
    /// by composite Simpson over u in [−12, 12] (4000 panels), the residuals
    /// worked out here from the design and the exposure: standardised by
    /// its sample mean and sd under Waypath's priors, the table's own values
    /// (`a_s = a`) under stated ones.
    #[test]
    fn row_density_matches_the_integral_over_the_hidden_value() {
        let m = model();
        let design = m.design_matrix();
        let slope = m.linear_slope_position("x").unwrap();
        let raw: Vec<f64> = design.column(slope).iter().copied().collect();
        let (mean, sd) = mean_sd(&raw);
        let table_x = exposure_values();
        for exposure in [ExposurePriors::ObservedSpread, stated()] {
            let d = density(&m, &exposure);
            let own_unit = matches!(exposure, ExposurePriors::Stated { .. });
            let exposure_at = |i: usize| if own_unit { table_x[i] } else { (raw[i] - mean) / sd };
            let sd = if own_unit { 1.0 } else { sd };
            // In x's own unit the exposure's intercept sits near 5, the
            // centre of the values, so the hidden value's mass stays
            // inside the integration range.
            row_density_case(&m, &d, &exposure_at, sd, if own_unit { 5.0 } else { 0.0 });
        }
    }

    fn row_density_case(m: &Model, d: &HiddenCause<'_>, exposure_at: &dyn Fn(usize) -> f64, sd: f64, intercept: f64) {
        let l = d.layout();
        let design = m.design_matrix();
        let slope = m.linear_slope_position("x").unwrap();
        let normal = |v: f64, s: f64| (-0.5 * (v / s).powi(2)).exp() / (s * std::f64::consts::TAU.sqrt());
        for mut theta in points(l.dim) {
            theta[l.exposure_coefficients] += intercept;
            let rows = d.row_log_densities(&theta);
            let (a_s, b) = (theta[l.to_exposure] / sd, theta[l.to_outcome]);
            let (sx, sy) = (theta[l.exposure_spread].exp(), theta[l.outcome_spread.unwrap()].exp());
            let mut others = 0;
            for i in 0..design.nrows() {
                let mut mean_y = 0.0;
                let mut mean_x = 0.0;
                others = 0;
                for j in 0..design.ncols() {
                    mean_y += design[(i, j)] * theta[j];
                    if j != slope {
                        mean_x += design[(i, j)] * theta[l.exposure_coefficients + others];
                        others += 1;
                    }
                }
                let (rx, ry) = (exposure_at(i) - mean_x, m.outcome_values()[i] - mean_y);
                let panels = 4000;
                let h = 24.0 / panels as f64;
                let integral: f64 = (0..=panels)
                    .map(|k| {
                        let u = -12.0 + k as f64 * h;
                        let weight = if k == 0 || k == panels { 1.0 } else if k % 2 == 1 { 4.0 } else { 2.0 };
                        weight * normal(u, 1.0) * normal(rx - a_s * u, sx) * normal(ry - b * u, sy)
                    })
                    .sum::<f64>()
                    * h
                    / 3.0;
                assert!((rows[i] - integral.ln()).abs() < 1e-8, "row {i}: closed form {} integral {}", rows[i], integral.ln());
            }
            assert_eq!(others, l.exposure_spread - l.exposure_coefficients);
        }
    }

    /// Waypath's priors told in the exposure's unit are the same law: a
    /// coefficient α on the exposure standardised by its sample mean m and
    /// sd s is s·α in the unit (s·α + m for the intercept, the model's
    /// centre added back), and the spread s·σ; a change of scale by s moves
    /// a log density by −log s.
    #[test]
    fn observed_spread_priors_told_in_the_unit_are_the_same_law() {
        let m = model();
        let d = density(&m, &ExposurePriors::ObservedSpread);
        let table_x = exposure_values();
        let n = table_x.len() as f64;
        let mean = table_x.iter().sum::<f64>() / n;
        let s = (table_x.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / (n - 1.0)).sqrt();
        let told = d.exposure_priors_in_unit();
        let labels = d.exposure_labels();
        assert_eq!(labels, ["exposure intercept", "exposure w slope", "exposure spread"]);
        let standardised: Vec<&Prior> = d.others_priors.iter().chain(std::iter::once(&d.spread_prior)).collect();
        for (k, (unit, std)) in told.iter().zip(&standardised).enumerate() {
            let shift = if k == 0 { mean } else { 0.0 };
            for alpha in [0.05, 0.3, 1.7] {
                let (in_std, _) = std.log_density_and_derivative(alpha);
                let (in_unit, _) = unit.log_density_and_derivative(s * alpha + shift);
                assert!((in_unit - (in_std - s.ln())).abs() < 1e-10, "{}: {unit} at {} against {std} at {alpha}", labels[k], s * alpha + shift);
            }
        }
    }

    /// With both strengths at zero the two residuals are independent, so
    /// the row density is the sum of two normal log densities.
    #[test]
    fn strengths_at_zero_give_two_independent_normals() {
        let m = model();
        let d = density(&m, &ExposurePriors::ObservedSpread);
        let l = d.layout();
        let mut theta = points(l.dim)[1].clone();
        theta[l.to_exposure] = 0.0;
        theta[l.to_outcome] = 0.0;
        let pair = d.pair(&theta);
        let (rx, ry) = d.residuals(&theta);
        let (sx, sy) = (theta[l.exposure_spread].exp(), theta[l.outcome_spread.unwrap()].exp());
        let log_normal = |r: f64, s: f64| -0.5 * (r / s).powi(2) - s.ln() - 0.5 * std::f64::consts::TAU.ln();
        for (i, row) in d.row_log_densities(&theta).iter().enumerate() {
            let expected = log_normal(rx[i], sx) + log_normal(ry[i], sy);
            assert!((row - expected).abs() < 1e-10, "row {i}: {row} vs {expected}");
        }
        assert_eq!(pair.xy, 0.0);
    }
}
