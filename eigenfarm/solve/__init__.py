"""Solving for vibrational modes: factorisation backends, the slice solver, residual checks."""
