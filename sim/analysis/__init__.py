"""Analysis of runs: metrics and derived columns."""
