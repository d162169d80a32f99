"""The Gaussian likelihood of timing residuals, with the timing model marginalised.

Model (PHYSICS.md, "Likelihood"; van Haasteren & Vallisneri 2014; Lentati et al. 2013):
``r = M eps + F a + s(theta) + n`` with white noise ``n ~ N(0, N)``, Fourier
coefficients ``a ~ N(0, Phi)`` of the red and common processes, a deterministic
continuous wave ``s``, and a flat prior on the timing-model offsets ``eps``.

Marginalising ``eps`` first, each pulsar has
``N'^-1 = N^-1 - N^-1 M (M^T N^-1 M)^-1 M^T N^-1``; then with
``d = F^T N'^-1 r`` and ``Sigma = F^T N'^-1 F + Phi^-1`` (Woodbury),
``ln L = -1/2 [r^T N'^-1 r - d^T Sigma^-1 d] - 1/2 [ln|N| + ln|M^T N^-1 M| - ln|M^T M|
+ ln|Phi| + ln|Sigma|] - (n - m)/2 ln 2 pi``.
This equals the Gaussian density of the residuals projected onto the complement
of the timing model (``G^T r`` with orthonormal ``G``), which is what the tests
compare it with.  With an uncorrelated common process ``Phi`` is diagonal per
pulsar; with Hellings–Downs correlations it couples pulsars but only at the
same frequency, so ``Phi^-1`` is one small P x P inverse per frequency and the
cost is one Cholesky factorisation of the (P 2K) x (P 2K) matrix ``Sigma``.
What does not depend on the parameters is computed once.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg

from ptares.errors import InputError
from ptares.limits import MEMORY_LIMIT
from ptares.physics.patterns import correlation_matrix
from ptares.physics.spectra import coefficient_variance, fourier_basis

__all__ = ["Likelihood", "NotPositiveDefinite"]

_LOG_2PI = np.log(2.0 * np.pi)


class NotPositiveDefinite(ArithmeticError):
    """A covariance met during a likelihood call was not positive definite."""


@dataclass
class _Pulsar:
    residuals: np.ndarray
    errors: np.ndarray
    design: np.ndarray
    basis: np.ndarray  #: (n, 2 Kb)
    times: np.ndarray  #: s from the dataset's start
    log_det_mtm: float


class Likelihood:
    """Log-likelihood of a dataset for given noise, common-process and signal parameters.

    Parameters
    ----------
    dataset : :class:`ptares.dataset.Dataset`
    harmonics : frequencies of the common process (k/T, k = 1..harmonics).
    red_harmonics : frequencies of each pulsar's red noise (0: no red noise).
    correlated : True for a Hellings–Downs common process, False for an uncorrelated one.

    :meth:`__call__` takes per-pulsar arrays ``white_scale``, ``white_quadrature`` (s),
    ``red_amplitude``, ``red_spectral_index``, the common ``amplitude`` and ``gamma``, and an
    optional ``signal`` (list of per-pulsar residuals, s) subtracted first.
    """

    def __init__(self, dataset, harmonics: int, red_harmonics: int, correlated: bool):
        self.span = dataset.span
        self.harmonics = int(harmonics)
        self.red_harmonics = int(red_harmonics)
        self.size = 2 * max(self.harmonics, self.red_harmonics)
        self.correlated = bool(correlated)
        core = (len(dataset.pulsars) * self.size) ** 2 * 8 if correlated else len(dataset.pulsars) * self.size**2 * 8
        if core > MEMORY_LIMIT:
            raise InputError(f"{self.size // 2} frequencies for {len(dataset.pulsars)} pulsars need {core / 1e9:.1f} GB; "
                             "use fewer", "fit.harmonics")
        self.pulsars = []
        for p in dataset.pulsars:
            times = (p.mjd - dataset.start_mjd) * 86400.0
            design = p.design_matrix
            if design.shape[1] and np.linalg.matrix_rank(design) < design.shape[1]:
                raise InputError("the timing-model design matrix is rank-deficient (repeated or dependent columns)",
                                 f"dataset pulsar {p.name}")
            self.pulsars.append(
                _Pulsar(
                    residuals=p.residuals,
                    errors=p.errors,
                    design=design,
                    basis=fourier_basis(times, self.span, self.size // 2),
                    times=times,
                    log_det_mtm=float(np.linalg.slogdet(design.T @ design)[1]) if design.shape[1] else 0.0,
                )
            )
        positions = np.array([p.position for p in dataset.pulsars])
        self.gamma_matrix = correlation_matrix(positions, "hellings-downs")
        self._white_cache = {}

    # --- pieces ---------------------------------------------------------------
    def _projected(self, index: int, scale: float, quadrature: float, signal=None):
        """``F^T N'^-1 F``, ``F^T N'^-1 r``, ``r^T N'^-1 r`` and the white part of ln det (cached by white noise)."""
        key = (index, float(scale), float(quadrature))
        cached = self._white_cache.get(key) if signal is None else None
        if cached is not None:
            return cached
        p = self.pulsars[index]
        weights = 1.0 / ((scale * p.errors) ** 2 + quadrature**2)
        r = p.residuals if signal is None else p.residuals - signal
        F, M = p.basis, p.design
        FN = F.T * weights
        FNF = FN @ F
        FNr = FN @ r
        rNr = float(r @ (weights * r))
        log_det = -float(np.sum(np.log(weights)))
        if M.shape[1]:
            MN = M.T * weights
            MNM = MN @ M
            try:
                factor = scipy.linalg.cho_factor(MNM)
            except np.linalg.LinAlgError:
                raise NotPositiveDefinite(f"M^T N^-1 M of pulsar {index} is not positive definite (degenerate timing model?)") from None
            MNF = MN @ F
            MNr = MN @ r
            FNF = FNF - MNF.T @ scipy.linalg.cho_solve(factor, MNF)
            FNr = FNr - MNF.T @ scipy.linalg.cho_solve(factor, MNr)
            rNr = rNr - float(MNr @ scipy.linalg.cho_solve(factor, MNr))
            log_det += 2.0 * float(np.sum(np.log(np.diag(factor[0])))) - p.log_det_mtm
        result = (FNF, FNr, rNr, log_det, r.size - M.shape[1])
        if signal is None:
            if len(self._white_cache) > 4 * len(self.pulsars):
                self._white_cache.clear()
            self._white_cache[key] = result
        return result

    def _spectra(self, red_amplitude, red_spectral_index, amplitude, gamma):
        """Per-pulsar red variances (P, 2Kb) and the common variances (2Kb,), zero beyond each basis."""
        red = np.zeros((len(self.pulsars), self.size))
        if self.red_harmonics:
            for a in range(len(self.pulsars)):
                if red_amplitude[a] > 0:
                    red[a, : 2 * self.red_harmonics] = np.repeat(
                        coefficient_variance(self.span, self.red_harmonics, red_amplitude[a], red_spectral_index[a]), 2
                    )
        common = np.zeros(self.size)
        if amplitude > 0 and self.harmonics:
            common[: 2 * self.harmonics] = np.repeat(coefficient_variance(self.span, self.harmonics, amplitude, gamma), 2)
        return red, common

    # --- the likelihood -------------------------------------------------------
    def __call__(self, white_scale, white_quadrature, red_amplitude, red_spectral_index, amplitude=0.0, gamma=13.0 / 3.0,
                 signal=None) -> float:
        pieces = [
            self._projected(a, white_scale[a], white_quadrature[a], None if signal is None else signal[a])
            for a in range(len(self.pulsars))
        ]
        red, common = self._spectra(red_amplitude, red_spectral_index, amplitude, gamma)
        constant = sum(-0.5 * (piece[3] + piece[4] * _LOG_2PI) - 0.5 * piece[2] for piece in pieces)
        if self.correlated and amplitude > 0:
            return constant + self._correlated(pieces, red, common)
        prior = red + common[None, :]
        kept = prior > 0
        if np.all(kept == kept[0]):  # the usual case: one batched factorisation for all pulsars
            return constant + self._uncorrelated_batch(pieces, prior[:, kept[0]], kept[0])
        return constant + sum(self._uncorrelated(piece, prior[a]) for a, piece in enumerate(pieces))

    @staticmethod
    def _uncorrelated_batch(pieces, prior, kept):
        if not np.any(kept):
            return 0.0
        sigma = np.stack([piece[0][np.ix_(kept, kept)] for piece in pieces])
        d = np.stack([piece[1][kept] for piece in pieces])
        index = np.arange(prior.shape[1])
        sigma[:, index, index] += 1.0 / prior
        try:
            lower = np.linalg.cholesky(sigma)
        except np.linalg.LinAlgError:
            raise NotPositiveDefinite("Sigma = F^T N^-1 F + Phi^-1 of a pulsar is not positive definite") from None
        whitened = np.linalg.solve(lower, d[..., None])[..., 0]
        return 0.5 * float(np.sum(whitened**2)) - 0.5 * (
            float(np.sum(np.log(prior))) + 2.0 * float(np.sum(np.log(np.diagonal(lower, axis1=1, axis2=2))))
        )

    @staticmethod
    def _uncorrelated(piece, prior):
        FNF, FNr = piece[0], piece[1]
        kept = prior > 0
        if not np.any(kept):
            return 0.0
        sigma = FNF[np.ix_(kept, kept)].copy()
        sigma[np.diag_indices_from(sigma)] += 1.0 / prior[kept]
        try:
            factor = scipy.linalg.cho_factor(sigma, lower=True, check_finite=False)
        except np.linalg.LinAlgError:
            raise NotPositiveDefinite("Sigma = F^T N^-1 F + Phi^-1 of a pulsar is not positive definite") from None
        d = FNr[kept]
        return 0.5 * float(d @ scipy.linalg.cho_solve(factor, d, check_finite=False)) - 0.5 * (
            float(np.sum(np.log(prior[kept]))) + 2.0 * float(np.sum(np.log(np.diag(factor[0]))))
        )

    def _correlated(self, pieces, red, common):
        P = len(pieces)
        columns = 2 * max(self.harmonics, self.red_harmonics if np.any(red) else 0)
        sigma = np.zeros((P * columns, P * columns))
        d = np.empty(P * columns)
        for a, piece in enumerate(pieces):
            block = slice(a * columns, (a + 1) * columns)
            sigma[block, block] = piece[0][:columns, :columns]
            d[block] = piece[1][:columns]
        variances = red[:, :columns] + common[None, :columns]  # (P, columns)
        kept = variances > 0
        if kept.all():  # the usual case: all P x P blocks at once
            phi = self.gamma_matrix[None, :, :] * common[:columns, None, None]
            phi[:, np.arange(P), np.arange(P)] += red[:, :columns].T
            try:
                lower = np.linalg.cholesky(phi)
            except np.linalg.LinAlgError:
                raise NotPositiveDefinite("Phi of the correlated model is not positive definite") from None
            log_det_phi = 2.0 * float(np.sum(np.log(np.diagonal(lower, axis1=1, axis2=2))))
            inverse = np.linalg.inv(phi)
            rows = np.arange(P)[None, :] * columns + np.arange(columns)[:, None]  # (columns, P)
            sigma[rows[:, :, None], rows[:, None, :]] += inverse
        else:
            log_det_phi = 0.0
            for j in range(columns):
                present = np.flatnonzero(kept[:, j])
                if present.size == 0:
                    continue
                phi = self.gamma_matrix[np.ix_(present, present)] * common[j] + np.diag(red[present, j])
                try:
                    factor = scipy.linalg.cho_factor(phi, lower=True, check_finite=False)
                except np.linalg.LinAlgError:
                    raise NotPositiveDefinite(f"Phi at basis column {j} is not positive definite") from None
                log_det_phi += 2.0 * float(np.sum(np.log(np.diag(factor[0]))))
                rows = present * columns + j
                sigma[np.ix_(rows, rows)] += scipy.linalg.cho_solve(factor, np.eye(present.size), check_finite=False)
            keep = kept.ravel()
            sigma, d = sigma[np.ix_(keep, keep)], d[keep]
        try:
            factor = scipy.linalg.cho_factor(sigma, lower=True, overwrite_a=True, check_finite=False)
        except np.linalg.LinAlgError:
            raise NotPositiveDefinite("Sigma of the correlated model is not positive definite") from None
        return 0.5 * float(d @ scipy.linalg.cho_solve(factor, d, check_finite=False)) - 0.5 * (
            log_det_phi + 2.0 * float(np.sum(np.log(np.diag(factor[0]))))
        )
