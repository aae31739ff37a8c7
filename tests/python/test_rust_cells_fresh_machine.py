"""Rust cells on a fresh machine.

A new, empty cargo home receives exactly what the README's build downloads:
`cargo fetch --locked --target HOST` fetches the packages the workspace's
lock file needs on this platform only (the cargo book, "cargo fetch": with
`--target`, packages of other platforms are left out). The README's build then
runs offline into a target folder of its own, and a Rust cell runs through
`waypath run` and through the kernel with downloads forbidden
(`CARGO_NET_OFFLINE=true`, the cargo book, "net.offline"). A Rust context that
resolved packages afresh instead of using the lock file asks for packages of
other platforms (web-assembly ones) and fails here.

The target folder is kept between runs under $CARGO_TARGET_DIR/fresh-machine
(the cargo home is made anew each time at the same path, so the build is
reused); the first run on a machine compiles the Rust-cell runner's build
once more (registry sources at a new path are new to cargo).
Checks: nbformat validates the executed notebook; jupyter_client (BlockingKernelClient)
speaks to the kernel; plain arithmetic for the cell's value. The standard
library's own packages (which evcxr's type inference reads) are not part of
the README's build: offline, a note names the command that fetches them;
with a network, the first Rust cell fetches them itself.
"""
import json
import os
import shutil
import subprocess
import tempfile
import time
from pathlib import Path

import nbformat
import pytest
from jupyter_client import BlockingKernelClient
from jupyter_client.connect import write_connection_file

from conftest import REPO, bin_dir

BUILD_TIMEOUT = 3600  # s: the first run on a machine compiles the README's build


def target_root() -> Path:
    default = Path.home() / ".cache/waypath/target"
    return Path(os.environ.get("CARGO_TARGET_DIR", default)) / "fresh-machine"


def host_triple() -> str:
    info = subprocess.run(["rustc", "-vV"], capture_output=True, text=True, check=True).stdout
    return next(line.split(":", 1)[1].strip() for line in info.splitlines() if line.startswith("host:"))


def cargo(args, env, timeout=BUILD_TIMEOUT):
    done = subprocess.run(["cargo", *args], cwd=REPO, env=env, capture_output=True, text=True, timeout=timeout)
    assert done.returncode == 0, f"cargo {' '.join(args)} failed:\n{done.stderr[-4000:]}"
    return done


def locked_packages() -> set:
    lock = (REPO / "Cargo.lock").read_text()
    names, name = set(), None
    for line in lock.splitlines():
        if line.startswith("name = "):
            name = line.split('"')[1]
        elif line.startswith("source = ") and "registry" in line and name:
            names.add(name)
    return names


def fetched_packages(home: Path) -> set:
    cache = home / "registry" / "cache"
    return {p.name.rsplit("-", 1)[0] for p in cache.glob("*/*.crate")}


@pytest.fixture(scope="module")
def fresh():
    """The fresh cargo home, the offline environment and the built programs."""
    root = target_root()
    home = root / "cargo-home"
    shutil.rmtree(home, ignore_errors=True)
    home.mkdir(parents=True)
    env = {k: v for k, v in os.environ.items() if k not in ("RUSTFLAGS", "CARGO_ENCODED_RUSTFLAGS", "CARGO")}
    env.update(CARGO_HOME=str(home), CARGO_TARGET_DIR=str(root / "target"))
    # What the README's build downloads: this platform's packages only.
    cargo(["fetch", "--locked", "--target", host_triple()], env, timeout=900)
    env["CARGO_NET_OFFLINE"] = "true"
    # The README's build of the Rust-cell runner, offline. The `waypath`
    # program itself is the suite's own build, copied beside it (its build
    # does not touch Rust cells, and building it again would cost CI minutes).
    cargo(["build", "--release", "--locked", "-p", "waypath-rust-host"], env)
    release = root / "target" / "release"
    shutil.copy2(bin_dir() / "waypath", release / "waypath")
    evcxr_dir = tempfile.mkdtemp(prefix="waypath-fresh-evcxr-")
    env["WAYPATH_EVCXR_DIR"] = evcxr_dir
    yield {"env": env, "home": home, "waypath": release / "waypath"}
    shutil.rmtree(evcxr_dir, ignore_errors=True)


def test_the_fresh_cargo_home_lacks_other_platforms_packages(fresh):
    # Without this the test would not reproduce a fresh machine: a fetch of
    # every platform hides a context that resolves packages afresh.
    missing = locked_packages() - fetched_packages(fresh["home"])
    assert missing, "every locked package was fetched; the cargo home is not a fresh machine's"
    assert any("wasm" in name or name == "js-sys" for name in missing), sorted(missing)[:20]


def test_waypath_run_executes_rust_cells_offline(fresh, tmp_path):
    out = tmp_path / "checking.executed.ipynb"
    started = time.monotonic()
    done = subprocess.run(
        [str(fresh["waypath"]), "run", str(REPO / "demo-notebooks" / "checking.ipynb"), "--out", str(out)],
        env=fresh["env"], capture_output=True, text=True, timeout=1200,
    )
    elapsed = time.monotonic() - started
    assert done.returncode == 0, done.stderr[-4000:]
    notebook = nbformat.read(out, as_version=4)
    nbformat.validate(notebook)
    rust_cells = [c for c in notebook.cells if c.cell_type == "code" and c.source.startswith("%%rust")]
    assert rust_cells, "the demo has Rust cells"
    for cell in rust_cells:
        assert not [o for o in cell.outputs if o.output_type == "error"], cell.outputs
    texts = json.dumps([cell.outputs for cell in rust_cells])
    assert "published table by_hand" in texts, texts[:2000]
    print(f"waypath run with Rust cells on the fresh machine: {elapsed:.1f} s")


def kernel_cell(env, tmp_path, code):
    """Run one cell in a new kernel with `env`; return (reply content, iopub messages)."""
    connection = tmp_path / "kernel.json"
    write_connection_file(str(connection), ip="127.0.0.1", key=b"fresh-machine-key")
    kernel = subprocess.Popen(
        [str(env["WAYPATH"]), "kernel", "--connection-file", str(connection)],
        env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
    )
    client = BlockingKernelClient(connection_file=str(connection))
    client.load_connection_file()
    client.start_channels()
    try:
        client.wait_for_ready(timeout=60)
        outputs = []
        reply = client.execute_interactive(code, timeout=1200, output_hook=outputs.append)
        return reply["content"], outputs
    finally:
        client.stop_channels()
        kernel.kill()
        kernel.wait(timeout=30)


def stderr_text(outputs):
    return "".join(m["content"]["text"] for m in outputs if m["msg_type"] == "stream" and m["content"]["name"] == "stderr")


def test_offline_a_kernel_rust_cell_runs_and_says_what_type_naming_lacks(fresh, tmp_path):
    env = dict(fresh["env"], WAYPATH=str(fresh["waypath"]))
    code = "%%rust\nlet seedlings: Vec<i32> = vec![3, 5, 8];\nseedlings.iter().sum::<i32>()"
    reply, outputs = kernel_cell(env, tmp_path, code)
    assert reply["status"] == "ok", reply
    results = [m["content"]["data"]["text/plain"] for m in outputs if m["msg_type"] == "execute_result"]
    assert results == ["16"], results  # 3 + 5 + 8 = 16 (arithmetic)
    # Without a network the standard library's packages are not there: a
    # note names the command that fetches them, and nothing failed.
    assert "RUSTC_BOOTSTRAP=1 cargo fetch --locked --manifest-path" in stderr_text(outputs), stderr_text(outputs)


def test_with_a_network_the_first_rust_cell_fetches_what_type_naming_needs(fresh, tmp_path):
    env = {k: v for k, v in fresh["env"].items() if k != "CARGO_NET_OFFLINE"}
    env["WAYPATH"] = str(fresh["waypath"])
    code = "%%rust\nlet seedlings = vec![3, 5, 8];\nseedlings.iter().sum::<i32>()"
    reply, outputs = kernel_cell(env, tmp_path, code)
    assert reply["status"] == "ok", (reply, stderr_text(outputs))
    results = [m["content"]["data"]["text/plain"] for m in outputs if m["msg_type"] == "execute_result"]
    assert results == ["16"], results  # 3 + 5 + 8 = 16 (arithmetic)
