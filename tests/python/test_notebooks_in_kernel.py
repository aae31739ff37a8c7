"""Every demo notebook executed by nbclient against the installed Waypath
kernel, and the result validated by nbformat.

Sources of truth: nbclient (the reference notebook executor of the Jupyter
project) and the nbformat 4.5 JSON schema (nbformat.validate).
"""
import shutil
from pathlib import Path

import nbformat
import pytest
from nbclient import NotebookClient

from conftest import REPO
from test_kernel import FIRST_RUST_CELL_TIMEOUT, install_kernelspec

DEMOS = sorted(p for p in (REPO / "demo-notebooks").glob("*.ipynb") if not p.name.endswith(".executed.ipynb"))


@pytest.mark.parametrize("demo", DEMOS, ids=[d.stem for d in DEMOS])
def test_demo_notebook_runs_in_the_kernel_under_nbclient(demo, tmp_path):
    install_kernelspec()
    work = tmp_path / "demo"
    shutil.copytree(demo.parent, work, ignore=shutil.ignore_patterns("*.executed.ipynb", "*.html"))
    nb = nbformat.read(work / demo.name, as_version=4)
    client = NotebookClient(
        nb,
        kernel_name="waypath",
        timeout=FIRST_RUST_CELL_TIMEOUT,
        resources={"metadata": {"path": str(work)}},
    )
    client.execute()  # raises CellExecutionError on any error output
    nbformat.validate(nb)
    code_cells = [c for c in nb.cells if c.cell_type == "code"]
    assert all(c.execution_count for c in code_cells)
    assert not [o for c in code_cells for o in c.outputs if o.output_type == "error"]
    figures = [o for c in code_cells for o in c.outputs if "image/svg+xml" in o.get("data", {})]
    assert figures, "every demo draws at least one figure"
