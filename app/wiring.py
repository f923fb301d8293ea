"""How the app's callbacks are recorded and wired: one `callback` decorator for every module
(callbacks, exports, studies), a guard that turns an unexpected failure into a message (never
a traceback or an HTTP 500), and `register(app)` that wires everything recorded to an app, so
several apps can live in one process (the tests create several)."""

from __future__ import annotations

import functools
import logging

from dash import Output, no_update
from dash.exceptions import PreventUpdate

from . import views as V

CALLBACKS: list = []
CLIENTSIDE: list = []
LOG = logging.getLogger("lagwise")

#: Callbacks that may run for more than a second switch the progress poll on while they run
#: (and restart its idle count); the poll switches itself off when nothing is running. The
#: slider's callback (on_inference) has none: its slow first round (the comparison, the flip's
#: sweep) is shared with on_sensitivity, which has, so a slider move sends no extra requests.
RUNNING = [(Output("work-poll", "disabled"), False, False),
           (Output("work-poll", "n_intervals"), 0, 0)]


def callback(*args, message: int | None = None, **kwargs):
    """Record a module-level callback; `register` wires it to an app. `message`: the position
    of the output that shows a message when a request cannot be handled (a malformed payload or
    an unexpected failure): it gets the message, the other outputs stay as they are, and the
    server never answers with an error page."""
    def deco(fn):
        CALLBACKS.append((args, kwargs, guarded(fn, args, message)))
        return fn
    return deco


def guarded(fn, args, message):
    n_out = sum(isinstance(a, Output) for a in args)

    @functools.wraps(fn)
    def run(*values):
        try:
            return fn(*values)
        except PreventUpdate:
            raise
        except Exception as exc:  # noqa: BLE001 - a message, never a traceback or an HTTP 500
            LOG.warning("callback %s could not handle a request: %s", fn.__name__, exc)
            if message is None:
                raise PreventUpdate from None
            text = V.error_box("this request could not be handled; reload the page if the "
                               "problem persists")
            if n_out == 1:
                return text
            out = [no_update] * n_out
            out[message] = text
            return tuple(out)
    return run


def clientside(code: str, *args, **kwargs) -> None:
    """Record a clientside callback (JavaScript run in the page: no request to the server)."""
    CLIENTSIDE.append((code, args, kwargs))


def register(app) -> None:
    """Wire every recorded callback to `app` (the modules that record them are imported by
    whoever builds the app: app.main)."""
    for args, kwargs, fn in CALLBACKS:
        app.callback(*args, **kwargs)(fn)
    for code, args, kwargs in CLIENTSIDE:
        app.clientside_callback(code, *args, **kwargs)
