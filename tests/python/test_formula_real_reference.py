"""Reference check of identifying formulas with a real node among yes/no ones (issue 17).

`query::formula_levels` takes a real node other than the outcome into the
table of levels as S = 200 values, one per stratum of a normal proposal q,
each weighted 1/(S q(value)). Here two invented graphs with hidden common
causes (the front door through a real mechanism; the orchard graph of
library/tests/formula_real_nodes.rs with its real pollen node) get seeded
random structural models: yes/no nodes logistic in their parents, the real
node normal with a mean linear in its parents. The table the probe receives
is built here the same way (hidden nodes summed out of the enumeration, the
real node at stratified values with those weights), and the probe's
`levels` query evaluates the complete algorithm's formula on it.

The truth is the interventional mean by definition (Pearl 2009, Causality,
§3.2.1, recalled): the exposure's mechanism replaced by the value set, every
configuration of the yes/no and hidden nodes enumerated, and the real node
integrated by scipy.integrate.quad. It never goes through the formula.

Tolerance: a stratified importance sum over 200 strata of a smooth density
ratio has an error of order S^(-3/2) ≈ 4e-4 of the integrand's spread (one
draw per stratum); the outcome is yes/no, so that spread is below 1. The
check allows 2e-3 per case, and asks the two independent draw sets'
disagreement (what the library reports as its Monte Carlo error) to bound the
actual error within a factor of five on the root mean square over cases.
"""
import math
import random

import numpy as np
from scipy import integrate, stats

from conftest import run_probe
from test_formula_levels_reference import enumerate_joint, marginal

SEED = 20261206
CASES = 25
S = 200
TOL = 2e-3

FRONT_DOOR = dict(
    name="front_door",
    edges=[("u", "x"), ("u", "y"), ("x", "r"), ("r", "y")],
    hidden=["u"], order=["u", "x", "r", "y"], x="x", y="y",
)
ORCHARD = dict(
    name="orchard",
    edges=[("grower", "slope"), ("grower", "netting"), ("frost", "netting"), ("frost", "crop"),
           ("slope", "r"), ("netting", "r"), ("r", "crop"), ("slope", "crop")],
    hidden=["grower", "frost"], order=["grower", "frost", "slope", "netting", "r", "crop"], x="netting", y="crop",
)


def logistic(eta):
    return 1.0 / (1.0 + math.exp(-eta))


def random_model(rng, graph):
    """Coefficients per node: an intercept and one per parent; the real node's sd."""
    parents = {v: [a for a, b in graph["edges"] if b == v] for v in graph["order"]}
    coef = {v: [rng.uniform(-1.0, 1.0)] + [rng.uniform(-1.5, 1.5) for _ in parents[v]] for v in graph["order"]}
    return dict(parents=parents, coef=coef, sd=rng.uniform(0.5, 1.0))


def tables(graph, model, r_values, r_weights):
    """Conditional tables with the real node at `r_values` (factor density × weight)."""
    sizes = {v: 2 for v in graph["order"]}
    sizes["r"] = len(r_values)
    out = {}
    for v in graph["order"]:
        pa = model["parents"][v]
        shape = [sizes[p] for p in pa] + [sizes[v]]
        t = np.zeros(shape)
        for idx in np.ndindex(*shape):
            values = [r_values[i] if p == "r" else float(i) for p, i in zip(pa, idx[:-1])]
            eta = model["coef"][v][0] + sum(c * a for c, a in zip(model["coef"][v][1:], values))
            if v == "r":
                t[idx] = stats.norm.pdf(r_values[idx[-1]], eta, model["sd"]) * r_weights[idx[-1]]
            else:
                p = logistic(eta)
                t[idx] = p if idx[-1] == 1 else 1.0 - p
        out[v] = (pa, t)
    return sizes, out


def truth(graph, model, level):
    """E[y | do(x = level)]: enumeration over yes/no nodes, quad over the real node."""
    def at(r):
        sizes, ts = tables(graph, model, [r], [1.0])
        do = enumerate_joint(None, sizes, ts, graph["order"], {graph["x"]: level})
        return float(marginal(do, graph["order"], [graph["y"]])[1])
    value, error = integrate.quad(at, -15.0, 15.0, limit=200)
    assert error < 1e-7, error
    return value


def proposal(graph, model):
    """The real node's observed mean and sd (from the exact joint), the sd widened by a quarter."""
    mean = integrate.quad(lambda r: r * density(graph, model, r), -15.0, 15.0, limit=200)[0]
    second = integrate.quad(lambda r: r * r * density(graph, model, r), -15.0, 15.0, limit=200)[0]
    return mean, 1.25 * math.sqrt(second - mean * mean)


def density(graph, model, r):
    sizes, ts = tables(graph, model, [r], [1.0])
    return float(enumerate_joint(None, sizes, ts, graph["order"]).sum())


def request(graph, model, rng):
    """The observed table with the real node at S stratified values, one query per exposure level."""
    mean, sd = proposal(graph, model)
    u = (np.arange(S) + np.array([rng.random() for _ in range(S)])) / S
    values = mean + sd * stats.norm.ppf(u)
    weights = 1.0 / (S * stats.norm.pdf(values, mean, sd))
    sizes, ts = tables(graph, model, values, weights)
    observed = [v for v in graph["order"] if v not in graph["hidden"]]
    joint = marginal(enumerate_joint(None, sizes, ts, graph["order"]), graph["order"], observed)
    queries = [
        {"kind": "levels", "set": [graph["x"]], "watch": [graph["y"]],
         "nodes": [{"name": v, "size": sizes[v]} for v in observed],
         "joint": joint.ravel().tolist(), "moment": None, "x_level": level, "held": {}}
        for level in (0, 1)
    ]
    return {"name": graph["name"], "nodes": [{"name": v, "hidden": v in graph["hidden"]} for v in graph["order"]],
            "edges": [list(e) for e in graph["edges"]], "queries": queries}


def check(graph, seed):
    rng = random.Random(seed)
    models = [random_model(rng, graph) for _ in range(CASES)]
    first = [request(graph, m, rng) for m in models]
    second = [request(graph, m, rng) for m in models]
    a = run_probe("graph", {"graphs": first})["graphs"]
    b = run_probe("graph", {"graphs": second})["graphs"]
    errors, spreads = [], []
    for m, ga, gb in zip(models, a, b):
        for level in (0, 1):
            qa, qb = ga["answers"][level], gb["answers"][level]
            assert "mean" in qa and "mean" in qb, (qa, qb)
            expected = truth(graph, m, level)
            averaged = 0.5 * (qa["mean"] + qb["mean"])
            assert abs(averaged - expected) < TOL, (graph["name"], level, averaged, expected)
            errors.append(averaged - expected)
            spreads.append(0.5 * (qa["mean"] - qb["mean"]))
    rms = lambda v: math.sqrt(sum(e * e for e in v) / len(v))
    assert rms(errors) < 5.0 * rms(spreads) + 1e-6, (rms(errors), rms(spreads))
    return rms(errors)


def test_front_door_through_a_real_mechanism_matches_the_integrated_intervention():
    check(FRONT_DOOR, SEED)


def test_orchard_with_a_real_pollen_node_matches_the_integrated_intervention():
    check(ORCHARD, SEED + 1)
