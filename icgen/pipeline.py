"""The chain of stages, each in one short function that is easy to read.

cosmology -> background -> spectrum -> field -> lpt -> particles.
Reading files and writing outputs stays with the callers (cli, io_*).
"""

from dataclasses import dataclass

import numpy as np

from . import field, particles, start
from .errors import ParameterError

# icgen.lpt (scipy.fft, the compiled kernels) is imported by the functions that transform:
# the set-up functions here stay light (see icgen.particles).

__all__ = ["GridSetup", "grid_setup", "start_scale_factor", "displacement_fields", "particle_fields",
           "initial_conditions",
           "N_PROGRESS_STEPS"]


@dataclass(frozen=True)
class GridSetup:
    """What the grid stages need from the parameters (validated)."""

    box_size: float
    n: int
    lpt_order: int
    seed: int
    fixed_amplitude: bool
    paired: bool
    dtype: np.dtype
    write_ids: bool


def grid_setup(params):
    """Read [box], [start], [phases] and [output] into a GridSetup (checks included)."""
    n = params.get("box", "particles_per_side")
    box = params.get("box", "size")
    field.check_grid(n, box)
    return GridSetup(box_size=box, n=n, lpt_order=params.get("start", "lpt_order"),
                     seed=params.get("phases", "seed"),
                     fixed_amplitude=params.get("phases", "fixed_amplitude"),
                     paired=params.get("phases", "paired"),
                     dtype=np.dtype(params.get("output", "precision")),
                     write_ids=params.get("output", "write_ids"))


def start_scale_factor(params, pk, bg, setup):
    """Starting scale factor: [start] redshift, or the recommendation when it is "auto".

    Returns
    -------
    a_start : float
    advice : StartAdvice or None
    """
    z = params.get("start", "redshift")
    advice = None
    if z == "auto":
        limits = {k: params.get("start", k) for k in start.DEFAULT_LIMITS}
        advice = start.advise(lambda k: pk.P(k, 0.0), bg, setup.box_size, setup.n, limits=limits)
        z = advice.z_start(setup.lpt_order)
    a = 1.0 / (1.0 + z)
    if not bg.a_min <= a <= min(1.0, bg.a_top):
        raise ParameterError(f"[start] redshift = {z:g} is outside the background table "
                             f"[{1 / min(1.0, bg.a_top) - 1:g}, {1 / bg.a_min - 1:.4g}]")
    return a, advice


#: Number of progress ticks of :func:`displacement_fields` for order 1 and 2.
N_PROGRESS_STEPS = {1: 4, 2: 14}


def displacement_fields(pk, bg, setup, workers=None, progress=None, layout=None):
    """Linear modes -> LPT displacement fields at D1 = 1, in the setup's precision.

    Parameters
    ----------
    pk : object with ``P(k, z)``
        Linear power spectrum (k in h/Mpc, P in (Mpc/h)^3), scaled in z with bg's D1.
    bg : BackgroundTable
    setup : GridSetup
    workers : int, optional
        FFT threads (the output does not depend on it).
    progress : callable, optional
        Called with a stage name at each of N_PROGRESS_STEPS[order] steps.
    layout : icgen.decomp.Layout, optional
        This rank's slabs in a distributed run (default: the whole grid). The fields
        are bit-identical to the serial ones for any number of ranks.

    Returns
    -------
    Displacements
        This rank's x-slab of the fields (the whole grid in a serial run).
    """
    from . import lpt

    tick = progress or (lambda stage: None)
    modes = field.linear_density_modes(lambda k: pk.P(k, 0.0), setup.seed, setup.n, setup.box_size,
                                       setup.fixed_amplitude, setup.paired, dtype=setup.dtype,
                                       layout=layout)
    tick("modes")
    # The modes are used by nothing else: let the last transform reuse their memory.
    return lpt.displacements(modes, setup.lpt_order, workers=workers, progress=tick, overwrite_modes=True)


def particle_fields(pk, bg, setup, a_start, workers=None, progress=None, layout=None):
    """Linear modes -> the displacement and velocity fields at a_start, one after the other.

    Nothing heavy happens here: the modes are drawn when the consumer starts on the
    fields, so it can first create its output (and let the system prepare it) while
    they are computed.

    Returns
    -------
    growth : StartGrowth
    fields : generator of (kinds, field)
        See :func:`icgen.lpt.output_fields`; this rank's x-slab in a distributed run
        (bit-identical to the serial fields for any number of ranks).
    """
    growth = particles.StartGrowth.from_background(bg, a_start)
    c_pos, c_vel = particles.coefficients(growth, setup.lpt_order)

    def fields():
        from . import lpt

        modes = field.linear_density_modes(lambda k: pk.P(k, 0.0), setup.seed, setup.n, setup.box_size,
                                           setup.fixed_amplitude, setup.paired, dtype=setup.dtype,
                                           layout=layout)
        if progress:
            progress("modes")
        stream = lpt.output_fields(modes, setup.lpt_order, c_pos, c_vel, workers=workers, progress=progress)
        del modes  # the stream frees them as it goes
        yield from stream

    return growth, fields()


def initial_conditions(pk, bg, setup, a_start, workers=None, progress=None):
    """Particles at a_start, all in memory (the CLI streams them to disk instead).

    Returns
    -------
    ParticleSet
    """
    disp = displacement_fields(pk, bg, setup, workers, progress)
    growth = particles.StartGrowth.from_background(bg, a_start)
    return particles.at(growth, disp, bg.cosmo.omega_m, setup.dtype, setup.write_ids)
