"""The Dask path: panels larger than memory fitted from exact sufficient statistics, assembled by
the same code as in memory. Importing it registers the Dask fits with `fit_panel` and
`fit_fama_macbeth` (engine.data.panels.register_large_data); dask itself is imported only when
a Dask DataFrame or a Parquet folder is fitted."""

from .panel import PanelSummaryFit, is_distributed  # noqa: F401
