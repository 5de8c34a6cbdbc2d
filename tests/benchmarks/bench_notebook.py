"""Notebook-layer costs on n = 1,000,000 invented rows, measured side by side in one process.

Live boards (issue 8), each as a ratio to one default fit on a fresh Design in the same run, printed
beside its target (invented data: seamline.demo_data.sharp_scenario, score, outcome, two covariates):
  L1. first board: headline / all panels                              <= 3x / <= 30x
  L2. bandwidth change: headline / all panels                         <= 0.5x / <= 5x
  L3. level change: all panels                                        <= 0.3x
  L4. set_option returns                                              <= max(20 ms, 0.2x)
  L5. 30 changes in a row, settled after the last (the last value wins)  <= 8x
  L6. n = 1e5 with the widget view: view built / bandwidth change to the open tab redrawn
      (its numbers and its charts, the board settle delay included)          <= 0.5 s / <= 0.3 s
  L7. n = 1e7: bandwidth change -> headline                           <= 100 ms
"All panels" in L1-L3 and L5 are the panels issue 8 set targets for; the inference panels added
later (bias-aware interval, weak-instrument-robust set, local randomization: permutation tests
and a bandwidth search, computed in the background after the others) are timed on lines of
their own ("all panels incl. inference": every panel, the wait until the board is idle), with the
same targets: first board <= 30x, bandwidth change <= 5x, level change <= 0.3x. The board runs
with the defaults (`seed: none`: one seed drawn per design and kept, so a level change reuses the
draws).
Where a figure misses, the slowest computations behind it are listed: the diagnostics' own cost
(density test, binned means, placebo, donut, balance, score profile) is cut in the engine (issue 8
item 4), not by the board.

Earlier figures, with their targets (issue 4):
  1. fingerprinting the columns a board uses / one default fit on a fresh Design   target <= 5%
     (a minimal design: score + outcome; and the scenario's full design: 8 columns, clusters,
     weights). Fingerprint and fit alternate, so each fingerprint reads its columns from memory
     after a fit has flushed the caches, as after a real cell; the back-to-back figure (columns
     still cached) and the cryptographic-digest alternatives are printed for comparison.
  2. `%load_ext seamline` in a fresh IPython kernel (jupyter_client, median of 3)    target <= 2 s
Run: make bench   (or .venv/bin/python tests/benchmarks/bench_notebook.py [n] [--live-only | --board-only];
--board-only prints L1-L5 for one board of n rows and stops)
"""
from __future__ import annotations

import statistics
import sys
import time

import numpy as np
import pandas as pd

import seamline
from _timing import timed  # tests/benchmarks/ is on sys.path when a script runs
from seamline.demo_data import sharp_scenario
from seamline.notebook.board import Board
from seamline.notebook.charts import VEGA_LITE_MIME
from seamline.notebook.static import PANEL_RESULTS
from seamline.notebook.reactive import fingerprint_algorithm, fingerprints, use_fingerprint_algorithm


def interleaved(fn_a, fn_b, repeat: int = 9) -> tuple[float, float]:
    """Medians of two timings taken alternately (the machine is noisy; compare like with like)."""
    a, b = [], []
    for _ in range(repeat):
        a.append(timed(fn_a, 1))
        b.append(timed(fn_b, 1))
    return statistics.median(a), statistics.median(b)


def fingerprint_cost(n: int) -> None:
    scenario = sharp_scenario(n, seed=7)
    full = scenario.design_kwargs()
    outcome = full["outcome"][0]
    minimal = dict(score=scenario.score, cutoff=scenario.cutoff, outcome=outcome, treated=scenario.treated)
    print(f"n = {n:,} invented rows (seamline.demo_data.sharp_scenario, seed=7); "
          f"chunk checksum {fingerprint_algorithm()}")
    for label, kwargs in (("score + outcome", minimal), ("full design", full)):
        board = Board("bench", kwargs, data=scenario.data, autorun=False)
        columns = board.columns
        t_print, t_fit = interleaved(lambda: fingerprints(scenario.data, columns),
                                     lambda: seamline.Design(scenario.data, **kwargs).fit())
        t_warm = timed(lambda: fingerprints(scenario.data, columns), repeat=9)
        t_check = timed(board.check_inputs)   # an unchanged board: fingerprints + comparison only
        nbytes = sum(scenario.data[c].to_numpy().nbytes for c in columns)
        print(f"[1] {label:16s} {len(columns)} columns ({nbytes / 2**20:5.1f} MiB): fingerprints "
              f"{t_print * 1e3:7.1f} ms | default fit {t_fit * 1e3:8.1f} ms | ratio {t_print / t_fit:6.2%} "
              f"(target <= 5%)")
        print(f"    back to back (columns still in cache) {t_warm * 1e3:6.1f} ms ({t_warm / t_fit:6.2%}); "
              f"whole after-cell check of an unchanged board {t_check * 1e3:6.1f} ms")
        if label == "score + outcome":
            for algorithm in ("sha256", "blake2b"):     # for comparison: cryptographic digests
                use_fingerprint_algorithm(algorithm)
                try:
                    t_strong = timed(lambda: fingerprints(scenario.data, columns))
                finally:
                    use_fingerprint_algorithm("crc32")
                print(f"    same columns with {algorithm:8s} chunk digests: {t_strong * 1e3:6.1f} ms "
                      f"({t_strong / t_fit:6.2%} of the fit)")
        board.close()


LOAD_CELL = """import time as _t
_t0 = _t.perf_counter()
%load_ext seamline
print(f"{_t.perf_counter() - _t0:.4f}")
"""


def load_ext_time(runs: int = 3) -> None:
    from jupyter_client.manager import start_new_kernel
    seconds = []
    for _ in range(runs):
        manager, client = start_new_kernel(kernel_name="python3")
        try:
            output = []
            reply = client.execute_interactive(
                LOAD_CELL, timeout=120,
                output_hook=lambda msg: output.append(msg["content"].get("text", ""))
                if msg["msg_type"] == "stream" else None)
            if reply["content"]["status"] != "ok":
                raise RuntimeError(f"%load_ext seamline failed: {reply['content']}")
            seconds.append(float("".join(output).strip().splitlines()[-1]))
        finally:
            client.stop_channels()
            manager.shutdown_kernel(now=True)
    runs_text = ", ".join(f"{s:.2f}" for s in seconds)
    print(f"[2] %load_ext seamline in a fresh kernel: median {statistics.median(seconds):.2f} s "
          f"(runs {runs_text}; target <= 2 s)")


# ---- live boards (issue 8) ----------------------------------------------------------------------
def _live_kwargs(scenario) -> dict:
    return dict(score=scenario.score, cutoff=scenario.cutoff, outcome=scenario.outcome[0],
                treated=scenario.treated, covariates=["age", "prior_math"])


class _Costs:
    """Wall time of each computation of a board, from its progress callbacks."""

    def __init__(self, board):
        self.times: dict[str, float] = {}
        self._label, self._t = None, 0.0
        board.on_progress(self._step)

    def _step(self, done, total, label):
        now = time.perf_counter()
        if self._label is not None:
            self.times[self._label] = self.times.get(self._label, 0.0) + now - self._t
        self._label, self._t = (None if label == "done" else label), now

    def reset(self):
        self.times.clear()

    def slowest(self, fit: float, k: int = 4) -> str:
        items = sorted(self.times.items(), key=lambda kv: -kv[1])[:k]
        return ", ".join(f"{name} {t / fit:.1f}x" for name, t in items)


def _line(label: str, seconds: float, fit: float, target: float, costs: "_Costs | None" = None,
          always: bool = False) -> None:
    ratio = seconds / fit
    verdict = "ok" if ratio <= target else "MISS"
    print(f"{label:46s} {seconds * 1e3:9.1f} ms = {ratio:6.2f}x fit (target <= {target:g}x) {verdict}")
    if costs is not None and (verdict == "MISS" or always):
        print(f"{'':49s}slowest: {costs.slowest(fit)}")


# Panels added after issue 8's targets were set (see the module docstring).
INFERENCE_PANELS = ("bias_aware", "weak_iv", "local_randomization")




def _reference_fit(data, kwargs) -> float:
    seamline.Design(data, **kwargs).fit()          # warm imports and caches of the process
    return statistics.median(timed(lambda: seamline.Design(data, **kwargs).fit(), 1) for _ in range(3))


def live_board(n: int) -> None:
    from seamline.notebook.board import board as make_board
    scenario = sharp_scenario(n, seed=7)
    data, kwargs = scenario.data, _live_kwargs(scenario)
    fit = _reference_fit(data, kwargs)
    print(f"\nLive boards, n = {n:,} (score, outcome, two covariates): one default fit on a fresh Design "
          f"{fit * 1e3:.1f} ms")
    t0 = time.perf_counter()
    b = make_board(data, **kwargs)                  # returns once the headline is there
    t_head = time.perf_counter() - t0
    costs = _Costs(b)
    core = [p for p in b.panels if p not in INFERENCE_PANELS]
    b.wait(*core)
    t_all = time.perf_counter() - t0
    _line("[L1] first board: headline", t_head, fit, 3)
    _line("[L1] first board: all panels", t_all, fit, 30, costs)
    b.wait()
    _line("[L1] first board: all panels incl. inference", time.perf_counter() - t0, fit, 30, costs, always=True)
    h = b.results["fit"].bandwidth[0]
    returns = []

    def change(name, value, *panels):
        costs.reset()
        start = time.perf_counter()
        b.set_option(name, value)
        returns.append(time.perf_counter() - start)
        b.wait(*(panels or core))
        return time.perf_counter() - start

    def settle(label, start, target):
        b.wait()
        _line(label, time.perf_counter() - start, fit, target, costs, always=True)

    _line("[L2] bandwidth change -> headline", change("bandwidth", round(1.1 * h, 4), "fit"), fit, 0.5)
    b.wait()
    start = time.perf_counter()
    _line("[L2] bandwidth change -> all panels", change("bandwidth", round(1.2 * h, 4)), fit, 5, costs, always=True)
    settle("[L2] bandwidth change -> all incl. inference", start, 5)
    start = time.perf_counter()
    _line("[L3] level change -> all panels", change("level", 0.9), fit, 0.3, costs)
    settle("[L3] level change -> all incl. inference", start, 0.3)
    values = [round(h * (0.8 + 0.02 * i), 4) for i in range(30)]
    costs.reset()
    for value in values:
        start = time.perf_counter()
        b.set_option("bandwidth", value)
        returns.append(time.perf_counter() - start)
    start = time.perf_counter()
    b.wait(*core)
    last_wins = b.results["fit"].bandwidth == (values[-1], values[-1])
    _line(f"[L5] 30 changes, settled after the last (last wins: {last_wins})", time.perf_counter() - start,
          fit, 8, costs)
    target = max(0.020, 0.2 * fit)
    print(f"{'[L4] set_option returns (slowest of ' + str(len(returns)) + ')':46s} {max(returns) * 1e3:9.1f} ms "
          f"(target <= {target * 1e3:.0f} ms) {'ok' if max(returns) <= target else 'MISS'}")
    b.close()


def _until_open_tab_drawn(view, b, since: float, timeout: float = 30.0) -> None:
    """Poll (without awaiting, which would skip the board's settle delay) until what the user
    sees is current: the board fresh, the open tab's results current and each of its charts
    showing the spec of those results (a cache hit once the view's chart thread has drawn it)."""
    from seamline.notebook.panels import chart_spec
    tab = view._open_tab()
    while time.perf_counter() - since < timeout:
        time.sleep(0.002)
        if b.status != "fresh" or view._paint or view._painting:
            continue
        state = b.state()
        if state.pending & {"fit", *PANEL_RESULTS[tab]}:
            continue
        drawn = [output.outputs[0]["data"][VEGA_LITE_MIME] if output.outputs else None
                 for _, output in view._charts[tab]]
        if all(shown is chart_spec(state, what) for shown, (what, _) in zip(drawn, view._charts[tab])):
            return
    state = b.state()
    drawn = [output.outputs[0]["data"][VEGA_LITE_MIME] if output.outputs else None
             for _, output in view._charts[tab]]
    raise TimeoutError(f"the {tab} tab was not redrawn within {timeout} s (status {b.status}, pending "
                       f"{sorted(state.pending)}, painting {bool(view._paint or view._painting)}, charts drawn "
                       f"{[d is chart_spec(state, w) for d, (w, _) in zip(drawn, view._charts[tab])]}, "
                       f"{[type(d).__name__ for d in drawn]})")


def live_view(n: int = 100_000) -> None:
    import seamline.notebook.scheduler as board_module
    from seamline.notebook.board import board as make_board
    from seamline.notebook.panels import BoardView
    scenario = sharp_scenario(n, seed=8)
    data, kwargs = scenario.data, _live_kwargs(scenario)
    real = board_module.live_front_end
    board_module.live_front_end = lambda: True     # as in JupyterLab: the view renders the open tab only
    try:
        b = make_board(data, **kwargs).wait()
        BoardView(b).close()                        # first use imports ipywidgets
        # ... and the first chart of a kernel imports Altair (about 1.7 s of CPU, most of it
        # altair.expr's parser), on the view's chart thread, competing with the board's worker for
        # the interpreter: a one-off per kernel, timed here apart from the changes.
        start = time.perf_counter()
        import altair
        altair.Chart(pd.DataFrame({"x": [0.0]})).mark_point().encode(x="x:Q").to_dict(validate=False)
        t_altair = time.perf_counter() - start
        start = time.perf_counter()
        view = BoardView(b)
        t_view = time.perf_counter() - start
        h = b.results["fit"].bandwidth[0]
        times = []
        for i in range(5):
            start = time.perf_counter()
            view._rule.value = "manual"
            view._manual.value = round(h * (1.05 + 0.05 * i), 4)
            _until_open_tab_drawn(view, b, start)
            times.append(time.perf_counter() - start)
        t_change = statistics.median(times)
        print(f"{'[L6] n = 1e5, widget view built':46s} {t_view * 1e3:9.1f} ms (target <= 500 ms) "
              f"{'ok' if t_view <= 0.5 else 'MISS'}")
        print(f"{'[L6] n = 1e5, bandwidth change, open tab redrawn':46s} {t_change * 1e3:9.1f} ms (target <= 300 ms) "
              f"{'ok' if t_change <= 0.3 else 'MISS'}")
        print(f"{'     (once per kernel: importing Altair, first chart)':46s} {t_altair * 1e3:9.1f} ms")
        view.close()
        b.close()
    finally:
        board_module.live_front_end = real


def live_large(n: int = 10_000_000) -> None:
    from seamline.notebook.board import board as make_board
    rng = np.random.default_rng(9)                  # invented: a score and an outcome with a jump of 1
    x = rng.uniform(-1.0, 1.0, n)
    frame = pd.DataFrame({"x": x, "y": 0.5 * x + (x >= 0) + rng.normal(0.0, 1.0, n)})
    b = make_board(frame, score="x", cutoff=0.0, outcome="y", panels=["fit"]).wait()
    times = []
    for i in range(5):
        start = time.perf_counter()
        b.set_option("bandwidth", round(0.2 + 0.01 * i, 3))
        b.wait("fit")
        times.append(time.perf_counter() - start)
    t = statistics.median(times)
    print(f"{'[L7] n = 1e7, bandwidth change -> headline':46s} {t * 1e3:9.1f} ms (target <= 100 ms) "
          f"{'ok' if t <= 0.1 else 'MISS'}")
    b.close()


def main(n: int = 1_000_000, live_only: bool = False, board_only: bool = False) -> None:
    live_board(n)
    if board_only:          # the L1-L5 figures of one board only (e.g. at n = 1e5 and 1e6 in turn)
        return
    live_view()
    live_large()
    if not live_only:
        fingerprint_cost(n)
        load_ext_time()


if __name__ == "__main__":
    args = [a for a in sys.argv[1:] if not a.startswith("--")]
    main(int(float(args[0])) if args else 1_000_000, live_only="--live-only" in sys.argv,
         board_only="--board-only" in sys.argv)
