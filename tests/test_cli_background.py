"""``icgen background`` end to end: table formats, precision, plots and bad input (issue 2).

The command is run in-process through ``icgen.cli.main`` (fast, output captured) and once
as the installed console script in a subprocess. The physics of the table is tested in
test_background.py; here one row is checked against astropy to make sure the numbers that
reach the file are the right ones.
"""

import os
import shutil
import subprocess
import sys

import numpy as np
import pytest

from icgen import background, parameters
from icgen.cli import main
from icgen.cli.cmd_background import table
from icgen.cli.common import default_params_text
from icgen.cosmology import PLANCK18

HEADER = "a,z,t_gyr,hubble_km_s_mpc,D1,f1,D2,f2"


def _run(capsys, *argv):
    """Run ``icgen background ARGV`` in-process; return (status, stdout, stderr)."""
    status = main(["background", *map(str, argv)])
    out, err = capsys.readouterr()
    return status, out, err


def _read_csv(path):
    lines = path.read_text().splitlines()
    data = np.loadtxt(path, delimiter=",", skiprows=1, ndmin=2)
    return lines, {name: data[:, i] for i, name in enumerate(lines[0].split(","))}


def _significant_digits(text):
    """Significant digits written in a decimal number like -1.06916992977909e-06."""
    mantissa = text.lower().split("e")[0].lstrip("+-").replace(".", "")
    return len(mantissa.lstrip("0"))


# ---- CSV --------------------------------------------------------------------------------------

def test_csv_header_precision_and_values(tmp_path, capsys):
    import astropy.cosmology as ac
    import astropy.units as u

    out = tmp_path / "bg.csv"
    status, stdout, err = _run(capsys, "--out", out, "--points", 50)
    assert status == 0 and err == ""
    assert f"wrote {out}" in stdout
    lines, cols = _read_csv(out)
    assert lines[0] == HEADER  # exactly, no comment marker
    assert len(lines) == 51
    # >= 12 significant digits: every t_gyr and D2 entry (never round numbers) is written with
    # at least 12. And every column is what icgen.background computes (I/O check, not physics),
    # to 1e-9: the command tabulates with its own a_max, so its interpolation nodes differ from
    # the default solve's and the two agree to the table accuracy (~1e-10), not to round-off.
    for line in lines[1:]:
        fields = dict(zip(HEADER.split(","), line.split(",")))
        assert _significant_digits(fields["t_gyr"]) >= 12, line
        assert _significant_digits(fields["D2"]) >= 12, line
    cosmo = parameters.loads(default_params_text()).cosmology
    expected = table(background.solve(cosmo), cols["a"])
    for name in HEADER.split(","):
        np.testing.assert_allclose(cols[name], expected[name], rtol=1e-9, err_msg=name)
    # default grid: 1e-3 <= a <= 1, logarithmic; z = 1/a - 1 (definition)
    np.testing.assert_allclose(cols["a"], np.geomspace(1e-3, 1.0, 50), rtol=1e-14)
    np.testing.assert_allclose(cols["z"], 1.0 / cols["a"] - 1.0, rtol=1e-13, atol=1e-15)
    # The last row is today, in the bundled Planck 2018 example. References:
    # astropy FlatLambdaCDM (massless neutrinos, same Tcmb0/Neff) age(0) and H0; D1(1) = 1 by
    # our normalisation (units.py); f1 within 1% of Omega_m^0.55 (Linder 2005, PRD 72, 043529).
    ref = ac.FlatLambdaCDM(H0=PLANCK18.H0, Om0=PLANCK18.omega_m, Tcmb0=PLANCK18.t_cmb,
                           Neff=PLANCK18.n_eff, m_nu=0.0 * u.eV)
    assert cols["t_gyr"][-1] == pytest.approx(ref.age(0).to_value(u.Gyr), rel=1e-6)  # issue's 1e-6
    assert cols["hubble_km_s_mpc"][-1] == pytest.approx(PLANCK18.H0, rel=1e-14)
    assert cols["D1"][-1] == pytest.approx(1.0, rel=1e-14)
    assert cols["f1"][-1] == pytest.approx(ref.Om0**0.55, rel=0.01)


def test_linear_grid_and_set_override(tmp_path, capsys):
    out = tmp_path / "lin.csv"
    status, _, _ = _run(capsys, "--out", out, "--linear", "--a-min", 0.1, "--a-max", 2.0,
                        "--points", 20, "--set", "cosmology.omega_m=1.0", "--set", "cosmology.t_cmb=0",
                        "--set", "cosmology.h=0.5")
    assert status == 0
    _, cols = _read_csv(out)
    np.testing.assert_allclose(cols["a"], np.linspace(0.1, 2.0, 20), rtol=1e-14)
    # Einstein-de Sitter from the overrides: t = (2/3) a^1.5 / H0, D1 = a (closed forms);
    # 1/H0 for h = 0.5 from the IAU Mpc and the Julian Gyr.
    t_h = 3.0856775814913673e19 / 50.0 / (1e9 * 365.25 * 86400.0)
    np.testing.assert_allclose(cols["t_gyr"], 2.0 / 3.0 * cols["a"] ** 1.5 * t_h, rtol=1e-9)
    np.testing.assert_allclose(cols["D1"], cols["a"], rtol=1e-9)  # solver accuracy ~1e-10


# ---- HDF5 -------------------------------------------------------------------------------------

def test_hdf5_output_with_units(tmp_path, capsys):
    import h5py

    from icgen.cli.cmd_background import COLUMNS

    out = tmp_path / "bg.h5"
    status, _, err = _run(capsys, "--out", out, "--points", 30)
    assert status == 0 and err == ""
    with h5py.File(out, "r") as f:
        assert list(COLUMNS) == HEADER.split(",")
        for name in HEADER.split(","):
            assert f[name].shape == (30,) and f[name].dtype == np.float64
            assert "units" in f[name].attrs
        assert f["t_gyr"].attrs["units"] == "Gyr"
        assert f["hubble_km_s_mpc"].attrs["units"] == "km/s/Mpc"
        assert f["D1"].attrs["units"].startswith("1")
        assert f.attrs["format"] == "icgen.background" and f.attrs["fate"] == "expands_forever"
        # the stored parameters reproduce the run's cosmology (the bundled example's)
        bundled = parameters.loads(default_params_text()).cosmology
        assert parameters.loads(f.attrs["parameters"]).cosmology == bundled
        np.testing.assert_allclose(f["a"][:], np.geomspace(1e-3, 1.0, 30), rtol=1e-14)


# ---- plot -------------------------------------------------------------------------------------

@pytest.mark.parametrize("overrides", [(), ("--set", "cosmology.omega_m=2", "--set", "cosmology.omega_k=-1")],
                         ids=["planck18", "recollapsing"])
def test_plot_is_written(tmp_path, capsys, overrides):
    out, png = tmp_path / "bg.csv", tmp_path / "bg.png"
    status, stdout, _ = _run(capsys, "--out", out, "--points", 20, "--plot", png, *overrides)
    assert status == 0 and f"wrote {png}" in stdout
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG spec, sec. 5.2)
    assert png.stat().st_size > 10_000  # two labelled panels, not an empty canvas


# ---- bad input: one line, status 2, nothing left behind -------------------------------------

BAD_FILES = {
    "unknown key": ("[cosmology]\nsigma8 = 0.8\n", "sigma_8"),
    "negative h": ("[cosmology]\nh = -0.7\n", "[0.05, 2]"),
    "omega_b above omega_m": ("[cosmology]\nomega_m = 0.3\nomega_b = 0.4\n", "omega_b"),
    "no big bang": ("[cosmology]\nomega_m = 0.1\nomega_k = -0.5\n", "no big bang"),
    "not TOML": ("[cosmology\nh = 0.7\n", "not valid TOML"),
}


@pytest.mark.parametrize("case", list(BAD_FILES))
def test_bad_parameter_file_one_line_status_2_no_output(tmp_path, capsys, case):
    text, needle = BAD_FILES[case]
    params = tmp_path / "bad.toml"
    params.write_text(text)
    out, png = tmp_path / "bg.csv", tmp_path / "bg.png"
    status, stdout, err = _run(capsys, params, "--out", out, "--plot", png)
    assert status == 2
    assert err.endswith("\n") and err.count("\n") == 1  # exactly one line
    assert err.startswith("icgen background: error: ") and needle in err
    assert "Traceback" not in err and stdout == ""
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bad.toml"]  # no output, no .partial


@pytest.mark.parametrize("argv, needle", [
    (["--set", "cosmology.omega_m=2", "--set", "cosmology.omega_k=-1", "--a-max", "1.99"],
     "model recollapses"),
    (["--points", "1"], "--points"),
    (["--a-min", "0.5", "--a-max", "0.1"], "--a-min"),
    (["--set", "cosmology.h"], "section.key=value"),
    ([str("missing.toml")], "cannot read parameter file"),
])
def test_bad_options_one_line_status_2(tmp_path, capsys, argv, needle):
    out = tmp_path / "bg.csv"
    status, stdout, err = _run(capsys, *argv, "--out", out)
    assert status == 2 and err.count("\n") == 1 and needle in err and "Traceback" not in err
    assert not out.exists() and list(tmp_path.iterdir()) == []


def test_debug_shows_the_exception(tmp_path):
    params = tmp_path / "bad.toml"
    params.write_text("[cosmology]\nh = -0.7\n")
    with pytest.raises(parameters.ParameterError):
        main(["background", str(params), "--out", str(tmp_path / "bg.csv"), "--debug"])


def test_existing_output_kept_without_overwrite(tmp_path, capsys):
    out = tmp_path / "bg.csv"
    out.write_text("keep me\n")
    status, _, err = _run(capsys, "--out", out, "--points", 10)
    assert status == 2 and err.count("\n") == 1 and "--overwrite" in err
    assert out.read_text() == "keep me\n"
    status, _, _ = _run(capsys, "--out", out, "--points", 10, "--overwrite")
    assert status == 0 and out.read_text().splitlines()[0] == HEADER
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bg.csv"]


# ---- the installed console script --------------------------------------------------------------

def _console_script():
    exe = shutil.which("icgen", path=os.path.dirname(sys.executable)) or shutil.which("icgen")
    if exe is None:  # pragma: no cover - the package is installed in the test environment
        pytest.fail("the icgen console script is not installed next to this Python")
    return exe


def test_console_script_subprocess(tmp_path):
    out = tmp_path / "bg.csv"
    ok = subprocess.run([_console_script(), "background", "--out", str(out), "--points", "10"],
                        capture_output=True, text=True, timeout=120)
    assert ok.returncode == 0, ok.stderr
    assert out.read_text().splitlines()[0] == HEADER
    params = tmp_path / "bad.toml"
    params.write_text("[cosmology]\nsigma8 = 0.8\n")
    bad = subprocess.run([_console_script(), "background", str(params), "--out", str(tmp_path / "x.csv")],
                         capture_output=True, text=True, timeout=120)
    assert bad.returncode == 2 and bad.stderr.count("\n") == 1
    assert "did you mean 'sigma_8'?" in bad.stderr and "Traceback" not in bad.stderr
    assert not (tmp_path / "x.csv").exists()
