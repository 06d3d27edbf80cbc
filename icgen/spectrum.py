"""Linear matter power spectrum P(k, z): tables, the Eisenstein & Hu (1998) fit, power laws.

One frozen :class:`LinearSpectrum` holds ln P(k) at z = 0 on nodes in ln k and the
:class:`~icgen.background.BackgroundTable` that moves it to any redshift. It is built
by one of

* :func:`from_power_table` -- a tabulated P(k) at redshift ``z_table``;
* :func:`from_transfer_table` -- a tabulated transfer function T(k) combined with the
  primordial spectrum of :func:`primordial_delta2`;
* :func:`from_eisenstein_hu` -- the Eisenstein & Hu (1998) fitting formula, with the
  baryon wiggles or in its no-wiggle form;
* :func:`from_power_law` -- P = A k^n for scale-free tests;

and normalised to ``sigma_8`` or to ``a_s`` (whichever the cosmology carries).

Conventions
-----------
* k in h/Mpc, P(k) in (Mpc/h)^3, R in Mpc/h (project units). Formulas written in
  1/Mpc (Eisenstein & Hu 1998, the primordial pivot k_pivot = 0.05/Mpc) convert with
  k[1/Mpc] = h k[h/Mpc]; quantities in other units carry the unit in their name.
* Fourier convention delta(x) = int d^3k/(2 pi)^3 delta_k e^{ikx},
  <delta_k delta_k'*> = (2 pi)^3 delta_D(k - k') P(k); the dimensionless spectrum is
  Delta^2(k) = k^3 P(k) / (2 pi^2), and sigma^2(R) = int Delta^2(k) W^2(kR) d ln k
  with the top-hat window W(x) = 3 (sin x - x cos x) / x^3.
* Growth: P(k, z) = P(k, 0) D1(z)^2 with D1(z = 0) = 1 from the background solver.
  A table given at z_table is moved with (D1(z)/D1(z_table))^2. This back-scaling
  with the run's own linear growth is what an N-body run needs: the simulation
  evolves the initial field with Newtonian gravity of matter only, so the
  amplitude it must start from is today's linear spectrum scaled back with that
  same growth, not the Boltzmann code's spectrum at high z (which contains
  radiation and baryon-lag effects the run does not follow).

Interpolation and extrapolation
-------------------------------
Between the nodes ln P is a cubic spline in ln k whose end derivatives are clamped
to the end slopes ``slope_lo`` and ``slope_hi`` (the secants of the first two and
the last two nodes). Beyond the nodes P is extrapolated as the power law with that
end slope, P = P_end (k/k_end)^slope, continuous in value and slope. This is the
only extrapolation done; :meth:`LinearSpectrum.warn_if_extrapolating` warns when a
run needs k outside the nodes. Analytic sources (Eisenstein-Hu, power law) are
tabulated on [1e-7, 1e5] h/Mpc, far beyond any run.

sigma(R)
--------
:meth:`LinearSpectrum.sigma` integrates in x = kR on a fixed Gauss-Legendre grid
(8 nodes per panel; panels 0.05 wide in ln x for 1e-6 < x < 5 pi, which resolves
the baryon wiggles at any R, and pi/4 wide in x for 5 pi < x < 64 pi, which
resolves the window's oscillation) and treats both ends analytically: below x = 1e-6 and above
x = 64 pi the integrand is split into W^2 = (9/2)(x^-4 + x^-6) (smooth) plus an
oscillating remainder; the smooth part is integrated numerically up to x = 1e13
and analytically beyond, the oscillating part analytically (asymptotic series)
with P a local power law. The relative accuracy is better than 1e-8 for
spectra sampled as finely as the analytic sources (tested against the
Gamma-function closed form for power laws and a brute-force quadrature).
"""

import dataclasses
import math
import warnings
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from ._interp import clamped_cubic_spline
from .background import BackgroundTable
from .cosmology import Cosmology
from .errors import ParameterError
from .units import C_KM_S

__all__ = [
    "LinearSpectrum",
    "SpectrumExtrapolationWarning",
    "EH98Scales",
    "K_PIVOT_MPC",
    "HUBBLE_DISTANCE_MPC_H",
    "ANALYTIC_K_RANGE",
    "SOURCES",
    "eh98_scales",
    "eisenstein_hu_transfer",
    "eisenstein_hu_nowiggle_transfer",
    "primordial_delta2",
    "tophat_window",
    "growth_suppression_g0",
    "required_k_range",
    "same_background",
    "from_power_table",
    "from_transfer_table",
    "from_eisenstein_hu",
    "from_power_law",
]

#: Pivot scale of the primordial spectrum, 0.05/Mpc (in 1/Mpc, not h/Mpc).
K_PIVOT_MPC = 0.05
#: Hubble distance c/H0 in Mpc/h (c / (100 km/s/Mpc)).
HUBBLE_DISTANCE_MPC_H = C_KM_S / 100.0
#: k range (h/Mpc) on which the analytic sources are tabulated.
ANALYTIC_K_RANGE = (1e-7, 1e5)
#: Node spacing in ln k of the analytic sources (spline error < 1e-8 with BAO wiggles).
_ANALYTIC_DLNK = 0.002
#: Names of the spectrum sources (the parameter file's ``[spectrum] source``).
SOURCES = ("table", "eisenstein_hu", "eisenstein_hu_nowiggle", "power_law")


class SpectrumExtrapolationWarning(UserWarning):
    """P(k) is needed where it is only known by power-law extrapolation."""


def _as_out(v):
    return v if np.ndim(v) else float(v)


# --------------------------------------------------------------------------------------
# Primordial spectrum and window
# --------------------------------------------------------------------------------------
def primordial_delta2(k_mpc, a_s, n_s, alpha_s=0.0):
    """Dimensionless primordial curvature spectrum Delta^2_R(k).

    Parameters
    ----------
    k_mpc : float or array_like
        Wavenumber in 1/Mpc (not h/Mpc), > 0.
    a_s : float
        Amplitude at the pivot k_pivot = 0.05/Mpc.
    n_s : float
        Scalar spectral index.
    alpha_s : float, default 0
        Running d n_s / d ln k.

    Returns
    -------
    float or ndarray
        Delta^2_R(k), same shape as ``k_mpc``.

    Notes
    -----
    .. math:: \\Delta^2_R(k) = A_s (k/k_*)^{n_s - 1 + (\\alpha_s/2) \\ln(k/k_*)},
              \\quad k_* = 0.05\\,{\\rm Mpc}^{-1}

    References
    ----------
    .. [1] Planck Collaboration (2020), A&A 641, A10, sec. 2 (the power-law
           expansion of ln Delta^2_R in ln k about the pivot; from memory).
    """
    lk = np.log(np.asarray(k_mpc, dtype=np.float64) / K_PIVOT_MPC)
    return _as_out(a_s * np.exp((n_s - 1.0 + 0.5 * alpha_s * lk) * lk))


def tophat_window(x):
    """Fourier transform of the normalised real-space top hat, W(x) = 3 (sin x - x cos x)/x^3.

    Parameters
    ----------
    x : float or array_like
        x = k R (dimensionless), >= 0.

    Returns
    -------
    float or ndarray
        W(x); W(0) = 1.

    Notes
    -----
    For x < 0.1 the Taylor series 1 - x^2/10 + x^4/280 - x^6/15120 + x^8/1330560
    (from W = 3 j_1(x)/x; truncation error < 1e-14) replaces the closed form,
    whose cancellation would lose digits as x -> 0.
    """
    x = np.asarray(x, dtype=np.float64)
    x2 = x * x
    series = 1.0 - x2 / 10.0 * (1.0 - x2 / 28.0 * (1.0 - x2 / 54.0 * (1.0 - x2 / 88.0)))
    with np.errstate(divide="ignore", invalid="ignore"):
        closed = 3.0 * (np.sin(x) - x * np.cos(x)) / (x2 * x)
    return _as_out(np.where(x < 0.1, series, closed))


# --------------------------------------------------------------------------------------
# Eisenstein & Hu (1998)
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class EH98Scales:
    """Characteristic scales of Eisenstein & Hu (1998), in their units (Mpc, 1/Mpc).

    Attributes
    ----------
    omega_m_h2, omega_b_h2 : float
        Physical matter and baryon densities Omega_0 h^2, Omega_b h^2.
    f_b, f_c : float
        Baryon and CDM fractions of the matter, Omega_b/Omega_0, Omega_c/Omega_0.
    theta_27 : float
        T_cmb / 2.7 K.
    z_eq, k_eq_mpc : float
        Matter-radiation equality redshift (eq. 2) and wavenumber in 1/Mpc (eq. 3).
    z_d : float
        Drag epoch (eq. 4).
    r_eq, r_d : float
        Baryon-to-photon momentum density ratio R = 3 rho_b / (4 rho_gamma) at z_eq
        and z_d (eq. 5).
    sound_horizon_mpc : float
        Sound horizon at the drag epoch in Mpc (eq. 6).
    k_silk_mpc : float
        Silk damping wavenumber in 1/Mpc (eq. 7).
    alpha_c, beta_c : float
        CDM suppression and log shift (eqs. 11, 12).
    alpha_b, beta_b, beta_node : float
        Baryon amplitude, shift and node shift (eqs. 14, 24, 23).
    sound_horizon_fit_mpc : float
        The approximation of eq. 26 to the sound horizon, in Mpc.
    alpha_gamma : float
        Shape suppression of the no-wiggle form (eq. 31).

    References
    ----------
    .. [1] Eisenstein & Hu (1998), ApJ 496, 605, eqs. 2-7, 11-15, 23, 24, 26, 31.
    """

    omega_m_h2: float
    omega_b_h2: float
    f_b: float
    f_c: float
    theta_27: float
    z_eq: float
    k_eq_mpc: float
    z_d: float
    r_eq: float
    r_d: float
    sound_horizon_mpc: float
    k_silk_mpc: float
    alpha_c: float
    beta_c: float
    alpha_b: float
    beta_b: float
    beta_node: float
    sound_horizon_fit_mpc: float
    alpha_gamma: float


def _check_eh_cosmology(cosmo, wiggles):
    if not isinstance(cosmo, Cosmology):
        raise TypeError(f"cosmo must be a Cosmology, got {type(cosmo).__name__}")
    if cosmo.t_cmb <= 0.0:
        raise ParameterError(f"t_cmb = {cosmo.t_cmb!r}: the Eisenstein & Hu fit needs the CMB "
                             "temperature, t_cmb > 0 K")
    if wiggles and cosmo.omega_b <= 0.0:
        raise ParameterError(f"omega_b = {cosmo.omega_b!r}: the Eisenstein & Hu formula with baryon "
                             "wiggles needs omega_b > 0; use source = \"eisenstein_hu_nowiggle\"")


def eh98_scales(cosmo):
    """The scales of the Eisenstein & Hu (1998) fit for a cosmology.

    Parameters
    ----------
    cosmo : Cosmology
        Uses h, omega_m (CDM + baryons), omega_b and t_cmb (> 0).

    Returns
    -------
    EH98Scales

    Raises
    ------
    ParameterError
        If t_cmb = 0 (the fit is written in T_cmb / 2.7 K).

    References
    ----------
    .. [1] Eisenstein & Hu (1998), ApJ 496, 605 (equation numbers on each line).
    """
    _check_eh_cosmology(cosmo, wiggles=False)
    h2 = cosmo.h**2
    wm = cosmo.omega_m * h2
    wb = cosmo.omega_b * h2
    fb = cosmo.omega_b / cosmo.omega_m
    fc = 1.0 - fb
    th = cosmo.t_cmb / 2.7
    z_eq = 2.50e4 * wm * th**-4                                            # eq. 2
    k_eq = 7.46e-2 * wm * th**-2                                           # eq. 3, 1/Mpc
    b1 = 0.313 * wm**-0.419 * (1.0 + 0.607 * wm**0.674)                    # eq. 4
    b2 = 0.238 * wm**0.223
    z_d = 1291.0 * wm**0.251 / (1.0 + 0.659 * wm**0.828) * (1.0 + b1 * wb**b2)
    r_eq = 31.5 * wb * th**-4 / (z_eq / 1e3)                               # eq. 5
    r_d = 31.5 * wb * th**-4 / (z_d / 1e3)
    if wb > 0.0:                                                           # eq. 6, Mpc
        s = (2.0 / (3.0 * k_eq) * math.sqrt(6.0 / r_eq)
             * math.log((math.sqrt(1.0 + r_d) + math.sqrt(r_d + r_eq)) / (1.0 + math.sqrt(r_eq))))
    else:  # eq. 6 as R_eq, R_d -> 0 (R_d/R_eq = z_eq/z_d fixed): c_s = c/sqrt(3)
        s = 2.0 * math.sqrt(6.0) / (3.0 * k_eq) * (math.sqrt(1.0 + z_eq / z_d) - 1.0)
    k_silk = 1.6 * wb**0.52 * wm**0.73 * (1.0 + (10.4 * wm)**-0.95)        # eq. 7, 1/Mpc
    a1 = (46.9 * wm)**0.670 * (1.0 + (32.1 * wm)**-0.532)                  # eq. 11
    a2 = (12.0 * wm)**0.424 * (1.0 + (45.0 * wm)**-0.582)
    alpha_c = a1**-fb * a2**-(fb**3)
    bb1 = 0.944 / (1.0 + (458.0 * wm)**-0.708)                             # eq. 12
    bb2 = (0.395 * wm)**-0.0266
    beta_c = 1.0 / (1.0 + bb1 * (fc**bb2 - 1.0))
    y = (1.0 + z_eq) / (1.0 + z_d)                                         # eq. 15
    sy = math.sqrt(1.0 + y)
    G = y * (-6.0 * sy + (2.0 + 3.0 * y) * math.log((sy + 1.0) / (sy - 1.0)))
    alpha_b = 2.07 * k_eq * s * (1.0 + r_d)**-0.75 * G                     # eq. 14
    beta_b = 0.5 + fb + (3.0 - 2.0 * fb) * math.sqrt((17.2 * wm)**2 + 1.0)  # eq. 24
    beta_node = 8.41 * wm**0.435                                           # eq. 23
    s_fit = 44.5 * math.log(9.83 / wm) / math.sqrt(1.0 + 10.0 * wb**0.75)  # eq. 26, Mpc
    alpha_gamma = (1.0 - 0.328 * math.log(431.0 * wm) * fb                 # eq. 31
                   + 0.38 * math.log(22.3 * wm) * fb**2)
    return EH98Scales(omega_m_h2=wm, omega_b_h2=wb, f_b=fb, f_c=fc, theta_27=th, z_eq=z_eq,
                      k_eq_mpc=k_eq, z_d=z_d, r_eq=r_eq, r_d=r_d, sound_horizon_mpc=s,
                      k_silk_mpc=k_silk, alpha_c=alpha_c, beta_c=beta_c, alpha_b=alpha_b,
                      beta_b=beta_b, beta_node=beta_node, sound_horizon_fit_mpc=s_fit,
                      alpha_gamma=alpha_gamma)


def _eh_t0_tilde(k_mpc, q, alpha_c, beta_c):
    """EH98 eqs. 19-20: T~0(k, alpha_c, beta_c), with q from eq. 10."""
    lg = np.log(np.e + 1.8 * beta_c * q)
    c = 14.2 / alpha_c + 386.0 / (1.0 + 69.9 * q**1.08)
    return lg / (lg + c * q * q)


def eisenstein_hu_transfer(k, cosmo):
    """Eisenstein & Hu (1998) transfer function of CDM plus baryons, with baryon wiggles.

    Parameters
    ----------
    k : float or array_like
        Wavenumber in h/Mpc, > 0.
    cosmo : Cosmology
        h, omega_m, omega_b (> 0) and t_cmb (> 0) are used.

    Returns
    -------
    float or ndarray
        T(k), -> 1 as k -> 0; same shape as ``k``.

    Notes
    -----
    T = f_b T_b + f_c T_c (eq. 16) with
    T_c = f T~0(k, 1, beta_c) + (1 - f) T~0(k, alpha_c, beta_c) (eqs. 17, 18) and
    T_b = [T~0(k, 1, 1)/(1 + (ks/5.2)^2) + alpha_b/(1 + (beta_b/ks)^3)
    exp(-(k/k_silk)^1.4)] j_0(k s~) (eqs. 21, 22), k in 1/Mpc, s in Mpc.

    References
    ----------
    .. [1] Eisenstein & Hu (1998), ApJ 496, 605, eqs. 10-24.
    """
    _check_eh_cosmology(cosmo, wiggles=True)
    sc = eh98_scales(cosmo)
    k_mpc = np.asarray(k, dtype=np.float64) * cosmo.h  # h/Mpc -> 1/Mpc
    s = sc.sound_horizon_mpc
    q = k_mpc / (13.41 * sc.k_eq_mpc)                                       # eq. 10
    ks = k_mpc * s
    f = 1.0 / (1.0 + (ks / 5.4)**4)                                         # eq. 18
    t_c = f * _eh_t0_tilde(k_mpc, q, 1.0, sc.beta_c) \
        + (1.0 - f) * _eh_t0_tilde(k_mpc, q, sc.alpha_c, sc.beta_c)         # eq. 17
    s_tilde = s / np.cbrt(1.0 + (sc.beta_node / ks)**3)                     # eq. 22
    x = k_mpc * s_tilde
    j0 = np.sinc(x / np.pi)                                                 # sin(x)/x
    t_b = (_eh_t0_tilde(k_mpc, q, 1.0, 1.0) / (1.0 + (ks / 5.2)**2)
           + sc.alpha_b / (1.0 + (sc.beta_b / ks)**3)
           * np.exp(-(k_mpc / sc.k_silk_mpc)**1.4)) * j0                    # eq. 21
    return _as_out(sc.f_b * t_b + sc.f_c * t_c)                             # eq. 16


def eisenstein_hu_nowiggle_transfer(k, cosmo):
    """Eisenstein & Hu (1998) no-wiggle transfer function (the shape without acoustic oscillations).

    Parameters
    ----------
    k : float or array_like
        Wavenumber in h/Mpc, > 0.
    cosmo : Cosmology
        h, omega_m, omega_b (>= 0) and t_cmb (> 0) are used.

    Returns
    -------
    float or ndarray
        T_0(k), -> 1 as k -> 0; same shape as ``k``.

    Notes
    -----
    T_0 = L_0 / (L_0 + C_0 q^2), L_0 = ln(2e + 1.8 q), C_0 = 14.2 + 731/(1 + 62.5 q)
    (eq. 29), q = k[h/Mpc] Theta_2.7^2 / Gamma_eff (eq. 28),
    Gamma_eff = Omega_0 h [alpha_Gamma + (1 - alpha_Gamma)/(1 + (0.43 k s)^4)]
    (eq. 30, k in 1/Mpc, s from eq. 26 in Mpc), alpha_Gamma from eq. 31.

    References
    ----------
    .. [1] Eisenstein & Hu (1998), ApJ 496, 605, eqs. 26, 28-31.
    """
    _check_eh_cosmology(cosmo, wiggles=False)
    sc = eh98_scales(cosmo)
    k = np.asarray(k, dtype=np.float64)
    k_mpc = k * cosmo.h
    ag = sc.alpha_gamma
    gamma_eff = cosmo.omega_m * cosmo.h * (ag + (1.0 - ag) / (1.0 + (0.43 * k_mpc * sc.sound_horizon_fit_mpc)**4))
    q = k * sc.theta_27**2 / gamma_eff                                      # eq. 28
    l0 = np.log(2.0 * np.e + 1.8 * q)                                       # eq. 29
    c0 = 14.2 + 731.0 / (1.0 + 62.5 * q)
    return _as_out(l0 / (l0 + c0 * q * q))


# --------------------------------------------------------------------------------------
# Growth normalisation and run k range
# --------------------------------------------------------------------------------------
def growth_suppression_g0(bg):
    """Linear growth today in matter-era units: g0 = D(a=1) when D = a deep in the matter era.

    Parameters
    ----------
    bg : BackgroundTable

    Returns
    -------
    float
        g0 = 1 / lim_{a -> 0} dD1/da, with D1 normalised to D1(a=1) = 1. Equal to 1 in
        Einstein-de Sitter and about 0.786 for Planck 2018.

    Notes
    -----
    The growing mode of the background solver starts from its exact early-time
    series: D1 proportional to 1 + 3y/2 (y = a/a_eq, Meszaros 1974) with radiation,
    or to a without it, so dD1/da is constant at a_min and C = dD1/da(a_min) =
    D1 f1 / a at a_min. The matter-era growth D_md(a) = D1(a)/C then obeys
    dD_md/da = 1 before dark energy matters (D_md = a + 2 a_eq/3 with radiation),
    and g0 = D_md(1) is the "growth suppression factor" of Carroll, Press &
    Turner (1992), ARA&A 30, 499, eq. 29 (which approximates it without radiation).
    """
    if not isinstance(bg, BackgroundTable):
        raise TypeError(f"bg must be a BackgroundTable, got {type(bg).__name__}")
    a = bg.a_min
    return float(a / (bg.D1(a) * bg.f1(a)))


def required_k_range(box_size, particles_per_side):
    """The k range a run samples: half the fundamental mode to sqrt(3) times the particle Nyquist.

    Parameters
    ----------
    box_size : float or array_like
        Box side L in Mpc/h, > 0.
    particles_per_side : int or array_like
        Particles per side N, >= 1.

    Returns
    -------
    k_lo, k_hi : float or ndarray
        k_lo = 0.5 * 2 pi / L and k_hi = sqrt(3) pi N / L in h/Mpc.

    Notes
    -----
    The grid's smallest nonzero |k| is the fundamental 2 pi/L and its largest is the
    corner of the cube, sqrt(3) times the Nyquist wavenumber pi N/L; the factor 1/2
    leaves a margin below the fundamental (common practice).
    """
    L = np.asarray(box_size, dtype=np.float64)
    N = np.asarray(particles_per_side, dtype=np.float64)
    if np.any(~np.isfinite(L)) or np.any(L <= 0.0):
        raise ParameterError(f"box_size = {box_size!r} must be a positive length in Mpc/h")
    if np.any(~np.isfinite(N)) or np.any(N < 1.0):
        raise ParameterError(f"particles_per_side = {particles_per_side!r} must be >= 1")
    return _as_out(np.pi / L), _as_out(math.sqrt(3.0) * np.pi * N / L)


# --------------------------------------------------------------------------------------
# sigma(R) quadrature grid (in x = k R), built once
# --------------------------------------------------------------------------------------
_X_LO = 1e-6                 # below: analytic, W^2 = 1 - x^2/5 + 3 x^4/175, Delta^2 a power law
_X_B = 5.0 * np.pi           # ln x panels below (0.05 wide), x panels above (pi/4 wide)
_X_C = 64.0 * np.pi          # above: W^2 split into smooth + oscillating parts
_DLNX = 0.05                 # panel width in ln x: < 1/2 the BAO period in ln k (>= 0.13 for k < 0.5)
_X_TOP = 1e13                # above: smooth part analytic
_GL_ORDER = 8
_N_ASYMPTOTIC = 12           # terms of the asymptotic series of int_X^inf x^p e^{2ix} dx


def _gauss_panels(edges):
    t, w = np.polynomial.legendre.leggauss(_GL_ORDER)
    lo, hi = edges[:-1, None], edges[1:, None]
    half = 0.5 * (hi - lo)
    return (lo + half * (t + 1.0)).ravel(), (half * w).ravel()


def _build_sigma_grid():
    """Nodes x and weights w (for d ln x) and the kernel K(x) of sigma^2 = sum w K Delta^2(x/R)."""
    # X_LO < x < X_B: panels _DLNX wide in ln x
    u_edges = np.linspace(np.log(_X_LO), np.log(_X_B), int(np.ceil(np.log(_X_B / _X_LO) / _DLNX)) + 1)
    u1, w1 = _gauss_panels(u_edges)
    x1 = np.exp(u1)
    # X_B < x < X_C: panels pi/4 wide in x (then narrower than _DLNX in ln x); d ln x = dx / x
    x_edges = np.linspace(_X_B, _X_C, int(np.ceil((_X_C - _X_B) / (np.pi / 4))) + 1)
    x2, w2 = _gauss_panels(x_edges)
    w2 = w2 / x2
    # X_C < x < X_TOP: smooth part only, panels _DLNX wide in ln x
    u_edges = np.linspace(np.log(_X_C), np.log(_X_TOP), int(np.ceil(np.log(_X_TOP / _X_C) / _DLNX)) + 1)
    u3, w3 = _gauss_panels(u_edges)
    x3 = np.exp(u3)
    x = np.concatenate([x1, x2, x3])
    w = np.concatenate([w1, w2, w3])
    kern = np.concatenate([np.asarray(tophat_window(np.concatenate([x1, x2]))) ** 2,
                           4.5 * (x3**-4 + x3**-6)])
    for arr in (x, w, kern):
        arr.flags.writeable = False
    return x, w, kern


_SIGMA_X, _SIGMA_W, _SIGMA_K = _build_sigma_grid()


def _osc_tail_integral(p, X, omega=2.0):
    """E(p) = int_X^inf x^p exp(i omega x) dx for p < 0, by its asymptotic series (complex).

    Integration by parts: E(p) = -X^p e^{i w X}/(i w) - (p/(i w)) E(p-1), hence
    E(p) = -(e^{i w X}/(i w)) sum_j [p]_j X^{p-j} (-1/(i w))^j with [p]_j the falling
    factorial; the ratio of terms is (p - j)/(w X) ~ 1e-2 at X = 64 pi.
    """
    p = np.asarray(p, dtype=np.float64)
    iw = 1j * omega
    term = np.ones_like(p, dtype=np.complex128) * X**p
    total = term.copy()
    for j in range(1, _N_ASYMPTOTIC):
        term = term * (p - (j - 1)) * (-1.0 / (iw * X))
        total = total + term
    return -np.exp(iw * X) / iw * total


# --------------------------------------------------------------------------------------
# The spectrum object
# --------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class LinearSpectrum:
    """The normalised linear matter power spectrum P(k, z) of one cosmology.

    Attributes
    ----------
    ln_k : ndarray, shape (n,), n >= 2
        Nodes, ln(k / (h/Mpc)), strictly increasing.
    ln_p0 : ndarray, shape (n,)
        ln(P / (Mpc/h)^3) at z = 0 on the nodes, normalised.
    bg : BackgroundTable
        Supplies D1 (D1(z=0) = 1) for the redshift scaling.
    source : str
        One of :data:`SOURCES`.
    label : str
        Human-readable origin for messages (a file name and its data lines, or the
        formula's name).
    z_table : float
        Redshift the input (table) referred to; 0 for analytic sources.
    normalisation : str
        ``"sigma_8"``, ``"a_s"`` or ``"table"`` (a power table's own amplitude).

    Notes
    -----
    P(k, z) = exp(s(ln k)) D1(z)^2 with s the clamped cubic spline through the nodes,
    and the power-law extrapolation beyond them described in the module notes.
    ``k_min``/``k_max`` are the end nodes; ``slope_lo``/``slope_hi`` the end slopes
    d ln P / d ln k used beyond them. Arrays are read-only. Evaluation methods take
    scalars or arrays of any shape and return the same shape (a float for a scalar).
    """

    ln_k: np.ndarray
    ln_p0: np.ndarray
    bg: BackgroundTable
    source: str
    label: str
    z_table: float = 0.0
    normalisation: str = "sigma_8"

    def __post_init__(self):
        ln_k = np.array(self.ln_k, dtype=np.float64)
        ln_p0 = np.array(self.ln_p0, dtype=np.float64)
        if ln_k.ndim != 1 or ln_k.shape != ln_p0.shape or ln_k.size < 2:
            raise ValueError(f"ln_k and ln_p0 must be 1-D of one length >= 2, got shapes "
                             f"{ln_k.shape} and {ln_p0.shape}")
        if not (np.all(np.isfinite(ln_k)) and np.all(np.isfinite(ln_p0))):
            raise ValueError("ln_k and ln_p0 must be finite")
        if np.any(np.diff(ln_k) <= 0.0):
            raise ValueError("ln_k must be strictly increasing")
        if not isinstance(self.bg, BackgroundTable):
            raise TypeError(f"bg must be a BackgroundTable, got {type(self.bg).__name__}")
        if self.source not in SOURCES:
            raise ValueError(f"source = {self.source!r} is not one of {SOURCES}")
        for arr in (ln_k, ln_p0):
            arr.flags.writeable = False
        object.__setattr__(self, "ln_k", ln_k)
        object.__setattr__(self, "ln_p0", ln_p0)
        object.__setattr__(self, "z_table", float(self.z_table))

    # ---- range and end slopes ----------------------------------------------------
    @property
    def k_min(self):
        """Smallest node in h/Mpc (below it P is a power-law extrapolation)."""
        return float(np.exp(self.ln_k[0]))

    @property
    def k_max(self):
        """Largest node in h/Mpc (above it P is a power-law extrapolation)."""
        return float(np.exp(self.ln_k[-1]))

    @cached_property
    def slope_lo(self):
        """d ln P / d ln k used below k_min: the secant of the first two nodes."""
        return float((self.ln_p0[1] - self.ln_p0[0]) / (self.ln_k[1] - self.ln_k[0]))

    @cached_property
    def slope_hi(self):
        """d ln P / d ln k used above k_max: the secant of the last two nodes."""
        return float((self.ln_p0[-1] - self.ln_p0[-2]) / (self.ln_k[-1] - self.ln_k[-2]))

    @cached_property
    def _spline(self):
        return clamped_cubic_spline(self.ln_k, self.ln_p0, self.slope_lo, self.slope_hi)

    # ---- evaluation --------------------------------------------------------------
    def _ln_p0_of_ln_k(self, lk):
        lo, hi = self.ln_k[0], self.ln_k[-1]
        inside = self._spline(np.clip(lk, lo, hi))
        return inside + self.slope_lo * np.minimum(lk - lo, 0.0) + self.slope_hi * np.maximum(lk - hi, 0.0)

    def _dln_p_of_ln_k(self, lk):
        lo, hi = self.ln_k[0], self.ln_k[-1]
        d = self._spline(np.clip(lk, lo, hi), nu=1)
        return np.where(lk < lo, self.slope_lo, np.where(lk > hi, self.slope_hi, d))

    def _growth(self, z):
        z = np.asarray(z, dtype=np.float64)
        if z.ndim == 0 and z == 0.0:
            return 1.0
        if np.any(~np.isfinite(z)) or np.any(z <= -1.0):
            raise ParameterError(f"z = {_first_bad(z, z > -1.0)!r}: need a finite redshift z > -1")
        return np.asarray(self.bg.D1(1.0 / (1.0 + z)))

    @staticmethod
    def _check_k(k):
        k = np.asarray(k, dtype=np.float64)
        ok = np.isfinite(k) & (k > 0.0)
        if not np.all(ok):
            raise ParameterError(f"k = {_first_bad(k, ok)!r} h/Mpc: P(k) needs finite k > 0 "
                                 "(leave the k = 0 mode out)")
        return k

    def P(self, k, z=0.0):
        """Linear matter power spectrum P(k, z) in (Mpc/h)^3.

        Parameters
        ----------
        k : float or array_like
            Wavenumber in h/Mpc, > 0; any shape.
        z : float or array_like, default 0
            Redshift (broadcast against ``k``); must lie in the background table.

        Returns
        -------
        float or ndarray
            P(k, z) = P(k, 0) D1(z)^2, shape of ``k`` broadcast with ``z``.

        Notes
        -----
        Outside [k_min, k_max] P is the documented power-law extrapolation (no
        warning here; see :meth:`warn_if_extrapolating`).
        """
        k = self._check_k(k)
        g = self._growth(z)
        out = np.exp(self._ln_p0_of_ln_k(np.log(k))) * g * g
        return _as_out(out)

    def Delta2(self, k, z=0.0):
        """Dimensionless spectrum Delta^2(k, z) = k^3 P(k, z) / (2 pi^2)."""
        k = self._check_k(k)
        return _as_out(k**3 * np.asarray(self.P(k, z)) / (2.0 * np.pi**2))

    def dlnP_dlnk(self, k):
        """Logarithmic slope d ln P / d ln k (independent of z)."""
        k = self._check_k(k)
        return _as_out(self._dln_p_of_ln_k(np.log(k)))

    # ---- sigma(R) ----------------------------------------------------------------
    def _sigma2_z0(self, R, outside_only=False):
        """sigma^2(R) at z = 0 for a 1-D array R (see the module notes for the method)."""
        if 3.0 + self.slope_lo <= 0.0:
            raise ParameterError(
                f"sigma(R) diverges: below k_min = {self.k_min:.4g} h/Mpc the {self.label} is "
                f"extrapolated as k^{self.slope_lo:.4g}, and the integral needs a slope > -3")
        if 3.0 + self.slope_hi >= 4.0:
            raise ParameterError(
                f"sigma(R) diverges: above k_max = {self.k_max:.4g} h/Mpc the {self.label} is "
                f"extrapolated as k^{self.slope_hi:.4g}, and the top-hat integral needs a slope < 1")
        out = np.empty(R.shape)
        lo, hi = self.ln_k[0], self.ln_k[-1]
        ln_x = np.log(_SIGMA_X)
        chunk = max(1, 2_000_000 // _SIGMA_X.size)
        for i in range(0, R.size, chunk):
            r = R[i:i + chunk, None]
            lnr = np.log(r)
            lk = ln_x[None, :] - lnr                                   # ln(x/R)
            d2 = np.exp(self._ln_p0_of_ln_k(lk) + 3.0 * lk) / (2.0 * np.pi**2)
            w = _SIGMA_W * _SIGMA_K
            if outside_only:
                w = w * ((lk < lo) | (lk > hi))
            s2 = d2 @ w if w.ndim == 1 else np.sum(d2 * w, axis=1)
            # low tail x < X_LO: Delta^2 = D_L (x/X_LO)^m, W^2 = 1 - x^2/5 + 3 x^4/175
            lk_l = np.log(_X_LO) - lnr[:, 0]
            m = 3.0 + self._dln_p_of_ln_k(lk_l)
            if np.any(m <= 0.0):
                raise ParameterError("sigma(R) diverges: the spectrum falls as k^-3 or steeper "
                                     f"at k = {np.exp(lk_l[m <= 0][0]):.4g} h/Mpc")
            d2_l = np.exp(self._ln_p0_of_ln_k(lk_l) + 3.0 * lk_l) / (2.0 * np.pi**2)
            tail_l = d2_l * (1.0 / m - _X_LO**2 / (5.0 * (m + 2.0)) + 3.0 * _X_LO**4 / (175.0 * (m + 4.0)))
            # oscillating part of W^2 above X_C, Delta^2 = D_C (x/X_C)^m
            lk_c = np.log(_X_C) - lnr[:, 0]
            m = 3.0 + self._dln_p_of_ln_k(lk_c)
            d2_c = np.exp(self._ln_p0_of_ln_k(lk_c) + 3.0 * lk_c) / (2.0 * np.pi**2)
            e5, e6, e7 = (_osc_tail_integral(m + off, _X_C) for off in (-5.0, -6.0, -7.0))
            tail_c = 9.0 * d2_c * _X_C**-m * (0.5 * e5.real - 0.5 * e7.real - e6.imag)
            # smooth part above X_TOP
            lk_t = np.log(_X_TOP) - lnr[:, 0]
            m = 3.0 + self._dln_p_of_ln_k(lk_t)
            d2_t = np.exp(self._ln_p0_of_ln_k(lk_t) + 3.0 * lk_t) / (2.0 * np.pi**2)
            tail_t = 4.5 * d2_t * (_X_TOP**-4 / (4.0 - m) + _X_TOP**-6 / (6.0 - m))
            if outside_only:
                tail_l = tail_l * (lk_l < lo)
                tail_c = tail_c * (lk_c > hi)
                tail_t = tail_t * (lk_t > hi)
            out[i:i + chunk] = s2 + tail_l + tail_c + tail_t
        return out

    @staticmethod
    def _check_r(R):
        R = np.asarray(R, dtype=np.float64)
        ok = np.isfinite(R) & (R > 0.0)
        if not np.all(ok):
            raise ParameterError(f"R = {_first_bad(R, ok)!r} Mpc/h: sigma(R) needs finite R > 0")
        return R

    def sigma(self, R, z=0.0):
        """rms linear density contrast in top-hat spheres of radius R.

        Parameters
        ----------
        R : float or array_like
            Top-hat radius in Mpc/h, > 0; any shape.
        z : float or array_like, default 0
            Redshift, broadcast against ``R``.

        Returns
        -------
        float or ndarray
            sigma(R, z) = D1(z) [int Delta^2(k) W^2(kR) d ln k]^(1/2).

        Raises
        ------
        ParameterError
            If the integral diverges: end slopes d ln P/d ln k <= -3 (low k) or >= 1
            (high k).

        Notes
        -----
        The integral runs over all k, with the power-law extrapolation beyond the
        nodes; accuracy better than 1e-8 relative (module notes).
        """
        R = self._check_r(R)
        s2 = self._sigma2_z0(R.ravel()).reshape(R.shape)
        return _as_out(np.sqrt(s2) * self._growth(z))

    @cached_property
    def sigma_8(self):
        """sigma(R = 8 Mpc/h) at z = 0."""
        return self.sigma(8.0)

    def extrapolated_fraction(self, R=8.0):
        """Fraction of sigma^2(R) contributed by k outside [k_min, k_max] (approximate, +-1%).

        Parameters
        ----------
        R : float or array_like
            Top-hat radius in Mpc/h.

        Returns
        -------
        float or ndarray
            Between 0 and 1: how much of sigma^2(R) rests on the power-law extrapolation.
        """
        R = self._check_r(R)
        flat = R.ravel()
        frac = self._sigma2_z0(flat, outside_only=True) / self._sigma2_z0(flat)
        return _as_out(np.clip(frac, 0.0, 1.0).reshape(R.shape))

    # ---- extrapolation warning ---------------------------------------------------
    def warn_if_extrapolating(self, k_lo, k_hi):
        """Warn when [k_lo, k_hi] is not inside the nodes [k_min, k_max].

        Parameters
        ----------
        k_lo, k_hi : float
            The k range (h/Mpc) the caller needs, e.g. from :func:`required_k_range`.

        Returns
        -------
        bool
            True if a :class:`SpectrumExtrapolationWarning` was issued.
        """
        k_lo, k_hi = float(k_lo), float(k_hi)
        if not (0.0 < k_lo <= k_hi and math.isfinite(k_hi)):
            raise ParameterError(f"need 0 < k_lo <= k_hi, got k_lo = {k_lo!r}, k_hi = {k_hi!r} h/Mpc")
        parts = []
        if k_lo < self.k_min:
            parts.append(f"below k_min = {self.k_min:.4g} h/Mpc as k^{self.slope_lo:.4g}")
        if k_hi > self.k_max:
            parts.append(f"above k_max = {self.k_max:.4g} h/Mpc as k^{self.slope_hi:.4g}")
        if not parts:
            return False
        warnings.warn(
            f"P(k) is needed over [{k_lo:.4g}, {k_hi:.4g}] h/Mpc but the {self.label} covers "
            f"[{self.k_min:.4g}, {self.k_max:.4g}] h/Mpc; it is extrapolated as a power law with "
            f"the end slope " + " and ".join(parts) + "; supply a table covering the needed range "
            "to avoid this", SpectrumExtrapolationWarning, stacklevel=2)
        return True

    def rescaled(self, factor, normalisation):
        """A copy with P multiplied by ``factor`` (> 0) and the normalisation label set."""
        if not (factor > 0.0 and math.isfinite(factor)):
            raise ValueError(f"factor = {factor!r} must be positive and finite")
        return dataclasses.replace(self, ln_p0=self.ln_p0 + math.log(factor), normalisation=normalisation)


def _first_bad(arr, ok):
    bad = np.asarray(arr)[~np.asarray(ok, dtype=bool)] if np.ndim(arr) else np.asarray([arr])
    return float(bad.ravel()[0])


# --------------------------------------------------------------------------------------
# Builders
# --------------------------------------------------------------------------------------
def _check_inputs(cosmo, bg):
    if not isinstance(cosmo, Cosmology):
        raise TypeError(f"cosmo must be a Cosmology, got {type(cosmo).__name__}")
    if not isinstance(bg, BackgroundTable):
        raise TypeError(f"bg must be a BackgroundTable, got {type(bg).__name__}")
    if not same_background(bg.cosmo, cosmo):
        raise ValueError("bg was solved for a different background cosmology than cosmo")


#: Cosmology fields that determine the background and growth (the others only set P(k)).
_BACKGROUND_FIELDS = ("h", "omega_m", "omega_b", "omega_k", "w0", "wa", "t_cmb", "n_eff")


def same_background(c1, c2):
    """True if two Cosmology objects have the same background (h, densities, w, radiation)."""
    return all(getattr(c1, f) == getattr(c2, f) for f in _BACKGROUND_FIELDS)


def _check_table_arrays(k, values, what):
    k = np.asarray(k, dtype=np.float64)
    v = np.asarray(values, dtype=np.float64)
    if k.ndim != 1 or k.shape != v.shape or k.size < 2:
        raise ValueError(f"k and {what} must be 1-D arrays of one length >= 2, got {k.shape} and {v.shape}")
    if not (np.all(np.isfinite(k)) and np.all(np.isfinite(v))):
        raise ValueError(f"k and {what} must be finite")
    if np.any(k <= 0.0) or np.any(v <= 0.0):
        raise ValueError(f"k and {what} must be positive")
    if np.any(np.diff(k) <= 0.0):
        raise ValueError("k must be strictly increasing")
    return k, v


def _growth_at(bg, z, what):
    if not (z > -1.0 and math.isfinite(z)):
        raise ParameterError(f"{what} = {z!r}: need a finite redshift > -1")
    a = 1.0 / (1.0 + z)
    if not (bg.a_min <= a <= bg.a_top):
        raise ParameterError(f"{what} = {z!r} is outside the background table "
                             f"(z from {1.0 / bg.a_top - 1.0:.4g} to {1.0 / bg.a_min - 1.0:.4g})")
    return float(bg.D1(a))


def _ln_p_from_transfer(k, t, cosmo, a_s, g0):
    """ln P(k, z=0) from T(k) and the primordial spectrum (k in h/Mpc, P in (Mpc/h)^3).

    P(k) = (2 pi^2 / k^3) Delta^2_R(k) [ (2/5) (k c/H0)^2 T(k) g0 / Omega_m ]^2; see
    :func:`from_transfer_table` for the derivation.
    """
    kc = k * HUBBLE_DISTANCE_MPC_H                   # k c / H0, dimensionless (k in h/Mpc)
    d2r = np.asarray(primordial_delta2(k * cosmo.h, a_s, cosmo.n_s, cosmo.alpha_s))
    return (np.log(2.0 * np.pi**2) - 3.0 * np.log(k) + np.log(d2r)
            + 2.0 * np.log(0.4 * kc**2 * t * g0 / cosmo.omega_m))


def _normalise_shape(spec, cosmo, absolute):
    """Normalise to sigma_8 if the cosmology gives it; else keep the absolute amplitude."""
    if cosmo.sigma_8 is not None:
        return spec.rescaled((cosmo.sigma_8 / spec.sigma_8) ** 2, "sigma_8")
    return dataclasses.replace(spec, normalisation=absolute)


def from_power_table(k, P, z_table, cosmo, bg, label="P(k) table"):
    """A LinearSpectrum from a tabulated P(k) at redshift z_table.

    Parameters
    ----------
    k : array_like, shape (n,)
        Wavenumbers in h/Mpc, strictly increasing, > 0, n >= 2.
    P : array_like, shape (n,)
        P(k, z_table) in (Mpc/h)^3, > 0.
    z_table : float
        Redshift of the table.
    cosmo : Cosmology
    bg : BackgroundTable
        Solved for ``cosmo``.
    label : str
        Origin for messages, e.g. ``"table pk.txt (data lines 3-402)"``.

    Returns
    -------
    LinearSpectrum
        Normalised to ``cosmo.sigma_8`` if it is set; otherwise the table's own
        amplitude is kept (``normalisation = "table"``): a tabulated P(k) already
        carries the amplitude the Boltzmann code computed from its A_s.

    Notes
    -----
    P(k, 0) = P_table(k) / D1(z_table)^2 with this run's D1 (module notes).
    """
    _check_inputs(cosmo, bg)
    k, P = _check_table_arrays(k, P, "P")
    d1 = _growth_at(bg, float(z_table), "z_table")
    spec = LinearSpectrum(np.log(k), np.log(P) - 2.0 * math.log(d1), bg, "table", label,
                          z_table=z_table, normalisation="table")
    return _normalise_shape(spec, cosmo, "table")


def from_transfer_table(k, T, z_table, cosmo, bg, label="T(k) table", source="table"):
    """A LinearSpectrum from a tabulated transfer function and the primordial spectrum.

    Parameters
    ----------
    k : array_like, shape (n,)
        Wavenumbers in h/Mpc, strictly increasing, > 0, n >= 2.
    T : array_like, shape (n,)
        Transfer function at z_table, > 0, normalised to T -> 1 as k -> 0 (on
        scales inside today's horizon but well above the equality scale).
    z_table : float
        Redshift of the table (recorded; the amplitude follows from a_s and D1).
    cosmo : Cosmology
        Normalisation: ``sigma_8`` if set, else ``a_s``; n_s and alpha_s give the tilt.
    bg : BackgroundTable
    label : str
        Origin for messages.

    Returns
    -------
    LinearSpectrum

    Raises
    ------
    ParameterError
        If the cosmology has neither sigma_8 nor a_s.

    Notes
    -----
    Derivation of the a_s normalisation. In the matter era the comoving-gauge
    density contrast obeys the Poisson equation
    k^2 Phi = -(3/2) Omega_m H0^2 delta / a, and on scales that entered the horizon
    after equality Phi = -(3/5) R (the matter-era potential of an adiabatic mode of
    primordial curvature R). Hence delta = (2/5) (k c/H0)^2 R D_md(a) T(k) / Omega_m,
    with T(k) -> 1 on large scales and D_md the growth normalised to dD_md/da = 1
    in the matter era (D_md = g0 D1, :func:`growth_suppression_g0`). With
    <R R*> = (2 pi^2 / k^3) Delta^2_R(k) this gives

    .. math:: P(k, z) = \\frac{2\\pi^2}{k^3} \\Delta^2_R(k)
              \\left[\\frac{2}{5} \\frac{k^2 c^2}{H_0^2 \\Omega_m} T(k) g_0 D_1(z)\\right]^2.

    (Dodelson 2003, Modern Cosmology, ch. 7, and Komatsu et al. 2009, ApJS 180, 330,
    sec. 3; both from memory.) k c/H0 = k[h/Mpc] * 2997.92458; Delta^2_R is evaluated
    at k[1/Mpc] = h k[h/Mpc]. The formula holds up to horizon-scale terms of
    order a_eq/a (a few 1e-4 in amplitude today).
    """
    _check_inputs(cosmo, bg)
    k, T = _check_table_arrays(k, T, "T")
    _growth_at(bg, float(z_table), "z_table")
    if cosmo.sigma_8 is None and cosmo.a_s is None:
        raise ParameterError("a transfer function needs a normalisation: set [cosmology] sigma_8 or a_s")
    a_s = cosmo.a_s if cosmo.a_s is not None else 2e-9  # placeholder amplitude when sigma_8 rules
    ln_p0 = _ln_p_from_transfer(k, T, cosmo, a_s, growth_suppression_g0(bg))
    spec = LinearSpectrum(np.log(k), ln_p0, bg, source, label, z_table=z_table, normalisation="a_s")
    return _normalise_shape(spec, cosmo, "a_s")


def from_eisenstein_hu(cosmo, bg, wiggles=True):
    """A LinearSpectrum from the Eisenstein & Hu (1998) transfer function.

    Parameters
    ----------
    cosmo : Cosmology
        Normalisation: ``sigma_8`` if set, else ``a_s``.
    bg : BackgroundTable
    wiggles : bool, default True
        True: the full fit with baryon acoustic oscillations
        (:func:`eisenstein_hu_transfer`); False: the no-wiggle form
        (:func:`eisenstein_hu_nowiggle_transfer`).

    Returns
    -------
    LinearSpectrum
        Tabulated on :data:`ANALYTIC_K_RANGE` every 0.002 in ln k;
        P proportional to k Delta^2_R(k) T^2(k) (k^n_s T^2 without running).
    """
    _check_inputs(cosmo, bg)
    _check_eh_cosmology(cosmo, wiggles)
    k = _analytic_nodes()
    t = eisenstein_hu_transfer(k, cosmo) if wiggles else eisenstein_hu_nowiggle_transfer(k, cosmo)
    t = np.asarray(t)
    if np.any(t <= 0.0):  # pragma: no cover - the fit is positive for physical parameters
        raise ParameterError("the Eisenstein & Hu transfer function is not positive for this cosmology")
    name = "eisenstein_hu" if wiggles else "eisenstein_hu_nowiggle"
    label = "Eisenstein & Hu (1998) fit" + ("" if wiggles else " (no wiggles)")
    return from_transfer_table(k, t, 0.0, cosmo, bg, label=label, source=name)


def _analytic_nodes():
    lo, hi = np.log(ANALYTIC_K_RANGE[0]), np.log(ANALYTIC_K_RANGE[1])
    return np.exp(np.linspace(lo, hi, int(round((hi - lo) / _ANALYTIC_DLNK)) + 1))


def from_power_law(index, cosmo, bg):
    """A LinearSpectrum P = A k^n for scale-free tests, normalised to sigma_8.

    Parameters
    ----------
    index : float
        n, with -3 < n < 1 (sigma(R) with a top-hat window diverges outside).
    cosmo : Cosmology
        Must give ``sigma_8`` (A follows from it); ``a_s`` has no meaning here.
    bg : BackgroundTable

    Returns
    -------
    LinearSpectrum
        Nodes at the ends of :data:`ANALYTIC_K_RANGE`; the spline and its
        extrapolation are exactly the power law.
    """
    _check_inputs(cosmo, bg)
    if isinstance(index, bool) or not isinstance(index, (int, float)) or not -3.0 < index < 1.0:
        raise ParameterError(f"[spectrum] index = {index!r}: a power law P = A k^n normalised to sigma_8 "
                             "needs -3 < n < 1 (sigma(R) diverges otherwise)")
    if cosmo.sigma_8 is None:
        raise ParameterError("a power-law spectrum is normalised by sigma_8: set [cosmology] sigma_8 "
                             f"(a_s = {cosmo.a_s!r} has no meaning for P = A k^n)")
    ln_k = np.log(np.array(ANALYTIC_K_RANGE))
    spec = LinearSpectrum(ln_k, index * ln_k, bg, "power_law", f"power law P = A k^{index:g}")
    return spec.rescaled((cosmo.sigma_8 / spec.sigma_8) ** 2, "sigma_8")
