"""Tests of icgen.io_input (tables, the [spectrum] section) and the ``icgen spectrum`` command."""

import csv
import dataclasses
import warnings
from pathlib import Path

import numpy as np
import pytest

from icgen import background, io_input, parameters, spectrum
from icgen.cli import main
from icgen.cosmology import PLANCK18
from icgen.errors import ParameterError, TableError

REPO = Path(__file__).resolve().parents[1]
DATA = Path(__file__).parent / "data"
EXAMPLE = REPO / "parameter_files" / "spectrum_from_table.toml"


@pytest.fixture(scope="module")
def bg18():
    return background.solve(PLANCK18)


@pytest.fixture(scope="module")
def eh18(bg18):
    return spectrum.from_eisenstein_hu(PLANCK18, bg18)


def write(tmp_path, text, name="pk.txt"):
    p = tmp_path / name
    p.write_text(text)
    return p


def good_rows(eh, k=None, sep=" "):
    k = np.geomspace(1e-4, 50, 60) if k is None else k
    return "\n".join(f"{kk:.10e}{sep}{pp:.10e}" for kk, pp in zip(k, eh.P(k)))


# --------------------------------------------------------------------------------------
# Reading
# --------------------------------------------------------------------------------------
def test_read_whitespace_comma_comments(tmp_path, eh18):
    k = np.geomspace(1e-3, 10, 20)
    p = eh18.P(k)
    text = "# k P\n\n" + "\n".join(f"  {a:.12e}\t{b:.12e}   # row {i}" for i, (a, b) in enumerate(zip(k, p)))
    t = io_input.read_spectrum_table(write(tmp_path, text))
    np.testing.assert_allclose(t.k, k, rtol=1e-12)
    np.testing.assert_allclose(t.value, p, rtol=1e-12)
    assert t.line[0] == 3 and t.line[-1] == 22
    text = "# k, extra, P\n" + "\n".join(f"{a:.12e}, 7, {b:.12e}" for a, b in zip(k, p))
    t = io_input.read_spectrum_table(write(tmp_path, text, "c.csv"), columns=(0, 2))
    np.testing.assert_allclose(t.value, p, rtol=1e-12)


def test_read_converts_inverse_mpc(tmp_path):
    # k in 1/Mpc -> k/h in h/Mpc; P in Mpc^3 -> P h^3 in (Mpc/h)^3 (unit definitions).
    h = 0.7
    k = np.geomspace(1e-3, 1, 10)
    P = 1e4 * k**-1.5
    path = write(tmp_path, "\n".join(f"{float(a)!r} {float(b)!r}" for a, b in zip(k, P)))
    t = io_input.read_spectrum_table(path, k_unit="1/Mpc", h=h)
    np.testing.assert_allclose(t.k, k / h, rtol=1e-15)
    np.testing.assert_allclose(t.value, P * h**3, rtol=1e-15)
    t = io_input.read_spectrum_table(path, quantity="transfer", k_unit="1/Mpc", h=h)
    np.testing.assert_allclose(t.value, P, rtol=1e-15)  # T is dimensionless
    with pytest.raises(ParameterError, match="h"):
        io_input.read_spectrum_table(path, k_unit="1/Mpc")


ROWS = ["1e-3 10.0", "1e-2 100.0", "1e-1 50.0", "1e0 5.0", "1e1 0.1"]


@pytest.mark.parametrize("rows, bad_line, words", [
    # NaN / inf
    (["1e-3 10", "1e-2 nan", *ROWS[2:]], 2, ["P(k) = nan", "not a finite number"]),
    (["1e-3 10", "inf 5", *ROWS[2:]], 2, ["k = inf"]),
    # negative and zero P, negative k
    ([*ROWS[:3], "1e0 -5.0", ROWS[4]], 4, ["P(k) = -5.0 is negative"]),
    ([*ROWS[:3], "1e0 0", ROWS[4]], 4, ["is zero"]),
    (["-1e-3 10", *ROWS[1:]], 1, ["k = -0.001 must be positive"]),
    # non-increasing k (descending and duplicate)
    ([ROWS[0], ROWS[2], ROWS[1], *ROWS[3:]], 3, ["does not increase", "previous row, line 3"]),
    ([ROWS[0], ROWS[1], ROWS[1], *ROWS[3:]], 3, ["does not increase"]),
    # wrong column count
    ([*ROWS[:2], "1e-1 50.0 3.0", *ROWS[3:]], 3, ["3 columns", "first data row (line 2) has 2"]),
    # not a number, empty field
    ([*ROWS[:2], "1e-1 fifty", *ROWS[3:]], 3, ["'fifty' is not a number"]),
    (["k P", *ROWS], 1, ["'k' is not a number", "'#'"]),
    (["1e-3, 10", "1e-2,,", *ROWS[2:]], 2, []),
])
def test_bad_tables_name_file_line_problem(tmp_path, rows, bad_line, words):
    # Acceptance: every bad table gives an error naming the file, the line and the problem.
    # (The file starts with a comment line, so row i is on line i + 1.)
    path = write(tmp_path, "# a comment line\n" + "\n".join(rows) + "\n", "bad_table.txt")
    with pytest.raises(TableError) as exc:
        io_input.read_spectrum_table(path)
    msg = str(exc.value)
    assert "bad_table.txt" in msg and f"line {bad_line + 1}" in msg, msg
    for w in words:
        assert w in msg, msg


def test_one_row_and_too_few_rows(tmp_path):
    path = write(tmp_path, "# header\n0.1 100\n", "one_row.txt")
    with pytest.raises(TableError, match=r"one_row.txt: 1 data row\(s\) \(line 2\).*at least 4"):
        io_input.read_spectrum_table(path)
    path = write(tmp_path, "# only comments\n\n", "empty.txt")
    with pytest.raises(TableError, match="empty.txt: 0 data row"):
        io_input.read_spectrum_table(path)


def test_columns_out_of_range_and_unreadable(tmp_path):
    path = write(tmp_path, "\n".join(ROWS), "two_cols.txt")
    with pytest.raises(TableError, match=r"two_cols.txt, line 1: 2 column\(s\), but columns = \[0, 3\]"):
        io_input.read_spectrum_table(path, columns=(0, 3))
    with pytest.raises(TableError, match="cannot read table"):
        io_input.read_spectrum_table(tmp_path / "missing.txt")
    binary = tmp_path / "bin.dat"
    binary.write_bytes(b"0.1 1\n\xff\xfe\x00\x01\n")
    with pytest.raises(TableError, match=r"bin.dat, line 2: not UTF-8"):
        io_input.read_spectrum_table(binary)


def test_negative_transfer_hint(tmp_path):
    path = write(tmp_path, "\n".join(f"{k} {-1.0 / (1 + k)}" for k in (1e-3, 1e-2, 1e-1, 1.0)), "t.txt")
    with pytest.raises(TableError, match="multiply it by -1"):
        io_input.read_spectrum_table(path, quantity="transfer")


# --------------------------------------------------------------------------------------
# spectrum_from_parameters
# --------------------------------------------------------------------------------------
def params_for(tmp_path, spectrum_lines, cosmo_lines="sigma_8 = 0.8102", box=True):
    text = f"[cosmology]\n{cosmo_lines}\n\n[spectrum]\n{spectrum_lines}\n"
    if box:
        text += "\n[box]\nsize = 100.0\nparticles_per_side = 64\n"
    p = tmp_path / "run.toml"
    p.write_text(text)
    return parameters.load(p)


def test_table_from_parameter_file_relative_path(tmp_path, bg18, eh18):
    sub = tmp_path / "tables"
    sub.mkdir()
    write(sub, good_rows(eh18), "pk.txt")
    params = params_for(tmp_path, 'source = "table"\ntable = "tables/pk.txt"')
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # the table covers the box range: no warning
        spec = io_input.spectrum_from_parameters(params, bg18)
    assert spec.normalisation == "sigma_8" and "pk.txt" in spec.label
    assert spec.sigma_8 == pytest.approx(0.8102, rel=1e-12)
    # At the table's nodes P is the tabulated value times one constant (the sigma_8
    # renormalisation; the spline passes through the nodes): exact up to the 11 significant
    # digits good_rows writes (5e-11 per value).
    k = np.geomspace(1e-4, 50, 60)
    ratio = spec.P(k) / eh18.P(k)
    np.testing.assert_allclose(ratio, ratio[0], rtol=2e-10)


def test_transfer_table_and_a_s(tmp_path, bg18):
    cosmo = dataclasses.replace(PLANCK18, sigma_8=None, a_s=2.1e-9)
    bg = background.solve(cosmo)
    eh = spectrum.from_eisenstein_hu(cosmo, bg)
    k = np.exp(eh.ln_k[3000:11000:4])
    t = spectrum.eisenstein_hu_transfer(k, cosmo)
    write(tmp_path, "\n".join(f"{float(a)!r} {float(b)!r}" for a, b in zip(k, t)), "t.txt")
    params = params_for(tmp_path, 'source = "table"\ntable = "t.txt"\nquantity = "transfer"',
                        cosmo_lines="a_s = 2.1e-9")
    spec = io_input.spectrum_from_parameters(params, bg)
    # Same T(k) and A_s as the EH source: same P(k) (the a_s formula is shared).
    np.testing.assert_allclose(spec.P(k), eh.P(k), rtol=1e-12)
    write(tmp_path, "\n".join(f"{float(a)!r} {float(2 * b)!r}" for a, b in zip(k, t)), "t2.txt")
    params = params_for(tmp_path, 'source = "table"\ntable = "t2.txt"\nquantity = "transfer"',
                        cosmo_lines="a_s = 2.1e-9")
    with pytest.warns(UserWarning, match=r"t2.txt, line 1: T\(k = .*must be normalised"):
        io_input.spectrum_from_parameters(params, bg)


def test_k_range_far_too_short(tmp_path, bg18, eh18):
    # Acceptance: a table covering too short a k range gives a clear error (sigma_8
    # normalisation) or warning (own amplitude), naming the file and the problem.
    write(tmp_path, good_rows(eh18, np.geomspace(0.05, 0.2, 20)), "short.txt")
    params = params_for(tmp_path, 'source = "table"\ntable = "short.txt"')
    with pytest.raises(TableError, match=r"short.txt \(data lines 1-20\).*far too short"):
        io_input.spectrum_from_parameters(params, bg18)
    free = dataclasses.replace(PLANCK18, sigma_8=None, a_s=2.1e-9)
    params = params_for(tmp_path, 'source = "table"\ntable = "short.txt"', cosmo_lines="a_s = 2.1e-9")
    with pytest.warns(spectrum.SpectrumExtrapolationWarning, match=r"short.txt.*of sigma_8\^2"):
        io_input.spectrum_from_parameters(params, background.solve(free))


def test_box_range_warning_and_refusal(tmp_path, bg18, eh18):
    # A table ending at k = 1 h/Mpc does not cover the 100 Mpc/h, 64^3 box
    # (needs 0.0314 - 3.48 h/Mpc): the caller's warn_if_extrapolating names the range;
    # extrapolate = false refuses the table.
    write(tmp_path, good_rows(eh18, np.geomspace(1e-4, 1.0, 80)), "to1.txt")
    params = params_for(tmp_path, 'source = "table"\ntable = "to1.txt"')
    with pytest.warns(spectrum.SpectrumExtrapolationWarning, match="0.00183 of sigma_8"):
        spec = io_input.spectrum_from_parameters(params, bg18)  # k > 1 holds 0.18% of sigma_8^2
    with pytest.warns(spectrum.SpectrumExtrapolationWarning, match=r"\[0.03142, 3.482\] h/Mpc.*to1.txt"):
        spec.warn_if_extrapolating(*spectrum.required_k_range(100.0, 64))
    params = params_for(tmp_path, 'source = "table"\ntable = "to1.txt"\nextrapolate = false')
    with pytest.raises(TableError, match=r"needs P\(k\) over \[0.03142, 3.482\].*to1.txt.*extrapolate = false"):
        with pytest.warns(spectrum.SpectrumExtrapolationWarning, match="of sigma_8"):
            io_input.spectrum_from_parameters(params, bg18)


def test_analytic_sources_from_parameters(tmp_path, bg18):
    spec = io_input.spectrum_from_parameters(params_for(tmp_path, 'source = "eisenstein_hu"'), bg18)
    assert spec.source == "eisenstein_hu" and spec.sigma_8 == pytest.approx(0.8102, rel=1e-12)
    spec = io_input.spectrum_from_parameters(params_for(tmp_path, 'source = "eisenstein_hu_nowiggle"'), bg18)
    assert spec.source == "eisenstein_hu_nowiggle"
    spec = io_input.spectrum_from_parameters(params_for(tmp_path, 'source = "power_law"\nindex = -2.0'), bg18)
    assert spec.dlnP_dlnk(0.37) == pytest.approx(-2.0, abs=1e-12)
    with pytest.raises(ParameterError, match="needs \\[spectrum\\] index"):
        io_input.spectrum_from_parameters(params_for(tmp_path, 'source = "power_law"'), bg18)
    with pytest.raises(ParameterError, match="table"):
        io_input.spectrum_from_parameters(params_for(tmp_path, 'source = "table"'), bg18)


def test_example_parameter_file(bg18):
    # parameter_files/spectrum_from_table.toml: camb table renormalised to sigma_8,
    # covering the box's k range.
    params = parameters.load(EXAMPLE)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        spec = io_input.spectrum_from_parameters(params, background.solve(params.cosmology))
        assert spec.warn_if_extrapolating(*spectrum.required_k_range(100.0, 64)) is False
    assert spec.sigma_8 == pytest.approx(0.8102, rel=1e-12)


# --------------------------------------------------------------------------------------
# The command
# --------------------------------------------------------------------------------------
def read_csv(path):
    with open(path) as f:
        rows = list(csv.reader(f))
    return rows[0], np.array(rows[1:], dtype=float)


def test_cli_spectrum_csv_and_plot(tmp_path, capsys):
    out, png = tmp_path / "pk.csv", tmp_path / "pk.png"
    rc = main(["spectrum", str(EXAMPLE), "--out", str(out), "--z", "0", "49", "--points", "50",
               "--plot", str(png)])
    assert rc == 0
    head, data = read_csv(out)
    assert head == ["k_h_mpc", "P_z0", "P_z49", "Delta2_z0", "Delta2_z49"]
    params = parameters.load(EXAMPLE)
    bg = background.solve(params.cosmology)
    spec = io_input.spectrum_from_parameters(params, bg)
    k = data[:, 0]
    # CSV keeps 15 significant digits (io_output.CSV_FORMAT); k enters P and k^3: 5e-14
    np.testing.assert_allclose(data[:, 1], spec.P(k), rtol=5e-14)
    np.testing.assert_allclose(data[:, 2], spec.P(k, 49.0), rtol=5e-14)
    np.testing.assert_allclose(data[:, 3], k**3 * data[:, 1] / (2 * np.pi**2), rtol=5e-14)
    assert png.stat().st_size > 1000 and png.read_bytes()[:4] == b"\x89PNG"
    text = capsys.readouterr().out
    assert "sigma_8 = 0.810200" in text and "needs 0.03142 <= k <= 3.482 h/Mpc" in text


def test_cli_spectrum_hdf5_and_overrides(tmp_path):
    import h5py

    out = tmp_path / "pk.h5"
    rc = main(["spectrum", "--out", str(out), "--set", "spectrum.source=power_law",
               "--set", "spectrum.index=-1.0", "--k-min", "0.01", "--k-max", "1", "--points", "20"])
    assert rc == 0
    with h5py.File(out) as f:
        k, p = f["k_h_mpc"][:], f["P_z0"][:]
        assert f["P_z0"].attrs["units"] == "(Mpc/h)^3" and f.attrs["normalisation"] == "sigma_8"
    np.testing.assert_allclose(p * k, p[0] * k[0], rtol=1e-12)  # P = A k^-1
    assert main(["spectrum", "--out", str(out), "--points", "20"]) == 2  # exists, no --overwrite
    assert main(["spectrum", "--out", str(out), "--points", "20", "--overwrite"]) == 0


def test_cli_spectrum_bad_table_one_line(tmp_path, capsys):
    write(tmp_path, "0.1 1\n0.2 nan\n0.3 1\n0.4 1\n", "bad.txt")
    params = tmp_path / "p.toml"
    params.write_text('[spectrum]\nsource = "table"\ntable = "bad.txt"\n')
    rc = main(["spectrum", str(params), "--out", str(tmp_path / "x.csv")])
    assert rc == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "bad.txt, line 2" in err[0] and "nan" in err[0]
    assert not (tmp_path / "x.csv").exists()


def test_cli_spectrum_extrapolation_warning(tmp_path, capsys, eh18):
    write(tmp_path, good_rows(eh18, np.geomspace(1e-4, 1.0, 80)), "to1.txt")
    params = tmp_path / "p.toml"
    params.write_text('[spectrum]\nsource = "table"\ntable = "to1.txt"\n'
                      "[box]\nsize = 100.0\nparticles_per_side = 64\n")
    assert main(["spectrum", str(params), "--out", str(tmp_path / "x.csv")]) == 0
    err = capsys.readouterr().err
    assert "warning" in err and "[0.03142, 3.482] h/Mpc" in err and "to1.txt" in err
