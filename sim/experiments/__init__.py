"""Experiments over runs: sweeps and the benchmark."""
