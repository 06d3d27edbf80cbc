"""Private numba kernels of the grid stages (field, lpt, particles).

Each kernel is small and pure: arrays and scalars in, preallocated arrays out.
Loops marked ``prange`` run over independent elements only (no reductions), so
results are bit-identical on any number of threads.
"""

import numpy as np
from numba import njit, prange

# Philox4x32 constants (Salmon, Moraes, Dror & Shaw 2011, SC11, sec. 4.2 / Random123).
_M0 = np.uint64(0xD2511F53)
_M1 = np.uint64(0xCD9E8D57)
_W0 = np.uint64(0x9E3779B9)
_W1 = np.uint64(0xBB67AE85)
_MASK32 = np.uint64(0xFFFFFFFF)
_SH32 = np.uint64(32)
_TWO_M53 = 2.0**-53
_TWO_PI = 2.0 * np.pi


@njit(cache=True, inline="always")
def _philox4x32_10(c0, c1, c2, c3, k0, k1):
    """Philox4x32-10 block: four 32-bit counter words and two key words -> four words.

    All arguments and results are uint64 holding 32-bit values.
    """
    for r in range(10):
        if r > 0:
            k0 = (k0 + _W0) & _MASK32
            k1 = (k1 + _W1) & _MASK32
        p0 = _M0 * c0
        p1 = _M1 * c2
        c0, c1, c2, c3 = ((p1 >> _SH32) ^ c1 ^ k0) & _MASK32, p1 & _MASK32, \
            ((p0 >> _SH32) ^ c3 ^ k1) & _MASK32, p0 & _MASK32
    return c0, c1, c2, c3


@njit(cache=True)
def _philox_block(counter, key):
    """Philox4x32-10 of one counter (4 uint32-valued ints) and key (2 ints): for tests."""
    out = np.empty(4, dtype=np.uint64)
    r = _philox4x32_10(np.uint64(counter[0]), np.uint64(counter[1]), np.uint64(counter[2]),
                       np.uint64(counter[3]), np.uint64(key[0]), np.uint64(key[1]))
    out[0], out[1], out[2], out[3] = r
    return out


@njit(cache=True, inline="always")
def _mode_uniforms(kx, ky, kz, key0, key1):
    """Two uniforms in (0, 1] (53 bits each) for the integer wavevector (kx, ky, kz)."""
    c0 = np.uint64(kx) & _MASK32  # two's complement of negative indices
    c1 = np.uint64(ky) & _MASK32
    c2 = np.uint64(kz) & _MASK32
    r0, r1, r2, r3 = _philox4x32_10(c0, c1, c2, np.uint64(0), key0, key1)
    # 27 + 26 bits -> a 53-bit integer, as numpy's random_standard_uniform does from two words.
    u1 = ((r0 >> np.uint64(5)) * np.uint64(67108864) + (r1 >> np.uint64(6)) + np.uint64(1)) * _TWO_M53
    u2 = ((r2 >> np.uint64(5)) * np.uint64(67108864) + (r3 >> np.uint64(6))) * _TWO_M53
    return u1, u2


@njit(cache=True, parallel=True)
def _white_noise_slab(key0, key1, n, ix0, fixed, sign, out):
    """Fill out[i, j, l] with the white-noise amplitude of FFT mode (ix0 + i, j, l).

    The amplitude of integer wavevector (kx, ky, kz) depends only on the key and
    the wavevector. Modes are paired with their negatives so the field is exactly
    Hermitian: the canonical member of each pair (kz > 0, or kz = 0 and ky > 0, or
    kz = ky = 0 and kx > 0) draws, the other takes the complex conjugate. The k = 0
    mode and every mode on a Nyquist plane (any index equal to -n/2, or kz = n/2)
    are zero. Gaussian: (g1 + i g2)/sqrt(2), Box-Muller; fixed amplitude: exp(i theta)
    with the same phase theta = 2 pi u2. ``sign`` is +1, or -1 for the paired
    realisation (every phase shifted by pi).
    """
    half = n // 2
    nz = out.shape[2]
    for i in prange(out.shape[0]):
        ix = ix0 + i
        kx = ix if ix < half else ix - n
        for j in range(n):
            ky = j if j < half else j - n
            for l in range(nz):
                kz = l
                if kx == -half or ky == -half or kz == half or (kx == 0 and ky == 0 and kz == 0):
                    out[i, j, l] = 0.0
                    continue
                canonical = kz > 0 or ky > 0 or (ky == 0 and kx > 0)
                if canonical:
                    u1, u2 = _mode_uniforms(kx, ky, kz, key0, key1)
                else:
                    u1, u2 = _mode_uniforms(-kx, -ky, kz, key0, key1)
                theta = _TWO_PI * u2
                if fixed:
                    amp = 1.0
                else:
                    amp = np.sqrt(-np.log(u1))  # |g1 + i g2|/sqrt(2) = sqrt(-2 ln u1)/sqrt(2)
                re = sign * amp * np.cos(theta)
                im = sign * amp * np.sin(theta)
                out[i, j, l] = complex(re, im if canonical else -im)


@njit(cache=True, parallel=True)
def _scale_modes(field, n, ix0, amp_of_m2):
    """Multiply mode (ix0 + i, j, l) by amp_of_m2[kx^2 + ky^2 + kz^2], in place."""
    half = n // 2
    for i in prange(field.shape[0]):
        ix = ix0 + i
        kx = ix if ix < half else ix - n
        for j in range(field.shape[1]):
            ky = j if j < half else j - n
            for l in range(field.shape[2]):
                field[i, j, l] *= amp_of_m2[kx * kx + ky * ky + l * l]


@njit(cache=True, parallel=True)
def _derivative_modes(src, n, ix0, kf, d1, d2, out):
    """out = F(k) src for one operator, in place-free form.

    d2 < 0: first derivative over the Laplacian, F = i k_{d1} / k^2.
    d2 >= 0: second derivative over the Laplacian, F = k_{d1} k_{d2} / k^2.
    Nyquist-plane modes and k = 0 get zero (the module's Nyquist treatment).
    kf is the fundamental wavenumber 2 pi / L in h/Mpc.
    """
    half = n // 2
    for i in prange(src.shape[0]):
        ix = ix0 + i
        kx = ix if ix < half else ix - n
        for j in range(src.shape[1]):
            ky = j if j < half else j - n
            for l in range(src.shape[2]):
                kz = l
                m2 = kx * kx + ky * ky + kz * kz
                if kx == -half or ky == -half or kz == half or m2 == 0:
                    out[i, j, l] = 0.0
                    continue
                k1 = kx if d1 == 0 else (ky if d1 == 1 else kz)
                if d2 < 0:
                    out[i, j, l] = src[i, j, l] * complex(0.0, k1 / (kf * m2))
                else:
                    k2 = kx if d2 == 0 else (ky if d2 == 1 else kz)
                    out[i, j, l] = src[i, j, l] * (k1 * k2 / m2)


@njit(cache=True, parallel=True)
def _second_order_source_diag(p00, p11, p22, out):
    """out = p00 p11 + p00 p22 + p11 p22 (diagonal part of the 2LPT source)."""
    a = p00.ravel()
    b = p11.ravel()
    c = p22.ravel()
    o = out.ravel()
    for i in prange(o.size):
        o[i] = a[i] * b[i] + a[i] * c[i] + b[i] * c[i]


@njit(cache=True, parallel=True)
def _subtract_square(out, p):
    """out -= p^2 (off-diagonal part of the 2LPT source)."""
    o = out.ravel()
    q = p.ravel()
    for i in prange(o.size):
        o[i] -= q[i] * q[i]


@njit(cache=True, parallel=True)
def _place_particles(psi, d1, psi2, d2, box_size, spacing, out):
    """out[p, d] = (q_d + d1 psi[d] + d2 psi2[d]) mod L for particle p = (i n + j) n + k.

    psi, psi2 have shape (3, n, n, n); q = (i, j, k) * spacing. psi2 may be a
    zero-size array when there is no second order.
    """
    n = psi.shape[1]
    second = psi2.size > 0
    for i in prange(n):
        for j in range(n):
            for k in range(n):
                p = (i * n + j) * n + k
                for d in range(3):
                    q = (i if d == 0 else (j if d == 1 else k)) * spacing
                    x = q + d1 * psi[d, i, j, k]
                    if second:
                        x += d2 * psi2[d, i, j, k]
                    x = x % box_size
                    if x >= box_size:  # round-off of a tiny negative value
                        x -= box_size
                    out[p, d] = x


@njit(cache=True, parallel=True)
def _particle_velocities(psi, c1, psi2, c2, out):
    """out[p, d] = c1 psi[d] + c2 psi2[d] at particle p = (i n + j) n + k."""
    n = psi.shape[1]
    second = psi2.size > 0
    for i in prange(n):
        for j in range(n):
            for k in range(n):
                p = (i * n + j) * n + k
                for d in range(3):
                    v = c1 * psi[d, i, j, k]
                    if second:
                        v += c2 * psi2[d, i, j, k]
                    out[p, d] = v
