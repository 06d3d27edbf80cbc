"""Lagrangian perturbation theory displacements (Zel'dovich and 2LPT) on the grid.

Conventions
-----------
Eulerian comoving position of the particle with Lagrangian coordinate q:

    x(q, a) = q + D1(a) psi_1(q) + D2(a) psi_2(q),

with D1, D2 the growth factors of :mod:`icgen.background` (D1(1) = 1,
D2 -> -(3/7) D1^2 in Einstein-de Sitter) and the fields evaluated from the linear
density delta(q) extrapolated to a = 1:

* first order (Zel'dovich 1970):  div psi_1 = -delta, psi_1 = -grad phi_1 with
  lap phi_1 = delta; in Fourier space psi_1(k) = i k delta_k / k^2.
* second order (Bouchet et al. 1995, A&A 296, 575; Scoccimarro 1998, MNRAS 299,
  1097, eqs. 5-6 and appendix; Crocce, Pueblas & Scoccimarro 2006, MNRAS 373,
  369, eqs. 4-5):  div psi_2 = S with
  S = sum_{i>j} [phi_1,ii phi_1,jj - (phi_1,ij)^2], psi_2 = grad phi_2,
  lap phi_2 = S; in Fourier space phi_1,ij(k) = k_i k_j delta_k / k^2 and
  psi_2(k) = -i k S_k / k^2.
  This is the form of Crocce, Pueblas & Scoccimarro (2006, eq. 4),
  x = q - D1 grad phi_1 + D2 grad phi_2 with D2 ~ -(3/7) D1^2.

The sign follows from the Lagrangian equation of motion at second order:
J div_x(x'' + ...) with J = 1 + div psi + mu_2(psi) + ...; requiring the D2
equation D2'' + (2 + dlnH/dlna) D2' - 1.5 Omega_m D2 = -1.5 Omega_m D1^2 gives
div psi_2 = mu_2(psi_1) = S (derivation in the Notes of :func:`displacements`).

Fourier transforms: :mod:`icgen._fft` (scipy.fft passes, ``norm="forward"`` convention of :mod:`icgen.field`).
"""

from dataclasses import dataclass

import numpy as np
from . import _fft, _kernels
from .decomp import Layout
from .errors import ParameterError
from .field import DensityModes

__all__ = ["Displacements", "displacements", "output_fields", "FieldSlabs"]


@dataclass(frozen=True, eq=False)
class Displacements:
    """Displacement fields at D1 = 1 on the Lagrangian grid.

    Attributes
    ----------
    psi_1 : ndarray, float32 or float64, shape (3, n, n, n)
        First-order displacement in Mpc/h (comoving), read-only.
    psi_2 : ndarray, same dtype and shape, or None
        Second-order displacement field in Mpc/h, multiplied by D2 in positions.
    box_size : float
        L in Mpc/h.
    x0 : int
        Global index of the first plane held (a rank's x-slab; 0 for the whole grid).
    """

    psi_1: np.ndarray
    psi_2: np.ndarray | None
    box_size: float
    x0: int = 0

    def __post_init__(self):
        self.psi_1.flags.writeable = False
        if self.psi_2 is not None:
            self.psi_2.flags.writeable = False

    @property
    def n(self):
        """Grid points per side (of the whole grid)."""
        return self.psi_1.shape[2]

    @property
    def planes(self):
        """Number of grid planes held (n for the whole grid)."""
        return self.psi_1.shape[1]

    @property
    def order(self):
        """LPT order: 1 or 2."""
        return 1 if self.psi_2 is None else 2

    @property
    def dtype(self):
        """Floating type of the fields."""
        return self.psi_1.dtype


def displacements(modes, order=2, workers=None, progress=None, overwrite_modes=False):
    """First- and (optionally) second-order displacement fields from density modes.

    Parameters
    ----------
    modes : DensityModes
        Linear density modes extrapolated to a = 1 (D1 = 1). complex64 modes give
        float32 fields, complex128 modes float64 fields.
    order : {1, 2}
        LPT order.
    workers : int, optional
        Threads for scipy.fft (results are identical for any value).
    progress : callable, optional
        Called with a short stage name after each transform (for progress bars).
    overwrite_modes : bool
        Reuse ``modes.delta_k`` as scratch for the last transform (saves one complex
        field of memory); the modes are garbage afterwards. Like scipy's ``overwrite_x``.

    Returns
    -------
    Displacements

    Notes
    -----
    Memory: the work is ordered so that at most the modes, one complex scratch
    field, the finished displacement components and one transform output are alive:
    about 20 bytes per particle in float32 for first order and 32 for second order.

    Second order: the equation of motion div_x A = -(3/2) Omega_m (aH)^2 delta with
    A = d^2x/dtau^2 + aH dx/dtau and delta = 1/J - 1 reads
    J div_x A = (3/2) Omega_m (aH)^2 (J - 1), J = det(dx/dq) = 1 + div psi + mu_2(psi);
    expanding J div_x A = div_q A + (div psi)(div A) - psi_i,j A_j,i to second order and
    collecting terms of order D1^2 gives
    (T D2 - 1.5 Omega_m (aH)^2 D2) div psi_2 = -1.5 Omega_m (aH)^2 D1^2 mu_2(psi_1),
    T = d^2/dtau^2 + aH d/dtau, so div psi_2 = mu_2(psi_1) = S when D2 solves the
    second-order growth equation of :mod:`icgen.background` (Bouchet et al. 1995,
    sec. 3; derivation written out here).

    References
    ----------
    .. [1] Zel'dovich (1970), A&A 5, 84.
    .. [2] Scoccimarro (1998), MNRAS 299, 1097.
    .. [3] Crocce, Pueblas & Scoccimarro (2006), MNRAS 373, 369.
    """
    if not isinstance(modes, DensityModes):
        raise TypeError(f"modes must be DensityModes, got {type(modes).__name__}")
    if order not in (1, 2):
        raise ParameterError(f"lpt_order = {order!r}: allowed values are 1 and 2")
    n, kf = modes.n, modes.k_fundamental
    layout = modes.layout if modes.layout is not None else Layout(n)
    iy0 = modes.iy0
    tick = progress or (lambda stage: None)
    dk = modes.delta_k
    rdt = np.float32 if dk.dtype == np.complex64 else np.float64
    scratch = _Scratch(dk, layout)
    real_shape = layout.real_shape

    psi_2 = None
    if order == 2:
        source_k = _second_order_source_k(modes, layout, scratch, workers, tick)
        psi_2 = np.empty((3, *real_shape), dtype=rdt)
        for d in range(3):
            # psi_2(k) = -i k_d S_k / k^2.
            psi_2[d] = scratch.inverse(layout, workers, source_k, -1.0, source_k, 0.0, n, iy0, kf, d, -1)
            tick(f"psi_2[{d}]")
        del source_k

    psi_1 = np.empty((3, *real_shape), dtype=rdt)
    for d in range(3):
        if d == 2 and overwrite_modes:  # the caller handed the modes over as scratch
            scratch.release()
            dk.flags.writeable = True
            _kernels._fourier_operator(dk, 1.0, dk, 0.0, n, 0, iy0, kf, d, -1, dk)
            psi_1[d] = layout.inverse(dk, workers)
        else:
            psi_1[d] = scratch.inverse(layout, workers, dk, 1.0, dk, 0.0, n, iy0, kf, d, -1)
        tick(f"psi_1[{d}]")
    return Displacements(psi_1=psi_1, psi_2=psi_2, box_size=modes.box_size, x0=layout.x0)


class _Scratch:
    """Where the next transform's half spectrum is built.

    Serial: one buffer, reused by every transform. Distributed: a fresh buffer per
    transform, handed over to :meth:`icgen.decomp.Layout.inverse`, which frees it right
    after its transpose, so an idle input spectrum never sits beside the transpose's
    output (measured at 512^3 on 2 ranks: see the README's MPI section).
    """

    def __init__(self, like, layout):
        self._like = like
        self._distributed = layout.distributed
        self._buffer = None if self._distributed else np.empty_like(like)

    def inverse(self, layout, workers, src1, a1, src2, a2, n, iy0, kf, d1, d2):
        """layout.inverse of the spectrum a1 src1 + a2 src2 times the (d1, d2) operator (see
        :func:`icgen._kernels._fourier_operator`), built in this scratch."""
        buf = np.empty_like(self._like) if self._distributed else self._buffer
        _kernels._fourier_operator(src1, a1, src2, a2, n, 0, iy0, kf, d1, d2, buf)
        hand = [buf]
        del buf
        return layout.inverse(hand, workers)

    def release(self):
        """Drop the buffer and the template (before the modes' memory is reused for the last transform)."""
        self._buffer = None
        self._like = None


def _second_order_source_k(modes, layout, scratch, workers, tick):
    """Half spectrum S_k of the 2LPT source S = sum_{i>j} phi_ii phi_jj - phi_ij^2 (this rank's slab).

    ``scratch`` is a :class:`_Scratch`.
    """
    n, kf, iy0, dk = modes.n, modes.k_fundamental, modes.iy0, modes.delta_k
    # phi_1,ij = IFFT[k_i k_j delta_k / k^2].
    diag = []
    for d in range(3):
        diag.append(scratch.inverse(layout, workers, dk, 1.0, dk, 0.0, n, iy0, kf, d, d))
        tick(f"phi_{d}{d}")
    source = diag[0]
    _kernels._second_order_source_diag(diag[0], diag[1], diag[2], source)  # elementwise, in place
    del diag
    for d1, d2 in ((0, 1), (0, 2), (1, 2)):
        _kernels._subtract_square(source, scratch.inverse(layout, workers, dk, 1.0, dk, 0.0, n, iy0, kf, d1, d2))
        tick(f"phi_{d1}{d2}")
    source_k = layout.forward(source, workers)
    tick("source")
    return source_k


class FieldSlabs:
    """A real three-component field on this rank's x-slab, made a few planes at a time.

    The components are kept as complex x-slabs already transformed back along axes 0
    and 1 (:meth:`icgen.decomp.Layout.inverse_xy`); :meth:`real` runs the last pass,
    complex-to-real along axis 2, for the planes asked for. Those planes are
    bit-identical to the same planes of :meth:`icgen.decomp.Layout.inverse` (each line
    is transformed on its own), and the whole real field is never held: the consumer
    turns each block of planes into particles while it is still in the cache.

    Parameters
    ----------
    comps : list of three complex ndarrays, each (planes, n, n//2 + 1)
    n : int
        Grid points per side.
    x0 : int
        Global index of the first plane.
    workers : int, optional
        FFT threads.
    """

    def __init__(self, comps, n, x0, workers=None):
        self.comps = comps
        self.n = n
        self.x0 = x0
        self.workers = workers

    @property
    def planes(self):
        """Number of x planes held."""
        return self.comps[0].shape[0]

    def real(self, i0, i1, workers=None):
        """Components on the local planes i0 <= i < i1: three real arrays (i1 - i0, n, n).

        ``workers`` FFT threads (default: the field's); the numbers do not depend on it.
        """
        w = self.workers if workers is None else workers
        return tuple(_fft.inverse_pass_z(c[i0:i1], self.n, w) for c in self.comps)


def _component_xy(layout, workers, src1, a1, src2, a2, n, iy0, kf, d):
    """Component d of i k / k^2 (a1 src1 + a2 src2), built in a new buffer and transformed
    along axes 0 and 1 (:meth:`icgen.decomp.Layout.inverse_xy`, which may free the buffer)."""
    buf = np.empty_like(src1)
    _kernels._fourier_operator(src1, a1, src2, a2, n, 0, iy0, kf, d, -1, buf)
    hand = [buf]
    del buf
    return layout.inverse_xy(hand, workers)


def output_fields(modes, order, c_pos, c_vel, workers=None, progress=None):
    """The displacement and velocity fields of the particles, one group after the other (a generator).

    Lower peak memory than :func:`displacements`: no real field is ever held whole; the
    components are kept as half spectra transformed along two axes (:class:`FieldSlabs`),
    and the consumer makes their real planes a block at a time.

    Parameters
    ----------
    modes : DensityModes
        Linear density modes at D1 = 1 (this rank's slab in a distributed run). They are
        used as scratch for the last transform and are garbage afterwards.
    order : {1, 2}
    c_pos, c_vel : tuple of two floats
        (c1, c2) of the displacement c1 psi_1 + c2 psi_2 (Mpc/h) and of the velocity
        (km/s): (D1, D2) and (a H f1 D1, a H f2 D2) with H per Mpc/h.
    workers : int, optional
    progress : callable, optional

    Yields
    ------
    kinds : tuple of (kind, scale)
        kind in {"position", "velocity"}; multiply the field by ``scale`` to get the
        displacement (Mpc/h) or the velocity (km/s).
    field : FieldSlabs
        The field of this group (one group with both kinds in first order, where the
        velocity is a multiple of the displacement; one group per kind in second order).

    Notes
    -----
    First order: psi_1 is computed once and serves both kinds (scales D1 and a H f1 D1).
    Second order: each field is one transform per component of
    i k / k^2 (c1 delta_k - c2 S_k), the sum of the two orders in Fourier space, so
    it equals c1 psi_1 + c2 psi_2 of :func:`displacements` to round-off (not bit for
    bit). The consumer must drop its reference to a field before asking for the next.
    Memory at the peak, in half spectra (about 4 bytes per particle each in float32):
    three in first order (the modes, reused for the last component, and two more);
    in second order the source step of :func:`displacements` is the peak.
    """
    if not isinstance(modes, DensityModes):
        raise TypeError(f"modes must be DensityModes, got {type(modes).__name__}")
    if order not in (1, 2):
        raise ParameterError(f"lpt_order = {order!r}: allowed values are 1 and 2")
    n, kf, iy0 = modes.n, modes.k_fundamental, modes.iy0
    layout = modes.layout if modes.layout is not None else Layout(n)
    tick = progress or (lambda stage: None)
    dk = modes.delta_k
    if order == 1:
        comps = []
        for d in range(3):
            if d == 2:  # the last component reuses the modes' memory, handed over (freed after its transpose)
                dk.flags.writeable = True
                _kernels._fourier_operator(dk, 1.0, dk, 0.0, n, 0, iy0, kf, d, -1, dk)
                hand = [dk]
                del dk, modes  # nothing else holds the modes now
                comps.append(layout.inverse_xy(hand, workers))
            else:
                comps.append(_component_xy(layout, workers, dk, 1.0, dk, 0.0, n, iy0, kf, d))
            tick(f"psi_1[{d}]")
        yield (("position", c_pos[0]), ("velocity", c_vel[0])), FieldSlabs(comps, n, layout.x0, workers)
        return
    scratch = _Scratch(dk, layout)
    source_k = _second_order_source_k(modes, layout, scratch, workers, tick)
    scratch.release()
    del scratch
    for kind, (c1, c2) in (("position", c_pos), ("velocity", c_vel)):
        comps = []
        for d in range(3):
            if kind == "velocity" and d == 2:  # the last transform reuses the modes' memory
                dk.flags.writeable = True
                _kernels._fourier_operator(dk, c1, source_k, -c2, n, 0, iy0, kf, d, -1, dk)
                hand = [dk]
                del source_k, modes, dk
                comps.append(layout.inverse_xy(hand, workers))
            else:
                comps.append(_component_xy(layout, workers, dk, c1, source_k, -c2, n, iy0, kf, d))
            tick(f"{kind}[{d}]")
        yield ((kind, 1.0),), FieldSlabs(comps, n, layout.x0, workers)
        del comps
