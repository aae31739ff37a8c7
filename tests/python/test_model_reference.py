"""Reference checks of the model module and the Laplace mode.

Sources named beside each check: statsmodels (OLS, GLM Binomial and Poisson
maximum likelihood as the flat-prior limit), scipy.interpolate.BSpline
(B-spline basis), scipy.stats (log densities), numpy.quantile (knots).
Data: an invented orchard, generated with a fixed seed.
"""
import numpy as np
import pytest
import scipy.stats as st
import statsmodels.api as sm
from scipy.interpolate import BSpline

WIDE = "prior intercepts: normal(0, 1000000)\nprior slopes: normal(0, 1000000)\n"
WIDE_WEIGHTS = "prior weights: normal(0, 1000000)\n"


def orchard(n=400, seed=11):
    rng = np.random.default_rng(seed)
    rootstock = rng.integers(0, 2, n)
    soil = rng.integers(0, 3, n)
    girth = 22 + 6 * rootstock + rng.normal(0, 4, n)
    age = rng.uniform(1, 15, n)
    yield_kg = 2 + 0.5 * girth + 1.5 * rootstock + 2 * np.sin(age / 3) + rng.normal(0, 3, n)
    fruit = rng.poisson(np.exp(0.5 + 0.04 * girth + 0.1 * soil))
    visits = rng.integers(5, 30, n)
    p = 1 / (1 + np.exp(-(-0.5 + 0.05 * (girth - 25) + 0.4 * rootstock)))
    set_ = rng.binomial(visits, p)
    healthy = (rng.uniform(size=n) < p).astype(float)
    return dict(rootstock=rootstock, soil=soil, girth=girth, age=age, yield_kg=yield_kg,
                fruit=fruit, visits=visits, set=set_, healthy=healthy)


def columns(d):
    return {
        "rootstock": {"category": {"codes": d["rootstock"].tolist(), "levels": ["dwarf", "standard"]}},
        "soil": {"category": {"codes": d["soil"].tolist(), "levels": ["loam", "sandy", "clay"]}},
        "girth": {"real": d["girth"].tolist()},
        "age": {"real": d["age"].tolist()},
        "yield": {"real": d["yield_kg"].tolist()},
        "fruit": {"count": d["fruit"].tolist()},
        "visits": {"count": d["visits"].tolist()},
        "set": {"count": d["set"].tolist()},
        "healthy": {"binary": d["healthy"].tolist()},
    }


def index_coding(codes, levels):
    return np.column_stack([(codes == k).astype(float) for k in range(levels)])


def fit(probe, d, model):
    answer = probe("model", {"action": "fit", "columns": columns(d), "model": model})
    assert "error" not in answer, answer
    return answer


def assert_relative(ours, reference, tol=1e-4):
    ours, reference = np.asarray(ours), np.asarray(reference)
    np.testing.assert_allclose(ours, reference, rtol=tol, atol=tol * np.max(np.abs(reference)))


def test_normal_mode_with_wide_priors_matches_ols(probe):
    """Flat-prior limit: the posterior mode of the coefficients is the
    statsmodels OLS estimate; the mode of log(spread) with its Jacobian solves
    −n + RSS/σ² + 1 = 0, so σ = sqrt(RSS / (n − 1)) with RSS from statsmodels."""
    d = orchard()
    answer = fit(probe, d, "yield from rootstock, girth per rootstock, powers(age, 2) using trees\n"
                 + WIDE + "prior spread: exponential(0.000001)")
    g = d["girth"] - d["girth"].mean()
    z = (d["age"] - d["age"].mean()) / d["age"].std(ddof=1)
    ind = index_coding(d["rootstock"], 2)
    x = np.column_stack([ind, g * ind[:, 0], g * ind[:, 1], z, z ** 2])
    ols = sm.OLS(d["yield_kg"], x).fit()
    assert answer["names"] == ["rootstock[dwarf]", "rootstock[standard]", "girth slope[dwarf]",
                               "girth slope[standard]", "age power 1", "age power 2", "spread"]
    assert_relative(answer["mode"][:-1], ols.params)
    assert_relative(answer["mode"][-1], np.sqrt(ols.ssr / (len(g) - 1)))


def test_bernoulli_mode_with_wide_priors_matches_glm_binomial(probe):
    """Flat-prior limit: statsmodels GLM Binomial (logit) maximum likelihood."""
    d = orchard()
    answer = fit(probe, d, "healthy from rootstock, girth using trees\nfamily bernoulli\n" + WIDE)
    x = np.column_stack([index_coding(d["rootstock"], 2), d["girth"] - d["girth"].mean()])
    mle = sm.GLM(d["healthy"], x, family=sm.families.Binomial()).fit(tol=1e-12)
    assert_relative(answer["mode"], mle.params)


def test_binomial_mode_with_wide_priors_matches_glm_binomial(probe):
    """Flat-prior limit: statsmodels GLM Binomial with (successes, failures)."""
    d = orchard()
    answer = fit(probe, d, "set from soil, rootstock, girth using trees\nfamily binomial out of visits\n" + WIDE)
    assert answer["names"] == ["soil[loam]", "soil[sandy]", "soil[clay]",
                               "rootstock[standard vs dwarf]", "girth slope"]
    x = np.column_stack([index_coding(d["soil"], 3), (d["rootstock"] == 1).astype(float),
                         d["girth"] - d["girth"].mean()])
    endog = np.column_stack([d["set"], d["visits"] - d["set"]])
    mle = sm.GLM(endog, x, family=sm.families.Binomial()).fit(tol=1e-12)
    assert_relative(answer["mode"], mle.params)


def test_poisson_mode_with_wide_priors_matches_glm_poisson(probe):
    """Flat-prior limit: statsmodels GLM Poisson (log link) maximum likelihood."""
    d = orchard()
    answer = fit(probe, d, "fruit from rootstock, soil, spline(girth, 5) using trees\nfamily poisson\n"
                 + WIDE + WIDE_WEIGHTS)
    interior = np.quantile(d["girth"], [0.5])
    lo, hi = d["girth"].min(), d["girth"].max()
    t = np.r_[[lo] * 4, interior, [hi] * 4]
    basis = BSpline.design_matrix(d["girth"], t, 3).toarray()[:, 1:]
    x = np.column_stack([index_coding(d["rootstock"], 2), (d["soil"] == 1).astype(float),
                         (d["soil"] == 2).astype(float), basis])
    mle = sm.GLM(d["fruit"], x, family=sm.families.Poisson()).fit(tol=1e-12)
    assert_relative(answer["mode"], mle.params)


@pytest.mark.parametrize("interior", [[1.0, 2.5, 2.6, 7.0], [3.0, 3.0, 6.0], [5.0]])
def test_basis_matches_scipy_design_matrix(probe, interior):
    """scipy.interpolate.BSpline.design_matrix on the same clamped knots,
    including a repeated interior knot and both end points."""
    t = np.r_[[0.0] * 4, interior, [10.0] * 4]
    x = np.r_[np.linspace(0, 10, 201), np.random.default_rng(3).uniform(0, 10, 50)]
    answer = probe("model", {"action": "basis", "x": x.tolist(), "knots": t.tolist(), "degree": 3})
    reference = BSpline.design_matrix(x, t, 3).toarray()
    np.testing.assert_allclose(np.array(answer["rows"]), reference, rtol=0, atol=1e-12)


def test_model_spline_columns_use_quantile_knots(probe):
    """Interior knots at numpy.quantile (linear interpolation) of the
    predictor; the design holds scipy's basis without its first function."""
    d = orchard(150, 5)
    answer = fit(probe, d, "yield from spline(age, 8) using trees")
    interior = np.quantile(d["age"], np.arange(1, 5) / 5)
    t = np.r_[[d["age"].min()] * 4, interior, [d["age"].max()] * 4]
    reference = BSpline.design_matrix(d["age"], t, 3).toarray()
    design = np.array(answer["design"])
    np.testing.assert_allclose(design[:, 0], 1.0)
    np.testing.assert_allclose(design[:, 1:], reference[:, 1:], rtol=0, atol=1e-12)


def log_likelihood(probe, d, model, params):
    answer = probe("model", {"action": "log_likelihood", "columns": columns(d), "model": model,
                             "params": list(params)})
    assert "error" not in answer, answer
    return answer["log_likelihood"]


def test_gaussian_sufficient_statistics_match_row_loop(probe):
    """Σ scipy.stats.norm.logpdf over rows, with the design built here."""
    d = orchard()
    params = [14.0, 16.5, 0.45, 2.9]
    ours = log_likelihood(probe, d, "yield from rootstock, girth using trees", params)
    x = np.column_stack([index_coding(d["rootstock"], 2), d["girth"] - d["girth"].mean()])
    reference = st.norm.logpdf(d["yield_kg"], x @ params[:3], params[3]).sum()
    assert ours == pytest.approx(reference, rel=1e-10)


def test_glm_log_likelihoods_match_scipy(probe):
    """Σ scipy.stats bernoulli / binom / poisson log pmf, constants included."""
    d = orchard()
    g = d["girth"] - d["girth"].mean()
    eta = 0.2 + 0.07 * g
    p = 1 / (1 + np.exp(-eta))
    ours = log_likelihood(probe, d, "healthy from girth using trees\nfamily bernoulli", [0.2, 0.07])
    assert ours == pytest.approx(st.bernoulli.logpmf(d["healthy"], p).sum(), rel=1e-10)
    ours = log_likelihood(probe, d, "set from girth using trees\nfamily binomial out of visits", [0.2, 0.07])
    assert ours == pytest.approx(st.binom.logpmf(d["set"], d["visits"], p).sum(), rel=1e-10)
    ours = log_likelihood(probe, d, "fruit from girth using trees\nfamily poisson", [0.2, 0.07])
    assert ours == pytest.approx(st.poisson.logpmf(d["fruit"], np.exp(eta)).sum(), rel=1e-10)


@pytest.mark.parametrize("text, reference", [
    ("normal(1.5, 2)", st.norm(1.5, 2)),
    ("student(-1, 2.5, 3)", st.t(3, -1, 2.5)),
    ("exponential(0.5)", st.expon(scale=2.0)),
    ("half_normal(3)", st.halfnorm(scale=3)),
    ("lognormal(0.5, 0.75)", st.lognorm(s=0.75, scale=np.exp(0.5))),
    ("uniform(-2, 6)", st.uniform(-2, 8)),
])
def test_prior_log_densities_match_scipy_stats(probe, text, reference):
    """Prior log densities with normalising constants, against scipy.stats."""
    x = np.array([0.1, 0.7, 2.0, 4.5])
    answer = probe("model", {"action": "prior", "prior": text, "x": x.tolist()})
    np.testing.assert_allclose(answer["log_density"], reference.logpdf(x), rtol=1e-12)


def test_binomial_calibration_ranks_pass_scipy_chisquare(probe):
    """Talts et al. (2018): ranks of prior draws among NUTS posterior draws are
    uniform for a correct posterior; scipy.stats.chisquare on 10 equal bins of
    the ranks (0..99) gives our statistic and p-value, and does not reject at 1%."""
    rng = np.random.default_rng(29)
    n = 30
    visits = rng.integers(2, 11, n)
    warmth = rng.normal(0, 1, n)
    set_ = rng.binomial(visits, 0.4)
    cols = {"warmth": {"real": warmth.tolist()}, "visits": {"count": visits.tolist()},
            "set": {"count": set_.tolist()}}
    model = ("set from warmth using flowers\nfamily binomial out of visits\n"
             "prior intercepts: normal(0, 1)\nprior slopes: normal(0, 1)\n")
    answer = probe("model", {"action": "calibrate", "columns": cols, "model": model,
                             "reps": 150, "seed": 41, "draws": 297})
    assert "error" not in answer, answer
    assert answer["reps"] == 150 and answer["failures"] == 0 and answer["draws_per_fit"] == 99
    for p in answer["parameters"]:
        ranks = np.asarray(p["ranks"])
        assert ranks.min() >= 0 and ranks.max() <= 99
        observed = np.bincount(ranks // 10, minlength=10)
        reference = st.chisquare(observed)
        assert p["chi_square"] == pytest.approx(reference.statistic, rel=1e-9)
        assert p["p_value"] == pytest.approx(reference.pvalue, rel=1e-6, abs=1e-12)
        assert reference.pvalue > 0.01, (p["name"], reference)


def saplings(n=600, seed=23):
    """Invented saplings: soil (loam, sand, peat), canopy shade (0-1) and the
    growth form each grew into (herb, shrub, tree), drawn from a softmax with
    herb as the reference."""
    rng = np.random.default_rng(seed)
    soil = rng.integers(0, 3, n)
    shade = rng.uniform(0, 1, n)
    sand, peat = (soil == 1).astype(float), (soil == 2).astype(float)
    eta = np.column_stack([np.zeros(n),
                           -0.2 + 0.9 * sand - 0.4 * peat + 1.5 * shade,
                           0.3 - 0.6 * sand + 0.8 * peat - 2.0 * shade])
    p = np.exp(eta - eta.max(axis=1, keepdims=True))
    p /= p.sum(axis=1, keepdims=True)
    form = np.array([rng.choice(3, p=row) for row in p])
    return dict(soil=soil, shade=shade, form=form)


def sapling_columns(d):
    return {
        "soil": {"category": {"codes": d["soil"].tolist(), "levels": ["loam", "sand", "peat"]}},
        "shade": {"real": d["shade"].tolist()},
        "form": {"category": {"codes": d["form"].tolist(), "levels": ["herb", "shrub", "tree"]}},
    }


def sapling_design(d):
    return np.column_stack([index_coding(d["soil"], 3), d["shade"] - d["shade"].mean()])


def test_levels_mode_with_wide_priors_matches_mnlogit(probe):
    """Flat-prior limit: statsmodels MNLogit maximum likelihood (first level
    the reference, one coefficient column per other level), its fitted level
    probabilities (MNLogitResults.predict), and the family a category
    outcome takes without a family line."""
    d = saplings()
    answer = probe("model", {"action": "fit", "columns": sapling_columns(d),
                             "model": "form from soil, shade using saplings\n" + WIDE})
    assert "error" not in answer, answer
    assert answer["family"] == "levels"
    assert answer["levels"] == ["herb", "shrub", "tree"]
    terms = ["soil[loam]", "soil[sand]", "soil[peat]", "shade slope"]
    assert answer["names"] == [f"form[{lv} vs herb]: {t}" for lv in ["shrub", "tree"] for t in terms]
    x = sapling_design(d)
    mle = sm.MNLogit(d["form"], x).fit(method="newton", maxiter=100, tol=1e-12, disp=False)
    # MNLogit params: one column per non-reference level; ours run level by level.
    assert_relative(answer["mode"], np.asarray(mle.params).T.ravel())
    np.testing.assert_allclose(np.array(answer["probabilities"]), mle.predict(x), rtol=0, atol=1e-6)


def test_levels_log_likelihood_matches_scipy_log_softmax(probe):
    """Σ over rows of scipy.special.log_softmax of (0, η_shrub, η_tree) at the
    row's observed level."""
    from scipy.special import log_softmax
    d = saplings(200, 4)
    params = [0.1, -0.4, 0.6, 1.2, -0.3, 0.5, 0.2, -1.7]
    answer = probe("model", {"action": "log_likelihood", "columns": sapling_columns(d),
                             "model": "form from soil, shade using saplings\nfamily levels", "params": params})
    assert "error" not in answer, answer
    x = sapling_design(d)
    beta = np.array(params).reshape(2, 4)
    eta = np.column_stack([np.zeros(len(x)), x @ beta[0], x @ beta[1]])
    reference = log_softmax(eta, axis=1)[np.arange(len(x)), d["form"]].sum()
    assert answer["log_likelihood"] == pytest.approx(reference, rel=1e-10)


def test_logit_contrast_over_rows_is_the_per_draw_average_of_statsmodels_predictions(probe):
    """A contrast `over rows` under a logit link is, per posterior draw, the mean
    over the table's rows of P(y | x = b, z_i) - P(y | x = a, z_i) (standardisation;
    Hernan & Robins, Causal Inference: What If, ch. 13, recalled). Recomputed here
    from the probe's draws with statsmodels' GLM(Binomial).predict on designs built
    in this test (`centre off`, so the design is [1, x, z] as written). An average at
    one row (z held at its mean) is a different quantity and must not match."""
    rng = np.random.default_rng(31)
    n = 120
    z = rng.normal(0, 1.5, n)
    x = rng.normal(2, 1, n)
    y = (rng.uniform(size=n) < 1 / (1 + np.exp(-(-1 + 0.8 * x + 1.2 * z)))).astype(float)
    cols = {"x": {"real": x.tolist()}, "z": {"real": z.tolist()}, "y": {"binary": y.tolist()}}
    model = "y from x, z using data\nfamily bernoulli\ncentre off\n"
    answer = probe("model", {"action": "contrast", "columns": cols, "model": model,
                             "variable": "x", "draws": 200, "seed": 5})
    assert "error" not in answer, answer
    assert answer["names"] == ["intercept", "x slope", "z slope"], answer["names"]
    assert answer["scale"].startswith("probability that y is yes"), answer["scale"]
    # the default settings: x at its mean plus 1 against its mean (printed rounded)
    to, frm = x.mean() + 1, x.mean()
    assert float(answer["to"]) == pytest.approx(to, rel=1e-3) and float(answer["from"]) == pytest.approx(frm, rel=1e-3)
    glm = sm.GLM(y, np.column_stack([np.ones(n), x, z]), family=sm.families.Binomial())
    exog = lambda value, zs: np.column_stack([np.ones(len(zs)), np.full(len(zs), value), zs])  # noqa: E731
    over_rows, one_row = [], []
    for params in np.asarray(answer["params"]):
        over_rows.append(np.mean(glm.predict(params, exog(to, z)) - glm.predict(params, exog(frm, z))))
        one_row.append((glm.predict(params, exog(to, [z.mean()])) - glm.predict(params, exog(frm, [z.mean()])))[0])
    got = np.asarray(answer["differences"])
    np.testing.assert_allclose(got, over_rows, rtol=1e-9, atol=1e-12)
    # The single-row average differs by far more than rounding: the check can fail.
    assert np.max(np.abs(got - np.asarray(one_row))) > 1e-3


def test_levels_contrast_over_rows_matches_mnlogit_predictions(probe):
    """A contrast of a category outcome over rows gives, per posterior draw and
    per outcome level, the mean over the rows of P(level | soil = sand, shade_i)
    - P(level | soil = loam, shade_i): recomputed from the probe's draws with
    statsmodels MNLogit.predict on designs built here (`centre off`: the design
    is [soil indicators, shade]). Flat-prior limit: the mean over draws lies
    near the same standardised difference at the MNLogit maximum-likelihood
    estimate (the two differ by the curvature of the softmax over the
    posterior spread, well under 0.01 at 600 rows)."""
    d = saplings()
    n = len(d["soil"])
    model = "form from soil, shade using saplings\ncentre off\n" + WIDE
    answer = probe("model", {"action": "contrast", "columns": sapling_columns(d), "model": model,
                             "variable": "soil", "between": ["sand", "loam"], "draws": 300, "seed": 7})
    assert "error" not in answer, answer
    assert [lv["level"] for lv in answer["levels"]] == ["herb", "shrub", "tree"]
    assert answer["scale"] == "probability that form is herb"
    exog = lambda soil: np.column_stack([index_coding(np.full(n, soil), 3), d["shade"]])  # noqa: E731
    mnl = sm.MNLogit(d["form"], exog(0))
    expected = []
    for params in np.asarray(answer["params"]):
        beta = params.reshape(2, 4).T  # ours run level by level; MNLogit takes one column per level
        expected.append((mnl.predict(beta, exog(1)) - mnl.predict(beta, exog(0))).mean(axis=0))
    got = np.column_stack([lv["differences"] for lv in answer["levels"]])
    np.testing.assert_allclose(got, np.asarray(expected), rtol=1e-9, atol=1e-12)
    x = np.column_stack([index_coding(d["soil"], 3), d["shade"]])
    mle = sm.MNLogit(d["form"], x).fit(method="newton", maxiter=100, tol=1e-12, disp=False)
    plug_in = (mle.predict(exog(1)) - mle.predict(exog(0))).mean(axis=0)
    np.testing.assert_allclose(got.mean(axis=0), plug_in, atol=0.01)
