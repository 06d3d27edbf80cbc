"""icgen inspect (initial-condition files) and icgen check-run (a run's snapshots)."""

import shutil

import h5py
import numpy as np
import pytest

from icgen import background, field, io_snapshot, lpt, verify
from icgen.cli import main
from icgen.cosmology import PLANCK18
from icgen.errors import InputError

PARAMS = """
[cosmology]
h = 0.6766
omega_m = 0.3111
omega_b = 0.04897
n_s = 0.9665
sigma_8 = 0.8102

[spectrum]
source = "eisenstein_hu"

[box]
size = {box}
particles_per_side = {n}

[start]
redshift = 49.0
lpt_order = 2

[phases]
seed = 20261201
fixed_amplitude = {fixed}

[snapshots]
a_end = 1.0
extra_redshifts = [9.0, 1.0]

[steps]
count = 60
"""


def _make_ics(tmp_path, n, box, fixed, name):
    par = tmp_path / f"{name}.toml"
    par.write_text(PARAMS.format(n=n, box=box, fixed="true" if fixed else "false"))
    out = tmp_path / f"{name}.h5"
    assert main(["ics", str(par), "--out", str(out), "--quiet"]) == 0
    return par, out


@pytest.fixture(scope="module")
def ics64(tmp_path_factory):
    # icgen's own 64^3 file: the bundled example's set-up (100 Mpc/h, Gaussian amplitudes).
    return _make_ics(tmp_path_factory.mktemp("ics64"), 64, 100.0, False, "ics64")


def _statuses(checks):
    return {c.name: c.status for c in checks}


@pytest.mark.slow
def test_inspect_passes_icgen_256_file(tmp_path, capsys):
    """A 256^3 file (100 Mpc/h, z = 49, Gaussian amplitudes) passes every check.

    Regression: with errors P/sqrt(n_modes) alone, its many modes (0.2% errors near
    k = 4 h/Mpc) made the first non-linear correction of the displaced lattice (+2.4%,
    where Delta^2 = 2%) fail the P(k) check (p = 5e-4). The systematic share of
    icgen.verify's notes covers it; a 10% amplitude error still fails (test above)."""
    _, path = _make_ics(tmp_path, 256, 100.0, False, "ics256")
    assert main(["inspect", str(path)]) == 0
    out = capsys.readouterr().out
    assert "PASS  P(k)" in out and "verdict: PASS" in out


# ---------------------------------------------------------------------------------------
# icgen inspect
# ---------------------------------------------------------------------------------------
def test_inspect_passes_icgen_64_file(ics64, capsys, tmp_path):
    _, path = ics64
    assert main(["inspect", str(path), "--plot", str(tmp_path / "p.png")]) == 0
    out = capsys.readouterr().out
    print(out)
    assert "verdict: PASS (12 passed, 0 skipped)" in out  # 11 physics/layout checks + integrity
    assert "PASS  integrity" in out
    assert (tmp_path / "p.png").stat().st_size > 10_000


def test_inspect_passes_icgen_128_fixed_amplitude_file(tmp_path, capsys):
    # 128^3 in 200 Mpc/h with fixed amplitudes: the displacement variance has no realisation
    # scatter, so that check is at its tightest (second-order allowance only).
    _, path = _make_ics(tmp_path, 128, 200.0, True, "ics128")
    assert main(["inspect", str(path)]) == 0
    out = capsys.readouterr().out
    print(out)
    assert "verdict: PASS (12 passed, 0 skipped)" in out  # 11 physics/layout checks + integrity
    assert "PASS  integrity" in out


def _corrupt(src, tmp_path, name, edit):
    dst = tmp_path / name
    shutil.copy(src, dst)
    with h5py.File(dst, "r+") as f:
        edit(f)
    return dst


def test_inspect_flags_a_wrong_particle_mass(ics64, tmp_path, capsys):
    def edit(f):
        f.attrs["particle_mass"] = f.attrs["particle_mass"] * 1.01
    bad = _corrupt(ics64[1], tmp_path, "mass.h5", edit)
    assert main(["inspect", str(bad)]) == 1
    out = capsys.readouterr().out
    assert "FAIL  particle mass" in out and "off by a factor 1.01" in out
    assert "verdict: FAIL (1 failed: particle mass" in out


def test_inspect_flags_a_missing_dataset(ics64, tmp_path, capsys):
    def edit(f):
        del f["particles/velocity"]
    bad = _corrupt(ics64[1], tmp_path, "novel.h5", edit)
    assert main(["inspect", str(bad)]) == 1
    out = capsys.readouterr().out
    assert "FAIL  layout" in out and "missing dataset(s) /particles/velocity" in out
    assert "skip  velocities" in out


def test_inspect_flags_an_amplitude_scaled_by_1_1(ics64, tmp_path, capsys):
    # Displacements and velocities 1.1 times too large (as if sigma_8 were 10% high): P(k) is
    # 1.21 times the target; with ~8500 modes (Gaussian error of the amplitude ~0.3%) that is
    # far outside cosmic variance.
    def edit(f):
        n = int(f.attrs["grid_per_side"])
        box = float(f.attrs["box_size"])
        pos = f["particles/position"][...].astype(np.float64)
        ids = f["particles/id"][...].astype(np.int64)
        q = np.stack([ids // (n * n), (ids // n) % n, ids % n], axis=1) * (box / n)
        d = pos - q
        d -= box * np.floor(d / box + 0.5)
        new = (q + 1.1 * d) % box
        new[new >= box] = 0.0
        f["particles/position"][...] = new.astype(np.float32)
        f["particles/velocity"][...] = f["particles/velocity"][...] * np.float32(1.1)
    bad = _corrupt(ics64[1], tmp_path, "amp.h5", edit)
    attrs, data = verify_read(bad)
    from icgen.cli.cmd_inspect import target_for

    _, bg, pk, _ = target_for(attrs)
    res = verify.inspect_initial_conditions(attrs, data, bg, pk)
    assert _statuses(res.checks)["P(k)"] == "fail"
    assert res.amplitude_ratio == pytest.approx(1.1, abs=0.015)  # ~4 Gaussian sigma of the ratio
    assert main(["inspect", str(bad)]) == 1
    out = capsys.readouterr().out
    assert "FAIL  P(k)" in out and "amplitude ratio 1.1" in out


def verify_read(path):
    from icgen.cli.cmd_inspect import read_file

    return read_file(path)


def test_inspect_mean_displacement_flags_a_shift(ics64, tmp_path):
    # A uniform shift of every particle by 1e-3 of the spacing is a bug the k = 0 mode cannot
    # make (its displacement is zero by construction, icgen.field).
    attrs, data = verify_read(ics64[1])
    spacing = attrs["box_size"] / attrs["grid_per_side"]
    data = dict(data, position=((data["position"] + np.float32(1e-3 * spacing)) % np.float32(attrs["box_size"])))
    res = verify.inspect_initial_conditions(attrs, data)
    assert _statuses(res.checks)["mean displacement"] == "fail"


def test_inspect_refuses_nothing_but_reports_a_foreign_file(tmp_path, capsys):
    path = tmp_path / "other.h5"
    with h5py.File(path, "w") as f:
        f.create_dataset("x", data=np.zeros(3))
    assert main(["inspect", str(path)]) == 1
    out = capsys.readouterr().out
    assert "format = None, expected 'icgen.particles'" in out


# ---------------------------------------------------------------------------------------
# check_run on synthetic linear snapshots
# ---------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def linear_run():
    # Zel'dovich snapshots of one field at several a with a tiny amplitude: exact linear
    # growth of the displacement, x = q + D1 psi, v = a H f1 D1 psi (Zel'dovich 1970), so the
    # density grows as D1 up to second order in the (1e-3) amplitude.
    bg = background.solve(PLANCK18)
    n, box = 32, 400.0
    modes = field.linear_density_modes(lambda k: 1e3 * k / (1 + (k / 0.02) ** 2) ** 1.5, 3, n, box)
    psi = np.moveaxis(np.asarray(lpt.displacements(modes, order=1).psi_1, dtype=np.float64), 0, -1).reshape(-1, 3)
    q = np.indices((n, n, n), dtype=np.float64).reshape(3, -1).T * (box / n)
    scale = 1e-3 / np.sqrt(np.mean(psi**2)) * (box / n)  # rms displacement 1e-3 spacing at a = 1

    def snap(a, amp=1.0, t_shift=0.0, vel=True):
        d = amp * scale * bg.D1(a) * psi
        x = (q + d) % box
        v = a * 100.0 * bg.E(a) * bg.f1(a) * d if vel else None
        return io_snapshot.SnapshotData(position=x, velocity=v, box_size=box, a=a, time_gyr=bg.t(a) + t_shift,
                                        source=f"a={a}")
    return bg, snap


def test_check_run_passes_linear_snapshots(linear_run):
    bg, snap = linear_run
    res = verify.check_run([snap(0.5), snap(0.02), snap(0.1), snap(1.0)], bg)
    for c in res.checks:
        print(c.status, c.name, c.detail)
    assert res.passed and [c.status for c in res.checks] == ["pass", "pass", "pass"]
    np.testing.assert_allclose(res.a, [0.02, 0.1, 0.5, 1.0])   # sorted by a
    # linear theory exactly, to second order in the 1e-3 displacement amplitude
    assert np.abs(res.growth_error).max() < 1e-3
    assert np.nanmax(np.abs(res.f / res.f_expected[:, None] - 1)) < 1e-3


def test_check_run_flags_wrong_growth_velocity_and_time(linear_run):
    bg, snap = linear_run
    res = verify.check_run([snap(0.02), snap(0.1), snap(1.0, amp=1.05)], bg)
    assert _statuses(res.checks)["growth"] == "fail"           # P 10% high at a = 1 (tol ~1%)
    res = verify.check_run([snap(0.02), snap(0.1, t_shift=0.05)], bg)
    assert _statuses(res.checks)["time"] == "fail"             # 0.05 Gyr > 1e-3 x age
    res = verify.check_run([snap(0.02, vel=False), snap(0.1, vel=False)], bg)
    assert _statuses(res.checks)["velocities"] == "skip"


def test_check_run_refuses_bad_input(linear_run):
    bg, snap = linear_run
    with pytest.raises(InputError, match="at least two"):
        verify.check_run([snap(0.1)], bg)
    other = io_snapshot.SnapshotData(position=snap(0.1).position, velocity=None, box_size=300.0, a=0.2,
                                     time_gyr=None, source="other")
    with pytest.raises(InputError, match="differ"):
        verify.check_run([snap(0.1), other], bg)
    with pytest.raises(InputError, match="n_bins"):
        verify.check_run([snap(0.1), snap(0.2)], bg, n_bins=0)


def test_check_run_reads_a_foreign_layout(linear_run, tmp_path, capsys):
    # Any HDF5 file: the options name the positions dataset, the box and the scale factor.
    bg, snap = linear_run
    paths = []
    for i, a in enumerate((0.05, 0.5)):
        s = snap(a)
        p = tmp_path / f"out{i}.h5"
        with h5py.File(p, "w") as f:
            f.create_dataset("data/pos", data=s.position)
            f.attrs["expansion"] = a
        paths.append(str(p))
    par = tmp_path / "p.toml"
    par.write_text(PARAMS.format(n=32, box=400.0, fixed="false"))
    assert main(["check-run", *paths, "--positions", "data/pos"]) == 2      # no box size, named
    assert "--box-size" in capsys.readouterr().err
    rc = main(["check-run", *paths, "--positions", "data/pos", "--box-size", "400", "--scale-factor-attr",
               "expansion", "--params", str(par), "--plot", str(tmp_path / "c.png")])
    out = capsys.readouterr().out
    print(out)
    assert rc == 0 and "skip  velocities" in out and "skip  time" in out
    assert (tmp_path / "c.png").exists()


# ---------------------------------------------------------------------------------------
# The command line end to end: ics -> schedule -> pm-evolve -> check-run
# ---------------------------------------------------------------------------------------
def test_cli_end_to_end_with_correct_and_weakened_kicks(tmp_path, capsys):
    par, ics = _make_ics(tmp_path, 32, 500.0, True, "run")
    assert main(["schedule", str(par), "--out-dir", str(tmp_path / "sched")]) == 0
    for scale, want in (("1.0", 0), ("0.9", 1)):
        out_dir = tmp_path / f"run{scale}"
        assert main(["pm-evolve", str(ics), "--steps", str(tmp_path / "sched"), "--out-dir", str(out_dir),
                     "--quiet", "--kick-scale", scale]) == 0
        snaps = sorted(str(p) for p in out_dir.glob("snapshot_*.h5"))
        assert len(snaps) == 4  # the start and the outputs at z = 9, 1, 0
        capsys.readouterr()
        assert main(["check-run", *snaps]) == want
        out = capsys.readouterr().out
        print(out)
        assert ("verdict: PASS" if want == 0 else "verdict: FAIL") in out


def test_inspect_mesh_falls_back_to_the_particle_grid_when_memory_is_short():
    # The interlaced estimator holds ~26 n_mesh^3 bytes (a float64 mesh and two complex128 half
    # spectra, icgen.power.mesh_modes); a 512^3 file's default mesh of 1024^3 needed more than
    # this 24 GB machine has (the run was killed), so inspect falls back to the particle grid.
    from icgen.cli.cmd_inspect import default_mesh

    data = 4.3e9  # 512^3 positions, velocities (float32) and ids
    assert default_mesh(512, data, None) == 1024            # unknown memory: the default
    assert default_mesh(512, data, 23e9) == 512             # 28 GB + data would not fit
    assert default_mesh(512, data, 64e9) == 1024
    assert default_mesh(64, 2.1e6, 23e9) == 128


def test_a_coarser_mesh_compares_up_to_a_quarter_of_its_nyquist(ics64, capsys):
    # Half the particle Nyquist wavenumber with the default mesh (twice the grid) is a quarter of
    # the mesh's; with a mesh equal to the grid the comparison stops at a quarter of its Nyquist
    # (100 Mpc/h, 64^3: pi 64 / 400 = 0.503 h/Mpc, against 1.005 with the default mesh), in bins
    # of width k_f = 0.0628 h/Mpc whose last edge stays below it: 7 bins to 0.471, 15 to 0.974.
    _, path = ics64
    assert main(["inspect", str(path), "--mesh", "64"]) == 0
    out = capsys.readouterr().out
    assert "PASS  P(k)                   7 bins k = 0.0314..0.471 h/Mpc" in out, out
    assert main(["inspect", str(path)]) == 0
    out = capsys.readouterr().out
    assert "PASS  P(k)                   15 bins k = 0.0314..0.974 h/Mpc" in out, out
