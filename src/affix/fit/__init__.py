"""Fit: gain and offset of the linear least-squares estimator from the statistics."""
