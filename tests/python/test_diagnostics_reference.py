"""R-hat, bulk ESS and tail ESS checked against an independent implementation.

Source: Vehtari, Gelman, Simpson, Carpenter & Buerkner (2021), "Rank-normalization,
folding, and localization: an improved R-hat for assessing convergence of MCMC",
Bayesian Analysis 16(2), sections 3-4 and appendix A. This file implements the
published definitions with numpy/scipy only, computing autocovariances by FFT
(the Rust side uses direct sums), and compares on the same draws.
"""
import numpy as np
import pytest
from scipy.special import ndtri
from scipy.stats import rankdata

TOL = 1e-6


def split(chains):
    """Halve every chain; an odd chain loses its middle draw (paper, section 4.1)."""
    out = []
    for c in chains:
        c = np.asarray(c, dtype=float)
        h = len(c) // 2
        out.append(c[:h])
        out.append(c[len(c) - h:])
    return np.array(out)


def rank_normalise(x):
    """z = Phi^-1((r - 3/8) / (S - 1/4)) with pooled average ranks (paper, eq. 14)."""
    r = rankdata(x.ravel(), method="average").reshape(x.shape)
    return ndtri((r - 0.375) / (x.size - 0.25))


def rhat_basic(x):
    """Split R-hat of chains already split (paper, eqs. 3-4)."""
    m, n = x.shape
    b = n * np.var(x.mean(axis=1), ddof=1)
    w = np.mean(np.var(x, axis=1, ddof=1))
    var_plus = (n - 1) / n * w + b / n
    return np.sqrt(var_plus / w)


def autocov_fft(c):
    """Autocovariance at every lag, divisor n, by zero-padded FFT."""
    n = len(c)
    d = c - c.mean()
    size = 1 << (2 * n - 1).bit_length()
    f = np.fft.rfft(d, size)
    return np.fft.irfft(f * np.conj(f), size)[:n] / n


def ess_basic(x):
    """Multi-chain ESS with Geyer's initial monotone sequence (paper, section 3.2, eq. 10)."""
    m, n = x.shape
    w = np.mean(np.var(x, axis=1, ddof=1))
    var_plus = (n - 1) / n * w + np.var(x.mean(axis=1), ddof=1)
    acov = np.array([autocov_fft(c) for c in x])
    # rho_{t,m} * s_m^2 = acov_t * n / (n - 1), since rho_{t,m} = acov_t / acov_0 and s_m^2 = acov_0 n / (n-1)
    rho = 1 - (w - acov.mean(axis=0) * n / (n - 1)) / var_plus
    pairs = rho[0:n - 1:2] + rho[1:n:2]
    total, prev = 0.0, np.inf
    for p in pairs:
        if not p >= 0:  # initial positive sequence: stop at the first negative pair
            break
        p = min(p, prev)  # initial monotone sequence
        total += p
        prev = p
    tau = -1 + 2 * total
    s = m * n
    return min(s / tau, s * np.log10(s))  # cap for antithetic chains (recalled from the paper)


def reference(chains):
    x = split(chains)
    bulk = rhat_basic(rank_normalise(x))
    folded = np.abs(x - np.median(x))
    tail = rhat_basic(rank_normalise(folded))
    q05, q95 = np.quantile(x, [0.05, 0.95])  # linear interpolation, as on the Rust side
    ess_tail = min(ess_basic((x <= q05).astype(float)), ess_basic((x <= q95).astype(float)))
    return {"rhat": max(bulk, tail), "ess_bulk": ess_basic(rank_normalise(x)), "ess_tail": ess_tail}


def ar1(rng, chains, n, phi, shift=None):
    out = np.zeros((chains, n))
    for c in range(chains):
        v = rng.normal() / np.sqrt(1 - phi * phi)
        for i in range(n):
            v = phi * v + rng.normal()
            out[c, i] = v
    if shift is not None:
        out += np.asarray(shift)[:, None]
    return out


def cases():
    rng = np.random.default_rng(7)
    yield "well_mixed_iid", rng.normal(size=(4, 1000))
    yield "autocorrelated", ar1(rng, 4, 1000, 0.9)
    yield "antithetic", ar1(rng, 4, 500, -0.6)
    yield "stuck_chain_shifted", ar1(rng, 4, 800, 0.5, shift=[0, 0, 0, 3.0])
    stuck = rng.normal(size=(4, 600))
    stuck[2, :] = 0.37  # one chain that never moved
    yield "stuck_chain_constant", stuck
    yield "heavy_tailed_cauchy", rng.standard_cauchy(size=(4, 1000))
    yield "trend_within_chain", rng.normal(size=(4, 400)) + np.linspace(0, 2, 400)[None, :]
    yield "odd_length_two_chains", rng.normal(size=(2, 301))
    yield "ties_discrete", rng.poisson(3.0, size=(4, 500)).astype(float)


CASES = list(cases())


@pytest.mark.parametrize("name,draws", CASES, ids=[c[0] for c in CASES])
def test_rhat_and_ess_match_published_definitions(probe, name, draws):
    got = probe("diagnostics", {"chains": draws.tolist()})
    want = reference(draws)
    for key in ("rhat", "ess_bulk", "ess_tail"):
        assert got[key] is not None, f"{name}: {key} missing"
        assert got[key] == pytest.approx(want[key], rel=TOL, abs=TOL), f"{name}: {key}"


def test_stuck_and_well_mixed_are_told_apart(probe):
    # Paper, section 4: R-hat should flag a chain apart from the others (> 1.01)
    # and pass independent well-mixed chains.
    by_name = dict(CASES)
    assert probe("diagnostics", {"chains": by_name["stuck_chain_shifted"].tolist()})["rhat"] > 1.01
    assert probe("diagnostics", {"chains": by_name["well_mixed_iid"].tolist()})["rhat"] < 1.01


# ---------------------------------------------------------------------------
# Quantile intervals and HDI of draws (waypath::draws) against scipy.stats.
# ---------------------------------------------------------------------------
from scipy import stats
from scipy.optimize import minimize_scalar

N_DRAWS = 200_000


def true_hdi(dist, mass):
    """Shortest interval of a unimodal distribution: minimise ppf(p + mass) - ppf(p) over p."""
    res = minimize_scalar(lambda p: dist.ppf(p + mass) - dist.ppf(p),
                          bounds=(0.0, 1.0 - mass), method="bounded", options={"xatol": 1e-12})
    return dist.ppf(res.x), dist.ppf(res.x + mass), res.x


def quantile_se(dist, p, n):
    """Large-sample standard error of a sample quantile: sqrt(p(1-p)/n) / f(q_p)."""
    return np.sqrt(p * (1 - p) / n) / dist.pdf(dist.ppf(p))


DISTS = [
    ("normal", stats.norm(loc=2.0, scale=3.0), 0.9),
    ("gamma", stats.gamma(a=3.0, scale=2.0), 0.9),
    ("beta", stats.beta(a=2.0, b=5.0), 0.8),
    ("lognormal", stats.lognorm(s=0.6), 0.95),
]


@pytest.mark.parametrize("name,dist,mass", DISTS, ids=[d[0] for d in DISTS])
def test_intervals_match_scipy_distributions(probe, name, dist, mass):
    draws = dist.rvs(size=N_DRAWS, random_state=np.random.default_rng(11))
    got = probe("diagnostics", {"interval": {"draws": draws.tolist(), "mass": mass}})

    # Same draws: quantiles by numpy's default (linear) rule, exactly.
    tail = (1 - mass) / 2
    assert got["quantile"] == pytest.approx(np.quantile(draws, [tail, 1 - tail]).tolist(), rel=1e-12)

    # Same draws: the shortest window of ceil(mass * n) sorted draws
    # (Chen & Shao 1999, Monte Carlo HPD interval estimate).
    s = np.sort(draws)
    k = int(np.ceil(mass * len(s)))
    widths = s[k - 1:] - s[:len(s) - k + 1]
    j = int(np.argmin(widths))
    assert got["hdi"] == pytest.approx([s[j], s[j + k - 1]], rel=1e-12)

    # Population: scipy.stats ppf for the quantile interval, and the shortest
    # interval found from ppf for the HDI, within 6 Monte Carlo standard errors.
    for value, p in zip(got["quantile"], (tail, 1 - tail)):
        assert abs(value - dist.ppf(p)) < 6 * quantile_se(dist, p, N_DRAWS)
    lo, hi, p_lo = true_hdi(dist, mass)
    assert abs(got["hdi"][0] - lo) < 6 * quantile_se(dist, max(p_lo, 1e-3), N_DRAWS) + 1e-3 * dist.std()
    assert abs(got["hdi"][1] - hi) < 6 * quantile_se(dist, min(p_lo + mass, 1 - 1e-3), N_DRAWS) + 1e-3 * dist.std()
    assert (got["hdi"][1] - got["hdi"][0]) <= (got["quantile"][1] - got["quantile"][0]) + 1e-12
