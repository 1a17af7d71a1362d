"""Estimators, the one PSU-within-strata variance routine and its alternatives, weighting, cost."""
