"""Reference checks of the pieces behind `score predictions of …`.

Sources named beside each check: scipy.stats (normal, bernoulli, binomial,
poisson log densities; the generalised Pareto distribution genpareto: its
quantiles, log density and maximum-likelihood fit). Data: invented plots,
generated with fixed seeds. The library is reached through `probe_model`
(actions `pointwise`, `tail_fit`, `tail_functions`).
"""
import numpy as np
import pytest
import scipy.stats as st
from scipy.special import logsumexp

# Every model below has `centre off`, so its design is the intercept and the
# raw columns, which the checks rebuild from the data themselves.
PLAIN = "centre off\n"


def plots(n=60, seed=21):
    rng = np.random.default_rng(seed)
    x = rng.normal(0, 1, n)
    site = rng.integers(0, 4, n)
    visits = rng.integers(1, 12, n)
    p = 1 / (1 + np.exp(-(0.2 + 0.8 * x)))
    return dict(
        x=x,
        site=site,
        visits=visits,
        growth=1.0 + 0.5 * x + rng.normal(0, 0.7, n),
        alive=(rng.uniform(size=n) < p).astype(float),
        set=rng.binomial(visits, p),
        count=rng.poisson(np.exp(0.4 + 0.3 * x)),
        form=rng.integers(0, 3, n),
    )


def columns(d):
    return {
        "x": {"real": d["x"].tolist()},
        "site": {"category": {"codes": d["site"].tolist(), "levels": ["north", "east", "south", "west"]}},
        "visits": {"count": d["visits"].tolist()},
        "growth": {"real": d["growth"].tolist()},
        "alive": {"binary": d["alive"].tolist()},
        "set": {"count": d["set"].tolist()},
        "count": {"count": d["count"].tolist()},
        "form": {"category": {"codes": d["form"].tolist(), "levels": ["herb", "shrub", "tree"]}},
    }


def pointwise(probe, d, model, params):
    answer = probe("model", {"action": "pointwise", "columns": columns(d), "model": model, "params": params})
    assert "error" not in answer, answer
    return answer


def test_normal_rows_match_scipy_norm(probe):
    d = plots()
    params = [0.9, 0.45, 0.8]  # intercept, x slope, spread
    answer = pointwise(probe, d, "growth from x using plots\n" + PLAIN, params)
    assert answer["names"] == ["intercept", "x slope", "spread"]
    ref = st.norm.logpdf(d["growth"], loc=params[0] + params[1] * d["x"], scale=params[2])
    np.testing.assert_allclose(answer["log_densities"], ref, rtol=1e-12, atol=1e-12)


def test_bernoulli_rows_match_scipy_bernoulli_even_for_confident_draws(probe):
    d = plots()
    for params in ([0.1, 0.9], [3.0, 40.0]):  # the second sends some rows' odds past e^100
        answer = pointwise(probe, d, "alive from x using plots\nfamily bernoulli\n" + PLAIN, params)
        eta = params[0] + params[1] * d["x"]
        # log p = −log(1 + e^(−η)) via scipy.special.expit in the log domain
        ref = np.where(d["alive"] == 1, st.logistic.logcdf(eta), st.logistic.logsf(eta))
        np.testing.assert_allclose(answer["log_densities"], ref, rtol=1e-10, atol=1e-12)
        if abs(params[1]) < 1:
            # scipy.stats.bernoulli on the probability itself (which rounds to 1
            # for confident draws, so only where it is well away from 0 and 1)
            ref_pmf = st.bernoulli.logpmf(d["alive"], 1 / (1 + np.exp(-eta)))
            np.testing.assert_allclose(answer["log_densities"], ref_pmf, rtol=1e-10, atol=1e-12)


def test_binomial_rows_match_scipy_binom(probe):
    d = plots()
    params = [-0.2, 0.7]
    answer = pointwise(probe, d, "set from x using plots\nfamily binomial out of visits\n" + PLAIN, params)
    p = 1 / (1 + np.exp(-(params[0] + params[1] * d["x"])))
    ref = st.binom.logpmf(d["set"], d["visits"], p)
    np.testing.assert_allclose(answer["log_densities"], ref, rtol=1e-10, atol=1e-10)


def test_poisson_rows_match_scipy_poisson(probe):
    d = plots()
    params = [0.35, 0.25]
    answer = pointwise(probe, d, "count from x using plots\nfamily poisson\n" + PLAIN, params)
    ref = st.poisson.logpmf(d["count"], np.exp(params[0] + params[1] * d["x"]))
    np.testing.assert_allclose(answer["log_densities"], ref, rtol=1e-10, atol=1e-10)


def test_levels_rows_are_the_log_softmax_share_of_the_observed_level(probe):
    """Softmax with the first level's predictor fixed at 0 (multinomial
    logit); the share is computed with scipy.special.logsumexp."""
    d = plots()
    params = [0.3, -0.6, -0.4, 1.1]  # shrub: intercept, x slope; tree: intercept, x slope
    answer = pointwise(probe, d, "form from x using plots\n" + PLAIN, params)
    eta = np.column_stack([np.zeros_like(d["x"]), params[0] + params[1] * d["x"], params[2] + params[3] * d["x"]])
    ref = eta[np.arange(len(d["x"])), d["form"]] - logsumexp(eta, axis=1)
    np.testing.assert_allclose(answer["log_densities"], ref, rtol=1e-12, atol=1e-12)


@pytest.mark.parametrize("family,outcome", [("normal", "growth"), ("poisson", "count")])
def test_pooled_rows_add_their_sites_departure(probe, family, outcome):
    d = plots()
    departures = np.array([0.3, -0.2, 0.05, -0.4])
    model = f"{outcome} from x, pooled site using plots\nfamily {family}\n" + PLAIN
    names = pointwise(probe, d, model, [1.0] * 8 if family == "normal" else [1.0] * 7)["names"]
    values = {"intercept": 0.4, "x slope": 0.3, "spread": 0.9, "site spread": 0.5}
    for level, dep in zip(["north", "east", "south", "west"], departures):
        values[f"site departure[{level}]"] = dep
    params = [values[n] for n in names]
    answer = pointwise(probe, d, model, params)
    eta = 0.4 + 0.3 * d["x"] + departures[d["site"]]
    if family == "normal":
        ref = st.norm.logpdf(d["growth"], loc=eta, scale=0.9)
    else:
        ref = st.poisson.logpmf(d["count"], np.exp(eta))
    np.testing.assert_allclose(answer["log_densities"], ref, rtol=1e-10, atol=1e-10)


@pytest.mark.parametrize("shape", [-0.3, 0.0, 0.4, 1.2])
def test_generalised_pareto_functions_match_scipy_genpareto(probe, shape):
    p = [0.0, 0.1, 0.5, 0.9, 0.999]
    at = [0.0, 0.2, 1.0, 2.5]
    answer = probe("model", {"action": "tail_functions", "shape": shape, "scale": 1.7, "p": p, "at": at})
    np.testing.assert_allclose(answer["quantiles"], st.genpareto.ppf(p, c=shape, scale=1.7), rtol=1e-10, atol=1e-12)
    ref = st.genpareto.logpdf(at, c=shape, scale=1.7)
    ours = np.asarray(answer["log_densities"], dtype=float)
    np.testing.assert_allclose(ours[np.isfinite(ref)], ref[np.isfinite(ref)], rtol=1e-10, atol=1e-12)


@pytest.mark.parametrize("shape,n", [(0.1, 4000), (0.5, 4000), (0.9, 4000), (0.6, 190)])
def test_zhang_stephens_fit_agrees_with_the_maximum_likelihood_fit_of_scipy_genpareto(probe, shape, n):
    """Both estimators are consistent (Zhang & Stephens 2009); on the same
    sample the Zhang–Stephens estimate sits close to scipy's maximum-
    likelihood fit and its log-likelihood close to the maximum. n = 190 is
    the tail a fit sees with 4,000 draws."""
    rng = np.random.default_rng(int(shape * 100) + n)
    x = st.genpareto.rvs(c=shape, scale=2.0, size=n, random_state=rng)
    answer = probe("model", {"action": "tail_fit", "x": x.tolist()})
    assert "error" not in answer, answer
    c_ml, _, scale_ml = st.genpareto.fit(x, floc=0)
    tolerance = 0.05 if n >= 1000 else 0.15
    assert abs(answer["shape"] - c_ml) < tolerance, (answer, c_ml)
    assert abs(answer["scale"] / scale_ml - 1) < 2 * tolerance, (answer, scale_ml)
    ours = st.genpareto.logpdf(x, c=answer["shape"], scale=answer["scale"]).sum()
    best = st.genpareto.logpdf(x, c=c_ml, scale=scale_ml).sum()
    assert best - ours < 2.0, (ours, best)
    # the weak prior worth 10 values pulls towards 1/2 (recalled: Vehtari et al. 2017, appendix)
    assert answer["regularised_shape"] == pytest.approx((n * answer["shape"] + 5) / (n + 10), rel=1e-12)
