"""Start-redshift advice: displacement and density statistics of the grid versus z.

For a box of side L with n^3 particles and the linear spectrum P(k) at z = 0, the
fields the initial conditions sample have, at growth D1(z),

    sigma_delta^2(z) = D1^2 sum_k P(k) / L^3,
    sigma_psi^2(z)   = D1^2 sum_k P(k) / (k^2 L^3)     (3-D, per component / 3),

summed over exactly the Fourier modes the generator populates (all integer
wavevectors with components in (-n/2, n/2), k != 0; see :mod:`icgen.field`).
These are the expectations of the realisation's rms (Parseval's theorem with the
conventions of :mod:`icgen.field`).

Expected largest displacement component: sigma_psi,1D sqrt(2 ln(3 n^3)), the
Gaussian extreme-value estimate for 3 n^3 draws treated as independent (an upper
estimate, since neighbouring particles are correlated; common practice).

Recommendation (common practice, thresholds configurable): start at the latest
redshift at which both
  * the rms linear density contrast on the grid, sigma_delta, is at most
    ``sigma_limit`` (default 0.1 for first order, 0.25 for second order: 2LPT
    transients decay as D1^-2 instead of D1^-1 for Zel'dovich initial conditions,
    Scoccimarro 1998; Crocce, Pueblas & Scoccimarro 2006, sec. 3, so it tolerates
    a later start), and
  * the rms displacement per component is at most ``displacement_limit`` (default
    0.25) times the mean interparticle spacing L/n, so that particle trajectories
    rarely cross before the run starts (Lagrangian perturbation theory fails at
    shell crossing).
"""

from dataclasses import dataclass

import numpy as np

from ._roots import brent
from .errors import ParameterError
from .field import check_grid, mode_wavenumbers

__all__ = ["StartAdvice", "mode_multiplicity", "grid_variances", "advise", "DEFAULT_LIMITS"]

#: Default thresholds (common practice): sigma_delta for orders 1 and 2, rms displacement / spacing.
DEFAULT_LIMITS = {"sigma_limit_1lpt": 0.1, "sigma_limit_2lpt": 0.25, "displacement_limit": 0.25}


def mode_multiplicity(n):
    """Number of populated grid modes with kx^2 + ky^2 + kz^2 = m, for m = 0..3(n/2)^2.

    Components run over (-n/2, n/2) (Nyquist planes excluded); m = 0 is counted
    (one mode) so callers must drop it.
    """
    half = n // 2
    k = np.arange(-half + 1, half)
    c1 = np.bincount(k * k, minlength=half * half + 1).astype(np.float64)
    # Counts of kx^2 + ky^2 + kz^2 = m: the threefold convolution of c1, by FFT and rounded
    # (exact: counts are integers far below 2^53 and the FFT error is ~1e-16 of the largest).
    size = 3 * half * half + 1
    nfft = 1 << int(np.ceil(np.log2(size)))
    c3 = np.fft.irfft(np.fft.rfft(c1, nfft) ** 3, nfft)[:size]
    return np.rint(c3)


def grid_variances(power, n, box_size):
    """(sigma_delta^2, sigma_psi_3d^2) at D1 = 1 of the grid's modes.

    Parameters
    ----------
    power : callable
        P(k) at z = 0, (Mpc/h)^3, k in h/Mpc.
    n : int
    box_size : float
        Mpc/h.

    Returns
    -------
    tuple of float
        Variance of delta (dimensionless) and of the 3-D displacement ((Mpc/h)^2).
    """
    check_grid(n, box_size)
    mult = mode_multiplicity(n)[1:]
    k = mode_wavenumbers(n, box_size)[1:]
    keep = mult > 0
    pk = np.asarray(power(k[keep]), dtype=np.float64) / box_size**3
    var_delta = float(np.sum(mult[keep] * pk))
    var_psi = float(np.sum(mult[keep] * pk / k[keep] ** 2))
    return var_delta, var_psi


@dataclass(frozen=True)
class StartAdvice:
    """Grid statistics versus redshift and the recommended start for each LPT order.

    Attributes
    ----------
    z : ndarray
        Redshifts of the table.
    sigma_delta : ndarray
        rms linear density contrast on the grid at z.
    rms_displacement : ndarray
        rms displacement per component at z, in units of the spacing L/n.
    max_displacement : ndarray
        Expected largest displacement component at z, in units of L/n.
    z_start_1lpt, z_start_2lpt : float
        Recommended start redshifts (module notes).
    limits : dict
        Thresholds used.
    spacing : float
        Mean interparticle spacing L/n in Mpc/h.
    """

    z: np.ndarray
    sigma_delta: np.ndarray
    rms_displacement: np.ndarray
    max_displacement: np.ndarray
    z_start_1lpt: float
    z_start_2lpt: float
    limits: dict
    spacing: float

    def z_start(self, order):
        """Recommended start redshift for LPT order 1 or 2."""
        return self.z_start_1lpt if order == 1 else self.z_start_2lpt


def _z_where_growth(bg, d_target):
    """Redshift at which D1 equals d_target (0 if d_target >= 1)."""
    if d_target >= 1.0:
        return 0.0
    lo = bg.a_min
    if bg.D1(lo) >= d_target:
        raise ParameterError(f"the start criterion needs D1 = {d_target:.3g}, reached only before "
                             f"a = {lo:.3g}: loosen the thresholds or use a coarser grid")
    # Brent's method (icgen._roots): a within 1e-14 + 1e-12 a of the root.
    a = brent(lambda x: bg.D1(x) - d_target, lo, 1.0, xtol=1e-14, rtol=1e-12)
    return 1.0 / a - 1.0


def advise(power, bg, box_size, n, z=None, limits=None):
    """Start-redshift advice for a box and grid.

    Parameters
    ----------
    power : callable
        Linear P(k) at z = 0 in (Mpc/h)^3, k in h/Mpc.
    bg : BackgroundTable
    box_size : float
        L in Mpc/h.
    n : int
        Particles per side.
    z : array_like, optional
        Redshifts of the table (default: 0 to 200, 41 values spaced in log(1+z)).
    limits : dict, optional
        Thresholds overriding :data:`DEFAULT_LIMITS`.

    Returns
    -------
    StartAdvice
    """
    lim = dict(DEFAULT_LIMITS)
    for k, v in (limits or {}).items():
        if k not in lim:
            raise ParameterError(f"unknown start threshold {k!r}; known: {', '.join(lim)}")
        if not (isinstance(v, (int, float)) and 0 < v <= 10):
            raise ParameterError(f"{k} = {v!r} is outside the allowed range (0, 10]")
        lim[k] = float(v)
    z = np.expm1(np.linspace(0.0, np.log(201.0), 41)) if z is None else np.asarray(z, dtype=np.float64)
    var_delta, var_psi = grid_variances(power, n, box_size)
    spacing = box_size / n
    d1 = np.asarray(bg.D1(1.0 / (1.0 + z)))
    sig_d0 = np.sqrt(var_delta)
    psi1d0 = np.sqrt(var_psi / 3.0) / spacing
    extreme = np.sqrt(2.0 * np.log(3.0 * n**3))
    z_psi = _z_where_growth(bg, lim["displacement_limit"] / psi1d0)
    z1 = max(_z_where_growth(bg, lim["sigma_limit_1lpt"] / sig_d0), z_psi)
    z2 = max(_z_where_growth(bg, lim["sigma_limit_2lpt"] / sig_d0), z_psi)
    arr = lambda x: np.array(x, dtype=np.float64)  # noqa: E731
    return StartAdvice(z=arr(z), sigma_delta=arr(d1 * sig_d0), rms_displacement=arr(d1 * psi1d0),
                       max_displacement=arr(d1 * psi1d0 * extreme), z_start_1lpt=z1, z_start_2lpt=z2,
                       limits=lim, spacing=spacing)
