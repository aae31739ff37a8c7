"""Generate the invented demo datasets (seeded, standard library only).

Every scenario here is made up for the Waypath demos; no real measurements.
Run from anywhere:  python3 demo-notebooks/data/make_data.py
"""
import csv
import math
import random
from pathlib import Path

HERE = Path(__file__).resolve().parent


def write(name, header, rows):
    with open(HERE / name, "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(header)
        w.writerows(rows)


def orchard(seed=20261201, n=240):
    """Apple trees on two rootstocks. Rootstock changes trunk girth and,
    beyond girth, fruit yield. Unrecorded soil depth feeds girth and yield
    (so the direct effect is confounded unless soil is measured).

    The trees stand in eight blocks of unequal size (the small ones are
    corners of the orchard). Each block shifts yield by its own amount —
    frost pockets, shelter, irrigation runs — drawn once from
    normal(0, 2.5 kg), so a pooled model of the blocks has a spread to learn.
    Blocks come from their own stream, so the other columns are as before."""
    rng = random.Random(seed)
    block_rng = random.Random(seed + 1)
    blocks = ["north", "south", "east", "west", "hollow", "ridge", "creek", "gate"]
    block_weights = [0.22, 0.2, 0.16, 0.14, 0.1, 0.08, 0.06, 0.04]
    block_shift = {b: block_rng.gauss(0.0, 2.5) for b in blocks}
    rows = []
    for i in range(n):
        rootstock = "standard" if rng.random() < 0.5 else "dwarf"
        soil = rng.gauss(0.0, 1.0)  # not written out: the hidden common cause
        std = 1.0 if rootstock == "standard" else 0.0
        girth = 24.0 + 7.0 * std + 1.5 * soil + rng.gauss(0.0, 3.0)
        block = block_rng.choices(blocks, weights=block_weights)[0]
        yield_kg = 4.0 + 0.9 * girth + 6.0 * std + 2.0 * soil + block_shift[block] + rng.gauss(0.0, 4.0)
        rows.append([f"T{i + 1:03d}", block, rootstock, round(girth, 1), round(yield_kg, 1)])
    write("orchard.csv", ["tree", "block", "rootstock", "girth", "yield"], rows)


def stream(seed=77, n=180):
    """Daily water temperature at an invented upland stream gauge."""
    rng = random.Random(seed)
    rows = []
    for _ in range(n):
        day = rng.randint(1, 365)
        seasonal = 9.5 - 6.5 * math.cos(2 * math.pi * (day - 20) / 365)
        spring_melt = -2.0 * math.exp(-((day - 110) / 18) ** 2)
        temp = seasonal + spring_melt + rng.gauss(0.0, 0.9)
        rows.append([day, round(temp, 2)])
    rows.sort()
    write("stream.csv", ["day", "water_temp"], rows)


def clinic(seed=11, n=1200):
    """An invented outpatient clinic: age group affects who gets the new
    dressing and how likely recovery within two weeks is."""
    rng = random.Random(seed)
    rows = []
    for _ in range(n):
        age = rng.choices(["young", "middle", "older"], weights=[0.3, 0.4, 0.3])[0]
        age_shift = {"young": 0.6, "middle": 0.0, "older": -0.7}[age]
        p_treat = {"young": 0.35, "middle": 0.5, "older": 0.65}[age]
        treated = "new" if rng.random() < p_treat else "usual"
        logit = -0.1 + age_shift + (0.55 if treated == "new" else 0.0)
        recovered = 1 if rng.random() < 1 / (1 + math.exp(-logit)) else 0
        rows.append([age, treated, recovered])
    write("clinic.csv", ["age_group", "dressing", "recovered"], rows)


# Growth-form log-odds against herb, per soil: intercept, sand, peat, shade.
SAPLING_SHRUB = (0.5, 0.6, -0.3, -1.5)
SAPLING_TREE = (0.3, -0.8, 0.9, -3.0)
SAPLING_HEIGHT = {"herb": 30.0, "shrub": 55.0, "tree": 90.0}  # cm at shade 0
SAPLING_SHADE_SLOPE = -15.0  # cm per unit of canopy cover, within a form


def sapling_form_shares(soil, shade):
    """Chance of each growth form (herb, shrub, tree) in a plot: softmax
    with herb as the reference."""
    def eta(b):
        return b[0] + b[1] * (soil == "sand") + b[2] * (soil == "peat") + b[3] * shade

    e = [1.0, math.exp(eta(SAPLING_SHRUB)), math.exp(eta(SAPLING_TREE))]
    total = sum(e)
    return [x / total for x in e]


def saplings(seed=5150, n=600):
    """Regeneration plots in an invented woodland: in each 1 m² plot the
    tallest recruit after two seasons is recorded. Soil and canopy shade
    decide which growth form wins the plot (herb, shrub or tree); form and
    shade decide its height."""
    rng = random.Random(seed)
    rows = []
    for i in range(n):
        soil = rng.choices(["loam", "sand", "peat"], weights=[0.4, 0.3, 0.3])[0]
        shade = rng.uniform(0.05, 0.95)
        form = rng.choices(["herb", "shrub", "tree"], weights=sapling_form_shares(soil, shade))[0]
        height = SAPLING_HEIGHT[form] + SAPLING_SHADE_SLOPE * shade + rng.gauss(0.0, 5.0)
        rows.append([f"P{i + 1:03d}", soil, round(shade, 2), form, round(height, 1)])
    write("saplings.csv", ["plot", "soil", "shade", "form", "height"], rows)


def reaches(seed=1717, n=400):
    """Stream reaches in an invented catchment. Upstream land use (how much
    of the catchment above a reach is farmed) is never measured: farmed
    catchments leave fewer planted buffer strips along the banks and also
    send down fine sediment that smothers mayfly and stonefly nymphs. A
    planted buffer shades the water; cooler water suits the nymphs. Stream
    gradient (measured) helps both insects through faster, cleaner riffles."""
    rng = random.Random(seed)
    rows = []
    for i in range(n):
        land_use = rng.gauss(0.0, 1.0)  # not written out: the hidden common cause
        planted = rng.random() < 1 / (1 + math.exp(0.9 * land_use))
        temp = 16.0 - 2.5 * planted + rng.gauss(0.0, 1.2)
        gradient = rng.uniform(0.5, 6.0)
        mayflies = 120.0 - 6.0 * temp + 4.0 * gradient - 10.0 * land_use + rng.gauss(0.0, 8.0)
        logit = 0.8 - 0.45 * (temp - 14.0) + 0.25 * (gradient - 3.0) - 0.8 * land_use
        stoneflies = 1 if rng.random() < 1 / (1 + math.exp(-logit)) else 0
        rows.append([f"R{i + 1:03d}", "planted" if planted else "none", round(temp, 1), round(gradient, 2),
                     round(mayflies, 1), stoneflies])
    write("reaches.csv", ["reach", "buffer", "temp", "gradient", "mayflies", "stoneflies"], rows)


if __name__ == "__main__":
    orchard()
    stream()
    clinic()
    saplings()
    reaches()
