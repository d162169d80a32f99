"""Names of fit parameters: one scheme for chains, summaries, tables, figures and configs.

A parameter of the whole array is named by its quantity alone
(``common_lg_amplitude``); one pulsar's parameter adds ``@`` and the pulsar's
name (``red_lg_amplitude@Birch``).  Pulsar names never contain ``@``, so the
split is unambiguous whatever ``_ . - +`` they hold.  ``lg_`` marks a base-10
logarithm, as ISO 80000-2 writes it (``lg x = log10 x``).  In ``[fit]`` a
per-pulsar quantity without ``@pulsar`` stands for every pulsar's.
"""

from __future__ import annotations

from ptares.inputs.config import BINARY_QUANTITIES, CHROMATIC_QUANTITIES, MEMORY_QUANTITIES, NOISE_QUANTITIES

__all__ = [
    "SEPARATOR",
    "COMMON_AMPLITUDE",
    "COMMON_INDEX",
    "COMMON_VARIANCE",
    "RED_VARIANCE",
    "red_bin",
    "red_bin_of",
    "COMMON_BEND",
    "COMMON_BEND_INDEX",
    "spectrum_bin",
    "bin_of",
    "WHITE_SCALE",
    "WHITE_QUADRATURE",
    "RED_AMPLITUDE",
    "RED_INDEX",
    "WHITE_JITTER",
    "SYSTEM_SEPARATOR",
    "white_owners",
    "CHROMATIC",
    "PER_PULSAR",
    "BINARY_QUANTITIES",
    "MEMORY_QUANTITIES",
    "LABELS",
    "binary",
    "memory",
    "for_pulsar",
    "split",
    "quantity",
    "label",
    "is_array_signal",
]

SEPARATOR = "@"

COMMON_AMPLITUDE = "common_lg_amplitude"  #: lg of the common process's characteristic strain at 1/yr
COMMON_INDEX = "common_spectral_index"  #: residual spectral index of the common process
COMMON_BEND = "common_lg_bend_frequency"  #: lg of a turning-over common process's bend frequency, in Hz
COMMON_BEND_INDEX = "common_bend_index"  #: how sharply it turns over (kappa)
#: Prefix of a free spectrum's parameters: ``common_lg_variance_<k>``, lg of the variance (s^2) of the common
#: process's sine and cosine coefficients at frequency k/T, S(f_k) / T
COMMON_VARIANCE = "common_lg_variance"
#: Prefix of a pulsar's free red-noise spectrum: ``red_lg_variance_<k>@<pulsar>``
RED_VARIANCE = "red_lg_variance"
WHITE_SCALE = "white_scale"  #: factor on the quoted TOA uncertainties
WHITE_QUADRATURE = "white_lg_quadrature"  #: lg of the white noise added in quadrature, in seconds
RED_AMPLITUDE = "red_lg_amplitude"  #: lg of a pulsar's red-noise amplitude at 1/yr
RED_INDEX = "red_spectral_index"  #: a pulsar's red-noise spectral index
WHITE_JITTER = "white_lg_jitter"  #: lg of the white noise shared by the TOAs of one epoch, in seconds
#: Separates a pulsar from its observing system where white noise is per system (``white_scale@Birch:Lband``).
SYSTEM_SEPARATOR = ":"

#: lg of a pulsar's chromatic-noise amplitude at 1/yr, stated at 1400 MHz, and its spectral index, per process
CHROMATIC = {
    "dispersion": ("dispersion_lg_amplitude", "dispersion_spectral_index"),
    "scattering": ("scattering_lg_amplitude", "scattering_spectral_index"),
}
assert tuple(q for pair in CHROMATIC.values() for q in pair) == CHROMATIC_QUANTITIES

#: Quantities every pulsar has one of: its white and red noise (the config's list, which ``[fit]
#: pulsar_noise_quantities`` draws on), its epoch jitter, then its chromatic processes.  White noise and
#: jitter are per observing system where the dataset records systems: their owner is then
#: ``pulsar:system`` (:func:`white_owners`).
PER_PULSAR = NOISE_QUANTITIES + (WHITE_JITTER,) + CHROMATIC_QUANTITIES
assert PER_PULSAR[:4] == (WHITE_SCALE, WHITE_QUADRATURE, RED_AMPLITUDE, RED_INDEX)

def spectrum_bin(k: int) -> str:
    """``3`` -> ``common_lg_variance_3``: the free-spectrum parameter at frequency k/T."""
    return f"{COMMON_VARIANCE}_{k}"


def bin_of(name: str):
    """The frequency number k of a common free-spectrum parameter, else None."""
    head, _, k = name.rpartition("_")
    return int(k) if head == COMMON_VARIANCE and k.isdigit() else None


def red_bin(k: int, pulsar: str) -> str:
    """``(3, "Birch")`` -> ``red_lg_variance_3@Birch``: a pulsar's free red-noise spectrum at frequency k/T."""
    return for_pulsar(f"{RED_VARIANCE}_{k}", pulsar)


def red_bin_of(name: str):
    """The frequency number k of a pulsar's free red-noise parameter, else None."""
    head, _, k = split(name)[0].rpartition("_")
    return int(k) if head == RED_VARIANCE and k.isdigit() else None


def white_owners(pulsar) -> list:
    """Who owns a pulsar's white-noise parameters: the pulsar (``[name]``), or each of its observing systems
    (``["Birch:Lband", "Birch:Sband"]``, in the order of ``PulsarData.systems``) where the dataset records them."""
    return [f"{pulsar.name}{SYSTEM_SEPARATOR}{s}" for s in pulsar.systems] or [pulsar.name]


def binary(name: str) -> str:
    """``lg_strain`` -> ``binary_lg_strain``: the parameter name of a continuous-wave quantity."""
    return f"binary_{name}"


def memory(name: str) -> str:
    """``epoch`` -> ``memory_epoch``: the parameter name of a memory-step quantity."""
    return f"memory_{name}"


def for_pulsar(quantity_name: str, pulsar: str) -> str:
    """``("red_lg_amplitude", "Birch")`` -> ``red_lg_amplitude@Birch``."""
    return f"{quantity_name}{SEPARATOR}{pulsar}"


def split(name: str) -> tuple:
    """``red_lg_amplitude@Birch`` -> ``("red_lg_amplitude", "Birch")``; array-wide names give ``(name, None)``."""
    head, sep, pulsar = name.partition(SEPARATOR)
    return (head, pulsar) if sep else (name, None)


def quantity(name: str) -> str:
    """The quantity a parameter measures, without its pulsar (``common_lg_variance`` for every frequency of a
    free spectrum)."""
    if bin_of(name) is not None:
        return COMMON_VARIANCE
    return RED_VARIANCE if red_bin_of(name) is not None else split(name)[0]


#: Axis label (matplotlib math text) of each quantity, with its unit.
LABELS = {
    COMMON_AMPLITUDE: r"$\lg A_\mathrm{common}$",
    COMMON_INDEX: r"$\gamma_\mathrm{common}$",
    COMMON_BEND: r"$\lg(f_\mathrm{bend}\,/\,\mathrm{Hz})$",
    COMMON_BEND_INDEX: r"$\kappa_\mathrm{bend}$",
    WHITE_SCALE: r"$s_\mathrm{white}$",
    WHITE_QUADRATURE: r"$\lg(\sigma_\mathrm{quad}\,/\,\mathrm{s})$",
    RED_AMPLITUDE: r"$\lg A_\mathrm{red}$",
    RED_INDEX: r"$\gamma_\mathrm{red}$",
    WHITE_JITTER: r"$\lg(J\,/\,\mathrm{s})$",
    "dispersion_lg_amplitude": r"$\lg A_\mathrm{disp}$",
    "dispersion_spectral_index": r"$\gamma_\mathrm{disp}$",
    "scattering_lg_amplitude": r"$\lg A_\mathrm{scat}$",
    "scattering_spectral_index": r"$\gamma_\mathrm{scat}$",
    binary("lg_strain"): r"$\lg h_0$",
    binary("orbital_phase"): r"$\Phi_0\ (\mathrm{rad})$",
    binary("inclination_cosine"): r"$\cos\iota$",
    binary("polarization_angle"): r"$\psi\ (\mathrm{rad})$",
    binary("right_ascension"): r"$\alpha\ (\mathrm{rad})$",
    binary("declination_sine"): r"$\sin\delta$",
    binary("lg_frequency"): r"$\lg(f_\mathrm{GW}\,/\,\mathrm{Hz})$",
    memory("lg_strain"): r"$\lg h_\mathrm{mem}$",
    memory("epoch"): r"$t_\mathrm{mem}\ (\mathrm{MJD})$",
    memory("polarization_angle"): r"$\psi_\mathrm{mem}\ (\mathrm{rad})$",
    memory("right_ascension"): r"$\alpha_\mathrm{mem}\ (\mathrm{rad})$",
    memory("declination_sine"): r"$\sin\delta_\mathrm{mem}$",
}


def is_array_signal(name: str) -> bool:
    """Whether a parameter belongs to a signal shared by the array (the common process, a binary, a memory step)."""
    return (name in (COMMON_AMPLITUDE, COMMON_INDEX, COMMON_BEND, COMMON_BEND_INDEX) or bin_of(name) is not None
            or name in {binary(q) for q in BINARY_QUANTITIES} or name in {memory(q) for q in MEMORY_QUANTITIES})


def label(name: str) -> str:
    """Axis label of a parameter: its quantity's math text, and the pulsar in brackets for a pulsar's own."""
    if bin_of(name) is not None:
        return rf"$\lg(\sigma^2_{{{bin_of(name)}}}\,/\,\mathrm{{s}}^2)$"
    if red_bin_of(name) is not None:
        return rf"$\lg(\sigma^2_{{\mathrm{{red}},{red_bin_of(name)}}}\,/\,\mathrm{{s}}^2)$ [{split(name)[1]}]"
    head, pulsar = split(name)
    text = LABELS.get(head, head)
    return f"{text} [{pulsar}]" if pulsar else text
