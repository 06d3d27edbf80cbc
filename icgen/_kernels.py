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
def _white_noise_slab(key0, key1, n, ix0, fixed, sign, amp_of_m2, out):
    """Fill out[i, j, l] with amp_of_m2[m] times the white noise of FFT mode (ix0 + i, j, l).

    m = kx^2 + ky^2 + kz^2 (the scaling by the spectrum is fused into the draw; pass
    ones for pure white noise). Values are computed in float64 and rounded once on
    store, so a complex64 ``out`` holds the rounded complex128 result.

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
                amp *= sign * amp_of_m2[kx * kx + ky * ky + kz * kz]
                re = amp * np.cos(theta)
                im = amp * np.sin(theta)
                out[i, j, l] = complex(re, im if canonical else -im)


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
def _particle_slab(psi, psi2, i0, i1, c_pos1, c_pos2, c_vel1, c_vel2, box_size, pos_out, vel_out):
    """Positions and velocities of the particles with first grid index i0 <= i < i1.

    Row p - (i0 n^2) of the outputs is particle p = (i n + j) n + k:
      pos = (q + c_pos1 psi[d] + c_pos2 psi2[d]) mod L,  q = (i, j, k) L/n,
      vel = c_vel1 psi[d] + c_vel2 psi2[d],
    evaluated in float64 and rounded once on store. psi, psi2: (3, n, n, n); psi2 may
    be a zero-size array (first order).
    """
    n = psi.shape[1]
    spacing = box_size / n
    second = psi2.size > 0
    for i in prange(i0, i1):
        for j in range(n):
            for k in range(n):
                p = ((i - i0) * n + j) * n + k
                for d in range(3):
                    s1 = np.float64(psi[d, i, j, k])
                    s2 = np.float64(psi2[d, i, j, k]) if second else 0.0
                    q = (i if d == 0 else (j if d == 1 else k)) * spacing
                    x = (q + (c_pos1 * s1 + c_pos2 * s2)) % box_size
                    xr = pos_out.dtype.type(x)
                    if xr >= box_size:  # rounding up to L (or a tiny negative) wraps to 0
                        xr = pos_out.dtype.type(0.0)
                    pos_out[p, d] = xr
                    vel_out[p, d] = c_vel1 * s1 + c_vel2 * s2


@njit(cache=True)
def _displacement_moments(psi, psi2, i0, i1, c1, c2):
    """Sum and sum of squares (float64) and max |.| of c1 psi + c2 psi2 over slab [i0, i1).

    Serial loop in a fixed order: deterministic on any thread count.
    """
    n = psi.shape[1]
    second = psi2.size > 0
    s = 0.0
    s2 = 0.0
    mx = 0.0
    for d in range(3):
        for i in range(i0, i1):
            for j in range(n):
                for k in range(n):
                    v = c1 * np.float64(psi[d, i, j, k])
                    if second:
                        v += c2 * np.float64(psi2[d, i, j, k])
                    s += v
                    s2 += v * v
                    if abs(v) > mx:
                        mx = abs(v)
    return s, s2, mx
