"""Bound states: the BSE operator, the mass search, normalisation and observables, the exact identities, extrapolation beyond M_max."""
