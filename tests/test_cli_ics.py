"""The ics, advise-start and run commands end to end (small grids)."""

import json
import subprocess
import sys

import h5py
import numpy as np
import pytest

from icgen import parameters
from icgen.cli import main
from icgen.units import RHO_CRIT_100

SMALL = ["--set", "box.particles_per_side=16", "--set", "box.size=50.0"]


def _run(argv, capsys):
    code = main(argv)
    out = capsys.readouterr()
    return code, out.out, out.err


def test_ics_file_layout_and_contents(tmp_path, capsys):
    out = tmp_path / "ics.h5"
    code, stdout, _ = _run(["ics", "--out", str(out), "--quiet"] + SMALL, capsys)
    assert code == 0 and "wrote" in stdout
    with h5py.File(out, "r") as f:
        a = dict(f.attrs)
        for key in ("format", "format_version", "created_by", "parameters", "cosmology", "box_size",
                    "scale_factor", "redshift", "grid_per_side", "n_particles", "particle_mass",
                    "lpt_order", "seed", "D1", "f1", "D2", "f2", "H"):
            assert key in a, key
        assert a["format"] == "icgen.particles" and a["grid_per_side"] == 16 and a["n_particles"] == 16**3
        cosmo = json.loads(a["cosmology"])
        # m = Omega_m rho_crit L^3 / N^3 (rho_crit,0 for h = 1 from icgen.units, checked against
        # astropy in test_particles.py).
        assert a["particle_mass"] == pytest.approx(cosmo["omega_m"] * RHO_CRIT_100 * 50.0**3 / 16**3, rel=1e-12)
        assert a["redshift"] == pytest.approx(49.0) and a["scale_factor"] == pytest.approx(0.02)
        pos, vel, ids = f["particles/position"][...], f["particles/velocity"][...], f["particles/id"][...]
        for name in ("position", "velocity", "id"):
            assert f[f"particles/{name}"].attrs["units"]
    assert pos.shape == (16**3, 3) and pos.dtype == np.float32 and vel.dtype == np.float32
    assert pos.min() >= 0 and pos.max() < 50.0
    np.testing.assert_array_equal(ids, np.arange(16**3, dtype=np.uint64))
    # The stored parameters reproduce the run (they parse and name the same grid).
    p = parameters.loads(a["parameters"])
    assert p.get("box", "particles_per_side") == 16 and p.get("box", "size") == 50.0


def test_same_parameters_give_identical_files_and_rerun_from_stored_parameters(tmp_path, capsys):
    first, second, third = tmp_path / "a.h5", tmp_path / "b.h5", tmp_path / "c.h5"
    assert _run(["ics", "--out", str(first), "--quiet", "--workers", "1"] + SMALL, capsys)[0] == 0
    assert _run(["ics", "--out", str(second), "--quiet", "--workers", "2"] + SMALL, capsys)[0] == 0
    with h5py.File(first, "r") as f:
        stored = f.attrs["parameters"]
    (tmp_path / "stored.toml").write_text(stored)
    assert _run(["ics", str(tmp_path / "stored.toml"), "--out", str(third), "--quiet"], capsys)[0] == 0
    with h5py.File(first) as f1, h5py.File(second) as f2, h5py.File(third) as f3:
        for name in ("position", "velocity", "id"):
            a = f1[f"particles/{name}"][...]
            np.testing.assert_array_equal(a, f2[f"particles/{name}"][...])
            np.testing.assert_array_equal(a, f3[f"particles/{name}"][...])


def test_first_order_velocities_and_resolution_consistency(tmp_path, capsys):
    # 1LPT: v = a H f1 (x - q) exactly (up to float32 storage); the file's D1, f1, H give it.
    out = tmp_path / "z.h5"
    argv = ["ics", "--out", str(out), "--quiet", "--set", "start.lpt_order=1",
            "--set", "output.precision=\"float64\""] + SMALL
    assert _run(argv, capsys)[0] == 0
    with h5py.File(out) as f:
        a, H, f1, h = f.attrs["scale_factor"], f.attrs["H"], f.attrs["f1"], json.loads(f.attrs["cosmology"])["h"]
        pos, vel = f["particles/position"][...], f["particles/velocity"][...]
    n, box = 16, 50.0
    q = np.stack(np.meshgrid(*(np.arange(n) * box / n,) * 3, indexing="ij"), -1).reshape(-1, 3)
    d = pos - q
    d -= box * np.rint(d / box)
    np.testing.assert_allclose(vel, a * H / h * f1 * d, rtol=0, atol=1e-9 * np.abs(vel).max())


def test_bad_input_exits_2_with_one_line_and_no_file(tmp_path, capsys):
    out = tmp_path / "bad.h5"
    for extra in (["--set", "box.particles_per_side=15"], ["--set", "start.lpt_order=3"],
                  ["--set", "phases.sead=1"], ["--set", "box.size=-1"]):
        code, stdout, err = _run(["ics", "--out", str(out), "--quiet"] + extra, capsys)
        assert code == 2, extra
        assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
        assert not out.exists() and not list(tmp_path.iterdir())
    # An existing output is not replaced without --overwrite.
    out.write_text("keep")
    code, _, err = _run(["ics", "--out", str(out), "--quiet"] + SMALL, capsys)
    assert code == 2 and "--overwrite" in err and out.read_text() == "keep"


def test_advise_start_and_auto_start(tmp_path, capsys):
    code, stdout, _ = _run(["advise-start", "--out", str(tmp_path / "adv.csv")] + SMALL, capsys)
    assert code == 0 and "recommended start" in stdout
    table = np.genfromtxt(tmp_path / "adv.csv", delimiter=",", names=True)
    assert np.all(np.diff(table["sigma_delta"]) < 0)  # decreases with z (D1 decreases)
    out = tmp_path / "auto.h5"
    code, stdout, _ = _run(["ics", "--out", str(out), "--quiet", "--set", "start.redshift=\"auto\""] + SMALL,
                           capsys)
    assert code == 0
    with h5py.File(out) as f:
        rule = json.loads(f.attrs["start_rule"])
        assert f.attrs["redshift"] == pytest.approx(rule["z_start_2lpt"], rel=1e-9)


def test_run_makes_a_complete_directory(tmp_path, capsys):
    out_dir = tmp_path / "run"
    code, stdout, _ = _run(["run", "--out-dir", str(out_dir), "--quiet"] + SMALL, capsys)
    assert code == 0
    names = {p.name for p in out_dir.iterdir()}
    assert {"ics.h5", "parameters.toml", "report.txt", "pk_start.png", "schedule.png", "steps.csv",
            "outputs.csv", "output_scale_factors.txt"} <= names
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]  # no temporary left
    a_out = np.loadtxt(out_dir / "output_scale_factors.txt")
    assert a_out[-1] == 1.0 and np.all(np.diff(a_out) > 0)
    # A second run refuses to replace it without --overwrite.
    code, _, err = _run(["run", "--out-dir", str(out_dir), "--quiet"] + SMALL, capsys)
    assert code == 2 and "--overwrite" in err


def test_console_script_runs(tmp_path):
    # The installed entry point (pyproject [project.scripts]) in a fresh process.
    out = tmp_path / "s.h5"
    res = subprocess.run([sys.executable, "-m", "icgen.cli", "ics", "--out", str(out), "--quiet"] + SMALL,
                         capture_output=True, text=True)
    assert res.returncode == 0, res.stderr
    with h5py.File(out) as f:
        assert f.attrs["n_particles"] == 16**3 and f["particles/position"].shape == (16**3, 3)


def test_inspect_verifies_stored_checksums(tmp_path, capsys):
    # Issue 8: the checksum of each dataset is stored and `icgen inspect` verifies it.
    out = tmp_path / "ics.h5"
    assert _run(["ics", "--out", str(out), "--quiet"] + SMALL, capsys)[0] == 0
    code, stdout, _ = _run(["inspect", str(out)], capsys)
    assert code == 0 and "PASS  integrity" in stdout
    with h5py.File(out, "r+") as f:
        f["particles/velocity"][7, 2] *= 1.0001  # one value, far below what the physics checks see
    code, stdout, _ = _run(["inspect", str(out)], capsys)
    assert code == 1 and "FAIL  integrity" in stdout and "velocity: checksum mismatch" in stdout
