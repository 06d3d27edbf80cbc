"""The background's own integrator (Gauss-Legendre collocation, icgen._collocation) at its nodes.

tests/test_background.py checks the physics (closed forms, astropy, colossus, published fits)
through the interpolated table at SOLVER_RTOL = 1e-8. Here the tabulated node values
(t, eta, D1, D1', D2, D2') are compared directly, much more tightly:

* against scipy.integrate.solve_ivp (method "DOP853", rtol 1e-13, atol 1e-300; test-only),
  integrating the same equations (icgen.background._rhs_lna) from the same early-time series
  (icgen.background._early_state) at a = 1e-12, so the difference measures the integration
  alone. Tolerance INTEGRATOR_RTOL = 1e-11 relative on every column: DOP853 at rtol 1e-13
  carries a global error of a few 1e-12 over ~30 e-folds (measured: largest difference
  4.1e-12, open model, D2'), while icgen's tables are converged to < 1e-13 (next point).
* against the same solver with more stages and shorter steps (a convergence check of the
  method, not an external reference): the tables must not move by more than 1e-13.
* against the exact Einstein-de Sitter solutions at every node, to 1e-13.
"""

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from icgen import background
from icgen.cosmology import PLANCK18, Cosmology

INTEGRATOR_RTOL = 1e-11
COLUMNS = ("t_h0", "eta_h0", "d1", "d1p", "d2", "d2p")


def _model(omega_m, omega_k=0.0, t_cmb=0.0, **kw):
    return Cosmology(h=0.7, omega_m=omega_m, omega_b=0.04, omega_k=omega_k, t_cmb=t_cmb, **kw)


MODELS = {
    "Planck18 (radiation)": (PLANCK18, {}),
    "Planck18, 100 nodes": (PLANCK18, {"n_table": 100}),
    "Planck18, a_min 1e-12, a_max 1e6": (PLANCK18, {"a_min": 1e-12, "a_max": 1e6}),
    "EdS": (_model(1.0), {}),
    "open": (_model(0.3, omega_k=0.2), {}),
    "closed, Lambda, expands": (_model(0.3, omega_k=-0.1, t_cmb=2.7255), {}),
    "closed, recollapses": (_model(2.0, omega_k=-1.0), {}),
    "closed, radiation, recollapses": (_model(1.5, omega_k=-0.5, t_cmb=2.7255), {}),
    "w0 wa": (_model(0.3, t_cmb=2.7255, w0=-0.9, wa=-0.3), {}),
}


def _table(bg):
    return np.array([getattr(bg, name) for name in COLUMNS])


@pytest.mark.parametrize("name", list(MODELS))
def test_nodes_against_dop853(name):
    # Reference: scipy.integrate.solve_ivp, DOP853 at rtol 1e-13 (module notes), its dense
    # output at the table nodes, D1 normalised to 1 at a = 1 and D2 by the same factor squared.
    cosmo, kw = MODELS[name]
    bg = background.solve(cosmo, **kw)
    a0 = 1e-12
    sol = solve_ivp(background._rhs_lna, (np.log(a0), bg.ln_a[-1]), background._early_state(a0, cosmo),
                    method="DOP853", rtol=1e-13, atol=1e-300, dense_output=True, args=(cosmo,))
    assert sol.success
    ref = sol.sol(bg.ln_a)
    norm = sol.sol(0.0)[2]
    ref[2:4] /= norm
    ref[4:6] /= norm**2
    got = _table(bg)
    for row, col in enumerate(COLUMNS):
        # measured max over the models: t 2.5e-13, eta 2.9e-14, D1 6.3e-13, D1' 2.3e-12,
        # D2 1.5e-12, D2' 4.1e-12
        np.testing.assert_allclose(got[row], ref[row], rtol=INTEGRATOR_RTOL, atol=0, err_msg=col)


@pytest.mark.parametrize("name", ["Planck18 (radiation)", "open", "closed, recollapses", "w0 wa"])
def test_nodes_converged(name, monkeypatch):
    # Convergence check of the method (order 2s): 6 stages (order 12) and steps of at most 2e-3 in
    # ln a instead of 4 stages and the table's own steps (~4e-3). Measured changes <= 1.2e-14.
    cosmo, kw = MODELS[name]
    base = _table(background.solve(cosmo, **kw))
    monkeypatch.setattr(background, "_STAGES", 6)
    monkeypatch.setattr(background, "_H_MAX", 2e-3)
    fine = _table(background.solve(cosmo, **kw))
    np.testing.assert_allclose(base, fine, rtol=1e-13, atol=0)


def test_einstein_de_sitter_nodes_exact():
    # Reference: Einstein-de Sitter closed forms (H0 = 1): t = (2/3) a^1.5, eta = 2 a^0.5,
    # D1 = D1' = a, D2 = -(3/7) a^2, D2' = -(6/7) a^2 (Peebles 1980, sec. 11; Bouchet et al.
    # 1995, A&A 296, 575). Measured: 1.8e-15 (t, eta), 7.8e-15 (D1, D1'), 1.3e-14 (D2, D2').
    bg = background.solve(_model(1.0))
    a = np.exp(bg.ln_a)
    exact = np.array([2.0 / 3.0 * a**1.5, 2.0 * a**0.5, a, a, -3.0 / 7.0 * a**2, -6.0 / 7.0 * a**2])
    np.testing.assert_allclose(_table(bg), exact, rtol=1e-13, atol=0)
