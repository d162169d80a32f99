"""What the optimal statistic will measure: its expected S/N and detection probability, from the array alone.

The forecast builds the same per-pulsar Fourier-domain products as ``ptares correlate``
(:mod:`ptares.correlation.fourier`) from the TOAs, errors and noise, with no residuals needed,
for a Hellings–Downs background of amplitude A whose own power the noise model includes (as
``correlate`` does with the injected noise).  The estimate is unbiased,
``E[A^2_hat] = A^2``, so the measured S/N ``A^2_hat / sigma_0`` has mean ``A^2 / sigma_0``
exactly, ``sigma_0`` being the statistic's quoted (noise-only) error.  Its spread about that
mean includes the background's own scatter (:func:`ptares.correlation.scatter.weighted_covariance`).
Detection: the S/N is a quadratic form of Gaussian data, under the uncorrelated null and under
the background alike, so both distributions are generalised chi-squared
(:func:`ptares.correlation.null_distribution.signal_eigenvalues`); the detection threshold at a
false-alarm probability is the null's quantile and the detection probability the background's
tail beyond it.  Above :data:`FORECAST_EIGEN_LIMIT` the distributions' shapes come from the
frequency-diagonal eigenvalues, shifted and scaled to the exact mean and variance of each.  This mirrors a campaign whose tasks detect when their exact noise-only p-value
is below the false-alarm probability (:mod:`ptares.campaign.detection`).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
from tqdm.auto import tqdm

from ptares.correlation.fourier import FourierProducts, fourier_products
from ptares.correlation.noise import NoiseModel
from ptares.correlation.null_distribution import null_eigenvalues, signal_eigenvalues, tail_probability, threshold
from ptares.correlation.pairs import overlap, pair_correlations, weak_signal_weights
from ptares.correlation.scatter import weighted_covariance
from ptares.dataset import Dataset
from ptares.errors import InputError
from ptares.physics.constants import YEAR
from ptares.physics.patterns import correlation_matrix

__all__ = ["FORECAST_EIGEN_LIMIT", "expected_statistic", "truncated", "with_common_power"]

#: Largest P 2K for which the detection probability's distributions are computed without approximation
#: (beyond, frequency-diagonal: one P x P problem per basis column).
FORECAST_EIGEN_LIMIT = 600


def truncated(dataset: Dataset, years: float) -> Dataset:
    """The dataset observed for its first ``years`` only; pulsars with too few TOAs by then are left out."""
    end = dataset.start_mjd + years * YEAR / 86400.0
    pulsars = []
    for p in dataset.pulsars:
        keep = p.mjd <= end
        if np.count_nonzero(keep) <= p.design_matrix.shape[1] + 1:
            continue
        cut = {key: getattr(p, key)[keep] for key in ("mjd", "residuals", "errors", "design_matrix", "measured",
                                                        "frequency_mhz", "system") if getattr(p, key) is not None}
        pulsars.append(replace(p, injected={k: v[keep] for k, v in p.injected.items()}, **cut))
    return replace(dataset, pulsars=pulsars, span=min(dataset.span, years * YEAR))


def with_common_power(products: FourierProducts, amplitude2: float) -> FourierProducts:
    """The products of a noise model with a common process of power ``amplitude2 * phi`` added on the template's
    own columns, from those of the model without it (``X`` set to zero: a forecast has no data).

    Woodbury: adding ``F Phi_c F^T`` to the covariance gives
    ``Z = Z_0 - Z_0 (Phi_c^-1 + Z_0)^-1 Z_0``, one small solve per pulsar instead of a pass over the TOAs.
    """
    Z0 = products.Z
    if amplitude2 <= 0:
        return FourierProducts(X=np.zeros_like(products.X), Z=Z0, phi=products.phi)
    inner = Z0 + np.diag(1.0 / (amplitude2 * products.phi))[None]
    Z = Z0 - Z0 @ np.linalg.solve(inner, Z0)
    return FourierProducts(X=np.zeros_like(products.X), Z=0.5 * (Z + Z.transpose(0, 2, 1)), phi=products.phi)


def expected_statistic(dataset: Dataset, noise: NoiseModel, amplitudes, gamma: float, harmonics: int,
                       false_alarm: float, progress: bool = False, limit: int = FORECAST_EIGEN_LIMIT) -> dict:
    """Forecast of the Hellings–Downs optimal statistic at each of ``amplitudes``; arrays keyed
    ``amplitude``, ``snr`` (expected measured S/N), ``snr_weak`` (noise model without the background),
    ``snr_spread`` (standard deviation of the S/N, the background's own scatter included), ``threshold``
    (S/N at ``false_alarm``), ``detection_probability``, and ``method`` of the distributions."""
    if len(dataset.pulsars) < 2:
        raise InputError(f"has {len(dataset.pulsars)} pulsar(s) with enough TOAs; a forecast needs at least 2", "dataset")
    positions = np.array([p.position for p in dataset.pulsars])
    pattern = correlation_matrix(positions, "hellings-downs")
    amplitudes = np.atleast_1d(np.asarray(amplitudes, dtype=float))

    quiet = replace(noise, common_amplitude=0.0)
    base = fourier_products(dataset, quiet, harmonics, gamma)

    def statistic(products):
        pairs = pair_correlations(products, positions)
        weights = weak_signal_weights(pairs, overlap(pairs, "hellings-downs"))
        return pairs, weights, float(np.sqrt(np.sum((weights * pairs.sigma) ** 2)))

    *_, sigma_weak = statistic(base)
    out = {key: [] for key in ("snr", "snr_spread", "threshold", "detection_probability")}
    methods = set()
    for amplitude in tqdm(amplitudes, desc="amplitudes", disable=None if progress else True, leave=False):
        a2 = amplitude**2
        products = with_common_power(base, a2)
        pairs, weights, sigma = statistic(products)
        null, method = null_eigenvalues(products, pairs, weights, sigma, limit)
        signal, _ = signal_eigenvalues(products, pairs, weights, sigma, pattern, a2, a2, limit)
        methods.add(method)
        mean = a2 / sigma  # the estimate is unbiased
        if method == "exact":
            spread = float(np.sqrt(2.0 * np.sum(signal**2)))
            x = threshold(false_alarm, null)
            probability = tail_probability(x, signal)
        else:
            # frequency-diagonal shapes moved and scaled to the exact means and variances (the null's variance
            # is 1 by construction; the background's from the pair-pair covariance): it misses 10-20% of both
            variance, _ = weighted_covariance(products, pairs, weights, pattern, a2, a2)
            spread = float(np.sqrt(variance.item())) / sigma
            null_spread = float(np.sqrt(2.0 * np.sum(null**2)))
            x = threshold(false_alarm, null / null_spread)
            approximate_mean, approximate_spread = float(np.sum(signal)), float(np.sqrt(2.0 * np.sum(signal**2)))
            probability = tail_probability(approximate_mean + (x - mean) * approximate_spread / spread, signal)
        out["snr"].append(mean)
        out["snr_spread"].append(spread)
        out["threshold"].append(x)
        out["detection_probability"].append(probability)
    result = {"amplitude": amplitudes, "snr_weak": amplitudes**2 / sigma_weak,
              **{key: np.array(values) for key, values in out.items()}}
    result["method"] = "exact" if methods == {"exact"} else "frequency-diagonal, moment-matched"
    return result
