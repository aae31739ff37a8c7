"""Round-trip time of one small cell through jupyter_client (a benchmark, not a test).

Prints the median wall time from execute_request to the idle status for a
Waypath `paths` cell, beside ipykernel running `1+1` on the same machine.

    WAYPATH_BIN_DIR=$CARGO_TARGET_DIR/release python tests/python/bench_kernel.py [ROUNDS]
"""
import statistics
import sys
import time

from jupyter_client.manager import KernelManager

sys.path.insert(0, __file__.rsplit("/", 1)[0])
from test_kernel import install_kernelspec  # noqa: E402

SETUP = "graph orchard:\n    rootstock -> girth -> yield\n    rootstock -> yield\n    hidden soil -> girth, yield"
PATHS = "paths from rootstock to yield in orchard given girth"


def median_round_trip(kernel_name, setup, code, rounds):
    km = KernelManager(kernel_name=kernel_name)
    km.start_kernel()
    kc = km.client()
    kc.start_channels()
    try:
        kc.wait_for_ready(timeout=60)
        if setup:
            kc.execute_interactive(setup, timeout=60, output_hook=lambda m: None)
        for _ in range(3):  # warm-up
            kc.execute_interactive(code, timeout=60, output_hook=lambda m: None)
        times = []
        for _ in range(rounds):
            started = time.perf_counter()
            reply = kc.execute_interactive(code, timeout=60, output_hook=lambda m: None)
            times.append(time.perf_counter() - started)
            assert reply["content"]["status"] == "ok", reply["content"]
        return statistics.median(times)
    finally:
        kc.stop_channels()
        km.shutdown_kernel(now=True)


def main():
    rounds = int(sys.argv[1]) if len(sys.argv) > 1 else 50
    install_kernelspec()
    waypath = median_round_trip("waypath", SETUP, PATHS, rounds)
    print(f"waypath  `paths` cell : median {waypath * 1000:7.2f} ms over {rounds} rounds")
    try:
        import ipykernel  # noqa: F401
    except ImportError:
        print("ipykernel  `1+1`      : not installed (pip install ipykernel to compare)")
        return
    python = median_round_trip("python3", None, "1+1", rounds)
    print(f"ipykernel `1+1`       : median {python * 1000:7.2f} ms over {rounds} rounds")


if __name__ == "__main__":
    main()
