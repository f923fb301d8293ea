"""Estimators of S, the long-run covariance of the moment contributions: kernels, bandwidth
rules, the autocovariance cache, prewhitening, and the estimator families (one module each, one
register call each). Importing this package registers the shipped families, in the order the
comparison and the app show them."""

from . import (classical, hc, kernel, var, ewc, cluster, driscoll_kraay,  # noqa: F401
               cluster_kernel, hodrick)
