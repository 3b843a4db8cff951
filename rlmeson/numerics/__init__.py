"""Numerical tools with no physics: quadrature rules, Dirac matrices, JAX set-up, rational approximation, grid descriptions."""
