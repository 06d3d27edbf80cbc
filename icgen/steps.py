"""Integrator step tables: the steps of a comoving leapfrog and their drift and kick integrals.

Conventions
-----------
Comoving position x (Mpc/h), cosmic time t, and the canonical momentum per unit
mass p = a^2 dx/dt (Quinn, Katz, Stadel & Lake 1997, sec. 2). The peculiar
potential phi is defined with the *comoving* density, so that its source does
not depend on time:

    laplacian(phi) = 4 pi G a^3 (rho - rho_bar) = (3/2) omega_m H0^2 delta,

i.e. phi = a Phi, where Phi is the usual peculiar potential with
laplacian(Phi) = 4 pi G a^2 (rho - rho_bar). The equations of motion follow from
the Hamiltonian H = p^2 / (2 a^2) + phi(x) / a:

    dx/dt = p / a^2,        dp/dt = -grad(phi) / a.

(Check, derived here: with r = a x, Newton's law gives x'' + 2 H x' = -grad(Phi)/a^2,
and d/dt (a^2 x') = a^2 (x'' + 2 H x') = -grad(Phi) = -grad(phi)/a.) The
peculiar velocity is v = a dx/dt = p / a.

Because the time dependence sits in the factors 1/a^2 and 1/a only, a drift over
[a_1, a_2] moves x by p * int dt/a^2 and a kick changes p by -grad(phi) * int dt/a,
both integrals taken exactly over the background. One step [a_begin, a_end] with
half-step boundary a_mid is

* kick-drift-kick (KDK): p += -grad(phi) K_1;  x += p D;  p += -grad(phi) K_2,
* drift-kick-drift (DKD): x += p D_1;  p += -grad(phi) K;  x += p D_2,

with D = int_{a_begin}^{a_end} dt/a^2, K = int dt/a over the whole step and
D_1, K_1 over [a_begin, a_mid], D_2, K_2 over [a_mid, a_end] (D = D_1 + D_2,
K = K_1 + K_2). a_mid is the midpoint of the step in the spacing variable s(a)
(common practice; any midpoint within O(step^2) of the time midpoint keeps the
scheme second order).

Units
-----
Integrals are in units of 1/H0 with H0 = 100 h km/s/Mpc, i.e. the table holds
drift = H0 int dt/a^2 = int da / (a^3 E(a)) and kick = H0 int dt/a =
int da / (a^2 E(a)), dimensionless numbers independent of h (E = H/H0). With x
in Mpc/h, p in units of H0 Mpc/h and grad(phi) in H0^2 Mpc/h they apply as
written. Multiply by 1/H0 = 9.7779/h Gyr (:attr:`BackgroundTable.gyr_per_h0`)
for Gyr. ``dt_gyr`` is the cosmic time elapsed over the step, in Gyr.

Quadrature
----------
With x = ln a, dt = dx / H, so H0 int dt a^-n = int e^(-n x) / E(e^x) dx. Every
interval is cut into panels no wider than 0.125 in ln a (and, in a recollapsing
model, no wider than its distance to the turnaround, where 1/E is singular) and
each panel is integrated by 12-point Gauss-Legendre. E(a) is the closed-form
Friedmann rate (radiation, matter, curvature, w0-wa dark energy), so the result
is exact to round-off (relative error ~1e-15; checked against scipy.integrate.quad
and the Einstein-de Sitter closed forms in tests/test_steps.py).

References
----------
.. [1] Quinn, Katz, Stadel & Lake (1997), "Time stepping N-body simulations",
       astro-ph/9710043, sec. 2 (canonical comoving coordinates and the leapfrog
       drift and kick operators).
"""

from dataclasses import dataclass

import numpy as np

from . import background
from .errors import ParameterError
from .schedule import SPACINGS, make_spacing

__all__ = ["StepTable", "StepSettings", "leapfrog_integrals", "build", "settings", "COLUMN_UNITS"]

#: Gauss-Legendre nodes and weights on [-1, 1] (12 points: exact for polynomials of degree 23).
_GL_X, _GL_W = np.polynomial.legendre.leggauss(12)
#: Widest quadrature panel in ln a.
_PANEL = 0.125
#: Most steps a table may hold.
MAX_STEPS = 10**7
#: Leapfrog forms.
LEAPFROGS = ("kdk", "dkd")


def leapfrog_integrals(bg, a_lo, a_hi):
    """Cosmic time, drift and kick integrals over intervals [a_lo, a_hi], in units of 1/H0.

    Parameters
    ----------
    bg : BackgroundTable
        Background (its closed-form E(a) and, if it recollapses, its turnaround).
    a_lo, a_hi : array_like, same shape
        Interval ends on the expanding branch, a_lo <= a_hi.

    Returns
    -------
    t_h0, drift, kick : ndarray or float, shape of ``a_lo``
        H0 int dt, H0 int dt/a^2 and H0 int dt/a over each interval (dimensionless).

    Notes
    -----
    .. math::
        H_0\\int dt\\,a^{-n} = \\int_{\\ln a_{lo}}^{\\ln a_{hi}} \\frac{e^{-n x}}{E(e^x)}\\,dx,
        \\quad n = 0, 2, 1,

    by composite 12-point Gauss-Legendre quadrature in ln a (module notes).
    """
    a_lo = np.asarray(a_lo, dtype=np.float64)
    a_hi = np.asarray(a_hi, dtype=np.float64)
    shape = np.broadcast_shapes(a_lo.shape, a_hi.shape)
    lo = np.broadcast_to(a_lo, shape).ravel()
    hi = np.broadcast_to(a_hi, shape).ravel()
    x0, x1 = np.log(lo), np.log(hi)
    # ln(hi/lo) without the cancellation of ln hi - ln lo on short steps (hi - lo is exact
    # when hi/lo < 2, Sterbenz lemma), so short steps keep full relative accuracy.
    width = np.log1p((hi - lo) / lo)
    panel = np.full(x0.shape, _PANEL)
    if bg.a_turn is not None:
        # Keep every panel at least one panel width away from the 1/E singularity.
        panel = np.minimum(panel, np.log(bg.a_turn) - x1)
    n_pan = np.maximum(1, np.ceil(width / panel)).astype(np.int64)
    owner = np.repeat(np.arange(x0.size), n_pan)
    j = np.arange(owner.size) - np.repeat(np.cumsum(n_pan) - n_pan, n_pan)
    h = (width / n_pan)[owner]
    left = x0[owner] + j * h
    x = left[:, None] + 0.5 * h[:, None] * (1.0 + _GL_X)
    a = np.exp(x)
    w = 0.5 * h[:, None] * _GL_W / background.E(a, bg.cosmo)  # H0 dt = d ln a / E
    t = np.bincount(owner, (w).sum(axis=1), minlength=x0.size)
    kick = np.bincount(owner, (w / a).sum(axis=1), minlength=x0.size)
    drift = np.bincount(owner, (w / (a * a)).sum(axis=1), minlength=x0.size)
    out = tuple(v.reshape(shape) for v in (t, drift, kick))
    return tuple(v if v.ndim else float(v) for v in out)


@dataclass(frozen=True, eq=False)
class StepTable:
    """The steps of a run and their leapfrog integrals (module notes give the conventions).

    Attributes
    ----------
    a_begin, a_end : ndarray, shape (n,)
        Scale factor at the start and end of each step; a_end[i] == a_begin[i+1].
    a_mid : ndarray, shape (n,)
        Half-step boundary: the midpoint of the step in the spacing variable.
    dt_gyr : ndarray, shape (n,)
        Cosmic time elapsed over the step, Gyr.
    drift, kick : ndarray, shape (n,)
        H0 int dt/a^2 and H0 int dt/a over the whole step (units of 1/H0).
    drift_first_half, drift_second_half : ndarray, shape (n,)
        H0 int dt/a^2 over [a_begin, a_mid] and [a_mid, a_end] (the DKD drifts).
    kick_first_half, kick_second_half : ndarray, shape (n,)
        H0 int dt/a over [a_begin, a_mid] and [a_mid, a_end] (the KDK kicks).
    a_outputs : ndarray, shape (m,)
        The output times; each is a step boundary, exactly.
    output_step : ndarray of int, shape (m,)
        For each output, the number of steps completed when it is reached (0 for
        an output at the start), so a_outputs[k] == boundaries[output_step[k]].
    spacing : str
        Spacing variable of the steps (a key of :data:`icgen.schedule.SPACINGS`).
    power : float
        Exponent of the ``"power"`` spacing.
    count : int
        Nominal number of steps asked for (the table may hold more: every output
        segment gets a whole number of equal steps no larger than the nominal one).

    Notes
    -----
    All arrays are read-only.
    """

    a_begin: np.ndarray
    a_end: np.ndarray
    a_mid: np.ndarray
    dt_gyr: np.ndarray
    drift: np.ndarray
    kick: np.ndarray
    drift_first_half: np.ndarray
    drift_second_half: np.ndarray
    kick_first_half: np.ndarray
    kick_second_half: np.ndarray
    a_outputs: np.ndarray
    output_step: np.ndarray
    spacing: str
    power: float
    count: int

    _ARRAYS = ("a_begin", "a_end", "a_mid", "dt_gyr", "drift", "kick", "drift_first_half",
               "drift_second_half", "kick_first_half", "kick_second_half", "a_outputs",
               "output_step")

    def __post_init__(self):
        for name in self._ARRAYS:
            getattr(self, name).flags.writeable = False

    @property
    def n_steps(self):
        """Number of steps."""
        return self.a_begin.size

    def __len__(self):
        return self.a_begin.size

    @property
    def boundaries(self):
        """All step boundaries a_0 < a_1 < ... < a_n, shape (n + 1,)."""
        return np.append(self.a_begin, self.a_end[-1])

    @property
    def dln_a(self):
        """Width of each step in ln a."""
        return np.log(self.a_end) - np.log(self.a_begin)

    def columns(self):
        """The step table as named columns, in file order (see :data:`COLUMN_UNITS`)."""
        out_index = np.full(self.n_steps, -1, dtype=np.int64)
        at_end = self.output_step > 0
        out_index[self.output_step[at_end] - 1] = np.nonzero(at_end)[0]
        cols = {name: getattr(self, name) for name in (
            "a_begin", "a_end", "a_mid", "dt_gyr", "drift", "kick", "drift_first_half",
            "drift_second_half", "kick_first_half", "kick_second_half")}
        cols["output_index"] = out_index
        return cols


#: Units and meaning of :meth:`StepTable.columns`.
COLUMN_UNITS = {
    "a_begin": "1", "a_end": "1", "a_mid": "1 (half-step boundary)", "dt_gyr": "Gyr",
    "drift": "1/H0, H0 int dt/a^2", "kick": "1/H0, H0 int dt/a",
    "drift_first_half": "1/H0, over [a_begin, a_mid]", "drift_second_half": "1/H0, over [a_mid, a_end]",
    "kick_first_half": "1/H0, over [a_begin, a_mid]", "kick_second_half": "1/H0, over [a_mid, a_end]",
    "output_index": "index of the output at a_end, -1 if none",
}


def _check_count(name, value, lo, hi):
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or not lo <= value <= hi:
        raise ParameterError(f"{name} = {value!r} is outside the allowed range [{lo}, {hi:g}]")


def build(bg, a_begin, a_outputs, spacing="log_a", count=None, max_interval=None, power=0.5):
    """Build the step table of a run from a_begin to its last output.

    Steps are spaced evenly in s(a) (:data:`icgen.schedule.SPACINGS`) with a
    nominal width ds = (s_end - s_begin)/count, or ds = max_interval. Every output
    is a step boundary: each stretch between consecutive outputs gets
    ceil(length/ds) equal steps, so the outputs stay where they are and no step
    is wider than ds.

    Parameters
    ----------
    bg : BackgroundTable
    a_begin : float
        Start of the run (first step boundary).
    a_outputs : array_like, shape (m,)
        Output scale factors, strictly increasing, a_begin <= a_outputs[0]; the
        last one ends the run.
    spacing : {"a", "log_a", "power", "time", "growth"}, default "log_a"
    count : int, optional, 1 <= count <= 1e7
        Nominal number of steps from a_begin to the last output.
    max_interval : float, optional, > 0
        Alternatively, the widest step in s (unit of s: 1, or Gyr for "time").
    power : float, default 0.5
        Exponent of the ``"power"`` spacing, s = a^power.

    Returns
    -------
    StepTable

    Raises
    ------
    ParameterError
        Before any work, for values out of range or inconsistent outputs.
    """
    a_out = np.asarray(a_outputs, dtype=np.float64).ravel()
    if a_out.size == 0:
        raise ParameterError("a_outputs is empty: a run needs at least its last output")
    if not (isinstance(a_begin, (int, float, np.floating)) and np.isfinite(a_begin)
            and bg.a_min <= a_begin < a_out[-1]):
        raise ParameterError(f"a_begin = {a_begin!r} must lie in [{bg.a_min:.4g}, last output "
                             f"{a_out[-1]!r})")
    if a_out[-1] > bg.a_top:
        raise ParameterError(f"last output a = {a_out[-1]!r} is beyond the background table "
                             f"(a <= {bg.a_top:.6g})")
    if np.any(np.diff(a_out) <= 0.0) or a_out[0] < a_begin:
        raise ParameterError("a_outputs must be strictly increasing and not before a_begin "
                             f"= {a_begin!r}")
    if (count is None) == (max_interval is None):
        raise ParameterError(f"give exactly one of count (got {count!r}) and max_interval "
                             f"(got {max_interval!r})")
    if count is not None:
        _check_count("count", count, 1, MAX_STEPS)
    elif isinstance(max_interval, bool) or not isinstance(max_interval, (int, float)) \
            or not 0.0 < max_interval <= 1e4:
        raise ParameterError(f"max_interval = {max_interval!r} is outside the allowed range (0, 1e4]")
    sp = make_spacing(spacing, bg, power)

    # Segment ends: the start, then every output after it.
    seg = np.concatenate([[float(a_begin)], a_out[a_out > a_begin]])
    s_seg = np.asarray(sp.s(seg), dtype=np.float64)
    length = np.diff(s_seg)
    ds = (s_seg[-1] - s_seg[0]) / count if count is not None else float(max_interval)
    # ceil with a little slack so that an output already on the grid adds no step.
    n_seg = np.maximum(1, np.ceil(length / ds * (1.0 - 1e-9))).astype(np.int64)
    total = int(n_seg.sum())
    if total > MAX_STEPS:
        raise ParameterError(f"the step table would hold {total} steps, more than {MAX_STEPS}; "
                             "use fewer steps or a larger max_interval")
    owner = np.repeat(np.arange(n_seg.size), n_seg)
    j = np.arange(total) - np.repeat(np.cumsum(n_seg) - n_seg, n_seg)
    h = (length / n_seg)[owner]
    s_lo = s_seg[owner] + j * h
    a_lo = np.asarray(sp.a_of_s(s_lo), dtype=np.float64).reshape(-1)
    a_lo[j == 0] = seg[:-1]  # segment starts are the outputs themselves, exactly
    a_hi = np.append(a_lo[1:], seg[-1])
    a_mid = np.asarray(sp.a_of_s(s_lo + 0.5 * h), dtype=np.float64).reshape(-1)
    if not (np.all(a_lo < a_mid) and np.all(a_mid < a_hi)):
        raise ParameterError("steps too narrow to resolve in double precision: use fewer steps")

    t1, d1, k1 = leapfrog_integrals(bg, a_lo, a_mid)
    t2, d2, k2 = leapfrog_integrals(bg, a_mid, a_hi)
    # Output k is reached after this many steps (0 if it is the start itself).
    out_step = np.searchsorted(a_hi, a_out, side="left") + 1
    out_step[a_out == a_begin] = 0
    boundaries = np.append(a_lo, a_hi[-1])
    if not np.array_equal(boundaries[out_step], a_out):  # pragma: no cover - by construction
        raise AssertionError("an output is not a step boundary")
    return StepTable(
        a_begin=a_lo, a_end=a_hi, a_mid=a_mid, dt_gyr=(t1 + t2) * bg.gyr_per_h0,
        drift=d1 + d2, kick=k1 + k2, drift_first_half=d1, drift_second_half=d2,
        kick_first_half=k1, kick_second_half=k2, a_outputs=a_out.copy(),
        output_step=out_step.astype(np.int64), spacing=sp.name, power=sp.power,
        count=int(count) if count is not None else total)


@dataclass(frozen=True)
class StepSettings:
    """The ``[steps]`` section, validated: how to space the steps and how to check them.

    Exactly one of ``count``, ``max_interval`` and ``target_growth_error`` is set.
    """

    spacing: str
    power: float
    count: int | None
    max_interval: float | None
    target_growth_error: float | None
    leapfrog: str

    def __post_init__(self):
        if self.spacing not in SPACINGS:
            raise ParameterError(f"[steps] spacing = {self.spacing!r} is not one of "
                                 f"{', '.join(map(repr, SPACINGS))}")
        if self.leapfrog not in LEAPFROGS:
            raise ParameterError(f"[steps] leapfrog = {self.leapfrog!r} is not one of 'kdk', 'dkd'")
        given = [n for n in ("count", "max_interval", "target_growth_error")
                 if getattr(self, n) is not None]
        if len(given) != 1:
            raise ParameterError(
                f"[steps]: give exactly one of count, max_interval and target_growth_error; "
                f"got {', '.join(f'{n} = {getattr(self, n)!r}' for n in given) or 'none'}")


def settings(params):
    """The validated :class:`StepSettings` of a parameter file's ``[steps]`` section.

    ``count`` has a default (100); it yields to ``max_interval`` or
    ``target_growth_error`` when one of those is given and ``count`` is not.
    """
    sec = params.section("steps")
    explicit = params.given.get("steps", {})
    count = sec["count"]
    if "count" not in explicit and (explicit.get("max_interval") is not None
                                    or explicit.get("target_growth_error") is not None):
        count = None
    return StepSettings(spacing=sec["spacing"], power=sec["power"], count=count,
                        max_interval=sec.get("max_interval"),
                        target_growth_error=sec.get("target_growth_error"),
                        leapfrog=sec["leapfrog"])
