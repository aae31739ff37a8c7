"""Plain-text analyses (.waypath): conversion to and from notebooks, headless runs,
and what the runner says when something is wrong.

Sources of truth:
* nbformat's own reader and JSON-schema validator (nbformat.read, nbformat.validate,
  v4.5) for every notebook `waypath transcribe` and `waypath run` write;
* the demo notebooks, written by demo-notebooks/make_notebooks.py (Python, separate
  from the Rust reader and writer), for what the cells of the text demo are;
* the text files themselves, line-counted here, for the file lines errors name;
* Chromium's layout engine for whether report code lines fit the page;
* jupyter_client's kernelspec lookup for `waypath install --user`.
"""
import os
import re
import shutil
import subprocess
from pathlib import Path

import nbformat
import pytest

from conftest import REPO, bin_dir

DEMO_DIR = REPO / "demo-notebooks"
DEMOS = sorted(p for p in DEMO_DIR.glob("*.ipynb") if not p.name.endswith(".executed.ipynb"))
TEXT_DEMO = DEMO_DIR / "orchard.waypath"


def waypath():
    exe = bin_dir() / "waypath"
    assert exe.exists(), f"{exe} missing: build with cargo build --release -p waypath-kernel"
    return str(exe)


def run(args, cwd=None, env=None):
    return subprocess.run([waypath(), *args], capture_output=True, text=True, timeout=900, cwd=cwd, env=env)


def without_trailing_blank_lines(source):
    """A cell source as the text form keeps it: blank lines at its end separate cells."""
    lines = source.split("\n")
    while lines and not lines[-1].strip():
        lines.pop()
    return "\n".join(lines)


def cells_of(nb):
    return [(c.cell_type, without_trailing_blank_lines(c.source)) for c in nb.cells]


# --- conversion ---------------------------------------------------------------

def test_the_text_demo_and_the_notebook_demo_hold_the_same_cells(tmp_path):
    out = tmp_path / "orchard.ipynb"
    done = run(["transcribe", str(TEXT_DEMO), "--out", str(out)])
    assert done.returncode == 0, done.stderr
    assert str(out) in done.stdout and done.stderr == ""
    made = nbformat.read(out, as_version=4)
    nbformat.validate(made)
    demo = nbformat.read(DEMO_DIR / "orchard.ipynb", as_version=4)
    assert cells_of(made) == cells_of(demo)
    assert made.metadata.kernelspec.name == "waypath"
    assert all(c.outputs == [] and c.execution_count is None for c in made.cells if c.cell_type == "code")
    # and the notebook demo, turned into text, is the committed text demo byte for byte
    back = tmp_path / "orchard.waypath"
    done = run(["transcribe", str(DEMO_DIR / "orchard.ipynb"), "--out", str(back)])
    assert done.returncode == 0, done.stderr
    assert back.read_bytes() == TEXT_DEMO.read_bytes()


@pytest.mark.parametrize("demo", DEMOS, ids=[d.stem for d in DEMOS])
def test_every_demo_survives_notebook_to_text_to_notebook_and_text_to_notebook_to_text(demo, tmp_path):
    text = tmp_path / f"{demo.stem}.waypath"
    done = run(["transcribe", str(demo), "--out", str(text)])
    assert done.returncode == 0, done.stderr
    nb = tmp_path / f"{demo.stem}.ipynb"
    done = run(["transcribe", str(text), "--out", str(nb)])
    assert done.returncode == 0, done.stderr
    made = nbformat.read(nb, as_version=4)
    nbformat.validate(made)
    original = nbformat.read(demo, as_version=4)
    assert cells_of(made) == cells_of(original)
    again = tmp_path / "again.waypath"
    done = run(["transcribe", str(nb), "--out", str(again)])
    assert done.returncode == 0, done.stderr
    assert again.read_bytes() == text.read_bytes()


def test_text_that_looks_like_a_marker_and_rust_cells_survive_the_round_trip(tmp_path):
    nb = nbformat.v4.new_notebook()
    nb.cells = [
        nbformat.v4.new_markdown_cell("Site notes\n===\n\n=== code is a marker, so this line is escaped\n"
                                      "\\=== and this one already had a backslash"),
        nbformat.v4.new_code_cell("%%rust\nlet rows = wp_table(\"plots\");"),
        nbformat.v4.new_raw_cell("===raw text"),
        nbformat.v4.new_code_cell(""),
    ]
    src = tmp_path / "notes.ipynb"
    nbformat.write(nb, src)
    text = tmp_path / "notes.waypath"
    assert run(["transcribe", str(src), "--out", str(text)]).returncode == 0
    written = text.read_text(encoding="utf-8")
    assert written.count("\n=== ") + written.startswith("=== ") == 4, written
    back = tmp_path / "back.ipynb"
    done = run(["transcribe", str(text), "--out", str(back)])
    assert done.returncode == 0, done.stderr
    made = nbformat.read(back, as_version=4)
    nbformat.validate(made)
    assert cells_of(made) == cells_of(nb)


def test_a_notebook_past_the_text_limits_is_refused_not_cut(tmp_path):
    nb = nbformat.v4.new_notebook()
    pasted = "<img src=\"data:image/png;base64," + "A" * 150_000 + "\">"
    nb.cells = [nbformat.v4.new_markdown_cell("Quadrat photo\n" + pasted)]
    src = tmp_path / "photo.ipynb"
    nbformat.write(nb, src)
    done = run(["transcribe", str(src)])
    assert done.returncode == 1
    assert "photo.ipynb: cannot be written as text" in done.stderr and "line 3 of the text" in done.stderr, done.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["photo.ipynb"]


def test_going_to_text_says_what_it_left_out(tmp_path):
    nb = nbformat.v4.new_notebook()
    nb.cells = [nbformat.v4.new_markdown_cell("![plot](attachment:p.png)"),
                nbformat.v4.new_code_cell("graph g:\n    a -> b"),
                nbformat.v4.new_code_cell("paths from a to b in g")]
    nb.cells[0].attachments = {"p.png": {"image/png": "iVBORw0KGgo="}}
    nb.cells[1].outputs = [nbformat.v4.new_output("stream", name="stdout", text="x\n")]
    nb.cells[2].metadata["tags"] = ["keep"]
    src = tmp_path / "had-outputs.ipynb"
    nbformat.write(nb, src)
    nbformat.validate(nbformat.read(src, as_version=4))
    done = run(["transcribe", str(src)])
    assert done.returncode == 0, done.stderr
    assert "the outputs of 1 code cell(s)" in done.stdout, done.stdout
    assert "1 attachment(s)" in done.stdout and "the metadata of 1 cell(s)" in done.stdout
    assert (tmp_path / "had-outputs.waypath").exists()


# --- running a text analysis --------------------------------------------------

TIMING = re.compile(r"\d+(\.\d+)? ?(s|ms|seconds)\b")


def comparable(outputs):
    """Outputs with run times blanked (they differ from run to run)."""
    def clean(value):
        if isinstance(value, dict):
            return {k: (None if k == "seconds" else clean(v)) for k, v in value.items()}
        if isinstance(value, list):
            return [clean(v) for v in value]
        if isinstance(value, str):
            return TIMING.sub("T", value)
        return value
    return clean([dict(o) for o in outputs])


@pytest.fixture(scope="module")
def demo_runs(tmp_path_factory):
    """The orchard demo run headless once as a notebook and once as text."""
    work = tmp_path_factory.mktemp("orchard")
    shutil.copytree(DEMO_DIR / "data", work / "data")
    shutil.copy(DEMO_DIR / "orchard.ipynb", work)
    shutil.copy(TEXT_DEMO, work)
    runs = {}
    for name in ("orchard.ipynb", "orchard.waypath"):
        out, html = work / f"{name}.out.ipynb", work / f"{name}.html"
        done = run(["run", str(work / name), "--out", str(out), "--html", str(html)])
        assert done.returncode == 0, done.stderr
        runs[name] = (nbformat.read(out, as_version=4), html.read_text(encoding="utf-8"))
    return runs


def test_a_text_analysis_runs_to_the_same_outputs_and_report_as_its_notebook(demo_runs):
    from_notebook, report_nb = demo_runs["orchard.ipynb"]
    from_text, report_text = demo_runs["orchard.waypath"]
    nbformat.validate(from_text)
    assert [c.cell_type for c in from_text.cells] == [c.cell_type for c in from_notebook.cells]
    code = [(a, b) for a, b in zip(from_notebook.cells, from_text.cells) if a.cell_type == "code"]
    assert code and all(b.outputs for _, b in code)
    for a, b in code:
        assert b.execution_count == a.execution_count
        assert comparable(b.outputs) == comparable(a.outputs), a.source
    # the reports differ only in the title (the file name) and the time of the run
    def body(html):
        return TIMING.sub("T", html[html.index("</header>"):])
    assert "<h1>orchard.waypath</h1>" in report_text
    assert body(report_text) == body(report_nb)


def test_a_failing_cell_of_a_text_analysis_names_its_count_and_file_line(tmp_path):
    text = ("=== notes\n# Stream gauge\n\nA first look.\n\n"
            "=== code\ngraph stream:\n    rain -> flow\n\n"
            "=== notes\nNow a path query.\n\n"
            "=== code\ngraph other:\n    x -> y\npaths from rain to snow in stream\n")
    src = tmp_path / "gauge.waypath"
    src.write_text(text, encoding="utf-8")
    bad_line = text.split("\n").index("paths from rain to snow in stream") + 1
    out = tmp_path / "gauge.executed.ipynb"
    done = run(["run", str(src)])  # default --out: beside the input
    assert done.returncode == 1
    nb = nbformat.read(out, as_version=4)
    nbformat.validate(nb)
    failing = nb.cells[3]
    assert failing.execution_count == 2
    (error,) = [o for o in failing.outputs if o.output_type == "error"]
    # the statement is the third line of its cell
    assert error.evalue.startswith(f"cell [2], cell line 3 (gauge.waypath line {bad_line}):"), error.evalue
    assert f"[2] (from gauge.waypath line {bad_line - 2})" in done.stderr, done.stderr
    assert src.read_text(encoding="utf-8") == text


def test_notebook_errors_name_the_cell_by_the_count_the_report_shows(tmp_path):
    nb = nbformat.v4.new_notebook()
    nb.cells = [nbformat.v4.new_markdown_cell("# Saplings"), nbformat.v4.new_code_cell("graph g:\n    a -> b"),
                nbformat.v4.new_markdown_cell("A query."), nbformat.v4.new_code_cell("paths from a to c in g")]
    src = tmp_path / "saplings.ipynb"
    nbformat.write(nb, src)
    html = tmp_path / "saplings.html"
    done = run(["run", str(src), "--out", str(tmp_path / "o.ipynb"), "--html", str(html)])
    assert done.returncode == 1
    out = nbformat.read(tmp_path / "o.ipynb", as_version=4)
    count = out.cells[3].execution_count
    assert count == 2  # nbformat: the second code cell run, whatever its position
    (error,) = [o for o in out.cells[3].outputs if o.output_type == "error"]
    assert error.evalue.startswith(f"cell [{count}], cell line 1:"), error.evalue
    report = html.read_text(encoding="utf-8")
    assert f'<div class="wp-count">[{count}]</div>' in report
    assert f"failed cell(s): [{count}]" in done.stderr, done.stderr
    assert out.metadata.waypath.failed_cells == [count]


# --- bad input and refused outputs ---------------------------------------------

@pytest.mark.parametrize("command", ["transcribe", "run"])
@pytest.mark.parametrize("content, line, words", [
    (b"graph g:\n    a -> b\n", 1, "before the first cell marker"),
    (b"=== code\ngraph g:\n    a -> b\n\n=== cells\ngraph h:\n", 5, "not a cell marker"),
    (b"=== notes\nsoil pH\n=== code\ntable t from \"x.csv\":\n    ph: real in \xff\xfe\n", 5, "not UTF-8"),
])
def test_bad_text_is_refused_naming_file_and_line(tmp_path, command, content, line, words):
    src = tmp_path / "field.waypath"
    src.write_bytes(content)
    done = run([command, str(src)])
    assert done.returncode == 1, done.stdout
    assert f"field.waypath line {line}: " in done.stderr and words in done.stderr, done.stderr
    assert "panicked" not in done.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["field.waypath"]  # nothing written
    assert src.read_bytes() == content


def test_oversized_text_is_refused_before_it_is_read(tmp_path):
    src = tmp_path / "huge.waypath"
    with open(src, "wb") as f:  # sparse: 17 MiB long without writing it
        f.truncate(17 << 20)
    done = run(["transcribe", str(src)])
    assert done.returncode == 1
    assert "at most 16 MiB" in done.stderr, done.stderr
    many = tmp_path / "many.waypath"
    many.write_text("=== code\n" + "\n" * 200_001, encoding="utf-8")
    done = run(["transcribe", str(many)])
    assert done.returncode == 1 and "many.waypath line 200001: " in done.stderr, done.stderr


def test_an_existing_output_is_kept_unless_replace_is_given(tmp_path):
    src = tmp_path / "plots.waypath"
    src.write_text("=== code\ngraph g:\n    a -> b\n", encoding="utf-8")
    out = tmp_path / "plots.ipynb"
    out.write_text("a notebook of someone's own")
    done = run(["transcribe", str(src)])
    assert done.returncode == 1 and "--replace" in done.stderr, done.stderr
    assert out.read_text() == "a notebook of someone's own"
    done = run(["transcribe", str(src), "--replace"])
    assert done.returncode == 0, done.stderr
    nbformat.validate(nbformat.read(out, as_version=4))
    assert not [p for p in tmp_path.iterdir() if p.name.endswith(".partial")]


def test_the_input_is_never_written_over(tmp_path):
    src = tmp_path / "plots.waypath"
    text = "=== code\ngraph g:\n    a -> b\n"
    src.write_text(text, encoding="utf-8")
    twin = tmp_path / "twin.ipynb"
    os.link(src, twin)  # another name for the same file
    for args in (["transcribe", str(src), "--out", str(twin), "--replace"],
                 ["transcribe", str(twin), "--out", str(tmp_path / "sub" / ".." / "plots.waypath"), "--replace"],
                 ["run", str(src), "--out", str(twin)],
                 ["run", str(src), "--html", str(src)]):
        (tmp_path / "sub").mkdir(exist_ok=True)
        done = run(args)
        assert done.returncode == 1, args
        assert "input" in done.stderr or "analysis being run" in done.stderr, (args, done.stderr)
        assert src.read_text(encoding="utf-8") == text


def test_the_output_kind_must_match_the_conversion(tmp_path):
    src = tmp_path / "plots.waypath"
    src.write_text("=== code\ngraph g:\n    a -> b\n", encoding="utf-8")
    done = run(["transcribe", str(src), "--out", str(tmp_path / "plots.txt")])
    assert done.returncode == 1 and ".ipynb file" in done.stderr, done.stderr
    done = run(["transcribe", str(tmp_path / "plots.csv")])
    assert done.returncode == 1 and ".waypath" in done.stderr, done.stderr
    done = run(["transcribe", str(src), "--out", str(tmp_path / "missing" / "plots.ipynb")])
    assert done.returncode == 1 and "cannot write" in done.stderr, done.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["plots.waypath"]


# --- install and report -----------------------------------------------------------

def test_install_confirms_on_standard_output(tmp_path, monkeypatch):
    env = dict(os.environ, JUPYTER_DATA_DIR=str(tmp_path / "data"))
    done = run(["install", "--user"], env=env)
    assert done.returncode == 0, done.stderr
    assert done.stderr == ""
    assert done.stdout.startswith("installed the Waypath kernel in ")
    from jupyter_client.kernelspec import KernelSpec
    from jupyter_core.paths import jupyter_data_dir
    monkeypatch.setenv("JUPYTER_DATA_DIR", str(tmp_path / "data"))
    installed = Path(done.stdout.split(" in ", 1)[1].strip())
    # jupyter_core's idea of the user's data folder is where --user writes
    assert installed == Path(jupyter_data_dir()) / "kernels" / "waypath"
    spec = KernelSpec.from_resource_dir(str(installed))
    assert Path(spec.argv[0]).resolve() == Path(waypath()).resolve() and spec.display_name == "Waypath"


MEASURE = """<script>
document.body.setAttribute('data-overflow', [...document.querySelectorAll('pre')]
  .filter(p => p.scrollWidth > p.clientWidth + 1).length);
document.body.setAttribute('data-pre', document.querySelectorAll('pre').length);
</script></body>"""


def overflowing_blocks(html, tmp_path, name):
    """How many <pre> blocks are wider than their box in Chromium at a printed page's width."""
    chromium = shutil.which("chromium") or "/usr/bin/chromium"
    if not Path(chromium).exists():
        pytest.fail("Debian's chromium is needed for the layout check (apt-get install chromium)")
    page = tmp_path / name
    page.write_text(html.replace("</body>", MEASURE), encoding="utf-8")
    done = subprocess.run([chromium, "--headless", "--no-sandbox", "--disable-gpu", "--window-size=700,900",
                           "--dump-dom", page.as_uri()], capture_output=True, text=True, timeout=120)
    found = re.search(r'data-overflow="(\d+)" data-pre="(\d+)"', done.stdout)
    assert found, done.stdout[-2000:] + done.stderr[-2000:]
    return int(found.group(1)), int(found.group(2))


def test_long_code_lines_wrap_in_the_report(tmp_path):
    long_comment = "# " + " ".join(f"plot{i}" for i in range(80))
    unbroken = "# " + "x" * 300
    src = tmp_path / "wide.waypath"
    src.write_text(f"=== code\ngraph g:\n    a -> b  {long_comment}\n    b -> c  {unbroken}\n", encoding="utf-8")
    html = tmp_path / "wide.html"
    done = run(["run", str(src), "--html", str(html)])
    assert done.returncode == 0, done.stderr
    report = html.read_text(encoding="utf-8")
    overflow, blocks = overflowing_blocks(report, tmp_path, "measured.html")
    assert blocks >= 1 and overflow == 0
    # the check can fail: without the wrapping rule the same code block runs off the page
    unwrapped = report.replace("pre{white-space:pre-wrap;overflow-wrap:anywhere}", "pre{white-space:pre}")
    assert unwrapped != report
    overflow, _ = overflowing_blocks(unwrapped, tmp_path, "unwrapped.html")
    assert overflow >= 1


# --- the README's first tour ----------------------------------------------------

def markdown_section(text, heading):
    """The lines under `heading` up to the next heading of its level, outside code fences."""
    lines, inside, fenced = [], False, False
    for line in text.splitlines(keepends=True):
        if line.startswith("```"):
            fenced = not fenced
        if not fenced and line.startswith("## "):
            if inside:
                break
            inside = line.rstrip() == heading
            continue
        if inside:
            lines.append(line)
    return "".join(lines)


def test_the_readme_tour_shows_the_text_demo_and_runs_it_from_the_repository_root():
    readme = (REPO / "README.md").read_text(encoding="utf-8")
    tour = markdown_section(readme, "## A first look")
    blocks = re.findall(r"```\n(.*?)```", tour, re.S)
    excerpt = [b for b in blocks if b.startswith("=== ")]
    assert excerpt and excerpt[0] in TEXT_DEMO.read_text(encoding="utf-8")
    commands = [line for b in blocks for line in b.splitlines() if " run " in line]
    assert commands, tour
    for command in commands:
        named = [w for w in command.split() if w.endswith((".waypath", ".ipynb"))]
        assert named and all((REPO / w).exists() for w in named), command
    for data in re.findall(r'"(data/[^"]+)"', excerpt[0]):
        assert (TEXT_DEMO.parent / data).exists(), data
