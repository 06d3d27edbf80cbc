"""Separate universe: a region with a long-wavelength overdensity as a curved local Friedmann model.

A spherical region whose mean linear overdensity, extrapolated to today with the
global growth factor, is ``delta_l`` evolves exactly like a Friedmann universe of
its own (the "separate universe"): same big bang, same early universe, a different
curvature. This module builds that local model from the global cosmology and
``delta_l``, maps global and local scale factors at equal cosmic time, gives the
linear and exact nonlinear overdensity delta(t), the local turnaround and
collapse, and what local initial conditions need (box size, spectrum, growth).

Conventions
-----------
* Global model: the :class:`~icgen.cosmology.Cosmology` given, scale factor
  ``a_global`` (a = 1 today, at the global age t0), H0 = 100 h km/s/Mpc.
* Local model, as written to a parameter file: ``a_local`` = 1 at the **same
  cosmic time t0** (the global age), and the local h, omega_m, omega_b, omega_r,
  omega_k, omega_de refer to that moment. This is the convention every icgen
  stage assumes for "today" (D1(a=1) = 1, P(k) at z = 0, sigma_8), so the local
  file is an ordinary parameter file.
* Lengths: every comoving length of the local model is in Mpc/h_local and
  comoving with ``a_local``; every global one in Mpc/h (global h) comoving with
  ``a_global``. The same physical region has
  L_local = J L_global with J = :attr:`SeparateUniverse.length_ratio`
  = h_local / (h scale_ratio) (below).
* ``scale_ratio`` = lim_{t -> 0} a_local(t) / a_global(t): both models share the
  early universe, so their scale factors agree up to this constant at early
  times. It equals (1 + delta(t0))^(1/3).
* delta is the matter overdensity of the region relative to the global mean at
  equal cosmic time:

  .. math:: 1 + \\delta(t) = \\left[\\frac{\\text{scale\\_ratio}\\; a_{\\rm global}(t)}
            {a_{\\rm local}(t)}\\right]^3

  (mass conservation: the local matter density is rho_m,global a_global^3 /
  (a_local/scale_ratio)^3 because it equals the global one at early times).
  ``delta_linear(t) = delta_l D1(a_global(t))`` with icgen's global D1 (D1(1) = 1).
* Growth: D1 of each model has its own normalisation D1(a=1) = 1. Growth factors
  are compared at equal cosmic time and normalised to agree at early times:
  growth_ratio(t) = D1_local(a_local(t)) / (R D1_global(a_global(t))) with
  R = lim_{t->0} D1_local/D1_global = :attr:`SeparateUniverse.growth_ratio_early`.

Derivation (written out here; the results agree with Baldauf et al. 2011, JCAP
10, 031, and Wagner et al. 2015, MNRAS 448, L11, from memory)
---------------------------------------------------------------------------------
Normalise the local scale factor to the global one at early times,
a_A = a_local / scale_ratio. Matter and radiation in the region are the same
early universe as everywhere (delta -> 0 as t -> 0), so in physical units
rho_m = rho_m,0 a_A^-3 and rho_r = rho_r,0 a_A^-4 with the global rho_m,0,
rho_r,0; the cosmological constant is the same physical density everywhere.
The local Friedmann equation therefore differs from the global one only by a
curvature constant kappa = K c^2 / H0^2 (global H0):

.. math:: \\frac{H_A^2}{H_0^2} = \\Omega_r a_A^{-4} + \\Omega_m a_A^{-3}
          + (\\Omega_k - \\kappa) a_A^{-2} + \\Omega_\\Lambda
          \\equiv P(a_A) / a_A^4,

P(a) = Omega_r + Omega_m a + (Omega_k - kappa) a^2 + Omega_Lambda a^4, with the
same big-bang time (growing mode only). The local time is
H0 t(a_A) = int_0^a_A a da / sqrt(P(a)).

*Linear theory and kappa.* Put a_A = a (1 - delta/3) at equal t and expand the
local Friedmann equation to first order; with ' = d/d ln a:

.. math:: \\delta' = \\frac{3}{2E^2}\\left[\\kappa a^{-2} - \\left(\\tfrac43 \\Omega_r a^{-4}
          + \\Omega_m a^{-3} + \\tfrac23 \\Omega_k a^{-2}\\right)\\delta\\right].

The homogeneous solution is proportional to E = H/H0 (a shift of the big-bang
time: the decaying mode), since with a cosmological constant
d ln E/d ln a = -(3/(2E^2)) (4/3 Omega_r a^-4 + Omega_m a^-3 + 2/3 Omega_k a^-2).
The growing solution, vanishing at a -> 0, is delta = kappa u(a) with

.. math:: u(a) = \\frac32 E(a) \\int_0^a \\frac{da'}{a'^3 E(a')^3}.

Without radiation u = (3 / (5 Omega_m)) D_md(a), where D_md is Heath's (1977,
MNRAS 179, 351) growing mode normalised to D_md -> a in the matter era, and
D_md = g0 D1 with g0 = :func:`icgen.spectrum.growth_suppression_g0` (about 0.79
for Planck 2018; note that icgen's D1 / a -> 1/g0 ~ 1.27 at early times, not
g0). ``delta_l`` is defined as the linear overdensity today, delta_lin(t0):

.. math:: \\kappa = \\delta_l / u(1) \\;\\Rightarrow\\;
          \\Omega_{k,\\rm local} = -\\kappa + O(\\delta_l^2)
          = -\\frac{5}{3}\\frac{\\Omega_m}{g_0}\\,\\delta_l + O(\\delta_l^2)
          \\quad (\\text{no radiation}),

the relation Omega_K = -(5/3) Omega_m delta_L(t0) / D(t0) with D normalised to
a in the matter era (Baldauf et al. 2011; Wagner et al. 2015; from memory). For a
flat global model an overdense region (delta_l > 0) is closed (omega_k < 0).
Without radiation u is proportional to icgen's D1 exactly, so delta_linear(t) =
delta_l D1(a_global) is the local model's own linear overdensity at all times,
and the spherical-collapse thresholds follow (in Einstein-de Sitter
delta_lin = 1.06241 at turnaround, 1.68647 at collapse; Gunn & Gott 1972,
Peebles 1980 sec. 19).

*Local parameters today.* With a0 = a_A(t0) (so scale_ratio = 1/a0):
h_local = h sqrt(P(a0)) / a0^2; omega_m,local = Omega_m a0 / P(a0) (so
omega_m,local h_local^2 = Omega_m h^2 / a0^3 = Omega_m h^2 (1 + delta(t0)));
omega_b likewise; omega_k,local = (Omega_k - kappa) a0^2 / P(a0);
omega_de,local h_local^2 = Omega_Lambda h^2; t_cmb,local = t_cmb / a0 (so
omega_r,local h_local^2 = Omega_r h^2 a0^-4); n_eff unchanged.

*Radiation.* Radiation here follows the local scale factor like matter: the
region is the same early universe, and for an adiabatic long mode (k -> 0) the
local patch is exactly a Friedmann model with both components (the separate
universe limit). Then the local linear overdensity grows as a^2 in the
radiation era, and its matter-era shape differs from icgen's global D1, which
treats radiation as smooth (Meszaros 1974): in the matter era u / D1 is lower by
about (8/3) Omega_r / (Omega_m a) relative to today (derived from the exact
matter+radiation integral, u proportional to a - 2 a_eq against
D_md = a + 2 a_eq / 3, a_eq = Omega_r/Omega_m). ``delta_l`` stays exactly the
linear overdensity today, and the local model stays an exact Friedmann model
that every icgen stage can use; but the local model's own linear overdensity
is below ``delta_linear`` (global D1) by 3.6% at z = 49 and 0.7% at z = 9 for
Planck 2018 radiation (measured; the estimate above gives 3.9% and 0.8%),
omega_k,local differs from the matter-only relation above by 1.0e-3, and the
growth response of small-scale modes, d ln D / d delta_linear, is 0.54 at z = 49
and 0.618 today instead of the matter-era 13/21 = 0.619 (measured). Set
t_cmb = 0 for the exact correspondence with icgen's global linear theory.

*Dark energy.* Only a cosmological constant (w0 = -1, wa = 0) is supported: a
smooth dark energy with w != -1 has a density fixed by the global expansion,
which is not a function of the local scale factor of the w0-wa form, so the
local model would not be a :class:`~icgen.cosmology.Cosmology`.

Local initial conditions
------------------------
The same particles per side and the same seed give the same white noise per
integer wavevector (:mod:`icgen.field`), i.e. the same physical modes, because
the local box is the same physical region (L_local = J L_global). The local
linear spectrum must give every mode the global amplitude at early times:

.. math:: P_{\\rm local}(k, z_{\\rm local} = 0) = J^3 P_{\\rm global}(J k, 0) / R^2,

(k in h_local/Mpc, P in (Mpc/h_local)^3; with the module-convention
<|delta_k|^2> = P / L^3 the per-mode amplitude is then the global one times
growth_ratio(t) at every equal time). See :func:`local_spectrum`.

References
----------
.. [1] Gunn & Gott (1972), ApJ 176, 1 (spherical infall).
.. [2] Peebles (1980), The Large-Scale Structure of the Universe, sec. 19.
.. [3] Heath (1977), MNRAS 179, 351 (growing mode with curvature and Lambda).
.. [4] Sirko (2005), ApJ 634, 728 (initial conditions in a separate universe).
.. [5] Baldauf, Seljak, Senatore & Zaldarriaga (2011), JCAP 10, 031.
.. [6] Wagner, Schmidt, Chiang & Komatsu (2015), MNRAS 448, L11.
"""

import dataclasses
import math
from dataclasses import dataclass
from functools import cached_property

import numpy as np
from scipy.integrate import quad
from scipy.optimize import brentq

from . import background, spectrum
from .background import BackgroundTable
from .cosmology import Cosmology
from .errors import ParameterError
from .units import HUBBLE_TIME_GYR_H

__all__ = [
    "LocalModel",
    "SeparateUniverse",
    "local_model",
    "solve",
    "curvature_per_delta",
    "delta_l_turnaround_at_t0",
    "local_spectrum",
    "check_global_cosmology",
    "DELTA_L_RANGE",
    "EDS_DELTA_TURNAROUND",
    "EDS_DELTA_COLLAPSE",
]

#: Allowed range of delta_l (a guard against typos; the physical limits -- the region
#: must still expand at the global age, and the local parameters must be in the
#: ranges of :data:`icgen.cosmology.RANGES` -- are checked separately).
DELTA_L_RANGE = (-100.0, 100.0)
#: Linear overdensity at turnaround in Einstein-de Sitter, (3/20)(6 pi)^(2/3)
#: (Gunn & Gott 1972; Peebles 1980 sec. 19). For plot annotations.
EDS_DELTA_TURNAROUND = 0.15 * (6.0 * math.pi) ** (2.0 / 3.0)
#: Linear overdensity at collapse in Einstein-de Sitter, (3/20)(12 pi)^(2/3).
EDS_DELTA_COLLAPSE = 0.15 * (12.0 * math.pi) ** (2.0 / 3.0)

#: Relative accuracy asked of the quadratures (scipy.integrate.quad's floor is 50 eps).
_EPSREL = 1e-13
#: Largest local scale factor the local background is tabulated to (ever-expanding case).
_A_MAX_LOCAL = 1e6


def _as_out(v):
    v = np.asarray(v, dtype=np.float64)
    return v if v.ndim else float(v)


# --------------------------------------------------------------------------------------
# Checks
# --------------------------------------------------------------------------------------
def check_global_cosmology(cosmo):
    """Refuse a global cosmology the separate-universe construction does not cover.

    Parameters
    ----------
    cosmo : Cosmology

    Raises
    ------
    TypeError
        If ``cosmo`` is not a Cosmology.
    ParameterError
        If the dark energy is not a cosmological constant (w0 = -1, wa = 0) while
        omega_de != 0 (module notes, *Dark energy*).
    """
    if not isinstance(cosmo, Cosmology):
        raise TypeError(f"cosmo must be a Cosmology, got {type(cosmo).__name__}")
    if cosmo.omega_de != 0.0 and (cosmo.w0 != -1.0 or cosmo.wa != 0.0):
        raise ParameterError(
            f"w0 = {cosmo.w0!r}, wa = {cosmo.wa!r}: the separate universe is built for a "
            "cosmological constant only (allowed: w0 = -1, wa = 0), because dark energy with "
            "w != -1 stays smooth and its density follows the global, not the local, expansion; "
            "set w0 = -1 and wa = 0")


def _check_delta_l(delta_l):
    lo, hi = DELTA_L_RANGE
    if isinstance(delta_l, bool) or not isinstance(delta_l, (int, float, np.floating, np.integer)):
        raise ParameterError(f"delta_l: expected a number in [{lo:g}, {hi:g}], got {delta_l!r}")
    delta_l = float(delta_l)
    if not (math.isfinite(delta_l) and lo <= delta_l <= hi):
        raise ParameterError(f"delta_l = {delta_l!r} is outside the allowed range [{lo:g}, {hi:g}]")
    return delta_l


# --------------------------------------------------------------------------------------
# The local Friedmann model in the early-time normalisation a_A (module notes)
# --------------------------------------------------------------------------------------
def _poly(cosmo, kappa):
    """Coefficients (c0, c1, c2, c4) of P(a) = a^4 H_A^2/H0^2 = c0 + c1 a + c2 a^2 + c4 a^4."""
    return (cosmo.omega_r, cosmo.omega_m, cosmo.omega_k - kappa, cosmo.omega_de)


def _p_of_a(c, a):
    return c[0] + a * (c[1] + a * (c[2] + a * a * c[3]))


def _time_h0(c, a, turn=None):
    """H0 t(a) = int_0^a a' da' / sqrt(P(a')), as int_0^sqrt(a) 2 s^3 ds / sqrt(P(s^2)) (smooth).

    ``turn`` = (a_m, H0 t_turn) of a recollapsing model: in the upper half below the
    maximum a_m, where 1/sqrt(P) is nearly singular, t(a) = t_turn minus the rest
    of the integral up to a_m, done with the end-point weight (:func:`_turnaround_time_h0`).
    """
    if turn is not None and a > 0.5 * turn[0]:
        return turn[1] - _turnaround_time_h0(c, turn[0], s_from=math.sqrt(min(a, turn[0])))

    def f(s):
        return 2.0 * s**3 / math.sqrt(_p_of_a(c, s * s))
    return quad(f, 0.0, math.sqrt(a), epsabs=0.0, epsrel=_EPSREL, limit=200)[0]


def _turnaround_a(c):
    """Smallest a > 0 where P(a) changes sign (maximum expansion), or None."""
    coeffs = [c[3], 0.0, c[2], c[1], c[0]]  # highest power first
    while coeffs and coeffs[0] == 0.0:
        coeffs = coeffs[1:]
    if len(coeffs) < 2:
        return None
    roots = np.roots(coeffs)
    real = np.sort(roots[(np.abs(roots.imag) <= 1e-9 * np.abs(roots)) & (roots.real > 0.0)].real)
    for r in real:
        # polish with Newton on P, then demand a sign change (a tangent root is a loiterer)
        for _ in range(3):
            dp = c[1] + 2.0 * c[2] * r + 4.0 * c[3] * r**3
            if dp == 0.0:
                break
            r = r - _p_of_a(c, r) / dp
        if _p_of_a(c, r * (1.0 - 1e-9)) > 0.0 and _p_of_a(c, r * (1.0 + 1e-9)) < 0.0:
            return float(r)
    return None


def _turnaround_time_h0(c, a_m, s_from=0.0):
    """H0 t at the maximum a_m (or the part from a = s_from^2 to a_m), by QAWS.

    The integrand has a (s_m - s)^-1/2 end point, handled by quad's algebraic weight.

    With s^2 = a, P(s^2) = (s^2 - a_m) Q(s^2), Q = P / (a - a_m) by synthetic division
    (Q < 0 below a_m), so 2 s^3 / sqrt(P) = [2 s^3 / sqrt((s_m + s)(-Q(s^2)))] (s_m - s)^-1/2.
    """
    # P(a) = c4 a^4 + 0 a^3 + c2 a^2 + c1 a + c0 = (a - a_m)(q3 a^3 + q2 a^2 + q1 a + q0)
    q3 = c[3]
    q2 = q3 * a_m
    q1 = c[2] + q2 * a_m
    q0 = c[1] + q1 * a_m
    s_m = math.sqrt(a_m)

    def g(s):
        a = s * s
        mq = -(q0 + a * (q1 + a * (q2 + a * q3)))
        return 0.0 if s == 0.0 else 2.0 * s**3 / math.sqrt((s_m + s) * mq)
    if s_from >= s_m:
        return 0.0
    return quad(g, s_from, s_m, weight="alg", wvar=(0.0, -0.5), epsabs=0.0, epsrel=_EPSREL,
                limit=200)[0]


def curvature_per_delta(cosmo):
    """d kappa / d delta_l = 1 / u(1): the curvature constant per unit linear overdensity today.

    Parameters
    ----------
    cosmo : Cosmology
        The global cosmology (a cosmological constant, see :func:`check_global_cosmology`).

    Returns
    -------
    float
        1/u(1) with u(1) = (3/2) int_0^1 da / (a E(a))^3 (E(1) = 1), so that
        kappa = K c^2 / H0^2 = delta_l / u(1) exactly (module notes). Without
        radiation this is (5/3) Omega_m / g0.

    Notes
    -----
    Evaluated as (3/2) int_0^1 2 s^7 ds / P(s^2)^(3/2) (a = s^2) by adaptive
    quadrature to 1e-13.
    """
    check_global_cosmology(cosmo)
    c = _poly(cosmo, 0.0)
    u1 = 1.5 * quad(lambda s: 2.0 * s**7 / _p_of_a(c, s * s) ** 1.5, 0.0, 1.0,
                    epsabs=0.0, epsrel=_EPSREL, limit=200)[0]
    return 1.0 / u1


def _turnaround(c):
    """(a_m, t_turn) of the local model; a_m None if it never turns around."""
    a_m = _turnaround_a(c)
    if a_m is None:
        return None, None
    return a_m, _turnaround_time_h0(c, a_m)


def delta_l_turnaround_at_t0(cosmo):
    """The delta_l whose region turns around exactly at the global age t0.

    Parameters
    ----------
    cosmo : Cosmology

    Returns
    -------
    float
        Regions with a larger delta_l have stopped expanding before t0 and have no
        local "today" (module conventions). (3/20)(6 pi)^(2/3) = 1.06241 in
        Einstein-de Sitter.
    """
    check_global_cosmology(cosmo)
    kpd = curvature_per_delta(cosmo)
    t0 = _time_h0(_poly(cosmo, 0.0), 1.0)

    def before(d):
        _, t_turn = _turnaround(_poly(cosmo, d * kpd))
        return t_turn is not None and t_turn <= t0

    lo, hi = 0.0, 1.0
    while not before(hi):
        lo, hi = hi, 2.0 * hi
        if hi > 1e6:  # pragma: no cover - a positive curvature always recollapses in time
            return math.inf
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if hi - lo <= 4e-16 * hi:
            break
        lo, hi = (lo, mid) if before(mid) else (mid, hi)
    return 0.5 * (lo + hi)


# --------------------------------------------------------------------------------------
# The local model (scalars; no tables)
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class LocalModel:
    """The local cosmology of a region with linear overdensity ``delta_l`` today.

    Attributes
    ----------
    global_cosmo : Cosmology
    delta_l : float
        Linear overdensity of the region today (at the global age t0), extrapolated
        with the linear growth (module notes).
    kappa : float
        Curvature constant K c^2 / H0^2 of the local model relative to the global
        one (global H0; local scale factor normalised to the global at early times).
    scale_ratio : float
        lim_{t->0} a_local / a_global = (1 + delta(t0))^(1/3).
    cosmology : Cosmology
        The local cosmology, "today" = the global age t0 (module conventions).
        Its sigma_8 and a_s are None: the amplitude of the local spectrum comes
        from the global one (:func:`local_spectrum`).
    t0_h0 : float
        Global age in units of 1/H0 (global H0), from the same quadrature that
        defines the local model (so delta_l = 0 gives the global model exactly).
    a_turn_local : float or None
        Local scale factor (file normalisation) at maximum expansion; None if the
        region expands forever.
    t_turn_h0 : float or None
        Turnaround time in 1/H0 (global H0); the collapse is at 2 t_turn.
    """

    global_cosmo: Cosmology
    delta_l: float
    kappa: float
    scale_ratio: float
    cosmology: Cosmology
    t0_h0: float
    a_turn_local: float | None
    t_turn_h0: float | None

    @property
    def delta_nonlinear_today(self):
        """Exact overdensity at the global age, scale_ratio^3 - 1."""
        return self.scale_ratio**3 - 1.0

    @property
    def length_ratio(self):
        """J = L_local [Mpc/h_local] / L_global [Mpc/h]: h_local / (h scale_ratio)."""
        return self.cosmology.h / (self.global_cosmo.h * self.scale_ratio)

    @property
    def t0_gyr(self):
        """Global age t0 in Gyr."""
        return self.t0_h0 * HUBBLE_TIME_GYR_H / self.global_cosmo.h

    @property
    def t_turn_gyr(self):
        """Local turnaround time in Gyr (None if the region expands forever)."""
        return None if self.t_turn_h0 is None else self.t_turn_h0 * HUBBLE_TIME_GYR_H / self.global_cosmo.h

    @property
    def t_collapse_gyr(self):
        """Local collapse (crunch) time 2 t_turn in Gyr (None if none)."""
        return None if self.t_turn_h0 is None else 2.0 * self.t_turn_gyr


def local_model(cosmo, delta_l):
    """The local Friedmann model of a region with linear overdensity ``delta_l`` today.

    Parameters
    ----------
    cosmo : Cosmology
        Global cosmology; dark energy must be a cosmological constant.
    delta_l : float
        Linear matter overdensity of the region at the global age, extrapolated
        with the linear growth (D1(a=1) = 1), in :data:`DELTA_L_RANGE`.

    Returns
    -------
    LocalModel

    Raises
    ------
    ParameterError
        For w0 != -1 or wa != 0; delta_l not a finite number in range; a region
        that turns around before the global age (the message gives the largest
        allowed delta_l); local parameters today outside the ranges of
        :data:`icgen.cosmology.RANGES` (a region close to turnaround has a tiny
        local h and a huge omega_m).

    Notes
    -----
    kappa = delta_l / u(1) (:func:`curvature_per_delta`); a0 = a_A(t0) solves
    H0 t_A(a0) = H0 t0 by Brent's method on the quadrature of the module notes;
    the local parameters follow from P(a0) (module notes, *Local parameters today*).
    """
    check_global_cosmology(cosmo)
    delta_l = _check_delta_l(delta_l)
    c_glob = _poly(cosmo, 0.0)
    t0 = _time_h0(c_glob, 1.0)
    kappa = delta_l * curvature_per_delta(cosmo)
    c = _poly(cosmo, kappa)
    a_m, t_turn = _turnaround(c)
    gyr = HUBBLE_TIME_GYR_H / cosmo.h
    if t_turn is not None and t_turn <= t0:
        d_max = delta_l_turnaround_at_t0(cosmo)
        raise ParameterError(
            f"delta_l = {delta_l!r}: the region turns around at t = {t_turn * gyr:.6g} Gyr, before the "
            f"global age t0 = {t0 * gyr:.6g} Gyr, so it has no local 'today'; need delta_l < "
            f"{d_max:.6g} for this cosmology")
    # a0 = a_A(t0): bracket it, then Brent.
    if a_m is not None:
        hi = a_m
    else:
        hi = 2.0
        while _time_h0(c, hi) < t0:
            hi *= 2.0
    lo = hi * 1e-6
    turn = None if a_m is None else (a_m, t_turn)
    a0 = brentq(lambda a: _time_h0(c, a, turn) - t0, lo, hi, xtol=1e-300,
                rtol=4.0 * np.finfo(float).eps, maxiter=200)
    p0 = _p_of_a(c, a0)
    try:
        local = dataclasses.replace(
            cosmo, h=cosmo.h * math.sqrt(p0) / a0**2, omega_m=cosmo.omega_m * a0 / p0,
            omega_b=cosmo.omega_b * a0 / p0, omega_k=(cosmo.omega_k - kappa) * a0**2 / p0,
            t_cmb=cosmo.t_cmb / a0, sigma_8=None, a_s=None)
    except ParameterError as exc:
        extra = (f" (it turns around at t = {t_turn * gyr:.6g} Gyr, t0 = {t0 * gyr:.6g} Gyr)"
                 if t_turn is not None else "")
        raise ParameterError(
            f"delta_l = {delta_l!r} gives a local model today outside the allowed parameter ranges: "
            f"{exc}; the region is too far from the mean{extra}: use a smaller |delta_l|") from None
    return LocalModel(global_cosmo=cosmo, delta_l=delta_l, kappa=kappa, scale_ratio=1.0 / a0,
                      cosmology=local, t0_h0=t0,
                      a_turn_local=None if a_m is None else a_m / a0, t_turn_h0=t_turn)


# --------------------------------------------------------------------------------------
# The solved pair of backgrounds and the mapping between them
# --------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class SeparateUniverse:
    """A global background and the solved local background of one region.

    Attributes
    ----------
    model : LocalModel
    global_bg : BackgroundTable
        Background of ``model.global_cosmo``.
    local_bg : BackgroundTable
        Background of ``model.cosmology`` (through turnaround and collapse if it
        recollapses).

    Notes
    -----
    Every method takes cosmic time t in Gyr since the big bang (the same clock
    in both models), a scalar or an array of any shape, and returns the same shape.
    """

    model: LocalModel
    global_bg: BackgroundTable
    local_bg: BackgroundTable

    # ---- scalars -------------------------------------------------------------------
    @property
    def delta_l(self):
        """Linear overdensity today (input)."""
        return self.model.delta_l

    @property
    def scale_ratio(self):
        """lim_{t->0} a_local / a_global."""
        return self.model.scale_ratio

    @property
    def length_ratio(self):
        """J = L_local [Mpc/h_local] / L_global [Mpc/h] for the same comoving region."""
        return self.model.length_ratio

    @property
    def t0_gyr(self):
        """The global age (the local model's a = 1), Gyr."""
        return self.model.t0_gyr

    @property
    def t_turn_gyr(self):
        """Local turnaround time from the local background (None if none), Gyr."""
        return self.local_bg.t_turn_gyr

    @property
    def t_collapse_gyr(self):
        """Local collapse time 2 t_turn from the local background (None if none), Gyr."""
        return self.local_bg.t_crunch_gyr

    @cached_property
    def growth_ratio_early(self):
        """R = lim_{t->0} D1_local(a_local(t)) / D1_global(a_global(t)).

        Notes
        -----
        Both growing modes share the early universe: with radiation both are
        proportional to 1 + 3y/2 with the same y = a_A omega_m/omega_r at equal
        time, without it to a_A. So R = (dD1_local/da_local) scale_ratio /
        (dD1_global/da_global) at early times = scale_ratio g0_global / g0_local
        (:func:`icgen.spectrum.growth_suppression_g0`).
        """
        return (self.scale_ratio * spectrum.growth_suppression_g0(self.global_bg)
                / spectrum.growth_suppression_g0(self.local_bg))

    # ---- functions of time --------------------------------------------------------
    def a_global(self, t_gyr):
        """Global scale factor at cosmic time t (Gyr)."""
        return self.global_bg.a_of_t(t_gyr)

    def a_local(self, t_gyr):
        """Local scale factor (1 at the global age) at cosmic time t (Gyr), both branches."""
        return self.local_bg.a_of_t(t_gyr)

    def delta_nonlinear(self, t_gyr):
        """Exact matter overdensity of the region, (scale_ratio a_global / a_local)^3 - 1."""
        ratio = self.scale_ratio * np.asarray(self.a_global(t_gyr)) / np.asarray(self.a_local(t_gyr))
        return _as_out(np.expm1(3.0 * np.log(ratio)))

    def delta_linear(self, t_gyr):
        """Linear overdensity delta_l D1_global(a_global(t)) (icgen's global D1, D1(1) = 1)."""
        return _as_out(self.delta_l * np.asarray(self.global_bg.D1(self.a_global(t_gyr))))

    def growth_ratio(self, t_gyr):
        """D1 of the local model over the global one at equal time, normalised to 1 at early times.

        Small-scale linear modes of the region are this factor larger than the same
        modes of the global model (13/21 delta_linear to first order in
        Einstein-de Sitter). Defined while the local model is on its expanding
        branch below ``local_bg.a_top``.
        """
        d_loc = np.asarray(self.local_bg.D1(self.a_local(t_gyr)))
        d_glob = np.asarray(self.global_bg.D1(self.a_global(t_gyr)))
        return _as_out(d_loc / (self.growth_ratio_early * d_glob))

    def a_local_of_a_global(self, a_global):
        """Local scale factor at the time the global one is ``a_global`` (expanding branches).

        a_global = 1 gives a_local = 1 exactly: both are the global age, by the
        definition of the local "today" (elsewhere the two tables agree to ~1e-13).
        """
        a = np.asarray(a_global, dtype=np.float64)
        return _as_out(np.where(a == 1.0, 1.0, self.a_local(self.global_bg.t(a))))

    def a_global_of_a_local(self, a_local):
        """Global scale factor at the time the local one is ``a_local`` (expanding branches).

        a_local = 1 gives a_global = 1 exactly (see :meth:`a_local_of_a_global`).
        """
        a = np.asarray(a_local, dtype=np.float64)
        return _as_out(np.where(a == 1.0, 1.0, self.a_global(self.local_bg.t(a))))

    # ---- collapse figures ----------------------------------------------------------
    def delta_linear_at_turnaround(self):
        """delta_linear at the local turnaround time (None if the region expands forever)."""
        return None if self.t_turn_gyr is None else self.delta_linear(self.t_turn_gyr)

    def delta_linear_at_collapse(self):
        """delta_linear at the local collapse time (None if the region expands forever)."""
        return None if self.t_collapse_gyr is None else self.delta_linear(self.t_collapse_gyr)


def solve(cosmo, delta_l, a_max_global=1e4, global_bg=None):
    """Build the local model of ``delta_l`` and solve both backgrounds.

    Parameters
    ----------
    cosmo : Cosmology
        Global cosmology (cosmological constant only).
    delta_l : float
        Linear overdensity of the region today (see :func:`local_model`).
    a_max_global : float, default 1e4
        Largest global scale factor tabulated (wide enough that a region
        collapsing late still has its collapse inside the table), 1 <= a_max <= 1e6.
    global_bg : BackgroundTable, optional
        An already solved global background (solved here otherwise).

    Returns
    -------
    SeparateUniverse

    Raises
    ------
    ParameterError
        See :func:`local_model`; also for a ``global_bg`` of another cosmology.
    """
    model = local_model(cosmo, delta_l)
    if global_bg is None:
        global_bg = background.solve(cosmo, a_max=a_max_global)
    elif not spectrum.same_background(global_bg.cosmo, cosmo):
        raise ParameterError("global_bg was solved for another cosmology than cosmo")
    local_bg = background.solve(model.cosmology, a_max=_A_MAX_LOCAL)
    return SeparateUniverse(model=model, global_bg=global_bg, local_bg=local_bg)


# --------------------------------------------------------------------------------------
# What the local initial conditions need
# --------------------------------------------------------------------------------------
def local_spectrum(su, pk):
    """The linear spectrum of the local model, in local units, from the global one.

    Parameters
    ----------
    su : SeparateUniverse
    pk : LinearSpectrum
        Global linear spectrum (k in h/Mpc, P in (Mpc/h)^3, global h), built on
        ``su.global_bg`` or on another table of the same background.

    Returns
    -------
    LinearSpectrum
        On ``su.local_bg``: k in h_local/Mpc, P in (Mpc/h_local)^3, at local z = 0
        (the global age), P_local(k, 0) = J^3 P_global(J k, 0) / R^2 with
        J = su.length_ratio and R = su.growth_ratio_early; normalisation "table"
        (the amplitude is the global one, carried over). Its nodes are the
        global nodes divided by J, so the spline, and its power-law
        extrapolation beyond the nodes, is the global one exactly. A power law
        stays a power law (source "power_law"); every other source becomes "table".

    Notes
    -----
    Derivation: a mode of integer wavevector n has k_global = 2 pi n / L_global
    and k_local = 2 pi n / L_local = k_global / J, and the same density contrast
    at early times in both boxes, sqrt(P_global(k_global, t)/L_global^3) =
    sqrt(P_local(k_local, t)/L_local^3). Each model moves its spectrum in time
    with its own D1, and D1_local / D1_global -> R at early times.
    """
    if not isinstance(su, SeparateUniverse):
        raise TypeError(f"su must be a SeparateUniverse, got {type(su).__name__}")
    if not isinstance(pk, spectrum.LinearSpectrum):
        raise TypeError(f"pk must be a LinearSpectrum, got {type(pk).__name__}")
    if not spectrum.same_background(pk.bg.cosmo, su.model.global_cosmo):
        raise ParameterError("pk was built for another background than the separate universe's global one")
    ln_j = math.log(su.length_ratio)
    source = "power_law" if pk.source == "power_law" else "table"
    return spectrum.LinearSpectrum(
        ln_k=pk.ln_k - ln_j, ln_p0=pk.ln_p0 + 3.0 * ln_j - 2.0 * math.log(su.growth_ratio_early),
        bg=su.local_bg, source=source,
        label=f"separate-universe spectrum (delta_l = {su.delta_l:g}) from the global {pk.label}",
        z_table=0.0, normalisation="table")
