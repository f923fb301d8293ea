"""The server cannot be locked (issue 21, item 9): a page load issues a session id and stores
nothing; the session is created by its first stored result; ids that never store anything
expire within minutes, and when the table of waiting ids is full the least recently used one is
dropped, so no visitor is refused. The attack of the issue (400 plain page loads) followed by a
normal visit."""

from __future__ import annotations

import json
import time

import numpy as np
import pytest
from dash import dcc, html

from lagwise.app import main
from lagwise.app.main import create_app
from lagwise.app.state import STORE, CapacityError, SessionError, Store

HOST = {"Host": "127.0.0.1"}


def _layout_values(client):
    res = client.get("/_dash-layout", headers=HOST)
    assert res.status_code == 200
    found = {}

    def walk(node):
        if isinstance(node, dict):
            props = node.get("props", {})
            if props.get("id") in ("session", "dataset-key", "boot-message"):
                found[props["id"]] = props.get("data")
            for v in node.values():
                walk(v)
        elif isinstance(node, list):
            for v in node:
                walk(v)
    walk(json.loads(res.data))
    return found


@pytest.fixture
def fresh_store(monkeypatch):
    """The app's store emptied for this test (and restored after it)."""
    monkeypatch.setattr(STORE, "_sessions", {})
    if hasattr(STORE, "_pending"):
        monkeypatch.setattr(STORE, "_pending", type(STORE._pending)())
    return STORE


def _light_layout(session, initial, where="", badge=""):
    """The page's session and data stores only (the full page takes about 0.2 s to build;
    what a page load stores is decided before it, in main.create_app's layout function)."""
    return html.Div([dcc.Store(id="session", data=session),
                     dcc.Store(id="dataset-key", data=initial.get("dataset_key")),
                     dcc.Store(id="boot-message", data=initial.get("message"))])


def test_four_hundred_page_loads_then_a_normal_visit(fresh_store, monkeypatch):
    monkeypatch.setattr(main, "build_layout", _light_layout)
    app = create_app()
    client = app.server.test_client()
    started = time.perf_counter()
    for _ in range(STORE.max_sessions):            # plain GETs: no script, no custom header
        assert client.get("/_dash-layout", headers=HOST).status_code == 200
    attack = time.perf_counter() - started
    assert fresh_store.session_count == 0             # nothing stored, no session created
    visit = _layout_values(client)
    session, key = visit.get("session"), visit.get("dataset-key")
    assert session, visit                             # the visitor got a session id
    assert key and STORE.get(session, key) is not None   # and the shared data
    STORE.put(session, "fit:first", np.zeros(100))    # its first stored result creates it
    assert STORE.get(session, "fit:first") is not None and fresh_store.session_count == 1
    assert attack < 60


def test_ids_that_store_nothing_expire_within_minutes():
    store = Store(pending_seconds=0.05)
    sid = store.open_session()
    assert store.has_session(sid)
    time.sleep(0.1)
    assert not store.has_session(sid)
    with pytest.raises(SessionError):
        store.put(sid, "k", np.zeros(3))
    from lagwise.app import state
    assert 60 <= state.PENDING_SECONDS <= 30 * 60     # "within minutes"


def test_a_full_table_of_waiting_ids_drops_the_least_recently_used():
    store = Store(max_pending=3)
    a, b, c = (store.open_session() for _ in range(3))
    store.get(a, "anything")                          # a request: a is used again
    d = store.open_session()                          # full: b, the least recently used, goes
    assert store.has_session(a) and store.has_session(c) and store.has_session(d)
    assert not store.has_session(b)
    for sid in (a, c, d):
        store.put(sid, "x", np.zeros(3))


def test_sessions_holding_data_are_still_bounded():
    store = Store(max_sessions=2)
    ids = [store.open_session() for _ in range(5)]    # issuing is never refused
    store.put(ids[0], "x", np.zeros(3))
    store.put(ids[1], "x", np.zeros(3))
    with pytest.raises(CapacityError):
        store.put(ids[2], "x", np.zeros(3))
    assert store.get(ids[0], "x") is not None


def test_shared_data_reaches_issued_ids_only():
    store = Store()
    store.put_shared("data:demo", np.arange(4.0))
    sid = store.open_session()
    assert store.get(sid, "data:demo") is not None
    assert store.get("forged", "data:demo") is None and store.get(None, "data:demo") is None
