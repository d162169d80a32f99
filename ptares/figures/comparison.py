"""The figure of ``ptares compare``: the common process's posterior under each model.

One panel per common-process parameter: the uncorrelated model's marginal density
(its draws, equally weighted) as a grey filled curve and each correlated model's
(the same draws reweighted, or its direct fit's draws) as a line, both Gaussian kernel densities (scipy's, which
takes the weights and sets the bandwidth from their effective sample size); injected values as an orange rule.  The last
panel shows each pattern's ln Bayes factor against the uncorrelated model with its
standard error, and its effective sample size (on a symmetric log scale when the values
differ by more than 50); unreliable ones are drawn hollow and the title says so.  A
reweighted density with fewer than :data:`MIN_SHOWN` effective samples is not drawn, an
unreliable one is dashed.  When a fit whose draws a panel shows did not converge (the uncorrelated fit,
``content["uncorrelated_fit"]["converged"]``, on whose draws every reweighted density rests, or a pattern's
direct fit, ``content["patterns"][pattern]["direct_fit"]["converged"]``), each posterior panel is stamped
"not converged" in red above its top right corner, naming the fits, and their legend entries say so.
"""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib.ticker import MaxNLocator  # noqa: E402
from scipy.stats import gaussian_kde  # noqa: E402

from ptares.figures.common import INJECTED_COLOUR, STAMP_COLOUR  # noqa: E402
from ptares.figures.inference import NOT_CONVERGED, title_stamp  # noqa: E402
from ptares.inference import parameters  # noqa: E402

__all__ = ["comparison_figure"]

_UNCORRELATED = "#8d99ae"
_PATTERN_COLOURS = {"hellings-downs": "#2a6f97", "monopole": "#6a4c93", "dipole": "#2d6a4f"}

#: Fewest effective samples for which a reweighted density is drawn.
MIN_SHOWN = 10


def unconverged_fits(content: dict) -> list:
    """The fits drawn by :func:`comparison_figure` that say they did not converge: ``"uncorrelated"`` and the
    patterns fitted directly (a fit that does not say is taken as converged)."""
    fits = []
    if (content.get("uncorrelated_fit") or {}).get("converged") is False:
        fits.append("uncorrelated")
    for pattern, entry in content.get("patterns", {}).items():
        if entry.get("method") == "bridge" and (entry.get("direct_fit") or {}).get("converged") is False:
            fits.append(pattern)
    return fits


def comparison_figure(comparison, names, injected: dict):
    """Posteriors of the common-process parameters under each model, and the Bayes factors
    (``comparison``: a :class:`ptares.campaign.comparison.Comparison`); see the module's description."""
    content, draws = comparison.content, comparison.draws
    unconverged = unconverged_fits(content)
    shown = [i for i, n in enumerate(names) if n in (parameters.COMMON_AMPLITUDE, parameters.COMMON_INDEX)] or [0]
    fig, axes = plt.subplots(1, len(shown) + 1, figsize=(4.2 * (len(shown) + 1), 3.6), constrained_layout=True)
    for ax, i in zip(axes, shown):
        values = draws[:, i]
        low, high = values.min(), values.max()
        for own in comparison.direct.values():
            low, high = min(low, own[:, i].min()), max(high, own[:, i].max())
        grid = np.linspace(low, high, 300)
        ax.fill_between(grid, gaussian_kde(values)(grid), color=_UNCORRELATED, alpha=0.45, lw=0,
                        label="uncorrelated" + (" (not converged)" if "uncorrelated" in unconverged else ""))
        for pattern, entry in content["patterns"].items():
            direct = entry["method"] == "bridge"
            effective = len(comparison.direct[pattern]) if direct else entry["effective_samples"]
            if effective < MIN_SHOWN:  # a density of a few draws is a spike, not a posterior
                ax.plot([], [], color=_PATTERN_COLOURS[pattern], lw=1.8, ls=":",
                        label=f"{pattern} (not drawn: {effective:.0f} effective samples)")
                continue
            own, weights = comparison.posterior_draws(pattern)
            how = "fitted" if direct else "reweighted"
            label = f"{pattern}, {how}" if entry["reliable"] else f"{pattern}, {how} (unreliable)"
            if pattern in unconverged:
                label += ", not converged"
            ax.plot(grid, gaussian_kde(own[:, i], weights=weights)(grid), color=_PATTERN_COLOURS[pattern], lw=1.8,
                    ls="-" if entry["reliable"] else "--", label=label)
        ax.xaxis.set_major_locator(MaxNLocator(4))
        if names[i] in injected:
            ax.axvline(injected[names[i]], color=INJECTED_COLOUR, lw=1.2, label="injected")
        ax.set_xlabel(parameters.label(names[i]))
        ax.set_yticks([])
        ax.set_ylabel("posterior density")
        if unconverged:
            fits = " and ".join(unconverged)
            title_stamp(ax, f"{NOT_CONVERGED}: {fits} fit{'s' if len(unconverged) > 1 else ''}", fontsize=9, linewidth=1.4)
    axes[0].legend(frameon=False, fontsize=7, loc="upper left")
    axes[0].set_ylim(0.0, axes[0].get_ylim()[1] * 1.6)  # room for the legend above the curves

    ax = axes[-1]
    patterns = content["patterns"]
    for k, (pattern, entry) in enumerate(patterns.items()):
        colour = _PATTERN_COLOURS[pattern]
        ax.errorbar(k, entry["ln_bayes_factor"], yerr=entry["ln_bayes_factor_error"], fmt="o", ms=8, capsize=4,
                    color=colour, mfc=colour if entry["reliable"] else "white")
        ax.annotate(f"{entry['effective_samples']:.0f} eff.", (k, entry["ln_bayes_factor"]), xytext=(8, -3),
                    textcoords="offset points", fontsize=8, color=colour)
    ax.axhline(0.0, color="0.5", lw=0.8)
    values = [abs(e["ln_bayes_factor"]) for e in patterns.values()]
    if max(values) > 50.0:  # values of very different size: linear near zero, logarithmic beyond
        ax.set_yscale("symlog", linthresh=10.0)
    ax.margins(y=0.12)
    ax.set_xticks(range(len(patterns)), list(patterns), fontsize=8)
    ax.set_xlim(-0.6, len(patterns) - 0.4)
    ax.set_ylabel("ln Bayes factor against uncorrelated")
    hd = patterns["hellings-downs"]
    how = (f"bridge sampling, {hd['effective_samples']:.0f} effective draws on its thinner side"
           if hd["method"] == "bridge" else f"reweighting, {hd['effective_samples']:.0f} effective of {content['draws']} draws")
    title = (f"Hellings\u2013Downs against uncorrelated: ln B = {hd['ln_bayes_factor']:.2f} \u00b1 "
             f"{hd['ln_bayes_factor_error']:.2g} ({how})")
    if not content["reliable"]:
        title += "\nUNRELIABLE: see the warning in comparison.json"
    fig.suptitle(title, fontsize=10, color="black" if content["reliable"] else STAMP_COLOUR)
    return fig
