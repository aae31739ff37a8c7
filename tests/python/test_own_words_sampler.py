"""Keep it so: the sampler options, their default block and the fit summary
stay in Waypath's own words (issue 14, items 7 and 9).

Each check lists words and layouts that Waypath used before and that a
practitioner would take for another tool's, and fails if one comes back in
the README, the statement grammar, or the executed demo notebooks. The demo
outputs are read with nbformat (the reference reader of the notebook format).
"""
import json
import re
import shutil
import subprocess

import nbformat
import pytest

from conftest import REPO, bin_dir

README = (REPO / "README.md").read_text()
GRAMMAR = (REPO / "library/src/cells/statements/grammar.rs").read_text()

# Option words of earlier versions; the grammar keeps them only in its list
# of retired words, so that an old notebook gets an error naming the new one.
RETIRED_OPTIONS = ["warmup", "accept", "depth"]
# The default block of earlier versions, in the shapes it was printed in.
OLD_DEFAULT_TEXTS = [
    "warm-up", "chains × (", "1000 warm-up", "acceptance 0.8, depth 10", "target acceptance 0.8",
    "max tree depth 10",
]
# Keys of the earlier fit JSON and heads of the earlier fit table.
OLD_SUMMARY_KEYS = {"rhat", "ess_bulk", "ess_tail"}
OLD_TABLE_HEAD = re.compile(r"R-hat\s+bulk ESS\s+tail ESS|P\(>0\)\s+R-hat|mean\s+sd\s+90% lower\s+90% upper")


def grammar_without_retired_list():
    start = GRAMMAR.index("pub const RETIRED_NUTS_OPTIONS")
    end = GRAMMAR.index(";", start)
    return GRAMMAR[:start] + GRAMMAR[end + 1:]


def test_grammar_offers_only_the_new_option_words():
    grammar = grammar_without_retired_list()
    for word in RETIRED_OPTIONS:
        assert f'"{word}"' not in grammar, f"option word {word!r} is back in the grammar"
        assert f"[{word} " not in grammar, f"option word {word!r} is back in a usage text"
    retired = GRAMMAR[GRAMMAR.index("pub const RETIRED_NUTS_OPTIONS"):]
    for word in RETIRED_OPTIONS:
        assert f'("{word}", "' in retired, f"{word!r} should stay in the retired list, with its replacement"


def test_readme_uses_the_new_option_words_and_summary_layout():
    for word in RETIRED_OPTIONS:
        assert f"`{word}`" not in README, f"README names the old option `{word}`"
    for text in OLD_DEFAULT_TEXTS:
        assert text not in README, f"README repeats the old default block: {text!r}"
    for key in OLD_SUMMARY_KEYS:
        assert f'"{key}"' not in README, f"README documents the old fit JSON key {key!r}"
    fit_rows = [line for line in README.splitlines() if line.startswith(("| `fit`", "| `fit` (joint)"))]
    assert len(fit_rows) == 2, fit_rows
    for row in fit_rows:
        assert '"p_positive"' not in row and '"parameters"' not in row, row
    assert not OLD_TABLE_HEAD.search(README)


def json_keys(value):
    if isinstance(value, dict):
        for key, inner in value.items():
            yield key
            yield from json_keys(inner)
    elif isinstance(value, list):
        for inner in value:
            yield from json_keys(inner)


@pytest.fixture(scope="module")
def demo_outputs(tmp_path_factory):
    exe = bin_dir() / "waypath"
    assert exe.exists(), f"{exe} missing: build with cargo build --release -p waypath-kernel"
    work = tmp_path_factory.mktemp("demos")
    shutil.copytree(REPO / "demo-notebooks", work / "d", ignore=shutil.ignore_patterns("*.executed.ipynb", "*.html"))
    outputs = []
    for demo in sorted((work / "d").glob("*.ipynb")):
        out = work / f"{demo.stem}.out.ipynb"
        done = subprocess.run([str(exe), "run", str(demo), "--out", str(out)], capture_output=True, text=True,
                              timeout=900)
        assert done.returncode == 0, done.stderr
        nb = nbformat.read(out, as_version=4)
        for cell in nb.cells:
            if cell.cell_type == "code":
                outputs.extend((demo.name, cell.source, o) for o in cell.outputs)
    return outputs


def test_demo_outputs_keep_the_new_words_and_summary_layout(demo_outputs):
    fits = 0
    for demo, source, output in demo_outputs:
        data = output.get("data", {})
        text = data.get("text/plain", "") + data.get("text/html", "") + output.get("text", "")
        for old in OLD_DEFAULT_TEXTS:
            assert old not in text, f"{demo}: {source!r} prints {old!r}"
        assert not OLD_TABLE_HEAD.search(text), f"{demo}: {source!r} prints the old fit table head"
        result = data.get("application/vnd.waypath.result+json")
        if isinstance(result, str):
            result = json.loads(result)
        if result is not None:
            back = OLD_SUMMARY_KEYS & set(json_keys(result))
            assert not back, f"{demo}: {source!r} gives old JSON keys {back}"
            if "estimates" in result or ("nodes" in result and "interval_mass" in result):
                fits += 1
    assert fits >= 3, "the demos should show several fits for this check to mean something"


def test_default_sampler_block_is_not_the_old_one(demo_outputs):
    # The old defaults: 4 chains, 1000 + 1000 iterations, acceptance 0.8, depth 10.
    old = {"chains": 4, "settle": 1000, "draws": 1000, "acceptance": 0.8, "doublings": 10}
    seen = []
    for _, source, output in demo_outputs:
        result = output.get("data", {}).get("application/vnd.waypath.result+json")
        if isinstance(result, dict) and result.get("method") == "nuts" and "settings" in result:
            settings = {k: result["settings"][k] for k in old}
            seen.append(settings)
            assert settings != old, f"{source!r} ran with the old default block"
    assert seen, "no NUTS fit in the demos"
