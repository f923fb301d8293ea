"""Malformed callback payloads posted straight to the server (as a script, not the page, would
send them) get a message or no update, never an HTTP 500; ids the server did not issue reach no
data."""

import json
import random

import pytest

from lagwise.app.main import create_app

GARBAGE = [None, 0, -1, 1e308, True, "", "x" * 300, "data:,", "data:text/csv;base64,@@@",
           [], [1, 2], ["a", None], {"a": 1}, {"nested": {"deep": [1, {"x": [2]}]}},
           "../../etc/passwd", {"type": "est-param", "name": "kernel"}, 3.5, "fixed"]


@pytest.fixture(scope="module")
def app_and_session():
    app = create_app()
    layout = app.layout()
    found = {c.id: c.data for c in layout._traverse()
             if getattr(c, "id", None) in ("session", "dataset-key")}
    app.layout_key = found["dataset-key"]
    return app, found["session"]


def _items(spec):
    return [(d["id"], d["property"]) for d in spec]


def _value_for(cid, prop, rng, session):
    if cid == "session" and rng.random() < 0.5:
        return session                    # a real session: reach deeper into the callbacks
    return rng.choice(GARBAGE)


def _entry(cid, prop, value):
    if cid.startswith("{"):               # a pattern-matching id: a list of matching components
        pattern = json.loads(cid)
        concrete = {k: ("kernel" if isinstance(v, list) else v) for k, v in pattern.items()}
        return [{"id": concrete, "property": prop, "value": value}]
    return {"id": cid, "property": prop, "value": value}


def _payload(key, spec, rng, session):
    outputs = []
    for part in key.strip(".").split("..."):
        part = part.split("@")[0]
        cid, _, prop = part.rpartition(".")
        outputs.append({"id": json.loads(cid) if cid.startswith("{") else cid,
                        "property": prop})
    inputs = [_entry(cid, prop, _value_for(cid, prop, rng, session))
              for cid, prop in _items(spec["inputs"])]
    state = [_entry(cid, prop, _value_for(cid, prop, rng, session))
             for cid, prop in _items(spec.get("state", []))]
    first = spec["inputs"][0]
    return {"output": key, "outputs": outputs if len(outputs) > 1 else outputs[0],
            "inputs": inputs, "state": state,
            "changedPropIds": [f"{first['id']}.{first['property']}"]}


def test_no_callback_answers_a_malformed_payload_with_500(app_and_session):
    app, session = app_and_session
    client = app.server.test_client()
    rng = random.Random(20261202)
    statuses = {}
    for key, spec in list(app.callback_map.items()):
        for _ in range(12):
            payload = _payload(key, spec, rng, session)
            res = client.post("/_dash-update-component", json=payload,
                              headers={"Host": "127.0.0.1"})
            statuses.setdefault(res.status_code, []).append(key[:60])
            assert res.status_code != 500, (key, payload, res.data[:300])
    assert set(statuses) <= {200, 204, 400}, {k: len(v) for k, v in statuses.items()}
    assert len(statuses.get(200, [])) > len(statuses.get(400, [])), {k: len(v) for k, v in statuses.items()}


def test_unknown_session_reaches_no_data(app_and_session):
    app, session = app_and_session
    from lagwise.app.state import STORE
    STORE.put(session, "own:entry", [1.0, 2.0])
    for key in ("own:entry", app.layout_key):            # its own entry and the shared data
        assert STORE.get(session, key) is not None
    for key in ("own:entry", app.layout_key):
        assert STORE.get("made-up-session", key) is None
        assert STORE.get(session + "x", key) is None
        assert STORE.get(["not", "a", "string"], key) is None
