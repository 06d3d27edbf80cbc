"""Start-redshift advice: grid variances against brute force and against realisations."""

import numpy as np
import pytest

from icgen import background, field, lpt, particles, start
from icgen.cosmology import Cosmology

COSMO = Cosmology(h=0.7, omega_m=0.3, omega_b=0.045)


@pytest.fixture(scope="module")
def bg():
    return background.solve(COSMO)


def _power(k):
    return 2e4 * (k / 0.05) / (1 + (k / 0.05) ** 2.6)  # demo shape, (Mpc/h)^3


def test_mode_multiplicity_counts_the_grid():
    # Brute force: histogram of kx^2 + ky^2 + kz^2 over all populated integer wavevectors.
    for n in (8, 16, 30):
        k = np.arange(-n // 2 + 1, n // 2)
        m = (k[:, None, None] ** 2 + k[None, :, None] ** 2 + k[None, None, :] ** 2).ravel()
        want = np.bincount(m, minlength=3 * (n // 2) ** 2 + 1)
        np.testing.assert_array_equal(start.mode_multiplicity(n), want)


def test_grid_variances_match_a_realisation(bg):
    # Parseval with the icgen.field conventions: the realisation's variance of delta and of the
    # displacement have expectations sum P/L^3 and sum P/(k^2 L^3) over the populated modes.
    # Each independent pair (k, -k) contributes 2 w |W|^2 with |W|^2 ~ Exponential(1), so the
    # fractional scatter of one realisation is sqrt(2 sum w^2)/sum w (sum over all modes);
    # the mean of 3 seeds must lie within 4 of those standard errors.
    n, box = 64, 300.0
    var_d, var_psi = start.grid_variances(_power, n, box)
    mult = start.mode_multiplicity(n)[1:]
    k = field.mode_wavenumbers(n, box)[1:]
    w_d, w_psi = _power(k) / box**3, _power(k) / (k**2 * box**3)
    frac_d = np.sqrt(2 * np.sum(mult * w_d**2)) / np.sum(mult * w_d) / np.sqrt(3)
    frac_psi = np.sqrt(2 * np.sum(mult * w_psi**2)) / np.sum(mult * w_psi) / np.sqrt(3)
    ratios_d, ratios_psi = [], []
    for seed in (1, 2, 3):
        m = field.linear_density_modes(_power, seed, n, box)
        dens = np.fft.irfftn(np.asarray(m.delta_k), s=(n, n, n), axes=(0, 1, 2)) * n**3
        ratios_d.append(dens.var() / var_d)
        d = lpt.displacements(m, order=1)
        ratios_psi.append(np.sum(d.psi_1.var(axis=(1, 2, 3))) / var_psi)
    assert abs(np.mean(ratios_d) - 1) < 4 * frac_d, (ratios_d, frac_d)
    assert abs(np.mean(ratios_psi) - 1) < 4 * frac_psi, (ratios_psi, frac_psi)


def test_fixed_amplitude_realisation_has_exactly_the_expected_variance(bg):
    # Fixed amplitude (|delta_k|^2 = P/L^3 exactly): Parseval makes the grid variance equal to
    # the expectation to round-off.
    n, box = 32, 200.0
    var_d, var_psi = start.grid_variances(_power, n, box)
    m = field.linear_density_modes(_power, 5, n, box, fixed_amplitude=True)
    dens = np.fft.irfftn(np.asarray(m.delta_k), s=(n, n, n), axes=(0, 1, 2)) * n**3
    assert dens.var() == pytest.approx(var_d, rel=1e-12)
    d = lpt.displacements(m, order=1)
    g = particles.StartGrowth(a=1.0, D1=1.0, f1=1.0, D2=0.0, f2=2.0, H=70.0, h=0.7)
    stats = particles.at(g, d, 0.3, np.float64).stats["displacement"]
    assert 3 * stats["rms"] ** 2 == pytest.approx(var_psi, rel=1e-12)


def test_advice_recommendations_are_consistent(bg):
    n, box = 64, 100.0
    adv = start.advise(_power, bg, box, n)
    # The statistics scale with D1(z) (linear theory).
    d1 = bg.D1(1 / (1 + adv.z))
    np.testing.assert_allclose(adv.sigma_delta / d1, adv.sigma_delta[0] / d1[0], rtol=1e-12)
    # At the recommended start the binding criterion equals its threshold (common-practice rule).
    for order, limit in ((1, adv.limits["sigma_limit_1lpt"]), (2, adv.limits["sigma_limit_2lpt"])):
        z = adv.z_start(order)
        sig = adv.sigma_delta[0] * bg.D1(1 / (1 + z)) / d1[0]
        disp = adv.rms_displacement[0] * bg.D1(1 / (1 + z)) / d1[0]
        assert sig <= limit * (1 + 1e-9) and disp <= adv.limits["displacement_limit"] * (1 + 1e-9)
        assert max(sig / limit, disp / adv.limits["displacement_limit"]) == pytest.approx(1.0, rel=1e-8)
    # Second order tolerates a later (lower-z) start (Crocce, Pueblas & Scoccimarro 2006).
    assert adv.z_start_2lpt <= adv.z_start_1lpt
    # A finer grid (more small-scale power) needs an earlier start.
    assert start.advise(_power, bg, box, 128).z_start_1lpt > adv.z_start_1lpt
