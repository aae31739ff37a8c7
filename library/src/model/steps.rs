//! Ordered-category predictors with learned monotone steps: the term
//! `steps(grade)`.
//!
//! A category with ordered levels `0 … K−1` moves the linear predictor by
//! `β · Σ_{j<k} δ_j` at level `k`: `β` is the whole effect from the lowest
//! level to the highest and `δ` the shares of it taken by each of the
//! `K − 1` steps between neighbouring levels, on the simplex (non-negative,
//! summing to 1), so every step has the sign of `β` and the effect never
//! turns back. The design columns are the indicators `[level ≥ k]`,
//! `k = 1 … K−1`, and their coefficients are the steps' effects
//! `c_k = β·δ_k` — linear in the design, so predictions, contrasts and
//! every other caller that multiplies the design by the coefficients take
//! the term unchanged. Only the density sees the other coordinates.
//!
//! Why: an ordered predictor as an ordinary category spends one free
//! offset per level and may zig-zag; as a number it forces equal steps.
//! The shares learn unequal steps while keeping the order.
//!
//! The sampler's coordinates for a term are `β` itself and `K − 2` reals
//! `y` mapped onto the simplex by stick-breaking: with `n = K − 1` shares
//! and the stick left `r_0 = 1`, for `k = 1 … n−1`
//! `u_k = logistic(y_k − ln(n − k))`, `δ_k = r_{k−1}·u_k`,
//! `r_k = r_{k−1}(1 − u_k)`, and `δ_n = r_{n−1}`; the offset `ln(n − k)`
//! sends `y = 0` to equal shares. The log Jacobian is
//! `Σ_k [ln u_k + ln(1 − u_k) + ln r_{k−1}]` (Stan Reference Manual,
//! "Unit simplex" transform (recalled)). The shares' prior is the
//! symmetric Dirichlet(α), the whole effect's a normal prior of the
//! slopes' budget (`model::defaults`).

use statrs::function::gamma::ln_gamma;

use super::prior::Prior;

/// The default concentration of the steps' Dirichlet prior: 2 for every
/// share, which keeps each share away from 0 gently and has its mode at
/// equal steps.
pub const DEFAULT_STEP_CONCENTRATION: f64 = 2.0;

/// The word of a step's label: `grade step[none to mild]`.
pub const STEP: &str = "step";

/// The label of the step from level `lower` to `upper` of `column`.
pub fn step_label(column: &str, lower: &str, upper: &str) -> String {
    format!("{column} {STEP}[{lower} to {upper}]")
}

/// The label of a step's share of the whole effect, derived from the
/// draws for the estimates table: `grade share[none to mild]`.
pub fn share_label(column: &str, lower: &str, upper: &str) -> String {
    format!("{column} share[{lower} to {upper}]")
}

/// The label a `prior for` line gives a steps term's shares, whose prior
/// is `dirichlet(α)`: `grade shares`.
pub fn shares_label(column: &str) -> String {
    format!("{column} shares")
}

/// The label of the whole effect of a steps term, the name its prior is
/// listed and declared under: `grade steps`.
pub fn whole_effect_label(column: &str) -> String {
    format!("{column} steps")
}

/// One `steps(…)` term of a built model.
#[derive(Debug, Clone, PartialEq)]
pub struct StepTerm {
    /// The category column.
    pub column: String,
    /// Its levels, lowest first.
    pub levels: Vec<String>,
    /// The position of its first coefficient (the first step).
    pub first: usize,
    /// The number of steps, `K − 1`.
    pub steps: usize,
    /// The Dirichlet concentration of every share.
    pub concentration: f64,
    /// The prior of the whole effect `β`.
    pub whole_prior: Prior,
}

impl StepTerm {
    /// The coordinates of the term in the unconstrained vector: `β`, then
    /// the `steps − 1` stick-breaking reals.
    fn coordinates<'a>(&self, theta: &'a [f64]) -> (f64, &'a [f64]) {
        (theta[self.first], &theta[self.first + 1..self.first + self.steps])
    }

    /// Write the steps' effects `β·δ_k` over the term's coordinates in
    /// `point` (a copy of the unconstrained vector).
    pub fn write_effects(&self, theta: &[f64], point: &mut [f64]) {
        let (whole, y) = self.coordinates(theta);
        let (shares, _) = shares_of(y);
        for (slot, share) in point[self.first..self.first + self.steps].iter_mut().zip(&shares) {
            *slot = whole * share;
        }
    }

    /// The whole effect and the shares at unconstrained `theta`.
    pub fn whole_and_shares(&self, theta: &[f64]) -> (f64, Vec<f64>) {
        let (whole, y) = self.coordinates(theta);
        (whole, shares_of(y).0)
    }

    /// The term's coordinates from its steps' effects: `β = Σ c_k`, the
    /// shares `c_k / β`. `Err` with the reason when the effects are not
    /// all of one sign or all zero (no share is then defined).
    pub fn coordinates_of(&self, effects: &[f64]) -> Result<Vec<f64>, String> {
        let whole: f64 = effects.iter().sum();
        let one_sign = effects.iter().all(|c| *c * whole > 0.0);
        if !(whole != 0.0 && whole.is_finite() && one_sign) {
            return Err(format!(
                "the steps of `{}` must all be above 0 or all below 0 (their shares of the whole effect are then defined), \
                 not {}",
                self.column,
                effects.iter().map(|c| c.to_string()).collect::<Vec<_>>().join(", ")
            ));
        }
        let shares: Vec<f64> = effects.iter().map(|c| c / whole).collect();
        let mut out = vec![whole];
        out.extend(stick_coordinates(&shares));
        Ok(out)
    }

    /// The term's log prior (whole effect's, the shares' Dirichlet) and
    /// the stick-breaking log Jacobian at unconstrained `theta`, given the
    /// gradient in the steps' effects in `grad[first..first + steps]`:
    /// replaces it by the gradient in the term's coordinates, the prior
    /// and Jacobian's included.
    pub fn pull_back(&self, theta: &[f64], grad: &mut [f64]) -> f64 {
        let (whole, y) = self.coordinates(theta);
        let (shares, log_jacobian) = shares_of(y);
        let d_effects = &grad[self.first..self.first + self.steps];
        let d_whole: f64 = d_effects.iter().zip(&shares).map(|(g, s)| g * s).sum();
        let (dirichlet, d_dirichlet) = dirichlet_log_density(&shares, self.concentration);
        let d_shares: Vec<f64> = d_effects.iter().zip(&d_dirichlet).map(|(g, d)| whole * g + d).collect();
        let d_y = stick_gradient(y, &d_shares);
        let (whole_lp, d_whole_lp) = self.whole_prior.log_density_and_derivative(whole);
        grad[self.first] = d_whole + d_whole_lp;
        grad[self.first + 1..self.first + self.steps].copy_from_slice(&d_y);
        whole_lp + dirichlet + log_jacobian
    }
}

/// The shares from the stick-breaking reals `y` (`y.len() + 1` shares)
/// and the log Jacobian of the map onto the first `y.len()` shares.
pub fn shares_of(y: &[f64]) -> (Vec<f64>, f64) {
    let n = y.len() + 1;
    let mut shares = Vec::with_capacity(n);
    let mut left: f64 = 1.0;
    let mut log_jacobian = 0.0;
    for (k, &yk) in y.iter().enumerate() {
        let x = yk - ((n - 1 - k) as f64).ln();
        let u = logistic(x);
        log_jacobian += log_logistic(x) + log_logistic(-x) + left.ln();
        shares.push(left * u);
        left *= 1.0 - u;
    }
    shares.push(left);
    (shares, log_jacobian)
}

/// The stick-breaking reals of shares on the simplex (inverse of
/// [`shares_of`]).
pub fn stick_coordinates(shares: &[f64]) -> Vec<f64> {
    let n = shares.len();
    let mut left = 1.0;
    let mut y = Vec::with_capacity(n.saturating_sub(1));
    for (k, &share) in shares[..n.saturating_sub(1)].iter().enumerate() {
        let u = (share / left).clamp(f64::MIN_POSITIVE, 1.0 - f64::EPSILON);
        y.push((u / (1.0 - u)).ln() + ((n - 1 - k) as f64).ln());
        left -= share;
    }
    y
}

/// The gradient in `y` of `f(shares(y)) + log Jacobian(y)`, given the
/// gradient of `f` in the shares (reverse pass through the stick).
fn stick_gradient(y: &[f64], d_shares: &[f64]) -> Vec<f64> {
    let n = y.len() + 1;
    let mut u = Vec::with_capacity(y.len());
    let mut left = vec![1.0];
    for (k, &yk) in y.iter().enumerate() {
        let uk = logistic(yk - ((n - 1 - k) as f64).ln());
        u.push(uk);
        let last = left[k];
        left.push(last * (1.0 - uk));
    }
    let mut d_y = vec![0.0; y.len()];
    // The derivative in the stick left after step k, starting with the last share (= left[n−1]).
    let mut d_left = d_shares[n - 1];
    for k in (0..y.len()).rev() {
        let (uk, before) = (u[k], left[k]);
        let d_u = (d_shares[k] - d_left) * before;
        // ln u + ln(1 − u) has derivative 1 − 2u in y.
        d_y[k] = d_u * uk * (1.0 - uk) + 1.0 - 2.0 * uk;
        // ln r_{k−1} of the Jacobian; r_0 = 1 is fixed.
        d_left = d_shares[k] * uk + d_left * (1.0 - uk) + if k > 0 { 1.0 / before } else { 0.0 };
    }
    d_y
}

/// The symmetric Dirichlet(α) log density at `shares` (normalising
/// constant kept) and its derivative in each share.
pub fn dirichlet_log_density(shares: &[f64], alpha: f64) -> (f64, Vec<f64>) {
    let n = shares.len() as f64;
    let constant = ln_gamma(alpha * n) - n * ln_gamma(alpha);
    let lp = constant + shares.iter().map(|s| (alpha - 1.0) * s.ln()).sum::<f64>();
    (lp, shares.iter().map(|s| (alpha - 1.0) / s).collect())
}

fn logistic(x: f64) -> f64 {
    1.0 / (1.0 + (-x).exp())
}

/// `ln logistic(x)`, stable for large `|x|`.
fn log_logistic(x: f64) -> f64 {
    if x > 0.0 { -(-x).exp().ln_1p() } else { x - x.exp().ln_1p() }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Central differences of `f` at `x`.
    fn numeric_gradient(f: impl Fn(&[f64]) -> f64, x: &[f64]) -> Vec<f64> {
        (0..x.len())
            .map(|i| {
                let h = 1e-6;
                let (mut up, mut down) = (x.to_vec(), x.to_vec());
                up[i] += h;
                down[i] -= h;
                (f(&up) - f(&down)) / (2.0 * h)
            })
            .collect()
    }

    #[test]
    fn zero_coordinates_give_equal_shares_and_the_map_inverts() {
        let (shares, _) = shares_of(&[0.0, 0.0, 0.0]);
        shares.iter().for_each(|s| assert!((s - 0.25).abs() < 1e-12, "{shares:?}"));
        let y = [0.3, -1.2, 2.0];
        let (shares, _) = shares_of(&y);
        assert!((shares.iter().sum::<f64>() - 1.0).abs() < 1e-12);
        stick_coordinates(&shares).iter().zip(y).for_each(|(a, b)| assert!((a - b).abs() < 1e-9));
    }

    /// The log Jacobian against the log determinant of the numerically
    /// differentiated map from `y` to the first `n − 1` shares.
    #[test]
    fn log_jacobian_matches_numeric_differentiation() {
        let y = [0.4, -0.7, 1.1];
        let m = y.len();
        let mut jacobian = nalgebra::DMatrix::zeros(m, m);
        for j in 0..m {
            let h = 1e-6;
            let (mut up, mut down) = (y.to_vec(), y.to_vec());
            up[j] += h;
            down[j] -= h;
            let (a, b) = (shares_of(&up).0, shares_of(&down).0);
            for i in 0..m {
                jacobian[(i, j)] = (a[i] - b[i]) / (2.0 * h);
            }
        }
        let numeric = jacobian.determinant().abs().ln();
        let (_, analytic) = shares_of(&y);
        assert!((numeric - analytic).abs() < 1e-6, "numeric {numeric}, analytic {analytic}");
    }

    #[test]
    fn term_gradient_matches_central_differences() {
        let term = StepTerm {
            column: "grade".into(),
            levels: ["a", "b", "c", "d", "e"].map(String::from).to_vec(),
            first: 1,
            steps: 4,
            concentration: 2.5,
            whole_prior: Prior::Normal { mean: 0.5, sd: 2.0 },
        };
        // A likelihood-like function of the steps' effects: Σ w_k c_k − ½ Σ c_k².
        let weights = [0.3, -0.2, 0.8, 0.1];
        let outer = |c: &[f64]| -> (f64, Vec<f64>) {
            let value = c.iter().zip(&weights).map(|(c, w)| w * c - 0.5 * c * c).sum();
            (value, c.iter().zip(&weights).map(|(c, w)| w - c).collect())
        };
        let density = |theta: &[f64]| -> f64 {
            let mut point = theta.to_vec();
            term.write_effects(theta, &mut point);
            let mut grad = vec![0.0; theta.len()];
            outer(&point[1..5]).0 + term.pull_back(theta, &mut grad)
        };
        let theta = [9.0, 1.7, 0.2, -0.5, 0.9];
        let mut point = theta.to_vec();
        term.write_effects(&theta, &mut point);
        let mut grad = vec![0.0; theta.len()];
        grad[1..5].copy_from_slice(&outer(&point[1..5]).1);
        term.pull_back(&theta, &mut grad);
        let numeric = numeric_gradient(density, &theta);
        for (i, (a, n)) in grad.iter().zip(&numeric).enumerate().skip(1) {
            assert!((a - n).abs() < 1e-5 * (1.0 + n.abs()), "coordinate {i}: analytic {a}, numeric {n}");
        }
    }

    /// Against scipy 1.x: `scipy.stats.dirichlet.logpdf([0.1, 0.25, 0.4,
    /// 0.25], [2, 2, 2, 2])` and `logpdf([0.6, 0.3, 0.1], [3.5, 3.5, 3.5])`,
    /// computed with the reference library when this test was written.
    #[test]
    fn dirichlet_matches_scipy() {
        let (a, _) = dirichlet_log_density(&[0.1, 0.25, 0.4, 0.25], 2.0);
        let (b, _) = dirichlet_log_density(&[0.6, 0.3, 0.1], 3.5);
        assert!((a - 2.533696813957433).abs() < 1e-10, "{a}");
        assert!((b - 0.2942456096476107).abs() < 1e-10, "{b}");
    }

    /// Dirichlet(α = 1): the uniform density on the simplex of n shares is
    /// Γ(n) = (n − 1)! (the Dirichlet normalising constant Γ(Σα)/ΠΓ(α),
    /// e.g. Kotz, Balakrishnan & Johnson, Continuous Multivariate
    /// Distributions (recalled)).
    #[test]
    fn uniform_dirichlet_is_the_factorial() {
        let (lp, d) = dirichlet_log_density(&[0.1, 0.2, 0.3, 0.4], 1.0);
        assert!((lp - 6f64.ln()).abs() < 1e-12);
        assert!(d.iter().all(|v| *v == 0.0));
    }
}
