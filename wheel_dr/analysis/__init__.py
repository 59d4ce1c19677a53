"""Offline analysis on estimator output: alignment, metrics, consistency, calibration and tuning."""
