"""Output: reports, plots and the browser viewer."""
