"""Analyses of mode catalogues: density of states, localisation, tail fits, finite-size tables."""
