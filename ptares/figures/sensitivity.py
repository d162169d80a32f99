"""Figures of ``ptares sensitivity``: strain-noise curves, expected S/N and detection probability, and
continuous-wave sensitivity (against frequency and on the sky)."""

from __future__ import annotations

import numpy as np
import matplotlib.pyplot as plt

from ptares.figures.common import COMPONENT_COLOURS
from ptares.physics.spectra import fourier_frequencies

__all__ = ["curves_figure", "detection_figure", "wave_figure", "wave_sky_figure"]

_ARRAY = "#1b1b1b"
_PULSAR = "#b9b9b9"
_INTEGRATED = "#7a4fa3"


def _fourier_ticks(ax, span: float, harmonics: int) -> None:
    """Short ticks at the Fourier frequencies ``k / span`` of the forecast's template, along the bottom."""
    basis = fourier_frequencies(span, harmonics)
    ax.plot(basis, np.full(basis.size, 0.0), "|", color=COMPONENT_COLOURS["gwb"], markersize=6, alpha=0.6,
            transform=ax.get_xaxis_transform(), clip_on=False)


def curves_figure(result):
    """Characteristic strain against frequency: each pulsar's noise, the array's Hellings–Downs curve, the
    power-law-integrated curve and the reference background."""
    f = result.frequency
    fig, ax = plt.subplots(figsize=(7.5, 5.2))
    for a in range(len(result.names)):
        ax.loglog(f, result.characteristic(result.spectra.strain[a]), color=_PULSAR, lw=0.7,
                  label="single pulsars" if a == 0 else None)
    ax.loglog(f, result.characteristic(result.effective), color=_ARRAY, lw=2.0, label="array, Hellings\u2013Downs")
    ax.loglog(f, result.integrated["h_c"], color=_INTEGRATED, lw=1.6, ls="--",
              label=f"power-law integrated (S/N {result.settings['power_law_snr']:.3g})")
    reference = result.reference
    kind = "injected" if reference["injected"] else "reference"
    ax.loglog(f, reference["characteristic_strain"], color=COMPONENT_COLOURS["gwb"], lw=1.6,
              label=f"{kind} background A = {reference['amplitude']:.2g}, \u03b3 = {reference['spectral_index']:.3g}")
    _fourier_ticks(ax, 1.0 / f.min() / 2.0, result.settings["harmonics"])
    lowest = np.nanmin(result.characteristic(result.effective))
    ax.set_ylim(lowest / 5.0, None)
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel("characteristic strain")
    ax.grid(which="major", alpha=0.3)
    ax.legend(fontsize=8, loc="upper right")
    ax.set_title(f"Sensitivity of {len(result.names)} pulsars (noise with the timing-model fit)")
    fig.tight_layout()
    return fig


def detection_figure(result):
    """Expected S/N and detection probability against background amplitude (left) and observing time (right)."""
    b, y = result.background, result.years
    alpha = result.settings["false_alarm"]
    fig, (left, right) = plt.subplots(1, 2, figsize=(11.0, 4.6))
    for ax, x, values, label in ((left, b["amplitude"], b, "background amplitude A"),
                                 (right, y["years"], y, "observing span (yr)")):
        snr, spread = values["snr"], values["snr_spread"]
        ax.fill_between(x, snr - spread, snr + spread, color=COMPONENT_COLOURS["gwb"], alpha=0.2,
                        label="expected S/N \u00b1 its spread")
        ax.plot(x, snr, color=COMPONENT_COLOURS["gwb"], lw=2.0)
        if ax is left:
            ax.set_xscale("log")
            ax.plot(x, b["snr_weak"], color=COMPONENT_COLOURS["gwb"], lw=1.0, ls=":",
                    label="weak-signal approximation")
            ax.set_ylim(min(0.0, float(np.min(snr - spread))), 1.3 * float(np.max(snr + spread)))
        ax.set_xlabel(label)
        ax.set_ylabel("optimal-statistic S/N (Hellings\u2013Downs)")
        ax.grid(alpha=0.3)
        twin = ax.twinx()
        twin.plot(x, values["detection_probability"], color=_ARRAY, lw=1.6, ls="--",
                  label=f"detection probability (false alarm {alpha:.2g})")
        twin.set_ylim(0.0, 1.02)
        twin.set_ylabel("detection probability")
        ax.legend(handles=ax.get_legend_handles_labels()[0] + twin.get_legend_handles_labels()[0], fontsize=8,
                  loc="upper left")
    left.set_title("against amplitude (full span)")
    right.set_title(f"against time at A = {y['amplitude']:.2g}")
    fig.tight_layout()
    return fig


def wave_figure(result):
    """Strain a circular binary needs for the chosen S/N: sky-averaged, and the best and worst sky position."""
    w = result.wave
    fig, ax = plt.subplots(figsize=(7.5, 5.0))
    ax.fill_between(w["frequency"], w["h0_best"], w["h0_worst"], color=COMPONENT_COLOURS["binary"], alpha=0.2,
                    label="best to worst sky position")
    ax.loglog(w["frequency"], w["h0_sky_averaged"], color=COMPONENT_COLOURS["binary"], lw=2.0, label="sky-averaged")
    ax.axvline(w["map_frequency"], color=_ARRAY, lw=0.8, ls=":", label="frequency of the sky map")
    ax.set_ylim(0.5 * np.nanmin(w["h0_best"]), 1e3 * np.nanmin(w["h0_sky_averaged"]))
    ax.set_xlabel("gravitational-wave frequency (Hz)")
    ax.set_ylabel("strain amplitude h\u2080")
    term = "with" if w["pulsar_term"] else "without"
    ax.set_title(f"Continuous waves: h\u2080 for S/N {w['snr']:.3g} ({term} pulsar terms)")
    ax.grid(which="major", alpha=0.3)
    ax.legend(fontsize=8, loc="upper left")
    fig.tight_layout()
    return fig


def wave_sky_figure(result):
    """Sky map (equatorial, Mollweide, right ascension increasing to the left) of the strain a circular binary
    needs at the map frequency, with the pulsars."""
    w = result.wave
    ra, dec = np.asarray(w["map_ra"]), np.asarray(w["map_dec"])
    longitude = -np.angle(np.exp(1j * ra))
    order = np.argsort(longitude)
    fig = plt.figure(figsize=(9.0, 5.2))
    ax = fig.add_subplot(projection="mollweide")
    mesh = ax.pcolormesh(longitude[order], dec, np.log10(np.asarray(w["map_h0"]))[:, order], cmap="magma_r",
                         shading="nearest")
    pulsar_ra = np.arctan2(result.positions[:, 1], result.positions[:, 0])
    pulsar_dec = np.arcsin(np.clip(result.positions[:, 2], -1.0, 1.0))
    ax.scatter(-np.angle(np.exp(1j * pulsar_ra)), pulsar_dec, marker="*", s=40, color="white", edgecolor="k",
               linewidth=0.4, zorder=3, label="pulsars")
    hours = np.arange(-10, 12, 2)
    ax.set_xticks(np.radians(hours * 15.0), [f"{(-h) % 24:d}h" for h in hours], fontsize=7)
    ax.grid(alpha=0.35)
    ax.legend(loc="lower right", fontsize=7)
    fig.colorbar(mesh, ax=ax, orientation="horizontal", fraction=0.05, pad=0.08,
                 label=f"log\u2081\u2080 h\u2080 for S/N {w['snr']:.3g}, averaged over polarisation and inclination")
    ax.set_title(f"Continuous-wave sensitivity on the sky at {w['map_frequency'] * 1e9:.3g} nHz", pad=14)
    return fig
