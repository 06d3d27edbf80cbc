"""Power spectrum of particles in a periodic box: mass assignment, FFT, deconvolution, binning.

Conventions
-----------
* Box of side L (Mpc/h), mesh of n^3 points, spacing H = L/n, point i at x = i H;
  fundamental wavenumber k_f = 2 pi/L, mesh Nyquist wavenumber k_N = pi n/L (h/Mpc).
* Density contrast on the mesh: delta_j = rho_j / rho_bar - 1 with rho_j the
  assigned particle count at point j and rho_bar = N_p / n^3.
* Fourier modes with the forward normalisation of ``scipy.fft`` (as :mod:`icgen.field`):
  delta_k = (1/n^3) sum_j delta_j exp(-i k.x_j), so <|delta_k|^2> = P(k)/L^3 and the
  estimator of one mode is

      P_hat(k) = L^3 |delta_k|^2 / W(k)^2 - P_shot(k).

* Assignment window (Hockney & Eastwood 1988, sec. 5-3 and 7-8; Jing 2005, ApJ 620,
  559, eq. 18): W(k) = prod_i [sinc(pi k_i / (2 k_N))]^p with sinc(x) = sin(x)/x and
  p = 1, 2, 3 for NGP, CIC, TSC. Dividing delta_k by W(k) ("deconvolution") undoes the
  smoothing of the assignment; it does not undo aliasing.
* Shot noise of Poisson-distributed particles of mean density n_bar = N_p / L^3:
  P_shot = 1/n_bar for the continuous field. On the mesh the aliased images add up
  (Jing 2005, eq. 20):

      P_shot(k) = (1/n_bar) sum_n W^2(k + 2 k_N n) / W^2(k),
      sum_n W^2 = prod_i C_p(k_i),   C_1 = 1,  C_2 = 1 - (2/3) s_i^2,
      C_3 = 1 - s_i^2 + (2/15) s_i^4,   s_i = sin(pi k_i / (2 k_N)).

* Interlacing (Hockney & Eastwood 1988, sec. 7-8; Sefusatti, Crocce, Scoccimarro &
  Couchman 2016, MNRAS 460, 3624, sec. 3.1): a second mesh samples the field at the
  points x_j + s, s = (H/2)(1, 1, 1) (the particles are assigned after a shift by -s),
  and the two are averaged with the phase that puts them on the same origin,

      delta_k = [delta_k^(1) + exp(-i k.s) delta_k^(2)] / 2.

  The image k + 2 k_N n of the second mesh carries the extra phase exp(i pi sum(n)),
  so all images with odd n_x + n_y + n_z cancel; the leading aliases are removed.
  The shot noise keeps only the even images,
  P_shot(k) = (1/n_bar) [prod_i C_p(k_i) + prod_i A_p(k_i)] / (2 W^2(k)), with the
  alternating sum A_p(k_i) = sum_n (-1)^n W_1^2(k_i + 2 k_N n) evaluated in closed form
  by Poisson summation, A_p = sum_j g_p(j + 1/2) exp(-i k_i H (j + 1/2)) with g_p the
  self-convolution of the 1-D assignment kernel (a B-spline of order 2p) sampled at
  half-integers (derived here; checked against the truncated image sum in the tests):
  A_1 = cos x, A_2 = (23/24) cos x + (1/24) cos 3x,
  A_3 = (841/960) cos x + (237/1920) cos 3x + (1/1920) cos 5x, x = pi k_i / (2 k_N).
* Bins: modes are averaged in shells of |k|; each bin reports the mean |k| of its
  modes, the mean power and the number of independent modes n_modes, counting the
  pair (k, -k) once (a self-conjugate mode, which is real, counts one half). Gaussian
  error of the bin's mean power (Feldman, Kaiser & Peacock 1994, ApJ 426, 23, sec. 2;
  each independent complex mode has var |delta_k|^2 = <|delta_k|^2>^2):

      sigma_P = (P + P_shot) / sqrt(n_modes) = (P + P_shot) sqrt(2 / N_k),

  with N_k = 2 n_modes the number of wavevectors in the shell. The default bins are
  k_f (i - 1/2) <= |k| < k_f (i + 1/2), i = 1 .. n/2 - 1, so every mode lies inside
  the mesh Nyquist sphere and no Nyquist-plane mode is used.

Determinism: mass assignment runs in parallel over groups of mesh planes in a fixed
order (:mod:`icgen._kernels_power`); the result is bit-identical on any number of
threads. Binning uses ``numpy.bincount`` (a fixed serial order).

References
----------
.. [1] Hockney & Eastwood (1988), Computer Simulation Using Particles, IOP, ch. 5 and 7.
.. [2] Jing (2005), ApJ 620, 559, eqs. 18-20.
.. [3] Sefusatti, Crocce, Scoccimarro & Couchman (2016), MNRAS 460, 3624, sec. 3.
.. [4] Feldman, Kaiser & Peacock (1994), ApJ 426, 23.
"""

from dataclasses import dataclass

import numpy as np
import scipy.fft as sfft

from . import _kernels_power
from .errors import InputError

__all__ = ["SCHEMES", "PowerSpectrum", "MeshModes", "check_positions", "assign", "window",
           "shot_noise_factor", "mesh_modes", "default_k_edges", "mode_average", "bin_power",
           "measure", "COLUMN_UNITS"]

#: Mass-assignment schemes and their order p (number of mesh points per axis).
SCHEMES = {"ngp": 1, "cic": 2, "tsc": 3}
#: Smallest and largest mesh size per side.
MESH_RANGE = (8, 4096)
#: Planes per deposit group (>= 2 so that groups of one parity never share a plane).
_GROUP_WIDTH = 2

# Alternating image sums A_p(x) = sum_j c_j cos((2 j + 1) x) (module notes).
_ALT_COEFFS = {1: (1.0,), 2: (23.0 / 24.0, 1.0 / 24.0),
               3: (841.0 / 960.0, 237.0 / 1920.0, 1.0 / 1920.0)}


def _check_scheme(scheme):
    if scheme not in SCHEMES:
        raise InputError(f"scheme = {scheme!r}: allowed values are {', '.join(map(repr, SCHEMES))}")
    return SCHEMES[scheme]


def _check_mesh(n_mesh):
    lo, hi = MESH_RANGE
    if isinstance(n_mesh, bool) or not isinstance(n_mesh, (int, np.integer)) or not lo <= n_mesh <= hi \
            or n_mesh % 2:
        raise InputError(f"n_mesh = {n_mesh!r}: need an even integer in [{lo}, {hi}]")
    return int(n_mesh)


def _check_box(box_size):
    if isinstance(box_size, bool) or not isinstance(box_size, (int, float, np.floating, np.integer)) \
            or not np.isfinite(box_size) or box_size <= 0:
        raise InputError(f"box_size = {box_size!r}: need a positive finite length in Mpc/h")
    return float(box_size)


def check_positions(positions, box_size):
    """Validate particle positions: a finite (N, 3) float array inside [0, box_size].

    Parameters
    ----------
    positions : array_like, shape (N, 3), float32 or float64
        Comoving positions in Mpc/h. A coordinate equal to L is the periodic image of 0
        (``x % L`` of a tiny negative number rounds to L) and is accepted as such.
    box_size : float
        L in Mpc/h.

    Returns
    -------
    ndarray, shape (N, 3), C-contiguous, same float dtype (no copy when possible)

    Raises
    ------
    InputError
        Wrong shape or dtype, no particles, non-finite values, or a coordinate outside
        [0, L] (positions are never wrapped silently: wrap them with ``x % L`` first).
    """
    box_size = _check_box(box_size)
    pos = np.asarray(positions)
    if pos.ndim != 2 or pos.shape[1] != 3 or pos.shape[0] == 0:
        raise InputError(f"positions: need an (N, 3) array with N >= 1, got shape {pos.shape}")
    if pos.dtype not in (np.float32, np.float64):
        raise InputError(f"positions: need float32 or float64, got {pos.dtype}")
    pos = np.ascontiguousarray(pos)
    lo, hi = float(pos.min()), float(pos.max())
    if not (np.isfinite(lo) and np.isfinite(hi)):
        raise InputError("positions: non-finite coordinates (nan or inf)")
    if lo < 0.0 or hi > box_size:
        raise InputError(f"positions: coordinates span [{lo:.9g}, {hi:.9g}] Mpc/h, outside the box "
                         f"[0, {box_size:g}]; wrap them periodically (x % box_size) first")
    return pos


def _check_weights(weights, n_particles):
    if weights is None:
        return np.zeros(0, dtype=np.float64)
    w = np.ascontiguousarray(weights, dtype=np.float64)
    if w.shape != (n_particles,):
        raise InputError(f"weights: need shape ({n_particles},), got {w.shape}")
    if not np.all(np.isfinite(w)):
        raise InputError("weights: non-finite values")
    return w


def assign(positions, box_size, n_mesh, scheme="cic", shift=0.0, weights=None):
    """Assign particles (or a per-particle quantity) to a periodic mesh.

    Parameters
    ----------
    positions : array_like, shape (N, 3), float32 or float64
        Comoving positions in Mpc/h, in [0, box_size].
    box_size : float
        L in Mpc/h.
    n_mesh : int
        Mesh points per side, even, in [8, 4096].
    scheme : {"ngp", "cic", "tsc"}
        Assignment kernel (module notes).
    shift : float, default 0
        Offset of the mesh in cells: the mesh point j sits at (j + shift) H
        (0.5 for the second mesh of interlacing).
    weights : array_like, shape (N,), optional
        Quantity carried by each particle (default 1: particle counts).

    Returns
    -------
    ndarray, float64, shape (n_mesh, n_mesh, n_mesh)
        Sum over particles of weight times the assignment kernel at each point; the
        total equals the sum of the weights.

    Notes
    -----
    Parallel and deterministic: the output is bit-identical on any number of
    threads (:mod:`icgen._kernels_power`).
    """
    order = _check_scheme(scheme)
    n = _check_mesh(n_mesh)
    pos = check_positions(positions, box_size)
    w = _check_weights(weights, pos.shape[0])
    if not (np.isfinite(shift) and 0.0 <= shift < 1.0):
        raise InputError(f"shift = {shift!r}: need a value in [0, 1) cells")
    mesh = np.zeros((n, n, n), dtype=np.float64)
    _deposit(pos, w, float(box_size), n, order, float(shift), mesh)
    return mesh


def _deposit(pos, w, box_size, n, order, shift, mesh):
    perm, offsets = _kernels_power._group_order(pos, box_size, n, order, shift, _GROUP_WIDTH)
    n_groups = offsets.size - 1
    ids = np.arange(n_groups, dtype=np.int64)
    if n_groups % 2:
        passes = (ids[:-1:2], ids[1::2], ids[-1:])  # the odd last group touches plane 0 too
    else:
        passes = (ids[0::2], ids[1::2])
    for groups in passes:
        _kernels_power._deposit_groups(pos, w, perm, offsets, groups, box_size, order, shift, mesh)


def _mode_indices(n):
    """Integer wavenumbers of the rfftn axes: (m along axes 0 and 1, m along axis 2)."""
    m = np.fft.fftfreq(n, 1.0 / n)
    return m, np.arange(n // 2 + 1, dtype=np.float64)


def window(k, n_mesh, box_size, scheme="cic"):
    """Assignment window W(k) = prod_i sinc(pi k_i / (2 k_N))^p of a mesh.

    Parameters
    ----------
    k : array_like, shape (..., 3)
        Wavevectors in h/Mpc.
    n_mesh : int
    box_size : float
        L in Mpc/h.
    scheme : {"ngp", "cic", "tsc"}

    Returns
    -------
    ndarray or float, shape (...)

    References
    ----------
    .. [1] Jing (2005), ApJ 620, 559, eq. 18; Hockney & Eastwood (1988), sec. 5-3.
    """
    p = _check_scheme(scheme)
    k = np.asarray(k, dtype=np.float64)
    if k.shape[-1:] != (3,):
        raise InputError(f"k: need shape (..., 3), got {k.shape}")
    k_nyq = np.pi * _check_mesh(n_mesh) / _check_box(box_size)
    w = np.prod(np.sinc(k / (2.0 * k_nyq)) ** p, axis=-1)  # np.sinc(y) = sin(pi y)/(pi y)
    return w if w.ndim else float(w)


def _alias_sums_1d(m, n, p):
    """Per-axis window W_1^2, image sum C_p and alternating image sum A_p at integer modes m."""
    x = np.pi * m / n
    w2 = np.sinc(m / n) ** (2 * p)
    s2 = np.sin(x) ** 2
    c = {1: np.ones_like(x), 2: 1.0 - 2.0 / 3.0 * s2, 3: 1.0 - s2 + 2.0 / 15.0 * s2**2}[p]
    alt = sum(cj * np.cos((2 * j + 1) * x) for j, cj in enumerate(_ALT_COEFFS[p]))
    return w2, c, alt


def shot_noise_factor(k, n_mesh, box_size, scheme="cic", interlace=False):
    """Shot noise of the deconvolved mesh estimator in units of 1/n_bar, mode by mode.

    Parameters
    ----------
    k : array_like, shape (..., 3)
        Wavevectors in h/Mpc (inside the mesh Nyquist cube).
    n_mesh : int
    box_size : float
        L in Mpc/h.
    scheme : {"ngp", "cic", "tsc"}
    interlace : bool

    Returns
    -------
    ndarray or float, shape (...)
        sum_n W^2(k + 2 k_N n) / W^2(k) over all images (Jing 2005, eq. 20), or over the
        images with even n_x + n_y + n_z when interlaced (module notes). Tends to 1 as
        k -> 0.
    """
    p = _check_scheme(scheme)
    n = _check_mesh(n_mesh)
    k = np.asarray(k, dtype=np.float64)
    if k.shape[-1:] != (3,):
        raise InputError(f"k: need shape (..., 3), got {k.shape}")
    m = k * _check_box(box_size) / (2.0 * np.pi)  # k in units of k_f
    w2, c, alt = _alias_sums_1d(m, n, p)
    out = np.prod(c, axis=-1)
    if interlace:
        out = 0.5 * (out + np.prod(alt, axis=-1))
    out = out / np.prod(w2, axis=-1)
    return out if out.ndim else float(out)


@dataclass(frozen=True, eq=False)
class MeshModes:
    """Fourier modes of a field assigned to a mesh, deconvolved (and interlaced).

    Attributes
    ----------
    field_k : ndarray, complex128, shape (n, n, n//2 + 1)
        Forward-normalised rfftn modes of the field divided by the window W(k)
        (module conventions): for the density contrast <|delta_k|^2> = P(k)/L^3.
        The k = 0 mode is set to zero. Read-only.
    box_size : float
        L in Mpc/h.
    n_mesh : int
    scheme : str
    interlaced : bool
    n_particles : int
    """

    field_k: np.ndarray
    box_size: float
    n_mesh: int
    scheme: str
    interlaced: bool
    n_particles: int

    def __post_init__(self):
        self.field_k.flags.writeable = False

    @property
    def k_fundamental(self):
        """2 pi / L in h/Mpc."""
        return 2.0 * np.pi / self.box_size

    @property
    def k_nyquist(self):
        """Mesh Nyquist wavenumber pi n / L in h/Mpc."""
        return np.pi * self.n_mesh / self.box_size

    @property
    def shot_noise(self):
        """Poisson shot noise 1/n_bar = L^3 / N_p in (Mpc/h)^3 (before aliasing)."""
        return self.box_size**3 / self.n_particles

    def wavevector_axes(self):
        """kx, ky, kz in h/Mpc as three broadcastable 1-D arrays (shapes (n,1,1), (1,n,1), (1,1,n//2+1))."""
        m, mz = _mode_indices(self.n_mesh)
        kf = self.k_fundamental
        return kf * m[:, None, None], kf * m[None, :, None], kf * mz[None, None, :]


def mesh_modes(positions, box_size, n_mesh, scheme="cic", interlace=True, weights=None, workers=None):
    """Deconvolved Fourier modes of the density contrast (or of a weighted field) on a mesh.

    Parameters
    ----------
    positions : array_like, shape (N, 3), float32 or float64
        Comoving positions in Mpc/h, in [0, box_size].
    box_size : float
        L in Mpc/h.
    n_mesh : int
        Mesh points per side (even, 8 .. 4096).
    scheme : {"ngp", "cic", "tsc"}, default "cic"
    interlace : bool, default True
        Average with a second mesh shifted by half a cell (module notes).
    weights : array_like, shape (N,), optional
        Without weights the field is the density contrast delta = rho/rho_bar - 1. With
        weights u_p it is the mass-weighted field sum_p u_p W / rho_bar = (1 + delta) u
        (e.g. a velocity component in km/s gives the momentum density field).
    workers : int, optional
        Threads of scipy.fft (results do not depend on it).

    Returns
    -------
    MeshModes
    """
    order = _check_scheme(scheme)
    n = _check_mesh(n_mesh)
    box_size = _check_box(box_size)
    pos = check_positions(positions, box_size)
    w = _check_weights(weights, pos.shape[0])
    mean = pos.shape[0] / n**3  # rho_bar: particles per mesh point
    m, mz = _mode_indices(n)
    shifts = (0.0, 0.5) if interlace else (0.0,)
    field_k = None
    for shift in shifts:
        mesh = np.zeros((n, n, n), dtype=np.float64)
        _deposit(pos, w, box_size, n, order, shift, mesh)
        mesh /= mean
        if w.size == 0:
            mesh -= 1.0
        fk = sfft.rfftn(mesh, norm="forward", workers=workers, overwrite_x=True)
        del mesh
        if shift:
            # exp(-i k.s), s = (H/2)(1, 1, 1): k_i H / 2 = pi m_i / n.
            fk *= np.exp(-1j * np.pi * m / n)[:, None, None]
            fk *= np.exp(-1j * np.pi * m / n)[None, :, None]
            fk *= np.exp(-1j * np.pi * mz / n)[None, None, :]
            field_k += fk
            field_k *= 0.5
        else:
            field_k = fk
        del fk
    # Deconvolve W(k) = prod_i sinc(pi m_i / n)^p (k_i / (2 k_N) = m_i / n).
    wx = np.sinc(m / n) ** order
    wz = np.sinc(mz / n) ** order
    field_k /= wx[:, None, None]
    field_k /= wx[None, :, None]
    field_k /= wz[None, None, :]
    field_k[0, 0, 0] = 0.0
    return MeshModes(field_k=field_k, box_size=box_size, n_mesh=n, scheme=scheme,
                     interlaced=bool(interlace), n_particles=pos.shape[0])


def default_k_edges(box_size, n_mesh):
    """Bin edges k_f (i + 1/2), i = 0 .. n/2 - 1, in h/Mpc: bins of width k_f centred on i k_f."""
    kf = 2.0 * np.pi / _check_box(box_size)
    return kf * (np.arange(_check_mesh(n_mesh) // 2) + 0.5)


@dataclass(frozen=True, eq=False)
class PowerSpectrum:
    """A binned power spectrum (or cross spectrum) with mode counts and Gaussian errors.

    Attributes
    ----------
    k : ndarray, shape (nb,)
        Mean |k| of the modes in each bin, h/Mpc (nan for an empty bin).
    k_lo, k_hi : ndarray, shape (nb,)
        Bin edges, h/Mpc: k_lo <= |k| < k_hi.
    power : ndarray, shape (nb,)
        Mean power of the bin, (Mpc/h)^3, shot noise subtracted if ``shot_noise_subtracted``.
    shot_noise : ndarray, shape (nb,)
        Mean shot noise of the bin's modes, (Mpc/h)^3: (1/n_bar) times the aliasing
        factor of :func:`shot_noise_factor` (zero for cross spectra of different fields).
    n_modes : ndarray, shape (nb,)
        Independent modes in the bin, the pair (k, -k) counted once (may be a half
        integer: a real self-conjugate mode counts 1/2).
    sigma : ndarray, shape (nb,)
        Gaussian error of ``power`` (module notes); computed from the measured power.
    box_size : float
    n_mesh : int
    scheme : str
    interlaced : bool
    n_particles : int
    shot_noise_subtracted : bool
    """

    k: np.ndarray
    k_lo: np.ndarray
    k_hi: np.ndarray
    power: np.ndarray
    shot_noise: np.ndarray
    n_modes: np.ndarray
    sigma: np.ndarray
    box_size: float
    n_mesh: int
    scheme: str
    interlaced: bool
    n_particles: int
    shot_noise_subtracted: bool

    def __post_init__(self):
        for name in ("k", "k_lo", "k_hi", "power", "shot_noise", "n_modes", "sigma"):
            getattr(self, name).flags.writeable = False

    def __len__(self):
        return self.k.size

    def columns(self):
        """Named columns for a table: k, k_lo, k_hi, P_k, sigma, n_modes, shot_noise."""
        return {"k": self.k, "k_lo": self.k_lo, "k_hi": self.k_hi, "P_k": self.power,
                "sigma": self.sigma, "n_modes": self.n_modes, "shot_noise": self.shot_noise}


#: Units of :meth:`PowerSpectrum.columns`.
COLUMN_UNITS = {"k": "h/Mpc (mean |k| of the bin)", "k_lo": "h/Mpc", "k_hi": "h/Mpc",
                "P_k": "(Mpc/h)^3", "sigma": "(Mpc/h)^3 (Gaussian)",
                "n_modes": "1 (independent modes, +-k once)", "shot_noise": "(Mpc/h)^3"}


def _check_edges(k_edges, box_size, n_mesh):
    if k_edges is None:
        return default_k_edges(box_size, n_mesh)
    e = np.asarray(k_edges, dtype=np.float64).ravel()
    if e.size < 2 or not np.all(np.isfinite(e)) or np.any(np.diff(e) <= 0) or e[0] < 0:
        raise InputError("k_edges: need at least two finite, non-negative, strictly increasing values (h/Mpc)")
    k_nyq = np.pi * n_mesh / box_size
    if e[-1] > k_nyq * (1 + 1e-12):
        raise InputError(f"k_edges: the last edge {e[-1]:.6g} h/Mpc is beyond the mesh Nyquist "
                         f"wavenumber {k_nyq:.6g} h/Mpc; use a larger n_mesh")
    return e


def _shells(n, box_size, edges):
    """Squared integer wavenumber m2 of every rfftn mode, its weight, and the bin of each m2.

    Returns (m2 flat int64, weight flat, bin index per m2 value (nb = outside), nb). Mode
    weights: rfftn keeps kz >= 0, and the planes kz = 0 and kz = n/2 hold both k and -k,
    so their modes count 1/2 (the pair (k, -k) is one independent mode).
    """
    m, mz = _mode_indices(n)
    mi = m.astype(np.int64)
    mzi = mz.astype(np.int64)
    m2 = ((mi**2)[:, None, None] + (mi**2)[None, :, None] + (mzi**2)[None, None, :]).ravel()
    wz = np.ones(mz.size)
    wz[0] = 0.5
    wz[-1] = 0.5
    weight = np.broadcast_to(wz[None, None, :], (n, n, mz.size)).ravel()
    n_m2 = 3 * (n // 2) ** 2 + 1
    k_of_m2 = 2.0 * np.pi / box_size * np.sqrt(np.arange(n_m2, dtype=np.float64))
    nb = edges.size - 1
    m2_bin = np.searchsorted(edges, k_of_m2, side="right") - 1
    m2_bin[(m2_bin < 0) | (m2_bin >= nb)] = nb  # outside every bin: dropped
    return m2, weight, m2_bin, nb


def mode_average(func, box_size, n_mesh, k_edges=None):
    """Average of a function of |k| over the modes of each bin, as the estimator weights them.

    Parameters
    ----------
    func : callable
        f(k) for k in h/Mpc (vectorised), e.g. a model P(k) in (Mpc/h)^3.
    box_size : float
        L in Mpc/h.
    n_mesh : int
    k_edges : array_like, optional
        Bin edges in h/Mpc (default :func:`default_k_edges`).

    Returns
    -------
    ndarray, shape (nb,)
        sum_modes w f(|k|) / sum_modes w per bin (nan for an empty bin): the expectation
        of the binned estimator for a field of spectrum f, free of the binning bias of
        evaluating f at the bin's mean k.
    """
    box_size = _check_box(box_size)
    n = _check_mesh(n_mesh)
    edges = _check_edges(k_edges, box_size, n)
    m2, w, m2_bin, nb = _shells(n, box_size, edges)
    count_m2 = np.bincount(m2, w, minlength=m2_bin.size)
    used = (count_m2 > 0) & (m2_bin < nb)
    k = 2.0 * np.pi / box_size * np.sqrt(np.nonzero(used)[0].astype(np.float64))
    fk = np.asarray(func(k), dtype=np.float64)
    if fk.shape != k.shape:
        raise InputError(f"func returned shape {fk.shape} for k of shape {k.shape}")
    total = np.bincount(m2_bin[used], count_m2[used] * fk, minlength=nb + 1)[:nb]
    count = np.bincount(m2_bin[used], count_m2[used], minlength=nb + 1)[:nb]
    with np.errstate(invalid="ignore", divide="ignore"):
        return total / count


def bin_power(modes, other=None, k_edges=None, shot_noise=False):
    """Bin the auto spectrum of ``modes`` (or its cross spectrum with ``other``) in |k|.

    Parameters
    ----------
    modes : MeshModes
    other : MeshModes, optional
        Second field on the same mesh and box: the cross spectrum L^3 Re(a_k b_k^*) is binned.
    k_edges : array_like, optional
        Bin edges in h/Mpc (default :func:`default_k_edges`); at most the mesh Nyquist
        wavenumber.
    shot_noise : bool, default False
        Subtract the Poisson shot noise of the particles (auto spectra of the density
        only), with its aliasing factor (:func:`shot_noise_factor`).

    Returns
    -------
    PowerSpectrum
        ``sigma`` is the Gaussian error: (P + P_shot)/sqrt(n_modes) for an auto spectrum,
        sqrt((P_ab^2 + P_aa P_bb) / (2 n_modes)) for a cross spectrum (Wick's theorem for
        Gaussian fields, each independent complex mode counted once).
    """
    if not isinstance(modes, MeshModes):
        raise TypeError(f"modes must be MeshModes, got {type(modes).__name__}")
    n, box = modes.n_mesh, modes.box_size
    if other is not None:
        if not isinstance(other, MeshModes):
            raise TypeError(f"other must be MeshModes, got {type(other).__name__}")
        if other.n_mesh != n or other.box_size != box:
            raise InputError(f"cross spectrum of different meshes: n_mesh {n} vs {other.n_mesh}, "
                             f"box_size {box:g} vs {other.box_size:g}")
        if shot_noise:
            raise InputError("shot_noise subtraction applies to auto spectra only")
    edges = _check_edges(k_edges, box, n)
    m2, wflat, m2_bin, nb = _shells(n, box, edges)
    kf = modes.k_fundamental
    count_m2 = np.bincount(m2, wflat, minlength=m2_bin.size)
    count = np.bincount(m2_bin, count_m2, minlength=nb + 1)[:nb]
    ksum = np.bincount(m2_bin, count_m2 * kf * np.sqrt(np.arange(m2_bin.size)), minlength=nb + 1)[:nb]
    a = modes.field_k
    if other is None:
        pk = (a.real**2 + a.imag**2).ravel()
    else:
        b = other.field_k
        pk = (a.real * b.real + a.imag * b.imag).ravel()
    psum_m2 = np.bincount(m2, wflat * pk, minlength=m2_bin.size)
    psum = np.bincount(m2_bin, psum_m2, minlength=nb + 1)[:nb] * box**3
    with np.errstate(invalid="ignore", divide="ignore"):
        kmean = ksum / count
        power = psum / count
    sn = np.zeros(nb)
    if other is None and shot_noise:
        p = SCHEMES[modes.scheme]
        m, mz = _mode_indices(n)
        _, cx, ax = _alias_sums_1d(m, n, p)
        _, cz, az = _alias_sums_1d(mz, n, p)
        w2x = np.sinc(m / n) ** (2 * p)
        w2z = np.sinc(mz / n) ** (2 * p)
        fac = (cx / w2x)[:, None, None] * (cx / w2x)[None, :, None] * (cz / w2z)[None, None, :]
        if modes.interlaced:
            alt = (ax / w2x)[:, None, None] * (ax / w2x)[None, :, None] * (az / w2z)[None, None, :]
            fac = 0.5 * (fac + alt)
        with np.errstate(invalid="ignore", divide="ignore"):
            sn_m2 = np.bincount(m2, wflat * fac.ravel(), minlength=m2_bin.size)
            sn = np.bincount(m2_bin, sn_m2, minlength=nb + 1)[:nb] / count * modes.shot_noise
        power = power - sn
    with np.errstate(invalid="ignore", divide="ignore"):
        if other is None:
            sigma = (power + sn) / np.sqrt(count)
        else:
            paa = bin_power(modes, k_edges=edges).power
            pbb = bin_power(other, k_edges=edges).power
            sigma = np.sqrt((power**2 + paa * pbb) / (2.0 * count))
    return PowerSpectrum(k=kmean, k_lo=edges[:-1].copy(), k_hi=edges[1:].copy(), power=power,
                         shot_noise=sn, n_modes=count, sigma=sigma, box_size=box, n_mesh=n,
                         scheme=modes.scheme, interlaced=modes.interlaced,
                         n_particles=modes.n_particles, shot_noise_subtracted=bool(shot_noise))


def measure(positions, box_size, n_mesh, scheme="cic", interlace=True, subtract_shot_noise=True,
            k_edges=None, workers=None):
    """Power spectrum of particles in a periodic box.

    Parameters
    ----------
    positions : array_like, shape (N, 3), float32 or float64
        Comoving positions in Mpc/h, in [0, box_size].
    box_size : float
        L in Mpc/h.
    n_mesh : int
        Mesh points per side (even, 8 .. 4096).
    scheme : {"ngp", "cic", "tsc"}, default "cic"
    interlace : bool, default True
        Interlacing (Sefusatti et al. 2016): removes the odd aliased images.
    subtract_shot_noise : bool, default True
        Subtract the Poisson shot noise 1/n_bar (with its aliasing factor). Leave it off
        for particles on a (perturbed) lattice or glass, whose discreteness noise on large
        scales is far below Poisson.
    k_edges : array_like, optional
        Bin edges in h/Mpc (default: bins of width k_f centred on multiples of k_f, up
        to the mesh Nyquist wavenumber).
    workers : int, optional
        Threads of scipy.fft.

    Returns
    -------
    PowerSpectrum
        k in h/Mpc, power and sigma in (Mpc/h)^3, normalised so that <P_hat> = P(k)
        (module conventions).

    Raises
    ------
    InputError
        For a bad scheme, mesh size, box size, bin edges or positions (before any work).
    """
    n = _check_mesh(n_mesh)
    box_size = _check_box(box_size)
    _check_scheme(scheme)
    _check_edges(k_edges, box_size, n)
    modes = mesh_modes(positions, box_size, n, scheme, interlace, workers=workers)
    return bin_power(modes, k_edges=k_edges, shot_noise=subtract_shot_noise)
