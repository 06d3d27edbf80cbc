"""Tests of icgen._collocation: the Gauss-Legendre tableau and the batched step maps.

References: the published 2- and 3-stage Gauss tableaux (Butcher 1964, Math. Comp. 18, 50;
quoted from memory, and reproduced here to round-off, which also cross-checks the memory),
Butcher's simplifying assumptions B(2s), C(s), D(s) (Hairer, Norsett & Wanner 1993, Solving
ODEs I, sec. II.7; from memory), and exact solutions of linear equations derived in the tests.

Tolerances: tableau entries to 1e-15 (round-off of O(1) numbers); the order of convergence
within 0.3 of the theoretical 2s (the error ratio on halving h is 2^(2s) up to higher-order
terms); absolute errors in the asymptotic regime are quoted where they are asserted.
"""

import math

import numpy as np
import pytest

from icgen import _collocation as col


def test_two_stage_tableau_is_the_published_one():
    # Reference: 2-stage Gauss method (Butcher 1964; from memory): c = 1/2 -+ sqrt(3)/6,
    # a = [[1/4, 1/4 - sqrt(3)/6], [1/4 + sqrt(3)/6, 1/4]], b = [1/2, 1/2].
    r3 = math.sqrt(3.0)
    t = col.gauss_legendre(2)
    np.testing.assert_allclose(t.c, [0.5 - r3 / 6, 0.5 + r3 / 6], rtol=0, atol=1e-15)
    np.testing.assert_allclose(t.a, [[0.25, 0.25 - r3 / 6], [0.25 + r3 / 6, 0.25]], rtol=0, atol=1e-15)
    np.testing.assert_allclose(t.b, [0.5, 0.5], rtol=0, atol=1e-15)


def test_three_stage_tableau_is_the_published_one():
    # Reference: 3-stage Gauss method of order 6 (Butcher 1964; from memory).
    r15 = math.sqrt(15.0)
    t = col.gauss_legendre(3)
    np.testing.assert_allclose(t.c, [0.5 - r15 / 10, 0.5, 0.5 + r15 / 10], rtol=0, atol=1e-15)
    np.testing.assert_allclose(t.b, [5 / 18, 4 / 9, 5 / 18], rtol=0, atol=1e-15)
    a = [[5 / 36, 2 / 9 - r15 / 15, 5 / 36 - r15 / 30],
         [5 / 36 + r15 / 24, 2 / 9, 5 / 36 - r15 / 24],
         [5 / 36 + r15 / 30, 2 / 9 + r15 / 15, 5 / 36]]
    np.testing.assert_allclose(t.a, a, rtol=0, atol=1e-15)  # measured 6e-17


@pytest.mark.parametrize("s", range(1, 9))
def test_tableau_satisfies_the_simplifying_assumptions(s):
    # Reference: Gauss methods satisfy B(2s): sum_i b_i c_i^(q-1) = 1/q, q <= 2s;
    # C(s): sum_k a_jk c_k^(q-1) = c_j^q / q; D(s): sum_i b_i c_i^(q-1) a_ij = b_j (1 - c_j^q)/q,
    # q <= s (Hairer, Norsett & Wanner, sec. II.7; from memory).
    t = col.gauss_legendre(s)
    for q in range(1, 2 * s + 1):
        assert t.b @ t.c ** (q - 1) == pytest.approx(1.0 / q, abs=1e-15)  # measured 2e-16
    for q in range(1, s + 1):
        np.testing.assert_allclose(t.a @ t.c ** (q - 1), t.c**q / q, rtol=0, atol=1e-15)
        np.testing.assert_allclose((t.b * t.c ** (q - 1)) @ t.a, t.b * (1.0 - t.c**q) / q, rtol=0,
                                   atol=1e-15)


def test_tableau_rejects_bad_stage_counts():
    for s in (0, 11, 2.0):
        with pytest.raises(ValueError, match="stages"):
            col.gauss_legendre(s)


def _solve(s, n, x_end, alpha, beta, y0, g=None):
    """Integrate y'' = alpha(x) y - beta(x) y' + g(x) on [0, x_end] in n equal steps."""
    tab = col.gauss_legendre(s)
    x = np.linspace(0.0, x_end, n + 1)
    h = np.diff(x)
    xs = x[:-1] + tab.c[:, None] * h
    steps = col.second_order_steps(h, alpha(xs), beta(xs), tab)
    q = None if g is None else steps.source_terms(g(xs))
    return x, col.chain(steps.dphi, q, y0)


# Exact solution with variable coefficients (derived): y = exp(sin x) has y' = cos x y and
# y'' = (cos^2 x - sin x) y; with beta(x) = x the equation y'' = alpha y - beta y' holds for
# alpha = cos^2 x - sin x + x cos x.
def _alpha_var(x):
    return np.cos(x) ** 2 - np.sin(x) + x * np.cos(x)


def _beta_var(x):
    return x


@pytest.mark.parametrize("s", [1, 2, 3])
def test_order_2s_with_variable_coefficients(s):
    # Reference: the exact solution y = exp(sin x) derived above; Gauss collocation has order 2s
    # at the step ends (Butcher 1964; Hairer, Norsett & Wanner sec. II.7).
    errors = []
    for n in (16, 32):
        x, v = _solve(s, n, 2.0, _alpha_var, _beta_var, [1.0, 1.0])
        exact = np.array([np.exp(np.sin(x)), np.cos(x) * np.exp(np.sin(x))])
        errors.append(np.abs(v - exact).max())
    order = math.log2(errors[0] / errors[1])
    assert abs(order - 2 * s) < 0.3, (errors, order)  # measured 2.00, 4.00, 6.00


@pytest.mark.parametrize("s", [1, 2, 3])
def test_order_2s_with_a_source(s):
    # Reference: y = sin x solves y'' = y - 0 y' + g with g = -2 sin x (derived: y'' = -sin x);
    # y(0) = 0, y'(0) = 1.
    errors = []
    for n in (16, 32):
        x, v = _solve(s, n, 3.0, np.ones_like, np.zeros_like, [0.0, 1.0], g=lambda xs: -2.0 * np.sin(xs))
        errors.append(np.abs(v - np.array([np.sin(x), np.cos(x)])).max())
    order = math.log2(errors[0] / errors[1])
    assert abs(order - 2 * s) < 0.3, (errors, order)


def test_four_stages_reach_round_off_on_growing_and_decaying_modes():
    # Reference: y'' = 2 y - y' has the modes exp(x) and exp(-2 x) (roots of r^2 + r - 2);
    # with y(0) = 2, y'(0) = -1 the solution is exp(x) + exp(-2 x). 4 stages, h = 0.01.
    x, v = _solve(4, 500, 5.0, lambda xs: 2.0 + 0 * xs, np.ones_like, [2.0, -1.0])
    exact = np.array([np.exp(x) + np.exp(-2 * x), np.exp(x) - 2 * np.exp(-2 * x)])
    # atol: y' crosses zero at x = ln(2)/3, where only the absolute error (measured 1.2e-15) means
    # anything; elsewhere the relative error is measured at most 3.3e-14 (round-off over 500 steps).
    np.testing.assert_allclose(v, exact, rtol=1e-13, atol=1e-14)


def test_stage_values_are_the_collocation_polynomial():
    # Reference: for y'' = 0 (alpha = beta = 0) the collocation polynomial through y_i with slope
    # y'_i is the exact solution y_i + y'_i (x - x_i), so the stage values are exact.
    tab = col.gauss_legendre(3)
    h = np.array([0.5, 0.25])
    zero = np.zeros((3, 2))
    steps = col.second_order_steps(h, zero, zero, tab)
    y, dy = np.array([1.0, -2.0]), np.array([3.0, 0.5])
    np.testing.assert_allclose(steps.stage_values(y, dy), y + dy * tab.c[:, None] * h, rtol=1e-15)


def test_too_long_steps_are_refused():
    # K = I + h a diag(beta) - h^2 a diag(alpha) a loses diagonal dominance for h |beta| ~ 1;
    # the elimination without pivoting would no longer be safe, so it must refuse.
    tab = col.gauss_legendre(4)
    with pytest.raises(ValueError, match="diagonally dominant"):
        col.second_order_steps(np.array([1.0]), np.zeros((4, 1)), np.full((4, 1), 10.0), tab)


def test_chain_is_the_plain_recursion():
    # Reference: the recursion v_{i+1} = (I + dphi_i) v_i + q_i written out with numpy matrix products.
    rng = np.random.default_rng(7)
    dphi, q, v0 = 0.1 * rng.normal(size=(2, 2, 50)), rng.normal(size=(2, 50)), rng.normal(size=2)
    ref = [v0]
    for i in range(50):
        ref.append((np.eye(2) + dphi[:, :, i]) @ ref[-1] + q[:, i])
    np.testing.assert_allclose(col.chain(dphi, q, v0), np.array(ref).T, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(col.chain(dphi, None, v0)[:, 1], v0 + dphi[:, :, 0] @ v0, rtol=1e-15)
