"""Tests of icgen.spectrum: the linear P(k, z), its sources, normalisation and sigma(R).

External references: the Gamma-function closed form of sigma(R) for power laws
(derived below), Eisenstein & Hu (1998) (their equations), colossus
(power_spectrum.modelEisenstein98, Cosmology.matterPowerSpectrum), camb 2.0.5 tables
stored in tests/data (regenerate with tests/data/make_camb_tables.py; camb version and
settings in the file headers), scipy.special.spherical_jn, and exact growth solutions.
"""

import dataclasses
import math
import warnings
from pathlib import Path

import numpy as np
import pytest
from scipy import integrate, special

from icgen import background, spectrum as sp
from icgen.cosmology import PLANCK18, Cosmology
from icgen.errors import ParameterError

DATA = Path(__file__).parent / "data"


@pytest.fixture(scope="module")
def bg18():
    return background.solve(PLANCK18)


@pytest.fixture(scope="module")
def eh18(bg18):
    return sp.from_eisenstein_hu(PLANCK18, bg18)


def read_header_sigma8(path):
    """camb's sigma_8 per redshift from the '# camb sigma_8: z = 0: ..., ...' header line."""
    for line in Path(path).read_text().splitlines():
        if line.startswith("# camb sigma_8:"):
            out = {}
            for item in line.split(":", 1)[1].split(","):
                z, v = item.replace("z =", "").split(":")
                out[float(z)] = float(v)
            return out
    raise AssertionError(f"no camb sigma_8 header in {path}")


# The cosmology of the stored camb tables (tests/data/make_camb_tables.py): Planck 2018
# with massless neutrinos and A_s = 2.1e-9.
CAMB_H = 0.6766
CAMB_COSMO = Cosmology(h=CAMB_H, omega_m=0.3111, omega_b=0.02242 / CAMB_H**2, n_s=0.9665,
                       sigma_8=None, a_s=2.1e-9, t_cmb=2.7255, n_eff=3.046)


@pytest.fixture(scope="module")
def camb_bg():
    return background.solve(CAMB_COSMO)


@pytest.fixture(scope="module")
def camb_pk():
    """k [h/Mpc] and P [(Mpc/h)^3] at z = 0, 2, 49 from the stored camb table."""
    d = np.loadtxt(DATA / "camb_lcdm_pk.txt")
    return d[:, 0], {0.0: d[:, 1], 2.0: d[:, 2], 49.0: d[:, 3]}


# --------------------------------------------------------------------------------------
# Window, primordial spectrum, k range
# --------------------------------------------------------------------------------------
def test_tophat_window_against_spherical_bessel():
    # Reference: W(x) = 3 j_1(x)/x, scipy.special.spherical_jn; W(0) = 1.
    x = np.concatenate([np.geomspace(1e-8, 0.1, 200), np.linspace(0.1, 300.0, 5000)])
    ref = 3.0 * special.spherical_jn(1, x) / x
    np.testing.assert_allclose(sp.tophat_window(x), ref, rtol=1e-12, atol=1e-15)
    assert sp.tophat_window(0.0) == 1.0 and isinstance(sp.tophat_window(0.5), float)


def test_primordial_spectrum_definition():
    # Reference: Delta^2_R = A_s (k/k*)^(n_s - 1 + alpha_s/2 ln(k/k*)), k* = 0.05/Mpc
    # (Planck 2018 X, sec. 2; from memory). d ln Delta^2 / d ln k = n_s - 1 + alpha_s ln(k/k*).
    assert sp.primordial_delta2(0.05, 2.1e-9, 0.96, 0.01) == pytest.approx(2.1e-9, rel=1e-15)
    k = np.geomspace(1e-4, 10, 50)
    d2 = sp.primordial_delta2(k, 2e-9, 0.96, -0.02)
    slope = np.gradient(np.log(d2), np.log(k), edge_order=2)  # exact for a quadratic in ln k
    np.testing.assert_allclose(slope, 0.96 - 1 - 0.02 * np.log(k / 0.05), atol=1e-12)


def test_required_k_range():
    # Definition (issue 3): half the fundamental 2 pi/L and sqrt(3) times the Nyquist pi N/L.
    k_lo, k_hi = sp.required_k_range(100.0, 64)
    assert k_lo == pytest.approx(0.5 * 2 * np.pi / 100.0, rel=1e-15)
    assert k_hi == pytest.approx(np.sqrt(3) * np.pi * 64 / 100.0, rel=1e-15)
    with pytest.raises(ParameterError, match="box_size"):
        sp.required_k_range(-1.0, 64)


# --------------------------------------------------------------------------------------
# sigma(R) for power laws: closed form
# --------------------------------------------------------------------------------------
def sigma2_power_law(A, n, R):
    r"""sigma^2(R) for P = A k^n with a top-hat window, in closed form.

    Derivation (ours). With W(x) = 3 j_1(x)/x and x = kR,

        sigma^2 = (1/2pi^2) int A k^(n+2) W^2(kR) dk = A R^-(n+3)/(2 pi^2) I(n),
        I(n) = 9 int_0^inf x^n j_1(x)^2 dx = (9 pi/2) int_0^inf x^(n-1) J_{3/2}(x)^2 dx,

    using j_1(x) = sqrt(pi/(2x)) J_{3/2}(x). The Weber-Schafheitlin integral
    (DLMF 10.22.57; Gradshteyn & Ryzhik 6.574.2)

        int_0^inf J_mu(t) J_nu(t) t^-lam dt = Gamma(lam) Gamma((mu+nu-lam+1)/2)
            / [2^lam Gamma((lam+nu-mu+1)/2) Gamma((lam+nu+mu+1)/2) Gamma((lam-nu+mu+1)/2)]

    with mu = nu = 3/2, lam = 1 - n (valid for 0 < lam < mu + nu + 1, i.e. -3 < n < 1) gives

        I(n) = (9 pi/2) Gamma(1-n) Gamma((n+3)/2) / [2^(1-n) Gamma(1-n/2)^2 Gamma((5-n)/2)].

    Checks: I(0) = 9 pi/6 (int j_1^2 dx = pi/6), I(-1) = 9/4.
    """
    I = (4.5 * np.pi * special.gamma(1 - n) * special.gamma((n + 3) / 2)
         / (2 ** (1 - n) * special.gamma(1 - n / 2) ** 2 * special.gamma((5 - n) / 2)))
    return A * R ** (-(n + 3)) / (2 * np.pi**2) * I


@pytest.mark.parametrize("n", [-2.5, -1.5, -1.0, -0.5, 0.5])
def test_power_law_closed_form_itself(n):
    # Independent check of the closed form above: direct quadrature of
    # I(n) = int x^(n+2) W^2 dx, with the tail x > X split as W^2 = (9/2)(x^-4 + x^-6)
    # (integrated analytically) + 9 x^-6 [((x^2-1)/2) cos 2x - x sin 2x] (scipy quad
    # with a Fourier weight, QAWF). Tolerance 1e-9: quad's epsabs/epsrel.
    X = 20 * np.pi
    f = lambda x: x ** (n + 2) * sp.tophat_window(x) ** 2  # noqa: E731
    head = integrate.quad(f, 0, X, limit=500, epsabs=0, epsrel=1e-12)[0]
    smooth = 4.5 * (X ** (n - 1) / (1 - n) + X ** (n - 3) / (3 - n))
    cos_part = integrate.quad(lambda x: 4.5 * x ** (n - 4) * (x * x - 1), X, np.inf, weight="cos", wvar=2)[0]
    sin_part = integrate.quad(lambda x: -9.0 * x ** (n - 3), X, np.inf, weight="sin", wvar=2)[0]
    direct = head + smooth + cos_part + sin_part
    closed = sigma2_power_law(1.0, n, 1.0) * 2 * np.pi**2
    assert direct == pytest.approx(closed, rel=1e-9)


def test_power_law_closed_form_special_values():
    # I(0) = 9 int j_1^2 dx = 9 pi/6 (int_0^inf j_l^2 dx = pi/(2(2l+1)); from memory) and
    # I(-1) = 9/4 (elementary).
    assert sigma2_power_law(1.0, 0.0, 1.0) * 2 * np.pi**2 == pytest.approx(1.5 * np.pi, rel=1e-14)
    assert sigma2_power_law(1.0, -1.0, 1.0) * 2 * np.pi**2 == pytest.approx(2.25, rel=1e-14)


@pytest.mark.parametrize("n", [-2.9, -2.5, -2.0, -1.5, -1.0, -0.5, 0.0, 0.5, 0.9])
def test_power_law_sigma_against_closed_form(n, bg18):
    # Reference: closed form sigma2_power_law (derived above). Acceptance asks for
    # 1e-6; the method is designed for < 1e-8 (module notes), which is what we assert.
    cosmo = dataclasses.replace(PLANCK18, sigma_8=0.8)
    pl = sp.from_power_law(n, cosmo, bg18)
    A = math.exp(pl.ln_p0[0] - n * pl.ln_k[0])
    R = np.array([0.01, 0.3, 1.0, 8.0, 50.0, 1000.0])
    exact = np.sqrt(sigma2_power_law(A, n, R))
    np.testing.assert_allclose(pl.sigma(R), exact, rtol=1e-8)
    assert pl.sigma(8.0) == pytest.approx(0.8, rel=1e-12)


def test_power_law_spectrum_is_exact(bg18):
    # Reference: the definition P = A k^n at any k (spline and extrapolation both exact).
    pl = sp.from_power_law(-1.5, PLANCK18, bg18)
    k = np.geomspace(1e-9, 1e7, 101)
    A = pl.P(1.0)
    np.testing.assert_allclose(pl.P(k), A * k**-1.5, rtol=1e-12)


def test_power_law_refuses_bad_input(bg18):
    with pytest.raises(ParameterError, match="-3 < n < 1"):
        sp.from_power_law(1.5, PLANCK18, bg18)
    as_only = dataclasses.replace(PLANCK18, sigma_8=None, a_s=2e-9)
    with pytest.raises(ParameterError, match="sigma_8"):
        sp.from_power_law(-2.0, as_only, background.solve(as_only))


# --------------------------------------------------------------------------------------
# sigma(R) for a realistic spectrum: brute force
# --------------------------------------------------------------------------------------
def brute_force_sigma(spec, R, n=2_000_001):
    """Slow, obviously correct reference: Simpson in ln k on [1e-7, 1e3] h/Mpc.

    The step resolves the window's oscillation (>= 15 points per period up to kR = 8000
    for R = 8); beyond k = 1e3 the integrand ~ Delta^2 (9/2)(kR)^-4 adds < 1e-12.
    Checked converged to < 1e-11 by doubling n.
    """
    lk = np.linspace(np.log(1e-7), np.log(1e3), n)
    k = np.exp(lk)
    f = spec.Delta2(k) * sp.tophat_window(k * R) ** 2
    return math.sqrt(integrate.simpson(f, x=lk))


@pytest.mark.parametrize("R", [0.5, 2.0, 8.0, 40.0, 300.0])
def test_sigma_against_brute_force(eh18, R):
    # Reference: brute_force_sigma (above). Tolerance 1e-8: the accuracy the module
    # documents (the issue asks for 1e-5).
    assert eh18.sigma(R) == pytest.approx(brute_force_sigma(eh18, R), rel=1e-8)


def test_sigma_vectorised_and_growth(eh18, bg18):
    R = np.geomspace(0.1, 100, 12).reshape(3, 4)
    s = eh18.sigma(R)
    assert s.shape == (3, 4)
    np.testing.assert_allclose(s.ravel(), [eh18.sigma(r) for r in R.ravel()], rtol=1e-14)
    assert isinstance(eh18.sigma(8.0), float)
    # sigma(R, z) = sigma(R, 0) D1(z): the module's definition of the z scaling.
    assert eh18.sigma(8.0, 49.0) == pytest.approx(eh18.sigma(8.0) * bg18.D1(1 / 50), rel=1e-14)
    with pytest.raises(ParameterError, match="R = "):
        eh18.sigma([8.0, -1.0])


# --------------------------------------------------------------------------------------
# Eisenstein & Hu (1998)
# --------------------------------------------------------------------------------------
EH_COSMOLOGIES = [
    PLANCK18,
    Cosmology(h=0.7, omega_m=0.3, omega_b=0.045, sigma_8=0.8, n_s=0.96),
    Cosmology(h=0.5, omega_m=1.0, omega_b=0.1, omega_k=0.0, sigma_8=0.6, n_s=1.0),
    Cosmology(h=0.72, omega_m=0.25, omega_b=0.04, sigma_8=0.9, n_s=0.95, t_cmb=2.728),
]


@pytest.mark.parametrize("cosmo", EH_COSMOLOGIES)
def test_eh98_sound_horizon_eq6_is_the_integral(cosmo):
    # EH98 eq. 6 is the closed form of s = int_0^{a_d} c_s d eta in a matter + radiation
    # universe with R = 3 rho_b / (4 rho_gamma) proportional to a (eq. 5, R ~ 1/z, so
    # a_eq = 1/z_eq, a_d = 1/z_d) and c d eta = da / (k_eq sqrt(a_eq/2) sqrt(a + a_eq))
    # (from k_eq^2 = 2 Omega_0 H0^2 / (a_eq c^2), eq. 3). Quadrature of the definition:
    sc = sp.eh98_scales(cosmo)
    a_eq, a_d = 1 / sc.z_eq, 1 / sc.z_d
    integrand = lambda a: 1 / (np.sqrt(3 * (1 + sc.r_eq * a / a_eq))  # noqa: E731
                               * sc.k_eq_mpc * np.sqrt(a_eq / 2) * np.sqrt(a + a_eq))
    s = integrate.quad(integrand, 0, a_d, epsabs=0, epsrel=1e-13)[0]
    assert sc.sound_horizon_mpc == pytest.approx(s, rel=1e-10)


@pytest.mark.parametrize("cosmo", EH_COSMOLOGIES)
def test_eh98_sound_horizon_fit_eq26(cosmo):
    # EH98 state that eq. 26 approximates eq. 6 to 2% for Omega_b h^2 > 0.0125 and
    # 0.025 < Omega_0 h^2 < 0.5 (as quoted in colossus Cosmology.soundHorizon's docstring).
    sc = sp.eh98_scales(cosmo)
    assert sc.omega_b_h2 > 0.0125 and 0.025 < sc.omega_m_h2 < 0.5
    assert sc.sound_horizon_fit_mpc == pytest.approx(sc.sound_horizon_mpc, rel=0.02)


def test_eh98_scales_consistency():
    # EH98 eq. 3: k_eq = (2 Omega_0 H0^2 z_eq)^(1/2) / c; the printed coefficient 7.46e-2
    # is rounded to 3 digits, so agreement to 1e-3.
    for cosmo in EH_COSMOLOGIES:
        sc = sp.eh98_scales(cosmo)
        k_eq = math.sqrt(2 * cosmo.omega_m * sc.z_eq) * cosmo.h / sp.HUBBLE_DISTANCE_MPC_H
        assert sc.k_eq_mpc == pytest.approx(k_eq, rel=1e-3)
        # EH98 eq. 5 with z_eq from eq. 2: R_d / R_eq = z_eq / z_d.
        assert sc.r_d / sc.r_eq == pytest.approx(sc.z_eq / sc.z_d, rel=1e-14)


@pytest.mark.parametrize("cosmo", EH_COSMOLOGIES)
def test_eh98_transfer_against_colossus(cosmo):
    # Reference: colossus power_spectrum.modelEisenstein98 and modelEisenstein98ZeroBaryon
    # (an independent implementation of the same equations). Tolerance 1e-12: round-off.
    from colossus.cosmology import power_spectrum as cps

    k = np.geomspace(1e-5, 1e3, 3000)
    args = (k, cosmo.h, cosmo.omega_m, cosmo.omega_b, cosmo.t_cmb)
    np.testing.assert_allclose(sp.eisenstein_hu_transfer(k, cosmo), cps.modelEisenstein98(*args), rtol=1e-12)
    np.testing.assert_allclose(sp.eisenstein_hu_nowiggle_transfer(k, cosmo),
                               cps.modelEisenstein98ZeroBaryon(*args), rtol=1e-12)


def test_eh98_transfer_limits():
    # EH98: T -> 1 as k -> 0 for both forms (the normalisation of eqs. 16-24 and 29);
    # the no-wiggle form follows the full one through its oscillations: at the BAO
    # scales the ratio stays within the wiggle amplitude (EH98 fig. 3; from memory,
    # common practice to expect a few per cent) and averages to 1 within 1%.
    cosmo = PLANCK18
    k0 = np.array([1e-7, 1e-6])
    np.testing.assert_allclose(sp.eisenstein_hu_transfer(k0, cosmo), 1.0, atol=1e-6)
    np.testing.assert_allclose(sp.eisenstein_hu_nowiggle_transfer(k0, cosmo), 1.0, atol=1e-6)
    k = np.linspace(0.02, 0.4, 4001)
    ratio = sp.eisenstein_hu_transfer(k, cosmo) / sp.eisenstein_hu_nowiggle_transfer(k, cosmo)
    assert np.max(np.abs(ratio - 1)) < 0.1
    assert np.mean(ratio) == pytest.approx(1.0, abs=0.01)


def test_eh98_needs_baryons_and_cmb(bg18):
    no_b = dataclasses.replace(PLANCK18, omega_b=0.0)
    bg = background.solve(no_b)
    with pytest.raises(ParameterError, match="omega_b"):
        sp.from_eisenstein_hu(no_b, bg)
    assert sp.from_eisenstein_hu(no_b, bg, wiggles=False).sigma_8 == pytest.approx(PLANCK18.sigma_8)
    no_cmb = dataclasses.replace(PLANCK18, t_cmb=0.0)
    with pytest.raises(ParameterError, match="t_cmb"):
        sp.eisenstein_hu_transfer(0.1, no_cmb)


@pytest.fixture(scope="module")
def colossus_planck18():
    from colossus.cosmology import cosmology as cc

    c = PLANCK18
    params = dict(flat=True, H0=c.H0, Om0=c.omega_m, Ob0=c.omega_b, sigma8=c.sigma_8, ns=c.n_s,
                  Tcmb0=c.t_cmb, relspecies=True, Neff=c.n_eff)
    col = cc.setCosmology("icgen_test_planck18", params, interpolation=False, persistence="")
    # colossus normalises P(k) with its own sigma_8 quadrature (default epsrel 3e-3);
    # tighten it so that the comparison measures our P(k), not colossus's default tolerance.
    col.accuracy_sigma = 1e-9
    return col


@pytest.mark.parametrize("wiggles, model", [(True, "eisenstein98"), (False, "eisenstein98_zb")])
def test_eh98_power_spectrum_against_colossus(wiggles, model, bg18, colossus_planck18):
    # Reference: colossus Cosmology.matterPowerSpectrum(k, z=0, model) normalised to the
    # same sigma_8 (interpolation off). Acceptance: 1e-4 over 1e-4 < k < 10 h/Mpc; we assert
    # 1e-6 (same formula; limited by the two sigma_8 quadratures and our node spline < 1e-8).
    spec = sp.from_eisenstein_hu(PLANCK18, bg18, wiggles=wiggles)
    k = np.geomspace(1.0001e-4, 10.0, 1500)
    ref = colossus_planck18.matterPowerSpectrum(k, 0.0, model=model)
    np.testing.assert_allclose(spec.P(k), ref, rtol=1e-6)


def test_eh_spectrum_interpolation_matches_formula(eh18):
    # Reference: the EH98 formula itself, P proportional to k^n_s T^2 (no running); the
    # node spline (every 0.002 in ln k) must reproduce it to 1e-8 between the nodes.
    k = np.geomspace(1e-6, 1e4, 20011)
    shape = k**PLANCK18.n_s * sp.eisenstein_hu_transfer(k, PLANCK18) ** 2
    r = eh18.P(k) / shape
    assert r.max() / r.min() - 1 < 1e-8


# --------------------------------------------------------------------------------------
# Growth normalisation g0
# --------------------------------------------------------------------------------------
def test_g0_einstein_de_sitter():
    # Reference: EdS without radiation, D = a exactly, so g0 = 1.
    eds = Cosmology(h=0.7, omega_m=1.0, omega_b=0.05, t_cmb=0.0, sigma_8=0.8, n_s=1.0)
    assert sp.growth_suppression_g0(background.solve(eds)) == pytest.approx(1.0, rel=1e-9)


def test_g0_matter_plus_radiation():
    # Reference: Meszaros (1974) growing mode in matter + radiation, D proportional to
    # 1 + 3y/2 (y = a/a_eq), so with dD/da = 1: D = a + 2 a_eq/3 and g0 = 1 + 2 a_eq/3.
    c0 = Cosmology(h=0.7, omega_m=1.0, omega_b=0.05, sigma_8=0.8, n_s=1.0)
    c = dataclasses.replace(c0, omega_m=1.0 - c0.omega_r)  # flat, no dark energy
    assert abs(c.omega_de) < 1e-15
    a_eq = c.omega_r / c.omega_m
    assert sp.growth_suppression_g0(background.solve(c)) == pytest.approx(1 + 2 * a_eq / 3, rel=1e-9)


def test_g0_lcdm_integral():
    # Reference: Heath (1977) integral solution for matter + Lambda (+ curvature),
    # D(a) = (5 Omega_m/2) E(a) int_0^a da'/(a' E(a'))^3 with dD/da -> 1, so
    # g0 = (5 Omega_m/2) int_0^1 da/(a E)^3 (e.g. Peebles 1980, eq. 10.12; from memory).
    for om, ok in [(0.3111, 0.0), (0.25, 0.1), (0.4, -0.1)]:
        c = Cosmology(h=0.7, omega_m=om, omega_b=0.04, omega_k=ok, t_cmb=0.0, sigma_8=0.8, n_s=1.0)
        E = lambda a: np.sqrt(om / a**3 + ok / a**2 + c.omega_de)  # noqa: E731
        g0 = 2.5 * om * integrate.quad(lambda a: (a * E(a)) ** -3, 0, 1, epsabs=0, epsrel=1e-13)[0]
        assert sp.growth_suppression_g0(background.solve(c)) == pytest.approx(g0, rel=1e-8)


# --------------------------------------------------------------------------------------
# camb: sigma_8, growth scaling, a_s normalisation
# --------------------------------------------------------------------------------------
@pytest.mark.parametrize("z", [0.0, 2.0, 49.0])
def test_sigma8_of_camb_table(z, camb_pk, camb_bg):
    # Reference: camb's own sigma_8 (CAMBdata.get_sigma8, recorded in the table header).
    # Acceptance: 1e-4 relative. (camb's own value moves by ~2e-4 with its k sampling:
    # the table was made with k_per_logint = 30, where it has converged.)
    k, pk = camb_pk
    spec = sp.from_power_table(k, pk[z], z, CAMB_COSMO, camb_bg, label="camb table")
    ref = read_header_sigma8(DATA / "camb_lcdm_pk.txt")[z]
    assert spec.normalisation == "table"
    assert spec.sigma(8.0, z) == pytest.approx(ref, rel=1e-4)


@pytest.mark.parametrize("z", [2.0, 49.0])
def test_growth_scaling_against_camb(z, camb_pk, camb_bg):
    # Reference: camb's P(k, z)/P(k, 0) for 0.01 <= k <= 0.1 h/Mpc vs our (D1(z)/D1(0))^2.
    # Tolerance: (1 + z) omega_r/omega_m, the radiation-to-matter density ratio at z
    # (1.5% at z = 49, 8.8e-4 at z = 2). The run's growth D1 is that of pressureless
    # matter in a smooth radiation + dark-energy background; camb also evolves the
    # radiation (photon and neutrino) perturbations and the horizon-scale (relativistic)
    # terms, which change the growth at order Omega_r(z)/Omega_m(z) or (aH/k)^2 (1.7%
    # at z = 49, k = 0.01 h/Mpc). Baryons: cdm and baryons both feel the total-matter
    # potential, so total matter obeys the single-fluid growth equation after
    # decoupling and the baryon lag survives only as a decaying mode, suppressed by
    # (a_d/a)^(5/2) ~ 5e-4 at z = 49.
    k, pk = camb_pk
    sel = (k >= 0.01) & (k <= 0.1)
    ratio_camb = pk[z][sel] / pk[0.0][sel]
    ratio_ours = (camb_bg.D1(1 / (1 + z)) / camb_bg.D1(1.0)) ** 2
    tol = (1 + z) * CAMB_COSMO.omega_r / CAMB_COSMO.omega_m
    dev = ratio_camb / ratio_ours - 1
    assert np.max(np.abs(dev)) < tol, f"max |deviation| {np.max(np.abs(dev)):.3g} vs tolerance {tol:.3g}"


def camb_transfer():
    d = np.loadtxt(DATA / "camb_lcdm_transfer.txt")
    return d[:, 0], d[:, 1]


def test_a_s_normalisation_conversions_against_camb(camb_pk, camb_bg):
    # Reference: camb's A_s-normalised P(k, z=0). camb's transfer function (delta/k^2 for
    # unit primordial curvature, k in 1/Mpc) divided by our large-scale constant
    # (2/5) g0 / (Omega_m (H0/c)^2) is T(k) in our convention; feeding it back must give
    # camb's P(k) exactly, whatever the constant: this checks the primordial spectrum
    # (pivot 0.05/Mpc), the h/Mpc <-> 1/Mpc conversions and the 2 pi^2/k^3 factors.
    # Tolerance 1e-6: camb stores its transfer functions in single precision.
    k, t_camb = camb_transfer()
    k_pk, pk = camb_pk
    np.testing.assert_allclose(k, k_pk, rtol=1e-8)
    g0 = sp.growth_suppression_g0(camb_bg)
    h0_over_c_mpc = CAMB_H / sp.HUBBLE_DISTANCE_MPC_H  # 1/Mpc
    const = 0.4 * g0 / (CAMB_COSMO.omega_m * h0_over_c_mpc**2)
    spec = sp.from_transfer_table(k, t_camb / const, 0.0, CAMB_COSMO, camb_bg)
    assert spec.normalisation == "a_s"
    np.testing.assert_allclose(spec.P(k), pk[0.0], rtol=1e-6)


def test_a_s_normalisation_physics_against_camb(camb_pk, camb_bg):
    # Reference: camb's large-scale limit of delta_tot/k^2 at z = 0 against the matter-era
    # prediction (2/5) g0 / (Omega_m (H0/c)^2) (Poisson equation and Phi = -(3/5) R; see
    # spectrum.from_transfer_table), and the resulting P(k) from camb's T normalised to 1
    # at its smallest k. Tolerance 10 a_eq (a_eq = omega_r/omega_m = 2.9e-4), i.e. 2.9e-3
    # in P: the relation holds up to terms of order a_eq/a from radiation at the horizon
    # scale; our estimate for super-horizon modes in matter + radiation (Kodama-Sasaki
    # potential, neutrino anisotropic stress neglected) is 2 (16/9) a_eq/g0 ~ 4.5 a_eq in P,
    # and the neglected neutrino stress changes it by an O(1) factor.
    k, t_camb = camb_transfer()
    g0 = sp.growth_suppression_g0(camb_bg)
    const = 0.4 * g0 / (CAMB_COSMO.omega_m * (CAMB_H / sp.HUBBLE_DISTANCE_MPC_H) ** 2)
    a_eq = CAMB_COSMO.omega_r / CAMB_COSMO.omega_m
    assert t_camb[0] / const == pytest.approx(1.0, abs=5 * a_eq)       # delta, not P: half of 10 a_eq
    spec = sp.from_transfer_table(k, t_camb / t_camb[0], 0.0, CAMB_COSMO, camb_bg)
    np.testing.assert_allclose(spec.P(k), camb_pk[1][0.0], rtol=10 * a_eq)


def test_eisenstein_hu_a_s_against_camb(camb_pk, camb_bg):
    # Reference: camb's sigma_8 for the same A_s. EH98 is a fit; colossus documents
    # modelEisenstein98 as accurate to 5% or better in P against camb, i.e. 2.5% in sigma.
    eh = sp.from_eisenstein_hu(CAMB_COSMO, camb_bg)
    assert eh.normalisation == "a_s"
    ref = read_header_sigma8(DATA / "camb_lcdm_pk.txt")[0.0]
    assert eh.sigma_8 == pytest.approx(ref, rel=0.025)
    # On the largest scales, where both transfer functions are 1 to < 2e-4, the a_s
    # normalisation must agree with camb's to the horizon-scale tolerance 10 a_eq of
    # test_a_s_normalisation_physics_against_camb.
    k, pk = camb_pk
    sel = k < 2e-4
    a_eq = CAMB_COSMO.omega_r / CAMB_COSMO.omega_m
    np.testing.assert_allclose(eh.P(k[sel]), pk[0.0][sel], rtol=10 * a_eq)


@pytest.mark.slow
def test_stored_camb_tables_are_reproducible():
    # Regenerates the camb run of tests/data/make_camb_tables.py (about 15 s) and checks
    # the stored table: same P(k) to 1e-6 when the camb version matches the header.
    import camb
    import importlib.util

    spec = importlib.util.spec_from_file_location("make_camb_tables", DATA / "make_camb_tables.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    head = (DATA / "camb_lcdm_pk.txt").read_text().splitlines()[0]
    if f"camb {camb.__version__} " not in head:
        pytest.skip(f"stored tables are from '{head}', installed camb is {camb.__version__}")
    _, res = mod.run(30)
    kh, z, pk = res.get_linear_matter_power_spectrum(hubble_units=True, k_hunit=True)
    d = np.loadtxt(DATA / "camb_lcdm_pk.txt")
    np.testing.assert_allclose(kh, d[:, 0], rtol=1e-9)
    np.testing.assert_allclose(pk[list(z).index(0.0)], d[:, 1], rtol=1e-6)


# --------------------------------------------------------------------------------------
# Tables: interpolation, extrapolation, redshift
# --------------------------------------------------------------------------------------
def test_table_nodes_and_extrapolation(camb_pk, camb_bg):
    # Definitions (module notes): the spline passes through the nodes; beyond them
    # P = P_end (k/k_end)^slope with the secant slope of the two end nodes, continuous
    # in value and in slope.
    k, pk = camb_pk
    spec = sp.from_power_table(k, pk[0.0], 0.0, CAMB_COSMO, camb_bg)
    np.testing.assert_allclose(spec.P(k), pk[0.0], rtol=1e-13)
    s_hi = math.log(pk[0.0][-1] / pk[0.0][-2]) / math.log(k[-1] / k[-2])
    s_lo = math.log(pk[0.0][1] / pk[0.0][0]) / math.log(k[1] / k[0])
    assert spec.slope_hi == pytest.approx(s_hi, rel=1e-12)
    kk = k[-1] * np.array([1.5, 10.0, 1e3])
    np.testing.assert_allclose(spec.P(kk), pk[0.0][-1] * (kk / k[-1]) ** s_hi, rtol=1e-12)
    kk = k[0] / np.array([1.5, 10.0, 1e3])
    np.testing.assert_allclose(spec.P(kk), pk[0.0][0] * (kk / k[0]) ** s_lo, rtol=1e-12)
    eps = 1e-7
    for kend in (k[0], k[-1]):
        inside = spec.dlnP_dlnk(kend * (1 - eps) if kend == k[-1] else kend * (1 + eps))
        outside = spec.dlnP_dlnk(kend * (1 + eps) if kend == k[-1] else kend * (1 - eps))
        assert inside == pytest.approx(outside, abs=1e-5)


def test_table_redshift_scaling(bg18, eh18):
    # Definition: a table at z_table is moved with (D1(z)/D1(z_table))^2; with neither
    # sigma_8 nor a_s the table's amplitude is kept. A table made from P(k, z=3) must give
    # back P(k, z) at every z.
    k = np.exp(eh18.ln_k[::5])
    free = dataclasses.replace(PLANCK18, sigma_8=None)
    bg = background.solve(free)
    spec = sp.from_power_table(k, eh18.P(k, 3.0), 3.0, free, bg)
    assert spec.normalisation == "table" and spec.z_table == 3.0
    for z in (0.0, 3.0, 49.0):
        np.testing.assert_allclose(spec.P(k[::50], z), eh18.P(k[::50], z), rtol=1e-12)
    # with sigma_8 the amplitude is reset at z = 0
    spec8 = sp.from_power_table(k, eh18.P(k, 3.0) * 7.0, 3.0, PLANCK18, bg18)
    assert spec8.sigma_8 == pytest.approx(PLANCK18.sigma_8, rel=1e-12)


def test_p_vectorised_and_validated(eh18, bg18):
    k = np.geomspace(1e-3, 1, 6).reshape(2, 3)
    assert eh18.P(k).shape == (2, 3)
    assert isinstance(eh18.P(0.1), float)
    assert eh18.P(0.1, 49.0) == pytest.approx(eh18.P(0.1) * bg18.D1(1 / 50) ** 2, rel=1e-14)
    pz = eh18.P(0.1, np.array([0.0, 1.0, 49.0]))
    assert pz.shape == (3,)
    assert eh18.Delta2(0.1) == pytest.approx(0.1**3 * eh18.P(0.1) / (2 * np.pi**2), rel=1e-14)
    for bad in (0.0, -1.0, np.nan, np.inf):
        with pytest.raises(ParameterError, match="k = "):
            eh18.P(np.array([0.1, bad]))
    with pytest.raises(ParameterError):
        eh18.P(0.1, -2.0)
    with pytest.raises(ValueError):
        eh18.ln_p0[0] = 1.0  # read-only


def test_warn_if_extrapolating(camb_pk, camb_bg):
    k, pk = camb_pk
    sel = (k > 1e-3) & (k < 1.0)
    spec = sp.from_power_table(k[sel], pk[0.0][sel], 0.0, CAMB_COSMO, camb_bg, label="table t.txt")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert spec.warn_if_extrapolating(0.01, 0.5) is False
    k_lo, k_hi = sp.required_k_range(100.0, 64)
    with pytest.warns(sp.SpectrumExtrapolationWarning) as rec:
        assert spec.warn_if_extrapolating(k_lo, k_hi) is True
    msg = str(rec[0].message)
    assert f"[{k_lo:.4g}, {k_hi:.4g}]" in msg and "t.txt" in msg and "above k_max" in msg


def test_divergent_extrapolation_is_refused(bg18):
    # sigma(R) needs d ln P/d ln k > -3 at low k and < 1 at high k (top-hat window).
    k = np.geomspace(0.1, 1, 10)
    spec = sp.from_power_table(k, k**2.0, 0.0, dataclasses.replace(PLANCK18, sigma_8=None), bg18)
    with pytest.raises(ParameterError, match="diverges"):
        spec.sigma(8.0)
    with pytest.raises(ParameterError, match="diverges"):
        sp.from_power_table(k, k**-3.5, 0.0, PLANCK18, bg18)


def test_extrapolated_fraction(camb_pk, camb_bg, bg18):
    # A table covering all of k gives ~0; a table cut at k = 0.1 h/Mpc loses the
    # k > 0.1 part of sigma_8^2, which we compute directly with the brute-force rule.
    k, pk = camb_pk
    full = sp.from_power_table(k, pk[0.0], 0.0, CAMB_COSMO, camb_bg)
    assert full.extrapolated_fraction(8.0) < 1e-8
    sel = k <= 0.1
    cut = sp.from_power_table(k[sel], pk[0.0][sel], 0.0, CAMB_COSMO, camb_bg)
    lk = np.linspace(np.log(1e-7), np.log(1e3), 1_000_001)
    kk = np.exp(lk)
    f = cut.Delta2(kk) * sp.tophat_window(8 * kk) ** 2
    frac = integrate.simpson(np.where(kk > cut.k_max, f, 0), x=lk) / integrate.simpson(f, x=lk)
    assert cut.extrapolated_fraction(8.0) == pytest.approx(frac, rel=0.01)  # documented: +-1%
