"""A compact particle-mesh (PM) stepper -- a verification aid, NOT a production N-body code.

Its one purpose is to prove, end to end, that icgen's initial conditions and its step
tables together reproduce linear growth: evolve the particles with the step table's own
drift and kick integrals and measure the growth of the largest modes. It has no
short-range force, no softening, no adaptive steps, no domain decomposition and no
restart files; on scales near the mesh spacing its forces are poor by design.

Equations (comoving canonical coordinates; Quinn, Katz, Stadel & Lake 1997, sec. 2)
------------------------------------------------------------------------------------
Comoving position x (Mpc/h), cosmic time t, canonical momentum p = a^2 dx/dt. With
r = a x, Newton's law for the peculiar motion is x'' + 2 H x' = -grad(Phi) / a^2, where
laplacian(Phi) = 4 pi G a^2 (rho - rho_bar) = (3/2) H0^2 omega_m delta / a (comoving
Laplacian; rho_bar = rho_m0 / a^3, 4 pi G rho_m0 = (3/2) H0^2 omega_m). Multiplying by
a^2: dp/dt = a^2 (x'' + 2 H x') = -grad(Phi). Writing phi = a Phi (the convention of
:mod:`icgen.steps`),

    dx/dt = p / a^2,        dp/dt = -grad(phi) / a,        laplacian(phi) = (3/2) omega_m H0^2 delta,

so all time dependence sits in 1/a^2 and 1/a, and a drift moves x by p * int dt/a^2
and a kick changes p by -grad(phi) * int dt/a -- exactly the step table's ``drift``
and ``kick`` columns. (Note: with phi = a Phi the source has no 1/a; putting 1/a in
both the Poisson equation and the kick would count it twice.)

Units: time in 1/H0, x in Mpc/h, p in H0 Mpc/h, so H0 = 1 in the formulas above and
the table's integrals (units of 1/H0) apply as written. Peculiar velocity
v = a dx/dt = p / a; in km/s v = 100 p / a (H0 Mpc/h = 100 h km/s/Mpc * Mpc/h = 100 km/s).

Force
-----
Cloud-in-cell (CIC) assignment of the particles to an n^3 mesh whose points sit at
(j + 1/2) H, half a cell off the initial lattice q = i L / n_p; by default the mesh is
the particle grid (n = n_p). On a mesh through the lattice points every particle would
start at the kink of the CIC kernel (weight 1 - |d|), where the assigned density
responds to a displacement d with the sign of d instead of linearly (a long plane wave
then gets forces wrong by 15-50% at the start, measured); half a cell off, the kernel is
linear in d there. Then the density contrast delta, a forward FFT, the potential
phi_k = -G(k) delta_k, the spectral gradient g_k = -i k phi_k (Nyquist planes and k = 0
set to zero), three inverse FFTs and CIC interpolation from the same mesh (one kernel
for assignment and interpolation: no self-force, Hockney & Eastwood 1988, sec. 5-4).

Influence function G (derived here). On the half-shifted mesh equal to the lattice, a
lattice displacement psi(k) gives the mesh density delta(k) = -i B(k).psi(k) and the
interpolated force g(k) = A(k) x (mesh force at k), where the sums over the images
k + 2 k_N n carry the phase (-1)^(n_x + n_y + n_z) (Poisson summation, with
sum_n (-1)^n sinc^2(pi (u + n)) = cos(pi u) and sum_n (-1)^n sinc^2(pi (u + n)) (u + n)
= sin(pi u) / pi):

    A(k) = prod_i cos(k_i H / 2),      k.B(k) = A(k) sum_i k_i (2 / H) tan(k_i H / 2).

Asking for the fluid force g = (3/2) omega_m psi on every longitudinal mode gives

    G_lat(k) = (3/2) omega_m / (A(k)^2 sum_i k_i (2 / H) tan(k_i H / 2)),

which tends to (3/2) omega_m / k^2 for k H -> 0 and makes the linear force on the
lattice exact (to 1e-6 in tests/test_pm.py; the plain 1/k^2 is 0.6% weak on the
fundamental mode of a 32^3 lattice and 2.6% on its (2, 2, 2) mode, and a mesh twice as
fine as the lattice is 3-9% strong on the three largest modes, measured). Near the mesh
Nyquist frequency A -> 0 and G_lat grows without bound, which makes evolved particles
unstable; so G_lat is used for |k| <= k_N / 2 and blended (cos^2 in |k| / k_N) into the
window-deconvolved (3/2) omega_m / (k^2 W(k)^2), W the CIC window (Hockney & Eastwood
1988, sec. 7-8), which it equals to O((k H)^2), at |k| = k_N. On a mesh that is not the
particle grid the deconvolved function is used throughout.

Leapfrog (kick-drift-kick), one force evaluation per step: for step s,
p += g(x) K1_s;  x += p D_s;  p += g(x) K2_s, with K1, K2 the step table's first- and
second-half kicks and D its drift. Positions and momenta are synchronised at step
boundaries, where outputs are taken.

All sums are deterministic (the assignment of :mod:`icgen.power`), so a run is
bit-identical on any number of threads.

References
----------
.. [1] Quinn, Katz, Stadel & Lake (1997), astro-ph/9710043, sec. 2.
.. [2] Hockney & Eastwood (1988), Computer Simulation Using Particles, ch. 5 and 8.
"""

from dataclasses import dataclass

import numpy as np
import scipy.fft as sfft

from . import _kernels_power, power
from .errors import InputError

__all__ = ["LeapfrogSteps", "PMSnapshot", "evolve", "accelerations", "influence_function",
           "VELOCITY_UNIT_KM_S", "MESH_OFFSET"]

#: Momentum unit H0 Mpc/h expressed as a velocity: 100 km/s.
VELOCITY_UNIT_KM_S = 100.0
#: Offset of the PM mesh points from the Lagrangian lattice, in cells: mesh point j at (j + 1/2) H.
MESH_OFFSET = 0.5


@dataclass(frozen=True, eq=False)
class LeapfrogSteps:
    """The kick-drift-kick steps of a run (from an :class:`icgen.steps.StepTable` or its file).

    Attributes
    ----------
    a_begin, a_end : ndarray, shape (n,)
        Scale factor at the start and end of each step; a_end[s] == a_begin[s + 1].
    drift : ndarray, shape (n,)
        H0 int dt/a^2 over the step (units of 1/H0).
    kick_first_half, kick_second_half : ndarray, shape (n,)
        H0 int dt/a over the first and second half of the step.
    output_after : ndarray of bool, shape (n,)
        Write an output at a_end of the step.
    output_at_start : bool
        Write an output at a_begin[0].
    """

    a_begin: np.ndarray
    a_end: np.ndarray
    drift: np.ndarray
    kick_first_half: np.ndarray
    kick_second_half: np.ndarray
    output_after: np.ndarray
    output_at_start: bool = False

    def __post_init__(self):
        arrays = [np.asarray(getattr(self, n)) for n in ("a_begin", "a_end", "drift", "kick_first_half",
                                                          "kick_second_half", "output_after")]
        n = arrays[0].shape
        if len(n) != 1 or n[0] == 0 or any(a.shape != n for a in arrays):
            raise InputError(f"step table: need equal-length 1-D columns with at least one step, got shapes "
                             f"{[a.shape for a in arrays]}")
        for name, arr in zip(("a_begin", "a_end", "drift", "kick_first_half", "kick_second_half"), arrays):
            if not np.all(np.isfinite(arr)):
                raise InputError(f"step table: column {name} has non-finite values")
        if np.any(arrays[0] <= 0) or np.any(arrays[1] <= arrays[0]):
            raise InputError("step table: need 0 < a_begin < a_end in every step")
        if not np.allclose(arrays[0][1:], arrays[1][:-1], rtol=1e-12, atol=0):
            raise InputError("step table: steps are not contiguous (a_end[s] != a_begin[s + 1])")
        if np.any(arrays[2] < 0) or np.any(arrays[3] < 0) or np.any(arrays[4] < 0):
            raise InputError("step table: drift and kick integrals must be non-negative")
        for name, arr in zip(("a_begin", "a_end", "drift", "kick_first_half", "kick_second_half",
                              "output_after"), arrays):
            arr = arr.astype(bool if name == "output_after" else np.float64, copy=True)
            arr.flags.writeable = False
            object.__setattr__(self, name, arr)

    @property
    def n_steps(self):
        """Number of steps."""
        return self.a_begin.size

    @classmethod
    def from_step_table(cls, table):
        """From an :class:`icgen.steps.StepTable` (its KDK columns and output steps)."""
        after = np.zeros(table.n_steps, dtype=bool)
        done = np.asarray(table.output_step)
        after[done[done > 0] - 1] = True
        return cls(a_begin=table.a_begin, a_end=table.a_end, drift=table.drift,
                   kick_first_half=table.kick_first_half, kick_second_half=table.kick_second_half,
                   output_after=after, output_at_start=bool(np.any(done == 0)))

    @classmethod
    def from_columns(cls, columns):
        """From the named columns of a step-table file (``icgen schedule``'s steps.csv / .h5).

        Uses a_begin, a_end, drift, kick_first_half, kick_second_half and output_index
        (>= 0 where an output falls at the step's end).
        """
        need = ("a_begin", "a_end", "drift", "kick_first_half", "kick_second_half", "output_index")
        missing = [c for c in need if c not in columns]
        if missing:
            raise InputError(f"step table: missing column(s) {', '.join(missing)}; expected the step "
                             "table written by 'icgen schedule'")
        return cls(a_begin=columns["a_begin"], a_end=columns["a_end"], drift=columns["drift"],
                   kick_first_half=columns["kick_first_half"],
                   kick_second_half=columns["kick_second_half"],
                   output_after=np.asarray(columns["output_index"]) >= 0)


@dataclass(frozen=True, eq=False)
class PMSnapshot:
    """Particles at one output of the stepper.

    Attributes
    ----------
    a : float
        Scale factor.
    step : int
        Steps completed.
    position : ndarray, float64, shape (N, 3)
        Comoving positions in Mpc/h, in [0, L). Read-only.
    velocity : ndarray, float64, shape (N, 3)
        Peculiar velocities a dx/dt in km/s. Read-only.
    """

    a: float
    step: int
    position: np.ndarray
    velocity: np.ndarray

    def __post_init__(self):
        self.position.flags.writeable = False
        self.velocity.flags.writeable = False


def _wrap(x, box_size):
    np.mod(x, box_size, out=x)
    x[x >= box_size] = 0.0  # a tiny negative value rounds up to L


def influence_function(n_mesh, box_size, omega_m, lattice=True):
    """The PM influence function G(k) on the rfftn modes (module notes), shape (n, n, n//2 + 1).

    Parameters
    ----------
    n_mesh : int
    box_size : float
        L in Mpc/h.
    omega_m : float
    lattice : bool, default True
        Lattice-matched G_lat for |k| <= k_N/2, blended into the deconvolved one at k_N
        (for a mesh equal to the particle grid); False: deconvolved throughout.

    Returns
    -------
    ndarray, float64
        G in units of H0^2 (so phi_k = -G delta_k in H0^2 (Mpc/h)^2); G(0) = 0.
    """
    n = n_mesh
    kf = 2.0 * np.pi / box_size
    m = np.fft.fftfreq(n, 1.0 / n)
    mz = np.arange(n // 2 + 1, dtype=np.float64)
    k2 = (kf * m)[:, None, None] ** 2 + (kf * m)[None, :, None] ** 2 + (kf * mz)[None, None, :] ** 2
    k2[0, 0, 0] = 1.0
    w = np.sinc(m / n) ** 2           # CIC window per axis: W = prod_i sinc^2(pi m_i / n)
    wz = np.sinc(mz / n) ** 2
    green = 1.5 * omega_m / k2 / (w[:, None, None] * w[None, :, None] * wz[None, None, :]) ** 2
    if lattice:
        two_over_h = 2.0 * n / box_size
        c2 = np.cos(np.pi * m / n) ** 2
        c2z = np.cos(np.pi * mz / n) ** 2
        kt = kf * m * two_over_h * np.tan(np.pi * m / n)        # k_i (2/H) tan(k_i H/2) >= 0
        ktz = kf * mz * two_over_h * np.tan(np.pi * mz / n)
        denom = (c2[:, None, None] * c2[None, :, None] * c2z[None, None, :]) \
            * (kt[:, None, None] + kt[None, :, None] + ktz[None, None, :])
        x = np.sqrt(k2) / (np.pi * n / box_size)                 # |k| / k_N
        blend = np.clip(np.cos(np.pi * (x - 0.5)) ** 2, 0.0, 1.0)
        blend[x <= 0.5] = 1.0
        blend[x >= 1.0] = 0.0
        inner = blend > 0
        inner[0, 0, 0] = False
        green[inner] = blend[inner] * (1.5 * omega_m / denom[inner]) + (1.0 - blend[inner]) * green[inner]
    green[0, 0, 0] = 0.0
    return green


def accelerations(position, box_size, omega_m, n_mesh, green=None, workers=None):
    """-grad(phi) at the particles, in units of H0^2 Mpc/h (phi of the module notes).

    Parameters
    ----------
    position : ndarray, float64, shape (N, 3)
        Comoving positions in Mpc/h, in [0, L].
    box_size : float
        L in Mpc/h.
    omega_m : float
        Matter density today (the source of laplacian(phi) = (3/2) omega_m delta).
    n_mesh : int
        PM mesh points per side.
    green : ndarray, optional
        Influence function (:func:`influence_function`); default: the lattice-matched one
        if n_mesh^3 equals the number of particles, else the deconvolved one.
    workers : int, optional
        scipy.fft threads.

    Returns
    -------
    ndarray, float64, shape (N, 3)
    """
    n = n_mesh
    if green is None:
        green = influence_function(n, box_size, omega_m, lattice=position.shape[0] == n**3)
    mesh = power.assign(position, box_size, n, "cic", shift=MESH_OFFSET)
    mesh *= n**3 / position.shape[0]
    mesh -= 1.0
    pot = sfft.rfftn(mesh, norm="forward", workers=workers, overwrite_x=True)
    del mesh
    pot *= green                                    # -phi_k = G delta_k
    kf = 2.0 * np.pi / box_size
    m = np.fft.fftfreq(n, 1.0 / n)
    axes = ((kf * m)[:, None, None], (kf * m)[None, :, None], (kf * np.arange(n // 2 + 1))[None, None, :])
    nyq = n // 2
    field = np.empty((3, n, n, n), dtype=np.float64)
    for d, kd in enumerate(axes):
        gk = pot * (1j * kd)                        # g_k = -i k phi_k = i k G delta_k
        # Nyquist planes: the sine part of those modes is lost on the mesh; set them to zero.
        gk[nyq, :, :] = 0.0
        gk[:, nyq, :] = 0.0
        gk[:, :, nyq] = 0.0
        field[d] = sfft.irfftn(gk, s=(n, n, n), norm="forward", workers=workers, overwrite_x=True)
    acc = np.empty((position.shape[0], 3), dtype=np.float64)
    _kernels_power._interpolate_cic(field, position, float(box_size), MESH_OFFSET, acc)
    return acc


def evolve(position, velocity, a_start, box_size, omega_m, steps, n_mesh, on_output=None,
           progress=None, workers=None):
    """Evolve particles with a kick-drift-kick particle-mesh leapfrog over a step table.

    Parameters
    ----------
    position : array_like, shape (N, 3)
        Comoving positions in Mpc/h at a_start, in [0, L].
    velocity : array_like, shape (N, 3)
        Peculiar velocities a dx/dt in km/s at a_start.
    a_start : float
        Scale factor of the particles; must equal the table's first a_begin (rel. 1e-9).
    box_size : float
        L in Mpc/h.
    omega_m : float
        Matter density today.
    steps : LeapfrogSteps or icgen.steps.StepTable
        The KDK steps with their drift and kick integrals (units of 1/H0).
    n_mesh : int
        PM mesh points per side (even, 8 .. 1024). Use the particle grid (n_mesh^3 = N):
        then the lattice-matched influence function makes the linear forces exact
        (module notes); other sizes use the deconvolved one and are less accurate.
    on_output : callable, optional
        Called with each :class:`PMSnapshot` as it is reached; if not given the
        snapshots are collected and returned.
    progress : callable, optional
        Called with (steps done, steps total) after every step.
    workers : int, optional
        scipy.fft threads (results do not depend on it).

    Returns
    -------
    list of PMSnapshot
        The outputs in order (empty if ``on_output`` was given).

    Raises
    ------
    InputError
        Before any step: bad shapes, positions outside the box, a mesh size out of range,
        or a table that does not start at a_start.
    """
    if not isinstance(steps, LeapfrogSteps):
        steps = LeapfrogSteps.from_step_table(steps)
    if isinstance(box_size, bool) or not isinstance(box_size, (int, float, np.floating)) \
            or not (np.isfinite(box_size) and box_size > 0):
        raise InputError(f"box_size = {box_size!r}: need a positive finite length in Mpc/h")
    box_size = float(box_size)
    if isinstance(n_mesh, bool) or not isinstance(n_mesh, (int, np.integer)) or not 8 <= n_mesh <= 1024 \
            or n_mesh % 2:
        raise InputError(f"n_mesh = {n_mesh!r}: need an even integer in [8, 1024]")
    x = np.array(power.check_positions(position, box_size), dtype=np.float64)
    v = np.asarray(velocity, dtype=np.float64)
    if v.shape != x.shape or not np.all(np.isfinite(v)):
        raise InputError(f"velocity: need finite values of shape {x.shape}, got {v.shape}")
    if not (isinstance(omega_m, (int, float, np.floating)) and 0 < omega_m <= 20):
        raise InputError(f"omega_m = {omega_m!r}: need a value in (0, 20]")
    if not np.isclose(a_start, steps.a_begin[0], rtol=1e-9, atol=0):
        raise InputError(f"the step table starts at a = {steps.a_begin[0]!r} but the particles are at "
                         f"a = {a_start!r}; build the table from the initial conditions' scale factor")
    _wrap(x, box_size)
    green = influence_function(n_mesh, box_size, omega_m, lattice=x.shape[0] == n_mesh**3)
    p = v * (a_start / VELOCITY_UNIT_KM_S)  # p = a^2 dx/dt = a v, in H0 Mpc/h
    out = []
    emit = on_output or out.append

    def snapshot(a, step):
        emit(PMSnapshot(a=float(a), step=step, position=x.copy(),
                        velocity=p * (VELOCITY_UNIT_KM_S / a)))

    if steps.output_at_start:
        snapshot(steps.a_begin[0], 0)
    g = accelerations(x, box_size, omega_m, n_mesh, green, workers)
    for s in range(steps.n_steps):
        p += g * steps.kick_first_half[s]
        x += p * steps.drift[s]
        _wrap(x, box_size)
        g = accelerations(x, box_size, omega_m, n_mesh, green, workers)
        p += g * steps.kick_second_half[s]
        if steps.output_after[s]:
            snapshot(steps.a_end[s], s + 1)
        if progress:
            progress(s + 1, steps.n_steps)
    return out
