"""FFT conventions: round trips and agreement with scipy.fft's n-dimensional transforms."""

import numpy as np
import pytest
import scipy.fft as sfft

from icgen import _fft


@pytest.mark.parametrize("n", [8, 16, 48])
@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_axis_by_axis_transforms_match_scipy_and_round_trip(n, dtype):
    rng = np.random.default_rng(n)
    field = rng.standard_normal((n, n, n)).astype(dtype)
    spec = _fft.forward_real_3d(field)
    # Forward: equals scipy.fft.rfftn(norm="forward") to round-off (scale applied once at the end).
    eps = np.finfo(dtype).eps
    ref = sfft.rfftn(field, norm="forward")
    assert spec.dtype == ref.dtype
    np.testing.assert_allclose(spec, ref, rtol=0, atol=20 * eps * np.abs(ref).max())
    # Inverse: bit-identical to scipy.fft.irfftn (same one-dimensional passes in the same order).
    np.testing.assert_array_equal(_fft.inverse_real_3d(spec.copy(), n), sfft.irfftn(spec, s=(n, n, n), norm="forward"))
    # Round trip (scipy.fft docs: irfftn(rfftn(x)) == x to round-off).
    back = _fft.inverse_real_3d(spec.copy(), n)
    np.testing.assert_allclose(back, field, rtol=0, atol=50 * eps * np.abs(field).max())


def test_forward_normalisation_of_a_plane_wave():
    # norm="forward": delta(x) = sum_k delta_k exp(i k.x), so cos(2 pi m x / L) has delta_k = 1/2 at +-m.
    n, m = 16, 3
    x = np.arange(n)
    field = np.broadcast_to(np.cos(2 * np.pi * m * x / n)[:, None, None], (n, n, n)).copy()
    spec = _fft.forward_real_3d(field)
    assert spec[m, 0, 0] == pytest.approx(0.5, abs=1e-14)
    assert spec[n - m, 0, 0] == pytest.approx(0.5, abs=1e-14)
    spec[m, 0, 0] = spec[n - m, 0, 0] = 0
    assert np.abs(spec).max() < 1e-14
