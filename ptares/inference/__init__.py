"""Bayesian inference: the marginalised likelihood, priors, the fit model and its samplers."""
