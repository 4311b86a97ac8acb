"""Numerical solvers. They work on numpy arrays in SI units and know nothing of
files, coordinate systems or scenarios."""
