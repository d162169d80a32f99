"""Physics formulas, each in one place: sky geometry, correlation patterns, spectra, binaries and the timing model."""
