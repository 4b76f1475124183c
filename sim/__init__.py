"""How the world evolves: the coupled exoskeleton-human loop, sensors, logging and the CLI."""
