//! A pooled group with varying slopes: each level has `K = 1 + k`
//! departures (the intercept's, then one per varying slope), jointly normal
//! around 0 with spreads `τ₀ … τₖ` and a learned `K × K` correlation
//! matrix `Ω = L·Lᵀ`.
//!
//! **The correlation matrix** is reached through its Cholesky factor `L`
//! and that through its canonical partial correlations (CPCs): `zᵢⱼ` for
//! `j < i`, the correlation of effects `i` and `j` given effects `0 … j−1`,
//! each in (−1, 1) and free of the others. With `sᵢ₀ = 1` and
//! `sᵢ,ⱼ₊₁ = sᵢⱼ·√(1 − zᵢⱼ²)`, row `i` of `L` is `Lᵢⱼ = zᵢⱼ·sᵢⱼ` and
//! `Lᵢᵢ = sᵢᵢ` (every row has unit length, so `Ω` has a unit diagonal).
//! The sampler sees `yᵢⱼ = atanh zᵢⱼ`, stored row by row
//! (`(1,0), (2,0), (2,1), (3,0), …`); the correlations are reported in the
//! same order.
//!
//! **The LKJ prior** `p(Ω) ∝ det(Ω)^(η−1)` (Lewandowski, Kurowicka & Joe
//! 2009, J. Multivariate Analysis 100, 1989–2001) is, in the vine
//! construction of that paper (§2.4), the law under which the CPCs are
//! independent, `zᵢⱼ` on (−1, 1) with density `∝ (1 − z²)^(βⱼ−1)`,
//! `βⱼ = η + (K − 2 − j)/2` (a beta(βⱼ, βⱼ) stretched to (−1, 1)). With the
//! Jacobian `dz/dy = 1 − z²` of the tanh, the density in the sampler's
//! coordinates is `Σᵢ>ⱼ βⱼ·log(1 − tanh² yᵢⱼ)`, without the constant. For
//! `K = 2` it is `η·log(1 − ρ²)`; the test suite checks the general form
//! against `det(Ω)^(η−1)` through a numerical Jacobian.
//!
//! **Centred and non-centred effects.** Coordinates: `uₑ = log τₑ` for
//! every effect, then per level either the departure itself (a *centred*
//! effect, shifted by the intercept or the population slope when the group
//! is sampled around them) or a standard score (a *non-centred* one). The
//! centred effects are a leading run — the first `c` of intercept, slopes
//! in the order written — so the Cholesky factor's leading `c × c` block
//! `L_CC` is the factor of their own correlations. Level `j`'s scores are
//! `z_C = L_CC⁻¹·x_C` (`xₑ = aₑ/τₑ`) for the centred effects and the
//! coordinates for the rest, and every departure is `aₑ = τₑ·(L·z)ₑ`. The
//! density per level is the centred effects' multivariate normal in their
//! departures times the rest's standard normal in their scores (the
//! conditional law of the later effects given the earlier, non-centred):
//! `−K/2·log 2π − Σₑ<c (uₑ + log Lₑₑ) − ½‖z‖²`. `c = 0` is the fully
//! non-centred form, `c = K` the fully centred one.
//!
//! Gradients in `L` are carried to `y` by [`partial_gradient`]: the chain
//! rule through `Lᵢⱼ = zᵢⱼ·sᵢⱼ`, in which `zᵢⱼ` also scales every later
//! entry of its row by `√(1 − zᵢⱼ²)`.

use super::super::prior::Prior;

const HALF_LOG_TWO_PI: f64 = 0.918_938_533_204_672_7;

/// The position of pair `(i, j)`, `j < i`, in the row-wise lower triangle.
pub fn pair_index(i: usize, j: usize) -> usize {
    i * (i - 1) / 2 + j
}

/// The number of correlations among `k` effects.
pub fn pair_count(k: usize) -> usize {
    k * k.saturating_sub(1) / 2
}

/// `βⱼ` of the module docs: the beta parameter of the CPCs in column `j`
/// of a `k × k` correlation matrix under lkj(η).
pub fn partial_correlation_beta(eta: f64, k: usize, j: usize) -> f64 {
    eta + (k as f64 - 2.0 - j as f64) / 2.0
}

/// The Cholesky factor (row-major `k × k`) of the correlation matrix with
/// CPCs `z` (row-wise).
pub fn cholesky_from_partial(z: &[f64], k: usize) -> Vec<f64> {
    let mut l = vec![0.0; k * k];
    l[0] = 1.0;
    for i in 1..k {
        let mut rest = 1.0_f64;
        for j in 0..i {
            let zz = z[pair_index(i, j)];
            l[i * k + j] = zz * rest.sqrt();
            rest *= 1.0 - zz * zz;
        }
        l[i * k + i] = rest.sqrt();
    }
    l
}

/// The CPCs (row-wise) of the correlation matrix with Cholesky factor `l`.
pub fn partial_from_cholesky(l: &[f64], k: usize) -> Vec<f64> {
    let mut z = vec![0.0; pair_count(k)];
    for i in 1..k {
        let mut rest = 1.0_f64;
        for j in 0..i {
            z[pair_index(i, j)] = l[i * k + j] / rest.sqrt();
            rest -= l[i * k + j] * l[i * k + j];
        }
    }
    z
}

/// The Cholesky factor of the correlation matrix whose lower entries are
/// `r` (row-wise); `None` unless it is positive definite.
pub fn cholesky_of_correlations(r: &[f64], k: usize) -> Option<Vec<f64>> {
    let entry = |i: usize, j: usize| if i == j { 1.0 } else { r[pair_index(i.max(j), i.min(j))] };
    let mut l = vec![0.0; k * k];
    for i in 0..k {
        for j in 0..=i {
            let sum: f64 = (0..j).map(|m| l[i * k + m] * l[j * k + m]).sum();
            if i == j {
                let d = entry(i, i) - sum;
                if !(d > 0.0) {
                    return None;
                }
                l[i * k + i] = d.sqrt();
            } else {
                l[i * k + j] = (entry(i, j) - sum) / l[j * k + j];
            }
        }
    }
    Some(l)
}

/// The correlations (row-wise lower entries) of `L·Lᵀ`.
pub fn correlations_of(l: &[f64], k: usize) -> Vec<f64> {
    let mut r = Vec::with_capacity(pair_count(k));
    for i in 1..k {
        for j in 0..i {
            r.push((0..=j).map(|m| l[i * k + m] * l[j * k + m]).sum());
        }
    }
    r
}

/// `L·z`, `L` lower triangular `k × k`.
pub fn lower_times(l: &[f64], z: &[f64], k: usize) -> Vec<f64> {
    (0..k).map(|e| (0..=e).map(|m| l[e * k + m] * z[m]).sum()).collect()
}

/// `w` with `L_x·w = x` (forward substitution), `L_x` the leading block of
/// the `k × k` factor `l` as wide as `x`.
fn forward_solve(l: &[f64], x: &[f64], k: usize) -> Vec<f64> {
    let mut w = vec![0.0; x.len()];
    for i in 0..x.len() {
        let sum: f64 = (0..i).map(|m| l[i * k + m] * w[m]).sum();
        w[i] = (x[i] - sum) / l[i * k + i];
    }
    w
}

/// `log(1 − tanh²v) = −2·log cosh v`, without overflow for large |v|.
pub fn log_one_minus_tanh_squared(v: f64) -> f64 {
    let a = v.abs();
    2.0 * (std::f64::consts::LN_2 - a - (-2.0 * a).exp().ln_1p())
}

/// The lkj(η) log density of a `k × k` correlation matrix in the
/// sampler's coordinates `y` (module docs, without the constant); adds its
/// gradient into `grad`.
pub fn lkj_log_density(y: &[f64], k: usize, eta: f64, grad: &mut [f64]) -> f64 {
    let mut total = 0.0;
    for i in 1..k {
        for j in 0..i {
            let at = pair_index(i, j);
            let beta = partial_correlation_beta(eta, k, j);
            total += beta * log_one_minus_tanh_squared(y[at]);
            grad[at] += -2.0 * beta * y[at].tanh();
        }
    }
    total
}

/// Carry a gradient `gl` in the entries of `L` (row-major, lower
/// triangle with the diagonal) to the coordinates `y = atanh z`, adding it
/// into `grad_y` (module docs).
fn partial_gradient(gl: &[f64], l: &[f64], z: &[f64], k: usize, grad_y: &mut [f64]) {
    for i in 1..k {
        // tail[j] = Σ over j' > j (the diagonal included) of gl·L in row i.
        let mut tail = vec![0.0; i];
        let mut running = gl[i * k + i] * l[i * k + i];
        for j in (0..i).rev() {
            tail[j] = running;
            running += gl[i * k + j] * l[i * k + j];
        }
        let mut s = 1.0;
        for j in 0..i {
            let zz = z[pair_index(i, j)];
            let one_minus = 1.0 - zz * zz;
            grad_y[pair_index(i, j)] += gl[i * k + j] * s * one_minus - zz * tail[j];
            s *= one_minus.sqrt();
        }
    }
}

/// A correlated group as its density sees it.
pub struct Correlated<'a> {
    /// Levels `J`.
    pub levels: usize,
    /// Effects `K` (intercept and slopes).
    pub effects: usize,
    /// How many effects, from the first, are sampled centred (module docs);
    /// the rest are non-centred.
    pub centred: usize,
    /// Each effect's spread prior.
    pub spread_priors: Vec<&'a Prior>,
    /// η of the LKJ prior.
    pub lkj: f64,
}

/// The Cholesky factor, CPCs and spreads at coordinates `theta`.
struct Unpacked {
    l: Vec<f64>,
    z: Vec<f64>,
    tau: Vec<f64>,
}

impl Correlated<'_> {
    /// Coordinates: `K·(1 + J)` (a log spread and J coordinates per effect)
    /// and the correlations.
    pub fn dim(&self) -> usize {
        self.effects * (1 + self.levels) + pair_count(self.effects)
    }

    fn stride(&self) -> usize {
        1 + self.levels
    }

    fn unpack(&self, theta: &[f64]) -> Unpacked {
        let k = self.effects;
        let z: Vec<f64> = theta[k * self.stride()..self.dim()].iter().map(|v| v.tanh()).collect();
        let l = cholesky_from_partial(&z, k);
        let tau = (0..k).map(|e| theta[e * self.stride()].exp()).collect();
        Unpacked { l, z, tau }
    }

    /// Level `level`'s standard scores of every effect: the centred
    /// effects' `L_CC⁻¹·x_C` (`xₑ = (bₑ − shiftₑ)/τₑ`, `L_CC` the leading
    /// block of `L`, itself the Cholesky factor of their correlations), the
    /// non-centred effects' coordinates; and the `x_C`.
    fn scores(&self, theta: &[f64], p: &Unpacked, shifts: &[f64], level: usize) -> (Vec<f64>, Vec<f64>) {
        let (k, c, stride) = (self.effects, self.centred, self.stride());
        let x: Vec<f64> = (0..c).map(|e| (theta[e * stride + 1 + level] - shifts[e]) / p.tau[e]).collect();
        let mut z = forward_solve(&p.l, &x, k);
        z.extend((c..k).map(|e| theta[e * stride + 1 + level]));
        (z, x)
    }

    /// The departures (effect after effect, `J` each) at `theta`, centred
    /// coordinates less each effect's `shifts`: `aₑ = τₑ·(L·z)ₑ` with the
    /// scores of [`Correlated::scores`].
    pub fn departures(&self, theta: &[f64], shifts: &[f64]) -> Vec<f64> {
        let (k, j) = (self.effects, self.levels);
        let p = self.unpack(theta);
        let mut out = vec![0.0; k * j];
        for level in 0..j {
            let (z, _) = self.scores(theta, &p, shifts, level);
            for (e, a) in lower_times(&p.l, &z, k).into_iter().enumerate() {
                out[e * j + level] = p.tau[e] * a;
            }
        }
        out
    }

    /// The log prior of the group at `theta` (centred coordinates shifted
    /// by `shifts`), given the likelihood's derivatives `d_lik` in its
    /// departures: writes the gradient of prior plus likelihood into
    /// `grad` and adds the shifts' derivatives into `d_shifts`.
    ///
    /// Per level, with `z` the scores: the density is `−K/2·log 2π −
    /// Σₑ<c (uₑ + log Lₑₑ) − ½‖z‖²` (the centred effects' normal density in
    /// their departures, the non-centred ones' in their scores). The
    /// gradient is first taken in `z` as if every effect were non-centred,
    /// then carried through `z_C = L_CC⁻¹·x_C` to the centred coordinates,
    /// their spreads and `L`: with `r = L_CC⁻ᵀ·g_C`, `∂/∂bₑ = rₑ/τₑ`,
    /// `∂/∂uₑ = −rₑxₑ` and `∂/∂Lₑₘ = −rₑzₘ` (from `dz = −L⁻¹·dL·z`).
    pub fn density(&self, theta: &[f64], d_lik: &[f64], shifts: &[f64], grad: &mut [f64], d_shifts: &mut [f64]) -> f64 {
        let (k, c, j, stride) = (self.effects, self.centred, self.levels, self.stride());
        let p = self.unpack(theta);
        let mut total = self.spread_part(theta, &p.tau, grad);
        let per_level: f64 = (0..c).map(|e| theta[e * stride] + p.l[e * k + e].ln()).sum::<f64>() + k as f64 * HALF_LOG_TWO_PI;
        let mut gl = vec![0.0; k * k];
        for level in 0..j {
            let (z, x) = self.scores(theta, &p, shifts, level);
            total -= per_level + 0.5 * z.iter().map(|v| v * v).sum::<f64>();
            let mut g_z: Vec<f64> = z.iter().map(|v| -v).collect();
            for e in 0..k {
                let d = d_lik[e * j + level] * p.tau[e];
                let mut a = 0.0;
                for m in 0..=e {
                    a += p.l[e * k + m] * z[m];
                    gl[e * k + m] += d * z[m];
                    g_z[m] += d * p.l[e * k + m];
                }
                grad[e * stride] += d * a;
            }
            let r = back_solve_leading(&p.l, &g_z[..c], k);
            for e in 0..c {
                let out = r[e] / p.tau[e];
                grad[e * stride + 1 + level] = out;
                d_shifts[e] -= out;
                grad[e * stride] -= r[e] * x[e] + 1.0;
                for m in 0..=e {
                    gl[e * k + m] -= r[e] * z[m];
                }
            }
            for e in c..k {
                grad[e * stride + 1 + level] = g_z[e];
            }
        }
        for e in 0..c {
            gl[e * k + e] -= j as f64 / p.l[e * k + e];
        }
        self.correlation_part(theta, &p, &gl, grad) + total
    }

    /// The spread priors with the Jacobians of `τ = eᵘ`: sets `grad`'s
    /// log-spread entries and returns the log density.
    fn spread_part(&self, theta: &[f64], tau: &[f64], grad: &mut [f64]) -> f64 {
        let mut total = 0.0;
        for (e, prior) in self.spread_priors.iter().enumerate() {
            let (lp, dp) = prior.log_density_and_derivative(tau[e]);
            total += lp + theta[e * self.stride()];
            grad[e * self.stride()] = dp * tau[e] + 1.0;
        }
        total
    }

    /// The LKJ prior with its Jacobian, and the gradient `gl` in `L`
    /// carried to the correlation coordinates (written into `grad`).
    fn correlation_part(&self, theta: &[f64], p: &Unpacked, gl: &[f64], grad: &mut [f64]) -> f64 {
        let k = self.effects;
        let start = k * self.stride();
        let grad_y = &mut grad[start..self.dim()];
        grad_y.fill(0.0);
        partial_gradient(gl, &p.l, &p.z, k, grad_y);
        lkj_log_density(&theta[start..self.dim()], k, self.lkj, grad_y)
    }

    /// Constrained values: each effect's spread and departures, then the
    /// correlations; `departures` as from [`Correlated::departures`].
    pub fn constrain(&self, theta: &[f64], departures: &[f64]) -> Vec<f64> {
        let (k, j) = (self.effects, self.levels);
        let p = self.unpack(theta);
        let mut out = Vec::with_capacity(self.dim());
        for e in 0..k {
            out.push(p.tau[e]);
            out.extend_from_slice(&departures[e * j..(e + 1) * j]);
        }
        out.extend(correlations_of(&p.l, k));
        out
    }

    /// Coordinates from constrained `params` (module order), centred ones
    /// shifted by `shifts`; an error gives the offset of a spread that is
    /// not positive, or of the first correlation when they do not form a
    /// positive definite matrix.
    pub fn unconstrain(&self, params: &[f64], shifts: &[f64]) -> Result<Vec<f64>, usize> {
        let (k, c, j, stride) = (self.effects, self.centred, self.levels, self.stride());
        for e in 0..k {
            let t = params[e * stride];
            if !(t > 0.0 && t.is_finite()) {
                return Err(e * stride);
            }
        }
        let start = k * stride;
        let l = cholesky_of_correlations(&params[start..self.dim()], k).ok_or(start)?;
        let mut out = vec![0.0; self.dim()];
        for e in 0..k {
            out[e * stride] = params[e * stride].ln();
        }
        for level in 0..j {
            let x: Vec<f64> = (0..k).map(|e| params[e * stride + 1 + level] / params[e * stride]).collect();
            let z = forward_solve(&l, &x, k);
            for e in 0..k {
                out[e * stride + 1 + level] = if e < c { params[e * stride + 1 + level] + shifts[e] } else { z[e] };
            }
        }
        for (o, z) in out[start..].iter_mut().zip(partial_from_cholesky(&l, k)) {
            *o = z.clamp(-1.0 + 1e-15, 1.0 - 1e-15).atanh();
        }
        Ok(out)
    }

    /// A starting point: log spreads at their priors' central points and
    /// moved by `score`, departures 0 moved by one spread per unit (centred
    /// effects, around `shifts`) or scores as given (non-centred),
    /// correlations near 0 (a quarter of a score in `atanh`).
    pub fn start(&self, score: &dyn Fn(usize) -> f64, shifts: &[f64]) -> Vec<f64> {
        let (k, stride) = (self.effects, self.stride());
        let mut out = Vec::with_capacity(self.dim());
        for (e, prior) in self.spread_priors.iter().enumerate() {
            let u = prior.central_point().ln() + score(e * stride);
            out.push(u);
            for level in 0..self.levels {
                let s = score(e * stride + 1 + level);
                out.push(if e < self.centred { shifts[e] + u.exp() * s } else { s });
            }
        }
        out.extend((k * stride..self.dim()).map(|at| 0.25 * score(at)));
        out
    }
}

/// `r` with `L_CCᵀ·r = g`, `L_CC` the leading `c × c` block of the
/// `k × k` factor `l` (`c` the length of `g`).
fn back_solve_leading(l: &[f64], g: &[f64], k: usize) -> Vec<f64> {
    let c = g.len();
    let mut r = vec![0.0; c];
    for i in (0..c).rev() {
        let sum: f64 = (i + 1..c).map(|m| l[m * k + i] * r[m]).sum();
        r[i] = (g[i] - sum) / l[i * k + i];
    }
    r
}
