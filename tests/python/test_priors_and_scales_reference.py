"""Reference checks for priors declared per parameter, the inverse-gamma
prior, and the scales contrasts can be read on (issue 18).

The probe is `probe_model` (tests/probe/src/bin/probe_model.rs)."""
import numpy as np
import pytest
import scipy.stats as st


@pytest.mark.parametrize("shape, scale", [(3.0, 2.0), (0.7, 0.4), (12.0, 30.0)])
def test_inverse_gamma_log_density_matches_scipy(probe, shape, scale):
    """`inverse_gamma(a, b)` is scipy's invgamma(a, scale=b): density
    b^a/Γ(a)·x^(−a−1)·e^(−b/x) with its normalising constant."""
    x = np.array([0.05, 0.3, 1.0, 2.5, 9.0, 40.0])
    answer = probe("model", {"action": "prior", "prior": f"inverse_gamma({shape}, {scale})", "x": x.tolist()})
    np.testing.assert_allclose(answer["log_density"], st.invgamma(shape, scale=scale).logpdf(x), rtol=1e-11)


def test_inverse_gamma_outside_its_support_has_no_density(probe):
    answer = probe("model", {"action": "prior", "prior": "inverse_gamma(3, 2)", "x": [0.0, -1.0]})
    assert answer["log_density"] == [None, None] or all(v == -np.inf for v in answer["log_density"]), answer


def test_inverse_gamma_draws_follow_scipy(probe):
    """Prior draws (prior checks, calibration) are 1/G with G gamma of shape a
    and rate b: a Kolmogorov–Smirnov test against scipy's invgamma does not
    reject at 1% on 4000 seeded draws."""
    answer = probe("model", {"action": "prior", "prior": "inverse_gamma(4, 3)", "x": [1.0],
                             "draws": 4000, "seed": 17})
    sample = np.array(answer["sample"])
    assert sample.shape == (4000,) and (sample > 0).all()
    assert st.kstest(sample, st.invgamma(4, scale=3).cdf).pvalue > 0.01


# --- contrast scales of time and graded outcomes -------------------------

from scipy.special import gammaln  # noqa: E402

from germination import linear_predictors  # noqa: E402
from germination import germination as germination_with_days  # noqa: E402


def germination(n=160, seed=5, shape=1.8):
    """The shared germination data with this file's seed and shape."""
    cols, tray, warmth, _ = germination_with_days(n, seed, shape)
    return cols, tray, warmth


@pytest.mark.parametrize("form", ["weibull", "exponential"])
def test_median_time_contrast_matches_scipy_medians(probe, form):
    """`on medians`: each draw's average over rows of the median time at 25
    minus at 15 degrees. The medians are scipy's: weibull_min(k, scale=λ)
    with λ = e^η/Γ(1 + 1/k) (the scale whose mean is e^η), and for the
    exponential expon(scale=e^η)."""
    cols, tray, warmth = germination()
    model = f"days from tray, warmth using seeds\nfamily {form} cut short by unsprouted\n"
    answer = probe("model", {"action": "contrast", "columns": cols, "model": model, "variable": "warmth",
                             "between": ["25", "15"], "on": "medians", "draws": 200, "seed": 4})
    assert "error" not in answer, answer
    expected = []
    for setting in (25.0, 15.0):
        eta, params = linear_predictors(answer, tray, warmth, setting)
        if form == "weibull":
            k = params[:, answer["names"].index("shape")][:, None]
            median = st.weibull_min(k, scale=np.exp(eta - gammaln(1 + 1 / k))).median()
        else:
            median = st.expon(scale=np.exp(eta)).median()
        expected.append(median.mean(axis=1))
    np.testing.assert_allclose(answer["differences"], expected[0] - expected[1], rtol=1e-9)
    assert not answer["unit_free"] and answer["scale"] == "median days"
    assert any("median" in n and "ln 2" in n for n in answer["notes"]), answer["notes"]


def test_log_time_contrast_is_the_log_ratio_of_mean_and_of_median_times(probe):
    """`on log-times`: the change in log mean time; with one shape for both
    settings it equals the log ratio of scipy's Weibull medians too."""
    cols, tray, warmth = germination()
    model = "days from tray, warmth using seeds\nfamily weibull cut short by unsprouted\n"
    answer = probe("model", {"action": "contrast", "columns": cols, "model": model, "variable": "warmth",
                             "between": ["25", "15"], "on": "log-times", "draws": 200, "seed": 4})
    assert "error" not in answer, answer
    (eta_to, params), (eta_from, _) = (linear_predictors(answer, tray, warmth, s) for s in (25.0, 15.0))
    k = params[:, answer["names"].index("shape")][:, None]
    med = [st.weibull_min(k, scale=np.exp(e - gammaln(1 + 1 / k))).median() for e in (eta_to, eta_from)]
    np.testing.assert_allclose(answer["differences"], np.log(med[0] / med[1]).mean(axis=1), rtol=1e-9)
    np.testing.assert_allclose(answer["differences"], np.log(np.exp(eta_to) / np.exp(eta_from)).mean(axis=1), rtol=1e-9)
    assert answer["unit_free"]


def test_score_contrast_of_a_graded_outcome_is_the_change_in_the_latent_score(probe):
    """`on scores`: a graded (cumulative logit) outcome's latent score is its
    linear predictor, so one contrast — not one per level — whose draws are
    the slope times the change in x (McCullagh 1980, the proportional-odds
    form: the log odds of being above any cut move by that much)."""
    rng = np.random.default_rng(12)
    n = 150
    moisture = rng.normal(0, 1, n)
    latent = 1.1 * moisture + rng.logistic(0, 1, n)
    grade = np.digitize(latent, [-0.4, 1.2])
    cols = {"moisture": {"real": moisture.tolist()},
            "blight": {"category": {"codes": grade.tolist(), "levels": ["none", "marked", "severe"]}}}
    model = "blight from moisture using leaves\nfamily graded\n"
    answer = probe("model", {"action": "contrast", "columns": cols, "model": model, "variable": "moisture",
                             "between": ["1.5", "-0.5"], "on": "scores", "draws": 200, "seed": 2})
    assert "error" not in answer and "levels" not in answer, answer
    slope = np.array(answer["params"])[:, answer["names"].index("moisture slope")]
    np.testing.assert_allclose(answer["differences"], 2.0 * slope, rtol=1e-9)
    assert answer["unit_free"] and "log-odds" in answer["scale"]
