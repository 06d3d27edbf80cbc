"""Power-spectrum estimator: assignment kernels, windows, shot noise, interlacing, binning, determinism."""

import os
import subprocess
import sys
import textwrap

import numpy as np
import pytest
from scipy import special, stats

from icgen import field, lpt, power
from icgen.errors import InputError


# ---------------------------------------------------------------------------------------
# Slow, obviously correct references (pure NumPy)
# ---------------------------------------------------------------------------------------
def _reference_assign(pos, box, n, p, shift=0.0, weights=None):
    """Mass assignment with np.add.at and the weights of Hockney & Eastwood (1988), sec. 5-3."""
    u = np.asarray(pos, dtype=np.float64) / (box / n) - shift
    w = np.ones(len(u)) if weights is None else weights
    if p == 1:
        j = np.floor(u + 0.5).astype(int)
        idx, wt = [j], [np.ones_like(u)]
    elif p == 2:
        j = np.floor(u).astype(int)
        d = u - j
        idx, wt = [j, j + 1], [1 - d, d]
    else:
        j = np.floor(u + 0.5).astype(int)
        d = u - j
        idx, wt = [j - 1, j, j + 1], [0.5 * (0.5 - d) ** 2, 0.75 - d * d, 0.5 * (0.5 + d) ** 2]
    mesh = np.zeros((n, n, n))
    for a in range(p):
        for b in range(p):
            for c in range(p):
                np.add.at(mesh, (idx[a][:, 0] % n, idx[b][:, 1] % n, idx[c][:, 2] % n),
                          w * wt[a][:, 0] * wt[b][:, 1] * wt[c][:, 2])
    return mesh


def _mode_grid(n, box):
    """Integer modes (n, n, n//2+1, 3) of rfftn, their |k| and the estimator's mode weights."""
    m = np.fft.fftfreq(n, 1.0 / n)
    mz = np.arange(n // 2 + 1)
    mm = np.stack(np.meshgrid(m, m, mz, indexing="ij"), -1)
    w = np.ones(mm.shape[:3])
    w[..., 0] = 0.5
    w[..., -1] = 0.5
    return mm, 2 * np.pi / box * np.linalg.norm(mm, axis=-1), w


def _bin_modes(values, kmag, w, edges):
    """Weighted mean of per-mode values in |k| bins (independent of icgen.power's binning)."""
    idx = np.digitize(kmag, edges) - 1
    ok = (idx >= 0) & (idx < len(edges) - 1)
    num = np.bincount(idx[ok], (w * values)[ok], minlength=len(edges) - 1)
    den = np.bincount(idx[ok], w[ok], minlength=len(edges) - 1)
    return num / den


def _za_lattice(power_fn, n, box, growth, seed, fixed=False):
    """Particles of a Zel'dovich-displaced lattice: x = q + D psi_1 (Zel'dovich 1970)."""
    modes = field.linear_density_modes(power_fn, seed, n, box, fixed_amplitude=fixed)
    psi = lpt.displacements(modes, order=1).psi_1
    q = np.indices((n, n, n), dtype=np.float64).reshape(3, -1).T * (box / n)
    return (q + growth * np.moveaxis(np.asarray(psi, dtype=np.float64), 0, -1).reshape(-1, 3)) % box


# ---------------------------------------------------------------------------------------
# Kernels and windows
# ---------------------------------------------------------------------------------------
@pytest.mark.parametrize("scheme,p", [("ngp", 1), ("cic", 2), ("tsc", 3)])
def test_assignment_matches_reference_and_conserves_mass(scheme, p):
    # Reference: the kernel weights of Hockney & Eastwood (1988), sec. 5-3, via np.add.at.
    rng = np.random.default_rng(5)
    box, n = 10.0, 16
    pos = rng.uniform(0, box, (4000, 3))
    pos[:8] = 0.0                                            # on a mesh point
    pos[8:16] = np.nextafter(box, 0.0)                       # just below L: wraps
    pos[16:24, 0] = (np.arange(8) + 0.5) * box / n           # exactly half-way between points
    pos[24] = box                                            # x = L is the image of 0
    weights = rng.normal(size=len(pos))
    for shift in (0.0, 0.5):
        got = power.assign(pos, box, n, scheme, shift, weights)
        want = _reference_assign(pos, box, n, p, shift, weights)
        np.testing.assert_allclose(got, want, rtol=0, atol=1e-12)  # float64 sums of O(1) terms
        assert got.sum() == pytest.approx(weights.sum(), abs=1e-10)


def test_window_is_jing_eq18():
    # Jing (2005), eq. 18: W(k) = prod_i [sin(pi k_i/(2 k_N)) / (pi k_i/(2 k_N))]^p.
    box, n = 200.0, 64
    k_nyq = np.pi * n / box
    k = np.array([[0.1, 0.2, 0.3], [k_nyq, 0.0, 0.0], [0.0, 0.0, 0.0]])
    for scheme, p in power.SCHEMES.items():
        x = np.pi * k / (2 * k_nyq)
        with np.errstate(invalid="ignore"):
            want = np.prod(np.where(x == 0, 1.0, np.sin(x) / x) ** p, axis=-1)
        np.testing.assert_allclose(power.window(k, n, box, scheme), want, rtol=1e-14)
    assert power.window([np.pi * n / box, 0, 0], n, box, "cic") == pytest.approx((2 / np.pi) ** 2)


@pytest.mark.parametrize("scheme,p", [("ngp", 1), ("cic", 2), ("tsc", 3)])
def test_shot_noise_factor_equals_truncated_image_sums(scheme, p):
    # Independent computation: sum over images n of W^2(k + 2 k_N n) / W^2(k), all images
    # (Jing 2005, eq. 20) or the even ones (interlacing, Sefusatti et al. 2016, sec. 3.1),
    # summed directly per axis up to |n| = 4000 (NGP tail ~ 1/n: truncation < 1e-4).
    box, n = 100.0, 32
    k_nyq = np.pi * n / box
    rng = np.random.default_rng(2)
    k = rng.uniform(-k_nyq, k_nyq, (20, 3))
    img = np.arange(-4000, 4001)
    w1 = np.sinc((k[..., None] + 2 * k_nyq * img) / (2 * k_nyq)) ** (2 * p)   # (20, 3, images)
    all_images = np.prod(w1.sum(-1), -1)
    alternating = np.prod((w1 * (-1.0) ** img).sum(-1), -1)
    w2 = power.window(k, n, box, scheme) ** 2
    tol = {1: 2e-4, 2: 1e-9, 3: 1e-9}[p]  # truncation error of the direct sum
    np.testing.assert_allclose(power.shot_noise_factor(k, n, box, scheme), all_images / w2, rtol=tol)
    np.testing.assert_allclose(power.shot_noise_factor(k, n, box, scheme, interlace=True),
                               0.5 * (all_images + alternating) / w2, rtol=tol)


# ---------------------------------------------------------------------------------------
# Analytic cases
# ---------------------------------------------------------------------------------------
@pytest.mark.parametrize("scheme", ["ngp", "cic", "tsc"])
@pytest.mark.parametrize("interlace", [False, True])
def test_poisson_particles_give_one_over_nbar(scheme, interlace):
    # Poisson particles: <P_hat> = (1/n_bar) sum_n W^2(k + 2k_N n)/W^2(k) before subtraction
    # (Jing 2005, eq. 20; even images only when interlaced) and 0 after; Gaussian bin errors
    # (P_shot / sqrt(n_modes), Feldman, Kaiser & Peacock 1994). chi2 over all bins.
    rng = np.random.default_rng(11)
    box, n_part, n_mesh = 100.0, 400_000, 32
    pos = rng.uniform(0.0, box, (n_part, 3))
    ps = power.measure(pos, box, n_mesh, scheme, interlace, subtract_shot_noise=True)
    nbar_inv = box**3 / n_part
    chi2 = np.sum((ps.power / ps.sigma) ** 2)
    assert stats.chi2.sf(chi2, len(ps)) > 1e-3, chi2
    # Before subtraction, at low k (first quarter of the bins, combined): the measured level is
    # 1/n_bar times the mean aliasing factor, 1.00-1.03 there; 4 sigma of the combined bins.
    low = ps.k < 0.25 * np.pi * n_mesh / box
    raw = ps.power + ps.shot_noise
    n_low = ps.n_modes[low].sum()
    mean = np.sum(raw[low] * ps.n_modes[low]) / n_low
    pred = np.sum(ps.shot_noise[low] * ps.n_modes[low]) / n_low
    assert 1.0 <= pred / nbar_inv < 1.04
    assert abs(mean / pred - 1) < 4 / np.sqrt(n_low)


def test_interlacing_removes_the_aliased_shot_noise():
    # The aliased shot noise near k_N: all images (Jing 2005, eq. 20) versus the even ones
    # (Sefusatti et al. 2016, sec. 3.1). Measured on Poisson particles without subtraction.
    rng = np.random.default_rng(12)
    box, n_part, n_mesh = 100.0, 400_000, 32
    pos = rng.uniform(0.0, box, (n_part, 3))
    nbar_inv = box**3 / n_part
    excess = {}
    for interlace in (False, True):
        ps = power.measure(pos, box, n_mesh, "cic", interlace, subtract_shot_noise=True)
        hi = ps.k > 0.5 * np.pi * n_mesh / box
        raw = ps.power + ps.shot_noise
        n_hi = ps.n_modes[hi].sum()
        excess[interlace] = np.sum((raw[hi] / nbar_inv - 1) * ps.n_modes[hi]) / n_hi
        pred = np.sum((ps.shot_noise[hi] / nbar_inv - 1) * ps.n_modes[hi]) / n_hi
        print(f"shot-noise aliasing above k_N/2, interlaced={interlace}: measured {excess[interlace]:+.4f}, "
              f"predicted {pred:+.4f}")
        assert abs(excess[interlace] - pred) < 4 * (1 + pred) / np.sqrt(n_hi)
        if not interlace:
            pred_plain = pred
    # Measurably reduced: with interlacing the excess is far (> 5 sigma) from the plain
    # prediction, which it would equal if interlacing did nothing.
    assert abs(excess[True] - pred_plain) > 5 * (1 + pred_plain) / np.sqrt(n_hi)


@pytest.mark.parametrize("scheme,p", [("ngp", 1), ("cic", 2), ("tsc", 3)])
@pytest.mark.parametrize("interlace", [False, True])
def test_displaced_plane_wave(scheme, p, interlace):
    # One Zel'dovich plane wave x = q + (A/k0) sin(k0 q_x): the exact density has Fourier
    # coefficients delta(m k0) = (-1)^m J_m(m A) (Jacobi-Anger expansion), and the particles,
    # a lattice of n_x planes, carry the same coefficient at k0 + G, G = 2 pi n_x j / L, with
    # J_1((1 + G/k0) A). On the mesh the image k0 + G lands on k0 with W(k0 + G)/W(k0)
    # (Jing 2005, eq. 18; the y and z images vanish: the lattice there is the mesh itself).
    box, n_mesh, n_x, m0, amp = 100.0, 32, 256, 3, 0.05
    k0 = 2 * np.pi * m0 / box
    q = np.indices((n_x, n_mesh, n_mesh), dtype=np.float64).reshape(3, -1).T
    q *= np.array([box / n_x, box / n_mesh, box / n_mesh])
    x = q.copy()
    x[:, 0] = (q[:, 0] + amp / k0 * np.sin(k0 * q[:, 0])) % box
    ps = power.measure(x, box, n_mesh, scheme, interlace, subtract_shot_noise=False)
    mode_power = ps.power * ps.n_modes / box**3     # sum of |delta_k|^2 over the bin's +-k pairs
    j = np.arange(-20000, 20001)                    # images of the lattice (NGP converges slowly)
    ratio = (np.sinc((m0 + n_x * j) / n_mesh) / np.sinc(m0 / n_mesh)) ** p
    pred = np.sum(ratio * special.jv(1, (1 + n_x * j / m0) * amp)) ** 2
    # The images of the harmonics m = 1 (mod 32) also land in this bin and are left out of the
    # sum: < 1e-7 for CIC and TSC, 0.3% for NGP (whose window falls only as 1/k).
    tol = {1: 1e-2, 2: 1e-7, 3: 1e-7}[p]
    assert mode_power[m0 - 1] == pytest.approx(pred, rel=tol)
    if p > 1:
        # The wave's own power J_1(A)^2 is recovered to the alias fraction of this setup
        # (|pred/J_1^2 - 1| < 1e-3), and at least 99% of all the measured power sits in its bin
        # (the exact density puts 1 - A^2 ~ 99.75% of it there; the rest is the harmonics
        # J_m(m A)^2 and, for CIC, aliased lattice images of ~1e-3).
        assert abs(pred / special.jv(1, amp) ** 2 - 1) < 1e-3
        assert mode_power[m0 - 1] == pytest.approx(special.jv(1, amp) ** 2, rel=1e-3)
        assert mode_power[m0 - 1] > 0.99 * mode_power.sum()
    if p == 3:
        # Second harmonic: (-1)^2 J_2(2A) at 2 k0 (Jacobi-Anger), TSC aliasing ~2e-3 there.
        assert mode_power[2 * m0 - 1] == pytest.approx(special.jv(2, 2 * amp) ** 2, rel=0.01)


# ---------------------------------------------------------------------------------------
# Gaussian fields
# ---------------------------------------------------------------------------------------
def _shape(k):
    return 2.0e4 * (k / 0.02) / (1.0 + (k / 0.02) ** 2) ** 1.4


def test_gaussian_field_on_particles_recovers_its_spectrum():
    # A Gaussian field of known P(k) on a Zel'dovich-displaced 64^3 lattice (D = 0.02, rms
    # delta 0.014 on the grid: linear), CIC + interlacing on a 128^3 mesh, bins up to half the
    # particle Nyquist wavenumber. Expectation: P(k) averaged over each bin's modes; Gaussian
    # error P/sqrt(n_modes) (Feldman, Kaiser & Peacock 1994); chi2 with one dof per bin.
    box, n, growth = 200.0, 64, 0.02
    x = _za_lattice(_shape, n, box, growth, seed=7)
    edges = power.default_k_edges(box, n)[: n // 4 + 1]
    ps = power.measure(x, box, 2 * n, "cic", True, subtract_shot_noise=False, k_edges=edges)
    want = growth**2 * power.mode_average(_shape, box, 2 * n, edges)
    chi2 = np.sum((ps.power - want) ** 2 * ps.n_modes / want**2)
    p_value = stats.chi2.sf(chi2, len(ps))
    print(f"Gaussian field: chi2 = {chi2:.2f} for {len(ps)} bins, p = {p_value:.3f}")
    assert p_value > 1e-3


def test_interlacing_reduces_signal_aliasing_near_nyquist():
    # A field with power up to the particle Nyquist wavenumber (128^3 lattice, P ~ 1/k)
    # measured on a 32^3 mesh. Expectation per mode: sum_n W^2(k + 2k_N n) P(k + 2k_N n)/W^2(k)
    # (Jing 2005, eq. 19) over |n_i| <= 1 (the field ends at the particle Nyquist wavenumber,
    # 2 k_N further), all images or the even ones when interlaced (Sefusatti et al. 2016).
    # Gaussian amplitudes: chi2 against each expectation; fixed amplitudes (Angulo & Pontzen
    # 2016): the aliasing excess near k_N without cosmic variance, CIC.
    box, n, n_mesh, growth = 100.0, 128, 32, 0.001
    pk = lambda k: 50.0 / k  # noqa: E731
    mm, kmag, w = _mode_grid(n_mesh, box)
    k_nyq = np.pi * n_mesh / box
    kvec = mm * (2 * np.pi / box)
    edges = power.default_k_edges(box, n_mesh)
    win2 = lambda kv: np.prod(np.sinc(kv / (2 * k_nyq)) ** 4, -1)  # noqa: E731  CIC W^2, Jing eq. 18
    expect = {}
    for interlace in (False, True):
        tot = np.zeros(kmag.shape)
        for img in np.ndindex(3, 3, 3):
            nvec = np.array(img) - 1
            if interlace and nvec.sum() % 2:
                continue
            kk = kvec + 2 * k_nyq * nvec
            kn = np.linalg.norm(kk, axis=-1)
            tot += win2(kk) * np.where(kn > 0, growth**2 * pk(np.where(kn > 0, kn, 1.0)), 0.0)
        with np.errstate(invalid="ignore", divide="ignore"):
            expect[interlace] = _bin_modes(np.where(kmag > 0, tot / win2(kvec), 0.0), kmag, w, edges)
    true = growth**2 * power.mode_average(pk, box, n_mesh)
    hi = slice(n_mesh // 4, None)  # bins above k_N / 2

    x = _za_lattice(pk, n, box, growth, seed=11)
    for interlace in (False, True):
        ps = power.measure(x, box, n_mesh, "cic", interlace, subtract_shot_noise=False)
        chi2 = np.sum((ps.power - expect[interlace]) ** 2 * ps.n_modes / expect[interlace] ** 2)
        assert stats.chi2.sf(chi2, len(ps)) > 1e-3, (interlace, chi2)

    xf = _za_lattice(pk, n, box, growth, seed=11, fixed=True)
    excess = {}
    for interlace in (False, True):
        ps = power.measure(xf, box, n_mesh, "cic", interlace, subtract_shot_noise=False)
        excess[interlace] = np.mean(ps.power[hi] / true[hi] - 1)
    pred_plain = np.mean(expect[False][hi] / true[hi] - 1)
    print(f"aliasing above k_N/2: plain {excess[False]:+.4f} (Jing: {pred_plain:+.4f}), "
          f"interlaced {excess[True]:+.4f}")
    # Without interlacing the excess is the predicted aliasing, ~5% (the lattice's own harmonics,
    # a first-order correction of ~0.3% for CIC, are the rest); with it, a tenth or less.
    assert excess[False] == pytest.approx(pred_plain, rel=0.1)
    assert abs(excess[True]) < 0.1 * excess[False]


# ---------------------------------------------------------------------------------------
# Binning, cross spectra, errors
# ---------------------------------------------------------------------------------------
def test_binning_counts_each_independent_mode_once():
    # Number of wavevectors with k_f(i - 1/2) <= |k| < k_f(i + 1/2), counted by brute force
    # over the full cube; independent modes are half of them (+-k pairs).
    box, n = 50.0, 16
    rng = np.random.default_rng(1)
    pos = rng.uniform(0, box, (5000, 3))
    ps = power.measure(pos, box, n, "cic", False, False)
    m = np.fft.fftfreq(n, 1.0 / n)
    full = np.sqrt(m[:, None, None] ** 2 + m[None, :, None] ** 2 + m[None, None, :] ** 2)
    full = full[(np.abs(m) < n // 2)[:, None, None] & (np.abs(m) < n // 2)[None, :, None]
                & (np.abs(m) < n // 2)[None, None, :]]
    counts = [np.sum((full >= i - 0.5) & (full < i + 0.5)) for i in range(1, n // 2)]
    np.testing.assert_array_equal(2 * ps.n_modes, counts)
    assert ps.n_modes[0] == 9  # 6 wavevectors of |m| = 1 and 12 of |m| = sqrt 2


def test_cross_spectrum_of_a_field_with_itself_is_its_auto_spectrum():
    rng = np.random.default_rng(4)
    box = 80.0
    pos = rng.uniform(0, box, (20000, 3))
    a = power.mesh_modes(pos, box, 16, "tsc", True)
    auto = power.bin_power(a)
    cross = power.bin_power(a, a)
    np.testing.assert_allclose(cross.power, auto.power, rtol=1e-12)
    # Gaussian errors: (P_ab^2 + P_aa P_bb)/(2 N) = P^2/N for a = b.
    np.testing.assert_allclose(cross.sigma, auto.sigma, rtol=1e-12)


def test_bad_inputs_are_refused_before_work():
    pos = np.zeros((10, 3))
    with pytest.raises(InputError, match="scheme"):
        power.measure(pos, 10.0, 16, "pcs")
    with pytest.raises(InputError, match="n_mesh"):
        power.measure(pos, 10.0, 15)
    with pytest.raises(InputError, match="outside the box"):
        power.measure(pos + 11.0, 10.0, 16)
    with pytest.raises(InputError, match="outside the box"):
        power.measure(pos - 1e-9, 10.0, 16)
    with pytest.raises(InputError, match="Nyquist"):
        power.measure(pos, 10.0, 16, k_edges=[0.1, 100.0])
    with pytest.raises(InputError, match="non-finite"):
        power.measure(np.full((3, 3), np.nan), 10.0, 16)
    with pytest.raises(InputError, match=r"\(N, 3\)"):
        power.measure(np.zeros((10, 2)), 10.0, 16)


_THREAD_SCRIPT = textwrap.dedent("""
    import hashlib
    import numpy as np
    from icgen import power
    rng = np.random.default_rng(3)
    # clustered: half the particles in a slab of the box (uneven work per thread)
    pos = rng.uniform(0, 100.0, (300_000, 3))
    pos[:150_000, 0] = rng.normal(30.0, 2.0, 150_000) % 100.0
    h = hashlib.sha256()
    for scheme in ("ngp", "cic", "tsc"):
        for shift in (0.0, 0.5):
            h.update(power.assign(pos, 100.0, 64, scheme, shift).tobytes())
    h.update(power.measure(pos, 100.0, 64, "tsc", True).power.tobytes())
    print(h.hexdigest())
""")


def test_assignment_bit_identical_on_one_and_two_threads():
    # STYLE.md sec. 8: no reduction whose order depends on the thread count.
    digests = []
    for threads in (1, 2):
        env = dict(os.environ, NUMBA_NUM_THREADS=str(threads))
        out = subprocess.run([sys.executable, "-c", _THREAD_SCRIPT], env=env, capture_output=True,
                             text=True, check=True)
        digests.append(out.stdout.strip())
    assert digests[0] == digests[1] and len(digests[0]) == 64
