"""Studies of a fitted model: residual diagnostics (time series and panels), predictive-regression
tools, bootstraps, the size check at the analyst's sample and the panel sensitivity chart."""
