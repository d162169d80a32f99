"""Signal and noise components, a plug-in family.

Each module defines one component (see :mod:`ptares.simulation.signals.base` for the
protocol) and a ``from_config(config, pulsars)`` builder (``pulsars``: the resolved
:class:`~ptares.simulation.array.PulsarSetup` list) that returns it, or ``None``
when the config does not ask for it.  Adding a kind means adding a module and
one line to :data:`BUILDERS`.
"""

from __future__ import annotations

from ptares.simulation.signals import background, continuous, red, white
from ptares.simulation.signals.base import Component, Context

__all__ = ["BUILDERS", "build_components", "Component", "Context"]

#: Component builders in injection order, keyed by the dataset name of what they inject.
BUILDERS = {
    "white": white.from_config,
    "red": red.from_config,
    "gwb": background.from_config,
    "binary": continuous.from_config,
}


def build_components(config, pulsars) -> list:
    """The components ``config`` asks for, for the resolved ``pulsars``."""
    built = (build(config, pulsars) for build in BUILDERS.values())
    return [component for component in built if component is not None]
