"""Simulation: resolve the array, draw its TOAs, inject signals and noise, fit the timing model, make a Dataset."""
