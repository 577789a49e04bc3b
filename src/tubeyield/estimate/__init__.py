"""Kinetics from lab runs: estimation coordinates (coordinates.py), the experiments' models and reference
simulations (experiments.py), and the statistics of a fit (statistics.py, numpy/scipy only). The job that composes
them is jobs/fit.py."""
