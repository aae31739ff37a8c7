"""`robustness of M: X` for a yes/no outcome, checked from outside.

* The risk ratio per posterior draw is recomputed here from the exported
  draws with numpy: the model's definition (logit link, `centre off`, so
  the linear predictor is the intercept plus slope times value) evaluated in
  every row with the exposure set, averaged over rows, divided; then the
  mean and the central 90% interval (numpy's linear quantiles).
* The E-values are recomputed by plain arithmetic from the formula of
  VanderWeele & Ding 2017 (Annals of Internal Medicine): RR + sqrt(RR(RR-1))
  for RR >= 1, the same on 1/RR below 1, and 1 for an interval holding 1.
* The formula itself is checked on the paper's worked example (recalled):
  RR 3.9 with a lower 95% limit of 1.8 gives E-values of about 7.2 and 3.0.
"""
import csv
import json
import math
import subprocess

import numpy as np

from conftest import bin_dir


def e_value(rr):
    """VanderWeele & Ding 2017, written from the paper's formula."""
    if rr < 1:
        rr = 1 / rr
    return rr + math.sqrt(rr * (rr - 1))


def test_the_reference_formula_gives_the_papers_worked_numbers():
    # VanderWeele & Ding 2017, worked example (recalled): 3.9 -> 7.2, 1.8 -> 3.0
    # (3.9 + sqrt(3.9 * 2.9) = 7.26, so the printed 7.2 is within rounding).
    assert abs(e_value(3.9) - 7.2) < 0.1
    assert abs(e_value(1.8) - 3.0) < 1e-12


def results(notebook):
    nb = json.loads(notebook.read_text())
    out = []
    for cell in nb["cells"]:
        for o in cell.get("outputs", []):
            assert o["output_type"] != "error", o
            data = o.get("data", {})
            if "application/vnd.waypath.result+json" in data:
                out.append(data["application/vnd.waypath.result+json"])
    return out


def test_risk_ratio_per_draw_and_e_values_against_a_direct_computation(tmp_path):
    rng = np.random.default_rng(20261204)
    n = 1500
    moss = rng.normal(0, 1, n)
    shaded = rng.random(n) < 1 / (1 + np.exp(-0.8 * moss))
    mulched = rng.random(n) < 0.5
    logit = -0.9 + 0.7 * shaded - 0.6 * mulched + 0.5 * moss
    blight = rng.random(n) < 1 / (1 + np.exp(-logit))
    with open(tmp_path / "beds.csv", "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(["moss", "shaded", "mulched", "blight"])
        for row in zip(moss, shaded, mulched, blight):
            w.writerow([f"{row[0]:.6f}", int(row[1]), int(row[2]), int(row[3])])
    (tmp_path / "beds.waypath").write_text(
        """=== code
table beds from "beds.csv":
    moss: real
    shaded: binary
    mulched: binary
    blight: binary

=== code
model m:
    blight from shaded, mulched, moss using beds
    family bernoulli
    centre off
fit m with laplace seed 11
export m draws to "draws.csv"

=== code
robustness of m: shaded

=== code
robustness of m: mulched
"""
    )
    done = subprocess.run(
        [str(bin_dir() / "waypath"), "run", str(tmp_path / "beds.waypath")], capture_output=True, text=True, timeout=600
    )
    assert done.returncode == 0, done.stderr
    found = [r for r in results(tmp_path / "beds.executed.ipynb") if r.get("scale") == "risk ratio"]
    assert [r["exposure"] for r in found] == ["shaded", "mulched"]

    with open(tmp_path / "draws.csv") as f:
        rows = list(csv.DictReader(f))
    draw = {k: np.array([float(r[k]) for r in rows]) for k in ("intercept", "shaded slope", "mulched slope", "moss slope")}
    values = {"shaded": shaded.astype(float), "mulched": mulched.astype(float), "moss": moss}

    for r in found:
        x = r["exposure"]
        assert (r["to"], r["from"]) == ("1", "0")

        def risk(setting):
            eta = draw["intercept"][:, None] + sum(
                draw[f"{c} slope"][:, None] * (np.full(n, setting) if c == x else values[c])[None, :]
                for c in ("shaded", "mulched", "moss")
            )
            return (1 / (1 + np.exp(-eta))).mean(axis=1)

        ratios = risk(1.0) / risk(0.0)
        lo, hi = np.quantile(ratios, [0.05, 0.95])
        assert abs(r["mean"] - ratios.mean()) < 1e-6 * ratios.mean()
        assert abs(r["lower"] - lo) < 1e-6 * lo and abs(r["upper"] - hi) < 1e-6 * hi
        assert abs(r["risk_to"] - risk(1.0).mean()) < 1e-6 and abs(r["risk_from"] - risk(0.0).mean()) < 1e-6
        assert abs(r["e_value_of_mean"] - e_value(ratios.mean())) < 1e-6
        nearer = lo if ratios.mean() >= 1 else hi
        expected = 1.0 if lo <= 1 <= hi else e_value(nearer)
        assert abs(r["e_value_of_interval"] - expected) < 1e-6
        # The grid's first point is no hidden cause: the fitted mean.
        assert abs(r["adjusted_mean"][0][0] - r["mean"]) < 1e-12

    # Shading raises the risk, mulch lowers it (by construction): the
    # protective one takes the E-value of 1/RR and the interval's upper end.
    shade, mulch = found
    assert shade["lower"] > 1 and mulch["upper"] < 1
    assert abs(mulch["e_value_of_interval"] - e_value(1 / mulch["upper"])) < 1e-6
