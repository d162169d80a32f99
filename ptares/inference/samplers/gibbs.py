"""Blocked Gibbs sampling of large noise models (van Haasteren & Vallisneri 2014; Laal et al. 2023, PRD 108, 063008).

The model (see :mod:`ptares.inference.likelihood`) has, besides its parameters,
the Fourier coefficients ``a`` of every pulsar's red noise and the common process.
Given the parameters, ``a`` is Gaussian and is drawn exactly; given ``a``, the
parameters split into small blocks.  One iteration of each chain:

1. draw all coefficients ``a | parameters, data`` (one factorisation; with
   Hellings–Downs correlations only the common-process columns are coupled);
2. for each pulsar ``p`` in turn:

   a. its white noise ``| a_p, data`` by Metropolis steps on the timing-model-
      marginalised white likelihood of ``r_p - F_p a_p`` (cost linear in its TOAs);
   b. its red noise ``| white, common process, a of the other pulsars`` with
      ``a_p`` integrated out (Metropolis steps on a per-pulsar Woodbury likelihood:
      the prior of ``a_p`` given the other pulsars' coefficients is Gaussian,
      zero-mean for an uncorrelated common process);
   c. each of its chromatic processes (dispersion, scattering) the same way as b;
   d. ``a_p | everything`` exactly;

3. the common process's parameters with all coefficients integrated out
   (Metropolis steps on the full marginalised likelihood).  With correlations each
   step factorises the whole array; the factors at the chain's new point are kept,
   and step 1 of the next iteration draws the coefficients from them.

White noise per observing system and epoch jitter are held at their given values (their
products enter through :meth:`~ptares.inference.likelihood.Likelihood.projected`); a model with
them free is refused, as is a continuous wave.

Steps 2b, 2c and 3 integrate coefficients out and draw them afresh right after
(a partially collapsed Gibbs sampler, van Dyk & Park 2008, JASA 103, 790): the
chain keeps the posterior invariant and does not suffer the slow "funnel" mixing
of amplitude and coefficients where the data constrain the coefficients weakly.

Each block's Metropolis steps are Gaussian random walks and one draw from the block's
prior (an independence proposal, so that long tails towards vanishing noise are crossed
in one step rather than walked).  During the first :data:`ADAPTATION` iterations the
random walks' covariance is refitted every :data:`SEGMENT` iterations from that chain's
own history (2.38^2/d times the
sample covariance; Gelman, Roberts & Gilks 1996), then frozen; the adaptation
steps are always discarded as burn-in.  Everything a chain needs to continue is
its last point, its random state and its history, all in the chains file, so a
resumed run continues exactly as an uninterrupted one would.
"""

from __future__ import annotations

import json

import numpy as np

from ptares.errors import InputError
from ptares.inference import kernels
from ptares.inference.likelihood import NotPositiveDefinite
from ptares.inference.parameters import (
    CHROMATIC,
    COMMON_AMPLITUDE,
    COMMON_BEND,
    COMMON_BEND_INDEX,
    COMMON_INDEX,
    RED_AMPLITUDE,
    RED_INDEX,
    WHITE_QUADRATURE,
    WHITE_SCALE,
    bin_of,
    for_pulsar,
    red_bin_of,
    split,
)
from ptares.inference.priors import Uniform, support
from ptares.physics.spectra import power_law_factors
from ptares.rng import stream

__all__ = ["GibbsSampler", "run_gibbs", "adaptation_steps", "ADAPTATION", "SEGMENT", "MOVES"]

#: Most iterations during which the Metropolis proposals adapt (always burnt); see :func:`adaptation_steps`.
ADAPTATION = 500
#: Iterations between adaptations, checkpoints and convergence checks.
SEGMENT = 100
#: Metropolis proposals per iteration for each kind of block (the last a draw from the prior):
#: white-noise steps cost one pass over a pulsar's TOAs, red-noise steps a small
#: factorisation, common-process steps the whole array's likelihood.
MOVES = {"white": 10, "red": 5, "common": 5}
#: Common-process steps with correlations, each a factorisation of the whole array (the last point's factors
#: are kept for the next coefficient draw).  Measured at 20 pulsars (benchmarks/bench_compare.py's array):
#: three give the most effective samples per second; steps given the coefficients (centred, or non-centred
#: with whitened coefficients held) mixed several times slower per second.
CORRELATED_MOVES = 3

_LOG_2PI = np.log(2.0 * np.pi)
#: Smallest |1 + change H_pp| a Sherman–Morrison update of the Hellings–Downs inverse may divide by; below it,
#: (a relative error of about 1e-16 / floor) the inverse is recomputed.
SHERMAN_MORRISON_FLOOR = 1e-6

_OPTIMAL_SCALE = 2.38**2  # / d: Gelman, Roberts & Gilks (1996)


def _unit_power_law(span: float, harmonics: int, size: int):
    """:func:`~ptares.physics.spectra.power_law_factors` on each sine and cosine column (size,), zero beyond."""
    unit, log_ratio = np.zeros(size), np.zeros(size)
    if harmonics:
        factors = power_law_factors(span, harmonics)
        unit[: 2 * harmonics], log_ratio[: 2 * harmonics] = (np.repeat(f, 2) for f in factors)
    return unit, log_ratio


def _power_law(unit, log_ratio, amplitude: float, index: float):
    """Coefficient variances of a power law from :func:`_unit_power_law`'s factors."""
    return (amplitude * amplitude) * unit * np.exp(-index * log_ratio)


class _Block:
    """A few free parameters updated together by Metropolis steps, with their proposal covariance."""

    def __init__(self, indices, priors, kind):
        self.moves = MOVES[kind]
        self.indices = np.asarray(indices, dtype=int)
        self.priors = [priors[i] for i in self.indices]
        widths = np.array([abs(p.ppf(0.84) - p.ppf(0.16)) / 2.0 for p in self.priors])
        self.initial = np.diag((0.1 * widths) ** 2)
        # uniform priors (the usual case) need only their bounds: a constant density inside
        self._box = None
        if all(isinstance(p, Uniform) for p in self.priors):
            self._box = ([p.low for p in self.priors], [p.high for p in self.priors],
                         -float(sum(np.log(p.high - p.low) for p in self.priors)))

    def sample_prior(self, rng) -> np.ndarray:
        """One draw of the block's parameters from their priors."""
        if self._box is not None:
            lows, highs, _ = self._box
            return rng.uniform(lows, highs)
        return np.array([float(np.ravel(p.sample(rng, 1))[0]) for p in self.priors])

    def log_prior(self, values) -> float:
        if self._box is not None:
            lows, highs, inside = self._box
            return inside if all(low <= v <= high for low, v, high in zip(lows, values, highs)) else -np.inf
        return float(sum(p.log_pdf(v) for p, v in zip(self.priors, values)))


class GibbsSampler:
    """Blocked Gibbs sampler of a :class:`~ptares.inference.model.FitModel` without a continuous wave."""

    def __init__(self, model):
        reason = why_gibbs_cannot_sample(model)
        if reason:
            raise InputError(f"the Gibbs sampler has no step for {reason}", "fit.sampler")
        self.model = model
        self.likelihood = model.likelihood
        names = model.dataset.names
        index = {name: i for i, name in enumerate(model.names)}
        self.white_blocks, self.red_blocks, self.red_bins = [], [], []
        self.processes = list(model.chromatic_modes)  # chromatic processes, in the likelihood's column order
        self.chromatic_blocks = {process: [] for process in self.processes}
        used = set()
        red_bins = {pulsar: [] for pulsar in names}  # a free red-noise spectrum: (position in x, column) per frequency
        for i, name in enumerate(model.names):
            if red_bin_of(name) is not None:
                red_bins[split(name)[1]].append((i, 2 * (red_bin_of(name) - 1)))
        for pulsar in names:
            white = [index[k] for k in (for_pulsar(WHITE_SCALE, pulsar), for_pulsar(WHITE_QUADRATURE, pulsar)) if k in index]
            red = [index[k] for k in (for_pulsar(RED_AMPLITUDE, pulsar), for_pulsar(RED_INDEX, pulsar)) if k in index]
            self.white_blocks.append(_Block(white, model.priors, "white") if white else None)
            self.red_blocks.append(_Block(red, model.priors, "red") if red else None)
            used |= set(white) | set(red)
            self.red_bins.append(red_bins[pulsar])
            used |= {i for i, _ in red_bins[pulsar]}
            for process in self.processes:  # a chromatic process is stepped like red noise
                own = [index[k] for k in (for_pulsar(q, pulsar) for q in CHROMATIC[process]) if k in index]
                self.chromatic_blocks[process].append(_Block(own, model.priors, "red") if own else None)
                used |= set(own)
        common = [index[k] for k in (COMMON_AMPLITUDE, COMMON_INDEX, COMMON_BEND, COMMON_BEND_INDEX) if k in index]
        self.common_block = _Block(common, model.priors, "common") if common else None
        used |= set(common)
        # a free spectrum: (frequency number k, position in x) of each free variance, drawn given the coefficients
        self.spectrum = [(bin_of(name), i) for i, name in enumerate(model.names) if bin_of(name) is not None]
        used |= {i for _, i in self.spectrum}
        left = [model.names[i] for i in range(model.ndim) if i not in used]
        if left:
            raise InputError(f"the Gibbs sampler has no step for {', '.join(left)}; use sampler = \"ensemble\"",
                             "fit.sampler")
        chromatic_blocks = [b for process in self.processes for b in self.chromatic_blocks[process]]
        self.blocks = [b for b in self.white_blocks + self.red_blocks + chromatic_blocks + [self.common_block]
                       if b is not None]
        for number, block in enumerate(self.blocks):
            block.number = number
        self._index = index
        # per pulsar, where each noise quantity is: (position in x, or -1 and its held value)
        self._slots = [[(index[k], 0.0) if k in index else (-1, float(model.values.get(k, np.nan)))
                        for k in (for_pulsar(q, pulsar) for q in (WHITE_SCALE, WHITE_QUADRATURE, RED_AMPLITUDE, RED_INDEX))]
                       for pulsar in names]
        # held white noise per observing system and jitter (s), per pulsar: (scales, quadratures, jitters or None),
        # or None where the pulsar has one white noise and no jitter
        physical = model.physical(np.array([model.values.get(n, 0.0) for n in model.names]))
        jitters = physical["white_jitter"] if physical["white_jitter"] is not None else [None] * len(names)
        self._held_white = [None if np.ndim(scale) == 0 and jitter is None else (scale, quadrature, jitter)
                            for scale, quadrature, jitter in zip(physical["white_scale"], physical["white_quadrature"], jitters)]
        self._names = names
        self._correlated = model.likelihood.correlated
        lk = model.likelihood
        # (point, likelihood factors) of the latest correlated likelihood evaluation and of the chain's point
        self._latest = self._kept = None
        self._gamma_factor = None  # Cholesky factor of the correlation matrix, for a free spectrum's draws
        self._red_unit, self._red_log_ratio = _unit_power_law(lk.span, lk.red_harmonics, lk.width)
        self._common_unit, self._common_log_ratio = _unit_power_law(lk.span, lk.harmonics, lk.width)
        # per chromatic process: its power-law factors on its own columns, and where each pulsar's values are
        self._chromatic_laws, self._chromatic_slots = {}, {}
        for process, k, _ in lk.chromatic:
            unit, log_ratio = np.zeros(lk.width), np.zeros(lk.width)
            columns = lk.chromatic_columns[process]
            unit[columns], log_ratio[columns] = (np.repeat(f, 2) for f in power_law_factors(lk.span, k))
            self._chromatic_laws[process] = (unit, log_ratio)
            self._chromatic_slots[process] = [[(index[k], 0.0) if k in index else (-1, float(model.values[k]))
                                               for k in (for_pulsar(q, pulsar) for q in CHROMATIC[process])]
                                              for pulsar in names]

    # --- parameters ----------------------------------------------------------
    def _red_variance(self, amplitude, index):
        """Prior variance of one pulsar's coefficients from its red noise, zero beyond its frequencies (width,)."""
        return _power_law(self._red_unit, self._red_log_ratio, amplitude, index)

    def _red_of(self, x, p):
        """Prior variance of pulsar p's coefficients from its red noise at ``x`` (width,): its power law, or its
        free spectrum's variances."""
        if self.red_bins[p]:
            variances = np.zeros_like(self._red_unit)
            for i, column in self.red_bins[p]:
                variances[column: column + 2] = 10.0 ** x[i]
            return variances
        return self._red_variance(*self._red_values(x, p))

    def _chromatic_values(self, x, p, process):
        """Pulsar p's amplitude and spectral index of a chromatic process at ``x``."""
        (amplitude, fixed_amplitude), (index, fixed_index) = self._chromatic_slots[process][p]
        return 10 ** (x[amplitude] if amplitude >= 0 else fixed_amplitude), (x[index] if index >= 0 else fixed_index)

    def _chromatic_law(self, x, p, process):
        """Prior variance of pulsar p's coefficients from one chromatic process at ``x`` (width,)."""
        return _power_law(*self._chromatic_laws[process], *self._chromatic_values(x, p, process))

    def _common_variance(self, x):
        """Prior variance of each pulsar's coefficients from the common process (width,; zero without one)."""
        if self.model.section.common_spectrum != "power_law" and self.model.section.common != "none":
            variances = np.zeros_like(self._common_unit)
            given = self.model.common_variances(self.model.parameters(x))  # a free spectrum or a turnover
            variances[: 2 * given.size] = np.repeat(given, 2)
            return variances
        if COMMON_AMPLITUDE not in self.model.values:  # common = "none"
            return np.zeros_like(self._common_unit)
        amplitude, index = 10 ** self._value(x, COMMON_AMPLITUDE), self._value(x, COMMON_INDEX)
        return _power_law(self._common_unit, self._common_log_ratio, amplitude, index)

    # --- the blocks' densities ------------------------------------------------
    def _white_log_likelihood(self, p, scale, quadrature, residual) -> float:
        """ln p(r_p - F_p a_p | white noise), timing model integrated out."""
        q = self.likelihood.pulsars[p]
        return kernels.white_log_likelihood(q.errors, residual, q.design, scale, quadrature, q.log_det_mtm)

    @staticmethod
    def _collapsed(pieces, mean, variance, rng=None):
        """ln p(r_p | its coefficients ~ N(mean, diag variance)) up to white-noise terms, and with
        ``rng`` also a draw of the coefficients given the data (None where Sigma is not positive definite)."""
        noise = None if rng is None else rng.standard_normal(variance.size)
        value, draw = kernels.collapsed(pieces.FNF, pieces.FNr, pieces.rNr, mean, variance, noise)
        return value, (None if value == -np.inf or rng is None else draw)

    # --- conditional prior of one pulsar's coefficients given the others' (Hellings–Downs) ---
    def _common_inverse(self, red, common):
        """Per common frequency, the inverse of Phi_k = Gamma phi_k + diag(red_k): (K, P, P)."""
        K = self.likelihood.harmonics
        phi = self.likelihood.gamma_matrix[None, :, :] * common[0: 2 * K: 2, None, None]
        P = phi.shape[1]
        phi[:, np.arange(P), np.arange(P)] += red[:, 0: 2 * K: 2].T
        return np.linalg.inv(phi)

    def _conditional_prior(self, p, coefficients, red, common, inverse):
        """Mean and variance (width,) of pulsar p's coefficients given the other pulsars', without p's own red noise."""
        size = self.likelihood.width
        mean, variance = np.zeros(size), np.zeros(size)
        if not self._correlated or inverse is None:
            variance[:] = common
            return mean, variance
        K = self.likelihood.harmonics
        row = inverse[:, p, :].copy()  # (K, P)
        own = row[:, p].copy()
        row[:, p] = 0.0
        others = coefficients[:, : 2 * K]  # (P, 2K)
        mean[0: 2 * K: 2] = -np.einsum("kb,bk->k", row, others[:, 0::2]) / own
        mean[1: 2 * K: 2] = -np.einsum("kb,bk->k", row, others[:, 1::2]) / own
        # variance of the common part given the others, phi_k - phi_k^2 g^T G^-1 g (g: pulsar p's correlations with
        # the others, G: their Phi_k), with G^-1 = H_-p,-p - h h^T / H_pp from the inverse H of the whole Phi_k;
        # written so that pulsar p's own red variance never enters (1/H_pp - red_p would lose all digits when the
        # red noise dwarfs the common process)
        g = self.likelihood.gamma_matrix[p].copy()
        g[p] = 0.0
        phi = common[0: 2 * K: 2]
        quadratic = np.einsum("a,kab,b->k", g, inverse, g)
        cross = inverse[:, :, p] @ g
        conditional = phi - phi**2 * (quadratic - cross**2 / own)
        variance[: 2 * K] = np.repeat(np.maximum(conditional, 0.0), 2)
        return mean, variance

    def _replace_red(self, p, new, red, common, inverse) -> None:
        """Pulsar p's own variances become ``new`` (in ``red``), and the Hellings–Downs inverse follows (chromatic
        columns lie beyond the common ones and do not enter it)."""
        change = (new - red[p])[0: 2 * self.likelihood.harmonics: 2]
        red[p] = new
        if inverse is not None:
            self._update_inverse(inverse, p, change, red, common)

    def _update_inverse(self, inverse, p, change, red, common):
        """Sherman–Morrison: Phi_k gains ``change_k`` at (p, p); update its inverse in place.

        Where ``1 + change_k H_pp`` is near zero (pulsar p's red noise falls from dwarfing the
        common process: the update would cancel to no digits) the frequency's inverse is
        recomputed from ``red`` (already holding the new value) and ``common``."""
        column = inverse[:, :, p].copy()  # (K, P)
        denominator = 1.0 + change * inverse[:, p, p]
        safe = np.abs(denominator) > SHERMAN_MORRISON_FLOOR  # False for NaN too
        inverse[safe] -= ((change[safe] / denominator[safe])[:, None, None]
                          * column[safe][:, :, None] * column[safe][:, None, :])
        if not safe.all():
            inverse[~safe] = self._common_inverse(red, common)[~safe]

    # --- Metropolis ----------------------------------------------------------
    @staticmethod
    def _metropolis(block, x, log_density, current, proposal, rng, moves=None, on_accept=None):
        """``moves`` (default ``block.moves``) Metropolis steps of ``block`` on ``x`` (in place); returns
        (value, accepted); ``on_accept()`` is called after each accepted step.

        All but the last are Gaussian random-walk steps; the last proposes a fresh draw from the block's
        prior (an independence proposal, accepted with the likelihood ratio), which crosses the long
        flat tails that posteriors of noise amplitudes have towards "no such noise" in a single step.
        """
        accepted = 0
        moves = block.moves if moves is None else moves
        walks = moves - 1
        steps = rng.standard_normal((walks, block.indices.size)) @ np.linalg.cholesky(proposal).T
        thresholds = np.log(rng.uniform(size=moves))
        here = x[block.indices].copy()
        here_prior = block.log_prior(here)
        for move, threshold in enumerate(thresholds):
            independent = move == walks
            trial = block.sample_prior(rng) if independent else here + steps[move]
            prior = block.log_prior(trial)
            if prior == -np.inf:
                continue
            x[block.indices] = trial
            value = log_density(x)
            ratio = value - current if independent else (value + prior) - (current + here_prior)
            if threshold < ratio:
                current, here, here_prior, accepted = value, trial, prior, accepted + 1
                if on_accept is not None:
                    on_accept()
        x[block.indices] = here
        return current, accepted

    # --- one iteration -------------------------------------------------------
    def iterate(self, x, rng, proposals):
        """One Gibbs iteration from ``x`` (changed in place); returns (log posterior at the new x, acceptance)."""
        lk = self.likelihood
        theta = self.model.physical(x)
        red = np.stack([self._red_of(x, p) for p in range(len(self._names))])
        # each chromatic process's variances (on its own columns, beyond the common ones)
        parts = {process: np.stack([self._chromatic_law(x, p, process) for p in range(len(self._names))])
                 for process in self.processes}
        chromatic = sum(parts.values()) if parts else np.zeros_like(red)
        red += chromatic  # every pulsar's own variance: red and chromatic noise
        common = self._common_variance(x)
        coefficients = lk.draw_coefficients(rng, **theta, factors=self._factors_at(x))
        self._kept = None
        correlated = self._correlated and bool(np.any(common > 0))  # any spectrum: power law, turnover or free
        inverse = self._common_inverse(red, common) if correlated else None
        accepted, proposed = 0, 0
        for p in range(len(self._names)):
            white, red_block = self.white_blocks[p], self.red_blocks[p]
            scale, quadrature = theta["white_scale"][p], theta["white_quadrature"][p]
            if white is not None:
                residual = lk.pulsars[p].residuals - lk.pulsars[p].basis @ coefficients[p]

                def white_density(y, p=p, residual=residual):
                    s, q = self._white_values(y, p)
                    return self._white_log_likelihood(p, s, q, residual)

                current = white_density(x)
                _, hits = self._metropolis(white, x, white_density, current, proposals[white.number], rng)
                accepted, proposed = accepted + hits, proposed + white.moves
                scale, quadrature = self._white_values(x, p)
            pieces = self._pieces(p, scale, quadrature)
            mean, base = self._conditional_prior(p, coefficients, red, common, inverse)
            if red_block is not None:

                def red_density(y, p=p, pieces=pieces, mean=mean, base=base):
                    amplitude, index = self._red_values(y, p)
                    return self._collapsed(pieces, mean, base + chromatic[p] + self._red_variance(amplitude, index))[0]

                current = red_density(x)
                _, hits = self._metropolis(red_block, x, red_density, current, proposals[red_block.number], rng)
                accepted, proposed = accepted + hits, proposed + red_block.moves
                self._replace_red(p, self._red_of(x, p) + chromatic[p], red, common, inverse)
            if self.red_bins[p]:  # a free red spectrum: a slice step of each frequency, coefficients integrated out
                for i, column in self.red_bins[p]:
                    prior = self.model.priors[i]

                    def red_bin_density(y, p=p, i=i, pieces=pieces, mean=mean, base=base, prior=prior):
                        trial = x.copy()
                        trial[i] = y
                        return (self._collapsed(pieces, mean, base + chromatic[p] + self._red_of(trial, p))[0]
                                + prior.log_pdf(y))

                    x[i] = _slice_step(red_bin_density, float(x[i]), rng, *support(prior))
                self._replace_red(p, self._red_of(x, p) + chromatic[p], red, common, inverse)
            for process in self.processes:  # its chromatic processes, the same way (columns beyond the common)
                block = self.chromatic_blocks[process][p]
                if block is None:
                    continue
                # everything else on pulsar p's coefficients, summed afresh (not subtracted: no cancellation)
                others = self._red_of(x, p) + sum(parts[q][p] for q in self.processes if q != process)

                def chromatic_density(y, p=p, pieces=pieces, mean=mean, base=base, others=others, process=process):
                    return self._collapsed(pieces, mean, base + others + self._chromatic_law(y, p, process))[0]

                current = chromatic_density(x)
                _, hits = self._metropolis(block, x, chromatic_density, current, proposals[block.number], rng)
                accepted, proposed = accepted + hits, proposed + block.moves
                parts[process][p] = self._chromatic_law(x, p, process)
                red[p] = others + parts[process][p]
            _, draw = self._collapsed(pieces, mean, base + red[p], rng)
            if draw is None:
                raise NotPositiveDefinite(f"the coefficients of pulsar {self._names[p]} have no valid conditional")
            coefficients[p] = draw
        if self.spectrum:  # a free spectrum: each frequency's variance given every pulsar's coefficients
            self._spectrum_step(x, coefficients, red, rng)
        block = self.common_block
        if not self._correlated:
            log_likelihood = self._uncorrelated(red, x)
            if self.spectrum:  # then with the coefficients integrated out, where the data say little
                self._spectrum_collapsed(x, log_likelihood, rng)
            current = log_likelihood(x)
            if block is not None:
                current, hits = self._metropolis(block, x, log_likelihood, current, proposals[block.number], rng)
                accepted, proposed = accepted + hits, proposed + block.moves
            return current + self.model.log_prior(x), accepted / max(proposed, 1)
        if self.spectrum:
            self._spectrum_collapsed(x, self._correlated_log_likelihood, rng)
        current = self._correlated_log_likelihood(x)
        self._keep_latest()
        if block is not None:  # coefficients integrated out: a factorisation of the whole array per step
            current, hits = self._metropolis(block, x, self._correlated_log_likelihood, current, proposals[block.number],
                                             rng, moves=CORRELATED_MOVES, on_accept=self._keep_latest)
            accepted, proposed = accepted + hits, proposed + CORRELATED_MOVES
        self._latest = None
        return current + self.model.log_prior(x), accepted / max(proposed, 1)

    def _spectrum_step(self, x, coefficients, red, rng) -> None:
        """Draw each free-spectrum variance rho_k given the coefficients a (PHYSICS.md, "Gibbs sampling"): with a
        prior uniform in lg rho and no other process on those coefficients, rho_k | a is an inverse gamma of
        shape P and scale (sum of a^T G^-1 a over sine and cosine) / 2 (G the correlation matrix; the identity
        without correlations), truncated to the prior's range, drawn exactly; otherwise (a pulsar's red noise
        sharing the frequency, another prior) one slice-sampling update (Neal 2003, Ann. Stat. 31, 705) of
        lg rho_k under ln N(a_sin; 0, rho G + D) + ln N(a_cos; 0, rho G + D) + ln prior, D the pulsars' own
        variances there."""
        correlation = self.likelihood.gamma_matrix if self._correlated else np.eye(len(self._names))
        if self._gamma_factor is None:
            self._gamma_factor = np.linalg.cholesky(correlation)
        for k, i in self.spectrum:
            prior = self.model.priors[i]
            pair = coefficients[:, 2 * k - 2: 2 * k]  # (P, 2): sine and cosine
            own = red[:, 2 * k - 2]
            if isinstance(prior, Uniform) and not np.any(own > 0):
                whitened = np.linalg.solve(self._gamma_factor, pair)
                scale = 0.5 * float(np.sum(whitened * whitened))
                drawn = _truncated_inverse_gamma(rng, len(self._names), scale, 10.0 ** prior.low, 10.0 ** prior.high)
                if drawn is not None:
                    x[i] = np.log10(drawn)
                    continue

            def log_density(y, pair=pair, own=own, prior=prior):
                covariance = 10.0**y * correlation + np.diag(own)
                try:
                    lower = np.linalg.cholesky(covariance)
                except np.linalg.LinAlgError:
                    return -np.inf
                whitened = np.linalg.solve(lower, pair)
                return (-float(np.sum(whitened * whitened)) / 2 - 2.0 * float(np.log(np.diag(lower)).sum())
                        + prior.log_pdf(y))

            x[i] = _slice_step(log_density, float(x[i]), rng, *support(prior))

    def _spectrum_collapsed(self, x, log_likelihood, rng) -> None:
        """One slice update of each free-spectrum variance with every coefficient integrated out (the
        likelihood of the data given all parameters, ``log_likelihood(x)``), as the red-noise and power-law
        steps do.  Given the coefficients alone, a variance the noise swamps and its coefficients pin each
        other down and the chain crawls (autocorrelation times of hundreds of iterations); integrated out, it
        moves freely.  The coefficients are drawn afresh at the next iteration (partially collapsed Gibbs, van
        Dyk & Park 2008)."""
        for _, i in self.spectrum:
            prior = self.model.priors[i]

            def log_density(y, i=i, prior=prior):
                trial = x.copy()
                trial[i] = y
                return log_likelihood(trial) + prior.log_pdf(y)

            x[i] = _slice_step(log_density, float(x[i]), rng, *support(prior))

    def _correlated_log_likelihood(self, x) -> float:
        """The full likelihood at ``x``; ``(x, its factors)`` are held as the latest evaluation."""
        self._latest = None
        try:
            value, factors = self.likelihood.evaluate(**self.model.physical(x))
        except NotPositiveDefinite:
            return -np.inf
        if np.isnan(value):
            raise ArithmeticError(f"the likelihood is NaN at {dict(zip(self.model.names, x))}")
        self._latest = (x.copy(), factors)
        return value

    def _keep_latest(self) -> None:
        """The latest evaluation is the chain's point: keep its factors for the next coefficient draw."""
        self._kept = self._latest

    def _factors_at(self, x):
        """Factors of the likelihood kept from an evaluation at exactly ``x``, or None."""
        if self._kept is not None and np.array_equal(self._kept[0], x):
            return self._kept[1]
        return None

    def _uncorrelated(self, red, x):
        """The uncorrelated model's likelihood as a function of the common process alone (noise held)."""
        pieces = [self._pieces(p, *self._white_values(x, p)) for p in range(len(self._names))]
        FNF = np.stack([piece.FNF for piece in pieces])
        FNr = np.stack([piece.FNr for piece in pieces])
        rNr = np.array([piece.rNr for piece in pieces])
        constant = -0.5 * sum(piece.log_det + piece.dof * _LOG_2PI for piece in pieces)

        def log_likelihood(y):
            common = self._common_variance(y)
            return constant + kernels.collapsed_total(FNF, FNr, rNr, red + common[None, :])

        return log_likelihood

    def _pieces(self, p, scale, quadrature):
        """Pulsar p's projected pieces for a white noise, with its held jitter."""
        held = self._held_white[p]
        return self.likelihood.projected(p, scale, quadrature, jitter=None if held is None else held[2])

    def _white_values(self, x, p):
        """Pulsar p's white scale and quadrature (s) at ``x`` (each an array over its observing systems, held,
        where it has several)."""
        if self._held_white[p] is not None:
            return self._held_white[p][:2]
        (scale, fixed_scale), (quadrature, fixed_quadrature) = self._slots[p][:2]
        return (x[scale] if scale >= 0 else fixed_scale), 10 ** (x[quadrature] if quadrature >= 0 else fixed_quadrature)

    def _red_values(self, x, p):
        """Pulsar p's red-noise amplitude and spectral index at ``x``."""
        (amplitude, fixed_amplitude), (index, fixed_index) = self._slots[p][2:]
        return 10 ** (x[amplitude] if amplitude >= 0 else fixed_amplitude), (x[index] if index >= 0 else fixed_index)

    def _value(self, x, name):
        index = self._index.get(name)
        return float(x[index]) if index is not None else float(self.model.values[name])

    # --- proposals -----------------------------------------------------------
    def proposals(self, history=None):
        """Proposal covariance of each block (a list in block order): the initial one, or fitted to a
        chain's ``history`` (steps, parameters)."""
        result = []
        for block in self.blocks:
            covariance = block.initial
            if history is not None and len(history) > 10:
                recent = history[len(history) // 2:, block.indices]
                sample = np.atleast_2d(np.cov(recent, rowvar=False))
                if np.all(np.isfinite(sample)) and np.all(np.linalg.eigvalsh(sample) > 0):
                    covariance = _OPTIMAL_SCALE / block.indices.size * sample
                else:  # stuck: no movement to learn from yet; try smaller steps
                    covariance = 0.25 * block.initial
            result.append(covariance)
        return result

    def run_segment(self, x, state: str, proposals, iterations: int):
        """``iterations`` iterations of one chain from ``x`` with the random state ``state`` (JSON text).

        Returns (points (iterations, ndim), log posteriors, acceptance fractions, new state).
        """
        rng = np.random.Generator(np.random.PCG64())
        rng.bit_generator.state = json.loads(state)
        x = np.array(x, dtype=float)
        points = np.empty((iterations, x.size))
        values, acceptance = np.empty(iterations), np.empty(iterations)
        for i in range(iterations):
            values[i], acceptance[i] = self.iterate(x, rng, proposals)
            points[i] = x
        return points, values, acceptance, json.dumps(rng.bit_generator.state)


def _truncated_inverse_gamma(rng, shape: float, scale: float, low: float, high: float):
    """One draw of an inverse gamma (``shape``, ``scale``) truncated to [low, high], as ``scale / g`` with g a
    gamma(``shape``) variable truncated to [scale / high, scale / low], drawn by inverting the regularised
    incomplete gamma function (scipy.special); None where that range holds no representable probability."""
    from scipy import special

    if scale <= 0:
        return None
    lower, upper = special.gammainc(shape, scale / high), special.gammainc(shape, scale / low)
    if not upper > lower:
        return None
    value = scale / float(special.gammaincinv(shape, rng.uniform(lower, upper)))
    return value if low <= value <= high and np.isfinite(value) else None


def _slice_step(log_density, start: float, rng, low: float, high: float, width: float = 1.0, steps: int = 30) -> float:
    """One slice-sampling update of a one-dimensional density from ``start`` (Neal 2003: stepping out by
    ``width``, then shrinking), within [low, high]."""
    level = log_density(start) + np.log(rng.uniform())
    left = start - width * rng.uniform()
    right = left + width
    for _ in range(steps):
        if left <= low or log_density(left) < level:
            break
        left -= width
    for _ in range(steps):
        if right >= high or log_density(right) < level:
            break
        right += width
    left, right = max(left, low), min(right, high)
    for _ in range(200):
        trial = rng.uniform(left, right)
        if log_density(trial) >= level:
            return float(trial)
        if trial < start:
            left = trial
        else:
            right = trial
    return float(start)


def why_gibbs_cannot_sample(model):
    """What of ``model`` the sampler has no step for, with the way out, or None when it can sample it: not for a
    deterministic signal (a continuous wave, a memory step), a free jitter, nor free white noise beside jitter or
    per observing system (its white step has neither yet)."""
    if model.section.binary or model.section.memory:
        return 'a continuous wave or a memory step; use sampler = "ensemble"'
    per_system = any(p.systems for p in model.dataset.pulsars)
    if model.jitter_mode == "free" or (model.section.white == "free" and (per_system or model.jitter_mode != "none")):
        return ('free white noise per observing system or epoch jitter yet; hold them (white = "injected", '
                'jitter = "injected") or use sampler = "ensemble"')
    return None


def adaptation_steps(section) -> int:
    """Iterations of adaptation: :data:`ADAPTATION`, or a quarter of ``max_steps`` (whole segments) if less."""
    return min(ADAPTATION, section.max_steps // 4 // SEGMENT * SEGMENT)


def random_state(seed: int, chain: int) -> str:
    """The initial random state (JSON) of chain number ``chain``: independent streams from one seed."""
    return json.dumps(stream(seed, "gibbs", f"chain {chain}").bit_generator.state)


# --- the run -------------------------------------------------------------------

_WORKER = {}


def _start_worker(model):
    import signal

    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C stops the run after the current segment
    _WORKER["sampler"] = GibbsSampler(model)


def _segment_in_worker(x, state, proposals, iterations):
    return _WORKER["sampler"].run_segment(x, state, proposals, iterations)


def _starting_points(model, chains: int, seed: int) -> np.ndarray:
    """One prior draw per chain with a finite posterior (from its own random stream)."""
    points = np.empty((chains, model.ndim))
    for c in range(chains):
        rng = stream(seed, "gibbs start", f"chain {c}")
        for _ in range(200):
            trial = model.sample_prior(rng, 1)[0]
            if np.isfinite(model(trial)):
                break
        else:
            raise InputError("the posterior is zero at 200 prior draws; check the priors and fixed values", "fit")
        points[c] = trial
    return points


class _Step:
    """What the chains file stores per step (emcee's State has the same fields)."""

    def __init__(self, coords, log_prob, random_state):
        self.coords, self.log_prob, self.random_state = coords, log_prob, random_state


def run_gibbs(sampler: GibbsSampler, backend, chains: int, resume: bool, pool_size: int, interrupted: list, bar,
              adaptation: int) -> None:
    """Advance ``chains`` independent Gibbs chains in ``backend`` until the convergence rule holds,
    ``max_steps``, or an interrupt; segments of the chains run in ``pool_size`` processes when above 1.

    After each segment the file gets the steps and, in its ``random_state`` attribute, the step count, every
    chain's generator state and the autocorrelation times of the convergence check, so that a resumed run
    makes the same decisions as an uninterrupted one.
    """
    from ptares.inference.samplers.convergence import assess, steps_needed

    model = sampler.model
    section = model.section
    backend.flush_only_on_request()  # whole segments at a time, with their random states
    chain = _Growing(chains, model.ndim)
    if resume:
        chain.extend(backend.get_chain())
        saved = json.loads(backend.saved_random_state())
        if saved.get("step") != backend.iteration:
            raise InputError("was cut off while being written (its random state is not that of its last step); "
                             "move it away to start afresh", str(backend.filename))
        points, states = chain.array[-1].copy(), saved["chains"]
        verdict = assess(chain.array, section.autocorr_factor, section.effective_samples, True, section.burn,
                         min(adaptation, backend.iteration), previous_tau=saved["checked_with"])
        previous = saved["tau"]
        if verdict.converged and backend.iteration >= adaptation:
            bar.update(backend.iteration)
            return
    else:
        points, states = _starting_points(model, chains, section.seed), [random_state(section.seed, c) for c in range(chains)]
        previous = np.inf
    done = int(backend.iteration)
    bar.update(done)
    pool = None
    if pool_size > 1 and chains > 1:
        import multiprocessing
        from concurrent.futures import ProcessPoolExecutor

        from ptares.threads import current_threads, worker_initializer

        pool = ProcessPoolExecutor(min(pool_size, chains), mp_context=multiprocessing.get_context("spawn"),
                                   initializer=worker_initializer, initargs=(current_threads(), _start_worker, model))
    try:
        while done < section.max_steps and not interrupted:
            iterations = min(SEGMENT - done % SEGMENT, section.max_steps - done)
            adapted = min(done // SEGMENT * SEGMENT, adaptation)
            proposals = [sampler.proposals(chain.array[:adapted, c] if adapted else None) for c in range(chains)]
            jobs = [(points[c], states[c], proposals[c], iterations) for c in range(chains)]
            results = _run_segments(pool, sampler, jobs)
            segment = np.stack([r[0] for r in results], axis=1)  # (iterations, chains, ndim)
            values = np.stack([r[1] for r in results], axis=1)
            acceptance = np.stack([r[2] for r in results], axis=1)
            states = [r[3] for r in results]
            chain.extend(segment)
            points = segment[-1].copy()
            done += iterations
            verdict = assess(chain.array, section.autocorr_factor, section.effective_samples, True, section.burn,
                             min(adaptation, done), previous_tau=previous)
            record = json.dumps({"step": done, "chains": states, "checked_with": previous,
                                 "tau": float(np.max(verdict.autocorr_time))})
            backend.grow(iterations, None)  # emcee's own sizing, as its sampler does before each run
            for i in range(iterations):
                backend.save_step(_Step(segment[i], values[i], record if i == iterations - 1 else None), acceptance[i])
            backend.flush()
            previous = float(np.max(verdict.autocorr_time))
            bar.update(iterations)
            bar.total = min(section.max_steps, steps_needed(verdict, done, chains, section.autocorr_factor,
                                                            section.effective_samples, adaptation))
            bar.refresh()
            if verdict.converged and done >= adaptation:
                break
    finally:
        if pool is not None:
            pool.shutdown(cancel_futures=True)


def _run_segments(pool, sampler, jobs) -> list:
    """Each chain's segment, here or in the pool's processes."""
    if pool is None:
        return [sampler.run_segment(*job) for job in jobs]
    from concurrent.futures.process import BrokenProcessPool

    try:
        return list(pool.map(_segment_in_worker, *zip(*jobs)))
    except BrokenProcessPool:
        raise InputError("a worker process died (out of memory?); the chains so far are kept, "
                         "rerun the same command to continue", "fit.workers") from None


class _Growing:
    """A (steps, chains, parameters) array that grows by doubling, so appending segments stays cheap."""

    def __init__(self, chains: int, ndim: int):
        self._data = np.empty((1024, chains, ndim))
        self._size = 0

    def extend(self, rows: np.ndarray) -> None:
        needed = self._size + len(rows)
        if needed > len(self._data):
            grown = np.empty((max(needed, 2 * len(self._data)),) + self._data.shape[1:])
            grown[: self._size] = self._data[: self._size]
            self._data = grown
        self._data[self._size: needed] = rows
        self._size = needed

    @property
    def array(self) -> np.ndarray:
        return self._data[: self._size]
