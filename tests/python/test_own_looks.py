"""Keep it so (issue 14, items 6 and 10-15): the demo notebooks' executed
figures keep Waypath's own looks.

Source of truth for the notebook structure: nbformat (reads and validates the
executed notebooks); SVG parsed with the standard library's ElementTree.
The old looks checked against are those issue 14 lists: series in the order
blue #0072B2, orange #E69F00 (another plotting library's colour-blind
cycle; Okabe & Ito hex codes recalled), open paths in reddish purple
#CC79A7, and predictive checks as many thin translucent replicate lines.
"""
import shutil
import subprocess
import xml.etree.ElementTree as ET

import nbformat
import pytest

from conftest import REPO, bin_dir

SVG = "{http://www.w3.org/2000/svg}"
OLD_START = ["#0072B2", "#E69F00"]


@pytest.fixture(scope="module")
def figures(tmp_path_factory):
    """Every SVG output of the demos that draw the changed figures, by title."""
    exe = bin_dir() / "waypath"
    assert exe.exists(), f"{exe} missing: build with cargo build --release -p waypath-kernel"
    work = tmp_path_factory.mktemp("demos") / "demo"
    shutil.copytree(REPO / "demo-notebooks", work, ignore=shutil.ignore_patterns("*.executed.ipynb", "*.html"))
    # the checking demo without its Rust cell (its runner is a separate
    # build) and the cell that reads the table that cell makes
    checking = nbformat.read(work / "checking.ipynb", as_version=4)
    checking.cells = [c for c in checking.cells
                      if not c.source.startswith("%%rust") and "by_hand" not in c.source]
    nbformat.write(checking, work / "checking-declarative.ipynb")
    out = {}
    for demo in ["orchard", "stream", "checking-declarative", "whole-graph"]:
        target = work / f"{demo}.out.ipynb"
        done = subprocess.run([str(exe), "run", str(work / f"{demo}.ipynb"), "--out", str(target)],
                              capture_output=True, text=True, timeout=900)
        assert done.returncode == 0, done.stderr
        nb = nbformat.read(target, as_version=4)
        nbformat.validate(nb)
        for cell in nb.cells:
            for o in cell.get("outputs", []):
                svg = o.get("data", {}).get("image/svg+xml")
                if svg:
                    root = ET.fromstring(svg)
                    out.setdefault(root.find(f"{SVG}title").text.split(":")[0], []).append(root)
    return out


def legend_colours(root):
    """Colours of the legend's key marks, in order."""
    colours = []
    for g in root.iter(f"{SVG}g"):
        if g.get("class") != "legend":
            continue
        for mark in g:
            if mark.tag == f"{SVG}text":
                continue
            colour = mark.get("stroke") or mark.get("fill")
            if mark.tag == f"{SVG}g":
                colour = mark[0].get("stroke")
            colours.append(colour)
    return colours


def test_the_demos_draw_the_renamed_figures(figures):
    for kind in ["mixing", "spline fit", "posterior predictive check", "prior predictive check", "causal graph"]:
        assert kind in figures, f"no {kind} figure in the demos: {sorted(figures)}"
    assert "trace" not in figures and "B-spline" not in figures


def test_no_figure_starts_its_series_in_the_old_colour_order(figures):
    checked = 0
    for kind, roots in figures.items():
        for root in roots:
            colours = [c for c in legend_colours(root) if c not in ("#333333", "#000000", "#8C8C8C")]
            if len(colours) >= 2:
                checked += 1
                assert colours[:2] != OLD_START, f"{kind}: legend colours {colours}"
    assert checked >= 2


def test_chains_differ_in_dash_pattern_as_well_as_colour(figures):
    root = figures["mixing"][0]
    traces = [p for p in root.iter(f"{SVG}path") if p.get("stroke-opacity")]
    styles = {(p.get("stroke"), p.get("stroke-dasharray")) for p in traces}
    colours = {s[0] for s in styles}
    dashes = {s[1] for s in styles}
    assert len(colours) == len(dashes) == len(styles) >= 2, styles


def test_open_paths_are_not_reddish_purple(figures):
    graphs = figures["causal graph"]
    assert all("#CC79A7" not in ET.tostring(g, encoding="unicode") for g in graphs)
    assert any(">open path<" in ET.tostring(g, encoding="unicode") for g in graphs)


def test_predictive_checks_draw_bands_not_replicate_lines(figures):
    for kind in ["posterior predictive check", "prior predictive check"]:
        for root in figures[kind]:
            thin = [p for p in root.iter(f"{SVG}path") if p.get("stroke-opacity")]
            assert thin == [], f"{kind}: translucent replicate lines are back"
            bands = [p for p in root.iter(f"{SVG}path") if p.get("fill-opacity") and p.get("fill") != "none"]
            assert len(bands) >= 2, f"{kind}: expected the 90% and 50% bands"
            text = ET.tostring(root, encoding="unicode")
            assert "share of rows at or below" in text
