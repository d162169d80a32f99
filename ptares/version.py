"""The installed package's version, and the names that changed before the first release.

Files and configs written with the earlier names are refused with a hint (never read
with defaults in place of the renamed values): :data:`RENAMED` is the one list of them.
"""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("ptares")
except PackageNotFoundError:  # pragma: no cover - running from a source tree
    __version__ = "0.0.0+unknown"

#: Words of config keys, dataset attributes and table columns renamed before the first
#: release, with their new words: a name made with an earlier word, alone or joined to
#: other words by ``_``, is refused, naming the name its new word makes.
RENAMED_WORDS = {
    "components": ("harmonics", "the number of Fourier frequencies"),
    "gamma": ("spectral_index", "the spectral index"),
    "evolve": ("frequency_evolution", "radiation-reaction frequency evolution"),
    "cw": ("binary", "the continuous-wave key"),
}


def renamed(name: str):
    """``(new name, what it is)`` for a name made with an earlier word, else None."""
    words = str(name).split("_")
    earlier = [w for w in words if w in RENAMED_WORDS]
    if not earlier:
        return None
    return "_".join(RENAMED_WORDS[w][0] if w in RENAMED_WORDS else w for w in words), RENAMED_WORDS[earlier[0]][1]


def earlier_names(names, known=None) -> str:
    """A note on the first of ``names`` made with an earlier word (whose new name is in ``known``,
    when given), naming its replacement; "" if there is none."""
    for name in names:
        hit = renamed(name)
        if hit and (known is None or hit[0] in known):
            return f"'{name}' is now '{hit[0]}'"
    return ""
