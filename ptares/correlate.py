"""From a dataset to pair correlations, optimal statistics, nulls and the expected scatter.

:func:`correlate` runs the whole analysis of ``ptares correlate`` and returns a
:class:`CorrelationResult`, which writes itself as JSON.  With several noise
models (posterior draws) the pair correlations and statistics are averaged over
them (noise-marginalised optimal statistic, Vigeland et al. 2018); nulls and
the scatter use the first model.
"""

from __future__ import annotations

import datetime
import json
from dataclasses import dataclass, field

import numpy as np
from tqdm.auto import tqdm

from . import __version__
from .config import CorrelateSection
from .correlation_scatter import BinnedCorrelations, bin_pairs, binned_covariance, fit_quality
from .correlations import correlation_matrix, pattern_function
from .cross_correlation import (
    PairCorrelations,
    check_dataset,
    fourier_products,
    joint_statistic,
    optimal_statistic,
    overlap,
    pair_correlations,
)
from .dataset import Dataset, atomic_path
from .noise_model import NoiseModel
from .nulls import p_value, phase_shifts, sky_scrambles

__all__ = ["CorrelationResult", "correlate", "template_settings", "PATTERN_NAMES"]

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
            "fit_quality": {**self.fit, "band_method": self.band_method},
            "injected_amplitude2": self.injected_amplitude2,
        }

    def write(self, path) -> None:
        """Write ``to_json()`` atomically."""
        with atomic_path(path) as temporary:
            temporary.write_text(json.dumps(self.to_json(), indent=1))


def template_settings(dataset: Dataset, section: CorrelateSection) -> tuple:
    """``(gamma, components)`` of the template: the config's, else the injected background's, else 13/3 and 30."""
    gwb = dataset.signals.get("gwb", {})
    gamma = section.gamma if section.gamma is not None else float(gwb.get("gamma", 13.0 / 3.0))
    components = section.components if section.components is not None else int(gwb.get("components", 30))
    return gamma, components


def _draws(dataset, noise_models, components, gamma, positions, progress):
    """``(products, pairs)`` under each noise model."""
    draws = []
    for noise in tqdm(noise_models, desc="noise draws", disable=None if progress and len(noise_models) > 1 else True):
        products = fourier_products(dataset, noise, components, gamma)
        draws.append((products, pair_correlations(products, positions)))
    return draws


def correlate(dataset: Dataset, noise_models: list, section: CorrelateSection = CorrelateSection(),
              progress: bool = False) -> CorrelationResult:
    """Run the cross-correlation analysis of ``dataset`` under ``noise_models`` (one or more :class:`NoiseModel`)."""
    check_dataset(dataset)
    if isinstance(noise_models, NoiseModel):
        noise_models = [noise_models]
    gamma, components = template_settings(dataset, section)
    positions = np.array([p.position for p in dataset.pulsars])
    draws = _draws(dataset, noise_models, components, gamma, positions, progress)
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
    if len(per_draw) > 1:
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
            estimates[name]["p_value"] = found.get("phase_shifts", found.get("sky_scrambles"))
            estimates[name]["null_p_values"] = found

    binned = bin_pairs(pairs, section.bins)
    amplitude2 = max(estimates["hellings-downs"]["amplitude2"], 0.0)
    covariance, method = binned_covariance(
        products, draws[0][1], binned, correlation_matrix(positions, "hellings-downs"), amplitude2,
        noise_models[0].common_amplitude**2,
    )
    curve = pattern_function("hellings-downs")
    expected = np.array([np.sum(w * curve(pairs.angle[m])) for m, w in zip(binned.members, binned.weights)])
    fit = fit_quality(binned, estimates["hellings-downs"]["amplitude2"] * expected, covariance)

    gwb = dataset.signals.get("gwb")
    return CorrelationResult(
        names=dataset.names,
        pairs=pairs,
        estimates=estimates,
        binned=binned,
        band=np.sqrt(np.diag(covariance)),
        band_method=method,
        fit=fit,
        settings={
            "gamma": gamma,
            "components": components,
            "noise": section.noise,
            "noise_draws": len(noise_models),
            "bins": section.bins,
            "scrambles": section.scrambles,
            "phase_shifts": section.phase_shifts,
            "scramble_threshold": section.scramble_threshold,
            "seed": section.seed,
            "overlays": section.overlays,
        },
        nulls=nulls,
        injected_amplitude2=float(gwb["amplitude"]) ** 2 if gwb and "amplitude" in gwb else None,
    )
