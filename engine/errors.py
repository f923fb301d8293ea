"""Typed errors raised by the engine.

Every message is written for the analyst: it names the offending column, value or setting
and says what to do about it. The app shows the message as is; it never shows a traceback.
"""


class LagwiseError(Exception):
    """Base class of every error the engine raises on purpose."""


class DataError(LagwiseError, ValueError):
    """The input table cannot be read or a column cannot be used as numbers."""


class SpecificationError(LagwiseError, ValueError):
    """The model or estimator settings do not make sense for this data."""


class EstimationError(LagwiseError, ArithmeticError):
    """The computation itself failed (for example a singular long-run covariance)."""


class LawUnavailable(SpecificationError):
    """The reference law asked for does not exist for this estimator (for example fixed-b
    values for a kernel without a table, or for a family without fixed-b theory)."""
