"""Lagwise: fit a model once, then the whole family of long-run covariance estimators.

    import lagwise
    table = lagwise.load_table("file.csv")
    fit = lagwise.fit_ols(table, response="y", regressors=["x1", "x2"])
    est = lagwise.estimator("kernel", kernel="parzen", bandwidth="andrews")
    result = fit.infer(est, level=0.95, reference="normal")
    sweep = fit.sweep(kernels=["bartlett", "parzen"], bandwidths=range(1, 61))

The computation lives in `lagwise.engine` (no web framework imported); the dashboard in
`lagwise.app` (`lagwise serve` on the command line).
"""

from .engine import *  # noqa: F401,F403 - the public API is the engine's
from .engine import __all__ as _engine_all
from ._files import demo_file


def show(fit, mode=None, port=0, host="127.0.0.1"):
    """Open the dashboard on a fit made in Python (inline in Jupyter, or a browser tab); see
    lagwise.app.show.show."""
    from .app.show import show as _show
    return _show(fit, mode=mode, port=port, host=host)

__version__ = "0.2.0"
__all__ = list(_engine_all) + ["demo_file", "show"]
