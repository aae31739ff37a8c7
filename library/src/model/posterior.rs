//! The built model and its log posterior density.
//!
//! The unconstrained parameter vector is the coefficients, in design-column
//! order (for the levels family, one run of design columns per level after
//! the first), followed by the log of the family's positive parameter
//! (`log(spread)` normal, `log(overdispersion)` gamma-poisson), then each
//! pooled group's `log(spread)` and departure coordinates
//! ([`super::family::pooling`]). The density is the
//! full log-likelihood plus the log priors plus `u`, the log Jacobian of
//! `spread = e^u` (or overdispersion); normalising constants are kept so values can
//! be checked against reference libraries.

use nalgebra::DMatrix;

use super::defaults::PriorUse;
use super::error::ModelError;
use super::family::gaussian::GaussianStats;
use super::family::likelihood::GlmData;
use super::family::ordered::{cut_label, cut_points, log_gaps_of, GradedData};
use super::family::softmax::SoftmaxData;
use super::family::pooling::Pooling;
use super::family::Family;
use super::prior::Prior;
use super::terms::design::is_spread_label;
use super::steps::{whole_effect_label, StepTerm};
use super::terms::{GroupTerm, TermRecipe};
use super::LogDensity;

/// How the likelihood is evaluated.
#[derive(Debug, Clone, PartialEq)]
pub(crate) enum Likelihood {
    /// Normal family, through sufficient statistics, with the spread's prior.
    Gaussian { stats: GaussianStats, spread_prior: Prior },
    /// Bernoulli, binomial, poisson or gamma-poisson, row by row.
    Glm(GlmData),
    /// Levels family (category outcome), row by row.
    Softmax(SoftmaxData),
    /// Graded family (ordered category outcome), row by row, with the
    /// priors of the gaps between its cut points.
    Graded(GradedData),
}

/// A regression model built against a table: a log posterior density over
/// labelled parameters, with everything needed to predict for new rows.
#[derive(Debug, Clone, PartialEq)]
pub struct Model {
    pub(crate) name: String,
    pub(crate) outcome: String,
    pub(crate) table: String,
    pub(crate) family: Family,
    /// The outcome's levels, reference first (levels family only).
    pub(crate) outcome_levels: Option<Vec<String>>,
    pub(crate) recipes: Vec<TermRecipe>,
    pub(crate) labels: Vec<String>,
    pub(crate) design: DMatrix<f64>,
    pub(crate) y: Vec<f64>,
    pub(crate) coefficient_priors: Vec<Prior>,
    /// Per coefficient: whether its prior is on the prediction at the
    /// average row (default intercepts, see `model::defaults`).
    pub(crate) at_average_row: Vec<bool>,
    /// Per coefficient: its column's mean over the fitted rows (0 for
    /// intercept columns), the weights of that prediction.
    pub(crate) average_row: Vec<f64>,
    pub(crate) likelihood: Likelihood,
    pub(crate) priors_used: Vec<PriorUse>,
    pub(crate) notes: Vec<String>,
    pub(crate) start: Vec<f64>,
    /// Pooled groups, planned on the fitted data.
    pub(crate) groups: Vec<GroupTerm>,
    /// Per pooled group, every fitted row's level.
    pub(crate) group_rows: Vec<Vec<usize>>,
    /// The pooled groups' part of the density.
    pub(crate) pooling: Pooling,
    /// The prior of the family's parameter beside the coefficients for a
    /// GLM family that has one (gamma-poisson: the overdispersion); the
    /// normal family keeps its spread's prior in [`Likelihood::Gaussian`].
    pub(crate) family_prior: Option<Prior>,
    /// The `steps(…)` terms: their slots of the unconstrained vector hold
    /// the whole effect and the shares' stick-breaking coordinates, their
    /// constrained values are the steps' effects ([`super::steps`]).
    pub(crate) steps: Vec<StepTerm>,
    /// The table on disk the model was built on (no rows in `design`).
    #[cfg(feature = "on_disk")]
    pub(crate) on_disk: Option<super::on_disk::OnDisk>,
}

impl Model {
    /// The model's name from the cell header.
    pub fn name(&self) -> &str {
        &self.name
    }

    /// The outcome column's name.
    pub fn outcome_name(&self) -> &str {
        &self.outcome
    }

    /// The name of the table the model was built on.
    pub fn table_name(&self) -> &str {
        &self.table
    }

    /// The outcome family (and through it the link).
    pub fn family(&self) -> &Family {
        &self.family
    }

    /// The outcome's levels for the levels family, reference level first
    /// (the order of [`Model::level_probabilities`] and of the level indices
    /// that [`Model::outcome_draw`] returns); `None` for other families.
    pub fn outcome_levels(&self) -> Option<&[String]> {
        self.outcome_levels.as_deref()
    }

    /// Labels of the coefficients, in design-column order (level by level
    /// for the levels family).
    pub fn coefficient_names(&self) -> &[String] {
        &self.labels
    }

    /// Labels of the constrained parameters: the coefficients, then the
    /// family's positive parameter (`spread` for a normal outcome,
    /// `overdispersion` for a gamma-poisson one), then the pooled groups'.
    pub fn parameter_names(&self) -> Vec<String> {
        let mut names = self.labels.clone();
        names.extend(self.family_labels());
        names.extend(self.groups.iter().flat_map(GroupTerm::labels));
        names
    }

    /// The unit of each constrained parameter ([`Model::parameter_names`]
    /// order) read from `table`'s column units: on an identity link
    /// (normal family) intercepts, offsets, powers, spline weights and the
    /// spread are in the outcome's unit and a slope is outcome unit per
    /// predictor unit ([`TermRecipe::units`]); on a logit, log or softmax
    /// link a coefficient is on the link scale and has no unit (`None`).
    pub fn parameter_units(&self, table: &crate::table::Table) -> Vec<Option<String>> {
        let n = self.parameter_names().len();
        if !matches!(self.family, Family::Normal) {
            return vec![None; n];
        }
        let outcome_unit = table.column(&self.outcome).and_then(|c| c.unit.as_deref());
        let mut units: Vec<Option<String>> = self.recipes.iter().flat_map(|r| r.units(outcome_unit, table)).collect();
        units.resize(self.labels.len(), None);
        if self.has_spread() {
            units.push(outcome_unit.map(str::to_string));
        }
        units
    }

    /// How many fitted rows inform each constrained parameter
    /// ([`Model::parameter_names`] order): the rows where the
    /// coefficient's design column is not zero (every row for an intercept
    /// or a plain slope, the rows of its level for a level's intercept,
    /// offset or slope, the rows inside a spline function's support), and
    /// every row for the spread. A parameter with no rows rests on its
    /// prior alone.
    pub fn rows_behind(&self) -> Vec<usize> {
        #[cfg(feature = "on_disk")]
        if let Some(disk) = &self.on_disk {
            let mut counts = disk.nonzero.clone();
            if self.family_parameter().is_some() {
                counts.push(disk.rows);
            }
            return counts;
        }
        let width = self.design.ncols().max(1);
        let per_column: Vec<usize> =
            (0..self.design.ncols()).map(|j| self.design.column(j).iter().filter(|v| **v != 0.0).count()).collect();
        let mut counts: Vec<usize> = (0..self.labels.len()).map(|k| per_column.get(k % width).copied().unwrap_or(0)).collect();
        counts.extend(std::iter::repeat_n(self.design.nrows(), self.family_width()));
        counts
    }

    /// Labels of the unconstrained parameters (`log(spread)` for the
    /// spread, and so on for the family's parameter).
    pub fn unconstrained_names(&self) -> Vec<String> {
        let mut names = self.labels.clone();
        for term in &self.steps {
            let whole = whole_effect_label(&term.column);
            for (k, name) in names[term.first..term.first + term.steps].iter_mut().enumerate() {
                *name = if k == 0 { whole.clone() } else { format!("{whole} stick {k}") };
            }
        }
        if let Some(name) = self.family_parameter() {
            names.push(format!("log({name})"));
        }
        if let Likelihood::Graded(_) = self.likelihood {
            names.extend(self.family_labels().iter().map(|cut| format!("log(gap below {cut})")));
        }
        for (group, pooled) in self.groups.iter().zip(&self.pooling.groups) {
            names.extend(group.unconstrained_labels(pooled.around_intercept));
        }
        if let Some((j, _, _)) = self.pooling.scored_intercept(self.first_group_index()) {
            if let Some(group) = self.groups.iter().zip(&self.pooling.groups).find(|(_, p)| p.around_intercept).map(|(g, _)| g) {
                names[j] = format!("{}: score about the {} level means", names[j], group.column);
            }
        }
        names
    }

    /// Constrained parameters from an unconstrained point.
    pub fn constrain(&self, theta: &[f64]) -> Vec<f64> {
        let first_group = self.first_group_index();
        let theta = &self.pooling.with_intercept(theta, first_group);
        let mut params = theta[..first_group.min(theta.len())].to_vec();
        if self.family_parameter().is_some() {
            if let Some(last) = params.last_mut() {
                *last = last.exp();
            }
        }
        if let Likelihood::Graded(_) = self.likelihood {
            let p = self.labels.len();
            let cuts = cut_points(&params[p..]);
            params[p..].copy_from_slice(&cuts[1..]);
        }
        for term in &self.steps {
            term.write_effects(theta, &mut params);
        }
        if theta.len() > first_group {
            params.extend(self.pooling.constrain(&theta[first_group..], &self.pooling.anchor(theta)));
        }
        params
    }

    /// The unconstrained point with every steps term's slots holding its
    /// steps' effects: the coefficients the design multiplies, beside the
    /// other coordinates unchanged.
    fn with_step_effects(&self, theta: &[f64]) -> Vec<f64> {
        let mut point = theta.to_vec();
        for term in &self.steps {
            term.write_effects(theta, &mut point);
        }
        point
    }

    /// Whether coefficient `j` is a slot of a steps term (its prior is the
    /// term's own).
    fn in_steps(&self, j: usize) -> bool {
        self.steps.iter().any(|t| (t.first..t.first + t.steps).contains(&j))
    }

    /// The index of the first pooled group's parameter (after the
    /// coefficients and the family's parameter) in
    /// [`Model::parameter_names`]; each group then has its spread followed
    /// by one departure per level.
    pub fn first_group_index(&self) -> usize {
        self.labels.len() + self.family_width()
    }

    /// The labels of the family's parameters after the coefficients: its
    /// positive parameter, or a graded outcome's cuts above the first
    /// (`rating cut[good]`, [`super::family::ordered`]).
    pub fn family_labels(&self) -> Vec<String> {
        match &self.likelihood {
            Likelihood::Graded(_) => {
                let levels = self.outcome_levels().unwrap_or_default();
                levels.iter().skip(2).map(|level| cut_label(&self.outcome, level)).collect()
            }
            _ => self.family_parameter().map(String::from).into_iter().collect(),
        }
    }

    /// How many parameters the family has after the coefficients.
    fn family_width(&self) -> usize {
        match &self.likelihood {
            Likelihood::Graded(graded) => graded.levels().saturating_sub(2),
            _ => usize::from(self.family_parameter().is_some()),
        }
    }

    /// The model's `steps(…)` terms ([`super::steps`]).
    pub fn step_terms(&self) -> &[StepTerm] {
        &self.steps
    }

    /// Pooled groups of the model, planned on the fitted data.
    pub fn pooled_groups(&self) -> &[GroupTerm] {
        &self.groups
    }

    /// The η of the LKJ prior on the intercept–slope correlations of the
    /// groups with varying slopes (the default when none has one).
    pub fn correlation_lkj(&self) -> f64 {
        self.pooling.groups.iter().find(|g| !g.slopes.is_empty()).map_or(super::defaults::DEFAULT_LKJ, |g| g.lkj)
    }

    /// The unconstrained point of constrained parameters (checks the length
    /// and that the spread, or the family's other parameter, is positive).
    pub fn unconstrain(&self, params: &[f64]) -> Result<Vec<f64>, ModelError> {
        let point = self.unconstrain_with_intercept(params)?;
        Ok(self.pooling.with_intercept_score(&point, self.first_group_index()))
    }

    /// [`Model::unconstrain`] with the intercept itself where the sampler
    /// has its score about the level means ([`Pooling::with_intercept`]).
    fn unconstrain_with_intercept(&self, params: &[f64]) -> Result<Vec<f64>, ModelError> {
        self.check_length(params)?;
        let mut theta = params.to_vec();
        if let Some(name) = self.family_parameter() {
            let value = theta[self.labels.len()];
            if value <= 0.0 || !value.is_finite() {
                return Err(ModelError::Parameters {
                    message: format!("the {name} must be positive, not {value}"),
                });
            }
            theta[self.labels.len()] = value.ln();
        }
        if let Likelihood::Graded(_) = self.likelihood {
            let p = self.labels.len();
            let gaps = log_gaps_of(&params[p..self.first_group_index()]).map_err(|at| ModelError::Parameters {
                message: format!(
                    "the cut points must increase from the first, fixed at 0, but {} is {}",
                    self.family_labels()[at],
                    params[p + at]
                ),
            })?;
            theta[p..p + gaps.len()].copy_from_slice(&gaps);
        }
        for term in &self.steps {
            let coordinates = term
                .coordinates_of(&params[term.first..term.first + term.steps])
                .map_err(|message| ModelError::Parameters { message })?;
            theta[term.first..term.first + term.steps].copy_from_slice(&coordinates);
        }
        let first_group = self.first_group_index();
        let pooled = self.pooling.unconstrain(&params[first_group..], &self.pooling.anchor(params)).map_err(|at| ModelError::Parameters {
            message: format!(
                "{} must be {}, not {}",
                self.parameter_names()[first_group + at],
                if is_spread_label(&self.parameter_names()[first_group + at]) {
                    "positive"
                } else {
                    "between −1 and 1, and with the group's other correlations form a correlation matrix (positive definite)"
                },
                params[first_group + at]
            ),
        })?;
        theta.truncate(first_group);
        theta.extend(pooled);
        Ok(theta)
    }

    /// A starting point for optimisers and samplers (unconstrained): the
    /// intercepts at the outcome's mean on the link scale, other
    /// coefficients at 0, the spread at the outcome's sd — each moved to
    /// its prior's centre if outside the prior's support.
    pub fn initial_point(&self) -> Vec<f64> {
        self.pooling.with_intercept_score(&self.start, self.first_group_index())
    }

    /// A starting point moved away from [`Model::initial_point`] by `z`
    /// (one standard score per unconstrained coordinate): each coefficient
    /// by `z` times its prior's typical distance — an intercept priced at
    /// the average row keeps that row's prediction at `centre + z·distance`
    /// whatever the slopes do — and `log(spread)` by `z` itself. A
    /// coordinate that would leave its prior's support stays at the start.
    pub fn dispersed_point(&self, z: &[f64]) -> Vec<f64> {
        let p = self.labels.len();
        let mut values: Vec<f64> = self.start[..p].to_vec();
        let width = self.design.ncols().max(1);
        for block in 0..p / width {
            let at = block * width;
            let shift = self.average_row_shift(&self.start[at..at + width], at);
            for (value, &anchored) in values[at..at + width].iter_mut().zip(&self.at_average_row[at..at + width]) {
                if anchored {
                    *value += shift;
                }
            }
        }
        for (j, value) in values.iter_mut().enumerate() {
            let prior = &self.coefficient_priors[j];
            let moved = *value + z.get(j).copied().unwrap_or(0.0) * prior.typical_distance();
            if prior.contains(moved) {
                *value = moved;
            }
        }
        let mut point = self.dispersed_coefficients(values, z);
        for j in p..self.first_group_index() {
            point.push(self.start[j] + z.get(j).copied().unwrap_or(0.0));
        }
        let first_group = self.first_group_index();
        // Level means sampled around the intercept start near the data (the
        // undispersed intercept), not wherever a wide intercept prior sent it.
        let anchor = self.pooling.anchor(&self.start);
        point.extend(self.pooling.start(z.get(first_group..).unwrap_or(&[]), &anchor));
        // An intercept sampled as its score about the level means starts at
        // that score moved by z (it is standard normal a priori).
        let mut point = self.pooling.with_intercept_score(&point, first_group);
        if let Some((j, _, _)) = self.pooling.scored_intercept(first_group) {
            point[j] = z.get(j).copied().unwrap_or(0.0);
        }
        point
    }

    /// The dispersed coefficients `values` as a starting point: each
    /// anchored intercept moved back by the block's shift; a steps term's
    /// slots become its whole effect (moved by `z` times its prior's
    /// typical distance) and its stick coordinates (moved by `z`), the
    /// shift reading the steps' effects they stand for.
    fn dispersed_coefficients(&self, mut values: Vec<f64>, z: &[f64]) -> Vec<f64> {
        if self.steps.is_empty() {
            return self.from_prior_values(values);
        }
        for term in &self.steps {
            let at = term.first;
            values[at] = self.start[at] + z.get(at).copied().unwrap_or(0.0) * term.whole_prior.typical_distance();
            for j in at + 1..at + term.steps {
                values[j] = self.start[j] + z.get(j).copied().unwrap_or(0.0);
            }
        }
        let mut shifted = self.from_prior_values(self.with_step_effects(&values));
        for term in &self.steps {
            shifted[term.first..term.first + term.steps].copy_from_slice(&values[term.first..term.first + term.steps]);
        }
        shifted
    }

    /// Every prior in use, declared or default, for printing.
    pub fn priors_used(&self) -> &[PriorUse] {
        &self.priors_used
    }

    /// Plain-language notes on the choices made when building: coding of
    /// categories, centres, polynomial scaling, spline knots.
    pub fn notes(&self) -> &[String] {
        &self.notes
    }

    /// The design matrix of the fitted data (rows × design columns; for the
    /// levels family each level's coefficients multiply these same columns).
    pub fn design_matrix(&self) -> &DMatrix<f64> {
        &self.design
    }

    /// The outcome values of the fitted data (level indices, reference 0,
    /// for the levels family).
    pub fn outcome_values(&self) -> &[f64] {
        &self.y
    }

    /// The full log-likelihood at constrained parameters `params`.
    pub fn log_likelihood(&self, params: &[f64]) -> Result<f64, ModelError> {
        let mut theta = self.unconstrain_with_intercept(params)?;
        let p = self.labels.len();
        // The constrained coefficients are what the design multiplies (a steps term's effects).
        theta[..p].copy_from_slice(&params[..p]);
        let coefficients = self.coefficients_with_departures(&theta);
        let mut scratch = vec![0.0; coefficients.len()];
        Ok(match &self.likelihood {
            Likelihood::Gaussian { stats, .. } => stats.log_likelihood_and_gradient(&coefficients, theta[p], &mut scratch).0,
            Likelihood::Glm(glm) => glm.log_likelihood_and_gradients(&coefficients, theta.get(p).copied().unwrap_or(0.0), &mut scratch).0,
            Likelihood::Softmax(levels) => levels.log_likelihood_and_gradient(&coefficients, &mut scratch),
            Likelihood::Graded(graded) => {
                let mut d_gaps = vec![0.0; graded.levels().saturating_sub(2)];
                graded.log_likelihood_and_gradient(&coefficients, &theta[p..self.first_group_index()], &mut scratch, &mut d_gaps)
            }
        })
    }

    /// The coefficients followed by the pooled groups' departures: what the
    /// likelihood multiplies its design by (`build::with_departure_columns`).
    fn coefficients_with_departures(&self, theta: &[f64]) -> Vec<f64> {
        let p = self.labels.len();
        let mut out = theta[..p].to_vec();
        out.extend(self.pooling.departures(&theta[self.first_group_index()..], &self.pooling.anchor(theta)));
        out
    }

    /// Whether the model has a spread parameter (normal family).
    pub fn has_spread(&self) -> bool {
        matches!(self.likelihood, Likelihood::Gaussian { .. })
    }

    /// The label of the family's positive parameter after the
    /// coefficients (`spread`, `overdispersion`), if the family has one.
    pub fn family_parameter(&self) -> Option<&'static str> {
        self.family.family_parameter()
    }

    /// The GLM likelihood at `coefficients` (with departures), its
    /// gradient added into `d_coefficients`; for a family with a parameter
    /// beside the coefficients (gamma-poisson), also that parameter's
    /// prior and the log Jacobian `u` of `value = e^u`, with the derivative
    /// in `u = theta[p]` written to `grad_u`.
    fn glm_part(&self, glm: &GlmData, coefficients: &[f64], theta: &[f64], d_coefficients: &mut [f64], grad_u: Option<&mut f64>) -> f64 {
        let p = self.labels.len();
        match (&self.family_prior, grad_u) {
            (Some(prior), Some(grad_u)) => {
                let u = theta[p];
                let (ll, d_u) = glm.log_likelihood_and_gradients(coefficients, u, d_coefficients);
                let value = u.exp();
                let (lp, d_value) = prior.log_density_and_derivative(value);
                *grad_u = d_u + d_value * value + 1.0;
                ll + lp + u
            }
            _ => glm.log_likelihood_and_gradient(coefficients, d_coefficients),
        }
    }

    pub(crate) fn check_length(&self, params: &[f64]) -> Result<(), ModelError> {
        let names = self.parameter_names();
        if params.len() == names.len() {
            Ok(())
        } else {
            Err(ModelError::Parameters {
                message: format!(
                    "model `{}` has {} parameters ({}), but {} values were given",
                    self.name,
                    names.len(),
                    names.join(", "),
                    params.len()
                ),
            })
        }
    }

    /// Log prior of the coefficients, writing its gradient into `grad`.
    ///
    /// A prior marked `at_average_row` is evaluated at the intercept plus
    /// the block's other coefficients times their column means; its
    /// derivative then also reaches those coefficients.
    fn log_prior_of_coefficients(&self, beta: &[f64], grad: &mut [f64]) -> f64 {
        let width = self.design.ncols().max(1);
        let mut total = 0.0;
        grad.iter_mut().for_each(|g| *g = 0.0);
        for (block, (betas, grads)) in beta.chunks(width).zip(grad.chunks_mut(width)).enumerate() {
            let at = block * width;
            let shift = self.average_row_shift(betas, at);
            for (k, &b) in betas.iter().enumerate() {
                if self.in_steps(at + k) {
                    continue;
                }
                let anchored = self.at_average_row[at + k];
                let (lp, d) = self.coefficient_priors[at + k].log_density_and_derivative(if anchored { b + shift } else { b });
                total += lp;
                grads[k] += d;
                if anchored {
                    for (m, g) in self.average_row[at..at + betas.len()].iter().zip(grads.iter_mut()) {
                        *g += d * m;
                    }
                }
            }
        }
        total
    }

    /// The log prior of a model without pooled groups on the
    /// unconstrained scale: the coefficients' priors and, for the normal
    /// family, the spread's prior with the Jacobian of its log, at
    /// `theta[..p]` (and `theta[p]`, the log spread); the gradient goes into
    /// `grad` (same length as `theta`). A density that adds its own
    /// likelihood to this prior keeps the model's priors exactly.
    pub fn log_prior_and_gradient(&self, theta: &[f64], grad: &mut [f64]) -> f64 {
        let p = self.labels.len();
        let mut total = self.log_prior_of_coefficients(&theta[..p], &mut grad[..p]);
        if let Likelihood::Gaussian { spread_prior, .. } = &self.likelihood {
            let u = theta[p];
            let spread = u.exp();
            let (lp, d_spread) = spread_prior.log_density_and_derivative(spread);
            total += lp + u;
            grad[p] = d_spread * spread + 1.0;
        }
        total
    }

    /// Σ βⱼ·mean(column j) over one block's non-intercept columns, the
    /// block's coefficients starting at index `at`.
    fn average_row_shift(&self, betas: &[f64], at: usize) -> f64 {
        betas.iter().zip(&self.average_row[at..]).map(|(b, m)| b * m).sum()
    }

    /// Constrained parameters from values drawn independently from the
    /// priors as listed (`priors_used`): an intercept drawn from a prior at
    /// the average row becomes the raw intercept by subtracting the block's
    /// shift; a graded outcome's gaps, drawn from the gaps' priors under
    /// the labels of the cuts above them, become the cuts, each the sum of
    /// the gaps below it. Prior predictive checks and calibration draw
    /// through this.
    pub fn from_prior_values(&self, mut values: Vec<f64>) -> Vec<f64> {
        let width = self.design.ncols().max(1);
        let p = self.labels.len();
        if let (Likelihood::Graded(_), Some(gaps)) = (&self.likelihood, values.get_mut(p..self.first_group_index())) {
            let mut at = 0.0;
            for value in gaps.iter_mut() {
                at += *value;
                *value = at;
            }
        }
        for block in 0..p / width {
            let at = block * width;
            let shift = self.average_row_shift(&values[at..at + width], at);
            for (value, &anchored) in values[at..at + width].iter_mut().zip(&self.at_average_row[at..at + width]) {
                if anchored {
                    *value -= shift;
                }
            }
        }
        values
    }
}

impl LogDensity for Model {
    fn dim(&self) -> usize {
        self.first_group_index() + self.pooling.dim()
    }

    /// With the intercept sampled as its score about the level means: the
    /// density at the intercept, its gradient pulled back to the score with
    /// the change's log Jacobian ([`Pooling::pull_back_intercept`]).
    fn log_density_and_gradient(&self, theta: &[f64], grad: &mut [f64]) -> f64 {
        let first_group = self.first_group_index();
        if self.pooling.scored_intercept(first_group).is_none() {
            return self.log_density_at_intercept(theta, grad);
        }
        let total = self.log_density_at_intercept(&self.pooling.with_intercept(theta, first_group), grad);
        if total == f64::NEG_INFINITY {
            return total;
        }
        let total = total + self.pooling.pull_back_intercept(theta, first_group, grad);
        if total.is_finite() {
            total
        } else {
            f64::NEG_INFINITY
        }
    }
}

impl Model {
    /// The log density at a point holding the intercept itself. With steps
    /// terms: the density at the steps' effects, its gradient in them
    /// pulled back to each term's coordinates with the term's priors and
    /// Jacobian ([`StepTerm::pull_back`]).
    fn log_density_at_intercept(&self, theta: &[f64], grad: &mut [f64]) -> f64 {
        if self.steps.is_empty() {
            return self.linear_log_density_and_gradient(theta, grad);
        }
        let mut total = self.linear_log_density_and_gradient(&self.with_step_effects(theta), grad);
        if total == f64::NEG_INFINITY {
            return total;
        }
        for term in &self.steps {
            total += term.pull_back(theta, grad);
        }
        if total.is_finite() {
            total
        } else {
            f64::NEG_INFINITY
        }
    }
}

impl Model {
    /// The log density at `theta` whose coefficients are all linear (a
    /// steps term's slots holding its steps' effects, without its priors).
    fn linear_log_density_and_gradient(&self, theta: &[f64], grad: &mut [f64]) -> f64 {
        let p = self.labels.len();
        let mut total = self.log_prior_of_coefficients(&theta[..p], &mut grad[..p]);
        if total == f64::NEG_INFINITY {
            return f64::NEG_INFINITY;
        }
        if !self.pooling.is_empty() {
            return self.pooled_log_density_and_gradient(theta, grad, total);
        }
        match &self.likelihood {
            Likelihood::Gaussian { stats, spread_prior } => {
                let u = theta[p];
                let (ll, d_u) = stats.log_likelihood_and_gradient(&theta[..p], u, &mut grad[..p]);
                let spread = u.exp();
                let (lp, d_spread) = spread_prior.log_density_and_derivative(spread);
                total += ll + lp + u;
                grad[p] = d_u + d_spread * spread + 1.0;
            }
            Likelihood::Glm(glm) => {
                let (coefficients, rest) = grad.split_at_mut(p);
                total += self.glm_part(glm, &theta[..p], theta, coefficients, rest.first_mut());
            }
            Likelihood::Softmax(levels) => total += levels.log_likelihood_and_gradient(&theta[..p], &mut grad[..p]),
            Likelihood::Graded(graded) => total += graded_part(graded, &theta[..p], theta, p, grad),
        }
        if total.is_finite() {
            total
        } else {
            f64::NEG_INFINITY
        }
    }
}

impl Model {
    /// The log density of a model with pooled groups, given the log prior of
    /// its coefficients (`total`, gradient already in `grad[..p]`): the
    /// likelihood at the coefficients and departures, the spread's prior
    /// (normal family) and the groups' part ([`Pooling`]).
    fn pooled_log_density_and_gradient(&self, theta: &[f64], grad: &mut [f64], mut total: f64) -> f64 {
        let p = self.labels.len();
        let first_group = self.first_group_index();
        let coefficients = self.coefficients_with_departures(theta);
        let mut d_coefficients = vec![0.0; coefficients.len()];
        match &self.likelihood {
            Likelihood::Gaussian { stats, spread_prior } => {
                let u = theta[p];
                let (ll, d_u) = stats.log_likelihood_and_gradient(&coefficients, u, &mut d_coefficients);
                let spread = u.exp();
                let (lp, d_spread) = spread_prior.log_density_and_derivative(spread);
                total += ll + lp + u;
                grad[p] = d_u + d_spread * spread + 1.0;
            }
            Likelihood::Glm(glm) => {
                let grad_u = if self.family_prior.is_some() { grad.get_mut(p) } else { None };
                total += self.glm_part(glm, &coefficients, theta, &mut d_coefficients, grad_u);
            }
            Likelihood::Softmax(levels) => total += levels.log_likelihood_and_gradient(&coefficients, &mut d_coefficients),
            Likelihood::Graded(graded) => {
                let mut beside = vec![0.0; grad.len()];
                total += graded_part(graded, &coefficients[..p], theta, p, &mut beside);
                d_coefficients[..p].iter_mut().zip(&beside[..p]).for_each(|(d, b)| *d += b);
                grad[p..first_group].iter_mut().zip(&beside[p..first_group]).for_each(|(g, b)| *g += b);
            }
        }
        for (g, d) in grad[..p].iter_mut().zip(&d_coefficients) {
            *g += d;
        }
        let anchor = self.pooling.anchor(theta);
        let (groups, d_anchor) =
            self.pooling.log_density_and_gradient(&theta[first_group..], &d_coefficients[p..], &anchor, &mut grad[first_group..]);
        total += groups;
        if let Some(j) = self.pooling.intercept {
            grad[j] += d_anchor.intercept;
        }
        for (&j, d) in self.pooling.slope_anchor_positions().iter().zip(&d_anchor.slopes) {
            grad[j] += d;
        }
        if total.is_finite() {
            total
        } else {
            f64::NEG_INFINITY
        }
    }
}

/// A graded model's likelihood at `coefficients` and the log gaps
/// `theta[p..]`, with the gaps' priors and log Jacobian: the coefficients'
/// gradient added into `grad[..p]`, the gaps' written to `grad[p..]`.
fn graded_part(graded: &GradedData, coefficients: &[f64], theta: &[f64], p: usize, grad: &mut [f64]) -> f64 {
    let width = graded.levels().saturating_sub(2);
    let log_gaps = &theta[p..p + width];
    let (d_coefficients, rest) = grad.split_at_mut(p);
    let d_gaps = &mut rest[..width];
    d_gaps.iter_mut().for_each(|d| *d = 0.0);
    graded.log_likelihood_and_gradient(coefficients, log_gaps, d_coefficients, d_gaps) + graded.log_prior_of_gaps(log_gaps, d_gaps)
}
