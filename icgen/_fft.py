"""Real 3-D FFTs as explicit passes over one axis at a time (private).

The inverse transform runs axis 0 (complex), axis 1 (complex), then axis 2
(complex-to-real), exactly as ``scipy.fft.irfftn`` does, so it is bit-identical to
it (tested). The forward transform runs axis 2 (real-to-complex), axis 1, axis 0
without scaling and then multiplies by 1/n^3 once; it equals ``rfftn(norm="forward")``
to round-off (pocketfft folds the scale into a pass differently for some lengths).
A distributed run that applies the same passes to its slabs (with transposes in
between) reproduces the serial result bit for bit. Normalisation is that of
``norm="forward"`` (see :mod:`icgen.field`).
"""

import scipy.fft as sfft

__all__ = ["inverse_real_3d", "forward_real_3d"]


def inverse_real_3d(field_k, n, workers=None):
    """Real field (n, n, n) from its half spectrum (n, n, n//2 + 1); ``field_k`` is destroyed."""
    x = sfft.ifft(field_k, axis=0, norm="forward", workers=workers, overwrite_x=True)
    x = sfft.ifft(x, axis=1, norm="forward", workers=workers, overwrite_x=True)
    return sfft.irfft(x, n=n, axis=2, norm="forward", workers=workers)


def forward_real_3d(field, workers=None):
    """Half spectrum (n, n, n//2 + 1) of a real field (n, n, n) (``field`` is kept)."""
    n = field.shape[0]
    x = sfft.rfft(field, axis=2, norm="backward", workers=workers)
    x = sfft.fft(x, axis=1, norm="backward", workers=workers, overwrite_x=True)
    x = sfft.fft(x, axis=0, norm="backward", workers=workers, overwrite_x=True)
    x *= x.real.dtype.type(1.0 / n**3)
    return x
