"""The particles of a realisation carry the input P(k) within cosmic variance (measured with icgen.power)."""

import numpy as np
import pytest
from scipy import stats

from icgen import background, field, lpt, particles, power, spectrum
from icgen.cosmology import Cosmology

COSMO = Cosmology(h=0.7, omega_m=0.3, omega_b=0.045, n_s=0.96, sigma_8=0.8)


@pytest.fixture(scope="module")
def setup():
    bg = background.solve(COSMO)
    return bg, spectrum.from_eisenstein_hu(COSMO, bg)


@pytest.mark.parametrize("n,box,seeds", [(64, 256.0, (1, 2, 3)), (128, 400.0, (4,))])
def test_particle_power_matches_target_within_cosmic_variance(setup, n, box, seeds):
    # First-order particles at z = 49: their P(k), measured by CIC with interlacing on a mesh of
    # 2n (icgen.power; shot noise not subtracted, a perturbed lattice has far less than Poisson
    # noise), against the target in bins of width k_f up to half the particle Nyquist wavenumber,
    # where the lattice and aliasing are negligible. For Gaussian modes the bin estimate has
    # variance P^2/N_modes (independent modes, +-k once; Feldman, Kaiser & Peacock 1994), so
    # sum (P_hat - P)^2 / (P^2/N) is chi-square with n_bins dof (p > 0.001, the test).
    bg, pk = setup
    a = 1.0 / 50.0
    g = particles.StartGrowth.from_background(bg, a)
    for seed in seeds:
        modes = field.linear_density_modes(lambda k: pk.P(k, 0.0), seed, n, box)
        disp = lpt.displacements(modes, order=1)
        parts = particles.at(g, disp, COSMO.omega_m, np.float64, write_ids=False)
        ps = power.measure(parts.position, box, 2 * n, scheme="cic", interlace=True, subtract_shot_noise=False)
        sel = np.isfinite(ps.k) & (ps.k < 0.5 * np.pi * n / box) & (ps.n_modes > 0)
        # Target: P averaged over each bin's modes (power.mode_average), at z = 49 with our D1.
        target = power.mode_average(lambda k: pk.P(k, 1.0 / a - 1.0), box, 2 * n)[sel]
        chi2 = float(np.sum(ps.n_modes[sel] * (ps.power[sel] / target - 1.0) ** 2))
        dof = int(sel.sum())
        p = stats.chi2.sf(chi2, dof)
        assert p > 1e-3, (seed, chi2, dof, p)
