"""Time to the first Rust result, and to every later one (a benchmark, not a test).

After the README's builds (`cargo build --release -p waypath-kernel` and
`cargo build --release -p waypath-rust-host`), the one-time work for Rust
cells is the link of the library's dynamic form plus the first compile of
the bridge in a new evcxr build folder. This prints:

* the link alone, forced by removing the linked library first;
* the first Rust cell of a kernel in a new build folder (link already done);
* the median of later small Rust cells.

    WAYPATH_BIN_DIR=$CARGO_TARGET_DIR/release python tests/python/bench_rust_cells.py [ROUNDS]
"""
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from jupyter_client.manager import KernelManager

sys.path.insert(0, __file__.rsplit("/", 1)[0])
from conftest import REPO, bin_dir  # noqa: E402
from test_kernel import install_kernelspec  # noqa: E402


def link_seconds() -> float:
    release = bin_dir()
    for old in [release / "libwaypath_cells.so", release / "deps" / "libwaypath_cells.so"]:
        old.unlink(missing_ok=True)
    env = dict(os.environ, CARGO_TARGET_DIR=str(release.parent))
    started = time.perf_counter()
    subprocess.run(
        ["cargo", "rustc", "-p", "waypath-rust-host", "--lib", "--locked", "--crate-type", "dylib",
         "--release", "--offline", "--", "-C", "prefer-dynamic"],
        cwd=REPO, env=env, check=True, capture_output=True,
    )
    return time.perf_counter() - started


def kernel_cell_times(rounds: int):
    slots = tempfile.mkdtemp(prefix="waypath-bench-evcxr-")
    os.environ["WAYPATH_EVCXR_DIR"] = slots
    km = KernelManager(kernel_name="waypath")
    km.start_kernel()
    kc = km.client()
    kc.start_channels()
    try:
        kc.wait_for_ready(timeout=60)
        started = time.perf_counter()
        reply = kc.execute_interactive("%%rust\n1 + 1", timeout=1200, output_hook=lambda m: None)
        first = time.perf_counter() - started
        assert reply["content"]["status"] == "ok", reply["content"]
        later = []
        for n in range(rounds):
            started = time.perf_counter()
            reply = kc.execute_interactive(f"%%rust\nlet seedlings_{n}: u32 = {n} * 3;", timeout=300,
                                           output_hook=lambda m: None)
            later.append(time.perf_counter() - started)
            assert reply["content"]["status"] == "ok", reply["content"]
        return first, statistics.median(later)
    finally:
        kc.stop_channels()
        km.shutdown_kernel(now=True)
        shutil.rmtree(slots, ignore_errors=True)


def main():
    rounds = int(sys.argv[1]) if len(sys.argv) > 1 else 10
    install_kernelspec()
    link = link_seconds()
    first, later = kernel_cell_times(rounds)
    print(f"link of the library for Rust cells : {link:6.1f} s (once per build)")
    print(f"first Rust cell of a new kernel    : {first:6.1f} s (new build folder; link already done)")
    print(f"later Rust cells                   : {later:6.2f} s median over {rounds}")
    print(f"one-time work in all               : {link + first:6.1f} s")


if __name__ == "__main__":
    main()
