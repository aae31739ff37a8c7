"""Shared fixtures for the reference checks.

The Rust side is reached through small JSON-in/JSON-out probe binaries
(crate `tests/probe`, one `src/bin/probe_<area>.rs` per area). Their folder is
taken from WAYPATH_BIN_DIR, set by tests/run.sh.
"""
import json
import os
import subprocess
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]


def bin_dir() -> Path:
    default = Path(os.environ.get("CARGO_TARGET_DIR", Path.home() / ".cache/waypath/target")) / "release"
    return Path(os.environ.get("WAYPATH_BIN_DIR", default))


def run_probe(name: str, payload):
    """Send `payload` as JSON to probe binary `probe_<name>` and return its JSON answer."""
    exe = bin_dir() / f"probe_{name}"
    if not exe.exists():
        raise FileNotFoundError(f"{exe} is missing: build with `cargo build --release -p waypath-probe`")
    done = subprocess.run([str(exe)], input=json.dumps(payload), capture_output=True, text=True, timeout=600)
    if done.returncode != 0:
        raise RuntimeError(f"probe_{name} failed ({done.returncode}): {done.stderr}")
    return json.loads(done.stdout)


@pytest.fixture
def probe():
    return run_probe
