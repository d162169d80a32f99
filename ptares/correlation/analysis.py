"""From a dataset to pair correlations, optimal statistics, nulls and the expected scatter.

:func:`correlate` runs the whole analysis of ``ptares correlate`` and returns a
:class:`CorrelationResult`, which writes itself as JSON.  With several noise
models (posterior draws) the pair correlations and statistics are averaged over
them (noise-marginalised optimal statistic, Vigeland et al. 2018); nulls and
the scatter use the first model.
"""

from __future__ import annotations

import datetime
from dataclasses import dataclass, field

import numpy as np
from tqdm.auto import tqdm

from ptares.correlation.fourier import check_dataset, fourier_products
from ptares.correlation.noise import NoiseModel
from ptares.correlation.null_distribution import (
    NULL_DESCRIPTION,
    null_eigenvalues,
    null_skewness,
    tail_probability,
)
from ptares.correlation.nulls import p_value, phase_shifts, sky_scrambles
from ptares.correlation.pairs import (
    PairCorrelations,
    joint_statistic,
    optimal_statistic,
    overlap,
    pair_correlations,
    pair_covariant_statistic,
    pair_matrices,
    per_frequency_statistics,
    weak_signal_weights,
)
from ptares.correlation.scatter import (
    BinnedCorrelations,
    bin_pairs,
    binned_covariance,
    covariance_method,
    ensemble_draws,
    fit_quality,
    pair_covariance,
    refitted_chi2,
    weighted_covariance,
)
from ptares.dataset import Dataset, write_json
from ptares.inputs.config import CorrelateSection
from ptares.limits import MEMORY_LIMIT
from ptares.physics.patterns import correlation_matrix, pattern_function
from ptares.version import __version__

__all__ = ["PATTERN_NAMES", "CorrelationResult", "correlate", "template_settings"]

PATTERN_NAMES = ("hellings-downs", "monopole", "dipole")


@dataclass
class CorrelationResult:
    names: list
    pairs: PairCorrelations
    estimates: dict
    binned: BinnedCorrelations
    band: np.ndarray  #: standard deviation of each binned value about the curve at the recovered amplitude
    band_method: str
    fit: dict
    settings: dict
    nulls: dict = field(default_factory=dict)  #: {"phase_shifts": {pattern: snr array}, "sky_scrambles": {...}}
    null_eigenvalues: dict = field(default_factory=dict)  #: {pattern: lambda}: noise-only S/N is sum lambda chi^2_1
    injected_amplitude2: float | None = None

    def to_json(self) -> dict:
        return {
            "ptares_version": __version__,
            "created": datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds"),
            "settings": self.settings,
            "pairs": [
                {"a": self.names[a], "b": self.names[b], "angle": float(t), "rho": float(r), "sigma": float(s)}
                for a, b, t, r, s in zip(self.pairs.a, self.pairs.b, self.pairs.angle, self.pairs.rho, self.pairs.sigma)
            ],
            "estimates": self.estimates,
            "binned": {
                "angle": self.binned.centres.tolist(),
                "rho": self.binned.rho.tolist(),
                "error": self.binned.error.tolist(),
                "band": self.band.tolist(),
                "pairs": [int(m.size) for m in self.binned.members],
            },
            "fit_quality": {**self.fit, "band_method": self.band_method,
                            "note": "amplitude2 refitted to the binned values; p from the chi-squared table "
                                    "(approximate: bins are not Gaussian), p_calibrated from simulations of the fitted model"},
            "injected_amplitude2": self.injected_amplitude2,
        }

    def write(self, path) -> None:
        """Write ``to_json()`` atomically; non-finite numbers become null (JSON has no NaN)."""
        write_json(path, self.to_json())

    def __repr__(self) -> str:
        """A few lines: pairs, noise model, each pattern's A^2, S/N and p-value, the fit quality; no arrays."""
        draws = self.settings.get("noise_draws", 1)
        lines = [f"CorrelationResult: {len(self.names)} pulsars, {len(self.pairs.rho)} pairs, "
                 f"noise {self.settings.get('noise', '?')}" + (f" ({draws} draws)" if draws != 1 else "")
                 + f", {self.settings.get('harmonics')} frequencies, spectral index {float(self.settings.get('spectral_index', 0.0)):.3g}"]
        for name in PATTERN_NAMES:
            e = self.estimates.get(name, {})
            p_text = ""
            if "p_value" in e:
                p_text = f", p {'<=' if e.get('p_value_is_bound') else '='} {e['p_value']:.3g}"
            lines.append(f"  {name:15s} A^2 = {e.get('amplitude2', float('nan')):.3g} +/- {e.get('sigma', float('nan')):.3g}, "
                         f"S/N {e.get('snr', float('nan')):.2f}{p_text}")
        if self.fit:
            quality = f"  fit quality    chi2 {self.fit.get('chi2', float('nan')):.3g} for {self.fit.get('dof')} dof"
            if self.fit.get("p_calibrated") is not None:
                quality += f", p_calibrated {self.fit['p_calibrated']:.3g}"
            lines.append(quality)
        if self.injected_amplitude2 is not None:
            lines.append(f"  injected       A^2 = {self.injected_amplitude2:.3g}")
        return "\n".join(lines)


def template_settings(dataset: Dataset, section: CorrelateSection) -> tuple:
    """``(gamma, harmonics)`` of the template: the config's, else the injected background's, else 13/3 and 30."""
    gwb = dataset.signals.get("gwb", {})
    gamma = section.spectral_index if section.spectral_index is not None else float(gwb.get("spectral_index", 13.0 / 3.0))
    harmonics = section.harmonics if section.harmonics is not None else int(gwb.get("harmonics", 30))
    return gamma, harmonics


def _draws(dataset, noise_models, harmonics, gamma, positions, progress):
    """``(products, pairs)`` under each noise model."""
    draws = []
    for noise in tqdm(noise_models, desc="noise draws", disable=None if progress and len(noise_models) > 1 else True):
        products = fourier_products(dataset, noise, harmonics, gamma)
        draws.append((products, pair_correlations(products, positions)))
    return draws


def _calibrated_p(products, pairs, binned, shape, gamma_matrix, covariance_at, fit, model_amplitude2, trials, rng):
    """The fit's p-value from ``trials`` Gaussian-ensemble simulations at the fitted amplitude.

    Binned correlations are quadratic in the data and far from Gaussian when few frequencies
    dominate, and the covariance is evaluated at an amplitude estimated from the same data; so
    each simulated data set goes through the same refit, and the share of simulated chi-squared
    values at or above the observed one is the tail probability.
    """
    size = products.Z.shape[0] * products.Z.shape[1]
    if size**2 * 8 > MEMORY_LIMIT:
        return {"p_calibrated": None}
    _, denominator = pair_matrices(products)
    X = ensemble_draws(products, gamma_matrix, max(fit["amplitude2"], 0.0), model_amplitude2, trials, rng)
    numerator = np.matmul(X * products.phi, X.transpose(0, 2, 1))[:, pairs.a, pairs.b]  # X_a^T Phi X_b per draw
    rho = numerator / denominator[pairs.a, pairs.b]
    simulated = np.column_stack([rho[:, m] @ w for m, w in zip(binned.members, binned.weights)])
    start = float(fit["amplitude2"])
    values, _ = refitted_chi2(simulated, shape, covariance_at, start)
    return {"p_calibrated": float((1 + np.sum(values >= fit["chi2"])) / (1 + trials)), "trials": int(trials)}


def _signal_aware(entry: dict, name: str, draw, pairs, gamma_matrix, model_amplitude2, estimator: str) -> np.ndarray:
    """Add to one pattern's ``entry`` its signal-aware sigma and its exact noise-only p-value and skewness;
    returns the null's eigenvalues.

    ``draw`` is the first noise model's ``(products, pairs)``; ``pairs`` the (draw-averaged) correlations.
    With ``estimator = "pair-covariant"`` the entry's estimate becomes the generalised least-squares one
    (pair covariance at the weak-signal estimate clipped at zero, then once more at the new estimate),
    and the weak-signal values move to ``entry["weak_signal"]``.
    """
    products, first = draw
    gamma_ab = overlap(first, name)
    if estimator == "pair-covariant":
        entry["weak_signal"] = {key: entry[key] for key in ("amplitude2", "sigma", "snr")}
        amplitude2 = entry["amplitude2"]
        for _ in range(2):
            covariance, method = pair_covariance(products, first, gamma_matrix, max(amplitude2, 0.0), model_amplitude2)
            found, weights = pair_covariant_statistic(pairs, gamma_ab, covariance)
            amplitude2 = found["amplitude2"]
        entry.update(found)
        variance = weights @ covariance @ weights
        if "p_value" in entry:
            entry["p_value_statistic"] = "weak-signal S/N (the null trials use weak-signal weights)"
    else:
        weights = weak_signal_weights(first, gamma_ab)
        variance, method = weighted_covariance(products, first, weights, gamma_matrix, max(entry["amplitude2"], 0.0),
                                               model_amplitude2)
    entry["sigma_signal"] = float(np.sqrt(variance.item()))
    entry["sigma_method"] = method
    eigenvalues, null_method = null_eigenvalues(products, first, weights, entry["sigma"])
    exact = null_method is not None
    entry["p_exact"] = tail_probability(entry["snr"], eigenvalues) if exact else None
    entry["null_skewness"] = null_skewness(eigenvalues) if exact else None
    entry["null"] = NULL_DESCRIPTION if exact else "unavailable: the eigenvalues would exceed the memory limit"
    entry["null_method"] = null_method
    return eigenvalues


def correlate(dataset: Dataset, noise_models: list, section: CorrelateSection = CorrelateSection(),
              progress: bool = False) -> CorrelationResult:
    """Run the cross-correlation analysis of ``dataset`` under ``noise_models`` (one or more :class:`NoiseModel`)."""
    check_dataset(dataset)
    if isinstance(noise_models, NoiseModel):
        noise_models = [noise_models]
    gamma, harmonics = template_settings(dataset, section)
    positions = np.array([p.position for p in dataset.pulsars])
    draws = _draws(dataset, noise_models, harmonics, gamma, positions, progress)
    products = draws[0][0]

    # noise-marginalised: statistics averaged over draws
    per_draw = []
    for _, pairs in draws:
        single = {name: optimal_statistic(pairs, overlap(pairs, name)) for name in PATTERN_NAMES}
        single["joint"] = joint_statistic(pairs, list(PATTERN_NAMES))
        per_draw.append(single)
    estimates = {name: {key: float(np.mean([d[name][key] for d in per_draw])) for key in ("amplitude2", "sigma", "snr")}
                 for name in PATTERN_NAMES}
    joint = per_draw[0]["joint"]
    if len(per_draw) > 1 and joint["covariance"] is not None:
        for key in ("amplitude2", "sigma", "snr"):
            joint[key] = {n: float(np.mean([d["joint"][key][n] for d in per_draw])) for n in PATTERN_NAMES}
        joint["snr_total"] = float(np.mean([d["joint"]["snr_total"] for d in per_draw]))
    estimates["joint"] = joint
    pairs = draws[0][1].with_values(
        np.mean([p.rho for _, p in draws], axis=0), np.mean([p.sigma for _, p in draws], axis=0)
    )

    rng = np.random.default_rng(section.seed)
    nulls = {}
    if section.phase_shifts:
        nulls["phase_shifts"] = phase_shifts(products, draws[0][1], PATTERN_NAMES, section.phase_shifts, rng)
    if section.scrambles:
        nulls["sky_scrambles"] = sky_scrambles(draws[0][1], PATTERN_NAMES, section.scrambles, rng,
                                               threshold=section.scramble_threshold)
    for name in PATTERN_NAMES:
        found = {kind: p_value(estimates[name]["snr"], values[name]) for kind, values in nulls.items() if name in values}
        if found:
            kind = "phase_shifts" if "phase_shifts" in found else "sky_scrambles"
            estimates[name]["p_value"] = found[kind]
            # no null trial reached the observation: the p-value is only bounded by 1 / (trials + 1)
            estimates[name]["p_value_is_bound"] = bool(found[kind] == 1.0 / (1 + nulls[kind][name].size))
            estimates[name]["null_p_values"] = found

    model_amplitude2 = noise_models[0].common_amplitude**2
    eigenvalues = {}
    for name in PATTERN_NAMES:
        # the noise model's common process is the Hellings-Downs background's own power; another pattern's
        # process would add power of its own
        own = model_amplitude2 if name == "hellings-downs" else 0.0
        eigenvalues[name] = _signal_aware(estimates[name], name, draws[0], pairs, correlation_matrix(positions, name),
                                          own, section.estimator)
    frequency = [per_frequency_statistics(p, d, overlap(d, "hellings-downs")) for p, d in draws]
    estimates["per_frequency"] = [
        {"frequency": float((k + 1) / dataset.span),
         **{key: float(np.mean([f[key][k] for f in frequency])) for key in ("amplitude2", "sigma", "snr")}}
        for k in range(harmonics)
    ]

    binned = bin_pairs(pairs, section.bins)
    curve = pattern_function("hellings-downs")
    shape = np.array([np.sum(w * curve(pairs.angle[m])) for m, w in zip(binned.members, binned.weights)])
    gamma_matrix = correlation_matrix(positions, "hellings-downs")

    # the binned covariance is a quadratic polynomial in A^2 (Isserlis: products of terms linear in A^2),
    # so three evaluations give it at every amplitude
    scale = max(abs(estimates["hellings-downs"]["amplitude2"]), model_amplitude2, 1e-300)
    c0, c1, c2 = (binned_covariance(products, draws[0][1], binned, gamma_matrix, a, model_amplitude2)[0]
                  for a in (0.0, scale, 2.0 * scale))
    linear, quadratic = (4.0 * c1 - c2 - 3.0 * c0) / (2.0 * scale), (c2 - 2.0 * c1 + c0) / (2.0 * scale**2)

    def covariance_at(amplitude2):
        return c0 + amplitude2 * linear + amplitude2**2 * quadratic

    fit = fit_quality(binned.rho, shape, covariance_at, estimates["hellings-downs"]["amplitude2"])
    if section.fit_trials:
        fit.update(_calibrated_p(products, draws[0][1], binned, shape, gamma_matrix, covariance_at, fit,
                                 model_amplitude2, section.fit_trials, rng))
    band = np.sqrt(np.diag(covariance_at(max(estimates["hellings-downs"]["amplitude2"], 0.0))))

    gwb = dataset.signals.get("gwb")
    return CorrelationResult(
        names=dataset.names,
        pairs=pairs,
        estimates=estimates,
        binned=binned,
        band=band,
        band_method=covariance_method(products),
        fit=fit,
        settings={
            "spectral_index": gamma,
            "harmonics": harmonics,
            "noise": section.noise,
            "noise_draws": len(noise_models),
            "bins": section.bins,
            "scrambles": section.scrambles,
            "phase_shifts": section.phase_shifts,
            "scramble_threshold": section.scramble_threshold,
            "seed": section.seed,
            "overlays": section.overlays,
            "fit_trials": section.fit_trials,
            "estimator": section.estimator,
        },
        nulls=nulls,
        null_eigenvalues=eigenvalues,
        injected_amplitude2=float(gwb["amplitude"]) ** 2 if gwb and "amplitude" in gwb else None,
    )
