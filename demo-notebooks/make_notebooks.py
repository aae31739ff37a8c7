"""Write the demo notebooks (.ipynb, nbformat 4.5) from the cell lists below.

Editing a demo: change its cells here, run `python3 demo-notebooks/make_notebooks.py`,
and commit both this file and the notebook. Standard library only.
"""
import json
from pathlib import Path

HERE = Path(__file__).resolve().parent


def md(text):
    return ("markdown", text.strip("\n"))


def code(text):
    return ("code", text.strip("\n"))


def notebook(cells):
    out = []
    for i, (kind, text) in enumerate(cells, start=1):
        lines = text.splitlines(keepends=True)
        cell = {"cell_type": kind, "id": f"wp-cell-{i:03d}", "metadata": {}, "source": lines}
        if kind == "code":
            cell["execution_count"] = None
            cell["outputs"] = []
        out.append(cell)
    return {
        "cells": out,
        "metadata": {
            "kernelspec": {"name": "waypath", "display_name": "Waypath", "language": "waypath"},
            "language_info": {"name": "waypath", "file_extension": ".wp", "mimetype": "text/x-waypath"},
        },
        "nbformat": 4,
        "nbformat_minor": 5,
    }


ORCHARD = [
    md("""
# Rootstock, trunk girth and fruit yield

An invented orchard: 240 apple trees, each grafted on a **dwarf** or a
**standard** rootstock. We want to know what the rootstock does to fruit yield
(kg per tree), in total and apart from its effect through trunk girth.
The data were simulated by `data/make_data.py`; no real orchard is described.
"""),
    md("""
## The data

We declare the columns we care about, with units, and let Waypath infer the rest.
The level order of `rootstock` is the order written: `dwarf` is the first level.
"""),
    code("""
table trees from "data/orchard.csv":
    rootstock: category(dwarf, standard)
    girth: real in cm
    yield: real in kg
    keep where girth > 0
"""),
    md("""
## The causal graph

Rootstock sets how vigorous the tree is (girth) and also affects yield
through other routes (flowering, fruit set). Girth drives yield.
"""),
    code("""
graph orchard:
    rootstock -> girth -> yield
    rootstock -> yield
"""),
    md("""
## Which effect, and what to stratify by

The **total effect** of rootstock on yield needs no adjustment here: nothing
opens a backdoor path into rootstock. The **direct effect** (holding girth
fixed) needs girth in the model.
"""),
    code("""
ask total effect of rootstock on yield in orchard
ask direct effect of rootstock on yield in orchard
"""),
    code("""
paths from rootstock to yield in orchard given girth
"""),
    md("""
## Fitting the two models the graph asked for

For the total effect, yield is modelled by rootstock alone: one intercept per
rootstock. For the direct effect, girth enters too, with its own slope within
each rootstock. Priors we do not declare are set from the data's own scale and
listed with the fit.
"""),
    code("""
model m_total:
    yield from rootstock using trees
    prior intercepts: normal(30, 15)

fit m_total
"""),
    code("""
model m_direct:
    yield from rootstock, girth per rootstock using trees

fit m_direct with nuts seed 11
plot m_direct trace
"""),
    md("""
## What the graph claims that the data could contradict

This graph is complete between its three nodes, so it implies no
independence; a graph with a missing edge would list one here.
"""),
    code("""
implications of orchard
"""),
    md("""
## A worry: soil depth we never measured

Deep soil grows thicker trunks *and* more fruit. If that common cause is
real, girth becomes a collider on the path `rootstock -> girth <- soil -> yield`,
and conditioning on girth opens it. Waypath then says the direct effect is no
longer identifiable by adjustment, while the total effect still is.
"""),
    code("""
graph orchard_soil:
    rootstock -> girth -> yield
    rootstock -> yield
    hidden soil -> girth, yield

ask total effect of rootstock on yield in orchard_soil
ask direct effect of rootstock on yield in orchard_soil
"""),
]

NOTEBOOKS = {"orchard.ipynb": ORCHARD}

if __name__ == "__main__":
    for name, cells in NOTEBOOKS.items():
        (HERE / name).write_text(json.dumps(notebook(cells), indent=1) + "\n")
