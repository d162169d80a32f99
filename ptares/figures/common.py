"""What every figure shares: component colours, axis scaling and the atomic save in each chosen format."""

from __future__ import annotations

import contextlib
import contextvars
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from ptares.dataset import atomic_path  # noqa: E402

__all__ = ["EXTRA_FORMATS", "extra_formats", "save_figure"]

#: Vector formats a figure may be written in besides PNG.
EXTRA_FORMATS = ("pdf", "svg")
_EXTRA = contextvars.ContextVar("ptares_extra_figure_formats", default=())


@contextlib.contextmanager
def extra_formats(formats):
    """Within this block :func:`save_figure` also writes each of ``formats`` (a sequence of
    :data:`EXTRA_FORMATS`) beside every PNG."""
    token = _EXTRA.set(tuple(dict.fromkeys(formats)))
    try:
        yield
    finally:
        _EXTRA.reset(token)


def save_figure(fig, path) -> Path:
    """Write ``fig`` as PNG to ``path`` atomically (and as PDF or SVG beside it, the same name with that suffix,
    inside :func:`extra_formats`) and close it; returns the PNG's path."""
    path = Path(path)
    try:
        for kind in ("png", *_EXTRA.get()):
            with atomic_path(path.with_suffix(f".{kind}")) as temporary:
                fig.savefig(temporary, format=kind, dpi=130, **({"metadata": {"Date": None}} if kind == "svg" else {}))
    finally:
        plt.close(fig)
    return path


#: Colour of each injected component, shared by all figures.
COMPONENT_COLOURS = {"white": "#9a9a9a", "red": "#b8553a", "gwb": "#2a6f97", "binary": "#6a994e",
                     "dispersion": "#b03a7a", "scattering": "#c08a12", "wave": "#7b2cbf"}


RESIDUAL_COLOUR = "#1b1b1b"
#: Injected values and curves that have no component colour, in every figure.
INJECTED_COLOUR = "#e36414"
#: Warnings drawn on a figure ("not converged", an unreliable result) and detection thresholds.
STAMP_COLOUR = "#c1121f"


def display_scale(values) -> float:
    """A power of ten that brings ``values`` to order one, for axis labels."""
    largest = np.max(np.abs(values)) if np.size(values) else 0.0
    return 10.0 ** np.floor(np.log10(largest)) if largest > 0 else 1.0


def times_power(scale: float) -> str:
    """`` (x10^k)`` in math text for an axis label whose values are divided by ``scale`` = 10^k ("" for 1)."""
    exponent = int(round(np.log10(scale))) if scale > 0 else 0
    return "" if exponent == 0 else rf" ($\times 10^{{{exponent}}}$)"
