#!/usr/bin/env bash
# The whole Waypath test suite in one command: Python reference venv, release
# build, Rust tests, Python reference checks (networkx, scipy, statsmodels,
# nbformat), a headless run of every demo notebook, Rust cells on a fresh
# machine (an empty cargo home filled by `cargo fetch --target HOST`, then
# offline), and demo notebook 1 run in JupyterLab inside Debian's chromium
# (driven by playwright-core).
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

apt_install() {
    apt-get install -y -q "$@" >/dev/null || { apt-get update -q >/dev/null && apt-get install -y -q "$@" >/dev/null; }
}

# The figure tests measure label widths with a real font (DejaVu Sans).
if [ ! -d /usr/share/fonts/truetype/dejavu ] && [ "$(id -u)" = 0 ] && command -v apt-get >/dev/null; then
    echo "== installing fonts-dejavu-core for the figure tests"
    apt_install fonts-dejavu-core
fi

# The real-browser check: Debian's chromium and playwright-core from npm
# (pinned by tests/browser/package-lock.json, installed outside the clone).
if [ ! -x /usr/bin/chromium ] && [ "$(id -u)" = 0 ] && command -v apt-get >/dev/null; then
    echo "== installing Debian's chromium for the JupyterLab check"
    apt_install chromium
fi
node_dir="$CARGO_TARGET_DIR/browser-node"
if [ ! -d "$node_dir/node_modules/playwright-core" ] || ! cmp -s tests/browser/package-lock.json "$node_dir/package-lock.json"; then
    echo "== installing playwright-core into $node_dir"
    rm -rf "$node_dir" && mkdir -p "$node_dir"
    cp tests/browser/package.json tests/browser/package-lock.json "$node_dir/"
    (cd "$node_dir" && npm ci --no-audit --no-fund --ignore-scripts --loglevel=error)
fi
export WAYPATH_NODE_MODULES="$node_dir/node_modules"
# Rust cells link against this clone's sources, whichever clone built the
# kernel binary that cargo reuses from the shared target folder.
export WAYPATH_CELLS_WORKSPACE="$PWD"

echo "== building (release)"
# The Rust-cell runner alone first, as the README builds it: the library that
# Rust cells link to is made with this package's own feature resolution, so
# the kernel checks' first Rust cell only links it.
cargo build --release --locked -p waypath-rust-host
cargo build --release --workspace --locked

echo "== Rust tests"
cargo test --release --workspace --locked

echo "== the features columnar (Parquet and Arrow tables), on_disk (DataFusion) and across_machines (Ballista)"
# Built after the default builds above, which stay without them as the
# README's first command builds. across_machines includes on_disk, which
# includes columnar. The probes the Python checks call (the cell probe runs
# tables on disk, the table probe reads Parquet) and the three tests are
# built in one cargo call with one feature set: the tests' dev-dependencies
# then unify features with the probes', so DataFusion and Arrow compile once
# (with the features Ballista asks for), not once per call. The
# across-machines test starts a scheduler and two executors of
# waypath-machines on 127.0.0.1.
feature_step=(--release --locked -p waypath -p waypath-probe
    --features waypath/across_machines,waypath-probe/columnar,waypath-probe/on_disk
    --test table_columnar --test table_on_disk --test table_across_machines)
cargo build "${feature_step[@]}" --bins
cargo test "${feature_step[@]}"

echo "== Python reference checks"
export WAYPATH_BIN_DIR="$CARGO_TARGET_DIR/release"
"$venv/bin/python" -m pytest tests/python -q -p no:cacheprovider
