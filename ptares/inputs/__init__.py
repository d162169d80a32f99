"""Inputs: TOML configs (validated, immutable), units and plain CSV tables; every file the user gives is read here."""
