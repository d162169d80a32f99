"""The numba synthesis kernel against its plain numpy twin."""

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from ptares.simulation.kernels import synthesise, synthesise_reference


@settings(max_examples=25, deadline=None)
@given(
    rows=st.integers(1, 5),
    per_row=st.integers(1, 300),
    harmonics=st.integers(1, 120),
    seed=st.integers(0, 2**32 - 1),
)
def test_kernel_equals_numpy_twin(rows, per_row, harmonics, seed):
    """Relative agreement 1e-12 (scaled by the sum of |coefficients|, the size of the largest possible value)."""
    rng = np.random.default_rng(seed)
    span = 15 * 3.15576e7
    times = np.sort(rng.uniform(0, span, rows * per_row))
    owner = rng.integers(0, rows, times.size)
    sine, cosine = rng.normal(size=(2, rows, harmonics)) * 1e-7
    fast = synthesise(times, owner, 1 / span, sine, cosine)
    slow = synthesise_reference(times, owner, 1 / span, sine, cosine)
    scale = np.abs(sine).sum(axis=1) + np.abs(cosine).sum(axis=1)
    np.testing.assert_array_less(np.abs(fast - slow), 1e-12 * scale[owner])


def test_kernel_single_harmonic_is_a_sinusoid():
    t = np.linspace(0, 10, 50)
    out = synthesise(t, np.zeros(50, dtype=int), 0.1, np.array([[2.0]]), np.array([[3.0]]))
    np.testing.assert_allclose(out, 2 * np.sin(2 * np.pi * 0.1 * t) + 3 * np.cos(2 * np.pi * 0.1 * t), atol=1e-14)


def test_kernel_empty_input():
    assert synthesise(np.zeros(0), np.zeros(0, dtype=int), 1.0, np.zeros((1, 3)), np.zeros((1, 3))).size == 0
