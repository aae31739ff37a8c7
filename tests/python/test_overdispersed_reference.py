"""Reference checks of the gamma-poisson family (overdispersed counts).

Sources named beside each check: scipy.stats.nbinom (log densities, with
n = 1/κ² and p = n/(n + μ) for mean μ and overdispersion κ), statsmodels
NegativeBinomial with loglike_method='nb2' (maximum likelihood as the
flat-prior limit; its alpha is κ²), scipy.stats.chisquare (calibration ranks).
Data: invented seedling counts on forest plots, generated with a fixed seed.
"""
import numpy as np
import pytest
import scipy.stats as st
import statsmodels.api as sm

from calibration import assert_ranks_uniform

# Wide normal priors on the coefficients; lognormal(0, s) on κ has density
# ∝ exp(−(log κ)²/2s²)/κ, whose 1/κ the Jacobian of κ = e^u cancels, so with a
# wide s the mode in log κ is the maximum-likelihood κ.
WIDE = ("prior intercepts: normal(0, 1000000)\nprior slopes: normal(0, 1000000)\n"
        "prior overdispersion: lognormal(0, 1000000)\n")


def plots(n=500, seed=17, kappa=0.6):
    """Seedlings per plot: a poisson count whose rate (log-linear in canopy
    gap and soil) is multiplied by a gamma variable of mean 1 and sd κ."""
    rng = np.random.default_rng(seed)
    soil = rng.integers(0, 3, n)
    gap = rng.uniform(0, 40, n)
    mu = np.exp(0.8 + 0.03 * gap + 0.3 * (soil == 1) - 0.4 * (soil == 2))
    rate = mu * rng.gamma(1 / kappa ** 2, kappa ** 2, n)
    return dict(soil=soil, gap=gap, seedlings=rng.poisson(rate))


def columns(d):
    return {
        "soil": {"category": {"codes": d["soil"].tolist(), "levels": ["loam", "sand", "peat"]}},
        "gap": {"real": d["gap"].tolist()},
        "seedlings": {"count": d["seedlings"].tolist()},
    }


def design(d):
    return np.column_stack([(d["soil"] == k).astype(float) for k in range(3)] + [d["gap"] - d["gap"].mean()])


MODEL = "seedlings from soil, gap using plots\nfamily gamma_poisson\n"


def nbinom_logpmf(y, mu, kappa):
    n = 1 / kappa ** 2
    return st.nbinom.logpmf(y, n, n / (n + mu))


def test_log_likelihood_matches_scipy_nbinom(probe):
    """Σ scipy.stats.nbinom.logpmf, at a small, a moderate and a large κ
    (the small one far into the poisson limit, where the gamma functions of
    the plain formula cancel badly)."""
    d = plots()
    x = design(d)
    for kappa in (0.002, 0.6, 3.0):
        params = [0.9, 1.1, 0.5, 0.03, kappa]
        answer = probe("model", {"action": "log_likelihood", "columns": columns(d), "model": MODEL,
                                 "params": params})
        assert "error" not in answer, answer
        assert answer["names"] == ["soil[loam]", "soil[sand]", "soil[peat]", "gap slope", "overdispersion"]
        reference = nbinom_logpmf(d["seedlings"], np.exp(x @ params[:4]), kappa).sum()
        assert answer["log_likelihood"] == pytest.approx(reference, rel=1e-10)


def test_rows_match_scipy_nbinom(probe):
    """Each row's log density (what `score predictions` sums) against
    scipy.stats.nbinom.logpmf."""
    d = plots(120, 5)
    params = [0.7, 1.0, 0.4, 0.02, 0.8]
    answer = probe("model", {"action": "pointwise", "columns": columns(d), "model": MODEL, "params": params})
    assert "error" not in answer, answer
    reference = nbinom_logpmf(d["seedlings"], np.exp(design(d) @ params[:4]), params[4])
    np.testing.assert_allclose(answer["log_densities"], reference, rtol=1e-11, atol=1e-11)


def test_mode_with_wide_priors_matches_statsmodels_negative_binomial(probe):
    """Flat-prior limit: statsmodels NegativeBinomial (nb2) maximum likelihood;
    our overdispersion κ is the square root of its alpha."""
    d = plots()
    answer = probe("model", {"action": "fit", "columns": columns(d), "model": MODEL + WIDE})
    assert "error" not in answer, answer
    mle = sm.NegativeBinomial(d["seedlings"], design(d), loglike_method="nb2").fit(
        method="newton", maxiter=200, tol=1e-12, disp=False)
    params = np.asarray(mle.params)
    np.testing.assert_allclose(answer["mode"][:4], params[:4], rtol=1e-4, atol=1e-4)
    assert answer["mode"][4] == pytest.approx(np.sqrt(params[4]), rel=1e-4)


def test_calibration_ranks_pass_scipy_chisquare(probe):
    """Talts et al. (2018): ranks of prior draws among NUTS posterior draws are
    uniform for a correct posterior; scipy.stats.chisquare on 10 equal bins of
    the ranks (0..99) gives our statistic and p-value, and does not reject at 1%."""
    rng = np.random.default_rng(43)
    n = 40
    gap = rng.normal(0, 1, n)
    cols = {"gap": {"real": gap.tolist()}, "seedlings": {"count": rng.poisson(3, n).tolist()}}
    model = ("seedlings from gap using plots\nfamily gamma_poisson\n"
             "prior intercepts: normal(1, 0.5)\nprior slopes: normal(0, 0.5)\n"
             "prior overdispersion: half_normal(0.7)\n")
    assert_ranks_uniform(probe, cols, model, seed=47)
