"""Signal and noise components, a plug-in family.

Each module defines one component (see :mod:`ptares.simulation.signals.base` for the
protocol) and a ``from_config(config, pulsars)`` builder (``pulsars``: the resolved
:class:`~ptares.simulation.array.PulsarSetup` list) that returns it, or ``None``
when the config does not ask for it.  Adding a kind means adding a module and
one line to :data:`BUILDERS`.
"""

from __future__ import annotations

from ptares.simulation.signals import background, chromatic, continuous, red, waves, white
from ptares.simulation.signals.base import Component, Context

__all__ = ["BUILDERS", "build_components", "Component", "Context"]

#: Component builders in injection order, keyed by the dataset name of what they inject (the chromatic
#: builder's components are named by their process, "dispersion" and "scattering").
BUILDERS = {
    "white": white.from_config,
    "jitter": white.jitter_from_config,
    "red": red.from_config,
    "chromatic": chromatic.from_config,
    "gwb": background.from_config,
    "binary": continuous.from_config,
    "wave": waves.from_config,
}


def build_components(config, pulsars) -> list:
    """The components ``config`` asks for, for the resolved ``pulsars``."""
    components = []
    for build in BUILDERS.values():
        built = build(config, pulsars)  # a component, None, or a list of components (one per process)
        components += built if isinstance(built, list) else [] if built is None else [built]
    return components
