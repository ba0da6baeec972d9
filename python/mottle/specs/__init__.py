"""Frozen, validated descriptions of a system: grid, kinetic model, potentials, disorder,
packets, absorbers."""
