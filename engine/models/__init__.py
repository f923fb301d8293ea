"""Fitted moment models: the protocol and model kinds, least squares, linear IV/GMM, custom GMM
(the analyst's own moment function), panels, Fama-MacBeth and the stacked model."""
