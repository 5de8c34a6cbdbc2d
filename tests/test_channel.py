"""The kernel side of the front-end channel (comm target "seamline"), without a browser.

Two levels: the message handler called directly (every request type, every failure answered
with an error reply), and a real IPython kernel driven over ZeroMQ by jupyter_client, where a
comm is opened exactly as JupyterLab opens it. The message table these tests follow is the one
in DEVELOPERS.md ("Kernel ↔ front-end channel") and extension/src/protocol.ts.

Boards are built from ``seamline.demo_data`` (invented data): these are plumbing tests, not
checks of any estimate.
"""
from __future__ import annotations

import datetime as dt
import json
import math
import queue
import re
import time
import uuid
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import seamline
from seamline.demo_data import sharp_scenario
from seamline.notebook import channel
from seamline.notebook.channel import PROTOCOL_VERSION, Channel, dataframe_listing, summarize


class FakeBoard:
    """Just the public board API the channel uses: name, summary(), on_change(), export()."""

    def __init__(self, name, **summary):
        self.name = name
        self._summary = {"name": name, "score": "s", "cutoff": 0.0, "outcome": "y",
                         "kind": "sharp", "estimate": 1.5, "robust_ci": [0.5, 2.5],
                         "level": 0.95, "status": "fresh", "paused": False,
                         "updated_at": "2026-01-02T03:04:05", "error": None, **summary}
        self.listeners = []

    def summary(self):
        if isinstance(self._summary, Exception):
            raise self._summary
        return dict(self._summary)

    def on_change(self, callback):
        self.listeners.append(callback)
        return lambda: self.listeners.remove(callback)

    def change(self, **fields):
        self._summary.update(fields)
        for callback in list(self.listeners):
            callback(self, {"status"})

    def export(self, what, fmt):
        if what == "balance":
            raise RuntimeError("balance has no current result")
        return f"{what} as {fmt}"


def make_channel(boards, namespace=None):
    sent = []
    registry = boards if callable(boards) else (lambda: list(boards))
    return Channel(sent.append, namespace=lambda: namespace or {}, registry=registry), sent


def request(kind, **fields):
    return {"type": kind, "version": PROTOCOL_VERSION, "id": f"req-{kind}", **fields}


# --- summaries ------------------------------------------------------------------------------------

def test_summary_is_json_safe_with_missing_numbers_as_null():
    board = FakeBoard("a", estimate=float("nan"), robust_ci=[float("-inf"), np.float64(2.0)],
                      cutoff=np.int64(40), updated_at=dt.datetime(2026, 1, 2, 3, 4, 5))
    summary = summarize(board)
    assert summary["estimate"] is None
    assert summary["robust_ci"] == [None, 2.0]
    assert summary["cutoff"] == 40.0 and type(summary["cutoff"]) is float
    assert summary["updated_at"] == "2026-01-02T03:04:05"
    # strict JSON (no NaN tokens), as a browser's JSON.parse needs
    json.dumps(summary, allow_nan=False)


def test_summary_failure_becomes_an_error_summary():
    board = FakeBoard("broken")
    board._summary = ValueError("no data")
    summary = summarize(board)
    assert summary["name"] == "broken"
    assert summary["status"] == "error"
    assert summary["error"] == "ValueError: no data"


def test_unknown_status_is_reported_as_error():
    summary = summarize(FakeBoard("a", status="sleeping"))
    assert summary["status"] == "error"
    assert "sleeping" in summary["error"]


# --- requests and replies -------------------------------------------------------------------------

def test_hello_reports_protocol_and_package_version():
    ch, _ = make_channel([])
    reply = ch.handle(request("hello", client_version="0.1.0"))
    assert reply == {"type": "hello_reply", "version": PROTOCOL_VERSION, "reply_to": "req-hello",
                     "success": True, "protocol": PROTOCOL_VERSION,
                     "seamline_version": seamline.__version__}


def test_list_returns_every_design_newest_wins_per_name():
    old, other, new = FakeBoard("a", estimate=1.0), FakeBoard("b"), FakeBoard("a", estimate=2.0)
    ch, _ = make_channel([old, other, new])
    reply = ch.handle(request("list"))
    assert reply["success"] is True
    assert [(d["name"], d["estimate"]) for d in reply["designs"]] == [("a", 2.0), ("b", 1.5)]


@pytest.mark.parametrize("message, pattern", [
    ({"type": "dance", "version": 1, "id": 7}, r"`type` must be one of .*got 'dance'"),
    ({"type": "list", "version": 99, "id": 7}, r"`version` must be 1; got 99"),
    ({"type": "list", "id": 7}, r"`version` must be 1; got None"),
    (["not", "an", "object"], r"must be a JSON object; got list"),
    ({"type": "export", "version": 1, "id": 7, "name": "a", "what": "everything",
      "format": "latex"}, r"`what` must be one of"),
    ({"type": "export", "version": 1, "id": 7, "name": "a", "what": "estimate",
      "format": "docx"}, r"`format` must be one of"),
    ({"type": "export", "version": 1, "id": 7, "name": "zzz", "what": "estimate",
      "format": "latex"}, r"`name` must be the name of a design in this kernel \('a'\); got 'zzz'"),
])
def test_bad_requests_get_error_replies(message, pattern):
    ch, _ = make_channel([FakeBoard("a")])
    reply = ch.handle(message)
    assert reply["success"] is False
    assert re.search(pattern, reply["error"]), reply["error"]
    assert reply["version"] == PROTOCOL_VERSION
    if isinstance(message, dict):
        assert reply["reply_to"] == 7


def test_a_raising_handler_is_answered_not_silent():
    def registry():
        raise RuntimeError("registry exploded")

    ch, sent = make_channel(registry)
    ch.receive(request("list"))
    assert sent == [{"type": "list_reply", "version": PROTOCOL_VERSION, "reply_to": "req-list",
                     "success": False, "error": "RuntimeError: registry exploded"}]
    ch.receive(request("export", name="a", what="estimate", format="latex"))
    assert sent[-1]["success"] is False and "registry exploded" in sent[-1]["error"]


def test_export_returns_the_board_text_or_its_error():
    ch, _ = make_channel([FakeBoard("a")])
    reply = ch.handle(request("export", name="a", what="methods", format="text"))
    assert reply["success"] is True and reply["text"] == "methods as text"
    reply = ch.handle(request("export", name="a", what="balance", format="markdown"))
    assert reply["success"] is False
    assert reply["error"] == "RuntimeError: balance has no current result"


def test_export_names_are_every_board_export_and_the_front_end_knows_them():
    # The channel writes the list out (it must not import pandas); it must be the board's own list.
    from seamline.notebook import compute_inference, exports
    board_names = {*exports.EXPORTS, *compute_inference.EXPORTS, "methods", "script"}
    assert set(channel.EXPORT_WHATS) == board_names
    protocol = (Path(__file__).resolve().parents[1] / "extension" / "src" / "protocol.ts").read_text()
    block = protocol[protocol.index("export type ExportWhat ="):]
    block = block[:block.index(";")]
    assert set(re.findall(r"'([a-z_]+)'", block)) == board_names


def test_export_passes_an_inference_table_through():
    ch, _ = make_channel([FakeBoard("a")])
    reply = ch.handle(request("export", name="a", what="bias_aware_sensitivity", format="csv"))
    assert reply["success"] is True and reply["text"] == "bias_aware_sensitivity as csv"


def test_dataframes_lists_public_frames_and_columns_by_kind():
    odd = "<img src=x onerror=alert(1)>"
    frame = pd.DataFrame({"score": [1.0, 2.0], "group": ["a", "b"], "flag": [True, False],
                          odd: [1, 2]})
    namespace = {"df": frame, "_hidden": frame, "n": 3, "series": frame["score"]}
    ch, _ = make_channel([], namespace)
    reply = ch.handle(request("dataframes"))
    assert reply["success"] is True
    (info,) = reply["dataframes"]
    assert info["name"] == "df" and info["rows"] == 2 and info["truncated"] is False
    assert [(c["name"], c["numeric"]) for c in info["columns"]] == [
        ("score", True), ("group", False), ("flag", True), (odd, True)]


def test_dataframes_with_repeated_column_labels():
    frame = pd.DataFrame([[1.0, "x"]], columns=["a", "a"])
    (info,) = dataframe_listing({"df": frame})
    assert [(c["name"], c["numeric"]) for c in info["columns"]] == [("a", True), ("a", False)]


# --- pushes ---------------------------------------------------------------------------------------

def test_no_pushes_before_subscribe():
    board = FakeBoard("a")
    ch, sent = make_channel([board])
    ch.handle(request("list"))
    ch.sync()
    assert sent == [] and board.listeners == []


def test_subscribe_pushes_changes_new_and_removed_boards():
    live = [FakeBoard("a")]
    ch, sent = make_channel(lambda: list(live))
    reply = ch.handle(request("subscribe"))
    assert [d["name"] for d in reply["designs"]] == ["a"]
    live[0].change(status="recomputing")
    live[0].change(status="fresh", estimate=3.0)
    assert [(m["type"], m["design"]["status"], m["design"]["estimate"]) for m in sent] == [
        ("update", "recomputing", 1.5), ("update", "fresh", 3.0)]
    # an unchanged summary is not sent again
    live[0].change()
    assert len(sent) == 2
    sent.clear()
    live.append(FakeBoard("b"))
    ch.sync()
    assert [(m["type"], m["design"]["name"]) for m in sent] == [("update", "b")]
    sent.clear()
    del live[0]
    ch.sync()
    assert sent == [{"type": "removed", "version": PROTOCOL_VERSION, "name": "a"}]
    assert all(m["version"] == PROTOCOL_VERSION for m in sent)


def test_a_replaced_board_cannot_overwrite_its_successor():
    old, new = FakeBoard("a", estimate=1.0), FakeBoard("a", estimate=2.0)
    live = [old]
    ch, sent = make_channel(lambda: list(live))
    ch.handle(request("subscribe"))
    live[:] = [new]
    ch.sync()
    sent.clear()
    old.change(estimate=99.0)
    assert sent == []


def test_unsubscribe_and_close_stop_pushes():
    board = FakeBoard("a")
    ch, sent = make_channel([board])
    ch.handle(request("subscribe"))
    assert ch.handle(request("unsubscribe"))["success"] is True
    board.change(estimate=5.0)
    assert sent == []
    ch.handle(request("subscribe"))
    ch.close()
    board.change(estimate=6.0)
    ch.receive(request("list"))
    assert sent == []


def test_real_board_pushes_recomputing_then_fresh_with_the_new_estimate():
    scenario = sharp_scenario(seed=3)
    board = seamline.board(scenario.data, **scenario.design_kwargs())
    try:
        ch, sent = make_channel(lambda: [board])
        first = ch.handle(request("subscribe"))["designs"][0]
        assert first["status"] == "fresh" and first["estimate"] is not None
        board.set_option("bandwidth", 4.0)
        board.wait()                      # the board recomputes on its worker thread
        statuses = [m["design"]["status"] for m in sent]
        assert statuses[0] == "recomputing" and statuses[-1] == "fresh"
        assert sent[-1]["design"]["estimate"] == pytest.approx(board.fit.estimate)
        assert sent[-1]["design"]["estimate"] != first["estimate"]
        low, high = sent[-1]["design"]["robust_ci"]
        assert low < high
        text = ch.handle(request("export", name=board.name, what="estimate",
                                 format="markdown"))["text"]
        assert "robust" in text.lower()
    finally:
        board.close()


# --- a real kernel --------------------------------------------------------------------------------

class KernelClient:
    """A jupyter_client kernel client that keeps the comm messages iopub brings meanwhile."""

    def __init__(self, client):
        self.client = client
        self.pending = []  # comm messages seen while waiting for something else

    def _keep(self, msg):
        if msg["msg_type"] in ("comm_msg", "comm_close"):
            self.pending.append(msg)

    def execute(self, code, timeout=120):
        """Run code; returns its stdout; comm messages seen meanwhile are kept for later."""
        out = []

        def hook(msg):
            self._keep(msg)
            if msg["msg_type"] == "stream":
                out.append(msg["content"]["text"])

        reply = self.client.execute_interactive(code, timeout=timeout, output_hook=hook)
        assert reply["content"]["status"] == "ok", reply["content"]
        return "".join(out)

    def comm_open(self, data):
        comm_id = uuid.uuid4().hex
        self.client.shell_channel.send(self.client.session.msg(
            "comm_open", {"comm_id": comm_id, "target_name": "seamline", "data": data}))
        return comm_id

    def comm_send(self, comm_id, data):
        self.client.shell_channel.send(self.client.session.msg(
            "comm_msg", {"comm_id": comm_id, "data": data}))

    def comm_messages(self, comm_id, until, timeout=60):
        """This comm's messages (type, data), from now on, until ``until(list)`` holds."""
        seen = []
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if self.pending:
                msg = self.pending.pop(0)
            else:
                try:
                    msg = self.client.get_iopub_msg(timeout=0.5)
                except queue.Empty:
                    continue
            if msg["msg_type"] in ("comm_msg", "comm_close") and \
                    msg["content"].get("comm_id") == comm_id:
                seen.append((msg["msg_type"], msg["content"].get("data", {})))
                if until(seen):
                    return seen
        raise AssertionError(f"timed out; got {seen}")

    def reply(self, comm_id, message):
        """Send one request and return its reply."""
        self.comm_send(comm_id, message)
        seen = self.comm_messages(comm_id, lambda s: any(
            d.get("reply_to") == message["id"] for _, d in s))
        return seen[-1][1]


@pytest.fixture(scope="module")
def kernel():
    from jupyter_client.manager import start_new_kernel

    manager, client = start_new_kernel(kernel_name="python3", startup_timeout=120)
    try:
        yield KernelClient(client)
    finally:
        client.stop_channels()
        manager.shutdown_kernel(now=True)


def _last_fresh_update(seen):
    updates = [d for _, d in seen if d.get("type") == "update" and d["design"]["status"] == "fresh"]
    return updates[-1]["design"] if updates else None


def test_kernel_without_the_channel_closes_the_comm(kernel):
    # What the front end meets in a kernel that has not loaded seamline: a prompt comm_close.
    comm_id = kernel.comm_open({"type": "hello", "version": 1, "id": 1})
    seen = kernel.comm_messages(comm_id, lambda s: any(t == "comm_close" for t, _ in s))
    assert seen[-1][0] == "comm_close"


def test_load_ext_registers_the_channel_without_heavy_imports(kernel):
    kernel.execute("get_ipython().run_line_magic('load_ext', 'seamline')")
    text = kernel.execute("import sys, seamline.notebook.channel as _ch\n"
                          "print(repr((get_ipython() in _ch._registered_shells, 'altair' in sys.modules)))")
    registered, altair_loaded = eval(text)  # noqa: S307 - our own repr of two bools
    assert registered, "`%load_ext seamline` must register the front-end channel"
    # Altair is imported on the first chart, not by %load_ext (its import dominates the load time;
    # the time itself is measured by tests/benchmarks/bench_notebook.py, not asserted here).
    assert not altair_loaded


def test_kernel_channel_round_trip(kernel):
    kernel.execute("from seamline.notebook import channel as _ch\n_ch.register()")
    comm_id = kernel.comm_open({"type": "hello", "version": 1, "id": "h1"})
    (kind, hello), = kernel.comm_messages(comm_id, lambda s: len(s) >= 1)
    assert kind == "comm_msg"
    assert hello["type"] == "hello_reply" and hello["success"] is True
    assert hello["seamline_version"] == seamline.__version__

    subscribed = kernel.reply(comm_id, {"type": "subscribe", "version": 1, "id": "s1"})
    assert subscribed["type"] == "subscribe_reply" and subscribed["designs"] == []

    # A design made in a cell is pushed without being asked for.
    kernel.execute("from seamline.demo_data import sharp_scenario\n"
                   "pupils = sharp_scenario(seed=2).data\n"
                   "tutoring = __import__('seamline').board(\n"
                   "    pupils, score='reading_score', cutoff=40, treated='below',\n"
                   "    outcome='math_gain')")
    design = _last_fresh_update(kernel.comm_messages(comm_id, _last_fresh_update))
    assert design["score"] == "reading_score" and design["cutoff"] == 40.0
    assert math.isfinite(design["estimate"])

    # Mutating the data upstream: the board recomputes after the cell and the channel pushes.
    kernel.execute("pupils['math_gain'] = pupils['math_gain'] * 2")
    doubled = _last_fresh_update(kernel.comm_messages(comm_id, _last_fresh_update))
    assert doubled["estimate"] == pytest.approx(2 * design["estimate"], rel=1e-9)

    frames = kernel.reply(comm_id, {"type": "dataframes", "version": 1, "id": "d1"})
    assert [f["name"] for f in frames["dataframes"]] == ["pupils"]

    exported = kernel.reply(comm_id, {"type": "export", "version": 1, "id": "e1",
                                      "name": design["name"], "what": "estimate",
                                      "format": "latex"})
    assert exported["success"] is True and "\\toprule" in exported["text"]

    failed = kernel.reply(comm_id, {"type": "nonsense", "version": 1, "id": "x1"})
    assert failed == {"type": "error", "version": 1, "reply_to": "x1", "success": False,
                      "error": failed["error"]}
    assert "`type` must be one of" in failed["error"]


# --- the same message shapes on both sides --------------------------------------------------------

FIXTURES = Path(__file__).resolve().parents[1] / "extension" / "test" / "fixtures" / "messages.json"


def _shape(value):
    """Keys all the way down (lists by their first item): what both sides must agree on."""
    if isinstance(value, dict):
        return {key: _shape(item) for key, item in value.items()}
    if isinstance(value, list):
        return [_shape(value[0])] if value and isinstance(value[0], (dict, list)) else []
    return None


def test_kernel_messages_have_the_shapes_the_front_end_accepts():
    # extension/test/protocol.test.ts checks that the front end accepts every fixture message.
    fixtures = json.loads(FIXTURES.read_text())
    board = FakeBoard("tutoring", score="reading_score", cutoff=40.0, outcome="math_gain")
    scenario = sharp_scenario(n=600, seed=3)
    board.fit = seamline.Design(scenario.data, **scenario.design_kwargs()).fit()
    frame = pd.DataFrame({"reading_score": [1.0], "school": ["a"]})
    ch, sent = make_channel([board], {"pupils": frame})
    seamline.paper_tables.clear()
    replies = {
        "hello_reply": ch.handle(request("hello", client_version="0.1.0")),
        "list_reply": ch.handle(request("list")),
        "subscribe_reply": ch.handle(request("subscribe")),
        "unsubscribe_reply": ch.handle(request("unsubscribe")),
        "export_reply": ch.handle(request("export", name="tutoring", what="estimate",
                                          format="latex")),
        "dataframes_reply": ch.handle(request("dataframes")),
        "paper_add_reply": ch.handle(request("paper_add", name="tutoring", table="main")),
        "paper_tables_reply": ch.handle(request("paper_tables")),
        "script_reply": ch.handle(request("export", name="tutoring", what="script", format="text")),
        "failed_reply": ch.handle(request("export", name="x", what="estimate", format="latex")),
        "error": ch.handle(request("dance")),
    }
    ch.handle(request("subscribe"))
    board.change(status="error", estimate=None, robust_ci=None, error="ValueError: no rows")
    replies["update"] = sent[-1]
    ch._registry = lambda: []
    ch.sync()
    replies["removed"] = sent[-1]
    seamline.paper_tables.clear()
    for key, message in replies.items():
        assert _shape(json.loads(json.dumps(message, allow_nan=False))) == _shape(fixtures[key]), key
    assert set(replies) == {k for k in fixtures if not k.startswith("_")}


# --- the paper workflow: scripts and paper tables ---------------------------------------------------

def test_paper_add_puts_the_board_headline_in_the_named_session_table():
    scenario = sharp_scenario(n=800, seed=4)
    design = seamline.Design(scenario.data, **scenario.design_kwargs())
    board = FakeBoard("tutoring")
    board.fit = design.fit()
    other = FakeBoard("uniform")
    other.fit = design.fit(kernel="uniform")
    ch, _sent = make_channel([board, other])
    seamline.paper_tables.clear()
    try:
        first = ch.handle(request("paper_add", name="tutoring", table=" main "))
        assert first["success"], first
        assert (first["table"], first["columns"]) == ("main", ["tutoring"])
        second = ch.handle(request("paper_add", name="uniform", table="main"))
        assert second["columns"] == ["tutoring", "uniform"]
        again = ch.handle(request("paper_add", name="tutoring", table="main"))   # replaces, keeps place
        assert again["columns"] == ["tutoring", "uniform"]
        table = seamline.paper_tables["main"]
        assert table.columns == ("tutoring", "uniform")
        # the reply's text is the table as the kernel renders it, numbers as the fits format them
        assert again["text"] == table.to_markdown()
        assert f"{board.fit.estimate:.3f}" in again["text"] and f"{other.fit.estimate:.3f}" in again["text"]
        listing = ch.handle(request("paper_tables"))
        assert listing["tables"] == [{"name": "main", "columns": ["tutoring", "uniform"]}]
        bad = ch.handle(request("paper_add", name="tutoring", table="   "))
        assert not bad["success"] and "`table` must be 1 to 60 printable characters" in bad["error"]
        missing = ch.handle(request("paper_add", name="nobody", table="main"))
        assert not missing["success"] and "`name` must be the name of a design" in missing["error"]
    finally:
        seamline.paper_tables.clear()


def test_script_export_is_the_board_replication_script():
    board = FakeBoard("tutoring")
    ch, _sent = make_channel([board])
    answer = ch.handle(request("export", name="tutoring", what="script", format="text"))
    assert answer["success"] and answer["text"] == "script as text"
