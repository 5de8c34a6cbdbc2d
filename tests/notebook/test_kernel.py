"""Spreadsheet-style recompute in a real IPython shell: every cell fires ``post_run_cell``.

Each test runs cells with ``ip.run_cell`` and checks the board against the reference: a direct
``seamline.Design(...).fit()`` on the data as it is after the cell. Data: invented demo
scenarios (n = 2000), copied into the shell's namespace.
"""
from __future__ import annotations

import numpy as np
import pytest
from IPython.utils.capture import capture_output

import seamline
from seamline.demo_data import fuzzy_scenario, sharp_scenario
from seamline.notebook.board import boards

TIGHT = dict(rtol=1e-12, atol=1e-12)


@pytest.fixture
def shell(ip):
    s = sharp_scenario(n=2000, seed=31)
    before = set(ip.user_ns)
    live = {id(b) for b in boards()}
    ip.user_ns.update(df=s.data.copy(), c0=40.0, seamline=seamline)
    yield ip
    for b in boards():
        if id(b) not in live:
            b.close()
    for name in set(ip.user_ns) - before:
        del ip.user_ns[name]


def run(ip, code: str):
    with capture_output() as cap:
        result = ip.run_cell(code, store_history=False)
    assert result.success, f"cell failed: {result.error_in_exec!r}\n{cap.stdout}"
    return cap


MAGIC = """%%cutoff tut
data: df
score: reading_score
cutoff: c0
treated: below
outcome: math_gain
"""
PYTHON = ("b = seamline.board(df, score='reading_score', cutoff=40, treated='below', outcome='math_gain', "
          "covariates=['age'], data_name='df', panels=['fit', 'density', 'balance'])")


def reference(ip, cutoff=40.0):
    return seamline.Design(ip.user_ns["df"], score="reading_score", cutoff=cutoff, treated="below",
                           outcome="math_gain").fit()


def assert_matches(fit, ref):
    np.testing.assert_allclose([fit.estimate, fit.std_error, *fit.robust_conf_int, *fit.bandwidth],
                               [ref.estimate, ref.std_error, *ref.robust_conf_int, *ref.bandwidth], **TIGHT)


def test_rebinding_the_data_recomputes(shell):
    run(shell, PYTHON)
    b = shell.user_ns["b"]
    first, stamp = b.fit, b.updated_at
    run(shell, "df = df[df.age > df.age.quantile(0.1)].reset_index(drop=True)")
    assert b.data is shell.user_ns["df"]
    assert b.fit is not first and b.updated_at >= stamp and b.status == "fresh"
    assert_matches(b.fit, reference(shell))


def test_mutating_a_used_column_in_place_recomputes(shell):
    run(shell, PYTHON)
    b = shell.user_ns["b"]
    density = b.results["density"]
    run(shell, "df.loc[df.reading_score < 40, 'math_gain'] += 2.0")
    assert b.data is shell.user_ns["df"]                  # same object, new content
    assert_matches(b.fit, reference(shell))
    assert b.results["density"] is density               # the density test reads only the score


def test_mutating_an_unused_column_changes_nothing(shell):
    run(shell, PYTHON)
    b = shell.user_ns["b"]
    fit, stamp, calls = b.fit, b.updated_at, []
    b.on_change(lambda board, changed: calls.append(changed))
    run(shell, "df['attendance'] = df['attendance'] * 10; df.loc[0, 'school'] = 999")
    assert b.fit is fit and b.updated_at == stamp and calls == [] and b.check_inputs() == set()


def test_rebinding_to_an_equal_copy_recomputes_nothing(shell):
    run(shell, PYTHON)
    b = shell.user_ns["b"]
    fit, balance = b.fit, b.results["balance"]
    run(shell, "df = df.copy()")
    assert b.data is shell.user_ns["df"]
    assert b.fit is fit and b.results["balance"] is balance


def test_changing_a_spec_variable_recomputes(shell):
    run(shell, MAGIC)
    b = shell.user_ns["tut"]
    cap = run(shell, "c0 = 42.5")
    assert b.spec["cutoff"] == 42.5 and b.status == "fresh"
    assert_matches(b.fit, reference(shell, cutoff=42.5))
    # the displayed output's static fallback is refreshed in place (same display id)
    updates = [o for o in cap.outputs if o.update]
    assert updates and "text/html" in updates[-1].data


def test_a_failing_recompute_keeps_the_kernel_usable(shell):
    run(shell, MAGIC)
    b = shell.user_ns["tut"]
    run(shell, "c0 = 1000.0")                            # outside the score's range
    assert b.status == "error" and b.fit is None and b.design is None
    assert "`cutoff` must lie within the range of score" in b.errors["fit"]
    assert "notebook variable `c0`" in b.errors["fit"]
    assert set(b.errors) == set(b.panels)                # every panel says why it is empty
    run(shell, "x = 1 + 1")                              # the kernel works
    run(shell, "c0 = 'forty'")                           # a value of the wrong type
    assert b.status == "error" and "must be a number" in b.errors["fit"]
    run(shell, "c0 = 40.0")
    assert b.status == "fresh" and b.errors == {} and b.design.cutoff == 40.0
    assert_matches(b.fit, reference(shell))


def test_a_deleted_data_variable_is_reported_and_recovered(shell):
    run(shell, PYTHON)
    b = shell.user_ns["b"]
    run(shell, "saved = df; del df")
    assert b.status == "error" and "`df`" in b.errors["fit"]
    run(shell, "df = saved")
    assert b.status == "fresh"
    assert_matches(b.fit, reference(shell))


def test_pause_and_resume_between_cells(shell):
    run(shell, PYTHON)
    b = shell.user_ns["b"]
    fit = b.fit
    run(shell, "b.pause()")
    run(shell, "df.loc[df.reading_score >= 40, 'math_gain'] -= 1.0")
    assert b.stale and b.status == "stale" and b.fit is fit
    run(shell, "b.resume()")
    assert not b.stale and b.status == "fresh"
    assert_matches(b.fit, reference(shell))


def test_two_boards_track_their_own_inputs(shell):
    f = fuzzy_scenario(n=2000, seed=32)
    shell.user_ns["households"] = f.data.copy()
    run(shell, PYTHON)
    run(shell, f"h = seamline.board(households, score={f.score!r}, cutoff={f.cutoff}, treated={f.treated!r}, "
               f"outcome={f.outcome[0]!r}, takeup={f.takeup!r}, data_name='households', panels=['fit'])")
    a, h = shell.user_ns["b"], shell.user_ns["h"]
    a_fit, h_fit = a.fit, h.fit
    run(shell, f"households.loc[households.{f.score} < 0, {f.outcome[0]!r}] += 1.0")
    assert a.fit is a_fit and h.fit is not h_fit
    ref = seamline.Design(shell.user_ns["households"], score=f.score, cutoff=f.cutoff, treated=f.treated,
                          outcome=f.outcome[0], takeup=f.takeup).fit()
    assert_matches(h.fit, ref)
    run(shell, "df.loc[df.reading_score < 40, 'math_gain'] *= 1.5")
    assert a.fit is not a_fit and h.fit.estimate == pytest.approx(ref.estimate, rel=1e-12)


def test_one_after_cell_callback_per_shell(shell):
    run(shell, PYTHON)
    run(shell, PYTHON.replace("b = ", "b2 = "))
    run(shell, "%reload_ext seamline")
    run(shell, MAGIC)
    ours = [cb for cb in shell.events.callbacks["post_run_cell"] if getattr(cb, "_seamline_hook", False)]
    assert len(ours) == 1
    run(shell, "df.loc[df.reading_score < 40, 'math_gain'] += 0.5")
    assert_matches(shell.user_ns["tut"].fit, reference(shell))
    assert_matches(shell.user_ns["b2"].fit, reference(shell))
