"""Inference for any moment model: the coefficient table and Wald tests under one estimator and
law (infer), estimators moved along their tuning axis (sweep), where a conclusion changes
(flips), and every estimator side by side (compare)."""
