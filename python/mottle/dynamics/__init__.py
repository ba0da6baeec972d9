"""Time-dependent runs: single propagations, ensembles, their energy-resolved spectrum,
classical particles, and the numpy reference."""
