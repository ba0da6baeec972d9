"""Stationary transport: transfer matrices (Lyapunov exponents, transmission spectra) and
the Born prediction."""
