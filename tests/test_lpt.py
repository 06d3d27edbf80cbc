"""Zel'dovich and 2LPT displacements: plane waves in closed form, and the slow reference."""

import numpy as np
import pytest

from icgen import field, lpt

import reference


def _modes_from_half(delta_half, n, box):
    return field.DensityModes(delta_k=delta_half, n=n, box_size=box)


def _plane_waves(n, box, waves):
    """Half-spectrum of delta(q) = sum A cos(2 pi m . q / L) for waves [(A, (mx, my, mz)), ...]."""
    dk = np.zeros((n, n, n // 2 + 1), dtype=np.complex128)
    for amp, (mx, my, mz) in waves:
        # cos = (e^{ikq} + e^{-ikq})/2: both members of the pair that lie in the half-spectrum.
        for s in (1, -1):
            kx, ky, kz = s * mx, s * my, s * mz
            if kz < 0:  # the half-spectrum implies the conjugate of a kz > 0 mode
                continue
            dk[kx % n, ky % n, kz] += amp / 2
    return dk


def test_single_plane_wave_first_order_is_the_analytic_sinusoid():
    # delta = A cos(k x): div psi_1 = -delta gives psi_1,x = -(A/k) sin(k x), psi_1,y = psi_1,z = 0
    # (Zel'dovich 1970); in one dimension the Zel'dovich solution is exact, so psi_2 = 0
    # (the 2LPT source S = sum_{i>j} phi_ii phi_jj - phi_ij^2 vanishes identically).
    n, box, amp, m = 32, 64.0, 0.3, 3
    dk = _plane_waves(n, box, [(amp, (m, 0, 0))])
    d = lpt.displacements(_modes_from_half(dk, n, box), order=2)
    q = np.arange(n) * box / n
    k = 2 * np.pi * m / box
    want = -(amp / k) * np.sin(k * q)
    # float64 FFT round-off: a few 1e-16 relative to the amplitude A/k.
    np.testing.assert_allclose(d.psi_1[0], np.broadcast_to(want[:, None, None], (n, n, n)),
                               rtol=0, atol=1e-14 * amp / k)
    assert np.max(np.abs(d.psi_1[1:])) < 1e-14 * amp / k
    assert np.max(np.abs(d.psi_2)) < 1e-14 * (amp / k) * amp


def test_two_orthogonal_plane_waves_second_order_closed_form():
    """delta = A cos(k1 x) + B cos(k2 y).

    Derivation: lap phi_1 = delta gives phi_1 = -A cos(k1 x)/k1^2 - B cos(k2 y)/k2^2, so
    phi_xx = A cos(k1 x), phi_yy = B cos(k2 y), phi_zz = phi_xy = phi_xz = phi_yz = 0 and
    S = phi_xx phi_yy + phi_xx phi_zz + phi_yy phi_zz - phi_xy^2 - phi_xz^2 - phi_yz^2
      = A B cos(k1 x) cos(k2 y).
    lap phi_2 = S with S an eigenfunction of the Laplacian (eigenvalue -(k1^2 + k2^2)) gives
    phi_2 = -A B cos(k1 x) cos(k2 y)/(k1^2 + k2^2), and psi_2 = grad phi_2:
    psi_2,x = A B k1 sin(k1 x) cos(k2 y)/(k1^2 + k2^2),
    psi_2,y = A B k2 cos(k1 x) sin(k2 y)/(k1^2 + k2^2), psi_2,z = 0.
    (Conventions of Crocce, Pueblas & Scoccimarro 2006, eqs. 4-5, with x = q + D1 psi_1 + D2 psi_2.)
    """
    n, box = 32, 100.0
    a_amp, b_amp, m1, m2 = 0.2, 0.15, 2, 5
    dk = _plane_waves(n, box, [(a_amp, (m1, 0, 0)), (b_amp, (0, m2, 0))])
    d = lpt.displacements(_modes_from_half(dk, n, box), order=2)
    q = np.arange(n) * box / n
    k1, k2 = 2 * np.pi * m1 / box, 2 * np.pi * m2 / box
    x, y = q[:, None, None], q[None, :, None]
    scale = a_amp * b_amp / (k1**2 + k2**2)
    want_x = scale * k1 * np.sin(k1 * x) * np.cos(k2 * y) * np.ones((1, 1, n))
    want_y = scale * k2 * np.cos(k1 * x) * np.sin(k2 * y) * np.ones((1, 1, n))
    tol = 1e-13 * scale * max(k1, k2)  # float64 round-off through three FFT passes
    np.testing.assert_allclose(d.psi_2[0], want_x, rtol=0, atol=tol)
    np.testing.assert_allclose(d.psi_2[1], want_y, rtol=0, atol=tol)
    assert np.max(np.abs(d.psi_2[2])) < tol


def test_fast_displacements_match_slow_reference_on_a_random_field():
    # Reference: tests/reference.py (full complex FFTs on a full k mesh, textbook formulas).
    n, box = 16, 50.0
    m = field.linear_density_modes(lambda k: 30.0 * k**-2.0, 21, n, box)
    d = lpt.displacements(m, order=2)
    psi1, psi2 = reference.lpt_fields(np.array(m.delta_k), n, box)
    np.testing.assert_allclose(d.psi_1, psi1, rtol=0, atol=1e-12 * np.abs(psi1).max())
    np.testing.assert_allclose(d.psi_2, psi2, rtol=0, atol=1e-12 * np.abs(psi2).max())


def test_first_order_divergence_is_minus_delta():
    # Zel'dovich: div psi_1 = -delta (spectral derivative of the grid field; exact for the
    # band-limited field up to round-off).
    n, box = 16, 40.0
    m = field.linear_density_modes(lambda k: 10.0 * k**-1.0, 2, n, box)
    d = lpt.displacements(m, order=1)
    assert d.psi_2 is None and d.order == 1
    idx = np.fft.fftfreq(n, 1.0 / n) * 2 * np.pi / box
    kz = np.arange(n // 2 + 1) * 2 * np.pi / box
    div_k = sum(1j * kv * np.fft.rfftn(d.psi_1[i]) / n**3
                for i, kv in enumerate((idx[:, None, None], idx[None, :, None], kz[None, None, :])))
    np.testing.assert_allclose(div_k, -np.asarray(m.delta_k), rtol=0, atol=1e-13 * np.abs(m.delta_k).max())


def test_order_is_checked():
    m = field.linear_density_modes(lambda k: k**-1.0, 1, 8, 10.0)
    with pytest.raises(ValueError, match="lpt_order"):
        lpt.displacements(m, order=3)
