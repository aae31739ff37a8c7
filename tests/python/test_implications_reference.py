"""Checked implications between two categories of more than two levels.

Waypath checks `a ⊥ b | Z` for two such categories with a softmax regression
of b on a and Z and flags the implication when an interval of a change in
one of b's level shares excludes zero. The references: the likelihood-ratio
test of statsmodels MNLogit fits with and without a (Wilks 1938: twice the
log-likelihood gain is chi-square with (K−1)(L−1) degrees of freedom), and for
the unconditional case scipy.stats.chi2_contingency, whose table of shares
is also the maximum-likelihood value of each association (a saturated
model). Data: invented meadows (zone, habitat, bird seen), seeded here.
"""
import numpy as np
import scipy.stats as st
import statsmodels.api as sm

ZONES, HABITATS, BIRDS = ["coast", "valley", "upland"], ["grass", "scrub", "wood"], ["lark", "wren", "finch"]


def softmax_draw(rng, eta):
    p = np.exp(eta - eta.max(axis=1, keepdims=True))
    p /= p.sum(axis=1, keepdims=True)
    u = rng.uniform(size=(len(eta), 1))
    return (u > p.cumsum(axis=1)).sum(axis=1)


def meadows(n, seed, habitat_matters):
    rng = np.random.default_rng(seed)
    zone = rng.integers(0, 3, n)
    z = np.eye(3)[zone]
    habitat = softmax_draw(rng, z @ np.array([[0.0, 0.5, -0.5], [0.0, -0.3, 0.9], [0.0, 1.0, 0.2]]))
    eta = z @ np.array([[0.0, 0.4, -0.2], [0.0, -0.6, 0.5], [0.0, 0.3, 0.8]])
    if habitat_matters:
        eta = eta + np.eye(3)[habitat] @ np.array([[0.0, 0.0, 0.0], [0.0, 0.9, -0.4], [0.0, -0.5, 1.1]])
    bird = softmax_draw(rng, eta)
    return zone, habitat, bird


def columns(zone, habitat, bird):
    cat = lambda codes, levels: {"category": {"codes": codes.tolist(), "levels": levels}}  # noqa: E731
    return {"zone": cat(zone, ZONES), "habitat": cat(habitat, HABITATS), "bird": cat(bird, BIRDS)}


def likelihood_ratio_p(zone, habitat, bird):
    """p-value of habitat's terms in an MNLogit of bird on zone and habitat."""
    z, h = np.eye(3)[zone], np.eye(3)[habitat][:, 1:]
    fit = lambda x: sm.MNLogit(bird, x).fit(method="newton", maxiter=100, disp=False)  # noqa: E731
    full, reduced = fit(np.column_stack([z, h])), fit(z)
    return st.chi2.sf(2 * (full.llf - reduced.llf), df=4)


def check(probe, graph, data, mass=0.99):
    answer = probe("model", {"action": "implications", "columns": columns(*data), "graph": graph,
                             "draws": 1000, "seed": 3, "mass": mass})
    assert "error" not in answer, answer
    return answer


def test_two_categories_given_a_third_agree_with_the_mnlogit_likelihood_ratio_test(probe):
    graph = ["zone -> habitat", "zone -> bird"]
    independent = meadows(1500, 5, habitat_matters=False)
    dependent = meadows(1500, 5, habitat_matters=True)
    p_independent, p_dependent = likelihood_ratio_p(*independent), likelihood_ratio_p(*dependent)
    assert p_independent > 0.2 and p_dependent < 1e-8, (p_independent, p_dependent)
    for data, contradicted in [(independent, False), (dependent, True)]:
        report = check(probe, graph, data)
        [c] = report["checks"]
        assert c["statement"] == "habitat ⊥ bird | zone" and c["checked"], c
        assert c["regression"] == "bird from habitat, zone", c
        # one change per level of bird for each habitat after the first
        assert len(c["associations"]) == 6, c["associations"]
        assert c["associations"][0]["label"] == "bird lark: habitat scrub vs grass"
        assert c["contradicted"] == contradicted, (c, p_independent, p_dependent)


def test_two_unconditioned_categories_agree_with_chi2_contingency_and_its_shares(probe):
    # bird and habitat share the cause zone, which is left out of the table:
    # the graph with no edge between them claims they are independent.
    graph = ["habitat", "bird"]
    for matters, contradicted in [(False, False), (True, True)]:
        zone, habitat, bird = meadows(2000, 9, habitat_matters=matters)
        rng = np.random.default_rng(1)
        if not matters:
            bird = rng.permutation(bird)  # independent of habitat by construction
        counts = np.zeros((3, 3))
        np.add.at(counts, (habitat, bird), 1)
        _, p, _, _ = st.chi2_contingency(counts)
        assert (p < 1e-8) if contradicted else (p > 0.2), p
        answer = probe("model", {"action": "implications", "columns": {k: v for k, v in columns(zone, habitat, bird).items() if k != "zone"},
                                 "graph": graph, "draws": 1000, "seed": 3, "mass": 0.99})
        assert "error" not in answer, answer
        [c] = answer["checks"]
        assert c["contradicted"] == contradicted, (c, p)
        shares = counts / counts.sum(axis=1, keepdims=True)
        for a in c["associations"]:
            # label "bird LEVEL: habitat LEVEL vs grass"
            level, setting = a["label"].split(": ")
            k, h = BIRDS.index(level.split()[1]), HABITATS.index(setting.split()[1])
            assert abs(a["mean"] - (shares[h, k] - shares[0, k])) < 0.01, (a, shares)
