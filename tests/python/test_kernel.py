"""The Waypath Jupyter kernel, driven through the reference client.

Sources of truth: the Jupyter messaging protocol 5.3 as implemented by
jupyter_client (the client, its Session signing) and checked by
jupyter_kernel_test (message schemas and the standard kernel checks); pandas
for the bridge's table values; plain arithmetic for Rust expressions.

The kernel is installed into a temporary prefix (JUPYTER_PATH) pointing at
$WAYPATH_BIN_DIR/waypath. The first Rust cell on a machine compiles the
waypath library for the Rust context (minutes, once); setUpClass warms it.
"""
import os
import signal
import subprocess
import tempfile
import time
from contextlib import contextmanager
from pathlib import Path

import jupyter_kernel_test
import numpy as np
import pandas as pd
from jupyter_client.manager import KernelManager
from jupyter_client.session import Session

from conftest import bin_dir

FIRST_RUST_CELL_TIMEOUT = 1200  # s: the one-time compile of the library for Rust cells
CELL_TIMEOUT = 60
# s: a later Rust cell compiles one small crate; on a loaded 2-core machine,
# or after a panic restarted the Rust context, that can take minutes.
RUST_CELL_TIMEOUT = 300


def waypath() -> str:
    exe = bin_dir() / "waypath"
    assert exe.exists(), f"{exe} missing: build with cargo build --release -p waypath-kernel"
    return str(exe)


_PREFIX = tempfile.mkdtemp(prefix="waypath-kernelspec-")


def install_kernelspec() -> Path:
    """`waypath install --prefix` into a temporary folder, made visible to Jupyter."""
    done = subprocess.run([waypath(), "install", "--prefix", _PREFIX], capture_output=True, text=True, timeout=60)
    assert done.returncode == 0, done.stderr
    share = Path(_PREFIX) / "share" / "jupyter"
    os.environ["JUPYTER_PATH"] = str(share) + os.pathsep + os.environ.get("JUPYTER_PATH", "")
    return share / "kernels" / "waypath"


@contextmanager
def running_kernel(cwd=None):
    """A started Waypath kernel and its client, shut down afterwards."""
    install_kernelspec()
    km = KernelManager(kernel_name="waypath")
    km.start_kernel(cwd=str(cwd) if cwd else None)
    kc = km.client()
    kc.start_channels()
    try:
        kc.wait_for_ready(timeout=60)
        yield km, kc
    finally:
        kc.stop_channels()
        km.shutdown_kernel(now=True)


def run(kc, code, timeout=None):
    """Execute `code`; return (reply content, iopub messages of this request)."""
    if timeout is None:
        timeout = RUST_CELL_TIMEOUT if code.startswith("%%rust") else CELL_TIMEOUT
    msgs = []
    reply = kc.execute_interactive(code, timeout=timeout, output_hook=msgs.append)
    return reply["content"], msgs


def streams(msgs, name):
    return "".join(m["content"]["text"] for m in msgs if m["msg_type"] == "stream" and m["content"]["name"] == name)


class WaypathKernelTests(jupyter_kernel_test.KernelTests):
    """The standard kernel checks of jupyter_kernel_test, every attribute set."""

    kernel_name = "waypath"
    language_name = "waypath"
    file_extension = ".wp"

    code_hello_world = '%%rust\nprintln!("hello, world");'
    code_stderr = '%%rust\neprintln!("a note from a Rust cell");'
    code_generate_error = "paths from rootstock to yield in nowhere"
    # 6 * 7 = 42 (arithmetic), shown by the Rust context's Debug formatting.
    code_execute_result = [{"code": "%%rust\n6 * 7", "result": "42"}]
    code_display_data = [
        # A figure is its own display (front ends show one MIME type per output);
        # the written result is the execute_result.
        {"code": "graph g:\n    a -> b", "mime": "image/svg+xml"},
    ]
    completion_samples = [
        {"text": "pa", "matches": {"paths"}},
        {"text": "im", "matches": {"implications"}},
        {"text": "e", "matches": {"export"}},
        {"text": "%%r", "matches": {"%%rust"}},
        {"text": "paths from root", "matches": {"rootstock"}},
        # connecting words of the README "Statements" forms, offered where the statement allows them
        {"text": "paths from rootstock to yield in orchard gi", "matches": {"given"}},
        {"text": "ask total effect of girth on yield in orchard us", "matches": {"using"}},
        {"text": "table trees fr", "matches": {"from"}},
        {"text": "fit m with nu", "matches": {"nuts"}},
        # body-line words of the README "Statements" examples (`family bernoulli`, `drop missing`,
        # `x = normal(2 + 0.5 * z, 1)`), taken from the block's own parser
        {"text": "model m:\n    yield from girth using trees\n    family bern", "matches": {"bernoulli"}},
        {"text": "table trees from \"orchard.csv\":\n    drop mi", "matches": {"missing"}},
        {"text": "simulate s from orchard rows 50 seed 7:\n    girth = nor", "matches": {"normal("}},
        # graph bodies and symbols: `hidden soil -> girth` (README "Statements", `graph NAME:`)
        {"text": "graph g:\n    hid", "matches": {"hidden"}},
        {"text": "graph g:\n    soil -", "matches": {"->"}},
    ]
    complete_code_samples = ["paths from a to b in g", "graph g:\n    a -> b\n\n", "%%rust\nlet x = 1;"]
    incomplete_code_samples = ["graph g:", "graph g:\n    a -> b\n", "%%rust\nfn grow() {"]
    invalid_code_samples = ["    a -> b", "paths from a to b in g\n    stray"]
    code_inspect_sample = "orchard"
    code_history_pattern = "*6 * 7*"
    supported_history_operations = ("tail", "range", "search")

    @classmethod
    def setUpClass(cls):
        install_kernelspec()
        super().setUpClass()
        reply = cls.kc.execute_interactive("%%rust\n1", timeout=FIRST_RUST_CELL_TIMEOUT, output_hook=lambda m: None)
        assert reply["content"]["status"] == "ok", reply["content"]
        graph = "graph orchard:\n    rootstock -> girth -> yield\n    rootstock -> yield"
        reply = cls.kc.execute_interactive(graph, timeout=CELL_TIMEOUT, output_hook=lambda m: None)
        assert reply["content"]["status"] == "ok", reply["content"]


def test_kernelspec_points_at_this_program_with_logos():
    spec_dir = install_kernelspec()
    import json
    spec = json.loads((spec_dir / "kernel.json").read_text())
    assert spec["argv"] == [str(Path(waypath()).resolve()), "kernel", "--connection-file", "{connection_file}"]
    assert (spec["display_name"], spec["language"], spec["interrupt_mode"]) == ("Waypath", "waypath", "message")
    import struct
    import zlib
    for size in (32, 64):
        data = (spec_dir / f"logo-{size}x{size}.png").read_bytes()
        # PNG structure per the PNG specification (ISO/IEC 15948): signature,
        # IHDR width/height, chunk CRCs checked with zlib.crc32, pixels inflated
        # with zlib.decompress (size*(1 + 4*size) bytes for 8-bit RGBA).
        assert data[:8] == b"\x89PNG\r\n\x1a\n"
        pos, chunks = 8, {}
        while pos < len(data):
            (length,) = struct.unpack(">I", data[pos:pos + 4])
            kind, body = data[pos + 4:pos + 8], data[pos + 8:pos + 8 + length]
            (crc,) = struct.unpack(">I", data[pos + 8 + length:pos + 12 + length])
            assert zlib.crc32(kind + body) == crc
            chunks[kind] = body
            pos += 12 + length
        assert struct.unpack(">II", chunks[b"IHDR"][:8]) == (size, size)
        assert len(zlib.decompress(chunks[b"IDAT"])) == size * (1 + 4 * size)
    import xml.etree.ElementTree as ET
    svg = ET.fromstring((spec_dir / "logo-svg.svg").read_text())  # well-formed XML
    assert svg.tag.endswith("svg")


def test_message_signed_with_another_key_gets_no_reply_and_runs_nothing():
    with running_kernel() as (km, kc):
        # A client Session with a different key signs the same request wrongly
        # (jupyter_client.session.Session, HMAC-SHA256).
        forger = Session(key=b"not-the-connection-key", signature_scheme="hmac-sha256")
        forged = forger.msg("execute_request", {"code": "graph leak:\n    a -> b", "silent": False,
                                                 "store_history": True, "user_expressions": {},
                                                 "allow_stdin": False, "stop_on_error": True})
        forger.send(kc.shell_channel.socket, forged)
        deadline = time.time() + 3
        while time.time() < deadline:
            try:
                msg = kc.get_shell_msg(timeout=0.2)
            except Exception:
                continue
            assert msg["parent_header"].get("msg_id") != forged["header"]["msg_id"], "forged request was answered"
        iopub = []
        while True:
            try:
                iopub.append(kc.get_iopub_msg(timeout=0.2))
            except Exception:
                break
        assert all(m["parent_header"].get("msg_id") != forged["header"]["msg_id"] for m in iopub)
        # The graph the forged cell would have made does not exist.
        kc.inspect("leak", 4)
        assert kc.get_shell_msg(timeout=10)["content"]["found"] is False
        reply, _ = run(kc, "graph kept:\n    a -> b")
        assert reply["status"] == "ok"


LONG_RUST_CELL = '%%rust\nprintln!("looping");\nloop { std::thread::sleep(std::time::Duration::from_millis(5)); }'


def iopub_of(kc, msg_id, timeout):
    """IOPub messages of request `msg_id`, as they come, until `timeout` s have passed."""
    deadline = time.time() + timeout
    while time.time() < deadline:
        try:
            m = kc.get_iopub_msg(timeout=1)
        except Exception:
            continue
        if m["parent_header"].get("msg_id") == msg_id:
            yield m


def wait_for_stream(kc, msg_id, marker, timeout=120):
    """Read IOPub until a stream of request `msg_id` contains `marker`; return the stream texts."""
    texts = []
    for m in iopub_of(kc, msg_id, timeout):
        if m["msg_type"] == "stream":
            texts.append(m["content"]["text"])
            if marker in m["content"]["text"]:
                return texts
    raise AssertionError(f"no output containing {marker!r} within {timeout} s")


def wait_for_progress_updates(kc, msg_id, timeout=120):
    """Read IOPub until request `msg_id` has shown a progress display and updated it; return its id."""
    shown = None
    for m in iopub_of(kc, msg_id, timeout):
        display_id = m["content"].get("transient", {}).get("display_id")
        if m["msg_type"] == "display_data" and display_id and "fit m" in m["content"]["data"]["text/plain"]:
            shown = display_id
        elif m["msg_type"] == "update_display_data" and shown and display_id == shown:
            return shown
    raise AssertionError(f"no updating progress display within {timeout} s")


def last_update_of(kc, msg_id, display_id, quiet=2.0):
    """The content of the last update_display_data for `display_id` once IOPub goes quiet."""
    last = None
    while True:
        try:
            m = kc.get_iopub_msg(timeout=quiet)
        except Exception:
            return last
        if (m["parent_header"].get("msg_id") == msg_id and m["msg_type"] == "update_display_data"
                and m["content"]["transient"]["display_id"] == display_id):
            last = m["content"]


def reply_time(kc, msg_id, started):
    while True:
        reply = kc.get_shell_msg(timeout=10)
        if reply["parent_header"].get("msg_id") == msg_id:
            return reply["content"], time.monotonic() - started


def interrupted_within_a_second(km, kc, how):
    run(kc, "%%rust\n0", timeout=FIRST_RUST_CELL_TIMEOUT)  # context started
    msg_id = kc.execute(LONG_RUST_CELL)
    wait_for_stream(kc, msg_id, "looping")  # compiled, and the loop is running
    started = time.monotonic()
    how()
    return reply_time(kc, msg_id, started)


def test_interrupt_message_stops_a_running_cell_and_keeps_the_session():
    with running_kernel() as (km, kc):
        assert run(kc, "graph orchard:\n    rootstock -> yield")[0]["status"] == "ok"
        reply, elapsed = interrupted_within_a_second(km, kc, km.interrupt_kernel)
        assert reply["status"] == "error" and "interrupted" in reply["evalue"]
        assert elapsed < 1.0, f"interrupt took {elapsed:.2f} s"
        # The declarative session survives, and Rust cells work again.
        assert run(kc, "paths from rootstock to yield in orchard")[0]["status"] == "ok"
        reply, msgs = run(kc, "%%rust\n2 + 3")
        assert reply["status"] == "ok"
        # 2 + 3 = 5 (arithmetic)
        assert any(m["msg_type"] == "execute_result" and m["content"]["data"]["text/plain"] == "5" for m in msgs)


def test_an_interrupt_names_the_rust_variables_it_cost():
    with running_kernel() as (km, kc):
        assert run(kc, "%%rust\nlet kept_seed: u64 = 7;", timeout=FIRST_RUST_CELL_TIMEOUT)[0]["status"] == "ok"
        msg_id = kc.execute(LONG_RUST_CELL)
        wait_for_stream(kc, msg_id, "looping")
        km.interrupt_kernel()
        reply, _ = reply_time(kc, msg_id, time.monotonic())
        assert reply["status"] == "error" and "interrupted" in reply["evalue"], reply
        # The message lists what the restarted context no longer has.
        assert "kept_seed: u64" in reply["evalue"], reply["evalue"]
        reply, _ = run(kc, "%%rust\nkept_seed")
        assert reply["status"] == "error", "the variable is really gone"


def test_inspect_describes_a_rust_variable_with_type_and_value():
    with running_kernel() as (km, kc):
        code = "%%rust\nlet sapling_heights: Vec<f64> = vec![1.5, 2.25];"
        assert run(kc, code, timeout=FIRST_RUST_CELL_TIMEOUT)[0]["status"] == "ok"
        probe = "%%rust\nsapling_heights"
        kc.inspect(probe, len(probe))
        reply = kc.get_shell_msg(timeout=RUST_CELL_TIMEOUT)["content"]
        assert reply["found"] is True, reply
        # Rust's Debug form of a Vec<f64> (the standard library's formatting).
        assert reply["data"]["text/plain"] == "sapling_heights: Vec<f64> = [1.5, 2.25]", reply


def test_sigint_stops_a_running_cell():
    with running_kernel() as (km, kc):
        pid = km.provisioner.process.pid
        reply, elapsed = interrupted_within_a_second(km, kc, lambda: os.kill(pid, signal.SIGINT))
        assert reply["status"] == "error"
        assert elapsed < 1.0, f"SIGINT took {elapsed:.2f} s"
        assert run(kc, "%%rust\n1 + 1")[0]["status"] == "ok"


def orchard_csv(folder: Path) -> pd.DataFrame:
    """An invented orchard (fixed seed): girth depends on rootstock."""
    rng = np.random.default_rng(20240611)
    stock = rng.choice(["dwarf", "standard"], size=40)
    girth = np.round(24.0 + 5.0 * (stock == "standard") + rng.normal(0.0, 3.0, size=40), 3)
    trees = pd.DataFrame({"rootstock": stock, "girth": girth})
    trees.to_csv(folder / "trees.csv", index=False)
    return trees


TREES_CELL = 'table trees from "trees.csv":\n    rootstock: category(dwarf, standard)\n    girth: real'


def test_interrupt_stops_a_long_fit_within_a_second(tmp_path):
    orchard_csv(tmp_path)
    with running_kernel(cwd=tmp_path) as (km, kc):
        assert run(kc, TREES_CELL)[0]["status"] == "ok"
        assert run(kc, "model m:\n    girth from rootstock using trees")[0]["status"] == "ok"
        msg_id = kc.execute("fit m with nuts draws 1000000 seed 7")
        # Progress is one display updated in place (Jupyter messaging spec 5.x:
        # display_data with transient.display_id, then update_display_data).
        display_id = wait_for_progress_updates(kc, msg_id)
        started = time.monotonic()
        km.interrupt_kernel()
        reply, elapsed = reply_time(kc, msg_id, started)
        assert reply["status"] == "error" and "interrupted" in reply["evalue"], reply
        assert elapsed < 1.0, f"interrupt took {elapsed:.2f} s"
        # When the statement ends the progress display is emptied.
        last = last_update_of(kc, msg_id, display_id)
        assert last["data"]["text/plain"] == "", last
        # The session kept the table and the model: a short fit now works.
        reply, _ = run(kc, "fit m with laplace draws 200 seed 7")
        assert reply["status"] == "ok", reply
        # The fit's draws reach Rust cells: one row per requested draw, led by
        # the chain and draw columns of the draws CSV layout.
        code = '%%rust\nlet d = wp_draws("m");\nformat!("{} {}", d.nrows(), d.column_names()[..2].join(","))'
        reply, msgs = run(kc, code, timeout=FIRST_RUST_CELL_TIMEOUT)
        assert reply["status"] == "ok", reply
        results = [m["content"]["data"]["text/plain"] for m in msgs if m["msg_type"] == "execute_result"]
        assert results == ['"200 chain,draw"'], results


def test_panic_and_compile_error_become_error_replies():
    with running_kernel() as (km, kc):
        run(kc, "%%rust\n0", timeout=FIRST_RUST_CELL_TIMEOUT)
        reply, _ = run(kc, '%%rust\npanic!("sapling count went negative");')
        assert reply["status"] == "error" and "sapling count went negative" in reply["evalue"]
        reply, _ = run(kc, '%%rust\nlet height: u32 = "tall";')
        assert reply["status"] == "error"
        # The mismatch is on the cell's second line, at the string literal (column 19).
        assert "cell line 2, column 19" in reply["evalue"], reply["evalue"]
        # The compiler's own expected/found note survives (rustc's E0308 label).
        assert "expected `u32`, found `&str`" in reply["evalue"], reply["evalue"]
        reply, _ = run(kc, "%%rust\n40 + 2")
        assert reply["status"] == "ok"
        reply, _ = run(kc, "ask total effect of a on b in missing_graph")
        assert reply["status"] == "error" and "missing_graph" in reply["evalue"]
        assert run(kc, "graph g:\n    a -> b")[0]["status"] == "ok"
        # stop_on_error (Jupyter messaging, execute_request): cells queued behind a
        # failing one are answered "aborted" and not run.
        failing = kc.execute('%%rust\nstd::thread::sleep(std::time::Duration::from_secs(2));\npanic!("late failure");')
        queued = [kc.execute("graph skipped:\n    a -> b"), kc.execute("graph skipped_too:\n    a -> b")]
        replies = {}
        while len(replies) < 3:
            msg = kc.get_shell_msg(timeout=RUST_CELL_TIMEOUT)
            replies[msg["parent_header"]["msg_id"]] = msg["content"]["status"]
        assert replies == {failing: "error", queued[0]: "aborted", queued[1]: "aborted"}
        kc.inspect("skipped", 7)
        assert kc.get_shell_msg(timeout=10)["content"]["found"] is False
        assert run(kc, "graph after:\n    a -> b")[0]["status"] == "ok"


def test_rust_cells_read_session_tables_and_publish_new_ones(tmp_path):
    trees = orchard_csv(tmp_path)
    with running_kernel(cwd=tmp_path) as (km, kc):
        reply, _ = run(kc, TREES_CELL)
        assert reply["status"] == "ok", reply
        code = (
            "%%rust\n"
            'let t = wp_table("trees");\n'
            'let girth = t.column("girth").unwrap().data.as_reals().unwrap();\n'
            'println!("rows {} mean {:.6}", t.nrows(), girth.iter().sum::<f64>() / girth.len() as f64);'
        )
        reply, msgs = run(kc, code, timeout=FIRST_RUST_CELL_TIMEOUT)
        assert reply["status"] == "ok", reply
        # Row count and mean as pandas reads the same file.
        assert f"rows {len(trees)} mean {trees['girth'].mean():.6f}" in streams(msgs, "stdout")
        publish = (
            "%%rust\n"
            "use waypath::table::{Column, ColumnData, Table};\n"
            "let seedlings: Vec<f64> = (0..5).map(|i| 10.0 + 2.5 * i as f64).collect();\n"
            'let fake = Table::from_columns("fake", vec![Column::new("height", ColumnData::Real(seedlings))]).unwrap();\n'
            'wp_publish("fake", &fake);'
        )
        reply, _ = run(kc, publish)
        assert reply["status"] == "ok", reply
        kc.inspect("fake", 4)
        found = kc.get_shell_msg(timeout=10)["content"]
        assert found["found"] is True
        # 5 rows of 10, 12.5, …, 20 were published; the session now describes them.
        assert "5 rows" in found["data"]["text/plain"] and "height: real" in found["data"]["text/plain"]
        reply, msgs = run(kc, '%%rust\nlet h = wp_table("fake");\nh.column("height").unwrap().data.as_reals().unwrap().iter().sum::<f64>()')
        # 10 + 12.5 + 15 + 17.5 + 20 = 75 (arithmetic)
        assert any(m["msg_type"] == "execute_result" and m["content"]["data"]["text/plain"] == "75.0" for m in msgs)
