"""Reference check of the instrument list (issue 17): complete, and each
conditioning set it gives is valid.

A node Z is an instrument for the total effect of X on Y given a set W of
observed nodes (Pearl 2009, Causality, §7.4.5; conditional instruments,
Brito & Pearl 2002; stated for total effects as by van der Zander,
Liśkiewicz & Textor 2015 — all recalled) when W holds no descendant of X
and none of Z, X, Y; Z and Y are d-separated given W once X's outgoing
edges are removed; and Z and X are d-connected given W.

Here every conditioning set is tried (brute force over the subsets of the
allowed nodes) with networkx's d-separation on seeded random small graphs
with hidden common causes; the nodes for which some set works must be
exactly the nodes Waypath lists, and the set Waypath gives with each must
satisfy the definition.
"""
import itertools
import random

import networkx as nx

from conftest import run_probe

SEED = 20261204
GRAPHS = 300


def random_graph(rng, index):
    """4-7 observed nodes in a random order, 1-3 hidden common causes."""
    n_obs = rng.randint(4, 7)
    obs = [f"v{k}" for k in range(n_obs)]
    g = nx.DiGraph()
    g.add_nodes_from(obs)
    density = rng.uniform(0.25, 0.6)
    for i, a in enumerate(obs):
        for b in obs[i + 1:]:
            if rng.random() < density:
                g.add_edge(a, b)
    hidden = []
    for h in range(rng.randint(1, 3)):
        name = f"u{h}"
        hidden.append(name)
        for c in rng.sample(obs, 2):
            g.add_edge(name, c)
    return g, obs, hidden


def instrument_given(g, obs, x, y, z, w):
    """Whether z is an instrument for x -> y given the set w (the definition)."""
    below_x = nx.descendants(g, x) | {x}
    if any(v in below_x or v in (z, y) for v in w) or z in below_x or z == y:
        return False
    cut = g.copy()
    cut.remove_edges_from(list(g.out_edges(x)))
    return nx.is_d_separator(cut, {z}, {y}, set(w)) and not nx.is_d_separator(g, {z}, {x}, set(w))


def brute_force(g, obs, x, y):
    """Every observed node that is an instrument given some set."""
    below_x = nx.descendants(g, x) | {x}
    found = set()
    for z in obs:
        if z in below_x or z == y:
            continue
        allowed = [v for v in obs if v not in below_x and v not in (z, y)]
        for k in range(len(allowed) + 1):
            if any(instrument_given(g, obs, x, y, z, w) for w in itertools.combinations(allowed, k)):
                found.add(z)
                break
    return found


def spec(g, obs, hidden, name, queries):
    nodes = [{"name": v, "hidden": v in hidden} for v in obs + hidden]
    return {"name": name, "nodes": nodes, "edges": [list(e) for e in g.edges], "queries": queries}


def test_instrument_list_matches_a_search_over_every_conditioning_set():
    rng = random.Random(SEED)
    cases, specs = [], []
    for i in range(GRAPHS):
        g, obs, hidden = random_graph(rng, i)
        pairs = [(a, b) for a, b in itertools.permutations(obs, 2) if nx.has_path(g, a, b)]
        if not pairs:
            continue
        x, y = rng.choice(pairs)
        cases.append((g, obs, x, y))
        specs.append(spec(g, obs, hidden, f"g{i}", [{"kind": "instruments", "exposure": x, "outcome": y}]))
    answers = run_probe("graph", {"graphs": specs})["graphs"]
    with_instrument = conditional_only = 0
    for (g, obs, x, y), a in zip(cases, answers):
        assert "error" not in a, a
        listed = a["answers"][0]
        assert isinstance(listed, list), listed
        expected = brute_force(g, obs, x, y)
        assert {i["node"] for i in listed} == expected, (list(g.edges), x, y, listed, expected)
        for i in listed:
            assert instrument_given(g, obs, x, y, i["node"], i["given"]), (list(g.edges), x, y, i)
            conditional_only += bool(i["given"]) and not instrument_given(g, obs, x, y, i["node"], [])
        with_instrument += bool(expected)
    print(f"{len(cases)} effects, {with_instrument} with instruments, {conditional_only} instruments that need their set")
    # The sample must exercise instruments, including ones that need a set.
    assert with_instrument >= 40 and conditional_only >= 10, (with_instrument, conditional_only)


def test_an_instrument_needing_the_set_nearest_the_outcome_is_found():
    """z -> a -> x -> y, a -> b -> y, hidden u -> x, y: given {a}, z's one
    path to x is blocked; given {b}, z is an instrument (checked here with
    networkx), so the list must hold z with a set that works."""
    g = nx.DiGraph([("z", "a"), ("a", "x"), ("x", "y"), ("a", "b"), ("b", "y"), ("u", "x"), ("u", "y")])
    obs = ["z", "a", "b", "x", "y"]
    assert not instrument_given(g, obs, "x", "y", "z", ["a"])
    assert instrument_given(g, obs, "x", "y", "z", ["b"])
    a = run_probe("graph", {"graphs": [spec(g, obs, ["u"], "near", [{"kind": "instruments", "exposure": "x", "outcome": "y"}])]})
    listed = a["graphs"][0]["answers"][0]
    z = [i for i in listed if i["node"] == "z"]
    assert z and instrument_given(g, obs, "x", "y", "z", z[0]["given"]), listed
