"""Samplers that draw from a fit model's posterior into a resumable chains file (one module per sampler)."""
