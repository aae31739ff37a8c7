"""Tables that stay on disk (cargo feature `on_disk`) against statsmodels.

Reference: statsmodels OLS and GLM-family Logit fitted to the same values,
with the design coded as Waypath's model table says (one intercept per level
of the first category, slopes centred at their means over the kept rows).
With 40,000 rows the default priors weigh next to nothing, so the posterior
means of a fit whose table stayed on disk must sit on the estimates: within
a tenth of a standard error (the Laplace draws' Monte Carlo error is under
2% of one). The cells run through the probe `probe_cells`, so the statement
path is checked too: `stay on disk`, `model`, `fit … with laplace`, the
route the fit names, and the refusal of NUTS for a bernoulli outcome and of
a statement that needs the rows.

Data: invented orchard plots, generated with a fixed seed and written by
pyarrow into a temporary folder.
"""
import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
import statsmodels.api as sm

from conftest import bin_dir, run_probe

ROWS = 40_000
REGIONS = ["north", "middle", "south"]

pytestmark = pytest.mark.skipif(
    not (bin_dir() / "probe_cells").exists(),
    reason="probe_cells is built with: cargo build --release -p waypath-probe --features on_disk",
)


def orchard(seed=19):
    rng = np.random.default_rng(seed)
    region = rng.integers(0, 3, ROWS)
    ground = rng.normal(4.0, 2.0, ROWS)
    trees = rng.integers(20, 26, ROWS)
    harvest = np.array([30.0, 27.0, 33.0])[region] - 0.8 * ground + 0.3 * trees + rng.normal(0.0, 3.0, ROWS)
    eta = -1.0 + np.array([0.0, 0.4, -0.5])[region] + 0.3 * (ground - 4.0) - 0.05 * (trees - 22.5)
    blight = (rng.uniform(size=ROWS) < 1.0 / (1.0 + np.exp(-eta))).astype(np.int64)
    return {"region": region, "ground": ground, "trees": trees, "harvest": harvest, "blight": blight}


@pytest.fixture(scope="module")
def plots(tmp_path_factory):
    data = orchard()
    folder = tmp_path_factory.mktemp("on_disk")
    table = pa.table({
        "region": pa.array([REGIONS[k] for k in data["region"]], type=pa.string()),
        "ground": pa.array(data["ground"], type=pa.float64()),
        "trees": pa.array(data["trees"], type=pa.int64()),
        "harvest": pa.array(data["harvest"], type=pa.float64()),
        "blight": pa.array(data["blight"], type=pa.int64()),
    })
    pq.write_table(table, folder / "plots.parquet", row_group_size=10_000)
    return folder, data


TABLE = """table plots from "plots.parquet":
    region: category(north, middle, south)
    keep where trees >= 21
    stay on disk"""


def design(data, kept):
    """Region indicators, then ground and trees centred over the kept rows."""
    region = data["region"][kept]
    columns = [(region == k).astype(float) for k in range(3)]
    for name in ("ground", "trees"):
        x = data[name][kept].astype(float)
        columns.append(x - x.mean())
    return np.column_stack(columns)


def estimates(answer):
    fit = answer["cells"][2]
    assert fit["error"] is None, fit["error"]
    return {e["parameter"]: e["mean"] for e in fit["displays"][0]["estimates"]}, fit


NAMES = ["region[north]", "region[middle]", "region[south]", "ground slope", "trees slope"]


def test_normal_fit_on_disk_matches_ols(plots):
    folder, data = plots
    answer = run_probe("cells", {"dir": str(folder), "cells": [
        TABLE,
        "model m:\n    harvest from region, ground, trees using plots",
        "fit m with laplace draws 4000 seed 3",
    ]})
    means, fit = estimates(answer)
    kept = data["trees"] >= 21
    ols = sm.OLS(data["harvest"][kept], design(data, kept)).fit()
    for name, value, se in zip(NAMES, ols.params, ols.bse):
        assert abs(means[name] - value) < 0.1 * se, (name, means[name], value, se)
    assert fit["displays"][0]["path"] == "on disk"
    assert "sufficient statistics" in fit["displays"][0]["route"]
    assert answer["cells"][0]["displays"][0]["rows"] == int(kept.sum())


def test_logistic_fit_on_disk_matches_logit(plots):
    folder, data = plots
    answer = run_probe("cells", {"dir": str(folder), "cells": [
        TABLE,
        "model b:\n    blight from region, ground, trees using plots\n    family bernoulli",
        "fit b with laplace draws 4000 seed 3",
        "fit b",
        "contrast b: ground",
    ]})
    means, fit = estimates(answer)
    kept = data["trees"] >= 21
    logit = sm.Logit(data["blight"][kept], design(data, kept)).fit(disp=0)
    for name, value, se in zip(NAMES, logit.params, logit.bse):
        assert abs(means[name] - value) < 0.1 * se, (name, means[name], value, se)
    assert "Newton" in fit["displays"][0]["route"]
    nuts = answer["cells"][3]["error"]
    assert "NUTS is not run on this table on disk" in nuts and "Nothing was sampled" in nuts
    assert "stays on disk" in answer["cells"][4]["error"]
