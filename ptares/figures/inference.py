"""Figures of a fit: marginal posteriors (corner) and walker traces."""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from ptares.figures.common import COMPONENT_COLOURS

__all__ = ["corner_figure", "trace_figure"]


MAX_CORNER = 8  #: parameters shown in corner and trace figures


def _shown(names):
    """Common-process and continuous-wave parameters first, then the rest, at most :data:`MAX_CORNER`."""
    order = sorted(range(len(names)), key=lambda i: (not names[i].startswith(("gwb_", "cw_")), i))
    return order[:MAX_CORNER]


def corner_figure(samples, names, injected=None):
    """One- and two-dimensional marginal posteriors; injected values as lines where known.

    ``samples`` has shape (draws, parameters).  Large models show the common and
    continuous-wave parameters first, at most :data:`MAX_CORNER` of them.
    """
    injected = injected or {}
    shown = _shown(names)
    n = len(shown)
    fig, axes = plt.subplots(n, n, figsize=(1.9 * n + 1.0, 1.9 * n + 1.0), squeeze=False)
    for row, i in enumerate(shown):
        for column, j in enumerate(shown):
            ax = axes[row, column]
            if column > row:
                ax.set_visible(False)
                continue
            if row == column:
                ax.hist(samples[:, i], bins=40, color=COMPONENT_COLOURS["gwb"], histtype="stepfilled", alpha=0.6)
                for q in np.percentile(samples[:, i], [15.865, 50, 84.135]):
                    ax.axvline(q, color="k", lw=0.7, ls="--")
                if names[i] in injected:
                    ax.axvline(injected[names[i]], color="#c1121f", lw=1.5)
                ax.set_yticks([])
            else:
                ax.hist2d(samples[:, j], samples[:, i], bins=40, cmap="Blues")
                if names[i] in injected and names[j] in injected:
                    ax.plot(injected[names[j]], injected[names[i]], "s", color="#c1121f", ms=5)
            if row == n - 1:
                ax.set_xlabel(names[j], fontsize=7)
            else:
                ax.set_xticklabels([])
            if column == 0 and row > 0:
                ax.set_ylabel(names[i], fontsize=7)
            elif column > 0:
                ax.set_yticklabels([])
            ax.tick_params(labelsize=6)
    title = "Posterior (red: injected; dashed: 16, 50, 84%)"
    if len(names) > n:
        title += f" - {n} of {len(names)} parameters"
    fig.suptitle(title, fontsize=9)
    fig.tight_layout()
    return fig


def trace_figure(chain, names, burn: int = 0, injected=None):
    """Walker traces of the shown parameters; the burn-in is shaded."""
    injected = injected or {}
    shown = _shown(names)
    fig, axes = plt.subplots(len(shown), 1, figsize=(8.0, 1.3 * len(shown) + 0.8), sharex=True, squeeze=False)
    steps = np.arange(chain.shape[0])
    for ax, i in zip(axes[:, 0], shown):
        ax.axvspan(0, burn, color="#e9c46a", alpha=0.25, lw=0)
        ax.plot(steps, chain[:, :, i], color=COMPONENT_COLOURS["gwb"], alpha=max(0.08, 2.0 / chain.shape[1]), lw=0.6)
        if names[i] in injected:
            ax.axhline(injected[names[i]], color="#c1121f", lw=1.2)
        ax.set_ylabel(names[i], fontsize=7)
        ax.tick_params(labelsize=7)
    axes[-1, 0].set_xlabel("step")
    axes[0, 0].set_title(f"Walker traces ({chain.shape[1]} walkers; shaded: burn-in; red: injected)", fontsize=9)
    fig.tight_layout()
    return fig
