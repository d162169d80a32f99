"""White noise per observing system and epoch jitter (PHYSICS.md, "Radio frequency and chromatic noise",
common practice): sigma_i^2 -> (s_b sigma_i)^2 + q_b^2 for a TOA of system b, and a variance J_b^2 shared by
the TOAs of one epoch (covariance U diag(J^2) U^T), checked against the dense Gaussian density (scipy)."""

import numpy as np
import pytest
import scipy.linalg
import scipy.stats
from conftest import small_config

from ptares.dataset import epoch_indices
from ptares.inference.likelihood import Likelihood
from ptares.simulation.simulate import simulate

SYSTEMS = [{"name": "Lo", "frequencies": [700.0, 900.0], "white": {"scale": 1.3, "jitter": 0.4}},
           {"name": "Hi", "frequencies": [1400.0, 1600.0, 1800.0], "white": {"quadrature": 0.2, "jitter": 0.1}}]


def systems_config(count=3, **noise):
    return small_config(
        array={"random": {"count": count}},
        observing={"start": 53000.0, "span": 4.0, "cadence": 40.0, "cadence_jitter": 3.0, "toa_error": 0.3,
                   "systems": SYSTEMS},
        noise={"red": {"amplitude": 2e-15, "harmonics": 5}, **noise},
        gwb={"amplitude": 3e-15, "harmonics": 4},
    )


def dense_log_density(data, scale, quadrature, jitter, red, common):
    """log N(G^T r; 0, G^T C G): C written TOA by TOA (white per system, jitter per epoch as the indicator
    outer product, red and common power laws on sin/cos of k/T: A^2/(12 pi^2) f_yr^-3 (f/f_yr)^-gamma / T)."""
    year = 365.25 * 86400.0

    def columns(t, k):
        phase = 2 * np.pi * np.outer(t, np.arange(1, k + 1)) / data.span
        return np.hstack([np.sin(phase), np.cos(phase)])

    def variances(k, amplitude, gamma):
        f = np.arange(1, k + 1) / data.span
        return np.tile(amplitude**2 / (12 * np.pi**2) * year**3 * (f * year) ** -gamma / data.span, 2)

    blocks, projections, residuals = [], [], []
    for a, p in enumerate(data.pulsars):
        t = (p.mjd - data.start_mjd) * 86400.0
        which = np.array([p.systems.index(s) for s in p.system])
        C = np.diag((scale[a][which] * p.errors) ** 2 + quadrature[a][which] ** 2)
        epochs = epoch_indices(p.mjd, p.system)
        same = epochs[:, None] == epochs[None, :]
        C += same * (jitter[a][which][:, None] ** 2)  # J of the epoch's system (one system per epoch)
        F = columns(t, red[a][0])
        C += (F * variances(*red[a])) @ F.T
        F = columns(t, common[0])
        C += (F * variances(*common)) @ F.T  # uncorrelated common process: a block per pulsar
        blocks.append(C)
        projections.append(np.linalg.svd(p.design_matrix)[0][:, p.design_matrix.shape[1]:])
        residuals.append(p.residuals)
    G = scipy.linalg.block_diag(*projections)
    C = scipy.linalg.block_diag(*blocks)
    r = np.concatenate(residuals)
    return scipy.stats.multivariate_normal(mean=np.zeros(G.shape[1]), cov=G.T @ C @ G).logpdf(G.T @ r)


@pytest.mark.parametrize("jitter_on", [True, False])
def test_jitter_and_system_white_noise_likelihood_equals_the_dense_gaussian_density(jitter_on):
    data = simulate(systems_config(), seed=3)
    assert all(p.systems == ["Hi", "Lo"] for p in data.pulsars)  # systems in order of first use
    scale = [np.array([1.1, 1.4]), np.array([0.9, 1.0]), np.array([1.2, 0.8])]
    quadrature = [np.array([2e-7, 0.0]), np.array([0.0, 1e-7]), np.array([5e-8, 5e-8])]
    jitter = [np.array([3e-7, 1e-7]), np.array([0.0, 4e-7]), np.array([2e-7, 2e-7])]
    if not jitter_on:
        jitter = [np.zeros(2)] * 3
    red_amplitude, red_index = np.array([2e-15, 1e-15, 3e-15]), np.array([3.0, 4.0, 5.0])
    likelihood = Likelihood(data, 4, 5, False)
    ours = likelihood(scale, quadrature, red_amplitude, red_index, 3e-15, 13 / 3, white_jitter=jitter)
    dense = dense_log_density(data, scale, quadrature, jitter, [(5, red_amplitude[a], red_index[a]) for a in range(3)],
                              (4, 3e-15, 13 / 3))
    assert ours == pytest.approx(dense, rel=1e-9)
    if jitter_on:
        assert abs(ours - likelihood(scale, quadrature, red_amplitude, red_index, 3e-15, 13 / 3)) > 1.0


def test_epochs_group_the_sub_bands_of_one_system_and_observation():
    """Simulated sub-bands share their epoch's MJD: each epoch holds the sub-bands of one system."""
    p = simulate(systems_config(count=1), seed=1).pulsars[0]
    epochs = p.epochs()
    for e in range(epochs.max() + 1):
        members = epochs == e
        assert len(set(p.system[members])) == 1 and len(set(p.mjd[members])) == 1
        assert members.sum() == (2 if p.system[members][0] == "Lo" else 3)
    # by the rule: TOAs of one system less than an hour apart are one epoch, an hour or more apart are two
    assert list(epoch_indices(np.array([0.0, 0.01, 0.05, 0.2]), np.array(["a", "a", "a", "a"]))) == [0, 0, 0, 1]
    assert list(epoch_indices(np.array([0.0, 0.0]), np.array(["b", "a"]))) == [1, 0]


def test_jitter_and_system_white_noise_have_their_injected_variances():
    """Over 300 realisations the injected white noise of a TOA of system b has variance (s_b sigma)^2 + q_b^2
    and the jitter J_b^2, shared exactly within an epoch (within 4 standard errors of a variance estimate,
    sqrt(2 / (n - 1)) relative, Gaussian approximation)."""
    config = systems_config(count=1)
    white, jitter = {"Lo": [], "Hi": []}, {"Lo": [], "Hi": []}
    for seed in range(300):
        p = simulate(config, seed=seed).pulsars[0]
        for system in ("Lo", "Hi"):
            here = np.flatnonzero(p.system == system)
            white[system].append(p.injected["white"][here[0]] / p.errors[here[0]] if system == "Lo"
                                 else p.injected["white"][here[0]])
            jitter[system].append(p.injected["jitter"][here[0]])
            assert np.all(p.injected["jitter"][here[: (2 if system == "Lo" else 3)]] == p.injected["jitter"][here[0]])
    expected = {"white Lo": 1.3**2, "white Hi": 0.3e-6**2 + 0.2e-6**2, "jitter Lo": 0.4e-6**2, "jitter Hi": 0.1e-6**2}
    measured = {"white Lo": np.var(white["Lo"], ddof=1), "white Hi": np.var(white["Hi"], ddof=1),
                "jitter Lo": np.var(jitter["Lo"], ddof=1), "jitter Hi": np.var(jitter["Hi"], ddof=1)}
    for key, value in expected.items():
        assert abs(measured[key] / value - 1) < 4 * np.sqrt(2 / 299), (key, measured[key], value)


def test_a_fit_recovers_each_systems_jitter(tmp_path):
    """One pulsar, its jitter free per observing system (ensemble sampler), the white noise held at each
    system's injected scale and quadrature: every injected jitter lies in its 95% credible interval and the
    chain converged; parameters are named by pulsar and system."""
    from ptares.inference.model import FitModel
    from ptares.inference.samplers import run_sampler
    from ptares.inference.samplers.chains import summarise
    from ptares.inputs.config import FitSection

    config = small_config(
        array={"random": {"count": 1}},
        observing={"start": 53000.0, "span": 6.0, "cadence": 20.0, "toa_error": 0.3, "systems": SYSTEMS},
        gwb=None,
    )
    data = simulate(config, seed=8)
    name = data.pulsars[0].name
    section = FitSection(common="none", red="none", jitter="free", max_steps=8000, seed=1)
    model = FitModel(data, section)
    assert model.names == [f"white_lg_jitter@{name}:Hi", f"white_lg_jitter@{name}:Lo"]
    assert model.values[f"white_scale@{name}:Lo"] == 1.3 and model.values[f"white_lg_quadrature@{name}:Hi"] == np.log10(0.2e-6)
    summary = summarise(model, run_sampler(model, tmp_path / "c.h5"))
    assert summary["converged"]
    truth = {f"white_lg_jitter@{name}:Hi": np.log10(0.1e-6), f"white_lg_jitter@{name}:Lo": np.log10(0.4e-6)}
    for parameter, value in truth.items():
        low, high = summary["parameters"][parameter]["interval95"]
        assert low < value < high, (parameter, low, value, high)
    low, high = summary["parameters"][f"white_lg_jitter@{name}:Lo"]["interval95"]
    assert high - low < 0.5, (low, high)  # Lo's jitter (0.4 us beside 0.39 us of white noise) is measured


@pytest.mark.statistical
def test_the_optimal_statistic_noise_model_carries_system_white_noise_and_jitter():
    """120 realisations of 8 pulsars without a background: with each system's white noise and jitter in the
    noise model (from the injection) the quoted sigma of A^2 equals its scatter within 3 x 1/sqrt(2(n-1))
    (relative error of a standard deviation from n draws, Gaussian approximation) and the mean is within 3
    standard errors of zero; with the pulsar-level white noise alone, the quoted sigma is far too small."""
    import dataclasses

    from ptares.correlation.fourier import fourier_products
    from ptares.correlation.noise import noise_from_dataset
    from ptares.correlation.pairs import optimal_statistic, overlap, pair_correlations

    config = systems_config(count=8).model_copy(update={"gwb": None})
    full, partial = [], []
    for seed in range(120):
        data = simulate(config, seed=seed)
        noise = noise_from_dataset(data)
        positions = np.array([p.position for p in data.pulsars])
        for model, out in ((noise, full), (dataclasses.replace(noise, toa_white=(), toa_jitter=()), partial)):
            pairs = pair_correlations(fourier_products(data, model, 4, 13 / 3), positions)
            statistic = optimal_statistic(pairs, overlap(pairs, "hellings-downs"))
            out.append((statistic["amplitude2"], statistic["sigma"]))
    tolerance = 3 / np.sqrt(2 * 119)
    values, sigmas = np.array(full).T
    assert abs(values.std(ddof=1) / sigmas.mean() - 1) < tolerance, (values.std(ddof=1), sigmas.mean())
    assert abs(values.mean()) < 3 * values.std(ddof=1) / np.sqrt(values.size)
    values, sigmas = np.array(partial).T
    assert values.std(ddof=1) / sigmas.mean() > 1 + 3 * tolerance


@pytest.mark.parametrize("with_jitter", [True, False])
def test_sums_over_epochs_equal_the_toa_by_toa_products(with_jitter):
    """Sub-bands sharing their epoch's time take the route through sums over epochs; it gives the products of
    the route TOA by TOA (which the dense checks above and in test_chromatic.py cover) to 1e-9, with chromatic
    columns, per-system white noise and jitter."""
    config = systems_config(dispersion={"amplitude": 1e-14, "harmonics": 4}, scattering={"amplitude": 2e-15, "harmonics": 3})
    data = simulate(config, seed=6)
    likelihood = Likelihood(data, 4, 5, "hellings-downs", chromatic=(("dispersion", 4, 2.0), ("scattering", 3, 4.4)))
    assert all(p.epoch_blocks is not None for p in likelihood.pulsars)
    arguments = dict(white_scale=[np.array([1.1, 1.4])] * 3, white_quadrature=[np.array([2e-7, 0.0])] * 3,
                     red_amplitude=np.full(3, 2e-15), red_spectral_index=np.full(3, 4.0), amplitude=3e-15, gamma=4.0,
                     chromatic={"dispersion": (np.full(3, 1e-14), np.full(3, 3.0)),
                                "scattering": (np.full(3, 2e-15), np.full(3, 4.0))},
                     white_jitter=[np.array([3e-7, 1e-7])] * 3 if with_jitter else None)
    by_epoch = likelihood(**arguments)
    for p in likelihood.pulsars:
        p.epoch_blocks = None
    likelihood._white_cache.clear()
    assert by_epoch == pytest.approx(likelihood(**arguments), rel=1e-9)


@pytest.mark.parametrize("common", ["uncorrelated", "hellings-downs"])
def test_gibbs_holds_system_white_noise_and_jitter_and_agrees_with_the_model(common):
    """White noise per observing system and jitter held at the injection, red noise, chromatic noise and the
    common process free: each Gibbs iteration's log posterior equals the model's (whose likelihood is checked
    against the dense density above) at the new point; a free jitter is refused in one line."""
    from ptares.inference.model import FitModel
    from ptares.inference.samplers.gibbs import GibbsSampler
    from ptares.inputs.config import FitSection
    from ptares.errors import InputError

    data = simulate(systems_config(dispersion={"amplitude": 1e-14, "harmonics": 4}), seed=4)
    model = FitModel(data, FitSection(common=common, red="free", dispersion="free", red_harmonics=5,
                                      chromatic_harmonics=4, harmonics=4))
    assert model.jitter_mode == "injected"
    sampler = GibbsSampler(model)
    rng = np.random.default_rng(1)
    x = np.array([model.values[n] if np.isfinite(model.values[n]) else -15.0 for n in model.names])
    proposals = sampler.proposals()
    for _ in range(3):
        value, _ = sampler.iterate(x, rng, proposals)
        assert value == pytest.approx(model(x), rel=1e-9, abs=1e-6)
    with pytest.raises(InputError, match="fit.sampler"):
        GibbsSampler(FitModel(data, FitSection(jitter="free", sampler="gibbs")))


def test_the_noise_stage_keeps_a_pulsars_per_system_settings():
    """`ptares noise` fits each pulsar alone: it keeps that pulsar's fixed values of its observing systems' white
    noise and jitter, and drops other pulsars'."""
    from ptares.campaign.noise_stage import _single_pulsar_section
    from ptares.inputs.config import FitSection

    section = FitSection(fixed={"white_scale@Aa:Lo": 1.2, "white_scale@Bb:Lo": 1.0, "white_lg_jitter": -7.0},
                         pulsar_noise_quantities=("white_lg_jitter",))
    assert _single_pulsar_section(section, "Aa").fixed == {"white_scale@Aa:Lo": 1.2, "white_lg_jitter": -7.0}
