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
_TWO_M52 = 2.0**-52


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
def _mode_disk_point(kx, ky, kz, key0, key1):
    """A point (u, v) uniform in the unit disk (0 < u^2 + v^2 < 1) for the wavevector (kx, ky, kz).

    Each attempt is one Philox4x32-10 block with counter (kx, ky, kz, attempt)
    (32-bit two's complement) giving two 53-bit uniforms in [-1, 1); attempts outside
    the disk are rejected (Marsaglia & Bray 1964). The result depends on the key and
    the wavevector only.
    """
    c0 = np.uint64(kx) & _MASK32
    c1 = np.uint64(ky) & _MASK32
    c2 = np.uint64(kz) & _MASK32
    attempt = np.uint64(0)
    while True:
        r0, r1, r2, r3 = _philox4x32_10(c0, c1, c2, attempt, key0, key1)
        # 27 + 26 bits -> a 53-bit integer (via int64: exact and fast to convert).
        ia = np.int64(r0 >> np.uint64(5)) * 67108864 + np.int64(r1 >> np.uint64(6))
        ib = np.int64(r2 >> np.uint64(5)) * 67108864 + np.int64(r3 >> np.uint64(6))
        u = ia * _TWO_M52 - 1.0
        v = ib * _TWO_M52 - 1.0
        s = u * u + v * v
        if 0.0 < s < 1.0:
            return u, v, s
        attempt += np.uint64(1)


@njit(cache=True, parallel=True)
def _white_noise_slab(key0, key1, n, ix0, iy0, fixed, sign, amp_of_m2, out):
    """Fill out[i, j, l] with amp_of_m2[m] times the white noise of FFT mode (ix0 + i, iy0 + j, l).

    ``out`` is a block (nx, ny, n//2 + 1) of the half spectrum starting at (ix0, iy0).

    m = kx^2 + ky^2 + kz^2 (the scaling by the spectrum is fused into the draw; pass
    ones for pure white noise). The amplitude of integer wavevector (kx, ky, kz)
    depends only on the key and the wavevector. Modes are paired with their
    negatives so the field is exactly Hermitian: the canonical member of each pair
    (kz > 0, or kz = 0 and ky > 0, or kz = ky = 0 and kx > 0) draws, the other takes
    the complex conjugate. The k = 0 mode and every mode on a Nyquist plane (any
    index equal to -n/2, or kz = n/2) are zero.

    Gaussian (Marsaglia polar method, Marsaglia & Bray 1964, SIAM Rev. 6, 260): with
    (u, v) uniform in the unit disk and s = u^2 + v^2, g1 + i g2 = (u + i v)
    sqrt(-2 ln s / s) are two unit normals, so W = (u + i v) sqrt(-ln s / s) has
    <|W|^2> = 1. Fixed amplitude: W = (u + i v)/sqrt(s), the same phase with |W| = 1.
    ``sign`` is +1, or -1 for the paired realisation (every phase shifted by pi).
    Values are computed in float64 and rounded once on store.

    Each row of constant (kx, ky) first makes every mode's first attempt in a loop
    without rejection branches (which the compiler can pipeline), then finishes the few
    rejected modes and the amplitudes: the same numbers as drawing mode by mode.
    """
    half = n // 2
    nz = out.shape[2]
    for i in prange(out.shape[0]):
        ix = ix0 + i
        kx = ix if ix < half else ix - n
        first_u = np.empty(nz)
        first_v = np.empty(nz)
        first_s = np.empty(nz)
        for j in range(out.shape[1]):
            iy = iy0 + j
            ky = iy if iy < half else iy - n
            # The canonical member of each pair: (kx, ky, kz), or (-kx, -ky, 0) on the kz = 0 plane.
            flip0 = not (ky > 0 or (ky == 0 and kx > 0))
            c0p = np.uint64(kx) & _MASK32
            c1p = np.uint64(ky) & _MASK32
            c0m = np.uint64(-kx) & _MASK32
            c1m = np.uint64(-ky) & _MASK32
            for l in range(nz):  # attempt 0 of every mode (as in _mode_disk_point)
                flip = l == 0 and flip0
                r0, r1, r2, r3 = _philox4x32_10(c0m if flip else c0p, c1m if flip else c1p, np.uint64(l),
                                                np.uint64(0), key0, key1)
                ia = np.int64(r0 >> np.uint64(5)) * 67108864 + np.int64(r1 >> np.uint64(6))
                ib = np.int64(r2 >> np.uint64(5)) * 67108864 + np.int64(r3 >> np.uint64(6))
                u = ia * _TWO_M52 - 1.0
                v = ib * _TWO_M52 - 1.0
                first_u[l] = u
                first_v[l] = v
                first_s[l] = u * u + v * v
            for l in range(nz):
                kz = l
                if kx == -half or ky == -half or kz == half or (kx == 0 and ky == 0 and kz == 0):
                    out[i, j, l] = 0.0
                    continue
                canonical = kz > 0 or ky > 0 or (ky == 0 and kx > 0)
                u = first_u[l]
                v = first_v[l]
                s = first_s[l]
                if not (0.0 < s < 1.0):  # rejected: the later attempts, as drawn mode by mode
                    if canonical:
                        u, v, s = _mode_disk_point(kx, ky, kz, key0, key1)
                    else:
                        u, v, s = _mode_disk_point(-kx, -ky, kz, key0, key1)
                if not canonical:
                    v = -v
                if fixed:
                    f = 1.0 / np.sqrt(s)
                else:
                    f = np.sqrt(-np.log(s) / s)
                f *= sign * amp_of_m2[kx * kx + ky * ky + kz * kz]
                out[i, j, l] = complex(u * f, v * f)


@njit(cache=True, parallel=True)
def _fourier_operator(src1, a1, src2, a2, n, ix0, iy0, kf, d1, d2, out):
    """out = F(k) (a1 src1 + a2 src2) on the block starting at mode (ix0, iy0, 0); out may be a source.

    d2 < 0: first derivative over the Laplacian, F = i k_{d1} / k^2 (a displacement; with
    psi_1(k) = i k delta/k^2 and psi_2(k) = -i k S/k^2, c1 psi_1 + c2 psi_2 is this with
    src1 = delta, a1 = c1, src2 = S, a2 = -c2).
    d2 >= 0: second derivative over the Laplacian, F = k_{d1} k_{d2} / k^2.
    Nyquist-plane modes and k = 0 get zero (the Nyquist treatment of icgen.field).
    kf is the fundamental wavenumber 2 pi / L in h/Mpc. Pass a2 = 0 (and src2 = src1)
    for a single source: a1 src1 + 0 src2 is src1 exactly for finite values.
    """
    half = n // 2
    for i in prange(out.shape[0]):
        ix = ix0 + i
        kx = ix if ix < half else ix - n
        for j in range(out.shape[1]):
            iy = iy0 + j
            ky = iy if iy < half else iy - n
            for l in range(out.shape[2]):
                kz = l
                m2 = kx * kx + ky * ky + kz * kz
                if kx == -half or ky == -half or kz == half or m2 == 0:
                    out[i, j, l] = 0.0
                    continue
                v = a1 * src1[i, j, l] + a2 * src2[i, j, l]
                k1 = kx if d1 == 0 else (ky if d1 == 1 else kz)
                if d2 < 0:
                    out[i, j, l] = v * complex(0.0, k1 / (kf * m2))
                else:
                    k2 = kx if d2 == 0 else (ky if d2 == 1 else kz)
                    out[i, j, l] = v * (k1 * k2 / m2)


@njit(cache=True, inline="always")
def _position_plane(fx, fy, fz, scale, i, r, gx, box_size, out, plane_stats):
    """Plane i of the fields (global plane gx + i) into rows r n^2 ... (r + 1) n^2 - 1 of out.

    out = (q + scale f_d) mod L; plane_stats[r] = sum, sum of squares and max |.| of the
    displacement components scale field[d] (float64, fixed order within the plane).
    """
    n = fx.shape[2]
    spacing = box_size / n
    s = 0.0
    s2 = 0.0
    mx = 0.0
    qx = (gx + i) * spacing
    for j in range(n):
        qy = j * spacing
        row = (r * n + j) * n
        for k in range(n):
            p = row + k
            for d in range(3):
                if d == 0:
                    disp = scale * np.float64(fx[i, j, k])
                    q = qx
                elif d == 1:
                    disp = scale * np.float64(fy[i, j, k])
                    q = qy
                else:
                    disp = scale * np.float64(fz[i, j, k])
                    q = k * spacing
                out[p, d] = _wrap(q + disp, box_size)
                if out[p, d] >= box_size:
                    out[p, d] = 0.0
                s += disp
                s2 += disp * disp
                mx = max(mx, abs(disp))
    plane_stats[r, 0] = s
    plane_stats[r, 1] = s2
    plane_stats[r, 2] = mx


@njit(cache=True, inline="always")
def _velocity_plane(fx, fy, fz, scale, i, r, out, plane_stats):
    """out = scale f_d for plane i into rows r n^2 ..., with per-plane sums as in _position_plane."""
    n = fx.shape[2]
    s = 0.0
    s2 = 0.0
    mx = 0.0
    for j in range(n):
        row = (r * n + j) * n
        for k in range(n):
            p = row + k
            for d in range(3):
                if d == 0:
                    v = scale * np.float64(fx[i, j, k])
                elif d == 1:
                    v = scale * np.float64(fy[i, j, k])
                else:
                    v = scale * np.float64(fz[i, j, k])
                out[p, d] = v
                s += v
                s2 += v * v
                mx = max(mx, abs(v))
    plane_stats[r, 0] = s
    plane_stats[r, 1] = s2
    plane_stats[r, 2] = mx


@njit(cache=True, parallel=True, nogil=True)
def _position_slab(fx, fy, fz, scale, i0, i1, gx, box_size, out, plane_stats):
    """out = (q + scale f_d) mod L for local planes i0 <= i < i1 (global plane gx + i), on all threads.

    fx, fy, fz: the three components, each (planes, n, n).
    Row ((i - i0) n + j) n + k of out is the particle at grid index (gx + i, j, k).
    plane_stats[i - i0] = sum, sum of squares and max |.| of the displacement
    components scale field[d] (float64, fixed order within the plane).
    """
    for i in prange(i0, i1):
        _position_plane(fx, fy, fz, scale, i, i - i0, gx, box_size, out, plane_stats)


@njit(cache=True, nogil=True)
def _position_block(fx, fy, fz, scale, i0, i1, gx, box_size, out, plane_stats):
    """As _position_slab, on the calling thread alone (for callers that run blocks side by side)."""
    for i in range(i0, i1):
        _position_plane(fx, fy, fz, scale, i, i - i0, gx, box_size, out, plane_stats)


@njit(cache=True, parallel=True, nogil=True)
def _velocity_slab(fx, fy, fz, scale, i0, i1, out, plane_stats):
    """out = scale f_d for local planes i0 <= i < i1, with per-plane sums as in _position_slab."""
    for i in prange(i0, i1):
        _velocity_plane(fx, fy, fz, scale, i, i - i0, out, plane_stats)


@njit(cache=True, nogil=True)
def _velocity_block(fx, fy, fz, scale, i0, i1, out, plane_stats):
    """As _velocity_slab, on the calling thread alone."""
    for i in range(i0, i1):
        _velocity_plane(fx, fy, fz, scale, i, i - i0, out, plane_stats)


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


@njit(cache=True, inline="always")
def _wrap(x, box_size):
    """x mapped into [0, L) (periodic box)."""
    if x < 0.0:
        x += box_size
        if x < 0.0:
            x -= box_size * np.floor(x / box_size)
    elif x >= box_size:
        x -= box_size
        if x >= box_size:
            x -= box_size * np.floor(x / box_size)
    return x
