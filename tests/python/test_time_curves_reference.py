"""Reference checks of a time contrast's survival and hazard curves and of
the contrast scales `on events by T` and `on quantile q` (issue 18).

Every expectation is computed here from the posterior draws the probe
returns, with scipy.stats: weibull_min (shape k, scale λ = e^η/Γ(1 + 1/k),
the scale whose mean is e^η) and expon (scale e^η); `sf` for the survival
curve, `pdf/sf` for the hazard (the hazard of rows averaged together is
Σ pdf / Σ sf, the negative derivative of the log of the averaged sf),
`cdf` for the chance of an event by T and `ppf` for quantiles. Bands are
numpy's linear-interpolation quantiles of the per-draw values.
Data: invented days to germination of seeds by tray and warmth, some trials
ending before the seed sprouted, from a fixed seed.
"""
import numpy as np
import pytest
import scipy.stats as st
from scipy.special import gammaln

from germination import germination, linear_predictors

MODEL = "days from tray, warmth using seeds\nfamily {form} cut short by unsprouted\n"


def etas(answer, tray, warmth, setting, held):
    """Per draw (rows) and per contrast row (columns), η with warmth set to
    `setting`; held: one row at the first tray, else every table row."""
    trays = np.zeros(1, dtype=int) if held else tray
    return linear_predictors(answer, trays, warmth, setting)


def distribution(form, eta, params, names):
    if form == "weibull":
        k = params[:, names.index("shape")][:, None, None]
        return st.weibull_min(k, scale=np.exp(eta[:, :, None] - gammaln(1 + 1 / k)))
    return st.expon(scale=np.exp(eta[:, :, None]))


def ask(probe, cols, form, on, held, mass=0.9):
    answer = probe("model", {"action": "contrast", "columns": cols, "model": MODEL.format(form=form),
                             "variable": "warmth", "between": ["25", "15"], "on": on, "draws": 300,
                             "seed": 8, "mass": mass, "over_rows": not held})
    assert "error" not in answer, answer
    return answer


@pytest.mark.parametrize("form, held", [("weibull", True), ("weibull", False), ("exponential", True)])
def test_survival_and_hazard_curves_match_scipy(probe, form, held):
    cols, tray, warmth, days = germination()
    answer = ask(probe, cols, form, "medians", held, mass=0.8)
    curves = answer["curves"]
    times = np.array(curves["times"])
    assert times[-1] == pytest.approx(days.max()) and len(times) == 60 and curves["mass"] == 0.8
    picks = [0, 7, 25, 59]
    for setting, got in zip((25.0, 15.0), curves["settings"]):
        assert got["setting"] == ("25" if setting == 25.0 else "15")
        eta, params = etas(answer, tray, warmth, setting, held)
        dist = distribution(form, eta, params, answer["names"])
        t = times[picks][None, None, :]
        sf = dist.sf(t)  # draws × rows × times
        survival = sf.mean(axis=1)
        hazard = dist.pdf(t).sum(axis=1) / sf.sum(axis=1)
        for key, per_draw in (("survival", survival), ("hazard", hazard)):
            band = got[key]
            np.testing.assert_allclose(np.array(band["mean"])[picks], per_draw.mean(axis=0), rtol=1e-8)
            np.testing.assert_allclose(np.array(band["lower"])[picks], np.quantile(per_draw, 0.1, axis=0), rtol=1e-8)
            np.testing.assert_allclose(np.array(band["upper"])[picks], np.quantile(per_draw, 0.9, axis=0), rtol=1e-8)


@pytest.mark.parametrize("form", ["weibull", "exponential"])
def test_chance_of_an_event_by_a_time_matches_scipy_cdf(probe, form):
    cols, tray, warmth, _ = germination()
    answer = ask(probe, cols, form, "events by 12.5", held=False)
    chance = []
    for setting in (25.0, 15.0):
        eta, params = etas(answer, tray, warmth, setting, held=False)
        chance.append(distribution(form, eta, params, answer["names"]).cdf(12.5)[:, :, 0].mean(axis=1))
    np.testing.assert_allclose(answer["differences"], chance[0] - chance[1], rtol=1e-9, atol=1e-13)
    assert answer["unit_free"] and answer["scale"] == "chance of the event by days = 12.5"
    assert any("1 − S(12.5)" in n for n in answer["notes"]), answer["notes"]


@pytest.mark.parametrize("form, q", [("weibull", 0.9), ("weibull", 0.05), ("exponential", 0.25)])
def test_quantile_of_the_time_matches_scipy_ppf(probe, form, q):
    cols, tray, warmth, _ = germination()
    answer = ask(probe, cols, form, f"quantile {q}", held=True)
    times = []
    for setting in (25.0, 15.0):
        eta, params = etas(answer, tray, warmth, setting, held=True)
        times.append(distribution(form, eta, params, answer["names"]).ppf(q)[:, 0, 0])
    np.testing.assert_allclose(answer["differences"], times[0] - times[1], rtol=1e-9)
    assert not answer["unit_free"]


def test_the_median_is_the_half_quantile(probe):
    """`on medians` and `on quantile 0.5` are one number (scipy's median is
    ppf(0.5)); checked on the same draws."""
    cols, *_ = germination()
    medians = ask(probe, cols, "weibull", "medians", held=True)
    half = ask(probe, cols, "weibull", "quantile 0.5", held=True)
    np.testing.assert_allclose(half["differences"], medians["differences"], rtol=1e-12)


@pytest.mark.parametrize("on, words", [("quantile 1", "strictly between 0 and 1"), ("quantile 0", "strictly between 0 and 1"),
                                       ("events by -2", "positive time"), ("events by 0", "positive time")])
def test_bad_scale_values_are_refused(probe, on, words):
    cols, *_ = germination(n=40)
    answer = probe("model", {"action": "contrast", "columns": cols, "model": MODEL.format(form="weibull"),
                             "variable": "warmth", "between": ["25", "15"], "on": on, "draws": 50, "seed": 1})
    assert words in answer.get("error", ""), answer


def test_a_count_model_refuses_the_time_scales(probe):
    rng = np.random.default_rng(3)
    x = rng.normal(size=50)
    cols = {"x": {"real": x.tolist()}, "n": {"count": rng.poisson(np.exp(0.3 * x)).tolist()}}
    answer = probe("model", {"action": "contrast", "columns": cols, "model": "n from x using t\nfamily poisson\n",
                             "variable": "x", "on": "events by 3", "draws": 50, "seed": 1})
    assert "needs a time outcome" in answer.get("error", ""), answer
