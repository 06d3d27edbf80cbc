"""icgen: initial conditions, schedules and run checks for cosmological N-body simulations.

The public API, one line each (imported lazily on first use, so ``import icgen`` is cheap):

Parameters and errors
    Cosmology            frozen, validated cosmological parameters (icgen.cosmology)
    PLANCK18             Planck 2018 (paper VI, Table 2) default cosmology
    load_parameters      read and validate a TOML parameter file (icgen.parameters.load)
    InputError           base class of every bad-input error (a ValueError)
Background
    solve_background     Friedmann background, D1, D2, f1, f2 tabulated in ln a (icgen.background.solve)
    BackgroundTable      the solved background; vectorised t(a), a(t), H(a), D1, f1, D2, f2, ...
Linear power spectrum
    LinearSpectrum       P(k, z) in (Mpc/h)^3, sigma(R, z) (icgen.spectrum)
    required_k_range     k range a box and grid sample, h/Mpc
Initial conditions
    white_noise          counter-based Gaussian modes keyed by (seed, kx, ky, kz) (icgen.field)
    linear_density_modes delta_k with <|delta_k|^2> = P(k)/L^3
    displacements        Zel'dovich and 2LPT displacement fields (icgen.lpt)
    place_particles      positions, velocities, ids, mass at the start (icgen.particles.at)
    advise_start         start-redshift advice (icgen.start.advise)
Time
    snapshot_outputs     snapshot schedule (icgen.schedule.outputs)
    build_steps          leapfrog step table with drift and kick integrals (icgen.steps.build)
    measure_growth_error the step table's growth error on the linear mode (icgen.growth_check.measure)
Measurement
    measure_power        power spectrum of particles in a periodic box (icgen.power.measure)
"""

import importlib

__version__ = "0.1.0"

_LAZY = {
    "Cosmology": ("cosmology", "Cosmology"),
    "PLANCK18": ("cosmology", "PLANCK18"),
    "load_parameters": ("parameters", "load"),
    "InputError": ("errors", "InputError"),
    "solve_background": ("background", "solve"),
    "BackgroundTable": ("background", "BackgroundTable"),
    "LinearSpectrum": ("spectrum", "LinearSpectrum"),
    "required_k_range": ("spectrum", "required_k_range"),
    "white_noise": ("field", "white_noise"),
    "linear_density_modes": ("field", "linear_density_modes"),
    "displacements": ("lpt", "displacements"),
    "place_particles": ("particles", "at"),
    "advise_start": ("start", "advise"),
    "snapshot_outputs": ("schedule", "outputs"),
    "build_steps": ("steps", "build"),
    "measure_growth_error": ("growth_check", "measure"),
    "measure_power": ("power", "measure"),
}

__all__ = ["__version__", *_LAZY]


def __getattr__(name):
    if name in _LAZY:
        module, attr = _LAZY[name]
        value = getattr(importlib.import_module(f"{__name__}.{module}"), attr)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'icgen' has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(_LAZY))
