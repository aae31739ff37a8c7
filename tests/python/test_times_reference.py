"""Reference checks of the time families (exponential and Weibull, rows cut
short adding their log survival).

Sources named beside each check: scipy.stats.weibull_min and scipy.stats.expon
(log densities `logpdf` and log survival functions `logsf`; the Weibull scale
λ = mean / Γ(1 + 1/k) for a mean e^η), statsmodels GLM (the exponential
likelihood with rows cut short equals a poisson likelihood of the event
indicator with offset log(time) and coefficients of opposite sign — Holford
1980, "The analysis of rates and of survivorship using log-linear models",
Biometrics 36; recalled), scipy.optimize.minimize on a Weibull likelihood
written from scipy's logpdf and logsf (statsmodels has no parametric Weibull
regression with censoring; its PHReg is the semi-parametric proportional
hazards model, whose coefficients mean something else), and
scipy.stats.chisquare (calibration ranks).
Data: invented days to germination of seeds in trays at several warmths,
the trial ending before some seeds sprouted, generated with a fixed seed.
"""
import numpy as np
import pytest
import scipy.optimize as opt
import scipy.stats as st
import statsmodels.api as sm
from scipy.special import gammaln

from calibration import assert_ranks_uniform

# Wide normal priors on the coefficients; lognormal(0, s) on the shape k has
# density ∝ exp(−(log k)²/2s²)/k, whose 1/k the Jacobian of k = e^u cancels,
# so with a wide s the mode in log k is the maximum-likelihood k.
WIDE = "prior intercepts: normal(0, 1000000)\nprior slopes: normal(0, 1000000)\n"
WIDE_SHAPE = "prior shape: lognormal(0, 1000000)\n"
TERMS = "days from tray, warmth using seeds\n"
LEVELS = ["clay", "peat", "sand"]


def seeds(n=400, seed=23, shape=1.7, follow_up=(8.0, 40.0)):
    rng = np.random.default_rng(seed)
    tray = rng.integers(0, 3, n)
    warmth = rng.uniform(12, 28, n)
    eta = 2.6 - 0.06 * (warmth - 20) + 0.3 * (tray == 1) - 0.2 * (tray == 2)
    scale = np.exp(eta - gammaln(1 + 1 / shape))
    event_time = scale * rng.weibull(shape, n)
    end = rng.uniform(*follow_up, n)
    cut = event_time > end
    return dict(tray=tray, warmth=warmth, days=np.where(cut, end, event_time), cut=cut)


def columns(d, cut_as="binary"):
    cut = d["cut"].astype(int).tolist()
    return {
        "tray": {"category": {"codes": d["tray"].tolist(), "levels": LEVELS}},
        "warmth": {"real": d["warmth"].tolist()},
        "days": {"real": d["days"].tolist()},
        "unsprouted": {cut_as: cut},
    }


def design(d):
    return np.column_stack([(d["tray"] == k).astype(float) for k in range(3)] + [d["warmth"] - d["warmth"].mean()])


def weibull_rows(d, eta, k):
    """Each row's log density (event) or log survival (cut short), from scipy."""
    scale = np.exp(eta - gammaln(1 + 1 / k))
    return np.where(d["cut"], st.weibull_min.logsf(d["days"], k, scale=scale),
                    st.weibull_min.logpdf(d["days"], k, scale=scale))


def exponential_rows(d, eta):
    mean = np.exp(eta)
    return np.where(d["cut"], st.expon.logsf(d["days"], scale=mean), st.expon.logpdf(d["days"], scale=mean))


def test_data_have_rows_cut_short():
    d = seeds()
    assert 0.15 < d["cut"].mean() < 0.6, d["cut"].mean()


@pytest.mark.parametrize("k", [0.6, 1.7, 6.0])
def test_weibull_log_likelihood_matches_scipy(probe, k):
    """Σ scipy.stats.weibull_min.logpdf over events plus logsf over rows cut short."""
    d = seeds()
    params = [2.4, 2.9, 2.3, -0.05, k]
    model = TERMS + "family weibull cut short by unsprouted\n"
    answer = probe("model", {"action": "log_likelihood", "columns": columns(d), "model": model, "params": params})
    assert "error" not in answer, answer
    assert answer["names"] == ["tray[clay]", "tray[peat]", "tray[sand]", "warmth slope", "shape"]
    reference = weibull_rows(d, design(d) @ params[:4], k).sum()
    assert answer["log_likelihood"] == pytest.approx(reference, rel=1e-10)


def test_exponential_log_likelihood_matches_scipy(probe):
    """Σ scipy.stats.expon.logpdf / logsf with scale the mean e^η; the cut
    column given as 0/1 counts rather than yes/no."""
    d = seeds()
    params = [2.4, 2.9, 2.3, -0.05]
    model = TERMS + "family exponential cut short by unsprouted\n"
    answer = probe("model", {"action": "log_likelihood", "columns": columns(d, "count"), "model": model, "params": params})
    assert "error" not in answer, answer
    reference = exponential_rows(d, design(d) @ params).sum()
    assert answer["log_likelihood"] == pytest.approx(reference, rel=1e-10)


def test_rows_match_scipy(probe):
    """Each row's log density or log survival (what `score predictions` sums)."""
    d = seeds(120, 5)
    params = [2.5, 2.8, 2.2, -0.04, 2.3]
    model = TERMS + "family weibull cut short by unsprouted\n"
    answer = probe("model", {"action": "pointwise", "columns": columns(d), "model": model, "params": params})
    assert "error" not in answer, answer
    reference = weibull_rows(d, design(d) @ params[:4], params[4])
    np.testing.assert_allclose(answer["log_densities"], reference, rtol=1e-11, atol=1e-11)


def test_exponential_mode_matches_statsmodels_poisson_with_offset(probe):
    """Flat-prior limit of the exponential with rows cut short: statsmodels
    GLM poisson of the event indicator with offset log(days) (Holford 1980;
    recalled); its coefficients are the log rates, the negatives of ours."""
    d = seeds(shape=1.0)
    model = TERMS + "family exponential cut short by unsprouted\n" + WIDE
    answer = probe("model", {"action": "fit", "columns": columns(d), "model": model})
    assert "error" not in answer, answer
    events = (~d["cut"]).astype(float)
    glm = sm.GLM(events, design(d), family=sm.families.Poisson(), offset=np.log(d["days"])).fit(tol=1e-12)
    np.testing.assert_allclose(answer["mode"], -np.asarray(glm.params), rtol=1e-5, atol=1e-6)
    assert any("cut short" in n and f"{int(d['cut'].sum())} of 400 rows" in n for n in answer["notes"]), answer["notes"]


def test_exponential_mode_without_censoring_matches_statsmodels_gamma_glm(probe):
    """No row cut short: the exponential is the gamma with shape 1, whose
    log-link GLM coefficients (statsmodels, any dispersion) are the
    maximum-likelihood ones."""
    d = seeds(shape=1.0, follow_up=(1e9, 2e9))
    assert not d["cut"].any()
    model = TERMS + "family exponential\n" + WIDE
    answer = probe("model", {"action": "fit", "columns": columns(d), "model": model})
    assert "error" not in answer, answer
    glm = sm.GLM(d["days"], design(d), family=sm.families.Gamma(sm.families.links.Log())).fit(tol=1e-12)
    np.testing.assert_allclose(answer["mode"], np.asarray(glm.params), rtol=1e-5, atol=1e-6)


def test_weibull_mode_matches_a_general_optimiser(probe):
    """Flat-prior limit of the Weibull with rows cut short: the maximum of
    Σ scipy logpdf/logsf found by scipy.optimize.minimize (BFGS, then
    Nelder–Mead polish) over the coefficients and log(shape)."""
    d = seeds()
    model = TERMS + "family weibull cut short by unsprouted\n" + WIDE + WIDE_SHAPE
    answer = probe("model", {"action": "fit", "columns": columns(d), "model": model})
    assert "error" not in answer, answer
    x = design(d)

    def negative(theta):
        return -weibull_rows(d, x @ theta[:4], np.exp(theta[4])).sum()

    start = np.array([2.0, 2.0, 2.0, 0.0, 0.0])
    best = opt.minimize(negative, start, method="BFGS", options={"gtol": 1e-9})
    best = opt.minimize(negative, best.x, method="Nelder-Mead", options={"xatol": 1e-10, "fatol": 1e-12, "maxiter": 20000})
    np.testing.assert_allclose(answer["mode"][:4], best.x[:4], rtol=1e-4, atol=1e-4)
    assert answer["mode"][4] == pytest.approx(np.exp(best.x[4]), rel=1e-4)


def test_calibration_with_rows_cut_short_passes_scipy_chisquare(probe):
    """Talts et al. (2018): ranks of prior draws among NUTS posterior draws
    are uniform for a correct posterior. The outcomes are simulated by the
    model and cut at the data's follow-up ends (fixed, so the check stays
    exact); scipy.stats.chisquare on 10 equal bins does not reject at 1%."""
    d = seeds(40, 61)
    cols = {"warmth": {"real": (d["warmth"] - 20).tolist()}, "days": {"real": d["days"].tolist()},
            "unsprouted": {"binary": d["cut"].astype(int).tolist()}}
    model = ("days from warmth using seeds\nfamily weibull cut short by unsprouted\n"
             "prior intercepts: normal(2.5, 0.5)\nprior slopes: normal(0, 0.1)\n"
             "prior shape: lognormal(0.4, 0.3)\n")
    assert_ranks_uniform(probe, cols, model, seed=67)
