"""Reference checks of times known between two bounds (`came by`), issue 18.

Each row's event came after its outcome time (the last visit the seed had
not sprouted; 0 when it may have sprouted from the start) and by the time
in the `came by` column (the first visit it had); equal bounds are an event
seen at that time, and rows marked in `cut short by` were never seen
sprouted. The log-likelihood is checked against scipy.stats.weibull_min /
expon written independently: `logpdf` for seen events, `log(sf(l) − sf(u))`
for bounded rows (from `logsf`, so late intervals keep their digits), `logcdf(u)` from 0 and `logsf` for rows cut
short; the scale λ = e^η/Γ(1 + 1/k) for a mean e^η. The flat-prior mode is
checked against scipy.optimize.minimize on that likelihood. Data: invented
seeds in trays checked at visits a few days apart, from a fixed seed.
"""
import numpy as np
import pytest
import scipy.optimize as opt
import scipy.stats as st
from scipy.special import gammaln

from calibration import assert_ranks_uniform

TRAYS = ["clay", "peat", "sand"]
TERMS = "days from tray, warmth using seeds\n"
WIDE = "prior intercepts: normal(0, 1000000)\nprior slopes: normal(0, 1000000)\nprior shape: lognormal(0, 1000000)\n"


def visits(n=300, seed=19, shape=1.5, gap=4.0, last=30.0):
    """Each seed is looked at every `gap` days (the first visit jittered)
    until `last`; a share of seeds is watched closely, its day seen exactly."""
    rng = np.random.default_rng(seed)
    tray = rng.integers(0, 3, n)
    warmth = rng.uniform(12, 28, n)
    eta = 2.4 - 0.05 * (warmth - 20) + 0.3 * (tray == 1)
    event = np.exp(eta - gammaln(1 + 1 / shape)) * rng.weibull(shape, n)
    first = rng.uniform(1.0, gap, n)
    lower, upper, cut = np.zeros(n), np.zeros(n), np.zeros(n, dtype=bool)
    watched = rng.uniform(size=n) < 0.2
    for i in range(n):
        times = np.arange(first[i], last, gap)
        if watched[i] and event[i] < last:
            lower[i] = upper[i] = event[i]
        elif event[i] >= times[-1]:
            lower[i], upper[i], cut[i] = times[-1], times[-1], True
        else:
            k = np.searchsorted(times, event[i])
            lower[i] = times[k - 1] if k > 0 else 0.0
            upper[i] = times[k]
    return dict(tray=tray, warmth=warmth, lower=lower, upper=upper, cut=cut)


def columns(d):
    return {
        "tray": {"category": {"codes": d["tray"].tolist(), "levels": TRAYS}},
        "warmth": {"real": d["warmth"].tolist()},
        "days": {"real": d["lower"].tolist()},
        "sprouted_by": {"real": d["upper"].tolist()},
        "unsprouted": {"binary": d["cut"].astype(int).tolist()},
    }


def design(d):
    return np.column_stack([(d["tray"] == k).astype(float) for k in range(3)] + [d["warmth"] - d["warmth"].mean()])


def row_terms(d, eta, k):
    dist = st.weibull_min(k, scale=np.exp(eta - gammaln(1 + 1 / k))) if k is not None else st.expon(scale=np.exp(eta))
    l, u = d["lower"], d["upper"]
    seen = (l == u) & ~d["cut"]
    from_zero = (l == 0) & ~d["cut"]
    between = ~seen & ~from_zero & ~d["cut"]
    out = np.empty(len(l))
    out[seen] = dist.logpdf(l)[seen]
    out[from_zero] = dist.logcdf(u)[from_zero]
    # log(sf(l) − sf(u)) from scipy's logsf, so a late interval whose cdf
    # values both round to 1 keeps its digits
    log_l, log_u = dist.logsf(l), dist.logsf(u)
    out[between] = (log_l + np.log1p(-np.exp(log_u - log_l)))[between]
    out[d["cut"]] = dist.logsf(l)[d["cut"]]
    return out


def test_the_data_have_every_kind_of_row():
    d = visits()
    seen = (d["lower"] == d["upper"]) & ~d["cut"]
    from_zero = (d["lower"] == 0) & ~d["cut"]
    assert seen.sum() > 20 and from_zero.sum() > 10 and d["cut"].sum() > 10
    assert (~seen & ~from_zero & ~d["cut"]).sum() > 100


@pytest.mark.parametrize("k", [0.7, 1.5, 4.0])
def test_weibull_log_likelihood_matches_scipy(probe, k):
    d = visits()
    params = [2.3, 2.6, 2.2, -0.04, k]
    model = TERMS + "family weibull came by sprouted_by cut short by unsprouted\n"
    answer = probe("model", {"action": "log_likelihood", "columns": columns(d), "model": model, "params": params})
    assert "error" not in answer, answer
    reference = row_terms(d, design(d) @ params[:4], k).sum()
    assert answer["log_likelihood"] == pytest.approx(reference, rel=1e-10)


def test_exponential_log_likelihood_matches_scipy(probe):
    d = visits()
    params = [2.3, 2.6, 2.2, -0.04]
    model = TERMS + "family exponential cut short by unsprouted came by sprouted_by\n"
    answer = probe("model", {"action": "log_likelihood", "columns": columns(d), "model": model, "params": params})
    assert "error" not in answer, answer
    assert answer["log_likelihood"] == pytest.approx(row_terms(d, design(d) @ params, None).sum(), rel=1e-10)


def test_weibull_mode_matches_a_general_optimiser(probe):
    """Flat-prior limit: the maximum of the scipy-written likelihood found by
    BFGS then a Nelder–Mead polish, over the coefficients and log(shape)."""
    d = visits()
    model = TERMS + "family weibull came by sprouted_by cut short by unsprouted\n" + WIDE
    answer = probe("model", {"action": "fit", "columns": columns(d), "model": model})
    assert "error" not in answer, answer
    x = design(d)

    def negative(theta):
        return -row_terms(d, x @ theta[:4], np.exp(theta[4])).sum()

    best = opt.minimize(negative, np.array([2.0, 2.0, 2.0, 0.0, 0.0]), method="BFGS", options={"gtol": 1e-9})
    best = opt.minimize(negative, best.x, method="Nelder-Mead", options={"xatol": 1e-10, "fatol": 1e-12, "maxiter": 20000})
    np.testing.assert_allclose(answer["mode"][:4], best.x[:4], rtol=1e-4, atol=1e-4)
    assert answer["mode"][4] == pytest.approx(np.exp(best.x[4]), rel=1e-4)
    assert any("between their time and `sprouted_by`" in n for n in answer["notes"]), answer["notes"]


def bad(probe, d, words, column, row):
    model = TERMS + "family weibull came by sprouted_by cut short by unsprouted\n"
    answer = probe("model", {"action": "log_likelihood", "columns": columns(d), "model": model,
                             "params": [2.0, 2.0, 2.0, 0.0, 1.0]})
    error = answer.get("error", "")
    assert words in error and column in error and f"row {row}" in error, error


def test_an_upper_bound_below_the_lower_is_refused_naming_row_and_column(probe):
    d = visits()
    i = int(np.flatnonzero(~d["cut"] & (d["lower"] > 0))[3])
    d["upper"][i] = d["lower"][i] - 1.0
    bad(probe, d, "cannot come before", "sprouted_by", i + 1)


def test_a_negative_lower_bound_is_refused_naming_row_and_column(probe):
    d = visits()
    d["lower"][7] = -2.0
    bad(probe, d, "negative time", "days", 8)


def test_each_row_matches_scipy(probe):
    """Each row's log density, chance between bounds or log survival (what
    `score predictions` reads), every constant kept."""
    d = visits(80, 3)
    params = [2.3, 2.6, 2.2, -0.04, 1.8]
    model = TERMS + "family weibull came by sprouted_by cut short by unsprouted\n"
    answer = probe("model", {"action": "pointwise", "columns": columns(d), "model": model, "params": params})
    assert "error" not in answer, answer
    reference = row_terms(d, design(d) @ params[:4], params[4])
    np.testing.assert_allclose(answer["log_densities"], reference, rtol=1e-10, atol=1e-12)


def test_calibration_between_looks_passes_scipy_chisquare(probe):
    """Talts et al. (2018): ranks of prior draws among NUTS posterior draws
    are uniform for a correct posterior. Each replication's times are drawn
    by the model and seen at the data's own looks (fixed, so the check stays
    exact); scipy.stats.chisquare on 10 equal bins does not reject at 1%."""
    d = visits(40, 5)
    cols = columns(d)
    cols["warmth"] = {"real": (d["warmth"] - 20).tolist()}
    del cols["tray"]
    model = ("days from warmth using seeds\nfamily weibull came by sprouted_by cut short by unsprouted\n"
             "prior intercepts: normal(2.5, 0.5)\nprior slopes: normal(0, 0.1)\n"
             "prior shape: lognormal(0.4, 0.3)\n")
    assert_ranks_uniform(probe, cols, model, seed=71)
