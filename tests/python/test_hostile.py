"""Issue 12's hostile corpus: nothing a cell, a file or a packet can send
kills the kernel or loses a run.

Every case is sent through the reference client (jupyter_client: its
KernelManager, BlockingKernelClient and Session signing) or, for what a
client would never send, through pyzmq and plain TCP sockets. After each
case the checks are the issue's: the kernel process is alive, the reply is
a clear error (one line, naming the cell line where there is one) or a
result, and the next cell works. Headless runs are checked with nbformat's
validator and Python's html.parser.

Wire formats used to build hostile input: ZMTP 3.0 (rfc.zeromq.org/spec/23)
for raw frames; the Jupyter messaging protocol 5.3 for messages.
"""
import json
import os
import random
import re
import socket
import struct
import subprocess
import tempfile
import time
from contextlib import contextmanager
from html.parser import HTMLParser
from pathlib import Path

import nbformat
import pytest
import zmq
from jupyter_client.manager import KernelManager
from jupyter_client.session import Session

from test_kernel import install_kernelspec, waypath

# s: a hostile cell either answers or is interrupted after this long.
CELL_LIMIT = 20
# s: how long an interrupted cell may take to end (the limit is 1 s;
# a loaded 2-core machine gets slack).
INTERRUPT_LIMIT = 10

ORCHARD_CSV = "rootstock,girth,yield\n" + "".join(
    # Invented orchard rows: girth in cm, yield in kg.
    f"{'dwarf' if i % 2 else 'standard'},{20 + (i * 7) % 13},{25 + (i * 11) % 17}\n" for i in range(40)
)

SETUP = [
    'table trees from "trees.csv":\n    rootstock: category(dwarf, standard)',
    "graph orchard:\n    rootstock -> girth -> yield\n    rootstock -> yield",
    "model m:\n    yield from girth using trees",
    "fit m with laplace seed 3",
]

NEXT_CELL = "graph after:\n    soil -> girth"


@contextmanager
def hostile_kernel():
    """A Waypath kernel in a scratch folder holding the orchard table."""
    install_kernelspec()
    work = Path(tempfile.mkdtemp(prefix="waypath-hostile-"))
    (work / "trees.csv").write_text(ORCHARD_CSV)
    km = KernelManager(kernel_name="waypath")
    km.start_kernel(cwd=str(work))
    kc = km.client()
    kc.start_channels()
    try:
        kc.wait_for_ready(timeout=60)
        for cell in SETUP:
            reply = execute(km, kc, cell)
            assert reply["status"] == "ok", reply
        yield km, kc, work
    finally:
        kc.stop_channels()
        km.shutdown_kernel(now=True)


@pytest.fixture(scope="module")
def kernel():
    with hostile_kernel() as k:
        yield k


@pytest.fixture
def own_kernel():
    """A kernel for one case, so that a case that keeps its kernel busy (or
    ends it) is reported alone."""
    with hostile_kernel() as k:
        yield k


def execute(km, kc, code, limit=CELL_LIMIT):
    """Run `code`; interrupt it if no reply came within `limit` s. Returns the
    reply content (with "interrupted_after" set when it was interrupted)."""
    msg_id = kc.execute(code, stop_on_error=False)
    deadline = time.time() + limit
    interrupted = False
    while True:
        assert km.is_alive(), f"the kernel ended while running {code[:80]!r}"
        try:
            msg = kc.get_shell_msg(timeout=0.5)
        except Exception:
            if not interrupted and time.time() > deadline:
                km.interrupt_kernel()
                interrupted = True
                deadline = time.time() + INTERRUPT_LIMIT
            elif interrupted and time.time() > deadline:
                raise AssertionError(f"no reply {INTERRUPT_LIMIT} s after an interrupt: {code[:80]!r}")
            continue
        if msg["parent_header"].get("msg_id") == msg_id:
            content = dict(msg["content"])
            if interrupted:
                content["interrupted_after"] = limit
            return content


def drain_iopub(kc):
    while True:
        try:
            kc.get_iopub_msg(timeout=0.05)
        except Exception:
            return


def assert_clear_error(reply, code):
    """A refusal is one line that names where it is and is not a crash."""
    assert reply["status"] == "error", reply
    text = reply["evalue"]
    assert "\n" not in text.strip(), f"more than one line: {text!r}"
    assert "internal error" not in text and "panicked" not in text, text
    assert text.startswith("cell "), text
    return text


def assert_still_serving(km, kc):
    assert km.is_alive(), "the kernel process ended"
    reply = execute(km, kc, NEXT_CELL)
    assert reply["status"] == "ok", reply
    drain_iopub(kc)


def nested(depth, inner, open_="(", close=")"):
    return open_ * depth + inner + close * depth


# --- cells from the issue ----------------------------------------------------

# Deep input: the library limits the depth of its parsers; whatever those
# limits accept must not overflow the cell thread's stack. The answer is a
# result or a clear error, never a dead kernel.
DEEP_CELLS = {
    "keep where with 20,000 nested parentheses":
        'table deep from "trees.csv":\n    keep where ' + nested(20_000, "girth > 0"),
    "a mechanism with 200,000 unary minus signs":
        "simulate deep_sim from orchard rows 5 seed 1:\n    rootstock = category(dwarf 0.5, standard 0.5)\n"
        "    girth = normal(" + "-" * 200_000 + "1, 1)\n    yield = normal(girth, 1)",
    "a DOT file with 200,000 nested braces": 'graph deep_dot from "deep.dot"',
}


@pytest.mark.parametrize("case", sorted(DEEP_CELLS))
def test_deep_input_answers_and_the_kernel_lives(kernel, case):
    km, kc, work = kernel
    (work / "deep.dot").write_text("digraph g " + nested(200_000, "a -> b;", "{", "}") + "\n")
    reply = execute(km, kc, DEEP_CELLS[case])
    assert "interrupted_after" not in reply, f"{case} ran past {CELL_LIMIT} s"
    if reply["status"] == "error":
        assert_clear_error(reply, DEEP_CELLS[case])
    assert_still_serving(km, kc)


# Sizes with no upper bound and out-of-range numbers (issue 12, section 2):
# each must end as a clear error, by refusal or at the latest by interrupt.
SIZE_CELLS = {
    "calibrate with 10^10 reps": "calibrate m reps 10000000000",
    "simulate 10^10 rows": "simulate huge from orchard rows 10000000000 seed 1:\n"
        "    rootstock = category(dwarf 0.5, standard 0.5)\n    girth = normal(20, 2)\n    yield = normal(girth, 1)",
    "a Laplace fit with 10^10 draws": "fit m with laplace draws 10000000000",
    "a spline with 10^10 functions": "model sp:\n    yield from spline(girth, 10000000000) using trees",
    "NUTS with 10^10 chains": "fit m with nuts chains 10000000000",
    "trajectory doublings 2^32 + 1": "fit m with nuts doublings 4294967297",
}


# The refusals come from the library's side of issue 12 (size limits,
# interrupt in library loops, range checks); before it these cases ended the
# kernel or passed silently.
@pytest.mark.parametrize("case", sorted(SIZE_CELLS))
def test_unbounded_sizes_end_as_clear_errors(own_kernel, case):
    km, kc, _ = own_kernel
    reply = execute(km, kc, SIZE_CELLS[case])
    assert_clear_error(reply, SIZE_CELLS[case])
    assert_still_serving(km, kc)


def test_values_near_1e200_give_a_clear_error_or_a_fit(own_kernel):
    km, kc, work = own_kernel
    rows = "".join(f"{x * 1e200:.6e},{(-1) ** x * 1e200:.6e}\n" for x in range(1, 21))
    (work / "huge.csv").write_text("reach,flow\n" + rows)
    reply = execute(km, kc, 'table huge from "huge.csv"\nmodel hm:\n    flow from reach using huge\nfit hm with laplace seed 2')
    if reply["status"] == "error":
        assert_clear_error(reply, "fit hm")
    assert_still_serving(km, kc)


# --- interrupt stops every long statement (issue 12, section 4) ------------

LONG_CELLS = {
    # Honoured before issue 12: the control case.
    "NUTS sampling": "fit m with nuts draws 2000000 seed 4",
    "calibrate reps": "calibrate m reps 1000000 seed 2 with laplace",
}


@pytest.mark.parametrize("case", sorted(LONG_CELLS))
def test_interrupt_ends_a_long_statement_and_keeps_the_session(own_kernel, case):
    km, kc, _ = own_kernel
    code = LONG_CELLS[case]
    msg_id = kc.execute(code, stop_on_error=False)
    time.sleep(1.5)  # running by now (each runs for far longer without an interrupt)
    sent = time.time()
    km.interrupt_kernel()
    reply = None
    while reply is None and time.time() - sent < INTERRUPT_LIMIT:
        try:
            msg = kc.get_shell_msg(timeout=0.2)
        except Exception:
            continue
        if msg["parent_header"].get("msg_id") == msg_id:
            reply = msg["content"]
    assert reply is not None, f"{case}: no reply {INTERRUPT_LIMIT} s after the interrupt"
    # The issue asks for 1 s; a loaded 2-core machine gets 3.
    assert time.time() - sent < 3, f"{case}: the interrupt took {time.time() - sent:.1f} s"
    assert "interrupt" in assert_clear_error(reply, code).lower()
    reply = execute(km, kc, "show trees")  # the session (its table) is kept
    assert reply["status"] == "ok", reply
    assert_still_serving(km, kc)


def test_a_csv_with_100000_columns_loads_and_its_summary_stays_readable(own_kernel):
    # Issue 12, section 6: the duplicate-header check was quadratic (36 s), and so
    # were the summary's per-column lookups (17 s in CI). The written summary lists
    # the first columns and says how many more there are; the JSON lists them all.
    # The 60 s bound only guards against a hang on a loaded machine; speed goals
    # live in the benchmarks.
    km, kc, work = own_kernel
    n = 100_000
    (work / "wide.csv").write_text(",".join(f"flow{i}" for i in range(n)) + "\n" + ",".join(["1"] * n) + "\n")
    drain_iopub(kc)
    started = time.time()
    msg_id = kc.execute('table wide from "wide.csv"')
    outputs, idle = [], False
    while not idle:
        assert time.time() - started < 60, "the table cell did not finish within 60 s"
        try:
            msg = kc.get_iopub_msg(timeout=1)
        except Exception:
            continue
        if msg["parent_header"].get("msg_id") != msg_id:
            continue
        if msg["msg_type"] in ("display_data", "execute_result"):
            outputs.append(msg["content"]["data"])
        elif msg["msg_type"] == "error":
            raise AssertionError(msg["content"])
        idle = msg["msg_type"] == "status" and msg["content"]["execution_state"] == "idle"
    data = next(d for d in outputs if "text/plain" in d)
    text = data["text/plain"]
    assert re.search(r"\bflow199\b", text) and not re.search(r"\bflow200\b", text), text[-400:]
    assert f"{n - 200} more" in text, text[-400:]
    listed = [c["name"] for c in data["application/vnd.waypath.result+json"]["columns"]]
    assert listed == [f"flow{i}" for i in range(n)]
    assert_still_serving(km, kc)


def test_a_csv_with_a_repeated_header_is_a_clear_error(kernel):
    km, kc, work = kernel
    (work / "twice.csv").write_text("flow,depth,flow\n1,2,3\n")
    assert "flow" in assert_clear_error(execute(km, kc, 'table twice from "twice.csv"'), "table twice")
    assert_still_serving(km, kc)


# --- completion, inspection and history with hostile arguments --------------

def shell_request(kc, msg_type, content):
    msg = kc.session.msg(msg_type, content)
    kc.shell_channel.send(msg)
    deadline = time.time() + 30
    while time.time() < deadline:
        reply = kc.get_shell_msg(timeout=30)
        if reply["parent_header"].get("msg_id") == msg["header"]["msg_id"]:
            return reply
    raise AssertionError(f"no {msg_type} reply")


HOSTILE_REQUESTS = [
    ("complete_request", {"code": "pa", "cursor_pos": 2**63}),
    ("complete_request", {"code": "graph g:\n    a -> ", "cursor_pos": -5}),
    ("complete_request", {"code": 12, "cursor_pos": "x"}),
    ("complete_request", {"code": "é" * 10_000 + "\u0000\ud7ff", "cursor_pos": 5_000}),
    ("complete_request", {"code": "table t from \"x.csv\":\n    keep where " + "(" * 50_000, "cursor_pos": 50_040}),
    ("inspect_request", {"code": "trees", "cursor_pos": 2**64 - 1, "detail_level": 9}),
    ("inspect_request", {"code": None}),
    ("is_complete_request", {"code": "graph g:" + "\n    a -> b" * 10_000}),
    ("history_request", {"hist_access_type": "range", "start": 2**63, "stop": -1, "output": True, "raw": True}),
    ("history_request", {"hist_access_type": "search", "pattern": "*" * 5_000 + "?", "n": 2**62, "unique": True}),
    ("history_request", {"hist_access_type": "tail", "n": -3}),
]


@pytest.mark.parametrize("index", range(len(HOSTILE_REQUESTS)))
def test_completion_inspection_and_history_answer_hostile_arguments(kernel, index):
    km, kc, _ = kernel
    msg_type, content = HOSTILE_REQUESTS[index]
    reply = shell_request(kc, msg_type, content)
    assert reply["msg_type"] == msg_type.replace("_request", "_reply")
    # Messaging 5.3: is_complete answers complete/incomplete/invalid/unknown.
    allowed = ("complete", "incomplete", "invalid", "unknown") if msg_type == "is_complete_request" else ("ok", "error")
    assert reply["content"]["status"] in allowed, reply["content"]
    assert_still_serving(km, kc)


# --- generated input ---------------------------------------------------------

WORDS = ["table", "graph", "ask", "total", "direct", "effect", "of", "on", "in", "paths", "from", "to", "given",
         "implications", "model", "fit", "with", "nuts", "laplace", "show", "export", "draws", "plot", "save",
         "figure", "contrast", "vs", "at", "along", "by", "over", "rows", "compare", "routes", "using", "joint",
         "intervene", "set", "watch", "simulate", "seed", "recover", "calibrate", "reps", "prior", "check", "sets",
         "trees", "orchard", "m", "girth", "yield", "rootstock", "dwarf", "standard", "->", ":", ",", "(", ")",
         "=", "+", "-", "*", "normal(", "category(", "spline(", "\"trees.csv\"", "\"x.dot\"", "0", "1", "-1",
         "1e308", "nan", "inf", "99999999999999999999", "chains", "settle", "doublings", "acceptance", "warmup", "\u00e9t\u00e9",
         "%%rust"]


def random_cell(rng):
    lines = []
    for _ in range(rng.randint(1, 4)):
        indent = "    " if lines and rng.random() < 0.5 else ""
        lines.append(indent + " ".join(rng.choice(WORDS) for _ in range(rng.randint(1, 9))))
    cell = "\n".join(lines)
    # A Rust cell would compile (minutes); the corpus is about declarative cells.
    return cell.replace("%%rust", "%%")


def test_random_statements(kernel):
    km, kc, _ = kernel
    rng = random.Random(12)
    for _ in range(150):
        code = random_cell(rng)
        reply = execute(km, kc, code)
        assert reply["status"] in ("ok", "error"), (code, reply)
        if reply["status"] == "error":
            assert "internal error" not in reply["evalue"], (code, reply["evalue"])
        assert km.is_alive(), code
    drain_iopub(kc)
    assert_still_serving(km, kc)


@pytest.mark.parametrize("kind", ["csv", "dot"])
def test_random_bytes_as_data_files(kernel, kind):
    km, kc, work = kernel
    rng = random.Random(1200 + len(kind))
    for i in range(25):
        size = rng.choice([0, 1, 7, 100, 5_000, 200_000])
        data = bytes(rng.getrandbits(8) for _ in range(size))
        if i % 3 == 0:
            # Mostly text, with the file format's own punctuation.
            alphabet = b"a,b,c\n\"\r\t 0123456789.-e{}[];=->digraph" if kind == "csv" else b"digraph{}[];=->\"\n abc/*"
            data = bytes(rng.choice(alphabet) for _ in range(size))
        (work / f"random.{kind}").write_bytes(data)
        code = 'table rt from "random.csv"' if kind == "csv" else 'graph rg from "random.dot"'
        reply = execute(km, kc, code)
        if reply["status"] == "error":
            assert_clear_error(reply, code)
        assert km.is_alive(), f"{kind} case {i}"
    assert_still_serving(km, kc)


# --- the transport -----------------------------------------------------------

def zmtp_greeting():
    # ZMTP 3.0 greeting: signature, version 3.0, mechanism NULL, as-server 0, filler.
    return b"\xff" + b"\x00" * 8 + b"\x7f" + b"\x03\x00" + b"NULL".ljust(20, b"\x00") + b"\x00" + b"\x00" * 31


def ports_of(km):
    info = km.get_connection_info()
    return {name: info[f"{name}_port"] for name in ("shell", "control", "stdin", "iopub", "hb")}


def test_seventy_three_bytes_to_every_socket(kernel):
    km, kc, _ = kernel
    for name, port in ports_of(km).items():
        # 64-byte greeting + a long frame header announcing 2^62 bytes.
        attack = zmtp_greeting() + b"\x02" + struct.pack(">Q", 2**62)
        assert len(attack) == 73
        with socket.create_connection(("127.0.0.1", port), timeout=10) as s:
            s.sendall(attack)
            time.sleep(0.2)
        assert km.is_alive(), f"73 bytes on {name} ended the kernel"
    assert_still_serving(km, kc)


def test_random_frames_to_every_socket(kernel):
    km, kc, _ = kernel
    rng = random.Random(73)
    ctx = zmq.Context.instance()
    kinds = {"shell": zmq.DEALER, "control": zmq.DEALER, "stdin": zmq.DEALER, "hb": zmq.REQ, "iopub": zmq.SUB}
    for name, port in ports_of(km).items():
        for round_ in range(30):
            sock = ctx.socket(kinds[name])
            sock.setsockopt(zmq.LINGER, 0)
            sock.connect(f"tcp://127.0.0.1:{port}")
            frames = [bytes(rng.getrandbits(8) for _ in range(rng.choice([0, 1, 9, 64, 3000]))) for _ in range(rng.randint(1, 8))]
            if round_ % 2 == 0:
                # Shaped like a Jupyter message: delimiter, a signature, JSON-ish frames.
                frames = [b"<IDS|MSG>", rng.choice([b"", b"00" * 32, frames[0]]), b"{", b"{}", b"[1,", b'{"code":'] + frames
            try:
                if name == "iopub":
                    sock.send(b"\x01" + frames[0])  # a subscription message
                else:
                    sock.send_multipart(frames, flags=zmq.NOBLOCK)
            except zmq.ZMQError:
                pass
            sock.close()
        # Raw bytes, no ZMTP at all.
        for size in (1, 64, 4096):
            with socket.create_connection(("127.0.0.1", port), timeout=10) as s:
                s.sendall(bytes(rng.getrandbits(8) for _ in range(size)))
        assert km.is_alive(), f"random frames on {name} ended the kernel"
    time.sleep(0.5)
    assert_still_serving(km, kc)


def test_a_replayed_request_is_answered_once(kernel):
    km, kc, _ = kernel
    drain_iopub(kc)
    # jupyter_client's Session signs; the same signed frames are sent twice.
    session = kc.session
    msg = session.msg("execute_request", {"code": "graph replayed:\n    a -> b", "silent": False, "store_history": True,
                                          "user_expressions": {}, "allow_stdin": False, "stop_on_error": True})
    frames = session.serialize(msg)
    socket_ = kc.shell_channel.socket
    socket_.send_multipart(frames)
    first = kc.get_shell_msg(timeout=30)
    assert first["parent_header"]["msg_id"] == msg["header"]["msg_id"]
    socket_.send_multipart(frames)
    with pytest.raises(Exception):
        kc.get_shell_msg(timeout=2)
    assert_still_serving(km, kc)


def test_an_empty_key_is_warned_about_once(tmp_path):
    # A connection file with an empty key (authentication off, allowed by the
    # protocol); jupyter_client's Session with key b"" signs nothing.
    ports = []
    for _ in range(5):
        with socket.socket() as s:
            s.bind(("127.0.0.1", 0))
            ports.append(s.getsockname()[1])
    info = {"transport": "tcp", "ip": "127.0.0.1", "key": "", "signature_scheme": "hmac-sha256",
            "shell_port": ports[0], "control_port": ports[1], "stdin_port": ports[2], "iopub_port": ports[3],
            "hb_port": ports[4]}
    conn = tmp_path / "kernel.json"
    conn.write_text(json.dumps(info))
    log = tmp_path / "stderr.txt"
    with open(log, "w") as err:
        proc = subprocess.Popen([waypath(), "kernel", "--connection-file", str(conn)], stderr=err, cwd=tmp_path)
    try:
        from jupyter_client.blocking import BlockingKernelClient
        kc = BlockingKernelClient()
        kc.load_connection_info(info)
        kc.session = Session(key=b"")
        kc.start_channels()
        kc.wait_for_ready(timeout=60)
        for _ in range(3):
            reply = kc.execute_interactive("graph open_door:\n    a -> b", timeout=30, output_hook=lambda m: None)
            assert reply["content"]["status"] == "ok"
        kc.stop_channels()
    finally:
        proc.kill()
        proc.wait()
    text = log.read_text()
    assert text.count("key is empty") == 1, text
    assert "not authenticated" in text


# --- the soak check ----------------------------------------------------------

def rss_kib(pid):
    # /proc/PID/status, VmRSS in kB (proc(5)).
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1])
    raise AssertionError("no VmRSS")


def test_soak_of_2000_mixed_requests_keeps_memory_bounded():
    with hostile_kernel() as (km, kc, _):
        pid = km.provisioner.process.pid
        rng = random.Random(2000)
        ctx = zmq.Context.instance()
        raw = ctx.socket(zmq.DEALER)
        raw.setsockopt(zmq.LINGER, 0)
        raw.connect(f"tcp://127.0.0.1:{ports_of(km)['shell']}")
        cells = ["graph g{i}:\n    a -> b -> c", "paths from rootstock to yield in orchard", "show trees",
                 "nonsense {i}", "ask total effect of girth on yield in orchard", "keep"]
        baseline = None
        started = time.time()
        for i in range(2000):
            if i == 200:
                drain_iopub(kc)
                baseline = rss_kib(pid)
            kind = rng.choice(["execute", "execute", "complete", "inspect", "interrupt", "malformed", "history"])
            if kind == "execute":
                # Reuse a few names so the session does not grow without bound.
                reply = execute(km, kc, rng.choice(cells).format(i=i % 20))
                assert reply["status"] in ("ok", "error")
            elif kind == "complete":
                code = rng.choice(["pa", "paths from root", "fit m with nu", "table t fr"])
                assert shell_request(kc, "complete_request", {"code": code, "cursor_pos": len(code)})["content"]["status"] == "ok"
            elif kind == "inspect":
                assert shell_request(kc, "inspect_request", {"code": "trees", "cursor_pos": 2})["content"]["status"] == "ok"
            elif kind == "history":
                assert shell_request(kc, "history_request", {"hist_access_type": "tail", "n": 5, "output": False,
                                                              "raw": True})["content"]["status"] == "ok"
            elif kind == "interrupt":
                km.interrupt_kernel()
            else:
                raw.send_multipart([b"<IDS|MSG>", bytes(rng.getrandbits(8) for _ in range(64)), b"{", b"}", b"", b"x" * rng.randint(0, 200_000)])
            if i % 50 == 0:
                drain_iopub(kc)
            assert km.is_alive(), f"the kernel ended at request {i} ({kind})"
        drain_iopub(kc)
        assert_still_serving(km, kc)
        grown = rss_kib(pid) - baseline
        print(f"soak: resident memory {baseline} KiB after warm-up, grew by {grown} KiB")
        raw.close()
        # 1,800 requests after the warm-up may add history entries (short
        # cells), remembered signatures and allocator slack: a few MiB. Keeping
        # the ~250 malformed messages (100 KB each on average) would add ~25 MiB.
        assert grown < 12 * 1024, f"resident memory grew by {grown} KiB"
        assert time.time() - started < 300


# --- `waypath run` -----------------------------------------------------------

def run_cli(args, cwd=None):
    return subprocess.run([waypath(), *args], capture_output=True, text=True, timeout=600, cwd=cwd)


def test_a_notebook_whose_cells_are_not_objects_gets_a_format_error_naming_the_cell(tmp_path):
    nb = {"nbformat": 4, "nbformat_minor": 5, "metadata": {},
          "cells": [{"cell_type": "code", "source": "graph g:\n    a -> b", "metadata": {}, "outputs": [],
                     "execution_count": None}, "graph h:\n    x -> y", 7]}
    src = tmp_path / "flat.ipynb"
    src.write_text(json.dumps(nb))
    done = run_cli(["run", str(src)])
    assert done.returncode == 1, done.stderr
    assert "cell 2 is a string" in done.stderr, done.stderr
    assert "panicked" not in done.stderr


class Tags(HTMLParser):
    """Every start tag and its attributes, as Python's html.parser reads them."""

    def __init__(self):
        super().__init__()
        self.tags = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))


def test_a_failed_run_still_writes_what_ran_with_the_failing_cell_marked(tmp_path):
    out = tmp_path / "o.ipynb"
    html = tmp_path / "o.html"
    out.write_text("an older run")
    html.write_text("an older report")
    nb = nbformat.v4.new_notebook()
    nb.cells = [
        nbformat.v4.new_markdown_cell("# Stream survey\n\n<script>alert(1)</script>[gauge](javascript:alert(2))"
                                      "<img src=x onerror=alert(3)> <a href=\"JaVaScRiPt:alert(4)\">x</a>"),
        nbformat.v4.new_code_cell("graph stream:\n    rain -> flow"),
        nbformat.v4.new_code_cell("paths from rain to nowhere in stream"),
        nbformat.v4.new_code_cell("graph later:\n    a -> b"),
    ]
    nb.cells[3].outputs = [nbformat.v4.new_output("stream", name="stdout", text="stale output of an older run")]
    src = tmp_path / "stream.ipynb"
    nbformat.write(nb, src)
    done = run_cli(["run", str(src), "--out", str(out), "--html", str(html)])
    assert done.returncode == 1
    executed = nbformat.read(out, as_version=4)
    nbformat.validate(executed)  # nbformat's schema (4.5)
    assert executed.metadata["waypath"]["run"] == "stopped"
    assert executed.cells[1].execution_count == 1
    assert executed.cells[2].metadata["waypath"]["failed"] is True
    assert [o.output_type for o in executed.cells[2].outputs] == ["error"]
    assert executed.cells[3].execution_count is None and executed.cells[3].outputs == []
    report = html.read_text()
    assert "This cell failed." in report and "stopped at a failing cell" in report
    parser = Tags()
    parser.feed(report)
    names = [t for t, _ in parser.tags]
    assert "script" not in names and "iframe" not in names
    for _, attrs in parser.tags:
        assert not any(k.startswith("on") for k in attrs), attrs
        assert not (attrs.get("href") or "").strip().lower().startswith("javascript:"), attrs
    assert ("h1", {}) in parser.tags  # the markdown heading is kept
    # Written through a temporary file and a rename: nothing is left beside them.
    assert sorted(p.name for p in tmp_path.iterdir()) == ["o.html", "o.ipynb", "stream.ipynb"]


def test_hostile_cells_in_a_headless_run_keep_the_run(tmp_path):
    (tmp_path / "trees.csv").write_text(ORCHARD_CSV)
    (tmp_path / "deep.dot").write_text("digraph g " + nested(200_000, "a -> b;", "{", "}") + "\n")
    nb = nbformat.v4.new_notebook()
    cells = SETUP + [DEEP_CELLS[k] for k in sorted(DEEP_CELLS)] + ['export m draws to "trees.csv"', NEXT_CELL]
    nb.cells = [nbformat.v4.new_code_cell(c) for c in cells]
    src = tmp_path / "hostile.ipynb"
    nbformat.write(nb, src)
    before = (tmp_path / "trees.csv").read_bytes()
    done = run_cli(["run", str(src), "--keep-going", "--out", str(tmp_path / "o.ipynb")])
    assert done.returncode in (0, 1), done.stderr
    executed = nbformat.read(tmp_path / "o.ipynb", as_version=4)
    nbformat.validate(executed)
    assert executed.metadata["waypath"]["run"] == "complete"
    assert all(c.execution_count for c in executed.cells)
    export = executed.cells[-2]
    assert [o.output_type for o in export.outputs] == ["error"]
    assert "read as data" in export.outputs[0].evalue
    assert (tmp_path / "trees.csv").read_bytes() == before
    assert [o.output_type for o in executed.cells[-1].outputs if o.output_type == "error"] == []


def test_a_run_killed_mid_cell_keeps_what_ran_and_says_it_did_not_finish(tmp_path):
    (tmp_path / "trees.csv").write_text(ORCHARD_CSV)
    nb = nbformat.v4.new_notebook()
    # The last cell samples long enough for the run to be killed inside it.
    nb.cells = [nbformat.v4.new_code_cell(c) for c in SETUP + ["fit m with nuts draws 400000 seed 1"]]
    src = tmp_path / "killed.ipynb"
    nbformat.write(nb, src)
    out, html = tmp_path / "o.ipynb", tmp_path / "o.html"
    proc = subprocess.Popen([waypath(), "run", str(src), "--out", str(out), "--html", str(html)],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        deadline = time.time() + 120
        while True:
            assert proc.poll() is None, "the run ended before it could be killed inside its last cell"
            assert time.time() < deadline, "the setup cells were never written"
            if out.exists():
                # Every read sees a whole file (written aside and renamed).
                state = json.loads(out.read_text())["metadata"]["waypath"]
                if state["cells_run"] == len(SETUP):
                    break
            time.sleep(0.05)
    finally:
        proc.kill()  # SIGKILL: nothing runs after this, as after an abort
        proc.wait()
    executed = nbformat.read(out, as_version=4)
    nbformat.validate(executed)
    assert executed.metadata["waypath"]["run"] == "in progress"
    assert [c.execution_count for c in executed.cells] == [1, 2, 3, 4, None]
    assert all(c.outputs for c in executed.cells[:4])
    assert "had not finished" in html.read_text()
