"""create_app() and the `lagwise serve` entry point (127.0.0.1, debug off unless asked).

Safe by default: the server answers only requests whose Host header names the address it was
started on (loopback names by default: a page elsewhere cannot drive it by DNS rebinding), sends
a content security policy the app itself passes, no MIME sniffing and no framing by other
origins, bounds request bodies, and issues every session id itself."""

from __future__ import annotations

import logging
import threading
from pathlib import Path

from dash import Dash
from flask import Response, request

from .._files import assets_dir, demo_file
from ..engine.data.reading import load_table
from . import callbacks, exports, studies  # noqa: F401 - their callbacks are recorded on import
from . import projections  # noqa: F401 - the local-projection mode's callbacks
from . import factors  # noqa: F401 - the factor-model mode: its sidebar section, cards, callbacks
from . import clusters  # noqa: F401 - few clusters (issue 23): its callbacks are recorded on import
from . import answer  # noqa: F401 - the model line and the answer line (issue 22)
from .derived import dataset_from_bytes, dataset_from_table, given_model
from .layout import build_layout
from .wiring import register
from .state import MAX_UPLOAD_BYTES, STORE, CapacityError, content_hash, key_for

DEMO_SPEC = {"response": "exret_12m", "regressors": ["rate_capacity", "credit_spread"],
             "horizon": 12, "horizons": {"exret_12m": 12, "exret_36m": 36},
             "one_period": {"exret_12m": "exret_1m", "exret_36m": "exret_1m"}}
LOOPBACK = ("127.0.0.1", "localhost", "::1", "[::1]")


def _host_names(host: str, extra=()) -> set[str]:
    names = {host, *extra}
    if host in LOOPBACK or host in ("", None):
        names |= set(LOOPBACK)
    return {n.strip("[]").lower() for n in names if n}


def _request_host() -> str:
    raw = (request.host or "").lower()
    if raw.startswith("["):                       # [::1]:8050
        return raw[1:raw.find("]")] if "]" in raw else raw
    return raw.rsplit(":", 1)[0] if raw.count(":") == 1 else raw


def create_app(data_path: str | Path | None = None, settings: dict | None = None,
               host: str = "127.0.0.1", allowed_hosts=(), table=None,
               spec: dict | None = None, model=None) -> Dash:
    """The Dash app. data_path: a file opened for every new page (default: the demo data);
    settings: a validated settings record applied when the page loads; host: the address the
    server listens on (it decides which Host headers are answered and what the page says about
    where files go); allowed_hosts: more names to answer to. table and spec: a Table already
    in memory and the model to open on (lagwise.show), instead of a file. model: a fitted
    model the page opens on as it is (lagwise.show on a kind the page does not refit)."""
    given_spec = spec is not None
    if model is not None:
        spec, table = {"given_fit": True}, None
    elif table is None:
        path = Path(data_path) if data_path else demo_file()
        raw = path.read_bytes()
        name = path.name
        spec = dict(DEMO_SPEC) if data_path is None and not given_spec else spec
    if settings and settings.get("response") and not given_spec:
        spec = {"response": settings["response"], "regressors": settings.get("regressors", []),
                "horizon": settings.get("horizon")}
    from .studies import job_manager
    app = Dash(__name__, assets_folder=str(assets_dir()), title="Lagwise",
               update_title=None, suppress_callback_exceptions=True,
               background_callback_manager=job_manager())
    # bound request bodies (an upload arrives base64-encoded, about 4/3 of the file)
    app.server.config["MAX_CONTENT_LENGTH"] = int(MAX_UPLOAD_BYTES * 1.4) + 1_000_000
    local = host in LOOPBACK
    where = "this computer" if local else f"{host} (other machines can reach it)"
    badge = f"local session · {host}" if local else f"served on {host} · reachable by others"

    initial: dict = {}
    initial_lock = threading.Lock()

    def initial_key():
        """The data every page opens on, loaded once and shared by every session (a page load
        stores nothing of its own)."""
        with initial_lock:
            if "key" not in initial:
                initial["key"] = None
                try:
                    if table is not None:
                        initial["key"] = STORE.put_shared(key_for("data", "table", id(table)),
                                                          table)
                    else:
                        loaded = load_table(raw, name=name, max_bytes=MAX_UPLOAD_BYTES)
                        initial["key"] = STORE.put_shared(key_for("data", content_hash(raw)),
                                                          loaded)
                except Exception as exc:  # noqa: BLE001 - shown on the page, never a traceback
                    logging.getLogger("lagwise").warning("could not load the data: %s", exc)
            return initial["key"]

    def layout():
        try:
            session = STORE.open_session()
        except CapacityError as exc:
            return build_layout("", {"message": str(exc)}, where, badge)
        if model is not None:
            fkey = given_model(session, model)
            return build_layout(session, {"fit_key": fkey, "spec": spec}, where, badge)
        return build_layout(session, {"dataset_key": initial_key(), "spec": spec,
                                      "settings": settings}, where, badge)

    app.layout = layout
    register(app)
    _protect(app, _host_names(host, allowed_hosts))
    return app


def _protect(app: Dash, hosts: set[str]) -> None:
    server = app.server

    @server.before_request
    def _check_host():
        if _request_host() not in hosts:
            return Response("unknown host: this Lagwise server answers only for "
                            + ", ".join(sorted(hosts)) + "\n", status=421,
                            mimetype="text/plain")
        return None

    @server.errorhandler(Exception)
    def _malformed(exc):
        """A request the app cannot handle (a malformed callback payload from a script) gets a
        plain message and status 400, never a stack trace or a 500 page."""
        from werkzeug.exceptions import HTTPException
        if isinstance(exc, HTTPException):
            return exc
        logging.getLogger("lagwise").warning("request not handled: %s", exc)
        return Response("this request could not be handled by Lagwise\n", status=400,
                        mimetype="text/plain")

    @server.after_request
    def _headers(response):
        response.headers.setdefault("Content-Security-Policy", _csp(app))
        response.headers.setdefault("X-Content-Type-Options", "nosniff")
        response.headers.setdefault("X-Frame-Options", "DENY")
        response.headers.setdefault("Referrer-Policy", "no-referrer")
        response.headers.setdefault("Cross-Origin-Opener-Policy", "same-origin")
        return response


def _csp(app: Dash) -> str:
    cached = app.server.config.get("LAGWISE_CSP")
    if cached is None:
        hashes = " ".join(app.csp_hashes())
        cached = ("default-src 'self'; "
                  f"script-src 'self' {hashes}; "
                  "style-src 'self' 'unsafe-inline'; img-src 'self' data: blob:; "
                  "font-src 'self' data:; connect-src 'self'; worker-src 'self' blob:; "
                  "object-src 'none'; base-uri 'self'; form-action 'self'; "
                  "frame-ancestors 'none'")
        app.server.config["LAGWISE_CSP"] = cached
    return cached


def serve(file=None, host: str = "127.0.0.1", port: int = 8050, debug: bool = False,
          settings=None, allowed_hosts=()) -> int:
    settings_record = None
    if settings:
        from ..engine.io.settings import load_settings
        settings_record = load_settings(Path(settings).read_bytes())
    if file:
        from .. import engine
        engine.load_table(file)            # fail early with a clear message
    app = create_app(file, settings_record, host=host, allowed_hosts=allowed_hosts)
    if host not in LOOPBACK:
        print(f"warning: serving on {host}: anyone who can reach this address can use the app")
    print(f"Lagwise on http://{host}:{port}/  (Ctrl+C to stop)")
    if not debug:
        logging.getLogger("werkzeug").setLevel(logging.WARNING)    # no line per request
    app.run(host=host, port=port, debug=debug)
    return 0
