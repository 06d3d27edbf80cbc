"""Output schedules, the schedule writer and the ``icgen schedule`` command."""

import dataclasses
from pathlib import Path

import h5py
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from icgen import background, growth_check, io_schedule, parameters, schedule, steps
from icgen.cli import main
from icgen.cosmology import PLANCK18
from icgen.errors import InputError, ParameterError

REPO = Path(__file__).resolve().parents[1]
EXAMPLES = sorted((REPO / "parameter_files").glob("schedule_*.toml"))


@pytest.fixture(scope="module")
def bg():
    return background.solve(PLANCK18)


def _ordered(snaps, a_end):
    a = snaps.a
    assert np.all(np.diff(a) > 0.0), "output list must be strictly increasing"
    assert a[-1] == a_end, "output list must end exactly at a_end"
    assert a[0] >= snaps.a_begin


# ---- spacing ------------------------------------------------------------------------
def test_log_a_count(bg):
    # Reference: definition, ln a_k = ln a_begin + k (ln a_end - ln a_begin)/count.
    s = schedule.outputs(bg, 0.02, 1.0, spacing="log_a", count=10)
    _ordered(s, 1.0)
    assert len(s) == 10
    want = np.exp(np.log(0.02) * (1 - np.arange(1, 11) / 10))
    np.testing.assert_allclose(s.a, want, rtol=1e-14)


def test_linear_a_interval(bg):
    # Reference: definition, a_k = a_begin + k * interval, then a_end.
    s = schedule.outputs(bg, 0.1, 1.0, spacing="a", interval=0.25)
    np.testing.assert_allclose(s.a, [0.35, 0.6, 0.85, 1.0], rtol=1e-14)
    assert s.a[-1] == 1.0


def test_time_spacing_against_astropy(bg):
    # Reference: astropy.cosmology.FlatLambdaCDM(...).age(z) (quad over the same Friedmann
    # equation, photons + 3.046 massless neutrinos); the outputs must be evenly spaced in it.
    import astropy.units as u
    from astropy.cosmology import FlatLambdaCDM

    ac = FlatLambdaCDM(H0=100 * PLANCK18.h, Om0=PLANCK18.omega_m, Tcmb0=PLANCK18.t_cmb,
                       Neff=PLANCK18.n_eff, m_nu=0 * u.eV)
    s = schedule.outputs(bg, 1.0 / 50.0, 1.0, spacing="time", count=8)
    age = ac.age(s.z).to_value(u.Gyr)
    t0 = ac.age(49.0).to_value(u.Gyr)
    np.testing.assert_allclose(np.diff(np.concatenate([[t0], age])), (age[-1] - t0) / 8, rtol=1e-8)
    np.testing.assert_allclose(s.t_gyr, age, rtol=1e-9)  # our ODE ~1e-10; astropy quad
    np.testing.assert_allclose(s.H, ac.H(s.z).to_value(u.km / u.s / u.Mpc), rtol=1e-12)


def test_growth_spacing(bg):
    # Reference: D1 from the background's own ODE; outputs even in D1 within its ~1e-10 accuracy.
    s = schedule.outputs(bg, 0.02, 1.0, spacing="growth", count=12)
    d = np.concatenate([[bg.D1(0.02)], s.D1])
    np.testing.assert_allclose(np.diff(d), (1.0 - bg.D1(0.02)) / 12, rtol=1e-8)


def test_power_spacing(bg):
    s = schedule.outputs(bg, 0.04, 1.0, spacing="power", power=0.5, count=4)
    np.testing.assert_allclose(np.sqrt(s.a), 0.2 + 0.2 * np.arange(1, 5), rtol=1e-14)


def test_eds_table_columns():
    # Reference: Einstein-de Sitter closed forms, D1 = a, f1 = 1, H = H0 a^-3/2,
    # t = (2/3) a^3/2 / H0 (derived from E = a^-3/2).
    b = background.solve(dataclasses.replace(PLANCK18, omega_m=1.0, t_cmb=0.0))
    s = schedule.outputs(b, 0.01, 1.0, count=5)
    np.testing.assert_allclose(s.D1, s.a, rtol=1e-10)
    np.testing.assert_allclose(s.f1, 1.0, rtol=1e-10)
    np.testing.assert_allclose(s.H, 100 * PLANCK18.h * s.a**-1.5, rtol=1e-14)
    np.testing.assert_allclose(s.t_gyr, 2 / 3 * s.a**1.5 * b.gyr_per_h0, rtol=1e-10)
    np.testing.assert_allclose(s.z, 1 / s.a - 1, rtol=1e-15)
    with pytest.raises(ValueError):
        s.a[0] = 0.5  # read-only


# ---- merging -----------------------------------------------------------------------------
def test_extra_redshifts_merged_and_duplicates_removed(bg):
    # Regular outputs at a = 0.1 and 1 (two even in ln a from 0.01); the extra z = 9
    # (a = 0.1) duplicates one, z = 1e-9 duplicates a_end, z = 3 is new, and 9 appears twice.
    s = schedule.outputs(bg, 0.01, 1.0, spacing="log_a", count=2,
                         extra_redshifts=[9.0, 3.0, 1e-9, 9.0])
    _ordered(s, 1.0)
    assert len(s) == 3
    assert s.a[0] == 1.0 / 10.0  # the explicit redshift wins over the regular point
    assert s.a[1] == 1.0 / 4.0


def test_merge_tolerance(bg):
    s = schedule.outputs(bg, 0.01, 1.0, extra_redshifts=[1.0, 1.0 + 1e-4], merge_tolerance=1e-3)
    assert len(s) == 2
    s = schedule.outputs(bg, 0.01, 1.0, extra_redshifts=[1.0, 1.0 + 1e-4], merge_tolerance=1e-6)
    assert len(s) == 3


def test_begin_output(bg):
    assert len(schedule.outputs(bg, 0.02, 1.0)) == 1  # only a_end by default
    s = schedule.outputs(bg, 0.02, 1.0, include_begin=True)
    np.testing.assert_array_equal(s.a, [0.02, 1.0])
    s = schedule.outputs(bg, 0.02, 1.0, extra_redshifts=[49.0 + 1e-9])
    np.testing.assert_array_equal(s.a, [0.02, 1.0])  # an extra at z_begin is the start


@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(spacing=st.sampled_from(sorted(schedule.SPACINGS)),
       count=st.integers(0, 40),
       z_begin=st.floats(5.0, 200.0),
       a_end=st.floats(0.3, 2.0),
       extras=st.lists(st.floats(0.0, 1.0), max_size=6),
       step_spacing=st.sampled_from(sorted(schedule.SPACINGS)),
       n_steps=st.integers(1, 300))
def test_schedule_and_steps_properties(bg, spacing, count, z_begin, a_end, extras, step_spacing,
                                       n_steps):
    # Acceptance: outputs strictly increasing, ending exactly at a_end, every one a step boundary.
    a_begin = 1.0 / (1.0 + z_begin)
    z_end = 1.0 / a_end - 1.0
    extra_z = [z_end + f * (z_begin - z_end) for f in extras]
    s = schedule.outputs(bg, a_begin, a_end, spacing=spacing, count=count,
                         extra_redshifts=extra_z, power=0.7)
    _ordered(s, a_end)
    assert len(s) <= count + len(extras) + 1
    tab = steps.build(bg, a_begin, s.a, spacing=step_spacing, count=n_steps, power=0.7)
    b = tab.boundaries
    assert np.all(np.diff(b) > 0.0)
    assert np.array_equal(b[tab.output_step], s.a)
    assert b[0] == a_begin and b[-1] == a_end


# ---- errors ------------------------------------------------------------------------------
@pytest.mark.parametrize("kwargs,match", [
    (dict(a_begin=1.0, a_end=0.5), "a_end = 0.5 must exceed a_begin = 1.0"),
    (dict(a_begin=0.02, a_end=500.0), r"a_end = 500.0 is outside the background table"),
    (dict(a_begin=0.0, a_end=1.0), r"a_begin = 0.0 is outside the background table"),
    (dict(a_begin=0.02, count=3, interval=0.1), "count = 3 and interval = 0.1 both given"),
    (dict(a_begin=0.02, interval=-0.1), r"interval = -0.1 is outside the allowed range"),
    (dict(a_begin=0.02, count=-1), r"count = -1 is outside the allowed range \[0"),
    (dict(a_begin=0.02, extra_redshifts=[60.0]), r"extra_redshifts: z = 60.0 is outside the schedule"),
    (dict(a_begin=0.02, extra_redshifts=[-0.5]), r"extra_redshifts: z = -0.5 is outside"),
    (dict(a_begin=0.02, spacing="loga"), "spacing = 'loga' is not one of"),
    (dict(a_begin=0.02, spacing="time", interval=1e-9), "more than"),
    (dict(a_begin=0.02, merge_tolerance=1.0), r"merge_tolerance = 1.0 is outside the allowed range"),
])
def test_outputs_errors(bg, kwargs, match):
    with pytest.raises(ParameterError, match=match):
        schedule.outputs(bg, **kwargs)


def test_a_begin_resolution():
    p = parameters.loads("[start]\nredshift = 49.0\n")
    assert schedule.resolve_a_begin(p) == pytest.approx(0.02, rel=1e-15)
    assert schedule.resolve_a_begin(p, a_begin=0.01) == 0.01  # the caller knows the run's start
    p = parameters.loads('[start]\nredshift = "auto"\n')
    with pytest.raises(ParameterError, match=r'redshift = "auto".*give \[snapshots\] a_begin'):
        schedule.resolve_a_begin(p)
    assert schedule.resolve_a_begin(p, a_begin=0.03) == 0.03
    p = parameters.loads('[start]\nredshift = "auto"\n[snapshots]\na_begin = 0.05\n')
    assert schedule.resolve_a_begin(p) == 0.05
    with pytest.raises(ParameterError, match="contradicts the start of the run"):
        schedule.resolve_a_begin(p, a_begin=0.04)


def test_from_parameters(bg):
    p = parameters.loads("[start]\nredshift = 49.0\n[snapshots]\nspacing = 'a'\ncount = 4\n"
                         "extra_redshifts = [3.0]\n")
    s = schedule.from_parameters(p, bg)
    np.testing.assert_allclose(s.a, [1 / 4, 0.02 + 0.245, 0.02 + 0.49, 0.02 + 0.735, 1.0], rtol=1e-13)
    with pytest.raises(ParameterError, match=r"unknown key 'counts' in section \[snapshots\]"):
        parameters.loads("[snapshots]\ncounts = 4\n")


# ---- the writer ---------------------------------------------------------------------------
def _plan(bg):
    s = schedule.outputs(bg, 0.02, 1.0, spacing="log_a", count=3, extra_redshifts=[5.0])
    tab = steps.build(bg, s.a_begin, s.a, count=30)
    return s, tab, growth_check.measure(bg, tab)


def test_write_schedule_outputs_csv(bg, tmp_path):
    s, tab, acc = _plan(bg)
    paths = io_schedule.write_schedule_outputs(tmp_path / "run", s, tab, acc)
    a_list = np.loadtxt(paths["list"])
    out = np.genfromtxt(paths["outputs"], delimiter=",", names=True)
    stp = np.genfromtxt(paths["steps"], delimiter=",", names=True)
    assert out.dtype.names[:5] == ("a", "z", "t_gyr", "D1", "f1")
    assert {"H", "err_D1", "err_f1"} <= set(out.dtype.names)
    assert stp.dtype.names[:2] == ("a_begin", "a_end")
    assert {"dt_gyr", "drift", "kick"} <= set(stp.dtype.names)
    # The list and the step table read back as the same doubles (same 15-digit format).
    assert np.array_equal(a_list, out["a"])
    assert set(a_list.tolist()) <= set(stp["a_end"].tolist())
    assert a_list[-1] == 1.0
    np.testing.assert_allclose(stp["drift"], tab.drift, rtol=1e-14)
    assert not list((tmp_path / "run").glob(".*"))  # no temporary left behind
    with pytest.raises(InputError, match="exists; pass --overwrite"):
        io_schedule.write_schedule_outputs(tmp_path / "run", s, tab, acc)
    io_schedule.write_schedule_outputs(tmp_path / "run", s, tab, acc, overwrite=True)


def test_write_schedule_outputs_hdf5(bg, tmp_path):
    s, tab, acc = _plan(bg)
    paths = io_schedule.write_schedule_outputs(tmp_path, s, tab, acc, table_format="hdf5",
                                               attrs={"created_by": "test"})
    with h5py.File(paths["steps"]) as f:
        np.testing.assert_array_equal(f["kick"][...], tab.kick)
        assert f.attrs["spacing"] == "log_a" and "1/H0" in f["drift"].attrs["units"]
    with h5py.File(paths["outputs"]) as f:
        np.testing.assert_array_equal(f["a"][...], s.a)


def test_writer_refuses_mismatched_results(bg, tmp_path):
    s, tab, acc = _plan(bg)
    other = schedule.outputs(bg, 0.02, 1.0, count=5)
    with pytest.raises(InputError, match="different outputs"):
        io_schedule.write_schedule_outputs(tmp_path, other, tab, acc)
    assert not any(tmp_path.iterdir())


# ---- the command --------------------------------------------------------------------------
@pytest.mark.parametrize("example", EXAMPLES, ids=lambda p: p.name)
def test_cli_examples(example, tmp_path, capsys):
    out = tmp_path / "sched"
    plot = tmp_path / "schedule.png"
    assert main(["schedule", str(example), "--out-dir", str(out), "--plot", str(plot)]) == 0
    text = capsys.readouterr().out
    assert "steps:" in text and "largest step" in text and "growth error" in text
    for name in ("output_scale_factors.txt", "outputs.csv", "steps.csv"):
        assert (out / name).stat().st_size > 0
    assert plot.stat().st_size > 10_000
    a = np.loadtxt(out / "output_scale_factors.txt")
    assert np.all(np.diff(a) > 0) and a[-1] == 1.0


def test_examples_exist():
    assert len(EXAMPLES) >= 2


def test_cli_needs_a_begin_when_start_is_auto(tmp_path, capsys):
    pf = tmp_path / "p.toml"
    pf.write_text('[start]\nredshift = "auto"\n')
    assert main(["schedule", str(pf), "--out-dir", str(tmp_path / "o")]) == 2
    assert "give [snapshots] a_begin" in capsys.readouterr().err
    assert main(["schedule", str(pf), "--out-dir", str(tmp_path / "o"), "--format", "hdf5",
                 "--set", "snapshots.a_begin=0.02", "--set", "steps.count=20"]) == 0
    assert (tmp_path / "o" / "steps.h5").exists()
