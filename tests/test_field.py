"""Gaussian phases: the counter-based generator, symmetry, resolution and slab independence, statistics."""

import numpy as np
import pytest
import scipy.fft as sfft
from scipy import stats

from icgen import _kernels, field
from icgen.errors import ParameterError

import reference


# Random123 known-answer vectors for philox4x32 10 (Salmon et al. 2011; the
# `kat_vectors` file of the Random123 distribution): counter, key -> output.
PHILOX_KAT = [
    ((0, 0, 0, 0), (0, 0), (0x6627E8D5, 0xE169C58D, 0xBC57AC4C, 0x9B00DBD8)),
    ((0xFFFFFFFF,) * 4, (0xFFFFFFFF,) * 2, (0x408F276D, 0x41C83B0E, 0xA20BC7C6, 0x6D5451FD)),
    ((0x243F6A88, 0x85A308D3, 0x13198A2E, 0x03707344), (0xA4093822, 0x299F31D0),
     (0xD16CFE09, 0x94FDCCEB, 0x5001E420, 0x24126EA1)),
]


@pytest.mark.parametrize("counter,key,want", PHILOX_KAT)
def test_philox_known_answers(counter, key, want):
    # Reference: Random123 kat_vectors, philox4x32 10 (published known-answer tests).
    got = _kernels._philox_block(np.array(counter, dtype=np.uint64), np.array(key, dtype=np.uint64))
    assert tuple(int(x) for x in got) == want
    assert tuple(reference.philox4x32_10(counter, key)) == want


def test_white_noise_matches_slow_reference():
    # Reference: tests/reference.py, the documented rule mode by mode in plain Python.
    for seed, fixed, paired in ((7, False, False), (2**40 + 3, True, False), (99, False, True)):
        fast = field.white_noise(seed, 8, fixed, paired)
        slow = reference.white_noise(seed, 8, fixed, paired)
        np.testing.assert_array_equal(fast, slow)


def test_hermitian_symmetry_and_zeroed_modes():
    n = 16
    w = field.white_noise(3, n)
    # A real field's rfftn reproduces the half-spectrum exactly only if it was Hermitian
    # (scipy.fft docs: irfftn discards the anti-Hermitian part); tolerance: float64 round-off.
    x = sfft.irfftn(w, s=(n, n, n), norm="forward")
    np.testing.assert_allclose(sfft.rfftn(x, norm="forward"), w, rtol=0, atol=1e-14)
    # kz = 0 plane: W(-kx, -ky, 0) = conj W(kx, ky, 0) exactly.
    plane = w[:, :, 0]
    neg = plane[(-np.arange(n)) % n][:, (-np.arange(n)) % n]
    np.testing.assert_array_equal(neg, np.conj(plane))
    # k = 0 and every Nyquist plane are zero (documented treatment in icgen.field).
    assert w[0, 0, 0] == 0
    assert np.all(w[n // 2] == 0) and np.all(w[:, n // 2] == 0) and np.all(w[:, :, n // 2] == 0)


def test_modes_shared_between_resolutions_are_identical():
    # The amplitude depends on (seed, kx, ky, kz) only: 32^3 and 64^3 (and 64^3 and 128^3 on a
    # sub-cube) agree bit for bit on every mode below the coarse grid's Nyquist frequency.
    for n1, n2 in ((32, 64), (16, 128)):
        a = field.white_noise(11, n1)
        b = field.white_noise(11, n2)
        k = np.arange(-n1 // 2 + 1, n1 // 2)
        i1, i2 = k % n1, k % n2
        np.testing.assert_array_equal(a[np.ix_(i1, i1, np.arange(n1 // 2))],
                                      b[np.ix_(i2, i2, np.arange(n1 // 2))])


def test_slabs_compose_to_the_full_field():
    n = 24
    full = field.white_noise(5, n)
    parts = [field.white_noise(5, n, ix0=a, ix1=b) for a, b in ((0, 7), (7, 8), (8, 24))]
    np.testing.assert_array_equal(np.concatenate(parts), full)


def test_fixed_amplitude_and_paired():
    n = 16
    g = field.white_noise(8, n)
    f = field.white_noise(8, n, fixed_amplitude=True)
    p = field.white_noise(8, n, paired=True)
    live = g != 0
    # Angulo & Pontzen (2016): fixed amplitude keeps the phases, sets |W| = 1.
    np.testing.assert_allclose(np.abs(f[live]), 1.0, rtol=2e-16 * 4)
    np.testing.assert_allclose(np.angle(f[live]), np.angle(g[live]), atol=1e-12)
    # Paired: phases shifted by pi, W -> -W exactly.
    np.testing.assert_array_equal(p, -g)


def test_fixed_amplitude_modes_match_power_exactly():
    n, box = 16, 200.0
    power = lambda k: 1e4 * k**-1.5  # noqa: E731  (demo power law)
    m = field.linear_density_modes(power, 4, n, box, fixed_amplitude=True)
    idx = np.fft.fftfreq(n, 1.0 / n)
    kz = np.arange(n // 2 + 1)
    k = 2 * np.pi / box * np.sqrt(idx[:, None, None] ** 2 + idx[None, :, None] ** 2 + kz[None, None, :] ** 2)
    live = m.delta_k != 0
    # |delta_k|^2 = P(k) / L^3 mode by mode (icgen.field conventions); float64 round-off.
    np.testing.assert_allclose(np.abs(m.delta_k[live]) ** 2, power(k[live]) / box**3, rtol=1e-13)


def _independent_mask(n):
    """Canonical modes of the half-spectrum (each +-k pair once), Nyquist planes excluded."""
    idx = np.fft.fftfreq(n, 1.0 / n).astype(int)
    kx, ky, kz = np.meshgrid(idx, idx, np.arange(n // 2 + 1), indexing="ij")
    canon = (kz > 0) | (ky > 0) | ((ky == 0) & (kx > 0))
    nyq = (kx == -n // 2) | (ky == -n // 2) | (kz == n // 2)
    return canon & ~nyq, np.sqrt(kx**2 + ky**2 + kz**2)


@pytest.mark.parametrize("n", [64, 128])
@pytest.mark.parametrize("seed", [1, 2, 3])
def test_realisation_power_is_consistent_with_cosmic_variance(n, seed):
    # Each independent mode has |delta_k|^2 / (P/L^3) ~ Exponential(1) for a Gaussian field;
    # in a bin of N modes the estimate P_hat/P has mean 1 and variance 1/N, so
    # chi2 = sum_b N_b (P_hat_b/P_b - 1)^2 follows chi-square with n_bins dof (central
    # limit theorem; bins hold >= 20 modes). Accept if p > 0.001 (the criterion).
    box = 500.0
    power = lambda k: 2e4 * (k / 0.05) / (1 + (k / 0.05) ** 2.5)  # noqa: E731  (demo shape)
    m = field.linear_density_modes(power, seed, n, box)
    mask, kint = _independent_mask(n)
    kk = kint[mask] * 2 * np.pi / box
    ratio = np.abs(m.delta_k[mask]) ** 2 / (power(kk) / box**3)
    edges = np.arange(1.0, n // 2, 1.0)
    which = np.digitize(kint[mask], edges)
    chi2, dof = 0.0, 0
    for b in range(1, edges.size):
        sel = which == b
        nb = sel.sum()
        if nb < 20:
            continue
        chi2 += nb * (ratio[sel].mean() - 1.0) ** 2
        dof += 1
    p = stats.chi2.sf(chi2, dof)
    assert p > 1e-3, (chi2, dof, p)
    # Amplitudes are exponential with unit mean: Kolmogorov-Smirnov against scipy.stats.expon.
    assert stats.kstest(ratio, "expon").pvalue > 1e-3


def test_bad_grid_and_seed_are_refused():
    with pytest.raises(ParameterError, match="even"):
        field.white_noise(1, 15)
    with pytest.raises(ParameterError, match="seed"):
        field.white_noise(-1, 8)
