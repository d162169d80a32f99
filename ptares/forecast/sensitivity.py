"""The whole forecast of ``ptares sensitivity``: curves, expected S/N, detection probability, continuous waves.

:func:`forecast` takes a dataset (simulated, imported, or the outline of a config: only its
TOAs, errors, noise and pulsar positions are used, never its residuals) and the noise it
holds, and returns a :class:`SensitivityResult`, which writes itself as JSON.  Frequency-domain
curves come from :mod:`ptares.forecast.spectral` (fast, approximate); the optimal statistic's
expected S/N and detection probability from :mod:`ptares.forecast.statistic` (the estimator's
own covariances, exact in the mean).
"""

from __future__ import annotations

import datetime
from dataclasses import dataclass, field

import numpy as np

from ptares.correlation.noise import noise_from_dataset
from ptares.dataset import Dataset, write_json
from ptares.errors import InputError
from ptares.forecast import spectral
from ptares.forecast.statistic import expected_statistic, truncated
from ptares.inputs.config import SensitivitySection
from ptares.physics.constants import YEAR
from ptares.physics.sky import unit_vector
from ptares.physics.spectra import characteristic_strain
from ptares.version import __version__

__all__ = ["REFERENCE_AMPLITUDE", "SensitivityResult", "forecast", "sky_grid"]

#: Background drawn over the curves when the dataset has none (PHYSICS.md's reference; from memory).
REFERENCE_AMPLITUDE = 2.4e-15
_DEFAULT_AMPLITUDES = np.geomspace(1e-16, 1e-13, 20)


@dataclass
class SensitivityResult:
    """Everything :func:`forecast` computed; arrays in SI units (Hz, 1/Hz, s) unless named otherwise."""

    names: list
    positions: np.ndarray  #: (P, 3) unit vectors
    settings: dict
    spectra: spectral.PulsarSpectra
    effective: np.ndarray  #: Hellings-Downs strain-noise curve S_eff (F,), 1/Hz
    integrated: dict  #: power-law-integrated curve: h_c (F,), alpha, amplitude
    background: dict  #: per amplitude: exact forecast and the frequency-domain S/N
    years: dict  #: per observing span at the reference amplitude
    wave: dict  #: continuous waves: frequency, sky-averaged and best/worst h0, sky map
    reference: dict  #: the background drawn over the curves: amplitude, spectral_index, injected
    created: str = field(default_factory=lambda: datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds"))

    @property
    def frequency(self) -> np.ndarray:
        return self.spectra.frequency

    def characteristic(self, strain_spectrum) -> np.ndarray:
        """``h_c = sqrt(f S(f))`` of a strain spectrum on the grid."""
        return np.sqrt(self.frequency * strain_spectrum)

    def to_json(self) -> dict:
        s = self.spectra
        return {
            "ptares_version": __version__,
            "created": self.created,
            "settings": self.settings,
            "units": {"frequency": "Hz", "psd": "s^2/Hz", "strain_psd": "1/Hz", "h_c": "dimensionless",
                      "h0": "dimensionless", "years": "yr", "span": "s", "snr": "dimensionless"},
            "reference_background": self.reference,
            "frequency": self.frequency.tolist(),
            "pulsars": [
                {"name": n, "span": float(s.span[a]), "white_psd": float(s.white[a]), "psd": s.psd[a].tolist(),
                 "transmission": s.transmission[a].tolist(), "h_c": self.characteristic(s.strain[a]).tolist()}
                for a, n in enumerate(self.names)
            ],
            "array": {"strain_psd": self.effective.tolist(), "h_c": self.characteristic(self.effective).tolist(),
                      "note": "Hellings-Downs curve of Hazboun, Romano & Smith 2019 (frequency domain)"},
            "power_law_integrated": {**self.integrated, "snr": self.settings["power_law_snr"],
                                     "note": "Thrane & Romano 2013; weak-signal S/N on the Fourier frequencies"},
            "background": {**self.background, "note": (
                "snr: mean of the Hellings-Downs S/N that ptares correlate measures with the injected noise model "
                "(exact: the estimate is unbiased); snr_spread: its standard deviation between realisations, the "
                "background's own scatter included; snr_weak: noise only in each pulsar; detection: exact noise-only "
                "p-value below false_alarm (null: uncorrelated, noise model as assumed); frequency_domain: the same "
                "from the curves, approximate")},
            "years": self.years,
            "continuous_wave": self.wave,
        }

    def write(self, path) -> None:
        write_json(path, self.to_json())

    def amplitude_at(self, probability: float) -> float | None:
        """The background amplitude whose detection probability is ``probability`` (interpolated in log A over
        the forecast's amplitudes), or None outside their range."""
        b = self.background
        p = np.maximum.accumulate(b["detection_probability"])  # non-decreasing, for interpolation
        if not p[0] <= probability <= p[-1]:
            return None
        return float(np.exp(np.interp(probability, p, np.log(b["amplitude"]))))

    def __repr__(self) -> str:
        r, w = self.reference, self.wave
        best = int(np.argmin(w["h0_sky_averaged"]))
        kind = "injected" if r["injected"] else "reference"
        lines = [
            f"SensitivityResult: {len(self.names)} pulsars, {len(self.frequency)} frequencies, "
            f"false-alarm probability {self.settings['false_alarm']:.3g}",
            f"  {kind} background A = {r['amplitude']:.3g}: expected S/N {r['snr']:.2f} (realisations scatter by "
            f"{r['snr_spread']:.2f}), detection probability {r['detection_probability']:.2f}",
        ]
        half, most = self.amplitude_at(0.5), self.amplitude_at(0.95)
        if half is not None:
            lines.append(f"  detection probability 0.5 at A = {half:.3g}"
                         + (f", 0.95 at A = {most:.3g}" if most is not None else ""))
        lines.append(f"  continuous wave, sky-averaged: h0 = {w['h0_sky_averaged'][best]:.3g} at "
                     f"{w['frequency'][best] * 1e9:.3g} nHz for S/N {self.settings['wave_snr']:.3g}")
        return "\n".join(lines)


def sky_grid(step_deg: float) -> tuple:
    """Cell-centred ``(ra, dec)`` grids (radians, shape (rows, columns)) with ``step_deg`` cells, and each
    cell's solid-angle weight (summing to one)."""
    ra = np.deg2rad(np.arange(0.0, 360.0, step_deg) + step_deg / 2)
    dec = np.deg2rad(np.arange(-90.0, 90.0, step_deg) + step_deg / 2)
    RA, DEC = np.meshgrid(ra, dec)
    weight = np.cos(DEC)
    return RA, DEC, weight / weight.sum()


def _reference(dataset: Dataset, section: SensitivitySection) -> dict:
    gwb = dataset.signals.get("gwb", {})
    injected = float(gwb.get("amplitude", 0.0)) if gwb.get("correlation", "hellings-downs") == "hellings-downs" else 0.0
    amplitude = section.amplitude or injected or REFERENCE_AMPLITUDE
    gamma = section.spectral_index if section.spectral_index is not None else float(gwb.get("spectral_index", 13.0 / 3.0))
    harmonics = section.harmonics if section.harmonics is not None else int(gwb.get("harmonics", 30))
    return {"amplitude": float(amplitude), "spectral_index": float(gamma), "harmonics": int(harmonics),
            "injected": bool(injected and not section.amplitude)}


def _wave_frequency(dataset: Dataset, section: SensitivitySection) -> float:
    if section.wave_frequency is not None:
        return section.wave_frequency * 1e-9
    binary = dataset.signals.get("binary", {})
    sources = binary.get("sources")
    if sources is not None and len(sources):
        return float(np.asarray(sources["frequency"])[0])
    return 1e-8


def forecast(dataset: Dataset, section: SensitivitySection = SensitivitySection(), progress: bool = False) -> SensitivityResult:
    """Sensitivity and forecasts of ``dataset``'s array under the noise it holds (its injected noise parameters,
    or an imported catalogue's)."""
    if len(dataset.pulsars) < 2:
        raise InputError(f"has {len(dataset.pulsars)} pulsar(s); an array forecast needs at least 2", "dataset")
    noise = noise_from_dataset(dataset)
    reference = _reference(dataset, section)
    gamma, harmonics = reference["spectral_index"], reference["harmonics"]
    positions = np.array([p.position for p in dataset.pulsars])
    frequency = spectral.frequency_grid(dataset, section.curve_points)
    spectra = spectral.pulsar_spectra(dataset, noise, frequency)
    effective = spectral.array_curve(spectra, positions, dataset.span)
    integrated = spectral.power_law_integrated(frequency, effective, dataset.span, section.power_law_snr)

    amplitudes = np.asarray(section.amplitudes if section.amplitudes is not None else _DEFAULT_AMPLITUDES, dtype=float)
    # the reference amplitude rides along as a last entry: the Fourier products over the TOAs are built once
    every = expected_statistic(dataset, noise, np.append(amplitudes, reference["amplitude"]), gamma, harmonics,
                               section.false_alarm, progress)
    background = {key: value[:-1] if isinstance(value, np.ndarray) else value for key, value in every.items()}
    at_reference = {key: float(every[key][-1]) for key in ("snr", "snr_weak", "snr_spread", "detection_probability")}
    reference.update(at_reference)
    background["frequency_domain"] = spectral.background_snr(spectra, positions, dataset.span, harmonics, amplitudes, gamma)

    span_years = dataset.span / YEAR
    years = np.asarray(section.years if section.years is not None else np.linspace(span_years / 4, span_years, 8))
    if np.any(years > span_years * (1 + 1e-9)):
        raise InputError(f"asks for up to {years.max():.3g} yr, but the array is observed for {span_years:.3g} yr; "
                         "simulate a longer span to forecast further", "sensitivity.years")
    over_time = {key: [] for key in ("snr", "snr_spread", "detection_probability", "pulsars")}
    for value in years:
        if value >= span_years * (1 - 1e-9):  # the whole span: the reference forecast above
            found, count = at_reference, len(dataset.pulsars)
        else:
            part = truncated(dataset, value)
            count = len(part.pulsars)
            found = ({key: float(v[0]) for key, v in expected_statistic(
                part, noise_from_dataset(part), [reference["amplitude"]], gamma, harmonics, section.false_alarm).items()
                if key != "method"} if count >= 2 else None)
        for key in ("snr", "snr_spread", "detection_probability"):
            over_time[key].append(found[key] if found else 0.0)
        over_time["pulsars"].append(count)
    over_time = {"years": years, "amplitude": reference["amplitude"], **{k: np.array(v) for k, v in over_time.items()}}

    response = spectral.wave_response(spectra, section.pulsar_term)
    sky_averaged = spectral.wave_strain(response, positions, section.wave_snr)
    RA, DEC, weight = sky_grid(section.map_step)
    directions = unit_vector(RA.ravel(), DEC.ravel())
    f_map = _wave_frequency(dataset, section)
    at = spectral.pulsar_spectra(dataset, noise, np.array([f_map]))
    sky = spectral.wave_strain(spectral.wave_response(at, section.pulsar_term), positions, section.wave_snr,
                               directions)[:, 0].reshape(RA.shape)
    over_sky = spectral.wave_strain(response, positions, section.wave_snr, unit_vector(*_coarse_sky()))
    wave = {"frequency": frequency, "h0_sky_averaged": sky_averaged, "h0_best": over_sky.min(axis=0),
            "h0_worst": over_sky.max(axis=0), "map_frequency": f_map, "map_ra": RA[0], "map_dec": DEC[:, 0],
            "map_h0": sky, "snr": section.wave_snr, "pulsar_term": section.pulsar_term,
            "note": "S/N squared averaged over polarisation angle and cos(inclination); sky-averaged likewise over "
                    "directions; a pulsar term at an unrelated phase doubles the power"}

    settings = {**section.model_dump(mode="json"), "spectral_index": gamma, "harmonics": harmonics,
                "amplitudes": amplitudes.tolist(), "years": years.tolist(),
                "forecast_method": background["method"]}
    reference["characteristic_strain"] = characteristic_strain(frequency, reference["amplitude"], gamma).tolist()
    return SensitivityResult(names=dataset.names, positions=positions, settings=settings, spectra=spectra,
                             effective=effective, integrated=integrated, background=background, years=over_time,
                             wave=wave, reference=reference)


def _coarse_sky(step: float = 10.0) -> tuple:
    """``(ra, dec)`` (flat arrays, radians) of a coarse grid, for the best and worst direction at each frequency."""
    RA, DEC, _ = sky_grid(step)
    return RA.ravel(), DEC.ravel()
