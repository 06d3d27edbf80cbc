"""Gaussian random fields on the grid, defined mode by mode in Fourier space.

Conventions
-----------
* Grid of n^3 points in a periodic box of side L (Mpc/h); fundamental wavenumber
  k_f = 2 pi / L (h/Mpc); mode (kx, ky, kz) in integers has k = k_f (kx, ky, kz).
* Fourier series with the forward normalisation of ``scipy.fft`` (``norm="forward"``):
  delta(x) = sum_k delta_k exp(i k.x), delta_k = (1/n^3) sum_x delta(x) exp(-i k.x),
  so delta_k of a given wavevector does not depend on n, and
  <|delta_k|^2> = P(k) / L^3 (P in (Mpc/h)^3).
* Arrays hold the half-spectrum of ``rfftn``: shape (n, n, n//2 + 1), index i of
  axis 0 and 1 meaning kx = i for i < n/2 and i - n otherwise, kz = l >= 0.
* White noise: the complex amplitude of every integer wavevector comes from the
  counter-based generator Philox4x32-10 (Salmon et al. 2011) with counter
  (kx, ky, kz, attempt) (32-bit two's complement) and key (seed mod 2^32,
  seed div 2^32): it depends on (seed, kx, ky, kz) alone, never on n, threads or
  slabs. The canonical member of each pair (k, -k) (kz > 0, or kz = 0 and ky > 0,
  or kz = ky = 0 and kx > 0) draws; the other is its conjugate (exact Hermitian
  symmetry). The k = 0 mode is zero (the box has the mean density) and so is every
  mode on a Nyquist plane (a component equal to -n/2, or kz = n/2), where the pair
  k, -k falls onto one grid point.
* Gaussian amplitude by the Marsaglia polar method (Marsaglia & Bray 1964): a point
  (u, v) uniform in the unit disk (attempt 0, 1, ... until 0 < s = u^2 + v^2 < 1)
  gives W = (u + i v) sqrt(-ln s / s), a complex Gaussian with <|W|^2> = 1 (|W|^2 is
  exponential, the phase uniform). Fixed amplitude (Angulo & Pontzen 2016, MNRAS
  462, L1): W = (u + i v)/sqrt(s), |W| = 1 with the same phases; paired: every phase
  shifted by pi (W -> -W).

The work is organised by slabs of constant first index, so a slab of the field
can be produced on its own (``ix0``, ``ix1``), as a distributed run will need.
"""

from dataclasses import dataclass

import numpy as np

from .errors import ParameterError

__all__ = ["white_noise", "amplitude_table", "DensityModes", "linear_density_modes",
           "mode_wavenumbers", "check_grid"]


def check_grid(n, box_size):
    """Validate a grid: n even, 4 <= n <= 16384; 0 < box_size."""
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 4 or n > 16384 or n % 2:
        raise ParameterError(f"particles_per_side = {n!r}: need an even integer in [4, 16384]")
    if not (np.isfinite(box_size) and box_size > 0):
        raise ParameterError(f"box_size = {box_size!r}: need a positive length in Mpc/h")


def _key(seed):
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or not 0 <= seed < 2**64:
        raise ParameterError(f"seed = {seed!r}: need an integer in [0, 2^64)")
    seed = int(seed)
    return np.uint64(seed & 0xFFFFFFFF), np.uint64(seed >> 32)


def _complex_dtype(dtype):
    dtype = np.dtype(dtype)
    if dtype == np.float32:
        return np.dtype(np.complex64)
    if dtype == np.float64:
        return np.dtype(np.complex128)
    raise ParameterError(f"precision = {dtype.name!r}: allowed float32 and float64")


def white_noise(seed, n, fixed_amplitude=False, paired=False, ix0=0, ix1=None, dtype=np.float64,
                amp_of_m2=None, iy0=0, iy1=None):
    """Unit white noise W(k) on the half-spectrum grid (or one slab of it).

    Parameters
    ----------
    seed : int
        Key of the mode generator, 0 <= seed < 2^64.
    n : int
        Grid points per side (even).
    fixed_amplitude : bool
        |W| = 1 exactly (phases random).
    paired : bool
        Shift every phase by pi.
    ix0, ix1 : int
        Slab of the first axis to produce, 0 <= ix0 < ix1 <= n (default: all).
    iy0, iy1 : int
        Slab of the second axis to produce, 0 <= iy0 < iy1 <= n (default: all).
    dtype : {numpy.float64, numpy.float32}
        Real precision: complex128 or complex64 output. Amplitudes are computed in
        float64 and rounded once, so the complex64 field is the rounded complex128 one.
    amp_of_m2 : ndarray, optional
        Multiply mode m = kx^2 + ky^2 + kz^2 by amp_of_m2[m] before rounding (see
        :func:`amplitude_table`); default 1 (pure white noise).

    Returns
    -------
    ndarray, complex128 or complex64, shape (ix1 - ix0, iy1 - iy0, n//2 + 1)
        <|W|^2> = 1 except on the zeroed modes (module notes).
    """
    check_grid(n, 1.0)
    ix1 = n if ix1 is None else ix1
    iy1 = n if iy1 is None else iy1
    if not (0 <= ix0 < ix1 <= n and 0 <= iy0 < iy1 <= n):
        raise ParameterError(f"block [{ix0}, {ix1}) x [{iy0}, {iy1}) is not inside [0, {n})^2")
    k0, k1 = _key(seed)
    out = np.empty((ix1 - ix0, iy1 - iy0, n // 2 + 1), dtype=_complex_dtype(dtype))
    amp = np.ones(3 * (n // 2) ** 2 + 1) if amp_of_m2 is None else amp_of_m2
    from . import _kernels  # numba loads on first use (see icgen.particles)

    _kernels._white_noise_slab(k0, k1, n, ix0, iy0, bool(fixed_amplitude), -1.0 if paired else 1.0, amp, out)
    return out


def mode_wavenumbers(n, box_size):
    """|k| (h/Mpc) of every distinct integer m = kx^2 + ky^2 + kz^2 on the grid, m = 0..3(n/2)^2."""
    m2 = np.arange(3 * (n // 2) ** 2 + 1, dtype=np.float64)
    return 2.0 * np.pi / box_size * np.sqrt(m2)


def amplitude_table(power, n, box_size):
    """sqrt(P(k)/L^3) for every distinct squared integer wavevector length on the grid.

    Parameters
    ----------
    power : callable
        P(k) in (Mpc/h)^3 for k in h/Mpc (vectorised), at the redshift wanted.
    n : int
    box_size : float
        L in Mpc/h.

    Returns
    -------
    ndarray, float64, shape (3 (n/2)^2 + 1,)
        Entry m is the rms mode amplitude at |k| = k_f sqrt(m); entry 0 is 0.
    """
    k = mode_wavenumbers(n, box_size)
    amp = np.zeros_like(k)
    pk = np.asarray(power(k[1:]), dtype=np.float64)
    if pk.shape != k[1:].shape or np.any(~np.isfinite(pk)) or np.any(pk < 0):
        raise ParameterError("the power spectrum returned negative or non-finite values on the grid's k range "
                             f"[{k[1]:.4g}, {k[-1]:.4g}] h/Mpc")
    amp[1:] = np.sqrt(pk / box_size**3)
    return amp


@dataclass(frozen=True, eq=False)
class DensityModes:
    """Fourier modes of the linear density contrast on the grid (or this rank's slab of it).

    Attributes
    ----------
    delta_k : ndarray, complex128 or complex64, shape (n, ny, n//2 + 1)
        delta_k with <|delta_k|^2> = P(k)/L^3 (module conventions), read-only; the
        ky planes iy0 <= j < iy0 + ny (all of them, ny = n, in a serial run).
    n : int
        Grid points per side.
    box_size : float
        L in Mpc/h.
    layout : Layout or None
        The slab decomposition the block belongs to (None: the whole grid).
    """

    delta_k: np.ndarray
    n: int
    box_size: float
    layout: object = None

    @property
    def iy0(self):
        """First ky plane of the block."""
        return 0 if self.layout is None else self.layout.y0

    def __post_init__(self):
        self.delta_k.flags.writeable = False

    @property
    def k_fundamental(self):
        """2 pi / L in h/Mpc."""
        return 2.0 * np.pi / self.box_size

    @property
    def k_nyquist(self):
        """Particle Nyquist wavenumber pi n / L in h/Mpc."""
        return np.pi * self.n / self.box_size


def linear_density_modes(power, seed, n, box_size, fixed_amplitude=False, paired=False,
                         dtype=np.float64, layout=None):
    """Gaussian linear density modes delta_k = W(k) sqrt(P(k)/L^3).

    Parameters
    ----------
    power : callable
        P(k) in (Mpc/h)^3, k in h/Mpc, at the redshift the modes are wanted for.
    seed, n, fixed_amplitude, paired
        As in :func:`white_noise`.
    box_size : float
        L in Mpc/h.
    dtype : {numpy.float64, numpy.float32}
        Real precision of the grid work (complex128 or complex64 modes).
    layout : icgen.decomp.Layout, optional
        Produce only this rank's ky slab (default: the whole grid).

    Returns
    -------
    DensityModes
    """
    check_grid(n, box_size)
    amp = amplitude_table(power, n, box_size)
    iy0, iy1 = (0, n) if layout is None else (layout.y0, layout.y1)
    w = white_noise(seed, n, fixed_amplitude, paired, dtype=dtype, amp_of_m2=amp, iy0=iy0, iy1=iy1)
    return DensityModes(delta_k=w, n=n, box_size=float(box_size), layout=layout)
