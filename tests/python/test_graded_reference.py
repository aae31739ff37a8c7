"""Reference checks of the graded family (ordered category outcome,
cumulative logit).

Sources named beside each check: scipy.stats.logistic (level probabilities
as differences of the logistic distribution function at the cuts, McCullagh
1980 eq. 2.1), statsmodels OrderedModel with distr='logit'
(statsmodels.miscmodels.ordinal_model; maximum likelihood as the flat-prior
limit), scipy.stats.chisquare (calibration ranks).
Data: invented blight grades of orchard trees by variety and shade,
generated with a fixed seed from a latent logistic score.
"""
import numpy as np
import pytest
import scipy.stats as st
from statsmodels.miscmodels.ordinal_model import OrderedModel

from calibration import assert_ranks_uniform

GRADES = ["none", "mild", "marked", "severe"]
VARIETIES = ["early", "late", "russet"]
# Wide normal priors on the coefficients; lognormal(0, s) on a gap has
# density ∝ exp(−(log d)²/2s²)/d, whose 1/d the Jacobian of d = e^g cancels,
# so with a wide s the mode in the log gaps is the maximum-likelihood one.
WIDE = ("prior intercepts: normal(0, 1000000)\nprior slopes: normal(0, 1000000)\n"
        "prior gaps: lognormal(0, 1000000)\n")
MODEL = "blight from variety, shade using trees\nfamily graded\n"


def trees(n=400, seed=23, cuts=(-0.8, 0.6, 2.1)):
    rng = np.random.default_rng(seed)
    variety = rng.integers(0, 3, n)
    shade = rng.uniform(0, 10, n)
    score = 0.25 * (shade - 5) + 0.7 * (variety == 1) - 0.5 * (variety == 2) + rng.logistic(size=n)
    grade = np.searchsorted(np.asarray(cuts), score)
    return dict(variety=variety, shade=shade, grade=grade)


def columns(d):
    return {
        "variety": {"category": {"codes": d["variety"].tolist(), "levels": VARIETIES}},
        "shade": {"real": d["shade"].tolist()},
        "blight": {"category": {"codes": d["grade"].tolist(), "levels": GRADES}},
    }


def level_log_probabilities(grade, eta, cuts):
    """log[F(c_k − η) − F(c_{k−1} − η)] with scipy's logistic distribution."""
    upper = np.append(cuts, np.inf)[grade]
    lower = np.insert(np.asarray(cuts, float), 0, -np.inf)[grade]
    return np.log(st.logistic.cdf(upper - eta) - st.logistic.cdf(lower - eta))


def test_log_likelihood_matches_scipy_logistic(probe):
    d = trees()
    params = [-0.2, 0.5, -0.7, 0.24, 1.3, 2.8]
    answer = probe("model", {"action": "log_likelihood", "columns": columns(d), "model": MODEL, "params": params})
    assert "error" not in answer, answer
    assert answer["names"] == ["variety[early]", "variety[late]", "variety[russet]", "shade slope",
                               "blight cut[marked]", "blight cut[severe]"]
    eta = np.asarray(answer["design"]) @ params[:4]
    reference = level_log_probabilities(d["grade"], eta, [0.0, 1.3, 2.8]).sum()
    assert answer["log_likelihood"] == pytest.approx(reference, rel=1e-11)


def test_rows_match_scipy_logistic(probe):
    """Each row's log density (what `score predictions` sums)."""
    d = trees(120, 4)
    params = [0.3, 0.9, -0.4, 0.3, 0.8, 2.0]
    answer = probe("model", {"action": "pointwise", "columns": columns(d), "model": MODEL, "params": params})
    assert "error" not in answer, answer
    rows = probe("model", {"action": "log_likelihood", "columns": columns(d), "model": MODEL, "params": params})
    eta = np.asarray(rows["design"]) @ params[:4]
    reference = level_log_probabilities(d["grade"], eta, [0.0, 0.8, 2.0])
    np.testing.assert_allclose(answer["log_densities"], reference, rtol=1e-11, atol=1e-12)


def test_out_of_order_cuts_are_refused(probe):
    d = trees(50, 5)
    params = [0.3, 0.9, -0.4, 0.3, 1.5, 1.2]
    answer = probe("model", {"action": "log_likelihood", "columns": columns(d), "model": MODEL, "params": params})
    assert "error" in answer and "blight cut[severe]" in answer["error"], answer


def test_mode_with_wide_priors_matches_statsmodels_ordered_model(probe):
    """Flat-prior limit: statsmodels OrderedModel (logit) maximum likelihood.
    Its thresholds t_k enter as P(y ≤ k) = F(t_k − x·β) with no constant, so
    the slope, the cuts' distances from the first (t_k − t_0) and every row's
    level probabilities must agree; the intercepts differ by t_0 only."""
    d = trees(3000, 31)
    answer = probe("model", {"action": "fit", "columns": columns(d), "model": MODEL + WIDE})
    assert "error" not in answer, answer
    exog = np.column_stack([(d["variety"] == 1).astype(float), (d["variety"] == 2).astype(float), d["shade"]])
    ordered = OrderedModel(d["grade"], exog, distr="logit")
    mle = ordered.fit(method="bfgs", maxiter=2000, gtol=1e-9, disp=False)
    params = np.asarray(mle.params)
    thresholds = ordered.transform_threshold_params(params)[1:-1]
    mode = np.asarray(answer["mode"])
    assert mode[3] == pytest.approx(params[2], abs=2e-4)
    np.testing.assert_allclose(mode[4:], thresholds[1:] - thresholds[0], atol=2e-4)
    assert mode[1] - mode[0] == pytest.approx(params[0], abs=2e-4)
    probabilities = np.asarray(mle.predict())
    np.testing.assert_allclose(answer["probabilities"], probabilities, atol=1e-5)


def test_contrast_of_level_shares_sums_to_zero_and_matches_the_draws(probe):
    """The change in each grade's share between two varieties, recomputed
    per draw from the exported parameters with scipy's logistic function."""
    d = trees(300, 8)
    answer = probe("model", {"action": "contrast", "columns": columns(d), "model": MODEL, "variable": "variety",
                             "between": ["late", "early"], "draws": 200, "seed": 3})
    assert "error" not in answer, answer
    assert [lv["level"] for lv in answer["levels"]] == GRADES
    params = np.asarray(answer["params"])
    shade = d["shade"] - d["shade"].mean()
    for k, level in enumerate(answer["levels"]):
        want = []
        for p in params:
            cuts = np.concatenate([[0.0], p[4:]])
            shares = []
            for intercept in (p[1], p[0]):
                eta = intercept + p[3] * shade
                upper = st.logistic.cdf(np.append(cuts, np.inf)[k] - eta)
                lower = st.logistic.cdf(np.insert(cuts, 0, -np.inf)[k] - eta)
                shares.append((upper - lower).mean())
            want.append(shares[0] - shares[1])
        np.testing.assert_allclose(level["differences"], want, atol=1e-12)
    total = np.sum([lv["differences"] for lv in answer["levels"]], axis=0)
    np.testing.assert_allclose(total, 0.0, atol=1e-12)


def test_calibration_ranks_pass_scipy_chisquare(probe):
    """Talts et al. (2018): ranks of prior draws among NUTS posterior draws are
    uniform for a correct posterior; scipy.stats.chisquare on 10 equal bins
    does not reject at 1%."""
    rng = np.random.default_rng(61)
    n = 40
    shade = rng.normal(0, 1, n)
    cols = {"shade": {"real": shade.tolist()},
            "blight": {"category": {"codes": rng.integers(0, 3, n).tolist(), "levels": GRADES[:3]}}}
    model = ("blight from shade using trees\nfamily graded\n"
             "prior intercepts: normal(0, 1)\nprior slopes: normal(0, 0.7)\n"
             "prior gaps: lognormal(0, 0.4)\n")
    answer = assert_ranks_uniform(probe, cols, model, seed=67)
    assert [p["name"] for p in answer["parameters"]] == ["intercept", "shade slope", "blight cut[marked]"]
