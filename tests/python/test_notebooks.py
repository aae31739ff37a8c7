"""Headless notebook runs checked against the nbformat reference validator.

Source of truth: the nbformat JSON schema (nbformat.validate, v4.5) and the
Jupyter notebook format documentation for output types.
"""
import json
import shutil
import subprocess
from pathlib import Path

import nbformat
import pytest

import retired_words
from conftest import REPO, bin_dir

DEMOS = sorted((REPO / "demo-notebooks").glob("*.ipynb"))
DEMOS = [p for p in DEMOS if not p.name.endswith(".executed.ipynb")]


def waypath():
    exe = bin_dir() / "waypath"
    assert exe.exists(), f"{exe} missing: build with cargo build --release -p waypath-kernel"
    return str(exe)


def run(args, cwd=None):
    return subprocess.run([waypath(), *args], capture_output=True, text=True, timeout=900, cwd=cwd)


_RUNS = {}


def run_demo(demo, tmp_path_factory):
    """Run `demo` headless once per test session, in a copy of its folder;
    the finished process, the executed notebook and the report."""
    if demo not in _RUNS:
        tmp_path = tmp_path_factory.mktemp(demo.stem)
        work = tmp_path / "demo"
        shutil.copytree(demo.parent, work, ignore=shutil.ignore_patterns("*.executed.ipynb", "*.html"))
        out = tmp_path / "out.ipynb"
        html = tmp_path / "report.html"
        done = run(["run", str(work / demo.name), "--out", str(out), "--html", str(html)])
        _RUNS[demo] = (done, out, html)
    return _RUNS[demo]


@pytest.mark.parametrize("demo", DEMOS, ids=[d.stem for d in DEMOS])
def test_demo_notebook_runs_headless_into_a_valid_notebook(demo, tmp_path_factory):
    done, out, html = run_demo(demo, tmp_path_factory)
    assert done.returncode == 0, done.stderr
    nb = nbformat.read(out, as_version=4)
    nbformat.validate(nb)  # nbformat's own schema check (nbformat 4.5)
    code_cells = [c for c in nb.cells if c.cell_type == "code"]
    assert code_cells and all(c.execution_count for c in code_cells)
    errors = [o for c in code_cells for o in c.outputs if o.output_type == "error"]
    assert errors == []
    # every code cell shows something a reader can see
    assert all(c.outputs for c in code_cells)
    report = html.read_text()
    assert report.startswith("<!DOCTYPE html>") and demo.name in report
    assert "<script" not in report  # self-contained, nothing executes


def strings_in(value):
    """Every string inside a JSON value, keys included (unescaped, so a word
    at the start of an output line is seen at a word start)."""
    if isinstance(value, str):
        yield value
    elif isinstance(value, list):
        for v in value:
            yield from strings_in(v)
    elif isinstance(value, dict):
        for k, v in value.items():
            yield k
            yield from strings_in(v)


def test_the_retired_word_check_sees_a_label_at_a_line_start_and_not_inside_a_word():
    text = "\n".join(strings_in({"text/plain": ["parameter  mean\n", "b_girth  0.4\n"], "sub_total": 1}))
    assert [hit.split(" ")[0] for hit in retired_words.found_in(text)] == ["`b_`"]
    assert retired_words.found_in("sub_total, draw_count, web_page, family binomial out of n") == []


@pytest.mark.parametrize("demo", DEMOS, ids=[d.stem for d in DEMOS])
def test_demo_output_speaks_our_own_words(demo, tmp_path_factory):
    """Issue 14, "Keep it so": no retired label or word (tests/retired-words.txt)
    in the executed demo, its cells' sources or any output (text, HTML, JSON,
    figures), nor in its report."""
    done, out, html = run_demo(demo, tmp_path_factory)
    assert done.returncode == 0, done.stderr
    executed = json.loads(out.read_text(encoding="utf-8"))
    texts = list(strings_in(executed))
    assert any(c.get("outputs") for c in executed["cells"]), "no output to look into"
    found = retired_words.found_in("\n".join(texts)) + retired_words.found_in(html.read_text(encoding="utf-8"))
    assert found == [], f"{demo.name} shows retired words: {sorted(set(found))}"


def notebook_with(cells, path):
    nb = nbformat.v4.new_notebook()
    nb.cells = [nbformat.v4.new_code_cell(c) for c in cells]
    nbformat.write(nb, path)


def test_failing_cell_is_recorded_with_cell_and_line_and_run_exits_nonzero(tmp_path):
    src = tmp_path / "bad.ipynb"
    notebook_with(["graph g:\n    a -> b", "paths from a to c in g", "graph h:\n    x -> y"], src)
    done = run(["run", str(src), "--out", str(tmp_path / "o.ipynb")])
    assert done.returncode == 1
    nb = nbformat.read(tmp_path / "o.ipynb", as_version=4)
    nbformat.validate(nb)
    err = [o for o in nb.cells[1].outputs if o.output_type == "error"]
    assert len(err) == 1
    assert err[0].evalue.startswith("cell [2], cell line 1:")  # the execution count, as the report shows it
    assert "c" in err[0].evalue
    # the run stopped: the third cell was not executed
    assert nb.cells[2].execution_count is None


def test_keep_going_runs_past_a_failing_cell(tmp_path):
    src = tmp_path / "bad.ipynb"
    notebook_with(["nonsense here", "graph h:\n    x -> y"], src)
    done = run(["run", str(src), "--out", str(tmp_path / "o.ipynb"), "--keep-going"])
    assert done.returncode == 1
    nb = nbformat.read(tmp_path / "o.ipynb", as_version=4)
    assert nb.cells[1].execution_count == 2
    assert not [o for o in nb.cells[1].outputs if o.output_type == "error"]
