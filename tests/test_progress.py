"""Progress of long steps: the engine's stage reports, the per-session step registry behind the
dashboard's progress panel, its poll callback, and one computation for requests that need the
same result at the same time."""

import threading
import time

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings, strategies as st

import lagwise
from lagwise.app import callbacks as C
from lagwise.app.state import Store
from lagwise.app.work import IDLE_POLLS, SHOW_AFTER, WORK, Work
from lagwise.engine.studies.panel_diagnostics import diagnose_panel
from lagwise._files import demo_file

from .helpers import panel_frame, regression_frame


def recorder():
    calls = []
    return calls, lambda done, total=None, what="": calls.append((done, total, what))


def check_sequence(calls, total):
    """Reported units never go back, never pass the total, and the last report is complete."""
    done = [c[0] for c in calls]
    assert done == sorted(done)
    assert all(c[1] == total for c in calls)
    assert 0 <= done[0] and done[-1] == total
    assert all(isinstance(c[2], str) for c in calls)


@pytest.fixture(scope="module")
def fit():
    return lagwise.fit_ols(lagwise.load_table(demo_file()), "exret_12m",
                           ["rate_capacity", "credit_spread"], horizon=12)


def test_compare_reports_each_estimator_and_gives_the_same_table(fit):
    calls, cb = recorder()
    with_progress = fit.compare(progress=cb)
    pd.testing.assert_frame_equal(with_progress, fit.compare())
    n = with_progress.estimator.nunique()
    check_sequence(calls, n)
    assert len(calls) == n + 1 and all(c[2] for c in calls[:-1])   # each names its estimator


def test_diagnose_reports_its_stages_and_gives_the_same_report(fit):
    calls, cb = recorder()
    rep = lagwise.diagnose(fit, progress=cb)
    check_sequence(calls, 4)
    assert [c[0] for c in calls] == [0, 1, 2, 3, 4]
    pd.testing.assert_frame_equal(rep.tests, lagwise.diagnose(fit).tests)


def test_panel_diagnostics_report_their_stages():
    df = panel_frame(seed=3, entities=30, periods=20)
    pfit = lagwise.fit_panel(df, "y", ["x1", "x2"], entity="firm", time="month")
    calls, cb = recorder()
    rep = diagnose_panel(pfit, progress=cb)
    check_sequence(calls, 4)
    pd.testing.assert_frame_equal(rep.tests, diagnose_panel(pfit).tests)


@pytest.mark.parametrize("kind", ["csv", "parquet"])
def test_loader_reports_its_stages(kind, tmp_path):
    frame = regression_frame(seed=1, n=300)
    path = tmp_path / f"d.{kind}"
    frame.to_csv(path, index=False) if kind == "csv" else frame.to_parquet(path)
    calls, cb = recorder()
    table = lagwise.load_table(path, progress=cb)
    check_sequence(calls, 3)
    assert [c[0] for c in calls] == [0, 1, 2, 3]
    pd.testing.assert_frame_equal(table.frame, lagwise.load_table(path).frame)


def test_loader_refusal_leaves_no_half_report(tmp_path):
    path = tmp_path / "bad.csv"
    path.write_text("y,x\n1,2,3\n4,5\n")
    calls, cb = recorder()
    with pytest.raises(lagwise.DataError):
        lagwise.load_table(path, progress=cb)
    assert calls and calls[-1][0] < 3                    # never reported as complete


def test_work_registry_scopes_steps_to_their_session():
    work = Work()
    with work.step("a", "Reading") as update:
        update(1, 3, "parsing rows")
        (only,) = work.active("a")
        assert (only.label, only.done, only.total, only.what) == ("Reading", 1, 3,
                                                                   "parsing rows")
        assert only.fraction == pytest.approx(1 / 3)
        assert work.active("b") == [] and work.active(None) == [] and work.active(7) == []
    assert work.active("a") == []
    with pytest.raises(RuntimeError):                     # a failing step is removed as well
        with work.step("a", "Fitting"):
            raise RuntimeError("boom")
    assert work.active("a") == []
    with work.step({"not": "a session"}, "x") as update:  # malformed ids register nothing
        update(1, 2)
    assert work._steps == {}


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.integers(-5, 50), st.one_of(st.none(), st.integers(0, 40)),
                          st.text(max_size=8)), max_size=12))
def test_step_fraction_is_always_a_valid_bar(updates):
    work = Work()
    with work.step("s", "Step") as update:
        for u in updates:
            update(*u)
            (step,) = work.active("s")
            frac = step.fraction
            assert frac is None or 0.0 <= frac <= 1.0
            if frac is not None:                          # the bar the page draws
                from lagwise.app.views import work_strip
                assert work_strip([step])


def test_poll_shows_running_steps_and_switches_itself_off():
    sid = "poll-test-session"
    with WORK.step(sid, "Comparing estimators") as update:
        update(3, 16, "Parzen")
        children, cls, disabled = C.on_work_poll(1, sid)
        assert children == [] and "lw-hidden" in cls and disabled is C.no_update   # too new
        time.sleep(SHOW_AFTER + 0.05)
        children, cls, disabled = C.on_work_poll(IDLE_POLLS + 5, sid)
        assert "lw-hidden" not in cls and disabled is C.no_update
        text = str(children)
        assert "Comparing estimators" in text and "3 of 16" in text and "Parzen" in text
    children, cls, disabled = C.on_work_poll(1, sid, "lw-work")   # a request may be on its way
    assert "lw-hidden" in cls and disabled is C.no_update
    children, cls, disabled = C.on_work_poll(IDLE_POLLS, sid)  # idle long enough: off
    assert "lw-hidden" in cls and disabled is True
    # already hidden: nothing is resent
    assert C.on_work_poll(1, sid, "lw-work lw-hidden") == (C.no_update,) * 3
    assert C.on_work_poll(IDLE_POLLS, sid, "lw-work lw-hidden")[:2] == (C.no_update,) * 2
    for bad in (None, "", ["x"], {"a": 1}, 3):                 # malformed payloads
        assert C.on_work_poll(bad, bad)[2] in (True, C.no_update)


def test_concurrent_requests_build_a_derived_result_once():
    store = Store()
    sid = store.open_session()
    calls = []
    gate = threading.Barrier(4)

    def build():
        calls.append(1)
        time.sleep(0.3)
        return np.arange(10.0)

    out = []

    def request():
        gate.wait()
        out.append(store.derived(sid, "compare", build))

    threads = [threading.Thread(target=request) for _ in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert len(calls) == 1 and len(out) == 4
    assert all(o is out[0] for o in out)
    assert store._gates == {}                                  # nothing left behind


def test_a_failed_build_lets_the_next_request_try_again():
    store = Store()
    sid = store.open_session()

    def bad():
        raise lagwise.EstimationError("no")
    with pytest.raises(lagwise.EstimationError):
        store.derived(sid, "k", bad)
    assert store.derived(sid, "k", lambda: np.ones(3)).sum() == 3
    assert store._gates == {}


def test_the_slider_callback_sends_no_progress_polls():
    """A slider move must only reweight the cache: the slider's callback does not switch the
    poll on (its slow first round is shared with the sensitivity callback, which does)."""
    from lagwise.app import create_app
    specs = create_app()._callback_list

    def spec(output_start):
        (found,) = [s for s in specs if s["output"].startswith(output_start)]
        return found
    assert not spec("..coef-table.rowData").get("running")
    for slow in ("..sens-graph.figure...flip-text", "..resid-graph.figure", "..fit-key.data",
                 "..dataset-key.data...upload-message", "..predictive-card.style"):
        assert "work-poll" in str(spec(slow).get("running")), slow
