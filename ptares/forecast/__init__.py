"""Forecasts: what an array can detect, from its TOAs, errors and noise alone (``ptares sensitivity``)."""
