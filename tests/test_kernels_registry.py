"""The kernel registry as a public extension point.

A kernel the project does not ship (the Daniell kernel, from its published formula) is added at
run time with `lagwise.register_kernel` and then works in infer, sweep, compare, the CLI and the
app's picker and chart with no other edit. The shipped Bohman kernel was added the same way (one
definition in engine/kernels.py plus these tests) and is checked against scipy's Bohman window.
"""

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st
from scipy import integrate, signal

import lagwise
from lagwise.engine.covariance.kernels import KERNELS
from tests.helpers import regression_frame


def daniell(x):
    """Daniell (1946), JRSS Suppl. 8; Andrews (1991) Table: k(x) = sin(pi x) / (pi x)."""
    return np.sinc(np.asarray(x, dtype=float))          # numpy's sinc is sin(pi x)/(pi x)


@pytest.fixture
def with_daniell():
    kernel = lagwise.register_kernel(
        "daniell", daniell, label="Daniell", reference="Daniell (1946), JRSS Suppl. 8",
        psd=True, finite_support=False, q=2, kq=np.pi**2 / 6)
    yield kernel
    KERNELS.pop("daniell", None)


@pytest.fixture(scope="module")
def fit():
    return lagwise.fit_ols(regression_frame(seed=31, n=300, k=2, rho_e=0.6), "y", ["x1", "x2"])


def direct_long_run(u, weights):
    """S = sum_{|j|<T} w_|j| Gamma_j by the textbook double loop (divisor T)."""
    t = len(u)
    s = u.T @ u / t
    for j in range(1, t):
        g = u[j:].T @ u[: t - j] / t
        s += weights[j] * (g + g.T)
    return s


def test_registered_kernel_works_everywhere(with_daniell, fit, capsys):
    k = with_daniell
    # its constants: int sinc^2 = 1, Andrews c_k = (q k_q^2 / int k^2)^(1/5)
    assert k.integral_k2 == pytest.approx(1.0, abs=1e-6)
    assert k.andrews_constant == pytest.approx((2 * (np.pi**2 / 6) ** 2) ** 0.2, rel=1e-6)
    # infer: the estimate equals the published formula's weights applied by a double loop
    est = lagwise.estimator("kernel", kernel="daniell", bandwidth=6.5)
    lr = est.long_run(fit)
    w = daniell(np.arange(fit.nobs) / 6.5)
    np.testing.assert_allclose(fit.to_original(lr.S), direct_long_run(fit.contributions, w),
                               rtol=1e-9)
    res = fit.infer(est)
    assert res.label == "Daniell, b = 6.5"
    assert fit.infer(lagwise.estimator("kernel", kernel="daniell", bandwidth="andrews")).bandwidth > 0
    # sweep (it is PSD, so the influence-series path is used) equals infer
    sw = fit.sweep(kernels=["bartlett", "daniell"], bandwidths=[2.0, 6.5, 20.0])
    np.testing.assert_allclose(sw.std_error[1, 1], res.table.std_error, rtol=1e-9)
    assert sw.labels == ["Bartlett", "Daniell"]
    # the comparison and the CLI list it
    comp = lagwise.compare(fit)
    assert "Daniell, Andrews (1991) bandwidth" in set(comp.estimator)
    from lagwise.app.cli import main
    from lagwise._files import demo_file
    assert main(["table", str(demo_file()), "--response", "exret_1m", "--regressors",
                 "credit_spread"]) == 0
    assert "Daniell, Andrews (1991) bandwidth" in capsys.readouterr().out
    # fixed-b has no table for it: refused with a reason, never a wrong number
    with pytest.raises(lagwise.SpecificationError, match="fixed-b"):
        fit.infer(est, reference="fixed-b")


def test_registered_kernel_reaches_the_app(with_daniell, fit):
    from lagwise.app import figures as F
    from lagwise.app.derived import sweep_for
    from lagwise.app.layout import estimator_controls
    from lagwise.app.state import Store
    import lagwise.app.derived as cb
    controls = estimator_controls("kernel")
    dropdown = [c for c in _walk(controls) if getattr(c, "id", None) ==
                {"type": "est-param", "name": "kernel"}][0]
    assert {"label": "Daniell", "value": "daniell"} in [
        {"label": o["label"], "value": o["value"]} for o in dropdown.options]
    store = Store()
    sid = store.open_session()
    old, cb.STORE = cb.STORE, store
    try:
        store.put(sid, "fit", fit)
        sweep = sweep_for(sid, "fit", fit, lagwise.estimator("kernel", kernel="daniell"))
    finally:
        cb.STORE = old
    assert "Daniell" in sweep.labels
    fig = F.sensitivity_figure(sweep, "x1", "t", 0.95, "normal", 5, sweep.labels.index("Daniell"))
    trace = [t for t in fig.data if t.name == "Daniell"][0]
    assert trace.line.color == with_daniell.color and trace.line.width == 3


def _walk(components):
    for c in components:
        yield c
        children = getattr(c, "children", None)
        if isinstance(children, list):
            yield from _walk(children)
        elif children is not None and hasattr(children, "children"):
            yield from _walk([children])


def test_register_kernel_refuses_bad_definitions():
    with pytest.raises(lagwise.SpecificationError, match="already registered"):
        lagwise.register_kernel("bartlett", daniell, label="x", reference="x", psd=True,
                                finite_support=False)
    with pytest.raises(lagwise.SpecificationError, match="k\\(0\\) = 1"):
        lagwise.register_kernel("half", lambda x: 0.5 + 0 * x, label="x", reference="x",
                                psd=True, finite_support=False)
    with pytest.raises(lagwise.SpecificationError, match="vanish"):
        lagwise.register_kernel("wide", lambda x: np.ones_like(x), label="x", reference="x",
                                psd=False, finite_support=True)
    assert "half" not in KERNELS and "wide" not in KERNELS


def test_bohman_matches_scipy_window_and_is_psd(fit):
    """scipy.signal.windows.bohman(M) evaluates the Bohman window at x = linspace(-1, 1, M)."""
    k = lagwise.get_kernel("bohman")
    m = 41
    x = np.linspace(-1, 1, m)
    np.testing.assert_allclose(k.weight(x), signal.windows.bohman(m), atol=1e-14)
    # characteristic exponent q = 2 with k_q = pi^2 / 2: (1 - k(x)) / x^2 -> k_q
    small = 1e-4
    assert (1 - k.weight(np.array([small]))[0]) / small**2 == pytest.approx(np.pi**2 / 2,
                                                                             rel=1e-3)
    integral = 2 * integrate.quad(lambda v: float(k.weight(np.array([v]))[0]) ** 2, 0, 1)[0]
    assert k.integral_k2 == pytest.approx(integral, rel=1e-8)
    # PSD by construction: its spectral window sum_j k(j/b) cos(j w) is never negative
    for b in (3.0, 12.5, 40.0):
        j = np.arange(1, int(np.ceil(b)))
        w = np.linspace(0, np.pi, 2001)
        spec = 1 + 2 * (k.weight(j / b)[None, :] * np.cos(np.outer(w, j))).sum(axis=1)
        assert spec.min() >= -1e-10
    res = fit.infer(lagwise.estimator("kernel", kernel="bohman", bandwidth=9))
    assert np.linalg.eigvalsh(res.long_run.S).min() >= -1e-12


@settings(max_examples=60, deadline=None)
@given(bandwidths=st.lists(st.one_of(st.just(0.0), st.floats(1e-3, 5e3)), min_size=1,
                           max_size=30),
       nobs=st.integers(2, 3000))
def test_lags_for_many_bandwidths_equal_lags_for_each(bandwidths, nobs):
    """The vectorised lag count used by sweeps equals the per-bandwidth rule for every kernel."""
    for kernel in KERNELS.values():
        expect = [kernel.lags_used(b, nobs) for b in bandwidths]
        assert kernel.lags_many(bandwidths, nobs).tolist() == expect
