"""From readings to parameters: priors, the measurement model, the fit, simulated readings."""
