"""Families of solutions: continuation, fold curves, sweeps, stability."""
