"""Particles at the starting scale factor: positions, velocities, ids and mass.

Positions x = q + D1 psi_1 + D2 psi_2 (Mpc/h comoving), wrapped into [0, L), with
q = (i, j, k) L/n on the Lagrangian grid. Peculiar velocities (km/s)

    v = a dx/dt = a H(a) (f1 D1 psi_1 + f2 D2 psi_2),

with H in km/s per Mpc/h, i.e. 100 E(a) (so v comes out in km/s for psi in Mpc/h).
The particle with grid index (i, j, k) has id (i n + j) n + k and is stored at that
row. Particle mass m = omega_m rho_crit,0 L^3 / n^3 in Msun/h
(rho_crit,0 = 2.775e11 h^2 Msun/Mpc^3, :data:`icgen.units.RHO_CRIT_100`).
"""

from dataclasses import dataclass

import numpy as np

from .errors import ParameterError
from .units import RHO_CRIT_100

# The compiled kernels (icgen._kernels, numba) and icgen.lpt (scipy.fft) are imported by the
# functions that use them: StartGrowth and the mass are needed to create an output file,
# which ``icgen ics`` does before numba loads, so the file's pages are prepared meanwhile.

__all__ = ["ParticleSet", "at", "particle_blocks", "block_planes", "fill_block", "coefficients", "summarize", "particle_mass",
           "StartGrowth"]


def particle_mass(omega_m, box_size, n):
    """Mass of one particle in Msun/h: omega_m rho_crit,0 L^3 / n^3 (L in Mpc/h)."""
    return omega_m * RHO_CRIT_100 * box_size**3 / n**3


@dataclass(frozen=True)
class StartGrowth:
    """Background quantities at the start: a, D1, f1, D2, f2 and H (km/s/Mpc)."""

    a: float
    D1: float
    f1: float
    D2: float
    f2: float
    H: float
    h: float

    @classmethod
    def from_background(cls, bg, a):
        """Evaluate the start quantities from a BackgroundTable."""
        return cls(a=float(a), D1=bg.D1(a), f1=bg.f1(a), D2=bg.D2(a), f2=bg.f2(a), H=bg.hubble(a),
                   h=bg.cosmo.h)


@dataclass(frozen=True, eq=False)
class ParticleSet:
    """Particles of an initial condition.

    Attributes
    ----------
    position : ndarray, shape (n^3, 3), float32 or float64
        Comoving positions in Mpc/h, in [0, L).
    velocity : ndarray, shape (n^3, 3), same dtype
        Peculiar velocities a dx/dt in km/s.
    id : ndarray, uint64, shape (n^3,) or None
        Lagrangian grid index (i n + j) n + k.
    mass : float
        Particle mass in Msun/h.
    box_size : float
        L in Mpc/h.
    growth : StartGrowth
        a, D1, f1, D2, f2, H at the start.
    lpt_order : int
    stats : dict
        Displacement and velocity statistics (:func:`summarize`).
    """

    position: np.ndarray
    velocity: np.ndarray
    id: np.ndarray | None
    mass: float
    box_size: float
    growth: StartGrowth
    lpt_order: int
    stats: dict | None = None

    def __post_init__(self):
        for arr in (self.position, self.velocity, self.id):
            if arr is not None:
                arr.flags.writeable = False

    @property
    def n_particles(self):
        """Number of particles, n^3."""
        return self.position.shape[0]


def _check_dtype(dtype):
    dtype = np.dtype(dtype)
    if dtype not in (np.float32, np.float64):
        raise ParameterError(f"precision = {dtype.name!r}: allowed float32 and float64")
    return dtype


def summarize(plane_stats):
    """Displacement and velocity statistics from per-plane sums (see :func:`particle_blocks`).

    Parameters
    ----------
    plane_stats : ndarray, shape (n, 6)
        Per grid plane (all n planes of the grid, in order): sum, sum of squares and
        max |.| of the displacement components (Mpc/h) and of the velocity components (km/s).

    Returns
    -------
    dict
        ``{"displacement": {"mean", "rms", "max"}, "velocity": {...}}`` over all particles
        and components (sums in a fixed order: deterministic).
    """
    n = plane_stats.shape[0]
    count = 3.0 * n**3
    tot = plane_stats.sum(axis=0)
    mx = plane_stats.max(axis=0)
    return {"displacement": {"mean": tot[0] / count, "rms": float(np.sqrt(tot[1] / count)), "max": float(mx[2])},
            "velocity": {"mean": tot[3] / count, "rms": float(np.sqrt(tot[4] / count)), "max": float(mx[5])}}


def coefficients(growth, order):
    """((c_pos1, c_pos2), (c_vel1, c_vel2)) of displacement and velocity at the start.

    displacement = c_pos1 psi_1 + c_pos2 psi_2 (Mpc/h) with (D1, D2);
    velocity = c_vel1 psi_1 + c_vel2 psi_2 (km/s) with (a H f1 D1, a H f2 D2), H in km/s per Mpc/h.
    The second-order coefficients are zero for order 1.
    """
    a_h = growth.a * growth.H / growth.h
    d2 = growth.D2 if order == 2 else 0.0
    return (growth.D1, d2), (a_h * growth.f1 * growth.D1, a_h * growth.f2 * d2)


class _InMemory:
    """Real field components already in memory, behind the interface of :class:`icgen.lpt.FieldSlabs`."""

    def __init__(self, comps, x0=0):
        self.comps = comps
        self.n = comps[0].shape[2]
        self.x0 = x0
        self.workers = None

    @property
    def planes(self):
        return self.comps[0].shape[0]

    def real(self, i0, i1, workers=None):
        return tuple(c[i0:i1] for c in self.comps)


def block_planes(planes, n, rows_per_block):
    """Plane ranges [(i0, i1), ...] of the blocks of about ``rows_per_block`` rows (whole planes)."""
    per = max(1, rows_per_block // (n * n))
    return [(i0, min(planes, i0 + per)) for i0 in range(0, planes, per)]


def fill_block(field, kinds, i0, i1, box_size, outs):
    """Positions and/or velocities of the local planes i0 <= i < i1, on the calling thread alone.

    For callers that run several blocks side by side, one per thread: the planes are made
    real with one FFT thread and turned into particles by single-threaded kernels, which
    give the same numbers as the multi-threaded ones (:func:`particle_blocks`).

    Parameters
    ----------
    field : icgen.lpt.FieldSlabs
    kinds : sequence of (kind, scale)
        As in :func:`particle_blocks`.
    i0, i1 : int
        Local planes of the block.
    box_size : float
        L in Mpc/h.
    outs : dict
        kind -> C-contiguous array ((i1 - i0) n^2, 3) of float32 or float64 to fill.

    Returns
    -------
    dict
        kind -> plane statistics (i1 - i0, 3): sum, sum of squares and max |.| of the
        displacement or velocity components.
    """
    from . import _kernels

    fx, fy, fz = field.real(i0, i1, workers=1)
    stats = {}
    for kind, scale in kinds:
        st = np.empty((i1 - i0, 3))
        if kind == "position":
            _kernels._position_block(fx, fy, fz, scale, 0, i1 - i0, field.x0 + i0, box_size, outs[kind], st)
        else:
            _kernels._velocity_block(fx, fy, fz, scale, 0, i1 - i0, outs[kind], st)
        stats[kind] = st
    return stats


def particle_blocks(field, kinds, box_size, dtype=np.float32, rows_per_block=1 << 19, buffers=1):
    """Positions and/or velocities from a :class:`icgen.lpt.FieldSlabs`, block by block (a generator).

    Each block of x planes of the field is made real once (:meth:`~icgen.lpt.FieldSlabs.real`)
    and turned into every kind asked for while it is still in the cache.

    Parameters
    ----------
    field : icgen.lpt.FieldSlabs
        Displacement or velocity field over its scales (from :func:`icgen.lpt.output_fields`).
    kinds : sequence of (kind, scale)
        kind in {"position", "velocity"}; positions are q + scale field mod L (Mpc/h),
        velocities scale field (km/s).
    box_size : float
        L in Mpc/h.
    dtype : {numpy.float32, numpy.float64}
    rows_per_block : int
        Target rows per block (whole planes, at least one).
    buffers : int
        Output buffers per kind, used in turn: a block stays valid until ``buffers - 1``
        more blocks of its kind have been yielded (2 lets a writer thread drain one
        while the next is computed).

    Yields
    ------
    kind : str
    row0 : int
        First row of the block, counted from the field's first plane.
    block : ndarray, shape (rows, 3)
        Positions in [0, L) (Mpc/h) or velocities (km/s); the buffers are reused in turn.
    plane_stats : ndarray, shape (planes, 3)
        Sum, sum of squares and max |.| of the displacement or velocity components.
    """
    from . import _kernels

    dtype = _check_dtype(dtype)
    planes, n = field.planes, field.n
    ranges = block_planes(planes, n, rows_per_block)
    bufs = {kind: [np.empty(((ranges[0][1] - ranges[0][0]) * n * n, 3), dtype=dtype)
                   for _ in range(max(1, buffers))] for kind, _ in kinds}
    for b, (i0, i1) in enumerate(ranges):
        rows = (i1 - i0) * n * n
        fx, fy, fz = field.real(i0, i1)
        for kind, scale in kinds:
            block = bufs[kind][b % len(bufs[kind])][:rows]
            stats = np.empty((i1 - i0, 3))
            if kind == "position":
                _kernels._position_slab(fx, fy, fz, scale, 0, i1 - i0, field.x0 + i0, box_size, block, stats)
            else:
                _kernels._velocity_slab(fx, fy, fz, scale, 0, i1 - i0, block, stats)
            yield kind, i0 * n * n, block, stats
        del fx, fy, fz


def at(growth, disp, omega_m, dtype=np.float32, write_ids=True):
    """Place the particles at the start (all in memory; see :func:`particle_blocks` for streaming).

    Parameters
    ----------
    growth : StartGrowth
        Background quantities at the starting scale factor.
    disp : Displacements
        psi_1 (and psi_2) at D1 = 1, Mpc/h.
    omega_m : float
        Matter density today (for the particle mass).
    dtype : {numpy.float32, numpy.float64}
        Floating type of positions and velocities. Values are computed in float64
        from the fields and rounded once; float32 keeps about 7 significant digits,
        a resolution of ~6e-8 L (check it against your softening).
    write_ids : bool
        Produce the id array.

    Returns
    -------
    ParticleSet
    """
    from .lpt import Displacements

    if not isinstance(disp, Displacements):
        raise TypeError(f"disp must be Displacements, got {type(disp).__name__}")
    dtype = _check_dtype(dtype)
    n, box = disp.n, disp.box_size
    if disp.planes != n:
        raise ParameterError("particles.at needs the whole grid; stream a rank's slab with particles.particle_blocks")
    out = {"position": np.empty((n**3, 3), dtype=dtype), "velocity": np.empty((n**3, 3), dtype=dtype)}
    stats = {}
    for kind, (c1, c2) in zip(("position", "velocity"), coefficients(growth, disp.order)):
        if disp.psi_2 is None:  # first order: the field itself, scaled in the kernel
            field, scale = tuple(disp.psi_1), c1
        else:  # second order: the two orders summed in real space, in float64
            field, scale = tuple(c1 * disp.psi_1.astype(np.float64) + c2 * disp.psi_2), 1.0
        planes = []
        for _, row0, block, st in particle_blocks(_InMemory(field), ((kind, scale),), box, dtype, rows_per_block=n**3):
            out[kind][row0:row0 + block.shape[0]] = block
            planes.append(st)
        stats[kind] = np.concatenate(planes)
    pos, vel = out["position"], out["velocity"]
    ids = np.arange(n**3, dtype=np.uint64) if write_ids else None
    return ParticleSet(position=pos, velocity=vel, id=ids, mass=particle_mass(omega_m, box, n),
                       box_size=box, growth=growth, lpt_order=disp.order,
                       stats=summarize(np.concatenate([stats["position"], stats["velocity"]], axis=1)))
