"""The installed package's version, and the names that changed before the first release.

Files and configs written with the earlier names are refused with a hint (never read
with defaults in place of the renamed values): :data:`RENAMED` is the one list of them.
"""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("ptares")
except PackageNotFoundError:  # pragma: no cover - running from a source tree
    __version__ = "0.0.0+unknown"

#: Config keys, dataset attributes and table columns renamed before the first release:
#: old name -> (new name, what it is).
RENAMED = {
    "components": ("harmonics", "the number of Fourier frequencies"),
    "red_components": ("red_harmonics", "the number of red-noise Fourier frequencies"),
    "common_components": ("common_harmonics", "the number of common-process Fourier frequencies"),
    "gamma": ("spectral_index", "the spectral index"),
    "red_gamma": ("red_spectral_index", "the red-noise spectral index"),
    "common_gamma": ("common_spectral_index", "the common-process spectral index"),
    "evolve": ("frequency_evolution", "radiation-reaction frequency evolution"),
    "cw": ("binary", "the continuous-wave key"),
    "cw_free": ("binary_free", "the list of free continuous-wave quantities"),
    "cw_values": ("binary_values", "the table of fixed continuous-wave quantities"),
    "cw_pulsar_term": ("binary_pulsar_term", "the continuous-wave fit's pulsar-term switch"),
}


def earlier_names(names) -> str:
    """A note naming the first of ``names`` that is an earlier name, with its replacement; "" if none."""
    for name in names:
        if name in RENAMED:
            new, _ = RENAMED[name]
            return f"'{name}' is now '{new}'"
    return ""
