#!/usr/bin/env bash
# The whole Waypath test suite in one command: Python reference venv, release
# build, Rust tests, Python reference checks (networkx, scipy, statsmodels,
# nbformat), and a headless run of every demo notebook.
#
# The cargo target directory defaults to a folder outside the clone so that
# repeated runs (and CI on the same machine) reuse the build.
set -euo pipefail
cd "$(dirname "$0")/.."
export CARGO_TARGET_DIR="${CARGO_TARGET_DIR:-$HOME/.cache/waypath/target}"
venv="$CARGO_TARGET_DIR/pyenv"

if [ ! -x "$venv/bin/python" ] || ! cmp -s tests/requirements.txt "$venv/requirements.txt"; then
    echo "== setting up the Python reference venv in $venv"
    rm -rf "$venv"
    python3 -m venv "$venv"
    "$venv/bin/pip" install --quiet --disable-pip-version-check -r tests/requirements.txt
    cp tests/requirements.txt "$venv/requirements.txt"
fi

# The figure tests measure label widths with a real font (DejaVu Sans).
if [ ! -d /usr/share/fonts/truetype/dejavu ] && [ "$(id -u)" = 0 ] && command -v apt-get >/dev/null; then
    echo "== installing fonts-dejavu-core for the figure tests"
    apt-get install -y -q fonts-dejavu-core >/dev/null || { apt-get update -q >/dev/null && apt-get install -y -q fonts-dejavu-core >/dev/null; }
fi

echo "== building (release)"
cargo build --release --workspace --locked

echo "== Rust tests"
cargo test --release --workspace --locked

echo "== Python reference checks"
export WAYPATH_BIN_DIR="$CARGO_TARGET_DIR/release"
"$venv/bin/python" -m pytest tests/python -q -p no:cacheprovider
