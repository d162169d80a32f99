"""Plane gravitational waves of any profile, and the timing residuals they leave.

A plane wave from direction ``s`` with polarisation angle ``psi`` is two functions of time,
``h+(t)`` and ``hx(t)``, in the basis of :func:`ptares.physics.sky.polarisation_basis`.
The redshift of pulsar ``p`` at distance ``L`` is (PHYSICS.md; Detweiler 1979)

    z(t) = F+ [h+(t) - h+(t - D)] + Fx [hx(t) - hx(t - D)],   D = (L / c)(1 - s.p),

with the antenna patterns ``F+``, ``Fx`` of :func:`ptares.physics.sky.antenna_patterns` and the
pulsar term at the retarded time ``t - D``.  Our residual is ``r(t) = integral_0^t z dt'``, time
``t`` in seconds from the array's first epoch, so with ``H`` an antiderivative of ``h``

    r(t) = F+ [H+(t) - H+(0) - H+(t - D) + H+(-D)] + Fx [...],

and every profile here is a pair of antiderivatives.  Three kinds:

* :class:`TabulatedProfile`: samples of ``h+``, ``hx`` (a table from elsewhere), interpolated by
  cubic splines whose antiderivatives are exact, so the residual is the redshift of the
  interpolated profile integrated without further error.  A cubic spline with knot spacing
  ``dt`` interpolates a smooth profile to about ``(5/384) dt^4 max|h''''|`` (the bound for a
  spline given its exact end slopes: Hall & Meyer 1976, J. Approx. Theory 16, 105; from memory;
  scipy's not-a-knot ends, which need no slopes, reach about twice that within a few samples of
  the table's ends and a fifth of it inside), so for a sinusoid of frequency ``f`` the
  residual's relative error is of order ``(5/384)(2 pi f dt)^4`` (1e-4 at twenty samples a
  cycle).  A profile with kinks or steps converges more slowly, as ``dt`` or ``dt^2``.
  :meth:`TabulatedProfile.error_estimate` measures the error of the table at hand by
  Richardson's rule over three spacings, which also measures how fast it falls (the tests
  check the estimate against closed forms, smooth and kinked).
* :class:`SineGaussian`: ``h+ = A g(t) cos(2 pi f (t - t0) + phi)``, ``hx = e A g(t) sin(...)``,
  ``g = exp(-(t - t0)^2 / (2 w^2))``; its antiderivative is closed-form through the Faddeeva
  function (:func:`scipy.special.wofz`; the Gaussian integral with a complex shift).
* :class:`MemoryStep`: ``h+ = (A / 2)(1 + tanh((t - t0) / tau))``, ``hx = 0``: the permanent strain
  change of gravitational-wave memory, rising over ``tau``.  Its antiderivative
  ``(A tau / 2) ln(1 + exp(2 (t - t0) / tau))`` tends, as ``tau -> 0``, to the ramp
  ``A (t - t0) Theta(t - t0)`` of a memory step (Favata 2009, ApJ 696, L159; van Haasteren &
  Levin 2010, MNRAS 401, 2372): the Earth-term residual is ``F+ A (t - t0)`` after the step.

Times are seconds from the array's first epoch; strains are dimensionless.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.interpolate import CubicSpline
from scipy.special import wofz

from ptares.physics.sky import pulsar_term_delays, wave_patterns

__all__ = ["TabulatedProfile", "SineGaussian", "MemoryStep", "OutsideTable", "sample_profile", "plane_wave_residuals"]

#: Largest Richardson divisor: for a smooth profile the error falls as dt^4, 16 times for each halving of dt.
_RICHARDSON = 15.0


class OutsideTable(ValueError):
    """Times asked of a :class:`TabulatedProfile` fall outside its table (and it does not hold its end values)."""

    def __init__(self, low: float, high: float, table: tuple):
        self.low, self.high, self.table = low, high, table
        super().__init__(f"times {low:.6g} s to {high:.6g} s fall outside the table ({table[0]:.6g} s to {table[1]:.6g} s)")


class TabulatedProfile:
    """``h+``, ``hx`` sampled at increasing ``times`` (s), as cubic splines (not-a-knot ends).

    ``hold``: beyond the table the strain keeps its end values (a burst that has died away, a
    memory that has settled), so the antiderivative continues as a straight line; otherwise a
    time outside the table raises :class:`OutsideTable`.
    """

    def __init__(self, times, plus, cross, hold: bool = False):
        self.times = np.asarray(times, dtype=float)
        self.plus = np.asarray(plus, dtype=float)
        self.cross = np.asarray(cross, dtype=float)
        if self.times.ndim != 1 or self.times.size < 4:
            raise ValueError("a tabulated profile needs at least four samples")
        if not np.all(np.diff(self.times) > 0):
            raise ValueError("the times of a tabulated profile must increase")
        self.hold = hold
        self._splines = [CubicSpline(self.times, h, bc_type="not-a-knot") for h in (self.plus, self.cross)]
        self._integrals = [s.antiderivative() for s in self._splines]

    @property
    def extent(self) -> tuple:
        return float(self.times[0]), float(self.times[-1])

    def _check(self, t: np.ndarray) -> None:
        if self.hold or t.size == 0:
            return
        low, high = float(np.min(t)), float(np.max(t))
        if low < self.times[0] or high > self.times[-1]:
            raise OutsideTable(low, high, self.extent)

    def strain(self, t):
        """``(h+, hx)`` at times ``t`` (s)."""
        t = np.asarray(t, dtype=float)
        self._check(t)
        inside = np.clip(t, self.times[0], self.times[-1])
        return tuple(s(inside) for s in self._splines)

    def integral(self, t):
        """``(H+, Hx)``, antiderivatives of the interpolated profile (zero at the first sample), at ``t`` (s)."""
        t = np.asarray(t, dtype=float)
        self._check(t)
        first, last = self.times[0], self.times[-1]
        inside = np.clip(t, first, last)
        values = []
        for spline, integral in zip(self._splines, self._integrals):
            value = integral(inside)
            # held ends: the strain keeps its end value, so the integral grows linearly beyond the table
            value = value + np.where(t > last, (t - last) * spline(last), 0.0) + np.where(t < first, (t - first) * spline(first), 0.0)
            values.append(value)
        return tuple(values)

    def coarse(self, step: int = 2) -> "TabulatedProfile":
        """The same profile from every ``step``-th sample (the last kept), for :meth:`error_estimate`."""
        keep = np.unique(np.append(np.arange(0, self.times.size, step), self.times.size - 1))
        return TabulatedProfile(self.times[keep], self.plus[keep], self.cross[keep], hold=self.hold)

    def error_estimate(self, residuals_of, fine=None) -> float:
        """Estimated largest error (s) of the residuals ``residuals_of(profile)`` (a callable returning a list of
        arrays) due to interpolating this table, by Richardson's rule over the tables of every sample, every
        other and every fourth.  With ``d1``, ``d2`` the largest changes from one to the next, the error falls
        by ``q = d2 / d1`` each time the spacing halves, so the full table's is ``d1 / (q - 1)``: ``q`` is 16 for
        a smooth profile (``d1 / 15``), smaller for one with kinks or steps; from ``q < 2`` (no convergence to
        speak of) the change ``d1`` itself is returned, and so it is for tables of fewer than 16 samples.
        ``fine``: this table's residuals, when the caller has them already."""
        def change(a, b):
            return max((float(np.max(np.abs(x - y))) for x, y in zip(a, b) if x.size), default=0.0)

        fine = residuals_of(self) if fine is None else fine
        half = residuals_of(self.coarse(2))
        d1 = change(fine, half)
        if self.times.size < 16 or d1 == 0.0:
            return d1
        ratio = change(half, residuals_of(self.coarse(4))) / d1
        return d1 / min(max(ratio - 1.0, 1.0), _RICHARDSON)


@dataclass(frozen=True)
class SineGaussian:
    """A sine-Gaussian burst: ``amplitude`` (strain), central time ``epoch`` (s), Gaussian ``width`` (s,
    the standard deviation of the envelope), ``frequency`` (Hz), ``phase`` (rad) at the centre, and
    ``cross_fraction`` e: ``hx = e A g(t) sin(...)`` (0: plus only; +-1: circular)."""

    amplitude: float
    epoch: float
    width: float
    frequency: float
    phase: float = 0.0
    cross_fraction: float = 0.0

    def strain(self, t):
        u = np.asarray(t, dtype=float) - self.epoch
        envelope = self.amplitude * np.exp(-0.5 * (u / self.width) ** 2)
        angle = 2.0 * np.pi * self.frequency * u + self.phase
        return envelope * np.cos(angle), self.cross_fraction * envelope * np.sin(angle)

    def integral(self, t):
        """Closed form: ``G(x) = integral_-inf^x exp(-u^2 / 2w^2 + i(omega u + phi)) du``
        ``= w sqrt(pi/2) e^(i phi) e^(-x^2/2w^2 + i omega x) w(-B - iX)`` with ``X = x / (w sqrt 2)``,
        ``B = omega w / sqrt 2`` and the Faddeeva function w; for ``X > 0`` the reflection
        ``w(z) = 2 exp(-z^2) - w(-z)`` keeps every factor finite.  ``H+ = A Re G``, ``Hx = e A Im G``."""
        u = np.asarray(t, dtype=float) - self.epoch
        root2w = np.sqrt(2.0) * self.width
        x = u / root2w
        b = 2.0 * np.pi * self.frequency * self.width / np.sqrt(2.0)
        head = np.exp(-x * x + 2j * x * b)  # exp(-X^2 + 2 i X B) = exp(-u^2 / 2w^2 + i omega u)
        negative = x <= 0
        faddeeva = np.where(negative, wofz(-b - 1j * np.where(negative, x, 0.0)), 0.0)
        value = np.where(negative, head * faddeeva,
                         2.0 * np.exp(-b * b) - head * wofz(b + 1j * np.where(negative, 0.0, x)))
        value = value * self.width * np.sqrt(np.pi / 2.0) * np.exp(1j * self.phase)
        return self.amplitude * value.real, self.cross_fraction * self.amplitude * value.imag


@dataclass(frozen=True)
class MemoryStep:
    """A gravitational-wave memory step of ``amplitude`` (strain) at ``epoch`` (s), rising over ``rise_time``
    (s; 0: a sharp step), plus polarisation only (the basis angle sets the rest)."""

    amplitude: float
    epoch: float
    rise_time: float = 0.0

    def strain(self, t):
        u = np.asarray(t, dtype=float) - self.epoch
        if self.rise_time > 0:
            shape = 0.5 * (1.0 + np.tanh(u / self.rise_time))
        else:
            shape = (u >= 0).astype(float)
        return self.amplitude * shape, np.zeros_like(u)

    def integral(self, t):
        """``(A tau / 2) ln(1 + exp(2u / tau))`` (``logaddexp``, exact at any ``u``); the ramp ``A u Theta(u)`` at tau = 0."""
        u = np.asarray(t, dtype=float) - self.epoch
        if self.rise_time > 0:
            ramp = 0.5 * self.rise_time * np.logaddexp(0.0, 2.0 * u / self.rise_time)
        else:
            ramp = np.maximum(u, 0.0)
        return self.amplitude * ramp, np.zeros_like(u)


def sample_profile(profile, start: float, stop: float, step: float, hold: bool = False) -> TabulatedProfile:
    """``profile``'s strain sampled every ``step`` seconds from ``start`` to at least ``stop``, as a table
    (the numerical route, which the tests check against the closed forms)."""
    count = int(np.ceil((stop - start) / step)) + 1
    times = start + step * np.arange(count)
    plus, cross = profile.strain(times)
    return TabulatedProfile(times, plus, cross, hold=hold)


def plane_wave_residuals(profile, times, positions, distances, ra: float, dec: float, polarization: float,
                         pulsar_term: bool = True) -> list:
    """Residuals (s) of a plane wave with ``profile`` (anything with ``integral(t) -> (H+, Hx)``) in pulsars at
    unit vectors ``positions`` (P, 3), ``distances`` (m; read only for the pulsar term), observed at ``times`` (a list of P arrays, s from the
    array's first epoch); ``r(t) = integral_0^t z`` with the pulsar term at the retarded time when asked."""
    fplus, fcross = wave_patterns(positions, ra, dec, polarization)
    delays = pulsar_term_delays(positions, distances, ra, dec) if pulsar_term else None
    origin = profile.integral(np.zeros(1))
    out = []
    for a, t in enumerate(times):
        t = np.asarray(t, dtype=float)
        plus, cross = profile.integral(t)
        plus, cross = plus - origin[0], cross - origin[1]
        if pulsar_term:
            late_plus, late_cross = profile.integral(t - delays[a])
            start_plus, start_cross = profile.integral(np.array([-delays[a]]))
            plus = plus - (late_plus - start_plus)
            cross = cross - (late_cross - start_cross)
        out.append(fplus[a] * plus + fcross[a] * cross)
    return out
