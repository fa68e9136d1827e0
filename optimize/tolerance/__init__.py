"""Growth tolerance: Monte Carlo yield, Sobol and Morris ranking, tornado, allocation."""
