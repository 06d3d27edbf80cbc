"""How accurately does a step table follow linear growth? Run it on the growing mode and see.

A single Fourier mode in the linear regime is the one problem whose answer a
particle code must reproduce exactly: its displacement grows as D1(a). This
module integrates that mode with a step table's own kicks and drifts (the same
KDK or DKD leapfrog a particle code runs, see :mod:`icgen.steps`) and reports,
at every output, the relative error of the displacement against D1(a) and of
the velocity against the growing-mode velocity (i.e. against f1). It also finds
the smallest number of steps that keeps the final error under a target.

The equation
------------
In 1-D, particles at Lagrangian coordinate q sit at x = q + psi(q, t). For a
single mode psi = psi_k sin(k q) in the linear regime delta = -d psi/dq, so
laplacian(phi) = (3/2) omega_m H0^2 delta gives -grad(phi) = (3/2) omega_m H0^2 psi
(the potential convention of :mod:`icgen.steps`; derived here). With
p = a^2 d psi/dt the equations of motion dx/dt = p/a^2, dp/dt = -grad(phi)/a become

    d psi/dt = p / a^2,      dp/dt = (3/2) omega_m H0^2 psi / a,

i.e. d/dt (a^2 d psi/dt) = (3/2) omega_m H0^2 psi / a, which in ln a is the
linear growth equation psi'' + (2 + d ln E/d ln a) psi' = (3/2) Omega_m(a) psi
solved by :func:`icgen.background.solve` (substitute d/dt = H d/d ln a). Its
growing mode is psi = D1, p = a^2 H f1 D1. Radiation and dark energy enter
through H(a) only (they do not cluster), as in the background.

With time in units of 1/H0 the leapfrog maps are (K, D from the step table)

* KDK:  p += c psi K_1;  psi += p D;  p += c psi K_2,
* DKD:  psi += p D_1;  p += c psi K;  psi += p D_2,

with c = (3/2) omega_m. State and outputs are synchronised at step boundaries;
the run starts at a_begin on the exact growing mode, psi = D1(a_begin),
p = a_begin^2 E(a_begin) f1 D1 (E = H/H0), so the first KDK half kick starts from
the synchronised momentum and no half-step offset is needed.

Errors reported: err_D1 = psi / D1(a) - 1 and err_f1 = p / (a^2 E f1 D1) - 1
(the velocity v = p/a relative to the growing-mode velocity a H f1 D1). The
reference D1, f1 are the background's (accurate to about 1e-10), so errors below
~1e-9 are not resolved.

References
----------
.. [1] Quinn, Katz, Stadel & Lake (1997), astro-ph/9710043, sec. 2.
.. [2] Peebles (1980), The Large-Scale Structure of the Universe, sec. 11
       (the linear growth equation), from memory.
"""

from dataclasses import dataclass

import numpy as np

from . import steps as _steps
from .errors import ParameterError

__all__ = ["GrowthAccuracy", "StepSearch", "StepPlan", "measure", "smallest_count",
           "from_parameters", "COLUMN_UNITS"]

#: Largest nominal step count the search tries.
MAX_SEARCH_COUNT = 2**20
#: Allowed range of the target growth error: above the background's own accuracy.
TARGET_RANGE = (1e-8, 0.5)


@dataclass(frozen=True, eq=False)
class GrowthAccuracy:
    """Growth errors of a step table at each output.

    Attributes
    ----------
    a : ndarray, shape (m,)
        Output scale factors.
    err_D1 : ndarray, shape (m,)
        Relative error of the displacement, psi / D1(a) - 1.
    err_f1 : ndarray, shape (m,)
        Relative error of the velocity against the growing mode's,
        p / (a^2 H f1 D1) - 1.
    leapfrog : str
        "kdk" or "dkd".
    n_steps : int
        Steps of the table measured.

    Notes
    -----
    All arrays are read-only.
    """

    a: np.ndarray
    err_D1: np.ndarray
    err_f1: np.ndarray
    leapfrog: str
    n_steps: int

    def __post_init__(self):
        for name in ("a", "err_D1", "err_f1"):
            getattr(self, name).flags.writeable = False

    @property
    def final_error(self):
        """|err_D1| at the last output: the growth error the step-count search controls."""
        return float(abs(self.err_D1[-1]))

    def columns(self):
        """The error columns (err_D1, err_f1), one row per output."""
        return {"err_D1": self.err_D1, "err_f1": self.err_f1}


#: Units of :meth:`GrowthAccuracy.columns`.
COLUMN_UNITS = {"err_D1": "1 (psi/D1 - 1, linear growing mode)",
                "err_f1": "1 (v / v_growing - 1)"}


def _leapfrog(psi, p, c, k1, d, k2, form):
    """Run the linear-mode leapfrog; return psi and p at every step boundary.

    KDK uses (k1, d, k2) = (kick_first_half, drift, kick_second_half); DKD uses
    (drift_first_half, kick, drift_second_half). Sequential in steps by nature.
    """
    n = len(d)
    psi_out = np.empty(n + 1)
    p_out = np.empty(n + 1)
    psi_out[0], p_out[0] = psi, p
    if form == "kdk":
        for i, (ka, dd, kb) in enumerate(zip(k1.tolist(), d.tolist(), k2.tolist()), 1):
            p += c * psi * ka
            psi += p * dd
            p += c * psi * kb
            psi_out[i], p_out[i] = psi, p
    else:
        for i, (da, kk, db) in enumerate(zip(k1.tolist(), d.tolist(), k2.tolist()), 1):
            psi += p * da
            p += c * psi * kk
            psi += p * db
            psi_out[i], p_out[i] = psi, p
    return psi_out, p_out


def measure(bg, table, leapfrog="kdk"):
    """Growth errors of a step table: its leapfrog run on the linear growing mode.

    Parameters
    ----------
    bg : BackgroundTable
        The background the table was built on.
    table : StepTable
    leapfrog : {"kdk", "dkd"}, default "kdk"
        Kick-drift-kick or drift-kick-drift.

    Returns
    -------
    GrowthAccuracy
        Errors at each of ``table.a_outputs``.

    Notes
    -----
    .. math::
        \\frac{d\\psi}{d\\tau} = \\frac{p}{a^2},\\qquad
        \\frac{dp}{d\\tau} = \\frac{3}{2}\\,\\Omega_m\\,\\frac{\\psi}{a},\\qquad \\tau = H_0 t

    started at psi = D1, p = a^2 E f1 D1 (module notes).
    """
    if leapfrog not in _steps.LEAPFROGS:
        raise ParameterError(f"leapfrog = {leapfrog!r} is not one of 'kdk', 'dkd'")
    a0 = float(table.a_begin[0])
    d1_0 = float(bg.D1(a0))
    psi0 = d1_0
    p0 = a0 * a0 * float(bg.E(a0)) * float(bg.f1(a0)) * d1_0
    c = 1.5 * bg.cosmo.omega_m
    if leapfrog == "kdk":
        coeff = (table.kick_first_half, table.drift, table.kick_second_half)
    else:
        coeff = (table.drift_first_half, table.kick, table.drift_second_half)
    psi, p = _leapfrog(psi0, p0, c, *coeff, leapfrog)
    a = np.array(table.a_outputs, dtype=np.float64)
    k = table.output_step
    d1 = np.asarray(bg.D1(a))
    p_exact = a * a * np.asarray(bg.E(a)) * np.asarray(bg.f1(a)) * d1
    return GrowthAccuracy(a=a, err_D1=psi[k] / d1 - 1.0, err_f1=p[k] / p_exact - 1.0,
                          leapfrog=leapfrog, n_steps=table.n_steps)


@dataclass(frozen=True, eq=False)
class StepSearch:
    """Result of :func:`smallest_count`.

    Attributes
    ----------
    count : int
        Smallest nominal step count found that meets the target.
    target : float
        The target final growth error.
    table : StepTable
        The step table with that count.
    accuracy : GrowthAccuracy
        Its growth errors.
    trials : tuple of (int, int, float)
        Every count tried, in order: (nominal count, steps in the table, final error).
    """

    count: int
    target: float
    table: object
    accuracy: GrowthAccuracy
    trials: tuple


def smallest_count(bg, a_begin, a_outputs, target, spacing="log_a", power=0.5, leapfrog="kdk",
                   max_count=MAX_SEARCH_COUNT, progress=None):
    """Smallest nominal step count whose final growth error is below ``target``.

    Parameters
    ----------
    bg : BackgroundTable
    a_begin : float
        Start of the run.
    a_outputs : array_like
        Output scale factors (see :func:`icgen.steps.build`).
    target : float, 1e-8 <= target <= 0.5
        Largest acceptable |psi/D1 - 1| at the last output.
    spacing, power : see :func:`icgen.steps.build`
    leapfrog : {"kdk", "dkd"}
    max_count : int, default 2**20
        Give up beyond this many steps.
    progress : callable, optional
        Called after each trial as ``progress(count, n_steps, error)`` (e.g. to
        drive a progress bar); the search itself prints nothing.

    Returns
    -------
    StepSearch

    Raises
    ------
    ParameterError
        For a target out of range, or if ``max_count`` steps do not reach it.

    Notes
    -----
    The count doubles from 1 until the target is met, then bisection finds the
    smallest count between the last failure and the first success. This assumes
    the error falls with the count, as it does in the second-order regime
    (error proportional to count^-2, checked in tests/test_growth_check.py).
    """
    lo_t, hi_t = TARGET_RANGE
    if isinstance(target, bool) or not isinstance(target, (int, float)) or not lo_t <= target <= hi_t:
        raise ParameterError(f"target_growth_error = {target!r} is outside the allowed range "
                             f"[{lo_t:g}, {hi_t:g}] (the background's D1 is accurate to ~1e-10)")
    _steps._check_count("max_count", max_count, 1, _steps.MAX_STEPS)
    if leapfrog not in _steps.LEAPFROGS:
        raise ParameterError(f"leapfrog = {leapfrog!r} is not one of 'kdk', 'dkd'")
    trials = []
    # Validate everything else once, cheaply, before the search.
    _steps.build(bg, a_begin, a_outputs, spacing=spacing, count=1, power=power)

    def trial(n):
        table = _steps.build(bg, a_begin, a_outputs, spacing=spacing, count=n, power=power)
        acc = measure(bg, table, leapfrog)
        trials.append((n, table.n_steps, acc.final_error))
        if progress is not None:
            progress(n, table.n_steps, acc.final_error)
        return table, acc

    lo, n = 0, 1
    while True:
        best = trial(n)
        if best[1].final_error < target:
            break
        if n >= max_count:
            raise ParameterError(
                f"target_growth_error = {target:g} not reached with {n} steps "
                f"(final error {best[1].final_error:.3g}); raise the target or max_count")
        lo, n = n, min(2 * n, max_count)
    hi = n
    while hi - lo > 1:
        mid = (lo + hi) // 2
        cand = trial(mid)
        if cand[1].final_error < target:
            hi, best = mid, cand
        else:
            lo = mid
    return StepSearch(count=hi, target=float(target), table=best[0], accuracy=best[1],
                      trials=tuple(trials))


@dataclass(frozen=True, eq=False)
class StepPlan:
    """A run's step table with its measured growth accuracy.

    Attributes
    ----------
    table : StepTable
    accuracy : GrowthAccuracy
        Growth errors of ``table`` at each output, for ``settings.leapfrog``.
    settings : StepSettings
        The ``[steps]`` settings it was built from.
    search : StepSearch or None
        The step-count search, when ``target_growth_error`` was given.
    """

    table: object
    accuracy: GrowthAccuracy
    settings: object
    search: StepSearch | None = None


def from_parameters(params, bg, snapshots, progress=None):
    """The step table of a parameter file's ``[steps]`` section, with its growth accuracy.

    Parameters
    ----------
    params : icgen.parameters.Parameters
    bg : BackgroundTable
        Background of ``params.cosmology``.
    snapshots : Snapshots
        The output schedule (from :func:`icgen.schedule.from_parameters`); the steps
        run from its ``a_begin`` to its last output and have every output as a
        boundary.
    progress : callable, optional
        Passed to :func:`smallest_count` when ``target_growth_error`` is set.

    Returns
    -------
    StepPlan
    """
    st = _steps.settings(params)
    search = None
    if st.target_growth_error is not None:
        search = smallest_count(bg, snapshots.a_begin, snapshots.a, st.target_growth_error,
                                spacing=st.spacing, power=st.power, leapfrog=st.leapfrog,
                                progress=progress)
        table, acc = search.table, search.accuracy
    else:
        table = _steps.build(bg, snapshots.a_begin, snapshots.a, spacing=st.spacing,
                             count=st.count, max_interval=st.max_interval, power=st.power)
        acc = measure(bg, table, st.leapfrog)
    return StepPlan(table=table, accuracy=acc, settings=st, search=search)
