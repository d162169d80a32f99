"""Simulate the demo array from Python and look at what was injected.

Run from the repository root: ``python examples/inspect_dataset.py``
"""

import numpy as np

import ptares
from ptares.physics.spectra import coefficient_variance

config = ptares.load_config("configs/demo.toml")
data = ptares.simulate(config)

background = data.signals["gwb"]
expected = np.sqrt(coefficient_variance(data.span, background["harmonics"], background["amplitude"], background["spectral_index"]).sum())
print(f"{len(data.pulsars)} pulsars over {data.span / 3.15576e7:.1f} yr; expected background rms before the fit {expected * 1e9:.0f} ns")
for pulsar in data.pulsars[:5]:
    rms = {name: f"{np.std(series) * 1e9:.0f} ns" for name, series in pulsar.injected.items()}
    print(f"{pulsar.name:10s} {pulsar.toa_count:4d} TOAs  post-fit rms {np.std(pulsar.residuals) * 1e9:5.0f} ns  injected {rms}")

positions = np.array([p.position for p in data.pulsars])
gamma = ptares.correlation_matrix(positions, "hellings-downs")
print(f"Hellings-Downs correlations between pairs range from {gamma[np.triu_indices(len(gamma), 1)].min():.3f} to "
      f"{gamma[np.triu_indices(len(gamma), 1)].max():.3f}")
