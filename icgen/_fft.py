"""Real 3-D FFTs as explicit passes over one axis at a time (private).

The inverse transform runs axis 0 (complex), axis 1 (complex), then axis 2
(complex-to-real), exactly as ``scipy.fft.irfftn`` does, so it is bit-identical to
it (tested). The forward transform runs axis 2 (real-to-complex), axis 1, axis 0
without scaling and then multiplies by 1/n^3 once; it equals ``rfftn(norm="forward")``
to round-off (pocketfft folds the scale into a pass differently for some lengths).
A distributed run applies the same passes to its slabs, with a transpose between
the axis-0 pass and the others (:mod:`icgen.decomp`), and so reproduces the serial
result bit for bit. Normalisation is that of ``norm="forward"`` (see :mod:`icgen.field`).
"""

import scipy.fft as sfft

__all__ = ["inverse_real_3d", "forward_real_3d", "inverse_pass_x", "inverse_pass_y", "inverse_pass_z",
           "inverse_pass_yz", "forward_pass_zy", "forward_pass_x"]


def inverse_pass_x(field_k, workers=None):
    """Inverse complex transform along axis 0 (needs every kx; ``field_k`` is destroyed)."""
    return sfft.ifft(field_k, axis=0, norm="forward", workers=workers, overwrite_x=True)


def inverse_pass_y(field_k, workers=None):
    """Inverse complex transform along axis 1 of x-slabs, in place (``field_k`` is overwritten)."""
    return sfft.ifft(field_k, axis=1, norm="forward", workers=workers, overwrite_x=True)


def inverse_pass_z(field_k, n, workers=None):
    """Inverse complex-to-real transform along axis 2 (a new real array; ``field_k`` is kept).

    Each line along axis 2 is transformed on its own, so any block of x planes gives
    the same numbers as the whole array (the slab-by-slab output relies on it).
    """
    return sfft.irfft(field_k, n=n, axis=2, norm="forward", workers=workers)


def inverse_pass_yz(field_k, n, workers=None):
    """Inverse transforms along axis 1 (complex) and 2 (to real) of x-slabs; input destroyed."""
    return inverse_pass_z(inverse_pass_y(field_k, workers), n, workers)


def forward_pass_zy(field, workers=None):
    """Unscaled forward transforms along axis 2 (real to complex) and axis 1 of x-slabs."""
    x = sfft.rfft(field, axis=2, norm="backward", workers=workers)
    return sfft.fft(x, axis=1, norm="backward", workers=workers, overwrite_x=True)


def forward_pass_x(field_k, n, workers=None):
    """Unscaled forward transform along axis 0, then the 1/n^3 of ``norm="forward"``; input destroyed."""
    x = sfft.fft(field_k, axis=0, norm="backward", workers=workers, overwrite_x=True)
    x *= x.real.dtype.type(1.0 / n**3)
    return x


def inverse_real_3d(field_k, n, workers=None):
    """Real field (n, n, n) from its half spectrum (n, n, n//2 + 1); ``field_k`` is destroyed."""
    return inverse_pass_yz(inverse_pass_x(field_k, workers), n, workers)


def forward_real_3d(field, workers=None):
    """Half spectrum (n, n, n//2 + 1) of a real field (n, n, n) (``field`` is kept)."""
    return forward_pass_x(forward_pass_zy(field, workers), field.shape[0], workers)
