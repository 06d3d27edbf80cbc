"""The streamed output path: fields kept as half spectra and made real a block of planes at a time.

These are identities of our own code (no outside reference applies): the block-by-block path
must give the same bytes as the whole-field path, for any block size and any number of lanes,
because the last FFT pass transforms each line on its own and the kernels are the same
arithmetic on one thread or on all of them.
"""

import numpy as np
import pytest

from icgen import background, decomp, field, io_hdf5, lpt, particles
from icgen.cosmology import Cosmology

COSMO = Cosmology(h=0.7, omega_m=0.3, omega_b=0.045, n_s=0.96, sigma_8=0.8)


def _modes(n, box, dtype=np.float64, seed=5):
    return field.linear_density_modes(lambda k: 400.0 * k**-1.5, seed, n, box, dtype=dtype)


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_field_slabs_blocks_equal_the_whole_inverse_transform(dtype):
    n, box = 24, 60.0
    m = _modes(n, box, dtype)
    layout = decomp.Layout(n)
    spec = np.ascontiguousarray(m.delta_k)
    whole = layout.inverse(spec.copy())
    fs = lpt.FieldSlabs([layout.inverse_xy(spec.copy())] * 3, n, 0)
    for i0, i1 in [(0, n), (0, 1), (5, 12), (23, 24)]:
        for workers in (1, 2):
            blocks = fs.real(i0, i1, workers=workers)
            for b in blocks:
                np.testing.assert_array_equal(b, whole[i0:i1])


def test_first_order_blocks_equal_in_memory_particles():
    # particles.at (whole fields, multi-threaded kernels), particle_blocks (blocks, multi-threaded
    # kernels) and fill_block (blocks, single-threaded kernels) give the same bytes.
    n, box = 16, 80.0
    g = particles.StartGrowth.from_background(background.solve(COSMO), 0.02)
    c_pos, c_vel = particles.coefficients(g, 1)
    ref = particles.at(g, lpt.displacements(_modes(n, box), order=1), COSMO.omega_m, np.float64)
    (kinds, fs), = list(lpt.output_fields(_modes(n, box), 1, c_pos, c_vel))
    assert [k for k, _ in kinds] == ["position", "velocity"]
    got = {k: np.empty((n**3, 3)) for k, _ in kinds}
    for kind, row0, block, _ in particles.particle_blocks(fs, kinds, box, np.float64, rows_per_block=3 * n * n):
        got[kind][row0:row0 + block.shape[0]] = block
    lane = {k: np.empty((n**3, 3)) for k, _ in kinds}
    for i0, i1 in particles.block_planes(n, n, 5 * n * n):
        rows = slice(i0 * n * n, i1 * n * n)
        particles.fill_block(fs, kinds, i0, i1, box, {k: lane[k][rows] for k in lane})
    for kind, want in (("position", ref.position), ("velocity", ref.velocity)):
        np.testing.assert_array_equal(got[kind], want)
        np.testing.assert_array_equal(lane[kind], want)


def test_block_planes_cover_the_slab_once():
    for planes, n, rows in [(16, 16, 256 * 3), (7, 8, 1), (5, 4, 10**6)]:
        ranges = particles.block_planes(planes, n, rows)
        covered = [i for i0, i1 in ranges for i in range(i0, i1)]
        assert covered == list(range(planes))
        assert all(i1 - i0 == max(1, rows // (n * n)) for i0, i1 in ranges[:-1])


@pytest.mark.parametrize("order", [1, 2])
def test_file_is_the_same_for_one_and_two_lanes(tmp_path, monkeypatch, order):
    # The lane count follows the FFT workers of the field; blocks are written in any order and
    # their CRC-32s combined in row order, so the file's bytes and checksums cannot depend on it.
    n, box = 16, 80.0
    g = particles.StartGrowth.from_background(background.solve(COSMO), 0.02)
    c_pos, c_vel = particles.coefficients(g, order)
    monkeypatch.setattr(io_hdf5, "_BLOCK_ROWS", 2 * n * n)  # eight blocks per field
    files = []
    for workers in (1, 2):
        out = tmp_path / f"w{workers}.h5"
        fields = lpt.output_fields(_modes(n, box), order, c_pos, c_vel, workers=workers)
        io_hdf5.write_particles_streamed(out, g, fields, n, box, order, 1.0, np.float32, True, "", COSMO, 5)
        assert io_hdf5.verify_file(out, full=True) == []   # stored CRC-32s equal the data's
        files.append(io_hdf5.read_particles(out)[1])
    for k in files[0]:
        np.testing.assert_array_equal(files[0][k], files[1][k])


def test_lanes_follow_the_fields_workers():
    fs = lpt.FieldSlabs([np.zeros((4, 4, 3), np.complex64)] * 3, 4, 0, workers=3)
    assert io_hdf5._lanes_for(fs) == 3
    fs.workers = None
    assert io_hdf5._lanes_for(fs) >= 1


def test_page_prefetch_leaves_the_contents_alone(tmp_path):
    # MADV_POPULATE_WRITE only creates pages; bytes already in the file (or written meanwhile)
    # must read back unchanged, and the prefetch must close its descriptor when it stops.
    import os

    path = tmp_path / "f.bin"
    data = np.random.default_rng(1).integers(0, 256, size=3 * io_hdf5._PagePrefetch.WINDOW + 12345, dtype=np.uint8)
    path.write_bytes(data.tobytes())
    fd = os.open(path, os.O_RDWR)
    try:
        before = len(os.listdir("/proc/self/fd")) if os.path.isdir("/proc/self/fd") else None
        pf = io_hdf5._PagePrefetch(os.dup(fd), 5000, data.size - 5000)
        os.pwrite(fd, b"\x07" * 100, 7000)  # a write beside the prefetch
        pf.stop()
        if before is not None:
            assert len(os.listdir("/proc/self/fd")) == before   # its duplicate is closed again
    finally:
        os.close(fd)
    want = data.copy()
    want[7000:7100] = 7
    np.testing.assert_array_equal(np.frombuffer(path.read_bytes(), dtype=np.uint8), want)
