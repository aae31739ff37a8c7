"""Write the demo notebooks (.ipynb, nbformat 4.5) from the cell lists below,
and the plain-text form (.waypath) of the demos listed in TEXT_VERSIONS.

Editing a demo: change its cells here, run `python3 demo-notebooks/make_notebooks.py`,
and commit this file, the notebook and its text form. Standard library only.
"""
import json
from pathlib import Path

HERE = Path(__file__).resolve().parent


def md(text):
    return ("markdown", text.strip("\n"))


def code(text):
    return ("code", text.strip("\n"))


def text_form(cells):
    """The plain-text analysis: each cell opens with a marker line
    (`=== code` or `=== notes`), one blank line between cells."""
    kinds = {"code": "code", "markdown": "notes"}
    blocks = []
    for kind, text in cells:
        assert not any(line.startswith("===") for line in text.splitlines()), "a cell line would read as a marker"
        blocks.append(f"=== {kinds[kind]}\n{text}\n")
    return "\n".join(blocks)


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
each rootstock. Priors we do not declare are Waypath's defaults: the predictors
share one budget on the outcome's scale, and intercepts are priced at the
average row. The fit lists every prior and who set it.

Each fit reads in two parts. First the estimates: every parameter's unit (the
table declares yield in kg and girth in cm, so an intercept is in kg and a
girth slope in kg per cm), its posterior mean with its 90% interval in one
cell, the sd of its draws, and the share of draws above zero. Then, apart, one sentence on the sampler's health: the
parameter with the largest R-hat and those with the fewest effective draws in
the bulk and in the tails, divergent trajectories, and how deep the
trajectories went. Warnings follow only when a check fails.
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
plot m_direct mixing
"""),
    md("""
The mixing figure shows each parameter's chains across the page (each chain
with its own colour and dash pattern) and, under them, one row of tiles per
chain over bins of the ranks pooled across chains. Chains that explore the
same distribution share every bin evenly and leave the tiles pale; a chain
stuck high or low darkens its row (vermillion: more draws than even, blue:
fewer).
"""),
    md("""
## Contrasts, computed from the draws

The question is a difference between rootstocks. Waypath computes it draw by
draw (standard minus dwarf within each posterior draw) and summarises last.
On the mean, it is the effect on the expected yield; on predicted outcomes it
also carries tree-to-tree variation — what one new tree might do. Intervals
hold 90% of the draws unless a statement asks for another mass
(`intervals 50%` here; the statement `intervals 80%` would set it for every
later cell).
"""),
    code("""
contrast m_total: rootstock standard vs dwarf
contrast m_total: rootstock standard vs dwarf on outcomes
contrast m_total: rootstock standard vs dwarf intervals 50%
"""),
    md("""
The direct effect depends on girth, because each rootstock has its own
slope. Along girth the contrast is a band:
"""),
    code("""
contrast m_direct: rootstock standard vs dwarf along girth from 18 to 38
plot m_direct lines
"""),
    md("""
## Which model predicts yield better — and what that does not tell us

Both models describe the yield of the same 240 trees, so they can be scored
by how well each predicts a tree it was not fitted to: every row is left out
in turn (by Pareto-smoothed importance sampling of the draws, with exact
refits for the rows where that is unreliable), and the scores are the sums
of the left-out log densities.
"""),
    code("""
score predictions of m_total, m_direct
"""),
    md("""
`m_direct` predicts better, as it should: girth tells us a lot about a tree's
yield. That does not make it the right model for the **total** effect of
rootstock. Girth lies on the path `rootstock -> girth -> yield`, so holding
it fixed removes the part of the effect that runs through trunk growth. Which
model answers a causal question is decided by the graph (the adjustment set
`ask` named above), not by which one predicts best.
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
    md("""
## Trees that share a block

The trees stand in eight blocks of unequal size, and trees of one block
share frost, shelter and watering that the graph does not name. The
total effect needs no adjustment, so the blocks do not change what is
estimated; they change how sure we can be, and they let us ask about one
block. First the estimate without the blocks, then with `pooling block`:
each block departs from the orchard by its own amount, the departures drawn
from a spread the data teach (partial pooling).
"""),
    code("""
ask total effect of rootstock on yield in orchard using trees
"""),
    code("""
ask total effect of rootstock on yield in orchard using trees pooling block
"""),
    md("""
How far did pooling move each block? The shrinkage figure sets each
block's own trees' mean yield (an open circle, larger for more trees) beside
the model's estimate for the same trees (a dot with its interval), over the
orchard's line for a new block. Small blocks (gate, creek) move furthest
towards the orchard; large ones keep close to their own trees.
"""),
    code("""
plot total_rootstock_on_yield shrinkage
"""),
    md("""
Three questions about the same contrast: for trees in an existing block
(`at block hollow`), averaged over the blocks we observed (`over rows`), and,
by default, for a block not yet planted, drawn from the population. In this
model a block shifts yield by the same kilograms on both rootstocks, so the
three answers agree here; on a logit or log link, or when a block changes the
rootstock's effect, they would differ.
"""),
    code("""
contrast total_rootstock_on_yield: rootstock standard vs dwarf at block hollow
contrast total_rootstock_on_yield: rootstock standard vs dwarf over rows
contrast total_rootstock_on_yield: rootstock standard vs dwarf
"""),
]

STREAM = [
    md("""
# Curves: stream temperature through the year

An invented upland stream gauge records water temperature on 180 days of one
year. Temperature rises and falls with the season, with a dip during spring
snowmelt. There is no causal question here yet, only a curve to describe
well — the first step before temperature can be used as a cause of anything
(insect emergence, say). Data: `data/make_data.py`, invented.
"""),
    code("""
table stream from "data/stream.csv":
    day: real in day of year
    water_temp: real in °C
"""),
    md("""
## Powers of the day

The first four powers of the standardised day, `powers(day, 4)`, make a
smooth curve with few parameters (`day power 1` to `day power 4`), but every
coefficient acts on the whole year at once.
"""),
    code("""
model day_powers:
    water_temp from powers(day, 4) using stream

fit day_powers
plot day_powers lines
"""),
    md("""
Look at the two ends of the year: the powers must bend the whole curve
to follow the melt dip, and near day 1 and day 365 the band widens and the
curve turns where the data do not. A curve made of powers has its edges
driven by the middle of the data.

## A B-spline

A cubic B-spline with 10 basis functions is local: each basis function
covers a stretch of the year, so the melt dip is fitted where it happens
without disturbing the ends.
"""),
    code("""
model spline10:
    water_temp from spline(day, 10) using stream
    prior weights: normal(0, 8)

fit spline10
plot spline10 spline
"""),
    md("""
The spline figure draws the fitted curve with its 90% band over the data,
and under it each weight's 90% interval at the day where its basis function
peaks: a weight governs the curve near its own stretch of the year, so the
melt dip shows up as the weights around it pulling down.
"""),
    code("""
plot spline10 lines
"""),
]

CLINIC = [
    md("""
# A yes/no outcome: a new wound dressing at an invented clinic

> **Caution.** This is an illustration with invented data. It is not medical
> advice and must not guide the care of any patient. Causal conclusions here
> rest entirely on the assumptions drawn in the graph; defer to professional
> practice, clinical evidence and local rules.

1,200 invented outpatients received either the **usual** or a **new** dressing;
the outcome is whether the wound healed within two weeks (1 = yes). Older
patients were more often given the new dressing and also heal less often,
so age group confounds a naive comparison.
"""),
    code("""
table visits from "data/clinic.csv":
    age_group: category(young, middle, older)
    dressing: category(usual, new)
    recovered: binary
"""),
    code("""
graph clinic:
    age_group -> dressing -> recovered
    age_group -> recovered

ask total effect of dressing on recovered in clinic
"""),
    md("""
The graph says: stratify by age group. The model has one intercept per age
group (on the log-odds scale) and an offset for the new dressing.
"""),
    code("""
model healing:
    recovered from age_group, dressing using visits
    family bernoulli

fit healing
"""),
    md("""
The model's coefficients are log-odds. The question is about the chance of
healing, so the contrast is computed on the probability scale for each draw,
averaged over the clinic's own mix of age groups (`over rows`).
"""),
    code("""
contrast healing: dressing new vs usual over rows
"""),
    md("""
If age group were left out (it is a common cause), the comparison would mix
the dressing's effect with the age difference between the groups. The same
answer in one statement, with the adjustment chosen from the graph:
"""),
    code("""
ask total effect of dressing on recovered in clinic using visits with laplace
"""),
    md("""
Age group is an ordered category: young, then middle, then older. The model
above gave each group its own intercept, free to go up and down. If the
chance of healing can only change in one direction with age, `steps(age_group)`
says so: one whole effect from the youngest group to the oldest, shared out
over the two steps between neighbouring groups, both steps of its sign. The
dressing's contrast is asked again under this model; the staircase figure
shows each age group's effect against the young group, draw by draw.
"""),
    code("""
model healing_by_age:
    recovered from steps(age_group), dressing using visits
    family bernoulli

fit healing_by_age
contrast healing_by_age: dressing new vs usual over rows
plot healing_by_age steps
"""),
    md("""
> Again: invented data, an illustration of the workflow only. Not medical
> advice; any real decision rests with clinicians, evidence reviews and local
> rules, and any causal reading rests on the graph being right.
"""),
]

WHOLE = [
    md("""
# One model for the whole orchard graph

Notebook 1 estimated the effect of rootstock on yield from one regression per
question. Here we model **every node** of the graph from its parents (a joint
model) and simulate the intervention "graft every tree on standard rather
than dwarf" through girth to yield. If the graph and models are right, both
routes must agree — a check on the whole analysis. The last section does the
same for a graph with a category node in the middle. Invented data.
"""),
    code("""
table trees from "data/orchard.csv":
    rootstock: category(dwarf, standard)
    girth: real in cm
    yield: real in kg

graph orchard:
    rootstock -> girth -> yield
    rootstock -> yield
"""),
    code("""
joint whole = orchard using trees
fit whole with laplace
"""),
    code("""
intervene whole: set rootstock standard vs dwarf, watch girth, yield
"""),
    md("""
## Both routes side by side
"""),
    code("""
compare routes for total effect of rootstock on yield in orchard using trees setting standard vs dwarf with laplace
"""),
    md("""
## What if soil depth matters and was never measured?

A hidden common cause of girth and yield changes what can be learnt. The
total effect is still identifiable (no backdoor path into rootstock), but
the direct effect is not: holding girth fixed opens
`rootstock -> girth <- soil -> yield`. Waypath refuses to fit it.
"""),
    code("""
graph orchard_soil:
    rootstock -> girth -> yield
    rootstock -> yield
    hidden soil -> girth, yield

ask direct effect of rootstock on yield in orchard_soil using trees
paths from rootstock to yield in orchard_soil given girth
"""),
    md("""
The joint model can still be written, but it omits the hidden cause, and
Waypath says so:
"""),
    code("""
joint whole_soil = orchard_soil using trees
"""),
    md("""
## A category in the middle: growth form in regenerating woodland

A second invented scenario. In 600 regeneration plots of 1 m², the tallest
recruit after two seasons was recorded: its **growth form** (herb, shrub or
tree) and its **height** in cm. The soil (loam, sand or peat) and the canopy
shade over the plot (the fraction of sky covered, 0 to 1) decide which form
wins the plot; form and shade then decide height. Growth form is a category
with parents, so its node model predicts the share of each form.
"""),
    code("""
table plots from "data/saplings.csv":
    soil: category(loam, sand, peat)
    shade: real in fraction of canopy cover
    form: category(herb, shrub, tree)
    height: real in cm

graph regrowth:
    soil -> form -> height
    shade -> form
    shade -> height
"""),
    code("""
joint woodland = regrowth using plots
"""),
    md("""
The `form` row reads `family levels`: a softmax regression with herb, the
first level, as the reference. It has one set of coefficients for shrub
against herb and one for tree against herb, each with an intercept per soil
and a slope of shade within each soil. Height gets a mean per growth form
and a slope of shade within each form. Intercepts and means are at the
plots' average shade (0.50). A Laplace approximation is enough for a quick
look; use NUTS (`fit woodland`) before reporting.
"""),
    code("""
fit woodland with laplace
"""),
    md("""
Coefficients such as `form[tree vs herb]: shade slope[loam]` are log-odds of a
tree rather than a herb per unit of shade on loam: hard to read on their
own. The question a forester asks is about plots: what if the canopy were
thinned from 0.6 to 0.2 cover everywhere? The joint model simulates it,
plot by plot, keeping each plot's soil as observed.
"""),
    code("""
intervene woodland: set shade 0.2 vs 0.6, watch form, height
"""),
    md("""
The three `share of form` rows are changes in the share of plots won by
each form; they sum to zero. Under the thinner canopy herbs lose about a
fifth of the plots and shrubs and trees gain them. Height rises for two
reasons that the joint model adds up: within a form, less shade means
taller recruits (about 15 cm per unit of cover, so about 6 cm for this
change), and more plots are won by the taller woody forms.

The data were made with a thinner canopy shifting the shares by −0.19
(herb), +0.05 (shrub) and +0.14 (tree), and height by +15 cm, averaged over
these plots' soils. Height and the herb and tree shares come back within
their intervals; the shrub gain comes out larger, because these 600 plots
happen to hold more shrubs in light shade than the mechanism's average
(half of the plots under 0.4 cover, where the mechanism gives 0.42). A 90%
interval is expected to miss now and then.

These are causal readings only if the graph is right: nothing unrecorded
(browsing deer, say, or seed rain from nearby trees) may affect both shade
and growth form, and a thinning that changed the soil as well would be a
different intervention. The settings 0.2 and 0.6 lie inside the observed
range of shade (0.05 to 0.95); outside it the answer would rest on the
model's form alone.
"""),
]

CHECKING = [
    md("""
# Checking the pipeline on a known truth

Before trusting an estimate from real data, make data whose truth you know,
run the same analysis, and see whether the truth comes back. Here the
mechanisms are written down, one per node of the graph, with effects chosen
by us. All invented.
"""),
    code("""
graph saplings:
    shade -> height -> survival
    shade -> survival
"""),
    code("""
simulate nursery from saplings rows 400 seed 3:
    shade = category(open 0.5, shaded 0.5)
    height = normal(40 - 8 * [shade = shaded], 5)
    survival = normal(20 + 0.5 * height - 3 * [shade = shaded], 4)
"""),
    md("""
The true direct effect of shade on survival is −3; its total effect adds the
route through height: −3 + 0.5 × (−8) = −7 (path tracing).
"""),
    code("""
model direct_fit:
    survival from shade, height using nursery

recover direct_fit on nursery with laplace
"""),
    code("""
model total_fit:
    survival from shade using nursery

recover total_fit on nursery with laplace
"""),
    md("""
## A simulation written by hand

`simulate` covers mechanisms that fit on one line. For anything else, a
`%%rust` cell can build the data step by step — here a designed experiment
where shade is assigned alternately rather than at random — and publish it
to the session, where declarative cells use it like any table.
"""),
    code("""
%%rust
{
    use waypath::rand::{rngs::StdRng, SeedableRng};
    use waypath::rand_distr::{Distribution, Normal};
    use waypath::table::{Column, ColumnData, Table};

    let mut rng = StdRng::seed_from_u64(21);
    let noise = |sd: f64| Normal::new(0.0, sd).expect("a positive sd");
    // step 1: shade alternates open, shaded, open, … (a designed experiment)
    let shade: Vec<u32> = (0..300).map(|i| (i % 2) as u32).collect();
    // step 2: height responds to shade
    let height: Vec<f64> = shade.iter().map(|&s| 40.0 - 8.0 * s as f64 + noise(5.0).sample(&mut rng)).collect();
    // step 3: survival score responds to height and to shade directly
    let survival: Vec<f64> = shade
        .iter()
        .zip(&height)
        .map(|(&s, &h)| 20.0 + 0.5 * h - 3.0 * s as f64 + noise(4.0).sample(&mut rng))
        .collect();
    let levels = vec!["open".to_string(), "shaded".to_string()];
    let table = Table::from_columns(
        "by_hand",
        vec![
            Column::new("shade", ColumnData::Category { codes: shade, levels }),
            Column::new("height", ColumnData::Real(height)),
            Column::new("survival", ColumnData::Real(survival)),
        ],
    )
    .expect("equal columns");
    wp_publish("by_hand", &table);
    println!("published by_hand: {} rows", table.nrows());
}
"""),
    code("""
model hand_fit:
    survival from shade, height using by_hand

fit hand_fit with laplace
"""),
    md("""
## Calibration

Simulation-based calibration draws parameters from the priors, simulates
data, refits, and asks where the true value falls among the posterior
draws. If the fitting is right, the ranks are uniform.
"""),
    code("""
calibrate total_fit reps 100 seed 8 with laplace
"""),
    md("""
## Prior and posterior predictive checks

Each check draws the outcome's distribution as the share of rows at or below
each value: the bands hold the central 90% and 50% of that curve over the
simulated outcome sets, and the dark line is the observed rows. Before the
fit the band should be wide but plausible; after it, the observed line
should stay inside.
"""),
    code("""
prior check total_fit
fit total_fit with laplace
check total_fit
"""),
]

HIDDEN = [
    md("""
# When a hidden cause blocks adjustment: buffer strips and stream insects

An invented catchment (the data are made up for this demo). Along 400 stream
reaches, some banks carry a **planted buffer** strip of trees and some do
not. Does planting a buffer raise the number of mayfly nymphs per m² of
riffle?

The trouble: how much of the catchment above a reach is farmed (**land
use**) was never measured. Farmed catchments leave fewer buffers *and* send
down sediment that smothers nymphs, so a plain comparison of reaches with and
without a buffer mixes the two. Water temperature, which a buffer lowers by
shading and which the nymphs respond to, *was* measured at every reach.
"""),
    code("""
table reaches from "data/reaches.csv":
    buffer: category(none, planted)
    temp: real in °C
    gradient: real in %
    mayflies: real in nymphs per m²
    stoneflies: binary
"""),
    md("""
## The graph, with the hidden cause written in

`hidden land_use -> …` declares a node that has no column. Stream gradient
helps both insects (faster, cleaner riffles) but has nothing to do with who
planted a buffer.
"""),
    code("""
graph catchment:
    hidden land_use -> buffer, mayflies, stoneflies
    buffer -> temp -> mayflies
    temp -> stoneflies
    gradient -> mayflies, stoneflies

ask total effect of buffer on mayflies in catchment
"""),
    md("""
No set of measured columns closes the path through land use, so there is
**no adjustment set**. The graph still identifies the effect: temperature
carries all of the buffer's effect, nothing hidden drives temperature
directly, and the buffer itself blocks the back way from temperature to the
insects. That is the **front door**, and the answer prints the identifying
formula in terms of measured columns only.

Estimating it fits two regressions (temperature from buffer; mayflies from
temperature and buffer) and evaluates the formula per posterior draw:
"""),
    code("""
ask total effect of buffer on mayflies in catchment using reaches
"""),
    md("""
## How sure is the front door's own assumption?

The front door needs **no hidden common cause of temperature and the
insects** other than through the buffer. Fit the outcome with both measured
drivers and ask how strong such a hidden cause would have to be to explain
the temperature effect away. Gradient, a measured driver, is placed on the
same axes as a yardstick.
"""),
    code("""
model nymphs:
    mayflies from temp, gradient, buffer using reaches

fit nymphs
robustness of nymphs: temp
"""),
    md("""
The grid moves the fitted slope by a fixed amount at each pair of
strengths. A scientist often has a rough idea instead: say cold springs,
never mapped, cool some reaches by about half a degree and also carry
cleaner water worth a few nymphs per m² (per standard deviation of
"springiness"). `refit with hidden` states that idea as priors on the two
strengths and refits the model beside a simulated hidden value per reach,
so the uncertainty about the hidden cause widens the slope's interval. The
hidden values are integrated out, so the refit samples only the model's own
parameters and a few more; still read its warnings before the numbers, and
refit with more `draws` (`… with nuts draws 4000`) when it names any. The
refit also models temperature from gradient and buffer; its priors there are
Waypath's, set on the spread of the temperatures observed, and the result
lists them in °C. Writing `exposure priors intercepts normal(12, 5), slopes
normal(0, 2), spread half_normal(3)` after the strengths states them in °C
instead, without a look at the data.
"""),
    code("""
robustness of nymphs: temp refit with hidden to temp normal(-0.5, 0.25) and to mayflies normal(3, 1.5)
"""),
    md("""
## A yes/no outcome: were stonefly nymphs found?

Suppose an analyst ignored the graph and compared reaches with and without a
buffer, allowing for gradient only. On the risk-ratio scale the **E-value**
says how strongly a hidden cause would have to be tied to both the buffer
and finding stoneflies (as a risk ratio with each) to move that comparison
to no effect. Here the graph says such a cause exists (land use), so the
E-value is a measure of how fragile the plain comparison is, not a licence
to trust it.
"""),
    code("""
model stonefly_plain:
    stoneflies from buffer, gradient using reaches
    family bernoulli

fit stonefly_plain
robustness of stonefly_plain: buffer
"""),
    md("""
The front door answers the same question without assuming land use away:
"""),
    code("""
ask total effect of buffer on stoneflies in catchment using reaches
"""),
    md("""
> **Caution.** Invented data; an illustration of the workflow. Every causal
> reading above rests on the graph: that land use reaches the insects only
> as drawn, that nothing hidden drives water temperature, and that the
> buffer acts on the insects only through temperature. A robustness figure,
> an E-value or a refit beside a hidden cause measures how far a conclusion
> bends under one assumed hidden cause (in the refit, the strengths are the
> priors we chose); it does not show that no such cause exists.
"""),
]

NOTEBOOKS = {
    "orchard.ipynb": ORCHARD,
    "whole-graph.ipynb": WHOLE,
    "stream.ipynb": STREAM,
    "checking.ipynb": CHECKING,
    "clinic.ipynb": CLINIC,
    "hidden-causes.ipynb": HIDDEN,
}

# Demos that also have a text form (the README's first tour runs orchard.waypath).
TEXT_VERSIONS = {"orchard.waypath": ORCHARD}

if __name__ == "__main__":
    for name, cells in NOTEBOOKS.items():
        (HERE / name).write_text(json.dumps(notebook(cells), indent=1) + "\n")
    for name, cells in TEXT_VERSIONS.items():
        (HERE / name).write_text(text_form(cells), encoding="utf-8")
