"""Background recomputation: the kernel stays free, the last value wins, errors stay in panels.

Each test slows or blocks one engine call (monkeypatching ``Design`` methods) to hold the board's
worker thread mid-computation, then acts from the main thread as a user would. Reference: a
direct ``seamline.Design(...)`` call on the same data and options (the notebook layer's
reference). Data: the package's invented demo scenario (n = 2000).
"""
from __future__ import annotations

import threading
import time

import numpy as np
import pytest

import seamline
from seamline.demo_data import sharp_scenario
from seamline.errors import WaitTimeoutError
from seamline.estimate.design import Design

pytestmark = pytest.mark.usefixtures("close_new_boards")

TIGHT = dict(rtol=1e-12, atol=1e-12)


@pytest.fixture
def sharp():
    return sharp_scenario(n=2000, seed=11)


def _kwargs(s):
    return dict(s.design_kwargs())


@pytest.fixture
def gate(monkeypatch):
    """Design.fit at a manual bandwidth blocks until ``gate.set()``; ``gate.entered`` tells when the
    worker is inside it; ``gate.bandwidths`` lists the manual bandwidths fitted."""
    release, entered, fitted = threading.Event(), threading.Event(), []
    real = Design.fit

    def held(self, *args, **kwargs):
        bandwidth = kwargs.get("bandwidth")
        if isinstance(bandwidth, float) and threading.current_thread().name.startswith("seamline-board"):
            fitted.append(bandwidth)
            entered.set()
            release.wait(10)
        return real(self, *args, **kwargs)

    monkeypatch.setattr(Design, "fit", held)
    release.entered, release.bandwidths = entered, fitted
    yield release
    release.set()


def test_set_option_returns_at_once_and_reads_wait_for_the_new_result(sharp, gate):
    b = seamline.board(sharp.data, **_kwargs(sharp), panels=["fit"])
    start = time.perf_counter()
    b.set_option("bandwidth", 3.0)
    returned = time.perf_counter() - start
    assert gate.entered.wait(5)
    assert returned < 0.5 and b.status == "recomputing"      # the worker is held inside the fit
    threading.Timer(0.2, gate.set).start()
    # Reading from code waits for the result of the current inputs (no stale number).
    assert b.fit.bandwidth == (3.0, 3.0) and b.status == "fresh"


def test_rapid_changes_coalesce_and_the_last_value_wins(sharp, gate):
    b = seamline.board(sharp.data, **_kwargs(sharp), panels=["fit", "bins"]).wait()
    values = [round(2.0 + 0.1 * i, 2) for i in range(30)]
    b.set_option("bandwidth", values[0])
    assert gate.entered.wait(5)                   # the first change is being computed ...
    for value in values[1:]:                      # ... while 29 more arrive
        b.set_option("bandwidth", value)
    gate.set()
    b.wait()
    assert b.fit.bandwidth == (values[-1],) * 2
    assert b.results["bins"].fit.bandwidth == (values[-1],) * 2
    # nothing queued up: the first (running) value and the last one, no values in between
    assert gate.bandwidths[0] == values[0] and gate.bandwidths[-1] == values[-1]
    assert len(gate.bandwidths) <= 3, gate.bandwidths
    ref = Design(sharp.data, **_kwargs(sharp)).fit(bandwidth=values[-1])
    np.testing.assert_allclose(b.fit.robust_conf_int, ref.robust_conf_int, **TIGHT)


def test_a_data_change_during_a_computation_discards_its_result(sharp, gate):
    data = sharp.data.copy()
    b = seamline.board(data, **_kwargs(sharp), panels=["fit"]).wait()
    seen = []
    b.on_change(lambda board, changed: seen.append(board.state().results["fit"]))
    b.set_option("bandwidth", 3.0)
    assert gate.entered.wait(5)                   # computing on the old data ...
    outcome = sharp.outcome[0]
    data.loc[data[sharp.score] < sharp.cutoff, outcome] += 2.0    # ... when the data change in place
    assert b.check_inputs() == {f"column:{outcome}"}
    gate.set()
    b.wait()
    old = Design(sharp.data, **_kwargs(sharp)).fit(bandwidth=3.0)
    new = Design(data, **_kwargs(sharp)).fit(bandwidth=3.0)
    np.testing.assert_allclose(b.fit.estimate, new.estimate, **TIGHT)
    assert not np.isclose(old.estimate, new.estimate)
    shown = [f.estimate for f in seen if f is not None]
    assert not any(np.isclose(e, old.estimate, rtol=1e-12) for e in shown), "the old data's result was shown"


def test_an_error_in_the_background_shows_in_its_panel_and_the_board_goes_on(sharp, monkeypatch, caplog):
    def broken(self, *args, **kwargs):
        raise RuntimeError("sensitivity engine bug")

    monkeypatch.setattr(Design, "sensitivity", broken)
    b = seamline.board(sharp.data, **_kwargs(sharp)).wait()
    assert b.results["sensitivity"] is None
    assert b.errors["sensitivity"] == "RuntimeError: sensitivity engine bug"
    assert b.status == "fresh" and b.results["density"] is not None      # the other panels are fine
    b.set_option("bandwidth", 4.0)                                        # the worker still works
    assert b.wait().fit.bandwidth == (4.0, 4.0)
    assert b._worker.is_alive()


def test_wait_with_a_timeout(sharp, gate):
    b = seamline.board(sharp.data, **_kwargs(sharp), panels=["fit"])
    b.set_option("bandwidth", 3.0)
    assert gate.entered.wait(5)
    start = time.perf_counter()
    with pytest.raises(WaitTimeoutError, match=r"^`timeout` must leave time for the panels to finish; got 0.2 s"):
        b.wait("fit", timeout=0.2)
    assert 0.15 < time.perf_counter() - start < 2.0
    assert isinstance(WaitTimeoutError("x"), TimeoutError)
    gate.set()
    assert b.wait("fit", timeout=10) is b and b.fit.bandwidth == (3.0, 3.0)
    with pytest.raises(seamline.errors.InvalidOptionError, match=r"^`panels` must be among"):
        b.wait("no such panel")


def test_changes_from_another_thread_while_the_main_thread_reads(sharp):
    # Widget messages arrive on subshell threads: set_option from a thread, reads from this one.
    b = seamline.board(sharp.data, **_kwargs(sharp)).wait()
    errors = []

    def slider():
        try:
            for i in range(20):
                b.set_option("bandwidth", 3.0 + 0.05 * i)
        except Exception as exc:  # noqa: BLE001 - reported below
            errors.append(exc)

    thread = threading.Thread(target=slider)
    thread.start()
    while thread.is_alive():
        b.check_inputs()
        b.state()
    thread.join()
    assert not errors
    assert b.wait().fit.bandwidth == (3.95, 3.95)
    ref = Design(sharp.data, **_kwargs(sharp))
    np.testing.assert_allclose(b.results["sensitivity"].table()["estimate"],
                               ref.sensitivity(bandwidth=3.95).table()["estimate"], **TIGHT)


def test_pending_panels_are_marked_and_never_shown_as_current(sharp, gate):
    b = seamline.board(sharp.data, **_kwargs(sharp)).wait()
    b.set_option("bandwidth", 3.0)
    assert gate.entered.wait(5)
    state = b.state()
    assert "fit" in state.pending and state.status == "recomputing"
    assert "density" not in state.pending            # a bandwidth change leaves the density test current
    gate.set()
    b.wait()
    assert not b.state().pending and b.status == "fresh"


def test_a_newer_change_stops_a_long_background_computation(monkeypatch):
    # Local randomization draws its assignments in blocks; here each block is held 50 ms (about 30 s in
    # all), so only the interruption between blocks lets the new headline through in time. Data of its
    # own, so that no result kept from another test of this process answers without drawing.
    from seamline.core import randomization
    sharp = sharp_scenario(n=2000, seed=29)
    real, entered, stopped = randomization.prefix_treated_sums, threading.Event(), []

    def slow(windows, permutations, seed):
        if threading.current_thread().name.startswith("seamline-board") and not stopped:
            entered.set()
            try:
                for _ in range(600):
                    randomization.checkpoint()
                    time.sleep(0.05)
            except BaseException:
                stopped.append(True)
                raise
        return real(windows, permutations, seed)

    from seamline.estimate import local_randomization
    monkeypatch.setattr(local_randomization, "prefix_treated_sums", slow)
    b = seamline.board(sharp.data, **_kwargs(sharp), panels=["fit", "local_randomization"],
                       permutations=2000)
    b.wait("fit")
    threading.Thread(target=lambda: b.wait("local_randomization"), daemon=True).start()
    assert entered.wait(10)                       # the worker is inside the long draws ...
    b.set_option("bandwidth", 3.0)                # ... when the user changes the bandwidth
    b.wait("fit", timeout=10)                     # without the interruption: about 30 s
    assert b.fit.bandwidth == (3.0, 3.0) and stopped == [True]
    b.wait(timeout=60)                            # the stopped panel is computed again, for these inputs
    ref = Design(sharp.data, **_kwargs(sharp)).fit(bandwidth=3.0)
    np.testing.assert_allclose(b.fit.robust_conf_int, ref.robust_conf_int, **TIGHT)
    assert b.results["local_randomization"] is not None and b.status == "fresh"


def test_a_panel_that_becomes_current_with_the_same_result_is_announced(sharp):
    # A change can leave a panel's result the very same object (a cached node) while its key moves;
    # subscribers must still hear of the panel, or a view keeps its "updating" note and cleared
    # charts although the numbers are current (found in the 1e5 view bench).
    from seamline.notebook.board import Board
    b = Board("same", _kwargs(sharp), {}, data=sharp.data).wait()
    heard = []
    b.on_change(lambda board, changed: heard.append(set(changed)))
    value = b.results["density"]
    with b._lock:
        b._keys["density"] = None                  # pending, as after a change of its inputs
    assert "density" in b.state().pending
    b._publish(b._target, {"density": value})      # recomputed: the same object again
    assert "density" in set().union(*heard)
    assert "density" not in b.state().pending and b.results["density"] is value
