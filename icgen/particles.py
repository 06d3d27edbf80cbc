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

from . import _kernels
from .errors import ParameterError
from .lpt import Displacements
from .units import RHO_CRIT_100

__all__ = ["ParticleSet", "at", "particle_mass", "StartGrowth"]


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
    """

    position: np.ndarray
    velocity: np.ndarray
    id: np.ndarray | None
    mass: float
    box_size: float
    growth: StartGrowth
    lpt_order: int

    def __post_init__(self):
        for arr in (self.position, self.velocity, self.id):
            if arr is not None:
                arr.flags.writeable = False

    @property
    def n_particles(self):
        """Number of particles, n^3."""
        return self.position.shape[0]


def at(growth, disp, omega_m, dtype=np.float32, write_ids=True):
    """Place the particles at the start.

    Parameters
    ----------
    growth : StartGrowth
        Background quantities at the starting scale factor.
    disp : Displacements
        psi_1 (and psi_2) at D1 = 1, Mpc/h.
    omega_m : float
        Matter density today (for the particle mass).
    dtype : {numpy.float32, numpy.float64}
        Floating type of positions and velocities. Positions are computed in float64
        and rounded once; float32 keeps about 7 significant digits, i.e. a resolution
        of ~6e-8 L (check it against your softening).
    write_ids : bool
        Produce the id array.

    Returns
    -------
    ParticleSet
    """
    if not isinstance(disp, Displacements):
        raise TypeError(f"disp must be Displacements, got {type(disp).__name__}")
    dtype = np.dtype(dtype)
    if dtype not in (np.float32, np.float64):
        raise ParameterError(f"precision = {dtype.name!r}: allowed float32 and float64")
    n, box = disp.n, disp.box_size
    empty = np.zeros((0, 0, 0, 0))
    psi2 = disp.psi_2 if disp.psi_2 is not None else empty
    d2 = growth.D2 if disp.psi_2 is not None else 0.0
    pos = np.empty((n**3, 3), dtype=np.float64)
    _kernels._place_particles(disp.psi_1, growth.D1, psi2, d2, box, box / n, pos)
    vel = np.empty((n**3, 3), dtype=np.float64)
    # a H in km/s per (Mpc/h): H [km/s/Mpc] / h.
    a_h = growth.a * growth.H / growth.h
    _kernels._particle_velocities(disp.psi_1, a_h * growth.f1 * growth.D1, psi2,
                                  a_h * growth.f2 * d2, vel)
    if dtype != np.float64:
        pos = pos.astype(dtype)
        pos[pos >= dtype.type(box)] = 0.0  # rounding up to L wraps to 0
        vel = vel.astype(dtype)
    ids = np.arange(n**3, dtype=np.uint64) if write_ids else None
    return ParticleSet(position=pos, velocity=vel, id=ids, mass=particle_mass(omega_m, box, n),
                       box_size=box, growth=growth, lpt_order=disp.order)
