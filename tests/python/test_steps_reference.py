"""Reference checks of the `steps(c)` term (an ordered category predictor
with learned monotone steps).

Sources named beside each check: statsmodels OLS on level indicators
(maximum likelihood, the flat-prior limit: where the fitted level offsets
already climb, the monotone constraint does not bind), scipy.stats.norm
(the normal log likelihood at the cumulative level effects),
scipy.stats.kstest against scipy.stats.norm and scipy.stats.beta (the
prior draws: the whole effect's normal prior, and each share of a
symmetric Dirichlet(α) over K shares is Beta(α, (K − 1)α), the
aggregation property of the Dirichlet (recalled)).
Data: invented yields of orchard trees by canopy class and girth,
generated with a fixed seed.
"""
import numpy as np
import pytest
import scipy.stats as st
import statsmodels.api as sm

CANOPY = ["open", "sparse", "partial", "dense", "closed"]
STEPS = [1.0, 0.3, 2.0, 0.7]
TERM = "steps(canopy: open, sparse, partial, dense, closed)"
MODEL = f"yield from {TERM}, girth using trees\n"
WIDE = "prior intercepts: normal(0, 1000)\nprior slopes: normal(0, 1000)\n"


def trees(n, seed):
    rng = np.random.default_rng(seed)
    canopy = rng.integers(0, 5, n)
    girth = rng.normal(20, 4, n)
    effect = np.concatenate([[0.0], np.cumsum(STEPS)])[canopy]
    y = 10 + effect + 0.5 * (girth - 20) + rng.normal(0, 1, n)
    return dict(canopy=canopy, girth=girth, y=y)


def columns(d):
    return {
        "canopy": {"category": {"codes": d["canopy"].tolist(), "levels": CANOPY}},
        "girth": {"real": d["girth"].tolist()},
        "yield": {"real": d["y"].tolist()},
    }


def step_labels():
    return [f"canopy step[{a} to {b}]" for a, b in zip(CANOPY, CANOPY[1:])]


def test_mode_matches_statsmodels_ols_where_the_offsets_climb(probe):
    d = trees(4000, 31)
    answer = probe("model", {"action": "fit", "columns": columns(d), "model": MODEL + WIDE})
    assert "error" not in answer, answer
    x = np.column_stack([np.ones(len(d["y"]))] + [(d["canopy"] == k).astype(float) for k in range(1, 5)] + [d["girth"]])
    ols = sm.OLS(d["y"], x).fit()
    offsets = np.concatenate([[0.0], ols.params[1:5]])
    assert np.all(np.diff(offsets) > 0), offsets
    cov = np.asarray(ols.cov_params())
    for k, label in enumerate(step_labels(), start=1):
        mode = answer["mode"][answer["names"].index(label)]
        contrast = np.zeros(6)
        contrast[k] = 1.0
        if k > 1:
            contrast[k - 1] = -1.0
        se = float(np.sqrt(contrast @ cov @ contrast))
        # The mode keeps the shares' dirichlet(2) prior and the
        # stick-breaking Jacobian, a pull towards equal steps that shrinks
        # like 1/√n in standard errors.
        assert abs(mode - (offsets[k] - offsets[k - 1])) < 0.35 * se, (label, mode, offsets, se)


def test_log_likelihood_matches_scipy_norm_at_the_cumulative_effects(probe):
    d = trees(150, 32)
    params = [9.5, 0.8, 0.1, 1.7, 0.9, 0.45, 1.2]
    answer = probe("model", {"action": "log_likelihood", "columns": columns(d), "model": MODEL, "params": params})
    assert "error" not in answer, answer
    assert answer["names"][1:5] == step_labels()
    centred = d["girth"] - d["girth"].mean()
    mean = params[0] + np.concatenate([[0.0], np.cumsum(params[1:5])])[d["canopy"]] + params[5] * centred
    reference = st.norm.logpdf(d["y"], mean, params[6]).sum()
    assert answer["log_likelihood"] == pytest.approx(reference, rel=1e-11)


def test_steps_of_both_signs_are_refused(probe):
    d = trees(40, 33)
    params = [9.5, 0.8, -0.1, 1.7, 0.9, 0.45, 1.2]
    answer = probe("model", {"action": "log_likelihood", "columns": columns(d), "model": MODEL, "params": params})
    assert "error" in answer and "canopy" in answer["error"], answer


def test_prior_draws_follow_the_normal_whole_effect_and_dirichlet_shares(probe):
    d = trees(60, 34)
    body = MODEL + "prior for canopy steps: normal(1, 2)\n"
    answer = probe("model", {"action": "prior_draws", "columns": columns(d), "model": body, "draws": 4000, "seed": 8})
    assert "error" not in answer, answer
    draws = np.asarray(answer["draws"])
    at = [answer["names"].index(label) for label in step_labels()]
    steps = draws[:, at]
    whole = steps.sum(axis=1)
    assert st.kstest(whole, st.norm(1, 2).cdf).pvalue > 0.01
    shares = steps / whole[:, None]
    for k in range(4):
        assert st.kstest(shares[:, k], st.beta(2.0, 6.0).cdf).pvalue > 0.01, k


def test_an_unordered_column_needs_its_order(probe):
    d = trees(40, 35)
    answer = probe("model", {"action": "fit", "columns": columns(d), "model": "yield from steps(canopy) using trees\n"})
    assert "error" in answer and "canopy" in answer["error"] and "steps(canopy:" in answer["error"], answer
