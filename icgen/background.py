"""Friedmann background and linear/second-order growth, solved once and tabulated in ln a.

``solve(cosmo)`` integrates, in x = ln a, the ordinary differential equations for
cosmic time, conformal time and the growth factors D1 and D2 from the early-time
series they imply, and returns a frozen :class:`BackgroundTable` that evaluates
every quantity vectorised over a (or t) by Hermite interpolation with exact
derivatives. Closed-form quantities (E, H, Omega_x, q, rho_crit) are evaluated
directly.

Integration: the equations are linear once solved in order (t and eta are quadratures,
D1 obeys a linear homogeneous equation, D2 the same equation with the source
-(3/2) Omega_m D1^2), so every interval between table nodes is one affine map of the
state. The maps of all intervals are built at once by 4-stage Gauss-Legendre
collocation (order 8; :mod:`icgen._collocation`) and chained from the early-time
series. Measured (Planck18, open, recollapsing, w0-wa): the tables change by at most
3e-14 (relative) with 3 or 5 stages, or with 6 stages and steps cut to 2e-3 in ln a,
and agree with scipy's DOP853 at rtol 1e-13 to 4e-12, that integrator's own error
(tests/test_background_integrator.py).

Conventions
-----------
* E(a) = H(a)/H0 with
  E^2 = omega_r a^-4 + omega_m a^-3 + omega_k a^-2 + omega_de f_de(a),
  f_de(a) = a^(-3(1 + w0 + wa)) exp(-3 wa (1 - a))  (Linder 2003, eq. 5 integrated).
* ' = d/d ln a. Linear growth (only matter clusters; radiation and dark energy are
  smooth):  D'' + (2 + d ln E/d ln a) D' - (3/2) Omega_m(a) D = 0.
  Second order: D2'' + (2 + d ln E/d ln a) D2' - (3/2) Omega_m(a) D2 = -(3/2) Omega_m(a) D1^2
  (Bouchet et al. 1995, A&A 296, 575, eq. 43 rewritten in ln a; Scoccimarro 1998 eq. B6).
* D1 is the growing mode normalised to D1(a=1) = 1; D2 is the solution that
  vanishes as a -> 0 with no admixture of the first-order mode, computed with the
  normalised D1 as its source, so D2 = -(3/7) D1^2 exactly in Einstein-de Sitter.
  f1 = d ln D1/d ln a, f2 = d ln D2/d ln a.
* Times in Gyr, H in km/s/Mpc, rho_crit in h^2 Msun/Mpc^3 (physical).

Early-time series (the integration starts from them, so the result does not depend
on where it starts):

* With radiation, y = a/a_eq, a_eq = omega_r/omega_m, and the matter+radiation
  equations are exact; the growing mode is D1 = 1 + 3y/2 (Meszaros 1974; e.g.
  Weinberg 2008, eq. 6.6.12) and D2 = sum_n c_n y^n with c_0 = 0,
  n^2 c_n + [(n-1)^2 + (n-1)/2 - 3/2] c_{n-1} = r_n, r_1 = -3/2, r_2 = -9/2,
  r_3 = -27/8, r_n = 0 beyond (derived by substituting the series into the D2
  equation multiplied by 1 + y; c_1 = -3/2, c_2 = -9/8, c_3 = 1/16).
* Without radiation, matter + curvature: D1 = a (1 - 4 kappa a / 7), kappa =
  omega_k/omega_m (first order in a, derived by substitution), D2 = -(3/7) a^2.
* H0 t = omega_r^-1/2 (a^2/2 - eps a^3/6 + 3 eps^2 a^4/32), eps = omega_m/omega_r,
  and H0 eta = 2a/(sqrt(omega_r + omega_m a) + sqrt(omega_r)) with radiation;
  H0 t = (2/3) a^1.5 omega_m^-1/2 (1 - 3 kappa a/10) and
  H0 eta = 2 (a/omega_m)^1/2 (1 - kappa a/6) without (integrals of dt = da/(a H)).

Recollapsing models are integrated in ln a up to a_switch close to the maximum
a_max, then in cosmic time through turnaround with the acceleration equation
a''/a = -(H0^2/2) [2 omega_r a^-4 + omega_m a^-3 + (1 + 3w) omega_de f_de]
(a''=d^2a/dt^2). Because E^2 depends on a only, the collapse mirrors the expansion
about the turnaround time, t_crunch = 2 t_turn. Growth is tabulated on the
expanding branch for a <= a_switch.
"""

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from ._collocation import chain, gauss_legendre, second_order_steps
from ._interp import CubicHermite
from ._roots import brent
from .cosmology import Cosmology
from .errors import ModelError, ParameterError
from .units import HUBBLE_TIME_GYR_H, RHO_CRIT_100

__all__ = [
    "BackgroundTable",
    "solve",
    "E2",
    "E",
    "dlnE_dlna",
    "w_de",
    "FATE_FOREVER",
    "FATE_RECOLLAPSE",
]

FATE_FOREVER = "expands_forever"
FATE_RECOLLAPSE = "recollapses"

#: Stages of the Gauss-Legendre collocation that integrates the ln a table (order 2 x 4 = 8).
_STAGES = 4
#: Longest integration step in ln a; longer table intervals (and the stretch from the
#: start of the integration to a_min) are split into equal steps. The default table's
#: step is ~4e-3. Measured (100-node tables, Planck18 and a recollapsing model): steps of
#: 0.05 instead change the tables by < 5e-15, steps of 0.1 by < 6e-14.
_H_MAX = 0.01
#: Integration steps handled per batch (bounds the memory of the stage matrices).
_CHUNK = 1 << 15
#: Relative tolerance of the time-domain (DOP853) integration through a turnaround.
_RTOL = 1e-12
#: Points of the ln a table; the cubic Hermite interpolation error is ~ h^4/384
#: times the fourth derivative, h = ln a spacing (about 5e-3 here, so < 1e-10).
_N_TABLE = 6000
#: Largest a searched for a turnaround; beyond it a model "expands forever".
_A_SEARCH_MAX = 1e8


def w_de(a, cosmo):
    """Dark-energy equation of state w(a) = w0 + wa (1 - a) (Linder 2003, eq. 1)."""
    a = np.asarray(a, dtype=np.float64)
    w = cosmo.w0 + cosmo.wa * (1.0 - a)
    return w if w.ndim else float(w)


def _f_de(a, cosmo):
    # rho_de(a)/rho_de(1) for w(a) = w0 + wa(1-a): exp(3 int_a^1 (1+w) da'/a')
    # = a^{-3(1+w0+wa)} exp(-3 wa (1-a)) (Linder 2003, PRL 90, 091301).
    return a ** (-3.0 * (1.0 + cosmo.w0 + cosmo.wa)) * np.exp(-3.0 * cosmo.wa * (1.0 - a))


def _components(a, cosmo):
    """Each term of E^2(a): radiation, matter, curvature, dark energy."""
    return (cosmo.omega_r / a**4, cosmo.omega_m / a**3, cosmo.omega_k / a**2,
            cosmo.omega_de * _f_de(a, cosmo))


def E2(a, cosmo):
    """Squared dimensionless Hubble rate E^2(a) = H^2/H0^2 (Friedmann equation).

    Parameters
    ----------
    a : float or array_like
        Scale factor, a > 0.
    cosmo : Cosmology

    Returns
    -------
    float or ndarray
        E^2, same shape as ``a``. Negative where no real expansion exists.
    """
    a = np.asarray(a, dtype=np.float64)
    e2 = sum(_components(a, cosmo))
    return e2 if e2.ndim else float(e2)


def E(a, cosmo):
    """Dimensionless Hubble rate E(a) = H(a)/H0 on the expanding branch (>= 0)."""
    e = np.sqrt(np.asarray(E2(a, cosmo)))
    return e if e.ndim else float(e)


def dlnE_dlna(a, cosmo):
    """Logarithmic derivative d ln E / d ln a = (1/2E^2) dE^2/d ln a.

    Notes
    -----
    dE^2/d ln a = -4 Or a^-4 - 3 Om a^-3 - 2 Ok a^-2 - 3 (1 + w(a)) Ode f_de(a).
    """
    a = np.asarray(a, dtype=np.float64)
    r, m, k, de = _components(a, cosmo)
    w = cosmo.w0 + cosmo.wa * (1.0 - a)
    d = (-4.0 * r - 3.0 * m - 2.0 * k - 3.0 * (1.0 + w) * de) / (2.0 * (r + m + k + de))
    return d if d.ndim else float(d)


def _accel(a, cosmo):
    # a''/a in units of H0^2 (acceleration equation; Friedmann 1922, with p = w rho c^2):
    # -(1/2) sum_i (1 + 3 w_i) Omega_i(a) E^2.
    r, m, _, de = _components(a, cosmo)
    w = cosmo.w0 + cosmo.wa * (1.0 - a)
    return -0.5 * (2.0 * r + m + (1.0 + 3.0 * w) * de)


def _d2_series_coeffs(n_terms=10):
    """Coefficients c_n of D2 = sum c_n y^n in a matter+radiation universe (module notes)."""
    r = {1: -1.5, 2: -4.5, 3: -27.0 / 8.0}
    c = [0.0]
    for n in range(1, n_terms + 1):
        m = n - 1
        c.append((r.get(n, 0.0) - (m * m + 0.5 * m - 1.5) * c[m]) / (n * n))
    return np.array(c)


def _find_turnaround(cosmo):
    """First a > 1 where E^2 vanishes, or None if none up to _A_SEARCH_MAX."""
    x = np.linspace(0.0, np.log(_A_SEARCH_MAX), 20001)
    with np.errstate(over="ignore"):  # w0-wa dark energy may overflow far in the future: E^2 = inf > 0
        e2 = E2(np.exp(x), cosmo)
    neg = np.nonzero(e2 <= 0.0)[0]
    if neg.size == 0:
        return None
    i = neg[0]
    return float(np.exp(brent(lambda xx: E2(np.exp(xx), cosmo), x[i - 1], x[i], xtol=1e-15, rtol=1e-15)))


def _check_big_bang(cosmo, a_init):
    """Refuse models whose E^2 vanishes for some a < 1 (no big bang: bounce or loiter)."""
    x = np.linspace(np.log(a_init), 0.0, 20001)
    e2 = E2(np.exp(x), cosmo)
    bad = np.nonzero(e2 <= 0.0)[0]
    if bad.size:
        a_bad = float(np.exp(x[bad[-1]]))
        raise ModelError(
            f"no big bang: H^2 vanishes at a = {a_bad:.4g} < 1 for omega_m = {cosmo.omega_m}, "
            f"omega_k = {cosmo.omega_k}, omega_de = {cosmo.omega_de:.6g} (a bouncing or loitering "
            "model); lower omega_de or raise omega_m")
    r, m, k, de = _components(a_init, cosmo)
    if abs(de) > 1e-8 * (r + m):
        raise ModelError(
            f"dark energy is not negligible at a = {a_init:.3g} "
            f"(w0 + wa = {cosmo.w0 + cosmo.wa:g}); the growth series needs matter or radiation "
            "to dominate early: need w0 + wa < 0")


def _early_state(a, cosmo):
    """State [t, eta, D1, D1', D2, D2'] at tiny a from the early-time series (H0 = 1)."""
    om, orad = cosmo.omega_m, cosmo.omega_r
    if orad > 0.0:
        y = a * om / orad
        eps = om / orad
        t = (a**2 / 2.0 - eps * a**3 / 6.0 + 3.0 * eps**2 * a**4 / 32.0) / np.sqrt(orad)
        eta = 2.0 * a / (np.sqrt(orad + om * a) + np.sqrt(orad))
        d1, d1p = 1.0 + 1.5 * y, 1.5 * y
        c = _d2_series_coeffs()
        n = np.arange(c.size)
        d2, d2p = float(np.sum(c * y**n)), float(np.sum(n * c * y**n))
    else:
        kap = cosmo.omega_k / om
        t = 2.0 / 3.0 * a**1.5 / np.sqrt(om) * (1.0 - 0.3 * kap * a)
        eta = 2.0 * np.sqrt(a / om) * (1.0 - kap * a / 6.0)
        d1, d1p = a * (1.0 - 4.0 / 7.0 * kap * a), a * (1.0 - 8.0 / 7.0 * kap * a)
        d2, d2p = -3.0 / 7.0 * a**2, -6.0 / 7.0 * a**2
    return np.array([t, eta, d1, d1p, d2, d2p])


def _coefficients(x, cosmo):
    """1/E, 1/(a E), d ln E/d ln a and Omega_m(a) at x = ln a (H0 = 1); x of any shape."""
    a = np.exp(x)
    r, m, k, de = _components(a, cosmo)
    e2 = r + m + k + de
    e = np.sqrt(e2)
    w = cosmo.w0 + cosmo.wa * (1.0 - a)
    dlne = (-4.0 * r - 3.0 * m - 2.0 * k - 3.0 * (1.0 + w) * de) / (2.0 * e2)
    return 1.0 / e, 1.0 / (a * e), dlne, m / e2


def _rhs_lna(x, y, cosmo):
    """d/d ln a of [t, eta, D1, D1', D2, D2'] (H0 = 1); vectorised over columns of y."""
    inv_e, inv_ae, dlne, om_a = _coefficients(x, cosmo)
    _, _, d1, d1p, d2, d2p = y
    return np.array([
        inv_e,
        inv_ae,
        d1p,
        -(2.0 + dlne) * d1p + 1.5 * om_a * d1,
        d2p,
        -(2.0 + dlne) * d2p + 1.5 * om_a * (d2 - d1 * d1),
    ])


def _integration_nodes(x_table, x0, h_max):
    """Integration nodes from x0 through every table node, no step longer than h_max.

    Returns the nodes and the indices of the table nodes among them (the table nodes are
    kept exactly; each gap is split into equal steps).
    """
    ends = np.concatenate(([x0], x_table)) if x0 < x_table[0] else x_table
    gaps = np.diff(ends)
    n_sub = np.maximum(np.ceil(gaps / h_max).astype(np.int64), 1)
    first = np.cumsum(n_sub) - n_sub
    j = np.arange(int(n_sub.sum())) - np.repeat(first, n_sub)
    nodes = np.append(np.repeat(ends[:-1], n_sub) + np.repeat(gaps, n_sub) * (j / np.repeat(n_sub, n_sub)),
                      ends[-1])
    at = np.append(first, n_sub.sum())
    return nodes, at[ends.size - x_table.size:]


def _integrate(x, y0, cosmo):
    """[t, eta, D1, D1', D2, D2'] (H0 = 1, D1 unnormalised) at the nodes x, from y0 at x[0].

    Gauss-Legendre collocation with _STAGES stages on the intervals between the nodes
    (:mod:`icgen._collocation`): t and eta are Gauss quadratures of 1/E and 1/(a E);
    D1 solves D'' = (3/2) Omega_m(a) D - (2 + d ln E/d ln a) D', and D2 the same equation
    with the source -(3/2) Omega_m(a) D1^2 evaluated with D1's stage values (which makes it
    the Gauss method of the combined system, order 2 _STAGES at the nodes).
    """
    tab = gauss_legendre(_STAGES)
    out = np.empty((6, x.size))
    out[:, 0] = y0
    for lo in range(0, x.size - 1, _CHUNK):
        hi = min(lo + _CHUNK, x.size - 1)
        h = np.diff(x[lo:hi + 1])
        xs = x[lo:hi] + tab.c[:, None] * h                # stage abscissae, shape (s, n)
        inv_e, inv_ae, dlne, om_a = _coefficients(xs, cosmo)
        out[0, lo + 1:hi + 1] = out[0, lo] + np.cumsum(h * (tab.b @ inv_e))
        out[1, lo + 1:hi + 1] = out[1, lo] + np.cumsum(h * (tab.b @ inv_ae))
        steps = second_order_steps(h, 1.5 * om_a, 2.0 + dlne, tab)
        out[2:4, lo:hi + 1] = chain(steps.dphi, None, out[2:4, lo])
        d1_stage = steps.stage_values(out[2, lo:hi], out[3, lo:hi])
        q = steps.source_terms(-1.5 * om_a * d1_stage**2)
        out[4:6, lo:hi + 1] = chain(steps.dphi, q, out[4:6, lo])
    return out


def _as_out(v):
    return v if v.ndim else float(v)


@dataclass(frozen=True, eq=False)
class BackgroundTable:
    """The solved background of one cosmology, tabulated in x = ln a.

    Attributes
    ----------
    cosmo : Cosmology
    ln_a : ndarray, shape (n,)
        Table nodes in ln a, from ln a_min to ln a_top.
    t_h0, eta_h0 : ndarray, shape (n,)
        Cosmic and conformal time in units of 1/H0.
    d1, d1p, d1pp : ndarray, shape (n,)
        D1 (normalised D1(1) = 1) and its first and second ln a derivatives.
    d2, d2p, d2pp : ndarray, shape (n,)
        D2 and its ln a derivatives (same normalisation).
    fate : str
        ``"expands_forever"`` or ``"recollapses"``.
    a_turn : float or None
        Scale factor at turnaround (maximum expansion) of a recollapsing model.
    t_turn_h0, t_crunch_h0 : float or None
        Turnaround and crunch times in 1/H0.
    collapse_t_h0, collapse_a, collapse_adot : ndarray
        Time-domain table of a(t) and da/dt (units H0 = 1) from the end of the
        ln a table through turnaround (empty for ever-expanding models).

    Notes
    -----
    All arrays are read-only. Evaluate with the methods; each accepts a scalar or
    an array and returns the same shape (a float for a scalar input). Functions of
    a refer to the expanding branch and are defined for a_min <= a <= a_top.
    """

    cosmo: Cosmology
    ln_a: np.ndarray
    t_h0: np.ndarray
    eta_h0: np.ndarray
    d1: np.ndarray
    d1p: np.ndarray
    d1pp: np.ndarray
    d2: np.ndarray
    d2p: np.ndarray
    d2pp: np.ndarray
    fate: str
    a_turn: float | None
    t_turn_h0: float | None
    t_crunch_h0: float | None
    collapse_t_h0: np.ndarray
    collapse_a: np.ndarray
    collapse_adot: np.ndarray

    def __post_init__(self):
        for name in ("ln_a", "t_h0", "eta_h0", "d1", "d1p", "d1pp", "d2", "d2p", "d2pp",
                     "collapse_t_h0", "collapse_a", "collapse_adot"):
            getattr(self, name).flags.writeable = False

    # ---- ranges and conversions -------------------------------------------------
    @property
    def a_min(self):
        """Smallest tabulated scale factor."""
        return float(np.exp(self.ln_a[0]))

    @property
    def a_top(self):
        """Largest tabulated scale factor on the expanding branch."""
        return float(np.exp(self.ln_a[-1]))

    @cached_property
    def gyr_per_h0(self):
        """1/H0 in Gyr."""
        return HUBBLE_TIME_GYR_H / self.cosmo.h

    @property
    def age_gyr(self):
        """Age of the universe today, t(a=1), in Gyr."""
        return self.t(1.0)

    @property
    def t_turn_gyr(self):
        """Turnaround time in Gyr (None if the model expands forever)."""
        return None if self.t_turn_h0 is None else self.t_turn_h0 * self.gyr_per_h0

    @property
    def t_crunch_gyr(self):
        """Crunch time in Gyr, 2 t_turn (None if the model expands forever)."""
        return None if self.t_crunch_h0 is None else self.t_crunch_h0 * self.gyr_per_h0

    def _x(self, a, name="a"):
        a = np.asarray(a, dtype=np.float64)
        lo, hi = self.a_min, self.a_top
        if np.any(~np.isfinite(a)) or np.any((a < lo * (1 - 1e-14)) | (a > hi * (1 + 1e-14))):
            bad = a[~((a >= lo * (1 - 1e-14)) & (a <= hi * (1 + 1e-14)))].ravel()[0]
            extra = (f"; the model turns around at a_max = {self.a_turn:.6g} and the growth table "
                     "stops just short of it" if self.a_turn is not None else
                     "; solve the background with a larger a_max")
            raise ParameterError(f"{name} = {bad!r} is outside the background table "
                                 f"[{lo:.4g}, {hi:.6g}]{extra}")
        return np.clip(np.log(a), self.ln_a[0], self.ln_a[-1])

    # ---- interpolants -----------------------------------------------------------
    def _spline(self, y, dy):
        return CubicHermite(self.ln_a, y, dy)

    @cached_property
    def _sp(self):
        a = np.exp(self.ln_a)
        e = E(a, self.cosmo)
        return {
            "t": self._spline(self.t_h0, 1.0 / e),
            "eta": self._spline(self.eta_h0, 1.0 / (a * e)),
            "d1": self._spline(self.d1, self.d1p),
            "d1p": self._spline(self.d1p, self.d1pp),
            "d2": self._spline(self.d2, self.d2p),
            "d2p": self._spline(self.d2p, self.d2pp),
        }

    @cached_property
    def _x_of_lnt(self):
        # Inverse table: ln a as a function of ln t, with exact slope d ln a/d ln t = t H.
        a = np.exp(self.ln_a)
        slope = self.t_h0 * E(a, self.cosmo)
        return CubicHermite(np.log(self.t_h0), self.ln_a, slope)

    @cached_property
    def _a_of_t_collapse(self):
        return CubicHermite(self.collapse_t_h0, self.collapse_a, self.collapse_adot)

    # ---- closed-form quantities -------------------------------------------------
    def E(self, a):
        """E(a) = H(a)/H0 (dimensionless), expanding branch."""
        return E(a, self.cosmo)

    def hubble(self, a):
        """Hubble rate H(a) in km/s/Mpc, expanding branch."""
        return _as_out(np.asarray(self.cosmo.H0 * np.asarray(E(a, self.cosmo))))

    def omega_m_of_a(self, a):
        """Matter density parameter Omega_m(a) = omega_m a^-3 / E^2."""
        a = np.asarray(a, dtype=np.float64)
        return _as_out(self.cosmo.omega_m / a**3 / np.asarray(E2(a, self.cosmo)))

    def omega_r_of_a(self, a):
        """Radiation density parameter Omega_r(a) = omega_r a^-4 / E^2."""
        a = np.asarray(a, dtype=np.float64)
        return _as_out(self.cosmo.omega_r / a**4 / np.asarray(E2(a, self.cosmo)))

    def omega_k_of_a(self, a):
        """Curvature density parameter Omega_k(a) = omega_k a^-2 / E^2."""
        a = np.asarray(a, dtype=np.float64)
        return _as_out(self.cosmo.omega_k / a**2 / np.asarray(E2(a, self.cosmo)))

    def omega_de_of_a(self, a):
        """Dark-energy density parameter Omega_de(a) = omega_de f_de(a) / E^2."""
        a = np.asarray(a, dtype=np.float64)
        return _as_out(self.cosmo.omega_de * _f_de(a, self.cosmo) / np.asarray(E2(a, self.cosmo)))

    def rho_crit(self, a):
        """Critical density 3 H(a)^2 / (8 pi G) in h^2 Msun/Mpc^3 (physical)."""
        return _as_out(np.asarray(RHO_CRIT_100 * np.asarray(E2(a, self.cosmo))))

    def deceleration(self, a):
        """Deceleration parameter q(a) = -a a''/a'^2 = -(a''/a)/H^2."""
        a = np.asarray(a, dtype=np.float64)
        return _as_out(-_accel(a, self.cosmo) / np.asarray(E2(a, self.cosmo)))

    # ---- tabulated quantities ---------------------------------------------------
    def t(self, a):
        """Cosmic time t(a) since the big bang in Gyr, expanding branch."""
        return _as_out(self._sp["t"](self._x(a)) * self.gyr_per_h0)

    def conformal_time(self, a):
        """Conformal time eta(a) = int dt/a in Gyr (times c: comoving horizon)."""
        return _as_out(self._sp["eta"](self._x(a)) * self.gyr_per_h0)

    def D1(self, a):
        """Linear growth factor, growing mode, D1(a=1) = 1."""
        return _as_out(self._sp["d1"](self._x(a)))

    def f1(self, a):
        """Linear growth rate f1 = d ln D1 / d ln a."""
        x = self._x(a)
        return _as_out(self._sp["d1p"](x) / self._sp["d1"](x))

    def D2(self, a):
        """Second-order growth factor (negative; -(3/7) D1^2 in Einstein-de Sitter)."""
        return _as_out(self._sp["d2"](self._x(a)))

    def f2(self, a):
        """Second-order growth rate f2 = d ln D2 / d ln a (2 in Einstein-de Sitter)."""
        x = self._x(a)
        return _as_out(self._sp["d2p"](x) / self._sp["d2"](x))

    def a_of_t(self, t_gyr):
        """Scale factor at cosmic time t (Gyr), on both branches of a recollapsing model.

        Raises
        ------
        ParameterError
            If t is outside (0, t_crunch] or beyond the table's a_top.
        """
        t = np.asarray(t_gyr, dtype=np.float64) / self.gyr_per_h0
        t_lo = self.t_h0[0]
        if self.fate == FATE_RECOLLAPSE:
            t_hi = self.t_crunch_h0 - t_lo
        else:
            t_hi = self.t_h0[-1]
        if np.any(~np.isfinite(t)) or np.any((t < t_lo * (1 - 1e-12)) | (t > t_hi * (1 + 1e-12))):
            raise ParameterError(
                f"t_gyr outside the range the background covers, "
                f"[{t_lo * self.gyr_per_h0:.6g}, {t_hi * self.gyr_per_h0:.6g}] Gyr")
        t = np.clip(t, t_lo, t_hi)
        if self.fate != FATE_RECOLLAPSE:
            return _as_out(np.exp(self._x_of_lnt(np.log(t))))
        tm = np.where(t > self.t_turn_h0, 2.0 * self.t_turn_h0 - t, t)  # mirror the collapse
        t_sw = self.t_h0[-1]
        out = np.empty_like(tm)
        early = tm <= t_sw
        out[early] = np.exp(self._x_of_lnt(np.log(np.maximum(tm[early], t_lo))))
        out[~early] = self._a_of_t_collapse(tm[~early])
        return _as_out(out)


def solve(cosmo, a_min=1e-8, a_max=100.0, n_table=_N_TABLE):
    """Solve the Friedmann background and growth of a cosmology.

    Parameters
    ----------
    cosmo : Cosmology
    a_min : float, default 1e-8
        Smallest scale factor tabulated (the integration itself starts earlier
        where needed, from the early-time series). 1e-12 <= a_min <= 1e-2.
    a_max : float, default 100
        Largest scale factor tabulated for an ever-expanding model, 1 <= a_max <= 1e6.
        A recollapsing model is tabulated in ln a to just below its turnaround
        and through turnaround in time.
    n_table : int, default 6000
        Nodes of the ln a table.

    Returns
    -------
    BackgroundTable

    Raises
    ------
    ModelError
        For models without a big bang or with dark energy dominating early.
    ParameterError
        For a_min or a_max out of range.

    References
    ----------
    .. [1] Peebles (1980), The Large-Scale Structure of the Universe, sec. 11.
    .. [2] Bouchet, Colombi, Hivon & Juszkiewicz (1995), A&A 296, 575.
    """
    if not isinstance(cosmo, Cosmology):
        raise TypeError(f"cosmo must be a Cosmology, got {type(cosmo).__name__}")
    if not (1e-12 <= a_min <= 1e-2):
        raise ParameterError(f"a_min = {a_min!r} is outside the allowed range [1e-12, 1e-2]")
    if not (1.0 <= a_max <= 1e6):
        raise ParameterError(f"a_max = {a_max!r} is outside the allowed range [1, 1e6]")
    if not (100 <= n_table <= 10**6):
        raise ParameterError(f"n_table = {n_table!r} is outside the allowed range [100, 1e6]")

    # Start well inside the regime where the series is exact to double precision.
    a_init = a_min
    if cosmo.omega_r > 0.0:
        a_init = min(a_min, 1e-6 * cosmo.omega_r / cosmo.omega_m)
    a_init = min(a_init, 1e-10)
    _check_big_bang(cosmo, a_init)
    a_turn = _find_turnaround(cosmo)
    if a_turn is None:
        fate, a_top = FATE_FOREVER, a_max
    else:
        fate = FATE_RECOLLAPSE
        # Stop the ln a integration short of the turnaround, where d ln a/dt -> 0.
        a_top = a_turn - 0.02 * (a_turn - 1.0)

    x0, x1 = np.log(a_init), np.log(a_top)
    x = np.linspace(max(np.log(a_min), x0), x1, n_table)
    if fate == FATE_RECOLLAPSE:
        x = _refine_near_turnaround(x, np.log(a_turn))
    if 0.0 not in x:  # make a = 1 a node, so D1(1) = 1 to round-off
        x = np.sort(np.append(x[np.abs(x) > 1e-9], 0.0))
    nodes, at = _integration_nodes(x, x0, _H_MAX)
    y = _integrate(nodes, _early_state(a_init, cosmo), cosmo)[:, at]
    dy = _rhs_lna(x, y, cosmo)
    norm = float(y[2, np.flatnonzero(x == 0.0)[0]])
    d1, d1p, d1pp = y[2] / norm, y[3] / norm, dy[3] / norm
    d2, d2p, d2pp = y[4] / norm**2, y[5] / norm**2, dy[5] / norm**2

    empty = np.zeros(0)
    ct, ca, cadot = empty, empty.copy(), empty.copy()
    t_turn = t_crunch = None
    if fate == FATE_RECOLLAPSE:
        ct, ca, cadot, t_turn = _through_turnaround(cosmo, a_top, float(y[0, -1]))
        t_crunch = 2.0 * t_turn

    return BackgroundTable(
        cosmo=cosmo, ln_a=x, t_h0=y[0], eta_h0=y[1], d1=d1, d1p=d1p, d1pp=d1pp,
        d2=d2, d2p=d2p, d2pp=d2pp, fate=fate, a_turn=a_turn, t_turn_h0=t_turn,
        t_crunch_h0=t_crunch, collapse_t_h0=ct, collapse_a=ca, collapse_adot=cadot)


#: Step of the ln a nodes just before a turnaround, as a fraction of the distance to it.
_TURN_STEP = 0.02


def _refine_near_turnaround(x, x_turn):
    """Replace the uniform ln a nodes near a turnaround by nodes geometric in the distance to it.

    Close to the turnaround t, eta, D1 and D2 vary like sqrt(x_turn - x) (d ln a/dt -> 0), so
    on a uniform grid of step h the cubic Hermite error grows like (h / (x_turn - x))^4 (with
    6000 nodes it reached 2e-6 in t and 5e-6 in f1 near a_top for omega_m = 2, omega_k = -1).
    Steps of _TURN_STEP times the distance bring that to 4e-10 in t and 5e-9 in f1 (against the
    cycloid and Heath solutions, tests/test_background.py) for about 400 more nodes.
    """
    h = x[1] - x[0]
    d_from = min(h / _TURN_STEP, x_turn - x[0])
    d_top = x_turn - x[-1]
    if d_from <= d_top:
        return x
    n = int(np.ceil(np.log(d_from / d_top) / np.log1p(_TURN_STEP))) + 1
    return np.concatenate([x[x_turn - x > d_from], x_turn - np.geomspace(d_from, d_top, n)])


def _through_turnaround(cosmo, a_start, t_start, n=2000):
    """Integrate a(t) from a_start (expanding) to turnaround with the acceleration equation.

    Returns time nodes, a, da/dt (H0 = 1) and the turnaround time. (scipy's DOP853 with a
    terminal event at da/dt = 0, imported here: only recollapsing models need it.)
    """
    from scipy.integrate import solve_ivp

    def rhs(t, y):
        return [y[1], y[0] * _accel(y[0], cosmo)]

    def turn(t, y):
        return y[1]
    turn.terminal = True
    turn.direction = -1

    adot0 = a_start * E(a_start, cosmo)
    # Generous upper limit: time to coast from a_start to a_turn at a tenth of the start speed.
    t_end = t_start + 100.0 * a_start / adot0 + 10.0
    sol = solve_ivp(rhs, (t_start, t_end), [a_start, adot0], method="DOP853", rtol=_RTOL,
                    atol=1e-30, dense_output=True, events=turn)
    if sol.status != 1:  # pragma: no cover - guarded by the E^2 root
        raise ModelError("turnaround not reached while integrating a recollapsing model")
    t_turn = float(sol.t_events[0][0])
    tt = np.linspace(t_start, t_turn, n)
    yy = sol.sol(tt)
    yy[1, -1] = 0.0
    return tt, yy[0], yy[1], t_turn
