"""Lagwise engine: fit once, then the whole family of covariance estimators from the cache.

Public API (re-exported as `lagwise`; see README.md):

    table = load_table("file.csv")
    fit = fit_ols(table, response="y", regressors=["x1", "x2"])
    est = estimator("kernel", kernel="parzen", bandwidth="andrews")
    result = fit.infer(est, level=0.95, reference="normal")
    sweep = fit.sweep(kernels=["bartlett", "parzen"], bandwidths=range(1, 61))
"""

from .errors import (DataError, EstimationError, LagwiseError, LawUnavailable,
                     SpecificationError)
from .data import LoadReport, Table, load_table, transform, TRANSFORMS
from .kernels import KERNELS, Kernel, get_kernel, register_kernel
from .laws import EWCLaw, FixedB, Law, Normal, StudentT
from .model import MomentModel, OLSFit, SeriesModel, fit_ols, INTERCEPT
from .gmm import IVFit, fit_iv
from .panel import FamaMacBethFit, PanelFit, fit_fama_macbeth, fit_panel
from .predictive import HorizonSweep, IVXResult, PersistenceReport, horizon_sweep, ivx_test, \
    persistence_report
from .simulate import BootstrapResult, SizeCheck, bootstrap, size_check
from .ecosystem import RobustnessTable, fit, from_statsmodels, robustness_table
from .covariance import (FAMILIES, Estimator, Family, Param, TuningAxis, estimator, estimators,
                         register_family)
from .bandwidth import RULES as BANDWIDTH_RULES, select_bandwidth, BandwidthChoice
from .inference import Inference, WaldTest, infer
from .sweep import Flip, SweepResult, significance_flip, sweep
from .fixedb import fixed_b_critical_value, fixed_b_p_value
from .compare import compare
from .diagnostics import DiagnosticReport, diagnose

__all__ = [
    "DataError", "EstimationError", "LagwiseError", "LawUnavailable", "SpecificationError",
    "LoadReport", "Table", "load_table", "transform", "TRANSFORMS",
    "KERNELS", "Kernel", "get_kernel", "register_kernel",
    "Law", "Normal", "StudentT", "EWCLaw", "FixedB",
    "MomentModel", "OLSFit", "SeriesModel", "fit_ols", "INTERCEPT", "IVFit", "fit_iv",
    "PanelFit", "FamaMacBethFit", "fit_panel", "fit_fama_macbeth",
    "persistence_report", "PersistenceReport", "ivx_test", "IVXResult", "horizon_sweep",
    "HorizonSweep", "bootstrap", "BootstrapResult", "size_check", "SizeCheck",
    "fit", "from_statsmodels", "robustness_table", "RobustnessTable",
    "FAMILIES", "Estimator", "Family", "Param", "TuningAxis", "estimator", "estimators",
    "register_family",
    "BANDWIDTH_RULES", "select_bandwidth", "BandwidthChoice",
    "Inference", "WaldTest", "infer", "SweepResult", "sweep", "Flip", "significance_flip",
    "fixed_b_critical_value", "fixed_b_p_value", "compare", "DiagnosticReport", "diagnose",
]
