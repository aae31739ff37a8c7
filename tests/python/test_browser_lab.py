"""Demo notebook 1 (orchard) run in a real browser: JupyterLab from PyPI with
the Waypath kernel installed into the test venv, Debian's chromium driven by
playwright-core (tests/browser/lab_check.cjs).

Sources of truth: JupyterLab's own notebook front end and output renderers
(it decides how `image/svg+xml` is shown), and Chromium's SVG decoder (an
image that fails to parse has no natural size). The figure count per cell is
checked against the same notebook executed by nbclient, the Jupyter
project's reference executor, against the same installed kernel.

Needs: chromium at /usr/bin/chromium (or WAYPATH_CHROMIUM) and the npm
packages of tests/browser installed into WAYPATH_NODE_MODULES; tests/run.sh
installs both. A missing piece fails the test with the command that
installs it; it is never skipped.
"""
import json
import os
import secrets
import shutil
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import nbformat
from nbclient import NotebookClient

from conftest import REPO, bin_dir

NOTEBOOK = "orchard.ipynb"
CHROMIUM = os.environ.get("WAYPATH_CHROMIUM", "/usr/bin/chromium")
LAB_START_TIMEOUT = 120  # s
RUN_TIMEOUT = 900  # s, whole notebook in the browser


def node_modules() -> Path:
    default = Path(os.environ.get("CARGO_TARGET_DIR", Path.home() / ".cache/waypath/target")) / "browser-node" / "node_modules"
    return Path(os.environ.get("WAYPATH_NODE_MODULES", default))


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def install_kernel_into_venv():
    """`waypath install --prefix <venv>`: JupyterLab finds kernels under {sys.prefix}/share/jupyter."""
    exe = bin_dir() / "waypath"
    assert exe.exists(), f"{exe} missing: build with cargo build --release -p waypath-kernel"
    done = subprocess.run([str(exe), "install", "--prefix", sys.prefix], capture_output=True, text=True, timeout=60)
    assert done.returncode == 0, done.stderr
    spec = Path(sys.prefix) / "share" / "jupyter" / "kernels" / "waypath" / "kernel.json"
    assert spec.exists(), f"install did not write {spec}"


def write_lab_settings(settings: Path):
    """Quiet the news and update toasts so nothing covers the notebook."""
    target = settings / "@jupyterlab" / "apputils-extension"
    target.mkdir(parents=True)
    (target / "notification.jupyterlab-settings").write_text(
        json.dumps({"fetchNews": "false", "checkForUpdates": False})
    )


def start_lab(root: Path, scratch: Path):
    port, token = free_port(), secrets.token_hex(16)
    settings, workspaces = scratch / "lab-settings", scratch / "lab-workspaces"
    write_lab_settings(settings)
    workspaces.mkdir()
    env = dict(
        os.environ,
        JUPYTERLAB_SETTINGS_DIR=str(settings),
        JUPYTERLAB_WORKSPACES_DIR=str(workspaces),
        JUPYTER_RUNTIME_DIR=str(scratch / "runtime"),
    )
    log = open(scratch / "lab.log", "w")
    lab = subprocess.Popen(
        [
            sys.executable, "-m", "jupyterlab",
            "--no-browser", "--ip=127.0.0.1", f"--port={port}",
            f"--IdentityProvider.token={token}", f"--ServerApp.root_dir={root}",
            "--ServerApp.port_retries=0",
            *(["--allow-root"] if os.geteuid() == 0 else []),
        ],
        env=env, stdout=log, stderr=subprocess.STDOUT,
    )
    url = f"http://127.0.0.1:{port}/lab?token={token}"
    deadline = time.time() + LAB_START_TIMEOUT
    while time.time() < deadline:
        assert lab.poll() is None, f"JupyterLab exited early:\n{(scratch / 'lab.log').read_text()}"
        try:
            with urllib.request.urlopen(f"http://127.0.0.1:{port}/api/status?token={token}", timeout=2) as r:
                if r.status == 200:
                    return lab, url
        except OSError:
            time.sleep(0.5)
    lab.kill()
    raise AssertionError(f"JupyterLab did not answer within {LAB_START_TIMEOUT} s:\n{(scratch / 'lab.log').read_text()}")


def outputs_per_code_cell_by_nbclient(path: Path):
    """(figures, written results) per code cell when nbclient runs the notebook."""
    nb = nbformat.read(path, as_version=4)
    NotebookClient(nb, kernel_name="waypath", timeout=RUN_TIMEOUT, resources={"metadata": {"path": str(path.parent)}}).execute()
    code = [c for c in nb.cells if c.cell_type == "code"]
    count = lambda c, mime: sum(mime in o.get("data", {}) for o in c.outputs)
    return [count(c, "image/svg+xml") for c in code], [count(c, "text/html") for c in code]


def run_in_browser(url: str, scratch: Path):
    assert Path(CHROMIUM).exists(), f"{CHROMIUM} missing: apt-get install -y chromium (tests/run.sh does this)"
    modules = node_modules()
    assert (modules / "playwright-core").is_dir(), (
        f"{modules}/playwright-core missing: npm ci in a copy of tests/browser (tests/run.sh does this)"
    )
    shot = scratch / "orchard-in-lab.png"
    done = subprocess.run(
        ["node", str(REPO / "tests" / "browser" / "lab_check.cjs"), url, NOTEBOOK, str(shot), str(scratch / "chromium-profile")],
        capture_output=True, text=True, timeout=RUN_TIMEOUT + 120,
        env=dict(os.environ, NODE_PATH=str(modules), WAYPATH_CHROMIUM=CHROMIUM,
                 WAYPATH_LAB_RUN_TIMEOUT_MS=str(RUN_TIMEOUT * 1000)),
    )
    assert done.returncode == 0, f"browser check failed:\n{done.stderr}"
    return json.loads(done.stdout), shot


def test_orchard_notebook_runs_in_jupyterlab_and_its_figures_are_visible(tmp_path):
    install_kernel_into_venv()
    root = tmp_path / "notebooks"
    shutil.copytree(REPO / "demo-notebooks", root, ignore=shutil.ignore_patterns("*.executed.ipynb", "*.html"))
    scratch = tmp_path / "scratch"
    scratch.mkdir()
    expected, written = outputs_per_code_cell_by_nbclient(root / NOTEBOOK)
    assert sum(expected) >= 3, "the orchard notebook draws several figures"

    lab, url = start_lab(root, scratch)
    try:
        seen, shot = run_in_browser(url, scratch)
    finally:
        lab.terminate()
        lab.wait(timeout=30)
    keep = os.environ.get("WAYPATH_KEEP_SCREENSHOT")
    if keep:
        shutil.copy(shot, keep)

    assert seen["kernelName"] == "Waypath", seen["kernelName"]
    cells = seen["cells"]
    assert len(cells) == len(expected), "JupyterLab shows every code cell"
    counts = [int(c["prompt"].strip("[]:")) for c in cells]
    assert counts == list(range(1, len(cells) + 1)), f"cells ran once each, in order: {counts}"
    assert not [c for c in cells if c["errors"]], [c["errors"] for c in cells if c["errors"]]
    assert not seen["consoleErrors"], seen["consoleErrors"]
    assert [len(c["figures"]) for c in cells] == expected, "same figures per cell as nbclient's run"
    assert [c["written"] for c in cells] == written, "every written result shows as HTML"
    assert not [c for c in cells if c["jsonTrees"]], "no result is shown as a raw JSON tree"
    for cell in cells:
        for fig in cell["figures"]:
            where = f"cell {cell['index']} figure {fig['title']!r}"
            assert fig["naturalWidth"] > 0 and fig["naturalHeight"] > 0, f"{where}: chromium could not decode the SVG"
            assert fig["width"] >= 200 and fig["height"] >= 100, f"{where}: drawn too small ({fig['width']}x{fig['height']})"
            assert fig["visibility"] == "visible" and fig["display"] != "none" and fig["opacity"] > 0, where
            assert fig["uncovered"], f"{where}: covered by another element"
            assert fig["title"], f"{where}: figure carries no <title>"
    assert shot.stat().st_size > 10_000, "the screenshot has content"
