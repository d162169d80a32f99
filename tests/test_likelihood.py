"""The marginalised likelihood against the brute-force dense Gaussian density (scipy)."""

import numpy as np
import pytest
import scipy.linalg
import scipy.stats
from conftest import small_config

from ptares.inference.likelihood import Likelihood, NotPositiveDefinite
from ptares.simulation.simulate import simulate

YEAR = 365.25 * 86400.0


def psd(f, amplitude, gamma):
    """A^2 / (12 pi^2) f_yr^-3 (f / f_yr)^-gamma (Jenet et al. 2006)."""
    return amplitude**2 / (12 * np.pi**2) * YEAR**3 * (f * YEAR) ** (-gamma)


def sine_cosine(times, span, count):
    k = np.arange(1, count + 1)
    return np.hstack([np.sin(2 * np.pi * np.outer(times, k) / span), np.cos(2 * np.pi * np.outer(times, k) / span)])


def brute_force(data, scale, quadrature, red_amplitude, red_spectral_index, amplitude, gamma, harmonics, red_harmonics, correlated):
    """log N(G^T r; 0, G^T C G) with scipy.stats.multivariate_normal: the full covariance C of all
    pulsars (white, red, common process with Gamma = Hellings–Downs or identity), projected onto
    the complement of each pulsar's timing model (G from numpy's SVD).  The Hellings–Downs curve is
    written out here (Hellings & Downs 1983) with separations from astropy."""
    from astropy import units as u
    from astropy.coordinates import SkyCoord

    span = data.span
    coords = SkyCoord([p.ra for p in data.pulsars] * u.rad, [p.dec for p in data.pulsars] * u.rad)
    angle = np.array([[a.separation(b).rad for b in coords] for a in coords])
    x = (1 - np.cos(angle)) / 2
    with np.errstate(divide="ignore", invalid="ignore"):
        hd = np.where(x > 0, 1.5 * x * np.log(np.where(x > 0, x, 1.0)) - x / 4 + 0.5, 0.5)
    gamma_ab = hd if correlated else np.zeros((len(coords),) * 2)
    np.fill_diagonal(gamma_ab, 1.0)
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


@pytest.mark.parametrize("correlated", [False, True])
@pytest.mark.parametrize("red_amplitude", [[2e-15, 1e-15, 5e-15], [2e-15, 0.0, 5e-15]])
@pytest.mark.parametrize("harmonics, red_harmonics", [(5, 6), (6, 4)])
def test_likelihood_equals_dense_gaussian_density(data, correlated, red_amplitude, harmonics, red_harmonics):
    """1e-8 relative, for both common-process models, with and without red noise in every pulsar
    (the batched and the per-pulsar paths)."""
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
