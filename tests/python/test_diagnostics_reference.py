"""R-hat, bulk ESS and tail ESS checked three independent ways.

Source: Vehtari, Gelman, Simpson, Carpenter & Buerkner (2021), "Rank-normalization,
folding, and localization: an improved R-hat for assessing convergence of MCMC",
Bayesian Analysis 16(2) (the published text; sections and equations cited below).

1. Analytic ESS: for a stationary Gaussian AR(1) chain with coefficient rho the
   integrated autocorrelation time is (1 + rho)/(1 - rho) (Geyer 1992, recalled),
   so long chains must give ESS near N(1 - rho)/(1 + rho). Rank normalisation is
   monotone, so bulk ESS targets the same number. No implementation detail enters.
2. Analytic R-hat: chains with known mean shifts. The population value of the
   rank-normalised split R-hat for a mixture of shifted normals is computed here by
   numerical integration (scipy.integrate.trapezoid on a fine grid) of the normal scores Phi^-1(F(x))
   under each component, F the pooled mixture CDF, and likewise for the folded draws.
3. A second, plain implementation written from the paper's definitions (not from
   the Rust code): section 3.1 (split R-hat, eqs. for B, W, var+), section 3.2
   (combined autocorrelation from per-chain biased autocovariances, Geyer's initial
   positive then monotone sequence, and the average of the sums truncated at the
   odd lag and at the next even lag for antithetic chains), section 4.1 (pooled
   average ranks, normal scores Phi^-1((r - 3/8)/(S + 1/4))), section 4.2 (folding
   about the median), section 4.3 (tail ESS from the 5% and 95% quantile
   indicators). Autocovariances here are plain loops over lags.
"""
import numpy as np
import pytest
from scipy import integrate
from scipy.signal import lfilter
from scipy.special import ndtri
from scipy.stats import norm, rankdata

TOL = 1e-6


# ---- the second, plain implementation (from the paper) ----------------------

def split_halves(chains):
    """Each chain cut into two halves; an odd chain's middle draw is left out."""
    out = []
    for c in chains:
        c = [float(v) for v in c]
        h = len(c) // 2
        out.append(c[:h])
        out.append(c[len(c) - h:])
    return out


def normal_scores(halves):
    """Section 4.1: pooled average ranks r become Phi^-1((r - 3/8)/(S + 1/4))."""
    pooled = np.concatenate([np.asarray(h) for h in halves])
    ranks = rankdata(pooled, method="average")
    z = ndtri((ranks - 3.0 / 8.0) / (len(pooled) + 1.0 / 4.0))
    out, at = [], 0
    for h in halves:
        out.append(z[at:at + len(h)])
        at += len(h)
    return out


def between_within(halves):
    """Section 3.1: B, W and var+ = (N-1)/N W + B/N."""
    m, n = len(halves), len(halves[0])
    means = [sum(h) / n for h in halves]
    grand = sum(means) / m
    b = n / (m - 1) * sum((mu - grand) ** 2 for mu in means)
    s2 = [sum((v - mu) ** 2 for v in h) / (n - 1) for h, mu in zip(halves, means)]
    w = sum(s2) / m
    return b, w, (n - 1) / n * w + b / n, s2


def split_rhat(halves):
    _, w, var_plus, _ = between_within(halves)
    return (var_plus / w) ** 0.5


def effective_size(halves):
    """Section 3.2, written out lag by lag."""
    m, n = len(halves), len(halves[0])
    _, w, var_plus, s2 = between_within(halves)
    arrays = [np.asarray(h) - np.mean(h) for h in halves]

    def rho(t):
        # per-chain autocorrelation rho_{t,m} with the biased (divisor N) estimate
        per_chain = []
        for a, s2m in zip(arrays, s2):
            acov_t = float(np.dot(a[:n - t], a[t:])) / n
            acov_0 = float(np.dot(a, a)) / n
            # a half that never varies (an indicator that is all 0) adds nothing
            per_chain.append(s2m * acov_t / acov_0 if acov_0 > 0 else 0.0)
        return 1.0 - (w - sum(per_chain) / m) / var_plus

    total, previous, k = 0.0, float("inf"), 0
    while 2 * k + 1 < n:
        pair = rho(2 * k) + rho(2 * k + 1)
        if not pair > 0:  # the initial positive sequence: every P_k kept is > 0
            break
        pair = min(pair, previous)  # initial monotone sequence
        total += pair
        previous = pair
        k += 1
    odd_end = -1.0 + 2.0 * total
    even_end = odd_end + 2.0 * rho(2 * k) if 2 * k < n else odd_end
    tau = (odd_end + even_end) / 2.0
    s = m * n
    return min(s / tau, s * np.log10(s))


def reference(chains):
    halves = split_halves(chains)
    bulk = split_rhat(normal_scores(halves))
    pooled = np.concatenate([np.asarray(h) for h in halves])
    # the median by linear interpolation between the middle draws, as on the
    # Rust side (a + (b - a)/2 and (a + b)/2 can round apart, which decides
    # whether the two middle folded draws tie)
    median = np.quantile(pooled, 0.5)
    tail = split_rhat(normal_scores([[abs(v - median) for v in h] for h in halves]))
    q05, q95 = np.quantile(pooled, [0.05, 0.95])  # linear interpolation, as on the Rust side
    below = lambda q: [[1.0 if v <= q else 0.0 for v in h] for h in halves]  # noqa: E731
    return {
        "rhat": max(bulk, tail),
        "ess_bulk": effective_size(normal_scores(halves)),
        "ess_tail": min(effective_size(below(q05)), effective_size(below(q95))),
    }


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
    yield "well_mixed_iid", rng.normal(size=(4, 400))
    yield "autocorrelated", ar1(rng, 4, 400, 0.9)
    yield "antithetic", ar1(rng, 4, 300, -0.6)
    yield "stuck_chain_shifted", ar1(rng, 4, 400, 0.5, shift=[0, 0, 0, 3.0])
    stuck = rng.normal(size=(4, 300))
    stuck[2, :] = 0.37  # one chain that never moved
    yield "stuck_chain_constant", stuck
    yield "heavy_tailed_cauchy", rng.standard_cauchy(size=(4, 400))
    yield "trend_within_chain", rng.normal(size=(4, 300)) + np.linspace(0, 2, 300)[None, :]
    yield "odd_length_two_chains", rng.normal(size=(2, 301))
    yield "ties_discrete", rng.poisson(3.0, size=(4, 300)).astype(float)


# Draws on a grid of 2^-12 have short exact decimal forms, so the JSON the
# probe reads parses to the very same doubles (a last-bit difference can
# decide whether two folded draws tie).
CASES = [(name, np.round(draws * 4096) / 4096) for name, draws in cases()]


@pytest.mark.parametrize("name,draws", CASES, ids=[c[0] for c in CASES])
def test_rhat_and_ess_match_the_paper_written_out(probe, name, draws):
    got = probe("diagnostics", {"chains": draws.tolist()})
    want = reference(draws)
    for key in ("rhat", "ess_bulk", "ess_tail"):
        assert got[key] is not None, f"{name}: {key} missing"
        assert got[key] == pytest.approx(want[key], rel=TOL, abs=TOL), f"{name}: {key}"


def long_ar1(rng, chains, n, phi):
    """Stationary AR(1) chains x_t = phi x_{t-1} + e_t, by scipy.signal.lfilter."""
    start = rng.normal(size=chains) / np.sqrt(1 - phi * phi)
    noise = rng.normal(size=(chains, n))
    return lfilter([1.0], [1.0, -phi], noise, axis=1, zi=(phi * start)[:, None])[0]


@pytest.mark.parametrize("phi", [0.0, 0.5, 0.8, -0.4])
def test_bulk_ess_of_long_ar1_chains_is_the_analytic_value(probe, phi):
    # ESS = S (1 - phi)/(1 + phi) for a stationary Gaussian AR(1) (Geyer 1992,
    # recalled). With 4 chains of 50 000 the estimator's relative sd is a few
    # per cent; a sum cut one pair early or late, or a wrong variance divisor,
    # moves it by more than the 8% allowed at phi = 0.8 (tau = 9).
    rng = np.random.default_rng(int(1000 * (phi + 1)))
    draws = long_ar1(rng, 4, 50_000, phi)
    expected = draws.size * (1 - phi) / (1 + phi)
    got = probe("diagnostics", {"chains": draws.tolist()})
    assert got["ess_bulk"] == pytest.approx(expected, rel=0.08), (phi, got)


def population_rhat(shifts):
    """Large-N limit of the rank-normalised split R-hat (max of bulk and folded)
    for chains of N(shift_m, 1) draws, by integrating the normal scores
    Phi^-1(F(x)) against each component's density (trapezoid rule on a fine
    grid, scipy.integrate.trapezoid)."""
    shifts = np.asarray(shifts, dtype=float)
    x = np.linspace(shifts.min() - 12, shifts.max() + 12, 400_001)
    mix_cdf = norm.cdf(x[None, :] - shifts[:, None]).mean(axis=0)

    def limit(score):
        means, variances = [], []
        for mu in shifts:
            density = norm.pdf(x - mu)
            m1 = integrate.trapezoid(score * density, x)
            m2 = integrate.trapezoid(score * score * density, x)
            means.append(m1)
            variances.append(m2 - m1 * m1)
        # split halves of a stationary chain share their chain's law: each
        # component appears twice among the 2M halves.
        w = np.mean(np.repeat(variances, 2))
        b_over_n = np.var(np.repeat(means, 2), ddof=1)  # B/N as N grows keeps only this
        return np.sqrt((w + b_over_n) / w)

    clip = lambda p: np.clip(p, 1e-300, 1 - 1e-16)  # noqa: E731
    bulk = limit(ndtri(clip(mix_cdf)))
    # Folding about the pooled median: zeta = |x - med|, whose pooled CDF is
    # G(z) = F(med + z) - F(med - z).
    med = x[np.searchsorted(mix_cdf, 0.5)]
    z = np.abs(x - med)
    fold_cdf = (norm.cdf(med + z[None, :] - shifts[:, None]) - norm.cdf(med - z[None, :] - shifts[:, None])).mean(axis=0)
    tail = limit(ndtri(clip(fold_cdf)))
    return max(bulk, tail)


@pytest.mark.parametrize("shifts", [[0, 0, 0, 0.5], [0, 0, 0.3, 0.6], [0, 0, 0, 1.0]])
def test_rhat_of_shifted_chains_is_the_population_value(probe, shifts):
    # Independent N(shift, 1) draws, 4 chains of 40 000: the half-chain means
    # carry noise of sd 0.007, so the sample R-hat is within about 0.001 of its
    # large-N limit (0.003 allowed). R-hat without the between-chain term, or with the halves'
    # means not centred on the grand mean, would be 1 or far above.
    rng = np.random.default_rng(17)
    draws = rng.normal(size=(4, 40_000)) + np.asarray(shifts, dtype=float)[:, None]
    got = probe("diagnostics", {"chains": draws.tolist()})["rhat"]
    want = population_rhat(shifts)
    assert want > 1.01, want  # the shift is visible
    assert got == pytest.approx(want, abs=0.003), (shifts, got, want)


def test_stuck_run_gives_no_numbers(probe):
    # A chain that never moved alone cannot be diagnosed as constant, but a run
    # whose every draw is equal has no R-hat or ESS (the Rust side then warns).
    got = probe("diagnostics", {"chains": [[0.37] * 100] * 4})
    assert got == {"rhat": None, "ess_bulk": None, "ess_tail": None}


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
