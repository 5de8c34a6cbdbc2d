"""The kernel side of the one channel between the kernel and seamline's JupyterLab front end.

The front end opens a Jupyter comm to the target ``"seamline"`` (registered here when
``%load_ext seamline`` runs) and talks through it in small JSON messages. Every message carries
``type`` and the protocol ``version``; every reply carries ``reply_to`` (the request's ``id``),
``success`` and, when it failed, ``error``. A handler that raises is answered with an error reply,
never with silence. The message table lives in DEVELOPERS.md ("Kernel ↔ front-end channel") and
is mirrored by the TypedDicts below and by ``extension/src/protocol.ts``.

The channel reads boards only through the public board API: the registry
``seamline.notebook.board.boards()``, ``Board.name``, ``Board.summary()``,
``Board.on_change(callback)`` and ``Board.export(what, fmt)``.

This module imports nothing beyond the standard library (and seamline's own light ``errors``) at
import time, so that ``%load_ext seamline`` stays fast.
"""
from __future__ import annotations

import datetime as _dt
import math
import sys
import threading
import weakref
from collections.abc import Callable, Iterable, Mapping
from typing import Any, Literal, TypedDict

from ..errors import shown

__all__ = [
    "PROTOCOL_VERSION",
    "TARGET_NAME",
    "Channel",
    "DesignSummary",
    "PaperTableInfo",
    "channels",
    "dataframe_listing",
    "register",
    "summarize",
]

PROTOCOL_VERSION = 1
TARGET_NAME = "seamline"

Status = Literal["fresh", "stale", "recomputing", "error"]
STATUSES: tuple[str, ...] = ("fresh", "stale", "recomputing", "error")
REQUEST_TYPES: tuple[str, ...] = ("hello", "list", "subscribe", "unsubscribe", "export",
                                  "dataframes", "paper_add", "paper_tables")
# Every name ``Board.export`` takes (``exports.EXPORTS``, the inference tables of
# ``compute_inference.EXPORTS``, "methods"), written out because this module must not import pandas;
# tests/test_channel.py checks the list against those registries. "script": the board's replication
# script (``Board.export("script")``; `format` is "text").
EXPORT_WHATS: tuple[str, ...] = (
    "estimate", "first_stage", "bandwidths", "sensitivity", "balance", "density", "placebo",
    "donut", "bins", "score_profile", "checks",
    "by_cutoff", "decomposition", "subgroups", "power", "sample_size",
    "intervals", "bias_aware", "bias_aware_sensitivity", "weak_iv", "local_randomization",
    "windows", "randomization_sensitivity",
    "methods", "script")
EXPORT_FORMATS: tuple[str, ...] = ("latex", "markdown", "csv", "text", "html")
# Listing every column of a very wide frame would flood the insert-design form.
MAX_COLUMNS = 2000


# --- Payloads (mirrored in extension/src/protocol.ts) --------------------------------------------

class DesignSummary(TypedDict):
    """One design as the front end shows it (chip and side panel)."""

    name: str
    score: str | None
    cutoff: float | str | None
    outcome: str | None
    kind: str | None             # "sharp" | "fuzzy"
    estimate: float | None
    robust_ci: list[float | None] | None   # [low, high]
    level: float | None
    status: Status
    paused: bool                 # automatic recompute paused (status then "stale" when behind)
    updated_at: str | None       # ISO 8601, as the kernel's clock wrote it
    error: str | None


class ColumnInfo(TypedDict):
    name: str
    dtype: str
    numeric: bool


class DataFrameInfo(TypedDict):
    name: str
    rows: int
    columns: list[ColumnInfo]
    truncated: bool


class PaperTableInfo(TypedDict):
    """One named paper table of the session (``seamline.paper_tables``)."""

    name: str
    columns: list[str]


class Reply(TypedDict, total=False):
    type: str
    version: int
    reply_to: Any
    success: bool
    error: str
    # hello_reply
    protocol: int
    seamline_version: str
    # list_reply, subscribe_reply
    designs: list[DesignSummary]
    # export_reply
    name: str
    what: str
    format: str
    text: str
    # dataframes_reply
    dataframes: list[DataFrameInfo]
    # paper_add_reply (also name, text), paper_tables_reply
    table: str
    columns: list[str]
    tables: list[PaperTableInfo]


# --- Helpers --------------------------------------------------------------------------------------

def _registry() -> list[Any]:
    """Live boards of this kernel, oldest first (the board module's public registry)."""
    from .board import boards  # deferred: the board module is imported on first use
    return list(boards())


def _finite_or_none(value: Any) -> float | None:
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return number if math.isfinite(number) else None


def _text_or_none(value: Any) -> str | None:
    if value is None:
        return None
    if isinstance(value, (list, tuple)):
        return ", ".join(str(v) for v in value) if value else None
    return str(value)


def _iso(value: Any) -> str | None:
    if value is None:
        return None
    if isinstance(value, (_dt.datetime, _dt.date, _dt.time)):
        return value.isoformat()
    return str(value)


def summarize(board: Any) -> DesignSummary:
    """Turn ``board.summary()`` into a JSON-safe :class:`DesignSummary`.

    Numbers that are missing or not finite become ``None``; a ``summary()`` that raises gives a
    summary with status ``"error"`` and the exception text, so one broken board never hides the
    others.

    Parameters
    ----------
    board : Board
        A live board from ``seamline.notebook.board.boards()``.

    Returns
    -------
    DesignSummary
    """
    try:
        raw: Mapping[str, Any] = board.summary()
    except Exception as exc:  # noqa: BLE001 - reported to the front end as the board's error
        return DesignSummary(name=str(getattr(board, "name", "?")), score=None, cutoff=None,
                             outcome=None, kind=None, estimate=None, robust_ci=None, level=None,
                             status="error", paused=False, updated_at=None,
                             error=f"{type(exc).__name__}: {exc}")
    cutoff = raw.get("cutoff")
    cutoff_out: float | str | None
    if cutoff is None or isinstance(cutoff, str):
        cutoff_out = cutoff
    else:
        cutoff_out = _finite_or_none(cutoff)
    ci = raw.get("robust_ci")
    ci_out = None if ci is None else [_finite_or_none(v) for v in list(ci)[:2]]
    status = str(raw.get("status") or "fresh")
    error = _text_or_none(raw.get("error"))
    if status not in STATUSES:
        error = error or f"unknown board status {status!r}"
        status = "error"
    return DesignSummary(
        name=str(raw.get("name", getattr(board, "name", "?"))),
        score=_text_or_none(raw.get("score")),
        cutoff=cutoff_out,
        outcome=_text_or_none(raw.get("outcome")),
        kind=_text_or_none(raw.get("kind")),
        estimate=_finite_or_none(raw.get("estimate")),
        robust_ci=ci_out,
        level=_finite_or_none(raw.get("level")),
        status=status,  # type: ignore[typeddict-item]
        paused=bool(raw.get("paused", False)),
        updated_at=_iso(raw.get("updated_at")),
        error=error,
    )


def dataframe_listing(namespace: Mapping[str, Any]) -> list[DataFrameInfo]:
    """The pandas DataFrames bound to public names in ``namespace``, with their columns.

    pandas is not imported here: if the user never imported it, there are no DataFrames.

    Parameters
    ----------
    namespace : mapping
        Usually the notebook's user namespace.

    Returns
    -------
    list of DataFrameInfo
        Sorted by name; ``numeric`` marks columns usable as a score or outcome.
    """
    pandas = sys.modules.get("pandas")
    if pandas is None:
        return []
    from pandas.api.types import is_numeric_dtype  # pandas is already imported: cheap

    frames: list[DataFrameInfo] = []
    for name in sorted(k for k in namespace if isinstance(k, str) and not k.startswith("_")):
        value = namespace[name]
        if not isinstance(value, pandas.DataFrame):
            continue
        dtypes = value.dtypes  # by position: column labels may repeat
        columns = [ColumnInfo(name=str(column), dtype=str(dtypes.iloc[i]),
                              numeric=bool(is_numeric_dtype(dtypes.iloc[i])))
                   for i, column in enumerate(value.columns[:MAX_COLUMNS])]
        frames.append(DataFrameInfo(name=name, rows=int(len(value)), columns=columns,
                                    truncated=len(value.columns) > MAX_COLUMNS))
    return frames


def _error_text(exc: BaseException) -> str:
    return f"{type(exc).__name__}: {exc}"


# --- The channel ----------------------------------------------------------------------------------

class Channel:
    """One open connection to a front end: answers requests and pushes board updates.

    Parameters
    ----------
    send : callable
        Sends one JSON-safe dict to the front end (``comm.send`` in a kernel).
    namespace : callable, optional
        Returns the user namespace (for the ``dataframes`` request).
    registry : callable, optional
        Returns the live boards; defaults to ``seamline.notebook.board.boards``.
    """

    def __init__(self, send: Callable[[dict], None], *,
                 namespace: Callable[[], Mapping[str, Any]] | None = None,
                 registry: Callable[[], Iterable[Any]] | None = None) -> None:
        self._send = send
        self._namespace = namespace or (lambda: {})
        self._registry = registry or _registry
        self._lock = threading.RLock()
        self.subscribed = False
        self.closed = False
        # id(board) -> weak reference, for boards whose on_change we joined
        self._watched: dict[int, weakref.ref] = {}
        self._last_sent: dict[str, DesignSummary] = {}

    # -- requests ----------------------------------------------------------------------------

    def receive(self, data: Any) -> None:
        """Handle one message from the front end and send its reply."""
        reply = self.handle(data)
        if reply is not None:
            self._emit(dict(reply))

    def handle(self, data: Any) -> Reply:
        """Answer one request; never raises (a failure becomes an error reply)."""
        request_id = data.get("id") if isinstance(data, Mapping) else None
        kind = data.get("type") if isinstance(data, Mapping) else None
        try:
            if not isinstance(data, Mapping):
                raise ValueError(f"a message must be a JSON object; got {type(data).__name__}. "
                                 "Send {\"type\": ..., \"version\": 1}.")
            if kind not in REQUEST_TYPES:
                allowed = ", ".join(f'"{t}"' for t in REQUEST_TYPES)
                raise ValueError(f"`type` must be one of {allowed}; got {shown(kind)}. "
                                 "See the channel table in DEVELOPERS.md.")
            version = data.get("version")
            if version != PROTOCOL_VERSION:
                raise ValueError(f"`version` must be {PROTOCOL_VERSION}; got {shown(version)}. "
                                 "Install matching versions of the seamline Python package and "
                                 "its JupyterLab extension (they ship in one wheel).")
            reply: Reply = getattr(self, f"_on_{kind}")(data)
        except Exception as exc:  # noqa: BLE001 - every failure is answered, never dropped
            reply_type = f"{kind}_reply" if kind in REQUEST_TYPES else "error"
            return Reply(type=reply_type, version=PROTOCOL_VERSION, reply_to=request_id,
                         success=False, error=_error_text(exc))
        reply.update(type=f"{kind}_reply", version=PROTOCOL_VERSION, reply_to=request_id,
                     success=True)
        return reply

    def _on_hello(self, data: Mapping[str, Any]) -> Reply:
        from .. import __version__
        return Reply(protocol=PROTOCOL_VERSION, seamline_version=str(__version__))

    def _on_list(self, data: Mapping[str, Any]) -> Reply:
        return Reply(designs=self.designs())

    def _on_subscribe(self, data: Mapping[str, Any]) -> Reply:
        with self._lock:
            self.subscribed = True
            self._watch_new_boards()
            designs = self.designs()
            self._last_sent = {d["name"]: d for d in designs}
        return Reply(designs=designs)

    def _on_unsubscribe(self, data: Mapping[str, Any]) -> Reply:
        with self._lock:
            self.subscribed = False
        return Reply()

    def _on_export(self, data: Mapping[str, Any]) -> Reply:
        name, what, fmt = data.get("name"), data.get("what"), data.get("format")
        if what not in EXPORT_WHATS:
            allowed = ", ".join(f'"{w}"' for w in EXPORT_WHATS)
            raise ValueError(f"`what` must be one of {allowed}; got {shown(what)}. "
                             "Pick one of the listed exports.")
        if fmt not in EXPORT_FORMATS:
            allowed = ", ".join(f'"{f}"' for f in EXPORT_FORMATS)
            raise ValueError(f"`format` must be one of {allowed}; got {shown(fmt)}. "
                             "Pick one of the listed formats.")
        board = self._board(name)
        text = board.export(what, fmt)
        if not isinstance(text, str):
            text = text.decode("utf-8") if isinstance(text, bytes) else str(text)
        return Reply(name=str(name), what=str(what), format=str(fmt), text=text)

    def _on_dataframes(self, data: Mapping[str, Any]) -> Reply:
        return Reply(dataframes=dataframe_listing(self._namespace()))

    def _on_paper_add(self, data: Mapping[str, Any]) -> Reply:
        # The board's headline becomes (or replaces) a column of the session's named paper table.
        from ..export.paper_session import check_table_name, paper_tables
        name = data.get("name")
        table = check_table_name(data.get("table"))
        board = self._board(name)
        columns = paper_tables.add(board, table)
        return Reply(name=str(name), table=table, columns=list(columns),
                     text=paper_tables[table].to_markdown())

    def _on_paper_tables(self, data: Mapping[str, Any]) -> Reply:
        from ..export.paper_session import paper_tables
        return Reply(tables=[PaperTableInfo(name=t["name"], columns=t["columns"])
                             for t in paper_tables.listing()])

    # -- boards ------------------------------------------------------------------------------

    def boards(self) -> dict[str, Any]:
        """Live boards by name; when two share a name the newer one (later in the registry) wins."""
        latest: dict[str, Any] = {}
        for board in self._registry():
            latest[str(getattr(board, "name", "?"))] = board
        return latest

    def designs(self) -> list[DesignSummary]:
        """Summaries of every live board, in registry order."""
        return [summarize(board) for board in self.boards().values()]

    def _board(self, name: Any) -> Any:
        boards = self.boards()
        if name not in boards:
            known = ", ".join(repr(n) for n in boards) or "none yet"
            raise KeyError(f"`name` must be the name of a design in this kernel ({known}); "
                           f"got {shown(name)}. Run its %%cutoff cell first.")
        return boards[name]

    def _watch_new_boards(self) -> None:
        for board in self._registry():
            key = id(board)
            ref = self._watched.get(key)
            if ref is not None and ref() is board:
                continue
            try:
                self._watched[key] = weakref.ref(board)
            except TypeError:  # not weak-referenceable: watch it all the same
                self._watched[key] = (lambda b=board: b)  # type: ignore[assignment]
            board.on_change(self._make_listener())

    def _make_listener(self) -> Callable[..., None]:
        # The listener holds the channel weakly: a closed or forgotten channel costs nothing.
        channel_ref = weakref.ref(self)

        def listener(board: Any, changed: Any = None) -> None:
            channel = channel_ref()
            if channel is not None:
                channel.push_board(board)

        return listener

    # -- pushes ------------------------------------------------------------------------------

    def push_board(self, board: Any) -> None:
        """Send an ``update`` for one board if subscribed and its summary changed."""
        with self._lock:
            if not self.subscribed or self.closed:
                return
            if self.boards().get(str(getattr(board, "name", "?"))) is not board:
                return  # a replaced board's late news must not overwrite its successor
            summary = summarize(board)
            if self._last_sent.get(summary["name"]) == summary:
                return
            self._last_sent[summary["name"]] = summary
        self._emit({"type": "update", "version": PROTOCOL_VERSION, "design": summary})

    def sync(self) -> None:
        """After a cell ran: join new boards, push changed summaries and removed names."""
        with self._lock:
            if not self.subscribed or self.closed:
                return
            self._watch_new_boards()
            designs = {d["name"]: d for d in self.designs()}
            messages: list[dict] = []
            for name in [n for n in self._last_sent if n not in designs]:
                del self._last_sent[name]
                messages.append({"type": "removed", "version": PROTOCOL_VERSION, "name": name})
            for name, summary in designs.items():
                if self._last_sent.get(name) != summary:
                    self._last_sent[name] = summary
                    messages.append({"type": "update", "version": PROTOCOL_VERSION,
                                     "design": summary})
            self._watched = {k: r for k, r in self._watched.items() if r() is not None}
        for message in messages:
            self._emit(message)

    def close(self) -> None:
        """Stop pushing; the front end closed its end."""
        with self._lock:
            self.closed = True
            self.subscribed = False

    def _emit(self, message: dict) -> None:
        if not self.closed:
            self._send(message)


# --- Kernel wiring --------------------------------------------------------------------------------

_channels: list[Channel] = []
_registered_shells: "weakref.WeakSet[Any]" = weakref.WeakSet()


def channels() -> list[Channel]:
    """The channels currently open in this kernel (one per connected notebook view)."""
    return [c for c in _channels if not c.closed]


def _after_cell(*_args: Any) -> None:
    for channel in channels():
        try:
            channel.sync()
        except Exception:  # noqa: BLE001 - a broken push must not break the user's cell
            channel.close()


def register(ip: Any = None) -> bool:
    """Register the ``"seamline"`` comm target and the after-cell sync in this kernel.

    Called by ``%load_ext seamline``; calling it again does nothing. Outside a kernel (a plain
    IPython shell, a script) there is no front end to talk to and nothing is registered.

    Parameters
    ----------
    ip : IPython.core.interactiveshell.InteractiveShell, optional
        The shell; defaults to the running one.

    Returns
    -------
    bool
        True when the target is registered in a kernel.
    """
    if ip is None:
        from IPython import get_ipython
        ip = get_ipython()
    kernel = getattr(ip, "kernel", None)
    manager = getattr(kernel, "comm_manager", None)
    if ip is None or manager is None:
        return False
    if ip in _registered_shells:
        return True

    def namespace() -> Mapping[str, Any]:
        return ip.user_ns

    def on_open(comm: Any, open_msg: Mapping[str, Any]) -> None:
        channel = Channel(comm.send, namespace=namespace)
        _channels[:] = [c for c in _channels if not c.closed]
        _channels.append(channel)

        def on_msg(msg: Mapping[str, Any]) -> None:
            channel.receive(msg.get("content", {}).get("data"))

        def on_close(msg: Mapping[str, Any]) -> None:
            channel.close()

        comm.on_msg(on_msg)
        comm.on_close(on_close)
        first = open_msg.get("content", {}).get("data")
        if first:  # the front end sends its hello with the open message
            channel.receive(first)

    manager.register_target(TARGET_NAME, on_open)
    ip.events.register("post_run_cell", _after_cell)
    _registered_shells.add(ip)
    return True
