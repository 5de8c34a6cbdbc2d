"""The live boards of a kernel: the registry (``boards``, ``find``) and the after-cell hook that makes
every board of a shell check its inputs after each notebook cell.

Boards enter the registry when they are made (``register``) and leave it when closed; it holds
weak references, so a board nobody holds is forgotten. Nothing here imports IPython.
"""
from __future__ import annotations

import itertools
import logging
import sys
import weakref
from collections.abc import Mapping
from typing import TYPE_CHECKING

from . import scheduler
from .reactive import shared_fingerprints

if TYPE_CHECKING:
    from .board import Board

log = logging.getLogger("seamline")

_SERIAL = itertools.count(1)
_NAMES = itertools.count(1)         # default names of boards made from Python
_REGISTRY: dict[int, weakref.ref] = {}


def register(board: "Board") -> int:
    """Enter a new board in the registry; returns its serial number."""
    serial = next(_SERIAL)
    _REGISTRY[serial] = weakref.ref(board)
    return serial


def forget(serial: int) -> None:
    """Take a closed board out of the registry."""
    _REGISTRY.pop(serial, None)


def default_name() -> str:
    """The next default name of a board made from Python ("board1", "board2", ...)."""
    return f"board{next(_NAMES)}"


def boards() -> list["Board"]:
    """Every live (not closed, not garbage-collected) board, oldest first."""
    out = []
    for serial in sorted(_REGISTRY):
        b = _REGISTRY[serial]()
        if b is None or b.closed:
            _REGISTRY.pop(serial, None)
        else:
            out.append(b)
    return out


def find(name: str, namespace: Mapping | None = None) -> "Board | None":
    """The newest live board called ``name`` (bound to ``namespace`` when given)."""
    for b in reversed(boards()):
        if b.name == name and (namespace is None or b._namespace is namespace):
            return b
    return None


def _after_cell(shell, *args) -> None:
    """post_run_cell callback: every live board of this shell checks its inputs."""
    namespace = getattr(shell, "user_ns", None)
    headless = not scheduler.live_front_end()
    with shared_fingerprints():     # boards reading the same columns hash them once per cell
        for b in boards():
            if b._namespace is not None and b._namespace is not namespace:
                continue
            try:
                b.check_inputs()
                if headless:
                    b.wait()
                    b._update_displays()
            except Exception:   # a board must never break the kernel; it records its own errors
                log.exception("seamline: checking board %r after a cell failed", b.name)


def install_hook(shell) -> None:
    """Register one ``post_run_cell`` callback on an IPython shell (idempotent, also across
    ``%reload_ext``: a callback left by an earlier import of this module is replaced)."""
    callbacks = shell.events.callbacks.get("post_run_cell", [])
    for cb in list(callbacks):
        if getattr(cb, "_seamline_hook", False):
            if getattr(cb, "_seamline_module", None) is sys.modules[__name__]:
                return
            shell.events.unregister("post_run_cell", cb)
    shell_ref = weakref.ref(shell)

    def seamline_after_cell(*args):
        shell = shell_ref()
        if shell is not None:
            _after_cell(shell, *args)

    seamline_after_cell._seamline_hook = True
    seamline_after_cell._seamline_module = sys.modules[__name__]
    shell.events.register("post_run_cell", seamline_after_cell)


def current_shell():
    """The running IPython shell, without importing IPython when it is not loaded."""
    if "IPython" not in sys.modules:
        return None
    try:
        from IPython import get_ipython
    except ImportError:  # pragma: no cover
        return None
    return get_ipython()
