"""Regenerate the README's figures from the demo notebooks.

Runs the demos headless with the built `waypath` program and copies chosen
SVG figures out of the executed notebooks into this folder:

    cargo build --release -p waypath-kernel
    python3 demo-notebooks/figures/make_figures.py [--bin PATH/TO/waypath]

The program is looked for at --bin, then $WAYPATH_BIN_DIR/waypath, then
$CARGO_TARGET_DIR/release/waypath, then ~/.cache/waypath/target/release/waypath
and target/release/waypath. Standard library only.
"""
import argparse
import json
import os
import subprocess
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
DEMOS = HERE.parent
REPO = DEMOS.parent

# file written: (demo notebook, a statement the cell holds, how the figure's
# <title> starts, which of the cell's figures with that title: 0 the first)
FIGURES = {
    "open-path.svg": ("whole-graph.ipynb", "paths from rootstock to yield in orchard_soil given girth",
                      "<title>causal graph: open paths", 0),
    "contrast.svg": ("orchard.ipynb", "contrast m_total: rootstock standard vs dwarf on outcomes", "<title>contrast", 1),
    "intervention.svg": ("whole-graph.ipynb", "intervene whole: set rootstock standard vs dwarf", "<title>posterior", 0),
    "spline-fit.svg": ("stream.ipynb", "plot spline10 spline", "<title>spline fit", 0),
    "shrinkage.svg": ("orchard.ipynb", "plot total_rootstock_on_yield shrinkage", "<title>shrinkage", 0),
}


def waypath_program(given):
    candidates = []
    if given:
        candidates.append(Path(given))
    if os.environ.get("WAYPATH_BIN_DIR"):
        candidates.append(Path(os.environ["WAYPATH_BIN_DIR"]) / "waypath")
    if os.environ.get("CARGO_TARGET_DIR"):
        candidates.append(Path(os.environ["CARGO_TARGET_DIR"]) / "release" / "waypath")
    candidates.append(Path.home() / ".cache" / "waypath" / "target" / "release" / "waypath")
    candidates.append(REPO / "target" / "release" / "waypath")
    for c in candidates:
        if c.is_file():
            return c
    sys.exit("no waypath program found; build it with `cargo build --release -p waypath-kernel` or pass --bin")


def executed(program, demo, folder):
    out = Path(folder) / demo.replace(".ipynb", ".executed.ipynb")
    if not out.exists():
        done = subprocess.run([str(program), "run", str(DEMOS / demo), "--out", str(out)], capture_output=True, text=True)
        if done.returncode != 0:
            sys.exit(f"running {demo} failed:\n{done.stderr}")
    return json.loads(out.read_text())


def figure(notebook, statement, title, which):
    for cell in notebook["cells"]:
        if cell["cell_type"] != "code" or statement not in "".join(cell["source"]) + "\n":
            continue
        for output in cell.get("outputs", []):
            svg = output.get("data", {}).get("image/svg+xml")
            if svg is None:
                continue
            svg = "".join(svg) if isinstance(svg, list) else svg
            if title in svg:
                if which == 0:
                    return svg
                which -= 1
    return None


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--bin", help="the waypath program")
    args = parser.parse_args()
    program = waypath_program(args.bin)
    with tempfile.TemporaryDirectory() as folder:
        for name, (demo, statement, title, which) in FIGURES.items():
            svg = figure(executed(program, demo, folder), statement, title, which)
            if svg is None:
                sys.exit(f"{demo}: no figure starting {title!r} in the cell with {statement.strip()!r}")
            (HERE / name).write_text(svg if svg.endswith("\n") else svg + "\n")
            print(f"wrote {HERE.relative_to(REPO) / name} from {demo}")


if __name__ == "__main__":
    main()
