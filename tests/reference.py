"""Slow, obviously correct pure-NumPy/pure-Python versions of the grid kernels.

The fast numba kernels of icgen are compared against these on small grids.
"""

import numpy as np

MASK = 0xFFFFFFFF


def philox4x32_10(counter, key):
    """Philox4x32-10 in plain Python integers (Salmon et al. 2011, SC11, sec. 4.2)."""
    c = [int(x) & MASK for x in counter]
    k = [int(x) & MASK for x in key]
    for r in range(10):
        if r:
            k[0] = (k[0] + 0x9E3779B9) & MASK
            k[1] = (k[1] + 0xBB67AE85) & MASK
        p0 = 0xD2511F53 * c[0]
        p1 = 0xCD9E8D57 * c[2]
        c = [((p1 >> 32) ^ c[1] ^ k[0]) & MASK, p1 & MASK, ((p0 >> 32) ^ c[3] ^ k[1]) & MASK, p0 & MASK]
    return c


def mode_value(seed, kx, ky, kz, fixed=False, sign=1.0):
    """White-noise amplitude of one integer wavevector, following icgen.field's documented rule.

    Marsaglia polar method (Marsaglia & Bray 1964): attempts t = 0, 1, ... use the Philox
    block of counter (kx, ky, kz, t) for a point (u, v) in [-1, 1)^2, accepted when
    0 < s = u^2 + v^2 < 1; W = (u + i v) sqrt(-ln s / s), or (u + i v)/sqrt(s) fixed.
    """
    canonical = kz > 0 or ky > 0 or (ky == 0 and kx > 0)
    cx, cy = (kx, ky) if canonical else (-kx, -ky)
    attempt = 0
    while True:
        r = philox4x32_10((cx, cy, kz, attempt), (seed & MASK, seed >> 32))
        u = ((r[0] >> 5) * 67108864 + (r[1] >> 6)) * 2.0**-52 - 1.0
        v = ((r[2] >> 5) * 67108864 + (r[3] >> 6)) * 2.0**-52 - 1.0
        s = u * u + v * v
        if 0.0 < s < 1.0:
            break
        attempt += 1
    f = 1.0 / np.sqrt(s) if fixed else np.sqrt(-np.log(s) / s)
    f *= sign
    w = complex(u * f, v * f)
    return w if canonical else w.conjugate()


def white_noise(seed, n, fixed=False, paired=False):
    """Half-spectrum white noise, mode by mode in Python loops (icgen.field conventions)."""
    out = np.zeros((n, n, n // 2 + 1), dtype=np.complex128)
    half = n // 2
    for i in range(n):
        kx = i if i < half else i - n
        for j in range(n):
            ky = j if j < half else j - n
            for kz in range(n // 2 + 1):
                if kx == -half or ky == -half or kz == half or (kx == 0 and ky == 0 and kz == 0):
                    continue
                out[i, j, kz] = mode_value(seed, kx, ky, kz, fixed, -1.0 if paired else 1.0)
    return out


def full_spectrum(half_spec, n):
    """Full complex spectrum (n, n, n) from the rfft half-spectrum by Hermitian symmetry."""
    full = np.zeros((n, n, n), dtype=np.complex128)
    full[:, :, : n // 2 + 1] = half_spec
    for l in range(n // 2 + 1, n):
        full[:, :, l] = np.conj(half_spec[(-np.arange(n)) % n][:, (-np.arange(n)) % n, n - l])
    return full


def lpt_fields(delta_half, n, box_size):
    """psi_1 and psi_2 (shape (3, n, n, n)) with full-mesh numpy FFTs and the textbook formulas.

    psi_1(k) = i k delta / k^2; phi_ij = IFFT[k_i k_j delta / k^2];
    S = sum_{i>j} phi_ii phi_jj - phi_ij^2; psi_2(k) = -i k S_k / k^2
    (Crocce, Pueblas & Scoccimarro 2006, eqs. 4-5). Nyquist modes of every
    derivative are zeroed, as icgen.field documents.
    """
    kf = 2 * np.pi / box_size
    idx = np.fft.fftfreq(n, 1.0 / n)
    kx, ky, kz = np.meshgrid(idx * kf, idx * kf, idx * kf, indexing="ij")
    kvec = (kx, ky, kz)
    k2 = kx**2 + ky**2 + kz**2
    nyq = (np.abs(idx) == n // 2)
    bad = nyq[:, None, None] | nyq[None, :, None] | nyq[None, None, :] | (k2 == 0)
    k2s = np.where(k2 == 0, 1.0, k2)
    dfull = full_spectrum(delta_half, n)
    ifft = lambda f: np.real(np.fft.ifftn(np.where(bad, 0, f)) * n**3)  # noqa: E731 (norm="forward")
    psi1 = np.array([ifft(1j * kvec[d] / k2s * dfull) for d in range(3)])
    phi = {(i, j): ifft(kvec[i] * kvec[j] / k2s * dfull) for i in range(3) for j in range(i, 3)}
    s = (phi[0, 0] * phi[1, 1] + phi[0, 0] * phi[2, 2] + phi[1, 1] * phi[2, 2]
         - phi[0, 1] ** 2 - phi[0, 2] ** 2 - phi[1, 2] ** 2)
    sk = np.fft.fftn(s) / n**3
    psi2 = np.array([ifft(-1j * kvec[d] / k2s * sk) for d in range(3)])
    return psi1, psi2
