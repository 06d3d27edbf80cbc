"""Tests of icgen._interp: cubic Hermite interpolation, the clamped cubic spline, the Thomas solver.

References: scipy.interpolate.CubicHermiteSpline and scipy.interpolate.CubicSpline with
bc_type=((1, slope_lo), (1, slope_hi)) (test-only), numpy.linalg.solve, and exact cubics
(a cubic Hermite interpolant with exact slopes, and a clamped spline with exact end slopes,
reproduce any cubic: de Boor 2001, A Practical Guide to Splines, ch. IV; from memory).

Tolerances: 1e-14 relative against CubicHermiteSpline (the same cubic on each interval,
evaluated in a different order: a few units of round-off), 1e-12 relative against CubicSpline
(its slopes come from a banded LAPACK solve, ours from the Thomas algorithm: round-off of a
diagonally dominant solve). Test data are kept away from zero so relative errors are meaningful.
"""

import numpy as np
import pytest
from scipy.interpolate import CubicHermiteSpline, CubicSpline

from icgen import _interp


def _nodes(rng, n, lo=-3.0, hi=2.0):
    """Strictly increasing, irregular nodes on [lo, hi]."""
    x = np.sort(rng.uniform(lo, hi, n))
    x[0], x[-1] = lo, hi
    return np.unique(x)


def _points(rng, x, n=4000):
    """Evaluation points: random inside, every node, and up to one end interval outside each end
    (the end cubics continued; farther out round-off in the cubic term grows like (u/h)^3)."""
    return np.concatenate([rng.uniform(x[0], x[-1], n), x, np.linspace(2 * x[0] - x[1], x[0], 20),
                           np.linspace(x[-1], 2 * x[-1] - x[-2], 20)])


@pytest.mark.parametrize("n", [2, 3, 10, 500])
def test_hermite_against_scipy(n):
    # Reference: scipy.interpolate.CubicHermiteSpline (extrapolating with the end cubics, as ours).
    rng = np.random.default_rng(n)
    x = _nodes(rng, n)
    y = rng.uniform(1.0, 2.0, x.size)
    dydx = rng.uniform(-1.0, 1.0, x.size)
    ours, ref = _interp.CubicHermite(x, y, dydx), CubicHermiteSpline(x, y, dydx)
    xn = _points(rng, x)
    np.testing.assert_allclose(ours(xn), ref(xn), rtol=1e-14)  # measured max 5.3e-15
    # derivatives: compared relative to their scale (they cross zero)
    for nu in (1, 2):
        scale = np.abs(ref(xn, nu)).max()
        np.testing.assert_allclose(ours(xn, nu), ref(xn, nu), rtol=0, atol=1e-14 * scale)
    assert ours(0.5).shape == () and ours(np.ones((2, 3))).shape == (2, 3)


def test_hermite_reproduces_a_cubic():
    # Reference: the cubic p(x) = 2 - x + 0.5 x^2 + 0.3 x^3 itself; with exact values and slopes at
    # the nodes the Hermite interpolant is p on every interval (uniqueness of the Hermite cubic).
    rng = np.random.default_rng(1)
    x = _nodes(rng, 40)
    p = np.polynomial.Polynomial([2.0, -1.0, 0.5, 0.3])
    herm = _interp.CubicHermite(x, p(x), p.deriv()(x))
    xn = _points(rng, x)
    scale = np.abs(p(xn)).max()
    np.testing.assert_allclose(herm(xn), p(xn), rtol=0, atol=1e-14 * scale)  # measured 1.0e-15
    # The nu-th derivative amplifies the round-off of the values by ~1/h^nu (h: node spacing),
    # which sets the tolerance: 50 eps scale / h_min^nu.
    for nu in (1, 2):
        atol = 50 * np.finfo(float).eps * scale / np.diff(x).min() ** nu
        np.testing.assert_allclose(herm(xn, nu), p.deriv(nu)(xn), rtol=0, atol=atol)


def test_hermite_rejects_bad_input():
    with pytest.raises(ValueError, match="increasing"):
        _interp.CubicHermite([0.0, 0.0, 1.0], [1.0, 2.0, 3.0], [0.0, 0.0, 0.0])
    with pytest.raises(ValueError, match="1-D"):
        _interp.CubicHermite([0.0], [1.0], [0.0])
    with pytest.raises(ValueError, match="nu"):
        _interp.CubicHermite([0.0, 1.0], [1.0, 2.0], [0.0, 0.0])(0.5, nu=3)


@pytest.mark.parametrize("n", [2, 3, 4, 50, 3000])
def test_clamped_spline_against_scipy(n):
    # Reference: scipy.interpolate.CubicSpline(x, y, bc_type=((1, slope_lo), (1, slope_hi))) and
    # its derivative().
    rng = np.random.default_rng(100 + n)
    x = _nodes(rng, n)
    y = 3.0 + np.sin(2.0 * x) + 0.1 * rng.normal(size=x.size)
    s_lo, s_hi = 0.7, -1.3
    ours = _interp.clamped_cubic_spline(x, y, s_lo, s_hi)
    ref = CubicSpline(x, y, bc_type=((1, s_lo), (1, s_hi)))
    xn = _points(rng, x)
    np.testing.assert_allclose(ours(xn), ref(xn), rtol=1e-12)  # measured max 4.1e-13 (n = 3000)
    dref = ref.derivative()(xn)
    np.testing.assert_allclose(ours(xn, 1), dref, rtol=0, atol=1e-12 * np.abs(dref).max())  # measured 5e-16


def test_clamped_spline_reproduces_a_cubic_and_is_c2():
    # Reference: a clamped spline through the values of a cubic with the cubic's end slopes is the
    # cubic itself (de Boor 2001, ch. IV; from memory), so value, slope and curvature match.
    rng = np.random.default_rng(3)
    x = _nodes(rng, 200)
    p = np.polynomial.Polynomial([1.0, 0.4, -0.8, 0.25])
    dp = p.deriv()
    spl = _interp.clamped_cubic_spline(x, p(x), dp(x[0]), dp(x[-1]))
    xn = _points(rng, x)
    scale = np.abs(p(xn)).max()
    np.testing.assert_allclose(spl(xn), p(xn), rtol=0, atol=1e-13 * scale)
    for nu in (1, 2):  # tolerance as in test_hermite_reproduces_a_cubic
        atol = 50 * np.finfo(float).eps * scale / np.diff(x).min() ** nu
        np.testing.assert_allclose(spl(xn, nu), p.deriv(nu)(xn), rtol=0, atol=atol)
    # Continuity of the second derivative at the interior nodes of a spline through random data
    # (the defining equations): left and right limits agree to round-off relative to the scale.
    y = rng.normal(size=x.size)
    spl = _interp.clamped_cubic_spline(x, y, 0.0, 0.0)
    c2, c3 = spl._c[1], spl._c[0]                      # curvature / 2 and third coefficient
    h = np.diff(x)
    left = 2.0 * c2[:-1] + 6.0 * c3[:-1] * h[:-1]      # p_{i-1}''(x_i)
    right = 2.0 * c2[1:]                               # p_i''(x_i)
    atol = 50 * np.finfo(float).eps * np.abs(y).max() / h.min() ** 2  # round-off of y / h^2
    np.testing.assert_allclose(left, right, rtol=0, atol=atol)


def test_thomas_against_a_dense_solve():
    # Reference: numpy.linalg.solve of the same (diagonally dominant) matrix written out densely.
    rng = np.random.default_rng(5)
    n = 300
    lower, upper = rng.uniform(-1, 1, n - 1), rng.uniform(-1, 1, n - 1)
    diag = 2.5 + rng.uniform(0, 1, n)
    rhs = rng.normal(size=n)
    dense = np.diag(diag) + np.diag(lower, -1) + np.diag(upper, 1)
    np.testing.assert_allclose(_interp.solve_tridiagonal(lower, diag, upper, rhs),
                               np.linalg.solve(dense, rhs), rtol=1e-13, atol=1e-14)
