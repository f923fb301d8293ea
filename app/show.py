"""lagwise.show(fit): the dashboard on a fit made in Python, inline in Jupyter or in a browser
tab, without a file upload. For a kind the dashboard can refit (least squares, IV, panels), the
fit's data become the page's data and its specification the page's model (through the same
settings record a saved settings file uses); for any other kind (a custom GMM, a stacked model)
the page opens on the fitted model itself, with every card its kind has."""

from __future__ import annotations

import threading
import webbrowser
from dataclasses import replace

from .. import engine
from ..engine.data.table import LoadReport
from ..engine.io.settings import validate_settings
from ..engine.kinds import kind_of
from ..engine.models.iv import METHODS


class Shown:
    """A running dashboard started by `show`: its address, and `stop()`."""

    def __init__(self, url, server=None, thread=None, app=None):
        self.url, self._server, self._thread, self.app = url, server, thread, app

    def stop(self):
        if self._server is not None:
            self._server.shutdown()
            self._thread.join(timeout=5)
            self._server = None

    def _repr_html_(self):
        return f"<a href='{self.url}' target='_blank'>Lagwise dashboard at {self.url}</a>"

    def __repr__(self):
        return f"Shown({self.url!r})"


def table_and_settings(fit):
    """The Table the page shows and the settings record that opens it on this fit, from the
    fit's kind: its recipe (how it is refitted from a table) and its data."""
    kind = kind_of(fit)
    function, args = kind.recipe(fit)
    record = {k: v for k, v in args.items() if k in ("response", "regressors", "intercept",
                                                     "horizon", "endogenous", "instruments",
                                                     "entity", "time", "effects")}
    record.update(level=0.95, reference="auto", rule="andrews", chart_mode="t",
                  estimator=kind.default_family)
    if "instruments" in kind.cards:
        record["method"] = fit.method if fit.method in METHODS else "2sls"
    spec = {"response": fit.response, "regressors": args.get("regressors", []),
            "horizon": fit.horizon}
    table = fit.table if fit.table is not None else kind.data(fit)
    if not table.report.source:                   # a Table built in memory, not loaded
        table = replace(table, report=LoadReport(source="a fit made in Python",
                                                 file_format="memory",
                                                 rows_read=len(table.frame)))
    if args.get("one_period") and fit.horizon:
        spec["one_period"] = {fit.response: args["one_period"]}
        spec["horizons"] = {fit.response: fit.horizon}
    record = {k: v for k, v in record.items() if v is not None}
    return table, validate_settings(record), spec


def _in_notebook() -> bool:
    try:
        from IPython import get_ipython
        shell = get_ipython()
        return shell is not None and "IPKernelApp" in getattr(shell, "config", {})
    except ImportError:
        return False


def show(fit, mode: str | None = None, port: int = 0, host: str = "127.0.0.1"):
    """Open the dashboard on `fit` (a least-squares, IV/GMM or panel fit).

    mode: "inline" (in a Jupyter cell, Dash's notebook mode), "tab" (a browser tab opened from
    Jupyter), "browser" (a server thread and the system browser; the default outside
    Jupyter), or "background" (a server thread only: the returned handle has `url` and
    `stop()`). port 0 picks a free port. Binds 127.0.0.1 unless told otherwise."""
    from .main import create_app
    if not isinstance(fit, engine.MomentModel):
        raise engine.SpecificationError("lagwise.show takes a fitted Lagwise model")
    kind = kind_of(fit)
    if kind.recipe is not None and (fit.table is not None or kind.data is not None):
        table, settings, spec = table_and_settings(fit)
        app = create_app(settings=settings, host=host, table=table, spec=spec)
    else:                       # the fitted model itself (a custom GMM, a stacked model, ...)
        app = create_app(host=host, model=fit)
    if mode is None:
        mode = "inline" if _in_notebook() else "browser"
    if mode in ("inline", "tab", "external", "jupyterlab"):
        port = port or _free_port(host)
        app.run(jupyter_mode=mode, host=host, port=port, debug=False)
        return Shown(f"http://{host}:{port}/", app=app)
    if mode not in ("browser", "background"):
        raise engine.SpecificationError("mode must be inline, tab, external, jupyterlab, "
                                        "browser or background")
    from werkzeug.serving import make_server
    server = make_server(host, port, app.server, threaded=True)
    url = f"http://{host}:{server.server_port}/"
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    if mode == "browser":
        webbrowser.open(url)
    return Shown(url, server, thread, app)


def _free_port(host: str) -> int:
    import socket
    with socket.socket() as s:
        s.bind((host, 0))
        return s.getsockname()[1]

