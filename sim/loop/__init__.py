"""Running and storing: scenarios, the simulation loop and the run log."""
