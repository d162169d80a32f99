"""The marginalised likelihood against the brute-force dense Gaussian density (scipy)."""

import numpy as np
import pytest
import scipy.linalg
import scipy.stats
from conftest import small_config

from ptares.inference.likelihood import PATTERN_FLOOR, Likelihood, NotPositiveDefinite
from ptares.simulation.simulate import simulate

YEAR = 365.25 * 86400.0


def psd(f, amplitude, gamma):
    """A^2 / (12 pi^2) f_yr^-3 (f / f_yr)^-gamma (Jenet et al. 2006)."""
    return amplitude**2 / (12 * np.pi**2) * YEAR**3 * (f * YEAR) ** (-gamma)


def sine_cosine(times, span, count):
    k = np.arange(1, count + 1)
    return np.hstack([np.sin(2 * np.pi * np.outer(times, k) / span), np.cos(2 * np.pi * np.outer(times, k) / span)])


def correlations(data, correlated):
    """Gamma_ab: the Hellings–Downs curve written out here (Hellings & Downs 1983) with separations
    from astropy, 1 on the diagonal; the identity for an uncorrelated process; a monopole or
    dipole (common practice) with the likelihood's stated diagonal floor, as ``correlated``."""
    from astropy import units as u
    from astropy.coordinates import SkyCoord

    coords = SkyCoord([p.ra for p in data.pulsars] * u.rad, [p.dec for p in data.pulsars] * u.rad)
    angle = np.array([[a.separation(b).rad for b in coords] for a in coords])
    x = (1 - np.cos(angle)) / 2
    with np.errstate(divide="ignore", invalid="ignore"):
        hd = np.where(x > 0, 1.5 * x * np.log(np.where(x > 0, x, 1.0)) - x / 4 + 0.5, 0.5)
    if correlated == "monopole":  # clock-like: 1 everywhere, plus the stated floor on the diagonal
        return np.ones_like(angle) + PATTERN_FLOOR * np.eye(len(coords))
    if correlated == "dipole":  # cos of the separation, plus the floor
        return np.cos(angle) + PATTERN_FLOOR * np.eye(len(coords))
    gamma_ab = hd if correlated else np.zeros((len(coords),) * 2)
    np.fill_diagonal(gamma_ab, 1.0)
    return gamma_ab


def brute_force(data, scale, quadrature, red_amplitude, red_spectral_index, amplitude, gamma, harmonics, red_harmonics, correlated):
    """log N(G^T r; 0, G^T C G) with scipy.stats.multivariate_normal: the full covariance C of all
    pulsars (white, red, common process with Gamma = Hellings–Downs or identity), projected onto
    the complement of each pulsar's timing model (G from numpy's SVD).  The Hellings–Downs curve is
    written out here (Hellings & Downs 1983) with separations from astropy."""
    span = data.span
    gamma_ab = correlations(data, correlated)
    f = np.arange(1, harmonics + 1) / span
    common = np.concatenate([psd(f, amplitude, gamma)] * 2) / span
    fr = np.arange(1, red_harmonics + 1) / span
    bases, red_bases, projections = [], [], []
    for p in data.pulsars:
        t = (p.mjd - data.start_mjd) * 86400.0
        bases.append(sine_cosine(t, span, harmonics))
        red_bases.append(sine_cosine(t, span, red_harmonics))
        u = np.linalg.svd(p.design_matrix, full_matrices=True)[0]
        projections.append(u[:, p.design_matrix.shape[1]:])
    sizes = np.cumsum([0] + [p.mjd.size for p in data.pulsars])
    C = np.zeros((sizes[-1], sizes[-1]))
    for a, p in enumerate(data.pulsars):
        for b in range(len(data.pulsars)):
            block = gamma_ab[a, b] * (bases[a] * common) @ bases[b].T
            if a == b:
                red = np.concatenate([psd(fr, red_amplitude[a], red_spectral_index[a])] * 2) / span
                block += np.diag((scale[a] * p.errors) ** 2 + quadrature[a] ** 2) + (red_bases[a] * red) @ red_bases[a].T
            C[sizes[a] : sizes[a + 1], sizes[b] : sizes[b + 1]] = block
    G = scipy.linalg.block_diag(*projections)
    r = np.concatenate([p.residuals for p in data.pulsars])
    return scipy.stats.multivariate_normal(mean=np.zeros(G.shape[1]), cov=G.T @ C @ G).logpdf(G.T @ r)


@pytest.fixture(scope="module")
def data():
    config = small_config(
        array={"random": {"count": 3}},
        observing={"start": 53000, "span": 6.0, "cadence": 30.0, "cadence_jitter": 5.0, "toa_error": 0.3,
                   "toa_error_scatter": 0.2},
        noise={"red": {"amplitude": 3e-15, "harmonics": 6}},
        gwb={"amplitude": 5e-15, "harmonics": 5},
        timing_model={"fit": ["offset", "spin_frequency", "spin_down", "yearly"]},
    )
    return simulate(config)


@pytest.mark.parametrize("correlated", [False, True, "monopole", "dipole"])
@pytest.mark.parametrize("red_amplitude", [[2e-15, 1e-15, 5e-15], [2e-15, 0.0, 5e-15]])
@pytest.mark.parametrize("harmonics, red_harmonics", [(5, 6), (6, 4)])
def test_likelihood_equals_dense_gaussian_density(data, correlated, red_amplitude, harmonics, red_harmonics):
    """1e-8 relative, for both common-process models, with and without red noise in every pulsar
    (all pulsars factorised in one batch, or in batches of pulsars with the same columns)."""
    scale = np.array([1.1, 0.9, 1.3])
    quadrature = np.array([1e-7, 2e-7, 0.0])
    red_spectral_index = np.array([3.0, 4.0, 5.0])
    likelihood = Likelihood(data, harmonics, red_harmonics, correlated)
    ours = likelihood(scale, quadrature, np.array(red_amplitude), red_spectral_index, 6e-15, 4.0)
    reference = brute_force(data, scale, quadrature, red_amplitude, red_spectral_index, 6e-15, 4.0, harmonics, red_harmonics, correlated)
    assert ours == pytest.approx(reference, rel=1e-8, abs=0)


def test_likelihood_with_signal_subtracts_it(data):
    """A deterministic signal s: the likelihood of r with s equals that of r - s with none (dense check)."""
    likelihood = Likelihood(data, 5, 6, True)
    rng = np.random.default_rng(1)
    signal = [1e-7 * rng.standard_normal(p.mjd.size) for p in data.pulsars]
    args = (np.ones(3), np.zeros(3), np.full(3, 1e-15), np.full(3, 4.0), 5e-15, 13 / 3)
    with_signal = likelihood(*args, signal=signal)
    for p, s in zip(data.pulsars, signal):
        p.residuals = p.residuals - s
    try:
        reference = brute_force(data, np.ones(3), np.zeros(3), np.full(3, 1e-15), np.full(3, 4.0), 5e-15, 13 / 3, 5, 6, True)
    finally:
        for p, s in zip(data.pulsars, signal):
            p.residuals = p.residuals + s
    assert with_signal == pytest.approx(reference, rel=1e-8, abs=0)


def test_degenerate_timing_model_is_reported_not_nan(data):
    """Two identical design-matrix columns: refused with a clear error when the likelihood is built."""
    import copy

    from ptares.errors import InputError

    broken = copy.deepcopy(data)
    p = broken.pulsars[0]
    p.design_matrix = np.column_stack([p.design_matrix, p.design_matrix[:, 0]])
    with pytest.raises(InputError, match="rank-deficient"):
        Likelihood(broken, 5, 6, False)


def test_non_positive_definite_point_is_zero_probability_with_a_warning(data, monkeypatch):
    """Where a covariance fails to factorise the posterior is -inf (not NaN) and the user is told once."""
    from ptares.errors import PhysicsWarning
    from ptares.inference.model import FitModel
    from ptares.inputs.config import FitSection

    model = FitModel(data, FitSection())

    def failing(*args, **kwargs):
        raise NotPositiveDefinite("Phi is not positive definite")

    monkeypatch.setattr(model.likelihood, "__call__", failing)
    monkeypatch.setattr(type(model.likelihood), "__call__", lambda self, *a, **k: failing())
    with pytest.warns(PhysicsWarning, match="not positive definite"):
        assert model(np.array([-14.0, 4.0])) == -np.inf
    assert model(np.array([-14.5, 4.0])) == -np.inf


@pytest.mark.parametrize("red_amplitude", [[2e-15, 1e-15, 5e-15], [2e-15, 0.0, 5e-15], [0.0, 0.0, 0.0]])
@pytest.mark.parametrize("harmonics, red_harmonics", [(3, 6), (6, 3), (5, 5)])
def test_hellings_downs_likelihood_with_red_noise_eliminated_equals_dense_gaussian_density(data, red_amplitude, harmonics,
                                                                                            red_harmonics):
    """The Schur-complement route (red-noise frequencies above the common ones eliminated per pulsar) against
    scipy.stats.multivariate_normal of G^T r with the full covariance (numpy linear algebra for G): 1e-8 relative,
    with more, fewer and as many red-noise frequencies as common ones, and with some or all red amplitudes zero."""
    scale = np.array([1.1, 0.9, 1.3])
    quadrature = np.array([1e-7, 2e-7, 0.0])
    red_spectral_index = np.array([3.0, 4.0, 5.0])
    likelihood = Likelihood(data, harmonics, red_harmonics, True)
    ours = likelihood(scale, quadrature, np.array(red_amplitude), red_spectral_index, 6e-15, 4.0)
    reference = brute_force(data, scale, quadrature, red_amplitude, red_spectral_index, 6e-15, 4.0, harmonics, red_harmonics, True)
    assert ours == pytest.approx(reference, rel=1e-8, abs=0)


def interleaved(times, span, count):
    """Columns sin(2 pi k t / T), cos(2 pi k t / T) for k = 1..count, in that order."""
    return sine_cosine(times, span, count)[:, np.ravel(np.column_stack([np.arange(count), count + np.arange(count)]))]


def dense_conditional(data, scale, quadrature, red_amplitude, red_spectral_index, amplitude, gamma, harmonics, red_harmonics,
                      correlated):
    """Precision Sigma = blockdiag(F^T N'^-1 F) + Phi^-1 and d = F^T N'^-1 r of all pulsars' coefficients, built
    densely with numpy: N'^-1 = G (G^T N G)^-1 G^T with G from the SVD of the design matrix, Phi written out per
    pulsar pair and column.  Returns Sigma and d over the columns with nonzero prior variance, and their mask (P, size)."""
    span, count = data.span, len(data.pulsars)
    size = 2 * max(harmonics, red_harmonics)
    k = np.arange(size) // 2 + 1
    common = np.where(k <= harmonics, psd(k / span, amplitude, gamma) / span, 0.0)
    red = np.array([np.where(k <= red_harmonics, psd(k / span, a, g) / span, 0.0) for a, g in zip(red_amplitude, red_spectral_index)])
    gamma_ab = correlations(data, correlated)
    phi = np.zeros((count * size, count * size))
    for a in range(count):
        for b in range(count):
            phi[a * size:(a + 1) * size, b * size:(b + 1) * size] = np.diag(gamma_ab[a, b] * common + (a == b) * red[a])
    blocks, d = [], []
    for a, p in enumerate(data.pulsars):
        F = interleaved((p.mjd - data.start_mjd) * 86400.0, span, size // 2)
        G = np.linalg.svd(p.design_matrix, full_matrices=True)[0][:, p.design_matrix.shape[1]:]
        noise = np.diag((scale[a] * p.errors) ** 2 + quadrature[a] ** 2)
        projected = G @ np.linalg.solve(G.T @ noise @ G, G.T)
        blocks.append(F.T @ projected @ F)
        d.append(F.T @ projected @ p.residuals)
    kept = np.diag(phi) > 0
    sigma = scipy.linalg.block_diag(*blocks)[np.ix_(kept, kept)] + np.linalg.inv(phi[np.ix_(kept, kept)])
    return sigma, np.concatenate(d)[kept], kept.reshape(count, size)


@pytest.mark.parametrize("correlated, harmonics, red_harmonics", [(False, 3, 5), (True, 3, 5), (True, 4, 2)])
def test_drawn_coefficients_follow_the_dense_gaussian_conditional(data, correlated, harmonics, red_harmonics):
    """2500 draws (fixed seed) against N(Sigma^-1 d, Sigma^-1) built densely with numpy (dense_conditional), one
    pulsar without red noise: each coefficient's mean within 4 standard errors of Sigma^-1 d; whitened by the numpy
    Cholesky factor of Sigma the draws have identity covariance, each entry within 5 standard errors (sqrt(2/n) on
    the diagonal, sqrt(1/n) off it); columns with zero prior variance are exactly 0."""
    scale, quadrature = np.array([1.1, 0.9, 1.3]), np.array([1e-7, 2e-7, 0.0])
    red_amplitude, red_spectral_index = np.array([2e-15, 0.0, 5e-15]), np.array([3.0, 4.0, 5.0])
    args = (scale, quadrature, red_amplitude, red_spectral_index, 6e-15, 4.0)
    sigma, d, kept = dense_conditional(data, *args, harmonics, red_harmonics, correlated)
    mean = np.linalg.solve(sigma, d)
    covariance = np.linalg.inv(sigma)
    likelihood = Likelihood(data, harmonics, red_harmonics, correlated)
    rng = np.random.default_rng(2024)
    count = 2500
    draws = np.array([likelihood.draw_coefficients(rng, *args) for _ in range(count)])  # (n, P, size)
    assert draws.shape == (count, 3, likelihood.size)
    assert np.all(draws[:, ~kept] == 0.0)
    kept_draws = draws.reshape(count, -1)[:, kept.ravel()]
    error = np.sqrt(np.diag(covariance) / count)
    assert np.all(np.abs(kept_draws.mean(axis=0) - mean) < 4 * error)
    whitened = (kept_draws - mean) @ np.linalg.cholesky(sigma)  # rows L^T (a - mean) ~ N(0, I)
    empirical = whitened.T @ whitened / count
    tolerance = 5 * np.where(np.eye(len(d), dtype=bool), np.sqrt(2 / count), np.sqrt(1 / count))
    assert np.all(np.abs(empirical - np.eye(len(d))) < tolerance)


def test_memory_check_counts_only_the_coupled_core(data, monkeypatch):
    """The dense Hellings–Downs core spans only the common-process columns: many red-noise frequencies pass where
    the correlated core of as many common frequencies is refused, naming fit.harmonics (bytes counted by hand)."""
    import ptares.inference.likelihood as module
    from ptares.errors import InputError

    monkeypatch.setattr(module, "MEMORY_LIMIT", 50_000)  # 3 pulsars: (3 * 2 * 20)^2 * 8 = 115200 bytes > limit
    Likelihood(data, 5, 20, True)  # core (3 * 10)^2 * 8 = 7200, per pulsar 3 * 40^2 * 8 = 38400
    with pytest.raises(InputError) as refused:
        Likelihood(data, 20, 5, True)
    assert refused.value.where == "fit.harmonics"


class ScriptedNormals:
    """A stand-in for numpy's Generator whose standard normals are given in advance, in order of use."""

    def __init__(self, values):
        self.values, self.used = np.asarray(values, dtype=float), 0

    def standard_normal(self, size=None):
        count = int(np.prod(size)) if size is not None else 1
        values = self.values[self.used : self.used + count]
        assert values.size == count, "asked for more normals than the coefficients"
        self.used += count
        return values.reshape(size) if size is not None else float(values[0])


@pytest.mark.parametrize("correlated, harmonics, red_harmonics", [(False, 3, 5), (True, 3, 5), (True, 4, 2)])
def test_drawn_coefficients_are_exactly_the_dense_gaussian_conditional(data, correlated, harmonics, red_harmonics):
    """A draw is an affine map of the standard normals it uses, one per coefficient with nonzero prior variance:
    with all of them zero it must give the mean Sigma^-1 d, and its columns (a unit vector each, less the mean)
    must give the covariance Sigma^-1, both from the dense numpy construction (dense_conditional): 1e-8 of the
    posterior standard deviation, 1e-9 of the largest covariance."""
    scale, quadrature = np.array([1.1, 0.9, 1.3]), np.array([1e-7, 2e-7, 0.0])
    red_amplitude, red_spectral_index = np.array([2e-15, 0.0, 5e-15]), np.array([3.0, 4.0, 5.0])
    args = (scale, quadrature, red_amplitude, red_spectral_index, 6e-15, 4.0)
    sigma, d, kept = dense_conditional(data, *args, harmonics, red_harmonics, correlated)
    covariance = np.linalg.inv(sigma)
    likelihood = Likelihood(data, harmonics, red_harmonics, correlated)
    count = len(d)

    def draw(normals):
        rng = ScriptedNormals(normals)
        coefficients = likelihood.draw_coefficients(rng, *args)
        assert rng.used == count
        return coefficients.ravel()[kept.ravel()]

    mean = draw(np.zeros(count))
    assert np.all(np.abs(mean - np.linalg.solve(sigma, d)) < 1e-8 * np.sqrt(np.diag(covariance)))
    columns = np.array([draw(unit) for unit in np.eye(count)]) - mean
    assert np.max(np.abs(columns.T @ columns - covariance)) < 1e-9 * np.max(np.abs(covariance))
