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
from .capabilities import Capabilities
from .data.reading import load_table
from .data.table import LoadReport, Table
from .data.transforms import TRANSFORMS, transform
from .data.columns import INTERCEPT
from .laws.reference import EWCLaw, FixedB, Law, Normal, StudentT
from .laws.fixedb import fixed_b_critical_value, fixed_b_p_value
from . import covariance as _covariance  # noqa: F401 - registers the shipped families
from .covariance.kernels import KERNELS, Kernel, get_kernel, register_kernel
from .covariance.bandwidth import RULES as BANDWIDTH_RULES, BandwidthChoice, select_bandwidth
from .covariance.registry import (FAMILIES, Estimator, Family, Param, TuningAxis, estimator,
                                  estimators, register_family)
from .inference.infer import Inference, WaldTest, infer
from .inference.sweep import Flip, SweepResult, significance_flip, sweep
from .inference.compare import compare
from .models.base import MomentModel
from .models.ols import OLSFit, fit_ols
from .models.series import SeriesModel
from .models.iv import IVFit, fit_iv
from .models.panel import PanelFit, fit_panel
from .models.fama_macbeth import FamaMacBethFit, fit_fama_macbeth
from .models.stacked import StackedModel, stack
from .models.custom_gmm import GMMFit, fit_gmm
from .studies.predictive import (HorizonSweep, IVXResult, PersistenceReport, horizon_sweep,
                                 ivx_test, persistence_report)
from .studies.bootstrap import BootstrapResult, bootstrap
from .studies.size_check import SizeCheck, size_check
from .studies.diagnostics import DiagnosticReport, diagnose
from .io.formulas import fit
from .io.adapters import from_statsmodels
from .io.robustness import RobustnessTable, robustness_table
from . import distributed as _distributed  # noqa: F401 - registers the Dask path
from .kinds import KINDS, ModelKind, kind_of, model_line, register_kind
# local projections (impulse responses with bands across horizons)
from .models.local_projections import LocalProjections, fit_local_projections, multiplier
from .models.lp_inference import (HORIZON_RULES, Bands, LPEstimator, LPSweep, horizon_rule,
                                  lag_augmented, sup_t_critical_value)
# factor models (issue 24): many assets at once, the joint alpha test, GRS, risk premia
from .models.factors import (FactorModel, GRSTest, LargeNTest, fit_factor_model, grs_test,
                             pesaran_yamagata)
from .models.joint import JointFlip, JointSweep, JointTest, joint_sweep, joint_test
from .models.risk_premia import RiskPremia, RiskPremiaGMM, fit_risk_premia

# few clusters (issue 23): bias-reduced cluster covariances, the wild cluster bootstrap, the
# cluster summary, panel IV
from .models.panel_iv import PanelIVFit, fit_panel_iv
from .laws.clusters import ClusterT, HotellingT
from .studies.wild_bootstrap import WildBootstrapResult, wild_cluster_bootstrap
from .studies.cluster_summary import ClusterSummary, cluster_summary

__all__ = [
    "DataError", "EstimationError", "LagwiseError", "LawUnavailable", "SpecificationError",
    "LoadReport", "Table", "load_table", "transform", "TRANSFORMS",
    "KERNELS", "Kernel", "get_kernel", "register_kernel",
    "Law", "Normal", "StudentT", "EWCLaw", "FixedB",
    "MomentModel", "OLSFit", "SeriesModel", "fit_ols", "INTERCEPT", "IVFit", "fit_iv",
    "PanelFit", "FamaMacBethFit", "fit_panel", "fit_fama_macbeth",
    "StackedModel", "stack", "GMMFit", "fit_gmm", "Capabilities",
    "KINDS", "ModelKind", "kind_of", "model_line", "register_kind",
    "persistence_report", "PersistenceReport", "ivx_test", "IVXResult", "horizon_sweep",
    "HorizonSweep", "bootstrap", "BootstrapResult", "size_check", "SizeCheck",
    "fit", "from_statsmodels", "robustness_table", "RobustnessTable",
    "FAMILIES", "Estimator", "Family", "Param", "TuningAxis", "estimator", "estimators",
    "register_family",
    "BANDWIDTH_RULES", "select_bandwidth", "BandwidthChoice",
    "Inference", "WaldTest", "infer", "SweepResult", "sweep", "Flip", "significance_flip",
    "fixed_b_critical_value", "fixed_b_p_value", "compare", "DiagnosticReport", "diagnose",
    # local projections
    "LocalProjections", "fit_local_projections", "multiplier", "HORIZON_RULES", "Bands",
    "LPEstimator", "LPSweep", "horizon_rule", "lag_augmented", "sup_t_critical_value",
    # factor models (issue 24)
    "FactorModel", "fit_factor_model", "GRSTest", "LargeNTest", "grs_test", "pesaran_yamagata",
    "JointTest", "JointSweep", "JointFlip", "joint_test", "joint_sweep",
    "RiskPremia", "RiskPremiaGMM", "fit_risk_premia",
    # few clusters (issue 23)
    "PanelIVFit", "fit_panel_iv", "ClusterT", "HotellingT", "WildBootstrapResult",
    "wild_cluster_bootstrap", "ClusterSummary", "cluster_summary",
]
