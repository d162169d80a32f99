"""Null distributions of the optimal statistic: sky scrambles and phase shifts.

* Sky scrambles (Cornish & Sampson 2016; Taylor et al. 2017): the pair
  correlations are kept and the pattern is evaluated for random isotropic pulsar
  positions.  A scramble is kept only when its pattern's match with the true
  one, ``|sum G G' / sqrt(sum G^2 sum G'^2)|`` over pairs, is below a threshold,
  so that it carries no trace of the real geometry.
* Phase shifts (Taylor et al. 2017): each pulsar's Fourier basis is rotated by a
  random phase at every frequency, which destroys inter-pulsar correlation and
  keeps each pulsar's own noise; ``X_a -> R_a^T X_a``, ``Z_a -> R_a^T Z_a R_a``.

The p-value of an observed S/N is ``(1 + #{null >= observed}) / (1 + count)``.
"""

from __future__ import annotations

import numpy as np

from ptares.correlation.fourier import FourierProducts
from ptares.correlation.pairs import (
    PairCorrelations,
    optimal_statistic,
    overlap,
    pair_matrices,
)
from ptares.physics.patterns import pattern_function
from ptares.physics.sky import separation_matrix, unit_vector

__all__ = ["sky_scrambles", "phase_shifts", "p_value", "match"]


def match(first: np.ndarray, second: np.ndarray) -> float:
    """Normalised overlap of two patterns evaluated on the same pairs."""
    return float(abs(np.sum(first * second)) / np.sqrt(np.sum(first**2) * np.sum(second**2)))


def sky_scrambles(pairs: PairCorrelations, patterns, count: int, rng: np.random.Generator,
                  threshold: float = 0.1, max_tries: int = 200) -> dict:
    """S/N of each pattern under ``count`` accepted sky scrambles; ``{pattern: array}``.

    A pattern that does not depend on position (monopole) has no scramble null and is skipped.
    """
    result = {}
    for name in patterns:
        true = overlap(pairs, name)
        values = []
        tries = 0
        while len(values) < count and tries < max_tries * max(count, 1):
            tries += 1
            count_pulsars = int(max(pairs.a.max(), pairs.b.max())) + 1
            positions = unit_vector(rng.uniform(0, 2 * np.pi, count_pulsars), np.arcsin(rng.uniform(-1, 1, count_pulsars)))
            scrambled = pattern_function(name)(separation_matrix(positions)[pairs.a, pairs.b])
            if np.allclose(scrambled, scrambled[0]):
                break  # position-independent pattern
            if match(scrambled, true) < threshold:
                values.append(optimal_statistic(pairs, scrambled)["snr"])
        if values:
            result[name] = np.array(values)
    return result


def _rotate(products: FourierProducts, phases: np.ndarray) -> FourierProducts:
    """Rotate every pulsar's (sine, cosine) pair at each frequency by ``phases`` (P, K)."""
    cos, sin = np.cos(phases), np.sin(phases)
    rotation = np.empty(phases.shape + (2, 2))  # per pulsar and frequency: [[c, -s], [s, c]]
    rotation[..., 0, 0] = cos
    rotation[..., 0, 1] = -sin
    rotation[..., 1, 0] = sin
    rotation[..., 1, 1] = cos
    P, K = phases.shape
    X = np.einsum("pkij,pki->pkj", rotation, products.X.reshape(P, K, 2)).reshape(P, 2 * K)
    Z = products.Z.reshape(P, K, 2, K, 2)
    Z = np.einsum("pkia,pkilb,plbc->pkalc", rotation, Z, rotation, optimize=True).reshape(P, 2 * K, 2 * K)
    return FourierProducts(X=X, Z=Z, phi=products.phi)


def phase_shifts(products: FourierProducts, pairs: PairCorrelations, patterns, count: int,
                 rng: np.random.Generator) -> dict:
    """S/N of each pattern under ``count`` random phase shifts; ``{pattern: array}``."""
    P, K = products.X.shape[0], products.X.shape[1] // 2
    overlaps = {name: overlap(pairs, name) for name in patterns}
    result = {name: np.empty(count) for name in patterns}
    for trial in range(count):
        shifted = _rotate(products, rng.uniform(0, 2 * np.pi, (P, K)))
        numerator, denominator = pair_matrices(shifted)
        trial_pairs = pairs.with_values(numerator[pairs.a, pairs.b] / denominator[pairs.a, pairs.b],
                                        denominator[pairs.a, pairs.b] ** -0.5)
        for name in patterns:
            result[name][trial] = optimal_statistic(trial_pairs, overlaps[name])["snr"]
    return result


def p_value(observed: float, null: np.ndarray) -> float:
    """Fraction of the null at or above ``observed``, counting the observation itself."""
    return float((1 + np.sum(null >= observed)) / (1 + null.size))
