"""Reference checks of the beta family (shares strictly between 0 and 1).

Sources named beside each check: scipy.stats.beta (log densities, shapes
μφ and (1 − μ)φ for mean μ and precision φ), statsmodels BetaModel
(statsmodels.othermod.betareg: logit link for the mean, log link for a
constant precision; maximum likelihood as the flat-prior limit),
scipy.stats.chisquare (calibration ranks).
Data: invented shares of ground covered by moss on forest plots, generated
with a fixed seed.
"""
import numpy as np
import pytest
import scipy.stats as st
from scipy.special import expit
from statsmodels.othermod.betareg import BetaModel

from calibration import assert_ranks_uniform

# Wide normal priors on the coefficients; lognormal(0, s) on φ has density
# ∝ exp(−(log φ)²/2s²)/φ, whose 1/φ the Jacobian of φ = e^u cancels, so with a
# wide s the mode in log φ is the maximum-likelihood φ.
WIDE = ("prior intercepts: normal(0, 1000000)\nprior slopes: normal(0, 1000000)\n"
        "prior precision: lognormal(0, 1000000)\n")
MODEL = "moss from soil, gap using plots\nfamily beta\n"


def plots(n=400, seed=19, phi=12.0):
    rng = np.random.default_rng(seed)
    soil = rng.integers(0, 3, n)
    gap = rng.uniform(0, 40, n)
    mu = expit(-0.6 + 0.03 * (gap - 20) + 0.5 * (soil == 1) - 0.3 * (soil == 2))
    return dict(soil=soil, gap=gap, moss=rng.beta(mu * phi, (1 - mu) * phi))


def columns(d):
    return {
        "soil": {"category": {"codes": d["soil"].tolist(), "levels": ["loam", "sand", "peat"]}},
        "gap": {"real": d["gap"].tolist()},
        "moss": {"real": d["moss"].tolist()},
    }


def design(d):
    return np.column_stack([(d["soil"] == k).astype(float) for k in range(3)] + [d["gap"] - d["gap"].mean()])


def beta_logpdf(y, eta, phi):
    mu = expit(eta)
    return st.beta.logpdf(y, mu * phi, (1 - mu) * phi)


def test_log_likelihood_matches_scipy_beta(probe):
    """Σ scipy.stats.beta.logpdf at a low, a moderate and a high precision."""
    d = plots()
    for phi in (0.7, 12.0, 900.0):
        params = [-0.5, 0.4, -0.9, 0.03, phi]
        answer = probe("model", {"action": "log_likelihood", "columns": columns(d), "model": MODEL, "params": params})
        assert "error" not in answer, answer
        assert answer["names"] == ["soil[loam]", "soil[sand]", "soil[peat]", "gap slope", "precision"]
        reference = beta_logpdf(d["moss"], design(d) @ params[:4], phi).sum()
        assert answer["log_likelihood"] == pytest.approx(reference, rel=1e-10)


def test_rows_match_scipy_beta(probe):
    """Each row's log density (what `score predictions` sums)."""
    d = plots(100, 6)
    params = [-0.4, 0.2, -0.8, 0.02, 9.0]
    answer = probe("model", {"action": "pointwise", "columns": columns(d), "model": MODEL, "params": params})
    assert "error" not in answer, answer
    reference = beta_logpdf(d["moss"], design(d) @ params[:4], params[4])
    np.testing.assert_allclose(answer["log_densities"], reference, rtol=1e-11, atol=1e-11)


def test_mode_with_wide_priors_matches_statsmodels_beta_model(probe):
    """Flat-prior limit: statsmodels BetaModel maximum likelihood; its
    precision parameter is log φ (log link, constant precision design)."""
    d = plots()
    answer = probe("model", {"action": "fit", "columns": columns(d), "model": MODEL + WIDE})
    assert "error" not in answer, answer
    mle = BetaModel(d["moss"], design(d)).fit(method="newton", maxiter=200, tol=1e-12, disp=False)
    params = np.asarray(mle.params)
    np.testing.assert_allclose(answer["mode"][:4], params[:4], rtol=1e-4, atol=1e-4)
    assert answer["mode"][4] == pytest.approx(np.exp(params[4]), rel=1e-4)


def test_calibration_ranks_pass_scipy_chisquare(probe):
    """Talts et al. (2018): ranks of prior draws among NUTS posterior draws are
    uniform for a correct posterior; scipy.stats.chisquare on 10 equal bins
    does not reject at 1%."""
    rng = np.random.default_rng(53)
    n = 40
    gap = rng.normal(0, 1, n)
    cols = {"gap": {"real": gap.tolist()}, "moss": {"real": rng.uniform(0.1, 0.9, n).tolist()}}
    model = ("moss from gap using plots\nfamily beta\n"
             "prior intercepts: normal(0, 0.7)\nprior slopes: normal(0, 0.5)\n"
             "prior precision: lognormal(2.5, 0.5)\n")
    assert_ranks_uniform(probe, cols, model, seed=59)
