"""Step tables: drift and kick integrals against closed forms and independent quadrature."""

import dataclasses

import numpy as np
import pytest
from scipy.integrate import quad

from icgen import background, parameters, schedule, steps
from icgen.cosmology import PLANCK18
from icgen.errors import ParameterError


@pytest.fixture(scope="module")
def bg():
    # Planck 2018 with radiation (t_cmb = 2.7255 K, n_eff = 3.046): flat LCDM + radiation.
    return background.solve(PLANCK18)


@pytest.fixture(scope="module")
def bg_eds():
    # Einstein-de Sitter: omega_m = 1, no radiation (t_cmb = 0), so E(a) = a^-3/2 exactly.
    eds = dataclasses.replace(PLANCK18, omega_m=1.0, t_cmb=0.0)
    assert eds.omega_de == 0.0 and eds.omega_r == 0.0
    return background.solve(eds)


def _quad_integrals(cosmo, a1, a2):
    """Independent reference: scipy.integrate.quad over dt = da / (a H), in units of 1/H0."""
    def f(a, n):
        return a ** (-n) / (a * background.E(a, cosmo))
    opts = dict(epsabs=0.0, epsrel=1e-13, limit=200)
    return tuple(quad(f, a1, a2, args=(n,), **opts)[0] for n in (0, 2, 1))


# ---- Einstein-de Sitter closed forms -----------------------------------------
# Derived here: E = a^-3/2, so H0 dt = da/(a E) = a^1/2 da and
#   H0 int dt      = (2/3) (a2^3/2 - a1^3/2),
#   H0 int dt/a^2  = int a^-3/2 da = 2 (a1^-1/2 - a2^-1/2)   (drift),
#   H0 int dt/a    = int a^-1/2 da = 2 (a2^1/2 - a1^1/2)     (kick).
# Written below without cancellation for short intervals, using
# a2^1/2 - a1^1/2 = (a2 - a1) / (a2^1/2 + a1^1/2) (same values, exact algebra).
def _sqrt_diff(a1, a2):
    return (a2 - a1) / (np.sqrt(a2) + np.sqrt(a1))


def _eds_t(a1, a2):
    return 2.0 / 3.0 * _sqrt_diff(a1, a2) * (a2 + np.sqrt(a1 * a2) + a1)


def _eds_drift(a1, a2):
    return 2.0 * _sqrt_diff(a1, a2) / np.sqrt(a1 * a2)


def _eds_kick(a1, a2):
    return 2.0 * _sqrt_diff(a1, a2)


@pytest.mark.parametrize("spacing", ["a", "log_a", "power", "time", "growth"])
def test_eds_integrals_closed_form(bg_eds, spacing):
    # Reference: the EdS closed forms above (derived); acceptance: relative error < 1e-10.
    a_out = np.array([0.05, 0.1, 0.3, 1.0])
    tab = steps.build(bg_eds, 1.0 / 50.0, a_out, spacing=spacing, count=40, power=0.5)
    lo, mid, hi = tab.a_begin, tab.a_mid, tab.a_end
    checks = {
        "drift": (tab.drift, _eds_drift(lo, hi)),
        "kick": (tab.kick, _eds_kick(lo, hi)),
        "drift_first_half": (tab.drift_first_half, _eds_drift(lo, mid)),
        "drift_second_half": (tab.drift_second_half, _eds_drift(mid, hi)),
        "kick_first_half": (tab.kick_first_half, _eds_kick(lo, mid)),
        "kick_second_half": (tab.kick_second_half, _eds_kick(mid, hi)),
        "dt_gyr": (tab.dt_gyr, _eds_t(lo, hi) * bg_eds.gyr_per_h0),
    }
    for name, (got, want) in checks.items():
        rel = np.max(np.abs(got / want - 1.0))
        assert rel < 1e-10, f"{name}: largest relative error {rel:.3g}"


def test_eds_wide_intervals(bg_eds):
    # Reference: EdS closed forms (derived above); intervals spanning many e-folds, where
    # the quadrature needs many panels.
    a1 = np.array([1e-7, 1e-4, 0.01, 0.5])
    a2 = np.array([1e-2, 1.0, 50.0, 0.5000001])
    t, d, k = steps.leapfrog_integrals(bg_eds, a1, a2)
    np.testing.assert_allclose(t, _eds_t(a1, a2), rtol=1e-12, atol=0)  # GL12, round-off level
    np.testing.assert_allclose(d, _eds_drift(a1, a2), rtol=1e-12, atol=0)
    np.testing.assert_allclose(k, _eds_kick(a1, a2), rtol=1e-12, atol=0)


def test_scalar_in_scalar_out(bg_eds):
    t, d, k = steps.leapfrog_integrals(bg_eds, 0.25, 1.0)
    assert isinstance(t, float) and isinstance(d, float) and isinstance(k, float)
    assert d == pytest.approx(_eds_drift(0.25, 1.0), rel=1e-13)  # closed form, derived above


# ---- Flat LCDM with radiation, and other backgrounds, against scipy quad -----
def test_lcdm_radiation_against_quad(bg):
    # Reference: scipy.integrate.quad over dt = da/(a H) (epsrel 1e-13); acceptance 1e-9.
    assert PLANCK18.omega_r > 0.0
    a_out = np.array([0.1, 0.5, 1.0])
    tab = steps.build(bg, 1.0 / 50.0, a_out, spacing="log_a", count=25)
    worst = 0.0
    for i in range(0, tab.n_steps, 3):
        t, d, k = _quad_integrals(PLANCK18, tab.a_begin[i], tab.a_end[i])
        _, d1, k1 = _quad_integrals(PLANCK18, tab.a_begin[i], tab.a_mid[i])
        got = (tab.dt_gyr[i] / bg.gyr_per_h0, tab.drift[i], tab.kick[i],
               tab.drift_first_half[i], tab.kick_first_half[i])
        want = (t, d, k, d1, k1)
        worst = max(worst, max(abs(g / w - 1.0) for g, w in zip(got, want)))
    assert worst < 1e-9, worst


def test_radiation_era_against_quad(bg):
    # Reference: scipy.integrate.quad; intervals across matter-radiation equality
    # (a_eq ~ 3e-4), where the radiation term matters most.
    a1 = np.array([1e-7, 1e-5, 1e-4, 3e-4])
    a2 = np.array([1e-5, 1e-3, 5e-4, 2e-2])
    t, d, k = steps.leapfrog_integrals(bg, a1, a2)
    for i in range(a1.size):
        want = _quad_integrals(PLANCK18, a1[i], a2[i])
        np.testing.assert_allclose((t[i], d[i], k[i]), want, rtol=1e-9, atol=0)


def test_w0wa_curvature_against_quad():
    # Reference: scipy.integrate.quad; an open model with evolving dark energy.
    cosmo = dataclasses.replace(PLANCK18, omega_k=0.05, w0=-0.8, wa=-0.5)
    b = background.solve(cosmo)
    a1 = np.array([0.02, 0.3, 0.9, 1.5])
    a2 = np.array([0.3, 0.9, 1.5, 10.0])
    t, d, k = steps.leapfrog_integrals(b, a1, a2)
    for i in range(a1.size):
        np.testing.assert_allclose((t[i], d[i], k[i]), _quad_integrals(cosmo, a1[i], a2[i]),
                                   rtol=1e-9, atol=0)


def test_recollapsing_model_up_to_turnaround_against_quad():
    # Reference: scipy.integrate.quad. Closed model (omega_m = 3, no dark energy): 1/E is
    # singular at the turnaround, so the last step before it is the hard case.
    cosmo = dataclasses.replace(PLANCK18, omega_m=3.0, t_cmb=0.0, omega_k=-2.0)
    assert abs(cosmo.omega_de) < 1e-12
    b = background.solve(cosmo)
    assert b.a_turn is not None
    a = np.linspace(0.5, b.a_top, 6)
    t, d, k = steps.leapfrog_integrals(b, a[:-1], a[1:])
    for i in range(a.size - 1):
        np.testing.assert_allclose((t[i], d[i], k[i]), _quad_integrals(cosmo, a[i], a[i + 1]),
                                   rtol=1e-9, atol=0)


def test_sums_match_background_times(bg):
    # Reference: cosmic and conformal time from the background's own ODE integration
    # (background.solve, DOP853 rtol 1e-12, accurate to ~1e-10): sum of dt over the steps
    # is t(a_end) - t(a_begin), sum of kicks (int dt/a) is eta(a_end) - eta(a_begin).
    tab = steps.build(bg, 0.01, np.array([0.2, 1.0, 3.0]), spacing="power", count=300, power=0.3)
    np.testing.assert_allclose(tab.dt_gyr.sum(), bg.t(3.0) - bg.t(0.01), rtol=1e-9)
    np.testing.assert_allclose(tab.kick.sum() * bg.gyr_per_h0,
                               bg.conformal_time(3.0) - bg.conformal_time(0.01), rtol=1e-9)


def test_halves_add_up(bg):
    # Reference: additivity of integrals; each half is an independent quadrature.
    tab = steps.build(bg, 0.02, [1.0], count=50)
    np.testing.assert_allclose(tab.drift_first_half + tab.drift_second_half, tab.drift, rtol=1e-15)
    np.testing.assert_allclose(tab.kick_first_half + tab.kick_second_half, tab.kick, rtol=1e-15)
    both = steps.leapfrog_integrals(bg, tab.a_begin, tab.a_end)
    np.testing.assert_allclose(both[1], tab.drift, rtol=1e-13)
    np.testing.assert_allclose(both[2], tab.kick, rtol=1e-13)


# ---- step placement ------------------------------------------------------------
@pytest.mark.parametrize("spacing", ["a", "log_a", "power", "time", "growth"])
def test_outputs_are_step_boundaries(bg, spacing):
    snaps = schedule.outputs(bg, 1.0 / 50.0, 1.0, spacing="time", count=7,
                             extra_redshifts=[9.0, 3.0, 0.5])
    tab = steps.build(bg, snaps.a_begin, snaps.a, spacing=spacing, count=64)
    b = tab.boundaries
    assert np.all(np.diff(b) > 0.0)
    assert b[0] == snaps.a_begin and b[-1] == snaps.a[-1]
    # Exact equality: the outputs themselves are the boundaries (steps adjusted, not outputs).
    assert np.array_equal(b[tab.output_step], snaps.a)
    assert set(snaps.a.tolist()) <= set(b.tolist())
    np.testing.assert_array_equal(tab.a_end[:-1], tab.a_begin[1:])
    # No step wider than the nominal width in s; at least `count` steps.
    sp = schedule.make_spacing(spacing, bg, 0.5)
    s = np.asarray(sp.s(b))
    nominal = (s[-1] - s[0]) / 64
    assert np.max(np.diff(s)) <= nominal * (1 + 1e-9)
    assert 64 <= tab.n_steps <= 64 + len(snaps)


@pytest.mark.parametrize("spacing,power", [("a", 0.5), ("log_a", 0.5), ("power", 0.25),
                                           ("power", 2.0), ("time", 0.5), ("growth", 0.5)])
def test_steps_even_in_spacing_variable(bg, spacing, power):
    # Reference: the definition of each spacing variable, evaluated with the background's
    # forward maps (t(a), D1(a)) or closed forms (ln a, a^p).
    tab = steps.build(bg, 0.02, [1.0], spacing=spacing, count=50, power=power)
    fwd = {"a": lambda a: a, "log_a": np.log, "power": lambda a: a**power,
           "time": bg.t, "growth": bg.D1}[spacing]
    s = fwd(tab.boundaries)
    ds = np.diff(s)
    np.testing.assert_allclose(ds, (s[-1] - s[0]) / 50, rtol=1e-8)  # inverse maps ~1e-10
    s_mid = fwd(tab.a_mid)
    np.testing.assert_allclose(s_mid - s[:-1], ds / 2, rtol=1e-7)


def test_count_with_outputs_on_the_grid_adds_no_step(bg):
    # 100 steps even in ln a from z = 49; outputs every 25th boundary lie on the grid.
    a0 = 1.0 / 50.0
    a_out = np.exp(np.log(a0) * (1 - np.array([25, 50, 75, 100]) / 100.0))
    a_out[-1] = 1.0
    tab = steps.build(bg, a0, a_out, spacing="log_a", count=100)
    assert tab.n_steps == 100
    np.testing.assert_array_equal(tab.output_step, [25, 50, 75, 100])


def test_max_interval(bg):
    tab = steps.build(bg, 0.02, [0.5, 1.0], spacing="log_a", max_interval=0.05)
    dlna = tab.dln_a
    assert dlna.max() <= 0.05 * (1 + 1e-12)
    n1 = int(np.ceil(np.log(0.5 / 0.02) / 0.05))
    n2 = int(np.ceil(np.log(1.0 / 0.5) / 0.05))
    assert tab.n_steps == n1 + n2


def test_columns_for_csv(bg):
    tab = steps.build(bg, 0.02, [0.5, 1.0], count=10)
    cols = tab.columns()
    assert list(cols)[:6] == ["a_begin", "a_end", "a_mid", "dt_gyr", "drift", "kick"]
    idx = cols["output_index"]
    assert idx[-1] == 1 and np.count_nonzero(idx >= 0) == 2
    assert tab.a_end[idx == 0][0] == 0.5
    with pytest.raises(ValueError):
        tab.drift[0] = 1.0  # read-only


def test_output_at_start(bg):
    tab = steps.build(bg, 0.02, [0.02, 1.0], count=10)
    assert tab.output_step[0] == 0 and tab.n_steps == 10


# ---- errors name the parameter, the value and the range ----------------------------
@pytest.mark.parametrize("kwargs,match", [
    (dict(count=10, max_interval=0.1), "exactly one of count"),
    (dict(), "exactly one of count"),
    (dict(count=0), r"count = 0 is outside the allowed range \[1"),
    (dict(count=True), "count = True"),
    (dict(max_interval=-1.0), r"max_interval = -1.0 is outside the allowed range"),
    (dict(count=10, spacing="lin"), "spacing = 'lin' is not one of"),
    (dict(count=10, spacing="power", power=9.0), r"power = 9.0 is outside the allowed range \[0.01, 4\]"),
])
def test_build_errors(bg, kwargs, match):
    with pytest.raises(ParameterError, match=match):
        steps.build(bg, 0.02, [1.0], **kwargs)


def test_build_errors_outputs(bg):
    with pytest.raises(ParameterError, match="strictly increasing"):
        steps.build(bg, 0.02, [0.5, 0.4, 1.0], count=10)
    with pytest.raises(ParameterError, match="a_begin = 2.0"):
        steps.build(bg, 2.0, [1.0], count=10)
    with pytest.raises(ParameterError, match="beyond the background"):
        steps.build(bg, 0.02, [1e3], count=10)
    with pytest.raises(ParameterError, match="more than"):
        steps.build(bg, 0.02, [1.0], max_interval=1e-12)


def test_settings_from_parameters():
    base = "[start]\nredshift = 49.0\n"
    st = steps.settings(parameters.loads(base))
    assert (st.count, st.max_interval, st.target_growth_error, st.spacing) == (100, None, None, "log_a")
    st = steps.settings(parameters.loads(base + "[steps]\nmax_interval = 0.02\n"))
    assert st.count is None and st.max_interval == 0.02
    st = steps.settings(parameters.loads(base + "[steps]\ntarget_growth_error = 1e-4\n"))
    assert st.count is None and st.target_growth_error == 1e-4
    with pytest.raises(ParameterError, match="exactly one of count, max_interval"):
        steps.settings(parameters.loads(base + "[steps]\ncount = 10\nmax_interval = 0.02\n"))
    with pytest.raises(ParameterError, match=r"\[steps\] leapfrog.* = 'kdkd' is not one of"):
        parameters.loads(base + "[steps]\nleapfrog = 'kdkd'\n")
