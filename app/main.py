"""create_app() and the `lagwise serve` entry point (127.0.0.1, debug off unless asked)."""

from __future__ import annotations

import logging
from pathlib import Path

from dash import Dash

from .._files import assets_dir, demo_file

from . import callbacks
from .layout import build_layout
from .state import MAX_UPLOAD_BYTES, new_session_id

DEMO_SPEC = {"response": "exret_12m", "regressors": ["rate_capacity", "credit_spread"],
             "horizon": 12}


def create_app(data_path: str | Path | None = None, settings: dict | None = None) -> Dash:
    """The Dash app. data_path: a file opened for every new page (default: the demo data);
    settings: a settings record applied when the page loads."""
    path = Path(data_path) if data_path else demo_file()
    raw = path.read_bytes()
    name = path.name
    spec = dict(DEMO_SPEC) if data_path is None else None
    if settings and settings.get("response"):
        spec = {"response": settings["response"], "regressors": settings.get("regressors", [])}
    app = Dash(__name__, assets_folder=str(assets_dir()), title="Lagwise",
               update_title=None, suppress_callback_exceptions=True)
    # bound request bodies (an upload arrives base64-encoded, about 4/3 of the file)
    app.server.config["MAX_CONTENT_LENGTH"] = int(MAX_UPLOAD_BYTES * 1.4) + 1_000_000

    def layout():
        session = new_session_id()
        key = None
        try:
            key, _ = callbacks.dataset_from_bytes(session, raw, name)
        except Exception as exc:  # noqa: BLE001 - shown on the page, never a traceback
            logging.getLogger("lagwise").warning("could not load %s: %s", name, exc)
        return build_layout(session, {"dataset_key": key, "spec": spec, "settings": settings})

    app.layout = layout
    callbacks.register(app)
    return app


def serve(file=None, host: str = "127.0.0.1", port: int = 8050, debug: bool = False,
          settings=None) -> int:
    settings_record = None
    if settings:
        from ..engine.export import load_settings
        settings_record = load_settings(Path(settings).read_text())
    if file:
        from .. import engine
        engine.load_table(file)            # fail early with a clear message
    app = create_app(file, settings_record)
    if host not in ("127.0.0.1", "localhost", "::1"):
        print(f"warning: serving on {host}: anyone who can reach this address can use the app")
    print(f"Lagwise on http://{host}:{port}/  (Ctrl+C to stop)")
    if not debug:
        logging.getLogger("werkzeug").setLevel(logging.WARNING)    # no line per request
    app.run(host=host, port=port, debug=debug)
    return 0
