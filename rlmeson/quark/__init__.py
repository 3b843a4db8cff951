"""The dressed quark: self-energy, real-axis gap equation, shifted solve on complex momenta, singularities, the analytic approximant, propagators at a bound state's momenta."""
