"""lagwise.show(fit): the dashboard on a fit made in Python, inline in Jupyter or in a browser
tab, without a file upload. The fit's data become the page's data and its specification the
page's model (through the same settings record a saved settings file uses)."""

from __future__ import annotations

import threading
import webbrowser

import pandas as pd

from .. import engine
from ..engine.data.table import LoadReport, Table
from ..engine.data.columns import INTERCEPT
from ..engine.io.settings import validate_settings
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
    """The Table the page shows and the settings record that opens it on this fit."""
    panel = getattr(fit, "panel", None)
    regs = [t for t in fit.terms if t != INTERCEPT]
    record = {"response": fit.response, "regressors": regs,
              "intercept": INTERCEPT in fit.terms or bool(panel and panel.effects),
              "horizon": getattr(fit, "horizon", None), "level": 0.95, "reference": "auto",
              "rule": "andrews", "chart_mode": "t"}
    spec = {"response": fit.response, "regressors": regs,
            "horizon": getattr(fit, "horizon", None)}
    table = getattr(fit, "table", None)
    if isinstance(fit, engine.IVFit):
        core = fit.core
        record.update(endogenous=list(core.endogenous), instruments=list(core.excluded),
                      method=fit.method if fit.method in METHODS else "2sls")
    if panel is not None:
        record.update(entity=panel.entity, time=panel.time, effects=list(panel.effects),
                      estimator="driscoll_kraay")
        if table is None:
            values = fit._raw[0] if fit._raw is not None else (
                fit.X[:, 1:] if INTERCEPT in fit.terms else fit.X)
            y = fit._raw[1] if fit._raw is not None else fit.y
            frame = pd.DataFrame(values, columns=regs)
            frame[fit.response] = y
            labels = pd.DataFrame({panel.entity: fit.index.get_level_values(0).astype(str),
                                   panel.time: fit.index.get_level_values(1)})
            frame.index = pd.RangeIndex(len(frame), name="row")
            labels.index = frame.index
            report = LoadReport(source="a fit made in Python", file_format="memory",
                                rows_read=len(frame), panel=(panel.entity, panel.time))
            table = Table(frame=frame, report=report, labels=labels)
    else:
        record["estimator"] = "kernel"
        if table is None:
            cols = {t: fit.X[:, fit.terms.index(t)] for t in regs}
            frame = pd.DataFrame(cols, index=fit.index)
            frame[fit.response] = fit.y
            if isinstance(fit, engine.IVFit):
                for z in fit.core.excluded:
                    frame[z] = fit.core.Z[:, fit.core.z_names.index(z)]
            one = getattr(fit, "one_period", None)
            if one is not None:
                frame = frame.reindex(frame.index.union(one.index))
                frame[one.name] = one.reindex(frame.index).to_numpy()
            report = LoadReport(source="a fit made in Python", file_format="memory",
                                rows_read=len(frame))
            table = Table(frame=frame, report=report,
                          horizons={fit.response: fit.horizon} if fit.horizon else {})
    if not table.report.source:                   # a Table built in memory, not loaded
        from dataclasses import replace
        table = replace(table, report=LoadReport(source="a fit made in Python",
                                                 file_format="memory",
                                                 rows_read=len(table.frame)))
    one = getattr(fit, "one_period", None)
    if one is not None and getattr(fit, "horizon", None):
        spec["one_period"] = {fit.response: str(one.name)}
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
    if not isinstance(fit, engine.MomentModel) or isinstance(fit, engine.SeriesModel):
        raise engine.SpecificationError("lagwise.show takes a least-squares, IV/GMM or panel fit")
    table, settings, spec = table_and_settings(fit)
    app = create_app(settings=settings, host=host, table=table, spec=spec)
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

