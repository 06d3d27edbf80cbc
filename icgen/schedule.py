"""Output schedules: the scale factors at which a simulation writes snapshots.

A schedule runs from the start of the run, ``a_begin``, to the last output,
``a_end``. Outputs are spaced evenly in one variable s(a) -- the scale factor a,
its logarithm, cosmic time t or the linear growth factor D1 (or a power a^p) --
either by count or by interval, and merged with an explicit list of extra
redshifts. Points closer than a tolerance in ln a are merged into one. The
schedule always ends exactly at ``a_end``.

The spacing variables are interchangeable classes (one small base class,
:class:`Spacing`, and the dict :data:`SPACINGS`); the step table
(:mod:`icgen.steps`) uses the same ones.

This module reads only the background table (:class:`icgen.background.BackgroundTable`);
it does no I/O.
"""

from abc import ABC, abstractmethod
from dataclasses import dataclass
from functools import cached_property

import numpy as np

from ._interp import CubicHermite
from .errors import ParameterError

__all__ = [
    "Spacing",
    "SPACINGS",
    "make_spacing",
    "Snapshots",
    "outputs",
    "resolve_a_begin",
    "from_parameters",
]

#: Largest number of outputs a schedule may hold (a guard against a mistyped interval).
MAX_OUTPUTS = 10**6


# ---------------------------------------------------------------------------
# Spacing variables
# ---------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class Spacing(ABC):
    """A monotonic variable s(a) in which points are spaced evenly.

    Subclasses define the map :meth:`s` and its inverse :meth:`a_of_s`; both are
    vectorised (scalar in, float out; array in, array of the same shape out) and
    strictly increasing on the expanding branch a_min <= a <= a_top of ``bg``.

    Parameters
    ----------
    bg : BackgroundTable
        The solved background (needed by the time and growth spacings).
    power : float
        Exponent p of the ``"power"`` spacing, s = a^p (ignored by the others).
    """

    bg: object
    power: float = 0.5

    #: Name in parameter files (key of :data:`SPACINGS`).
    name = ""
    #: Symbol and unit of s, for messages and plots.
    label = ""

    @abstractmethod
    def s(self, a):
        """The spacing variable at scale factor ``a``."""

    @abstractmethod
    def a_of_s(self, s):
        """The scale factor at spacing variable ``s`` (inverse of :meth:`s`)."""


def _out(v):
    v = np.asarray(v, dtype=np.float64)
    return v if v.ndim else float(v)


class _LinearA(Spacing):
    """s = a: outputs or steps evenly spaced in the scale factor."""

    name, label = "a", "a"

    def s(self, a):
        return _out(a)

    def a_of_s(self, s):
        return _out(s)


class _LogA(Spacing):
    """s = ln a: evenly spaced in the logarithm of the scale factor (constant a_{i+1}/a_i)."""

    name, label = "log_a", "ln a"

    def s(self, a):
        return _out(np.log(a))

    def a_of_s(self, s):
        return _out(np.exp(s))


class _Power(Spacing):
    """s = a^p, p > 0 (p = 1 is the same as ``"a"``; p -> 0 approaches ``"log_a"``)."""

    name, label = "power", "a^p"

    def s(self, a):
        return _out(np.asarray(a, dtype=np.float64) ** self.power)

    def a_of_s(self, s):
        return _out(np.asarray(s, dtype=np.float64) ** (1.0 / self.power))


class _Time(Spacing):
    """s = t: evenly spaced in cosmic time since the big bang, in Gyr."""

    name, label = "time", "t [Gyr]"

    def s(self, a):
        return self.bg.t(a)

    def a_of_s(self, s):
        return self.bg.a_of_t(s)


class _Growth(Spacing):
    """s = D1: evenly spaced in the linear growth factor (D1(a=1) = 1).

    Notes
    -----
    The inverse a(D1) is a cubic Hermite interpolant of ln a against ln D1 on the
    background's own ln a nodes, with exact slopes d ln a / d ln D1 = 1/f1,
    followed by one Newton step on ln D1(ln a) - ln D1_target = 0 (slope f1), so it
    is as accurate as the background's D1 (about 1e-10).
    """

    name, label = "growth", "D1"

    @cached_property
    def _inverse(self):
        bg = self.bg
        if np.any(bg.d1 <= 0.0) or np.any(bg.d1p <= 0.0):
            raise ParameterError("spacing = 'growth' needs D1 > 0 increasing over the whole "
                                 "background; this model's D1 is not (use 'log_a' or 'time')")
        ln_d1 = np.log(bg.d1)
        return CubicHermite(ln_d1, bg.ln_a, bg.d1 / bg.d1p)

    def s(self, a):
        return self.bg.D1(a)

    def a_of_s(self, s):
        s = np.asarray(s, dtype=np.float64)
        if np.any(~(s > 0.0)):
            raise ParameterError(f"growth spacing: D1 = {s.ravel()[np.argmin(s.ravel())]!r} "
                                 "is not positive")
        inv = self._inverse
        lo, hi = inv.x[0], inv.x[-1]
        ln_s = np.log(s)
        if np.any((ln_s < lo - 1e-12) | (ln_s > hi + 1e-12)):
            raise ParameterError(f"growth spacing: D1 outside the background's range "
                                 f"[{np.exp(lo):.6g}, {np.exp(hi):.6g}]")
        x = inv(np.clip(ln_s, lo, hi))
        a = np.exp(x)
        # One Newton step in ln a: d ln D1 / d ln a = f1.
        x = x - (np.log(np.asarray(self.bg.D1(a))) - ln_s) / np.asarray(self.bg.f1(a))
        return _out(np.exp(x))


#: The spacing variables by name: points are spaced evenly in s(a).
SPACINGS = {cls.name: cls for cls in (_LinearA, _LogA, _Power, _Time, _Growth)}


def make_spacing(name, bg, power=0.5):
    """The spacing variable ``name`` (a key of :data:`SPACINGS`) for background ``bg``.

    Parameters
    ----------
    name : {"a", "log_a", "power", "time", "growth"}
        s = a, ln a, a^power, cosmic time t in Gyr, or linear growth D1.
    bg : BackgroundTable
    power : float, 0.01 <= power <= 4
        Exponent of the ``"power"`` spacing.

    Returns
    -------
    Spacing

    Raises
    ------
    ParameterError
        For an unknown name or a power out of range.
    """
    if name not in SPACINGS:
        raise ParameterError(f"spacing = {name!r} is not one of {', '.join(map(repr, SPACINGS))}")
    if name == "power" and not (isinstance(power, (int, float)) and 0.01 <= power <= 4.0):
        raise ParameterError(f"power = {power!r} is outside the allowed range [0.01, 4] "
                             "(exponent p of the spacing s = a^p)")
    return SPACINGS[name](bg, float(power))


# ---------------------------------------------------------------------------
# The output schedule
# ---------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class Snapshots:
    """An output schedule and the background at each output.

    Attributes
    ----------
    a : ndarray, shape (n,)
        Output scale factors, strictly increasing; ``a[-1] == a_end`` exactly.
    z : ndarray, shape (n,)
        Redshifts 1/a - 1.
    t_gyr : ndarray, shape (n,)
        Cosmic time since the big bang, Gyr.
    D1 : ndarray, shape (n,)
        Linear growth factor, D1(a=1) = 1.
    f1 : ndarray, shape (n,)
        Linear growth rate d ln D1 / d ln a.
    H : ndarray, shape (n,)
        Hubble rate, km/s/Mpc.
    a_begin : float
        Start of the run (the first step begins here). It is itself an output
        only if ``a[0] == a_begin``.
    spacing : str
        Spacing variable of the evenly spaced outputs.

    Notes
    -----
    All arrays are read-only.
    """

    a: np.ndarray
    z: np.ndarray
    t_gyr: np.ndarray
    D1: np.ndarray
    f1: np.ndarray
    H: np.ndarray
    a_begin: float
    spacing: str

    def __post_init__(self):
        for name in ("a", "z", "t_gyr", "D1", "f1", "H"):
            getattr(self, name).flags.writeable = False

    @property
    def a_end(self):
        """The last output, exactly the requested a_end."""
        return float(self.a[-1])

    def __len__(self):
        return self.a.size

    def columns(self):
        """The output table as a dict of named columns (a, z, t_gyr, D1, f1, H)."""
        return {"a": self.a, "z": self.z, "t_gyr": self.t_gyr, "D1": self.D1,
                "f1": self.f1, "H": self.H}


#: Units of :meth:`Snapshots.columns`.
COLUMN_UNITS = {"a": "1", "z": "1", "t_gyr": "Gyr", "D1": "1 (D1(a=1) = 1)",
                "f1": "1 (d ln D1 / d ln a)", "H": "km/s/Mpc"}


def _check_a(name, value, bg):
    if isinstance(value, bool) or not isinstance(value, (int, float, np.floating)) \
            or not np.isfinite(value):
        raise ParameterError(f"{name}: expected a number, got {value!r}")
    if not bg.a_min <= value <= bg.a_top:
        why = (f"; the model turns around at a = {bg.a_turn:.6g}" if bg.a_turn is not None
               else "; solve the background with a wider range")
        raise ParameterError(f"{name} = {value!r} is outside the background table "
                             f"[{bg.a_min:.4g}, {bg.a_top:.6g}]{why}")


def outputs(bg, a_begin, a_end=1.0, spacing="log_a", count=0, interval=None,
            extra_redshifts=(), include_begin=False, merge_tolerance=1e-6, power=0.5):
    """Build an output schedule from a_begin to a_end.

    Parameters
    ----------
    bg : BackgroundTable
    a_begin : float
        Start of the run; bg.a_min <= a_begin < a_end.
    a_end : float, default 1
        Last output, a_end <= bg.a_top. The schedule always ends exactly here.
    spacing : {"a", "log_a", "power", "time", "growth"}, default "log_a"
        Variable s(a) in which the regular outputs are evenly spaced (see :data:`SPACINGS`).
    count : int, default 0
        Number of evenly spaced outputs s_k = s_begin + k (s_end - s_begin)/count,
        k = 1..count (the last is a_end). 0 for none.
    interval : float, optional
        Alternatively, the spacing in s between regular outputs (in the unit of s:
        1 for a, ln a, a^p and D1, Gyr for time), from s_begin + interval up to
        s_end. Give ``count`` or ``interval``, not both.
    extra_redshifts : sequence of float
        Further outputs, each with a_begin <= 1/(1+z) <= a_end.
    include_begin : bool, default False
        Also write an output at a_begin (the initial state).
    merge_tolerance : float, default 1e-6, 0 <= merge_tolerance <= 0.1
        Points closer than this in ln a (relative difference in a) are merged into
        one; a_end and a_begin win over extra redshifts, which win over regular
        points. An extra redshift within the tolerance of z_begin becomes an
        output at a_begin.
    power : float, default 0.5
        Exponent p of the ``"power"`` spacing.

    Returns
    -------
    Snapshots

    Raises
    ------
    ParameterError
        For any value out of range (message names the parameter, the value and the
        allowed range) -- before any work is done.
    """
    _check_a("a_begin", a_begin, bg)
    _check_a("a_end", a_end, bg)
    a_begin, a_end = float(a_begin), float(a_end)
    if not (isinstance(merge_tolerance, (int, float)) and 0.0 <= merge_tolerance <= 0.1):
        raise ParameterError(f"merge_tolerance = {merge_tolerance!r} is outside the allowed "
                             "range [0, 0.1] (in ln a)")
    if not np.log(a_end) - np.log(a_begin) > merge_tolerance:
        raise ParameterError(f"a_end = {a_end!r} must exceed a_begin = {a_begin!r} by more than "
                             f"merge_tolerance = {merge_tolerance:g} in ln a")
    if isinstance(count, bool) or not isinstance(count, (int, np.integer)) \
            or not 0 <= count <= MAX_OUTPUTS:
        raise ParameterError(f"count = {count!r} is outside the allowed range [0, {MAX_OUTPUTS}]")
    sp = make_spacing(spacing, bg, power)
    s0, s1 = float(sp.s(a_begin)), float(sp.s(a_end))
    if interval is not None:
        if count:
            raise ParameterError(f"count = {count} and interval = {interval!r} both given; "
                                 "outputs are spaced by one of them: remove the other")
        if isinstance(interval, bool) or not isinstance(interval, (int, float)) \
                or not 0.0 < interval <= 1e4:
            raise ParameterError(f"interval = {interval!r} is outside the allowed range (0, 1e4] "
                                 f"(in {sp.label})")
        n_reg = int(np.floor((s1 - s0) / interval * (1.0 + 1e-12)))
        if n_reg > MAX_OUTPUTS:
            raise ParameterError(f"interval = {interval!r} gives {n_reg} outputs between a_begin "
                                 f"and a_end, more than {MAX_OUTPUTS}; use a larger interval")
        s_reg = s0 + interval * np.arange(1, n_reg + 1)
    else:
        s_reg = s0 + (s1 - s0) * np.arange(1, count + 1) / max(count, 1)
    # The endpoint is a_end itself, exactly; drop its round-off image.
    s_reg = s_reg[s_reg < s1 - 1e-12 * abs(s1 - s0)]
    extra = np.asarray(extra_redshifts, dtype=np.float64).ravel()
    if extra.size:
        a_x = 1.0 / (1.0 + extra)
        tol = np.exp(merge_tolerance)
        bad = ~((a_x >= a_begin / tol) & (a_x <= a_end * tol)) | ~np.isfinite(a_x)
        if np.any(bad):
            zb = float(extra[bad][0])
            raise ParameterError(
                f"extra_redshifts: z = {zb!r} is outside the schedule, which runs from "
                f"z_begin = {1 / a_begin - 1:.6g} to z_end = {1 / a_end - 1:.6g}")
    else:
        a_x = extra
    a_reg = np.asarray(sp.a_of_s(s_reg), dtype=np.float64).reshape(-1)

    # Candidates and their priority: regular 0 < extra 1 < begin 2 < end 3.
    a_c = np.concatenate([a_reg, a_x, [a_begin, a_end]])
    prio = np.concatenate([np.zeros(a_reg.size, int), np.ones(a_x.size, int), [2, 3]])
    order = np.argsort(a_c, kind="stable")
    a_c, prio = a_c[order], prio[order]
    # Chains of points each within the tolerance of its neighbour form one group.
    group = np.concatenate([[0], np.cumsum(np.diff(np.log(a_c)) > merge_tolerance)])
    # Representative of each group: its highest-priority member.
    pick = np.lexsort((-prio, group))
    first = np.concatenate([[True], np.diff(group[pick]) > 0])
    rep = pick[first]
    a_out, p_out = a_c[rep], prio[rep]
    has_extra = np.bincount(group, weights=(prio == 1), minlength=rep.size) > 0
    keep = (p_out != 2) | include_begin | has_extra[group[rep]]
    a_out = a_out[keep]
    # Everything beyond a_end was merged into it (extras are <= a_end within tolerance).
    a_out = a_out[a_out <= a_end]
    if a_out[-1] != a_end:  # pragma: no cover - a_end has the top priority
        raise AssertionError("schedule does not end at a_end")
    return _snapshots(bg, a_out, a_begin, sp.name)


def _snapshots(bg, a, a_begin, spacing_name):
    a = np.array(a, dtype=np.float64)
    return Snapshots(a=a, z=1.0 / a - 1.0, t_gyr=np.asarray(bg.t(a), dtype=np.float64),
                     D1=np.asarray(bg.D1(a), dtype=np.float64),
                     f1=np.asarray(bg.f1(a), dtype=np.float64),
                     H=np.asarray(bg.hubble(a), dtype=np.float64),
                     a_begin=a_begin, spacing=spacing_name)


def resolve_a_begin(params, a_begin=None):
    """The start of the run for the schedule.

    Order: the caller's ``a_begin`` (e.g. the run's own start); else
    ``[snapshots] a_begin``; else 1/(1 + ``[start] redshift``). If the start
    redshift is ``"auto"`` and neither is given, the start is unknown here.

    Raises
    ------
    ParameterError
        If no start can be found, or the caller's a_begin contradicts
        ``[snapshots] a_begin``.
    """
    given = params.get("snapshots", "a_begin")
    if a_begin is not None:
        if isinstance(a_begin, bool) or not isinstance(a_begin, (int, float)) or not a_begin > 0:
            raise ParameterError(f"a_begin = {a_begin!r}: expected a positive scale factor")
        if given is not None and abs(given - a_begin) > 1e-12 * a_begin:
            raise ParameterError(
                f"[snapshots] a_begin = {given!r} contradicts the start of the run, "
                f"a = {a_begin!r}; remove [snapshots] a_begin or make them agree")
        return float(a_begin)
    if given is not None:
        return float(given)
    z = params.get("start", "redshift")
    if z == "auto":
        raise ParameterError(
            '[start] redshift = "auto" is decided by the run; to build a schedule on its own, '
            "give [snapshots] a_begin (e.g. a_begin = 0.02 for z = 49)")
    return 1.0 / (1.0 + float(z))


def from_parameters(params, bg, a_begin=None):
    """The output schedule of a parameter file's ``[snapshots]`` section.

    Parameters
    ----------
    params : icgen.parameters.Parameters
    bg : BackgroundTable
        Background of ``params.cosmology``.
    a_begin : float, optional
        Start of the run, when the caller knows it (see :func:`resolve_a_begin`).

    Returns
    -------
    Snapshots
    """
    sec = params.section("snapshots")
    return outputs(bg, resolve_a_begin(params, a_begin), a_end=sec["a_end"],
                   spacing=sec["spacing"], count=sec["count"], interval=sec.get("interval"),
                   extra_redshifts=sec["extra_redshifts"], include_begin=sec["include_begin"],
                   merge_tolerance=sec["merge_tolerance"], power=sec["power"])
