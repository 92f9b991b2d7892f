"""Analyses of run results: pure functions on numpy arrays and xarray objects."""
