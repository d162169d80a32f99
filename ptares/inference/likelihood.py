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
compare it with.  Columns whose prior variance is zero drop out of ``a``.

With an uncorrelated common process ``Phi`` is diagonal per pulsar, and ``Sigma`` is one
small block per pulsar, factorised for all pulsars at once.  With Hellings–Downs
correlations ``Phi`` couples pulsars, but only on the common process's columns ``c``
(its 2 Kc lowest-frequency columns) and only at equal frequency, so ``Phi_c^-1`` is one
small P x P inverse per frequency.  The columns ``r`` that belong to a pulsar's red
noise alone (frequencies above the common process's) are eliminated pulsar by pulsar
first, by a Schur complement (van Haasteren & Vallisneri 2014): with
``D_a = (F^T N'^-1 F)_rr + Phi_rr^-1``,
``S = blockdiag((F^T N'^-1 F)_cc - (F^T N'^-1 F)_cr D_a^-1 (F^T N'^-1 F)_rc) + Phi_c^-1``
and ``d'_c = d_c - (F^T N'^-1 F)_cr D_a^-1 d_r``,
``ln|Sigma| = sum_a ln|D_a| + ln|S|`` and
``d^T Sigma^-1 d = sum_a d_r^T D_a^-1 d_r + d'^T S^-1 d'``.  The cost is one Cholesky
factorisation of the (P 2Kc) x (P 2Kc) matrix ``S``, whatever the number of red-noise
frequencies, plus small per-pulsar ones.  The same factors give an exact draw of the
coefficients from ``N(Sigma^-1 d, Sigma^-1)``: the common columns from their marginal
``N(S^-1 d', S^-1)``, then each pulsar's own columns given them,
``N(D_a^-1 (d_r - (F^T N'^-1 F)_rc a_c), D_a^-1)``.
What does not depend on the parameters is computed once.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np
from scipy.linalg import lapack as _lapack

from ptares.dataset import jitter_weights
from ptares.errors import InputError
from ptares.limits import MEMORY_LIMIT
from ptares.physics.patterns import correlation_matrix
from ptares.physics.spectra import chromatic_scale, coefficient_variance, fourier_basis, power_law_factors

__all__ = ["Likelihood", "NotPositiveDefinite", "Projected", "PATTERN_FLOOR"]

_LOG_2PI = np.log(2.0 * np.pi)

#: Added to the diagonal of the (singular) monopole and dipole correlation matrices.
PATTERN_FLOOR = 1e-4


class Projected(NamedTuple):
    """One pulsar's data seen through its white noise, with the timing model projected out."""

    FNF: np.ndarray  #: F^T N'^-1 F
    FNr: np.ndarray  #: F^T N'^-1 r
    rNr: float  #: r^T N'^-1 r
    log_det: float  #: ln|N| + ln|M^T N^-1 M| - ln|M^T M|
    dof: int  #: TOAs less timing-model parameters


class NotPositiveDefinite(ArithmeticError):
    """A covariance met during a likelihood call was not positive definite."""


def _key(value):
    """A white-noise value (a number or an array) as a cache key."""
    return float(value) if np.ndim(value) == 0 else np.asarray(value, dtype=float).tobytes()


@dataclass
class _Pulsar:
    residuals: np.ndarray
    errors: np.ndarray
    design: np.ndarray
    basis: np.ndarray  #: (n, 2 Kb)
    times: np.ndarray  #: s from the dataset's start
    log_det_mtm: float
    systems: list  #: names of the observing systems (empty when none are recorded)
    system_index: np.ndarray  #: (n,) each TOA's system, an index into ``systems`` (0 when none)
    epochs: np.ndarray  #: (n,) each TOA's epoch (:func:`ptares.dataset.epoch_indices`)
    epoch_system: np.ndarray  #: (epochs,) each epoch's system index
    chromatic_factors: list  #: per chromatic block, (1400 MHz / nu)^chi of each TOA
    _chromatic_widths: list  #: columns of each chromatic block (the last columns of the basis)

    def __post_init__(self):
        self._order = np.argsort(self.epochs, kind="stable")  # TOAs grouped by epoch
        self._starts = np.flatnonzero(np.diff(self.epochs[self._order], prepend=-1))  # every epoch has a TOA
        # Where every epoch's TOAs share one time and one design-matrix row (sub-bands of one observation) and
        # epochs hold two TOAs or more on average, each column of [F, M] is a function of the epoch, and each
        # chromatic column such a function times its TOA's factor: the products reduce to sums over epochs
        # (:meth:`gram`), at a cost in epochs, not TOAs.
        first = self._order[self._starts]
        rows = np.hstack([self.times[:, None], self.design])
        self.epoch_blocks = None
        if 2 * self._starts.size <= self.times.size and np.array_equal(rows, rows[first][self.epochs]):
            widths = [self.basis.shape[1] - sum(self._chromatic_widths)] + list(self._chromatic_widths)
            edges = np.cumsum([0] + widths)
            columns = self.basis.shape[1] + self.design.shape[1]
            achromatic = np.r_[edges[0]:edges[1], self.basis.shape[1]:columns]  # F and M: factor 1
            self.epoch_blocks = [(None, np.hstack([self.basis[first, edges[0]:edges[1]], self.design[first]]), achromatic)]
            for j, factor in enumerate(self.chromatic_factors):
                at_epoch = self.basis[first, edges[j + 1]:edges[j + 2]] / factor[first][:, None]
                self.epoch_blocks.append((factor, at_epoch, np.arange(edges[j + 1], edges[j + 2])))
            # where each column of [basis, design, r] sits in the block order of :meth:`gram`
            placed = np.concatenate([columns for _, _, columns in self.epoch_blocks] + [[columns]])
            self._layout = np.argsort(placed)

    def epoch_sums(self, values: np.ndarray) -> np.ndarray:
        """``U^T values``: the rows of ``values`` (n, k) summed over each epoch, (epochs, k)."""
        return np.add.reduceat(values[self._order], self._starts, axis=0)

    def gram(self, weights: np.ndarray, c: np.ndarray | None, r: np.ndarray) -> np.ndarray:
        """``X^T N^-1 X`` for ``X = [basis, design, r]`` with ``N^-1 = W - W U diag(c) U^T W`` (``c`` None: no
        jitter), from sums over epochs (:attr:`epoch_blocks`): a block of columns ``a_i G[e_i]`` against one of
        ``b_i H[e_i]`` is ``G^T diag(s) H`` with ``s_e = sum_(i in e) w a b - c_e (sum w a)(sum w b)``."""
        blocks = self.epoch_blocks
        count = len(blocks)
        factors = [np.ones_like(weights) if a is None else a for a, _, _ in blocks]
        pairs = [(j, k) for j in range(count) for k in range(j, count)]
        # one pass over the TOAs: sum over each epoch of w a_j, w a_j a_k, w r, w a_j r and w r^2 ... (E, terms)
        terms = ([weights * a for a in factors] + [weights * factors[j] * factors[k] for j, k in pairs]
                 + [weights * r * a for a in factors] + [weights * r])
        sums = self.epoch_sums(np.column_stack(terms))
        single, double = sums[:, :count], sums[:, count:count + len(pairs)]
        with_r, wr = sums[:, count + len(pairs):-1], sums[:, -1]
        edges = np.cumsum([0] + [G.shape[1] for _, G, _ in blocks])
        out = np.empty((edges[-1] + 1, edges[-1] + 1))  # in block order, r last
        for n, (j, k) in enumerate(pairs):
            weight = double[:, n] if c is None else double[:, n] - c * single[:, j] * single[:, k]
            product = blocks[j][1].T @ (blocks[k][1] * weight[:, None])
            out[edges[j]:edges[j + 1], edges[k]:edges[k + 1]] = product
            out[edges[k]:edges[k + 1], edges[j]:edges[j + 1]] = product.T
        for j in range(count):
            weight = with_r[:, j] if c is None else with_r[:, j] - c * single[:, j] * wr
            out[edges[j]:edges[j + 1], -1] = out[-1, edges[j]:edges[j + 1]] = blocks[j][1].T @ weight
        out[-1, -1] = float(r @ (weights * r)) - (0.0 if c is None else float(c @ wr**2))
        return out[np.ix_(self._layout, self._layout)]


@dataclass
class _OwnBlock:
    """Pulsars whose own (uncoupled) columns are the same, factorised together."""

    members: np.ndarray  #: (g,) pulsar indices
    columns: np.ndarray  #: (m,) basis columns
    lower: np.ndarray  #: (g, m, m) Cholesky factor L of D = (F^T N'^-1 F)_rr + Phi_rr^-1
    coupling: np.ndarray  #: (g, m, nc) L^-1 (F^T N'^-1 F)_rc
    whitened: np.ndarray  #: (g, m) L^-1 d_r


@dataclass
class _Factors:
    """What a likelihood value or a coefficient draw needs, for one set of parameters."""

    quadratic: float  #: d^T Sigma^-1 d
    log_det: float  #: ln|Phi| + ln|Sigma|, over the columns with nonzero prior variance
    blocks: list  #: of :class:`_OwnBlock`
    shared: np.ndarray  #: (nc,) columns of the correlated common process (empty without one)
    core: np.ndarray | None  #: Cholesky factor L_S of S, (nc P) x (nc P), lower triangle, Fortran order
    whitened: np.ndarray | None  #: L_S^-1 d' (nc P,), frequency-major like S


def _core_indices(pulsars: int, columns: int):
    """Flat positions, in the frequency-major (nc P) x (nc P) matrix S (row ``k P + a`` for column k
    of pulsar a), of the per-pulsar blocks (P, nc, nc) and of the per-column P x P couplings (nc, P, P).

    Frequency-major, each coupling is a dense diagonal block, which is quicker to fill."""
    width = pulsars * columns
    a = np.arange(pulsars)[:, None, None]
    i = np.arange(columns)[None, :, None]
    j = np.arange(columns)[None, None, :]
    blocks = ((i * pulsars + a) * width + j * pulsars + a).ravel()
    k = np.arange(columns)[:, None, None]
    a = np.arange(pulsars)[None, :, None]
    b = np.arange(pulsars)[None, None, :]
    couplings = ((k * pulsars + a) * width + k * pulsars + b).ravel()
    return blocks, couplings


def _groups(mask: np.ndarray):
    """Pulsars with identical column masks (P, columns), as (pulsar indices, columns) pairs."""
    if np.all(mask == mask[0]):
        return [(np.arange(mask.shape[0]), np.flatnonzero(mask[0]))]
    patterns, inverse = np.unique(mask, axis=0, return_inverse=True)
    inverse = inverse.ravel()
    return [(np.flatnonzero(inverse == g), np.flatnonzero(pattern)) for g, pattern in enumerate(patterns)]


def _as_slice(columns: np.ndarray):
    """A slice for consecutive indices (cheaper to take than a fancy index), else the indices."""
    if columns.size and columns[-1] - columns[0] + 1 == columns.size:
        return slice(int(columns[0]), int(columns[-1]) + 1)
    return columns


def _select(array: np.ndarray, members: np.ndarray, *axes: np.ndarray) -> np.ndarray:
    """``array[members]`` restricted, axis by axis, to the indices in ``axes``; may be a view of ``array``."""
    part = array if members.size == array.shape[0] else array[members]  # members are sorted and distinct
    for axis, indices in enumerate(axes, start=1):
        part = part[(slice(None),) * axis + (_as_slice(indices),)]
    return part


class Likelihood:
    """Log-likelihood of a dataset for given noise, common-process and signal parameters.

    Parameters
    ----------
    dataset : :class:`ptares.dataset.Dataset`
    harmonics : frequencies of the common process (k/T, k = 1..harmonics).
    red_harmonics : frequencies of each pulsar's red noise (0: no red noise).
    chromatic : chromatic processes, ``(name, harmonics, chromatic index)`` each (``"dispersion"``, 30, 2.0; the
        index one number or one per pulsar):
        columns of the basis scaled per TOA by ``(1400 MHz / nu)^chi`` (PHYSICS.md, "Radio frequency and
        chromatic noise"), after the achromatic ones, with their own power law per pulsar.  Every pulsar
        needs recorded radio frequencies.
    correlated : the common process's correlation pattern across pulsars: ``"hellings-downs"``
        (or True), ``"monopole"``, ``"dipole"``, or False / None for an uncorrelated one.
        A monopole or dipole pattern has a singular correlation matrix (rank 1 and 3), so
        :data:`PATTERN_FLOOR` times the identity is added to it: a share of the common
        power that is uncorrelated, too small to matter beside the noise.

    :meth:`__call__` takes per-pulsar ``white_scale``, ``white_quadrature`` (s) and optionally
    ``white_jitter`` (s; each entry one number or one per observing system of the pulsar, see
    :meth:`projected`),
    ``red_amplitude``, ``red_spectral_index``, the common ``amplitude`` and ``gamma``, and an
    optional ``signal`` (list of per-pulsar residuals, s) subtracted first, and ``chromatic``: per process
    name, (amplitudes (P,), spectral indices (P,)) (a process left out, or an amplitude 0, is absent);
    :meth:`draw_coefficients` takes the same and draws the Fourier coefficients given them.
    """

    def __init__(self, dataset, harmonics: int, red_harmonics: int, correlated, chromatic=()):
        self.span = dataset.span
        self.harmonics = int(harmonics)
        self.red_harmonics = int(red_harmonics)
        self.size = 2 * max(self.harmonics, self.red_harmonics)  #: achromatic columns (sine, cosine of k/T)
        count = len(dataset.pulsars)
        self.chromatic = tuple((str(name), int(k), np.broadcast_to(np.asarray(chi, dtype=float), (count,)))
                               for name, k, chi in chromatic)
        #: columns of each chromatic process, after the achromatic ones
        self.chromatic_columns = {}
        self.width = self.size  #: all columns of the basis
        for name, k, _ in self.chromatic:
            self.chromatic_columns[name] = slice(self.width, self.width + 2 * k)
            self.width += 2 * k
        self.pattern = "hellings-downs" if correlated is True else (correlated or None)
        self.correlated = self.pattern is not None
        # the per-pulsar F^T N'^-1 F, and for Hellings-Downs the dense core S over the common columns
        per_pulsar = count * self.width**2 * 8
        core = (count * 2 * self.harmonics) ** 2 * 8 if self.correlated else 0
        if max(core, per_pulsar) > MEMORY_LIMIT:
            if core >= per_pulsar:
                raise InputError(f"{self.harmonics} common-process frequencies correlated across {count} pulsars need "
                                 f"{core / 1e9:.1f} GB; use fewer", "fit.harmonics")
            raise InputError(f"{self.size // 2} frequencies for {count} pulsars need {per_pulsar / 1e9:.1f} GB; use fewer",
                             "fit.red_harmonics" if self.red_harmonics > self.harmonics else "fit.harmonics")
        self.pulsars = []
        for p in dataset.pulsars:
            times = (p.mjd - dataset.start_mjd) * 86400.0
            design = p.design_matrix
            if design.shape[1] and np.linalg.matrix_rank(design) < design.shape[1]:
                raise InputError("the timing-model design matrix is rank-deficient (repeated or dependent columns)",
                                 f"dataset pulsar {p.name}")
            basis = fourier_basis(times, self.span, self.size // 2)
            factors = []  # each chromatic block's factor per TOA, (1400 MHz / nu)^chi
            if self.chromatic:
                if p.frequency_mhz is None:
                    raise InputError("has no radio frequencies; chromatic noise cannot be modelled",
                                     f"dataset pulsar {p.name}")
                index = len(self.pulsars)
                factors = [chromatic_scale(p.frequency_mhz, chi[index]) for _, k, chi in self.chromatic]
                basis = np.hstack([basis] + [fourier_basis(times, self.span, k) * factor[:, None]
                                             for (_, k, _), factor in zip(self.chromatic, factors)])
            system_index = p.system_indices()
            epochs = p.epochs()
            epoch_system = np.zeros(int(epochs.max()) + 1, dtype=np.int64)
            epoch_system[epochs] = system_index
            self.pulsars.append(
                _Pulsar(
                    residuals=p.residuals,
                    errors=p.errors,
                    design=design,
                    basis=basis,
                    times=times,
                    log_det_mtm=float(np.linalg.slogdet(design.T @ design)[1]) if design.shape[1] else 0.0,
                    systems=p.systems,
                    system_index=system_index,
                    epochs=epochs,
                    epoch_system=epoch_system,
                    chromatic_factors=factors,
                    _chromatic_widths=[2 * k for _, k, _ in self.chromatic],
                )
            )
        positions = np.array([p.position for p in dataset.pulsars])
        self.gamma_matrix = correlation_matrix(positions, self.pattern or "hellings-downs")
        if self.pattern in ("monopole", "dipole"):
            self.gamma_matrix += PATTERN_FLOOR * np.eye(count)
        self._white_cache = {}
        self._unit_laws = {}  # harmonics -> power_law_factors(span, harmonics)
        # where S gets its pieces, for the usual case that every common column has nonzero variance
        self._core_index = _core_indices(count, 2 * self.harmonics) if self.correlated and self.harmonics else None

    # --- pieces ---------------------------------------------------------------
    def projected(self, index: int, scale, quadrature, signal=None, jitter=None):
        """Pulsar ``index``'s :class:`Projected` pieces for a white noise (cached by white noise).

        ``scale`` and ``quadrature`` (s): one number, or one per observing system of the pulsar (in the
        order of ``PulsarData.systems``); ``jitter`` (s): None, one number or one per system, the standard
        deviation shared by the TOAs of an epoch, handled per epoch by Sherman–Morrison (PHYSICS.md, "Epoch
        jitter"): with W = diag(1 / sigma_i^2) and U the TOA-to-epoch indicator,
        ``X^T N^-1 Y = X^T W Y - (U^T W X)^T diag(c) (U^T W Y)`` (:func:`ptares.dataset.jitter_weights`):
        linear in the TOAs.
        """
        scalar = np.ndim(scale) == 0 and np.ndim(quadrature) == 0
        no_jitter = jitter is None or not np.any(jitter)
        key = (index, _key(scale), _key(quadrature), None if no_jitter else _key(jitter))
        cached = self._white_cache.get(key) if signal is None else None
        if cached is not None:
            return cached
        if scalar and no_jitter and quadrature == 0 and scale != 1 and signal is None:
            # N = scale^2 diag(errors^2) scales N'^-1 by 1/scale^2 and ln|N| + ln|M^T N^-1 M| by (n - m) ln scale^2
            FNF, FNr, rNr, log_det, dof = self.projected(index, 1.0, 0.0)
            factor = 1.0 / (scale * scale)
            return Projected(FNF * factor, FNr * factor, rNr * factor, log_det + dof * np.log(scale * scale), dof)
        p = self.pulsars[index]
        per_toa = (lambda v: v) if scalar else (lambda v: np.asarray(v, dtype=float)[p.system_index])
        weights = 1.0 / ((per_toa(scale) * p.errors) ** 2 + per_toa(quadrature) ** 2)
        r = p.residuals if signal is None else p.residuals - signal
        F, M = p.basis, p.design
        log_det = -float(np.sum(np.log(weights)))
        c = None  # the per-epoch Sherman–Morrison weights c_e, without jitter none
        if not no_jitter:
            variance = np.broadcast_to(np.asarray(jitter, dtype=float) ** 2, (len(p.systems) or 1,))[p.epoch_system]
            c, jitter_log_det = jitter_weights(weights, p.epochs, variance)
            log_det += jitter_log_det
        if p.epoch_blocks is not None:  # sub-bands sharing their epoch's time: sums over epochs
            gram = p.gram(weights, c, r)
        else:  # TOA by TOA: X^T W X, less the jitter's (U^T W X)^T diag(c) (U^T W X)
            X = np.hstack([F, M, r[:, None]])
            WX = X * weights[:, None]
            gram = X.T @ WX
            if c is not None:
                sums = p.epoch_sums(WX)
                gram -= sums.T @ (sums * c[:, None])
        f, m = F.shape[1], M.shape[1]  # gram's blocks: [basis, design, residuals]
        FNF, FNr, rNr = gram[:f, :f], gram[:f, -1], float(gram[-1, -1])
        MNM, MNF, MNr = gram[f:f + m, f:f + m], gram[f:f + m, :f], gram[f:f + m, -1]
        if M.shape[1]:
            lower, info = _lapack.dpotrf(MNM, lower=1, clean=1)
            if info:
                raise NotPositiveDefinite(f"M^T N^-1 M of pulsar {index} is not positive definite (degenerate timing model?)")
            # with M^T N^-1 M = L L^T: subtract (L^-1 M^T N^-1 F)^T (L^-1 M^T N^-1 F) and the like
            whitened_F = _lapack.dtrtrs(lower, MNF, lower=1)[0]
            whitened_r = _lapack.dtrtrs(lower, MNr, lower=1)[0]
            FNF = FNF - whitened_F.T @ whitened_F
            FNr = FNr - whitened_F.T @ whitened_r
            rNr = rNr - float(whitened_r @ whitened_r)
            log_det += 2.0 * float(np.sum(np.log(np.diag(lower)))) - p.log_det_mtm
        result = Projected(FNF, FNr, rNr, log_det, r.size - M.shape[1])
        if signal is None:
            if len(self._white_cache) > 4 * len(self.pulsars):
                self._white_cache.clear()
            self._white_cache[key] = result
        return result

    def _power_laws(self, out, harmonics: int, amplitudes, indices) -> None:
        """Coefficient variances ``S(f_k) / T`` of every pulsar's power law (amplitude > 0) into ``out`` (P, 2 K),
        sine and cosine alike; all pulsars at once."""
        amplitudes = np.asarray(amplitudes, dtype=float)
        present = amplitudes > 0
        if not present.any():
            return
        if harmonics not in self._unit_laws:
            self._unit_laws[harmonics] = power_law_factors(self.span, harmonics)
        unit, log_ratio = self._unit_laws[harmonics]
        indices = np.asarray(indices, dtype=float)[present]
        variances = amplitudes[present, None] ** 2 * unit * np.exp(-indices[:, None] * log_ratio)
        out[present] = np.repeat(variances, 2, axis=1)

    def _spectra(self, red_amplitude, red_spectral_index, amplitude, gamma, chromatic=None, common_variances=None,
                 red_variances=None):
        """Per-pulsar variances of their own processes (P, width: red noise, then each chromatic process) and
        the common variances (width,), zero beyond each process's columns."""
        red = np.zeros((len(self.pulsars), self.width))
        for name, k, _ in self.chromatic:
            amplitudes, indices = (chromatic or {}).get(name, (np.zeros(len(self.pulsars)), None))
            self._power_laws(red[:, self.chromatic_columns[name]], k, amplitudes, indices)
        if red_variances is not None:  # each pulsar's free red-noise spectrum
            red[:, : 2 * self.red_harmonics] = np.repeat(np.asarray(red_variances, dtype=float), 2, axis=1)
        elif self.red_harmonics:
            self._power_laws(red[:, : 2 * self.red_harmonics], self.red_harmonics, red_amplitude, red_spectral_index)
        common = np.zeros(self.width)
        if common_variances is not None:  # a free spectrum: the variance of each frequency's coefficients
            common[: 2 * self.harmonics] = np.repeat(np.asarray(common_variances, dtype=float), 2)
        elif amplitude > 0 and self.harmonics:
            common[: 2 * self.harmonics] = np.repeat(coefficient_variance(self.span, self.harmonics, amplitude, gamma), 2)
        return red, common

    # --- the likelihood -------------------------------------------------------
    def __call__(self, white_scale, white_quadrature, red_amplitude, red_spectral_index, amplitude=0.0, gamma=13.0 / 3.0,
                 signal=None, chromatic=None, white_jitter=None, common_variances=None, red_variances=None) -> float:
        return self.evaluate(white_scale, white_quadrature, red_amplitude, red_spectral_index, amplitude, gamma, signal,
                             chromatic, white_jitter, common_variances, red_variances)[0]

    def evaluate(self, white_scale, white_quadrature, red_amplitude, red_spectral_index, amplitude=0.0, gamma=13.0 / 3.0,
                 signal=None, chromatic=None, white_jitter=None, common_variances=None, red_variances=None):
        """``(log likelihood, factors)``: the factors let :meth:`draw_coefficients` draw at the same
        parameters without factorising again.  ``common_variances`` (harmonics,): a free spectrum of the
        common process (each frequency's coefficient variance, s^2) in place of ``amplitude`` and ``gamma``;
        ``red_variances`` (P, red_harmonics) the same for every pulsar's red noise."""
        pieces = self._pieces(white_scale, white_quadrature, signal, white_jitter)
        red, common = self._spectra(red_amplitude, red_spectral_index, amplitude, gamma, chromatic, common_variances,
                                    red_variances)
        constant = sum(-0.5 * (piece.log_det + piece.dof * _LOG_2PI) - 0.5 * piece.rNr for piece in pieces)
        factors = self._factorise(pieces, red, common)
        return constant + 0.5 * factors.quadratic - 0.5 * factors.log_det, factors

    def draw_coefficients(self, rng, white_scale, white_quadrature, red_amplitude, red_spectral_index, amplitude=0.0,
                          gamma=13.0 / 3.0, signal=None, factors=None, chromatic=None, white_jitter=None,
                          common_variances=None, red_variances=None) -> np.ndarray:
        """One draw of every pulsar's Fourier coefficients (P, width) in s from ``p(a | parameters, residuals)``.

        The timing model is marginalised: ``a ~ N(Sigma^-1 d, Sigma^-1)`` with
        ``Sigma = F^T N'^-1 F + Phi^-1`` and ``d = F^T N'^-1 r`` (PHYSICS.md, "Gibbs sampling").
        Columns are those of the basis (sine and cosine of k/T interleaved, k = 1..size/2, then each
        chromatic process's);
        those with zero prior variance are 0.  ``rng`` is a :class:`numpy.random.Generator`;
        the other arguments are those of :meth:`__call__`, and ``factors`` those :meth:`evaluate`
        returned at the same parameters (else they are computed).
        """
        if factors is None:
            pieces = self._pieces(white_scale, white_quadrature, signal, white_jitter)
            red, common = self._spectra(red_amplitude, red_spectral_index, amplitude, gamma, chromatic, common_variances,
                                        red_variances)
            factors = self._factorise(pieces, red, common)
        coefficients = np.zeros((len(self.pulsars), self.width))
        shared = None
        if factors.core is not None:  # the common columns from their marginal N(S^-1 d', S^-1): L_S^-T (L_S^-1 d' + z)
            noise = rng.standard_normal(factors.whitened.size)
            solution, _ = _lapack.dtrtrs(factors.core, factors.whitened + noise, lower=1, trans=1)
            shared = solution.reshape(factors.shared.size, len(self.pulsars)).T
            coefficients[:, factors.shared] = shared
        for block in factors.blocks:  # each pulsar's own columns given the common ones: L^-T (L^-1 (d_r - FNF_rc a_c) + z)
            right = block.whitened + rng.standard_normal(block.whitened.shape)
            if shared is not None:
                right -= np.einsum("gmk,gk->gm", block.coupling, shared[block.members])
            own = np.linalg.solve(block.lower.swapaxes(1, 2), right[..., None])[..., 0]
            coefficients[block.members[:, None], block.columns[None, :]] = own
        return coefficients

    def _pieces(self, white_scale, white_quadrature, signal, white_jitter=None):
        return [
            self.projected(a, white_scale[a], white_quadrature[a], None if signal is None else signal[a],
                           None if white_jitter is None else white_jitter[a])
            for a in range(len(self.pulsars))
        ]

    def _factorise(self, pieces, red, common) -> _Factors:
        """Factors of ``Sigma`` for the per-pulsar pieces and the prior variances from :meth:`_spectra`.

        Columns of the correlated common process (nonzero common variance; none for an
        uncorrelated model) are shared by all pulsars; each pulsar's other columns with nonzero
        prior variance are its own, factorised per pulsar (batched over pulsars with the same
        columns) and, where there is a shared part, eliminated from it by a Schur complement.
        """
        count = len(pieces)
        prior = red + common[None, :]
        shared = np.flatnonzero(common > 0) if self.correlated else np.empty(0, dtype=np.intp)
        own = prior > 0
        own[:, shared] = False
        width = shared.size
        FNF = np.stack([piece[0] for piece in pieces])
        d = np.stack([piece[1] for piece in pieces])
        everyone = np.arange(count)
        shared_blocks = _select(FNF, everyone, shared, shared).copy()  # (P, nc, nc)
        shared_d = d[:, shared]  # (P, nc)
        quadratic = log_det = 0.0
        blocks = []
        for members, columns in _groups(own):
            if columns.size == 0:
                continue
            variances = _select(prior, members, columns)
            sigma = _select(FNF, members, columns, columns).copy()
            sigma.reshape(members.size, -1)[:, :: columns.size + 1] += 1.0 / variances
            try:
                lower = np.linalg.cholesky(sigma)
            except np.linalg.LinAlgError:
                raise NotPositiveDefinite("Sigma = F^T N^-1 F + Phi^-1 of a pulsar is not positive definite") from None
            right = np.concatenate([_select(FNF, members, columns, shared), _select(d, members, columns)[..., None]], axis=2)
            # L^-1 right, one triangular solve per pulsar (numpy has no batched one; its batched LU solve costs
            # several times more once a pulsar has many own columns, e.g. chromatic ones)
            solved = np.stack([_lapack.dtrtrs(lower[g], right[g], lower=1)[0] for g in range(members.size)])
            coupling, whitened = solved[..., :width], solved[..., width]
            quadratic += float((whitened * whitened).sum())
            log_det += float(np.log(variances).sum()) + 2.0 * float(np.log(np.diagonal(lower, axis1=1, axis2=2)).sum())
            if width:
                shared_blocks[members] -= np.matmul(coupling.swapaxes(1, 2), coupling)
                shared_d[members] -= np.einsum("gmk,gm->gk", coupling, whitened)
            blocks.append(_OwnBlock(members, columns, lower, coupling, whitened))
        if width == 0:
            return _Factors(quadratic, log_det, blocks, shared, None, None)

        # Phi_c at one column is Gamma S_gw + diag(S_red): the same for the sine and the cosine of a frequency
        variances = np.vstack([common[shared], red[:, shared]])
        distinct = np.ones(width, dtype=bool)
        distinct[1:] = (variances[:, 1:] != variances[:, :-1]).any(axis=0)
        which = np.cumsum(distinct) - 1
        phi = self.gamma_matrix * variances[0, distinct][:, None, None]
        phi.reshape(phi.shape[0], -1)[:, :: count + 1] += variances[1:, distinct].T
        try:
            lower = np.linalg.cholesky(phi)
        except np.linalg.LinAlgError:
            raise NotPositiveDefinite("Phi of the correlated model is not positive definite") from None
        log_det += 2.0 * float(np.log(np.diagonal(lower, axis1=1, axis2=2)).sum(axis=1)[which].sum())
        inverse = np.linalg.inv(phi)[which]  # (nc, P, P)

        placed_blocks, placed_couplings = (self._core_index if self._core_index is not None and width == 2 * self.harmonics
                                           else _core_indices(count, width))
        core = np.zeros((count * width, count * width))
        flat = core.reshape(-1)
        flat[placed_couplings] = inverse.ravel()
        flat[placed_blocks] += shared_blocks.ravel()
        # core is symmetric, so its transpose is the same matrix in Fortran order: LAPACK factorises it in place
        factor, info = _lapack.dpotrf(core.T, lower=1, clean=0, overwrite_a=1)
        if info > 0:
            raise NotPositiveDefinite("Sigma of the correlated model is not positive definite")
        if info < 0:
            raise ValueError(f"LAPACK dpotrf refused argument {-info}")
        whitened, _ = _lapack.dtrtrs(factor, shared_d.T.ravel(), lower=1)
        quadratic += float(whitened @ whitened)
        log_det += 2.0 * float(np.log(factor.diagonal()).sum())
        return _Factors(quadratic, log_det, blocks, shared, factor, whitened)
