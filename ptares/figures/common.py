"""What every figure shares: component colours, axis scaling and the atomic save."""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from ptares.dataset import atomic_path  # noqa: E402

__all__ = ["save_figure"]


def save_figure(fig, path) -> Path:
    """Write ``fig`` as PNG to ``path`` atomically and close it."""
    path = Path(path)
    with atomic_path(path) as temporary:
        fig.savefig(temporary, format="png", dpi=130)
    plt.close(fig)
    return path


#: Colour of each injected component, shared by all figures.
COMPONENT_COLOURS = {"white": "#9a9a9a", "red": "#b8553a", "gwb": "#2a6f97", "binary": "#6a994e",
                     "dispersion": "#b03a7a", "scattering": "#c08a12"}


RESIDUAL_COLOUR = "#1b1b1b"


def display_scale(values) -> float:
    """A power of ten that brings ``values`` to order one, for axis labels."""
    largest = np.max(np.abs(values)) if np.size(values) else 0.0
    return 10.0 ** np.floor(np.log10(largest)) if largest > 0 else 1.0
