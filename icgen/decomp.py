"""Slab decomposition of the grid among MPI ranks (or one process), and the transposes.

An n^3 grid is split into contiguous slabs of planes, as evenly as possible
(the first n mod R ranks get one plane more):

* real-space fields: rank r holds planes x0_r <= i < x1_r of axis 0, shape (nx_r, n, n);
* half spectra: rank r holds planes y0_r <= j < y1_r of axis 1, shape (n, ny_r, n//2 + 1).

The inverse FFT does the axis-0 pass on the y-slabs (every kx is local), transposes
to x-slabs with one all-to-all, and does the axis-1 and axis-2 passes there; the
forward FFT is the reverse. Each one-dimensional transform sees exactly the data a
serial run's does, in the same order (:mod:`icgen._fft`), so every rank count
gives bit-identical fields. Per rank per transform, the all-to-all moves
(R - 1)/R of the rank's block, about 4 n^3 / R bytes (complex64 half spectrum), straight
between the source and target arrays (MPI vector datatypes describe the strided
blocks, so no packing buffer is needed).

With ``comm=None`` (or one rank) the layout is the whole grid and no communication
happens.
"""

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from . import _fft
from .errors import ParameterError

__all__ = ["Layout", "split"]


def split(n, parts):
    """Bounds (start, stop) of ``parts`` contiguous, nearly equal pieces of range(n)."""
    base, extra = divmod(n, parts)
    bounds, start = [], 0
    for r in range(parts):
        stop = start + base + (1 if r < extra else 0)
        bounds.append((start, stop))
        start = stop
    return tuple(bounds)


@dataclass(frozen=True, eq=False)
class Layout:
    """Which slab of an n^3 grid this process holds, and the FFTs between layouts.

    Parameters
    ----------
    n : int
        Grid points per side.
    comm : mpi4py.MPI.Comm or None
        Communicator of the ranks sharing the grid; None for a serial run.
    """

    n: int
    comm: object = None

    def __post_init__(self):
        if self.size > self.n:
            raise ParameterError(f"{self.size} ranks for a grid of {self.n} planes: need at most one rank "
                                 f"per plane (particles_per_side >= number of ranks)")

    @cached_property
    def size(self):
        """Number of ranks."""
        return 1 if self.comm is None else self.comm.Get_size()

    @cached_property
    def rank(self):
        """This process's rank."""
        return 0 if self.comm is None else self.comm.Get_rank()

    @property
    def distributed(self):
        """True when more than one rank shares the grid."""
        return self.size > 1

    @cached_property
    def bounds(self):
        """Plane bounds (start, stop) of every rank (the same split for x and y slabs)."""
        return split(self.n, self.size)

    @property
    def x0(self):
        """First real-space plane (axis 0) of this rank."""
        return self.bounds[self.rank][0]

    @property
    def x1(self):
        """One past the last real-space plane of this rank."""
        return self.bounds[self.rank][1]

    y0 = x0
    y1 = x1

    @property
    def real_shape(self):
        """Shape of this rank's real-space block."""
        return (self.x1 - self.x0, self.n, self.n)

    @property
    def spec_shape(self):
        """Shape of this rank's half-spectrum block (all kx, its ky planes, kz >= 0)."""
        return (self.n, self.y1 - self.y0, self.n // 2 + 1)

    # ---- transposes ----------------------------------------------------------
    def _mpi_type(self, dtype):
        from mpi4py import MPI

        return MPI.C_FLOAT_COMPLEX if dtype == np.complex64 else MPI.C_DOUBLE_COMPLEX

    def _strided(self, base, rows, y0, y1):
        """Datatype of the block [:, y0:y1, :] of a (rows, n, n//2 + 1) array (one MPI vector)."""
        nzc = self.n // 2 + 1
        t = base.Create_vector(rows, (y1 - y0) * nzc, self.n * nzc)
        t.Commit()
        return t

    def _to_x_slabs(self, a):
        """(n, ny_me, nzc) y-slab -> (nx_me, n, nzc) x-slab, received in place (no extra buffer)."""
        n, nzc = self.n, self.n // 2 + 1
        ny_me, nx_me = self.y1 - self.y0, self.x1 - self.x0
        base, size = self._mpi_type(a.dtype), a.dtype.itemsize
        out = np.empty((nx_me, n, nzc), dtype=a.dtype)
        recv_types = [self._strided(base, nx_me, y0, y1) for y0, y1 in self.bounds]
        send = [a, [(x1 - x0) * ny_me * nzc for x0, x1 in self.bounds],
                [x0 * ny_me * nzc * size for x0, _ in self.bounds], [base] * self.size]
        recv = [out, [1] * self.size, [y0 * nzc * size for y0, _ in self.bounds], recv_types]
        self.comm.Alltoallw(send, recv)
        for t in recv_types:
            t.Free()
        return out

    def _to_y_slabs(self, b):
        """(nx_me, n, nzc) x-slab -> (n, ny_me, nzc) y-slab, sent in place (no packing buffer)."""
        n, nzc = self.n, self.n // 2 + 1
        ny_me, nx_me = self.y1 - self.y0, self.x1 - self.x0
        base, size = self._mpi_type(b.dtype), b.dtype.itemsize
        out = np.empty((n, ny_me, nzc), dtype=b.dtype)
        send_types = [self._strided(base, nx_me, y0, y1) for y0, y1 in self.bounds]
        send = [b, [1] * self.size, [y0 * nzc * size for y0, _ in self.bounds], send_types]
        recv = [out, [(x1 - x0) * ny_me * nzc for x0, x1 in self.bounds],
                [x0 * ny_me * nzc * size for x0, _ in self.bounds], [base] * self.size]
        self.comm.Alltoallw(send, recv)
        for t in send_types:
            t.Free()
        return out

    # ---- transforms -------------------------------------------------------------
    def inverse(self, field_k, workers=None):
        """Real x-slab from this rank's half-spectrum y-slab (``field_k`` is destroyed).

        ``field_k`` may also be a one-element list holding the caller's only reference to
        the spectrum: the list is emptied, and in a distributed run the spectrum is freed
        as soon as the transpose has read it, so it is not alive beside the transpose's
        output during the last two passes (one half spectrum less at the peak).
        """
        if isinstance(field_k, list):
            field_k = field_k.pop()
        if not self.distributed:
            return _fft.inverse_real_3d(field_k, self.n, workers)
        x = _fft.inverse_pass_x(field_k, workers)
        del field_k
        b = self._to_x_slabs(x)
        del x
        return _fft.inverse_pass_yz(b, self.n, workers)

    def inverse_xy(self, field_k, workers=None):
        """This rank's complex x-slab of the spectrum transformed back along axes 0 and 1.

        The last pass, complex-to-real along axis 2 (:func:`icgen._fft.inverse_pass_z`),
        is left to the caller, who can run it a few planes at a time: each line is
        transformed on its own, so the real planes are bit-identical to those of
        :meth:`inverse`. ``field_k`` is destroyed; it may be a one-element list, as in
        :meth:`inverse`.

        Returns
        -------
        ndarray, complex, shape (x1 - x0, n, n//2 + 1)
        """
        if isinstance(field_k, list):
            field_k = field_k.pop()
        x = _fft.inverse_pass_x(field_k, workers)
        del field_k
        if self.distributed:
            b = self._to_x_slabs(x)
            del x
        else:
            b = x
        return _fft.inverse_pass_y(b, workers)

    def forward(self, field, workers=None):
        """Half-spectrum y-slab of this rank from its real x-slab (``field`` is kept)."""
        if not self.distributed:
            return _fft.forward_real_3d(field, workers)
        b = _fft.forward_pass_zy(field, workers)
        a = self._to_y_slabs(b)
        del b
        return _fft.forward_pass_x(a, self.n, workers)
