"""The timing-model fit: the part of the residuals a timing solution absorbs.

A pulsar's timing model is linearised about its best solution, so errors in
its parameters add ``M eps`` to the residuals for a design matrix ``M``.
Columns, with ``tau = (mjd - mid) / half_span`` over the pulsar's own TOAs:

* ``offset``: 1 (arbitrary phase);
* ``spin_frequency``: ``tau`` (error in the spin frequency);
* ``spin_down``: ``tau^2`` (error in its derivative);
* ``yearly``: ``sin`` and ``cos`` of ``2 pi mjd / 365.25`` (a position error).

The columns are dimensionless and of order one so the fit is well conditioned;
only their span matters.  The fit is weighted least squares with the TOA
uncertainties, as in timing software (common practice).
"""

from __future__ import annotations

import numpy as np

__all__ = ["design_matrix", "fit_timing_model", "column_names"]


def column_names(terms) -> list[str]:
    """Names of the design-matrix columns for ``terms``, in order."""
    names = []
    for term in terms:
        names.extend(["yearly_sin", "yearly_cos"] if term == "yearly" else [term])
    return names


def design_matrix(mjd, terms) -> np.ndarray:
    """Design matrix of shape ``(len(mjd), columns)`` for the timing-model ``terms``."""
    mjd = np.asarray(mjd, dtype=float)
    mid = 0.5 * (mjd.min() + mjd.max())
    half = max(0.5 * (mjd.max() - mjd.min()), 1.0)
    tau = (mjd - mid) / half
    columns = []
    for term in terms:
        if term == "offset":
            columns.append(np.ones_like(tau))
        elif term == "spin_frequency":
            columns.append(tau)
        elif term == "spin_down":
            columns.append(tau**2)
        elif term == "yearly":
            phase = 2.0 * np.pi * mjd / 365.25
            columns.extend([np.sin(phase), np.cos(phase)])
        else:
            raise ValueError(f"unknown timing-model term {term!r}")
    return np.column_stack(columns) if columns else np.zeros((mjd.size, 0))


def fit_timing_model(residuals, design, uncertainties):
    """Weighted least-squares fit of ``design`` to ``residuals``.

    Returns ``(post_fit_residuals, coefficients)``: the residuals with the
    best-fitting combination of the columns removed, and that combination.
    """
    residuals = np.asarray(residuals, dtype=float)
    design = np.asarray(design, dtype=float)
    if design.shape[1] == 0:
        return residuals.copy(), np.zeros(0)
    weights = 1.0 / np.asarray(uncertainties, dtype=float)
    coefficients, *_ = np.linalg.lstsq(design * weights[:, None], residuals * weights, rcond=None)
    return residuals - design @ coefficients, coefficients
