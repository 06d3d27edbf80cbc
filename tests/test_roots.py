"""Tests of icgen._roots.brent, the bracketed root finder.

References: closed-form roots (sqrt 2, ln 3, cube roots), the Dottie number (the root of
cos x = x, 0.7390851332151607; published to many digits, e.g. OEIS A003957), and
scipy.optimize.brentq (test-only) run with the same bracket and tolerances.

Tolerance: the documented one, |x - root| <= xtol + rtol |x| (plus one unit of round-off of
the reference value).
"""

import math

import pytest
from scipy.optimize import brentq

from icgen._roots import brent

CASES = [
    # f, bracket, exact root (closed form)
    (lambda x: x * x - 2.0, (0.0, 2.0), math.sqrt(2.0)),
    (lambda x: math.exp(x) - 3.0, (-5.0, 5.0), math.log(3.0)),
    (lambda x: x**3 - 2.0, (-1.0, 4.0), 2.0 ** (1.0 / 3.0)),
    (lambda x: math.cos(x) - x, (0.0, 1.0), 0.7390851332151607),  # Dottie number (OEIS A003957)
    (lambda x: (x - 1e-3) * (1.0 + x * x), (-10.0, 1.0), 1e-3),
    (lambda x: math.tanh(50.0 * (x - 0.3)), (-1.0, 2.0), 0.3),  # nearly a step: tests bisection
]


@pytest.mark.parametrize("f, bracket, root", CASES)
@pytest.mark.parametrize("xtol, rtol", [(1e-15, 1e-15), (1e-14, 1e-12), (1e-6, 1e-6)])
def test_brent_meets_its_tolerance_on_known_roots(f, bracket, root, xtol, rtol):
    # Reference: the closed-form root of each case (table above).
    x = brent(f, *bracket, xtol=xtol, rtol=rtol)
    assert abs(x - root) <= xtol + rtol * abs(x) + 2.2e-16 * abs(root)


@pytest.mark.parametrize("f, bracket, root", CASES)
def test_brent_agrees_with_scipy_brentq(f, bracket, root):
    # Reference: scipy.optimize.brentq with the same bracket and tolerances; both must lie
    # within the tolerance of each other's sign change.
    xtol, rtol = 1e-14, 1e-12
    ours, ref = brent(f, *bracket, xtol=xtol, rtol=rtol), brentq(f, *bracket, xtol=xtol, rtol=rtol)
    assert abs(ours - ref) <= 2 * (xtol + rtol * abs(ref))


def test_brent_is_superlinear():
    # Reference: Brent (1973, ch. 4; from memory): near a simple root the method converges
    # superlinearly, so a smooth root to 1e-15 needs far fewer evaluations than bisection
    # (log2(2/1e-15) = 51 halvings).
    calls = []

    def f(x):
        calls.append(x)
        return x * x - 2.0
    brent(f, 0.0, 2.0, xtol=1e-15, rtol=1e-15)
    assert len(calls) < 15  # measured 10


def test_brent_end_points_and_errors():
    assert brent(lambda x: x - 1.0, 1.0, 3.0) == 1.0     # root at an end: returned as is
    assert brent(lambda x: x - 3.0, 1.0, 3.0) == 3.0
    with pytest.raises(ValueError, match="same sign"):
        brent(lambda x: x * x + 1.0, -1.0, 1.0)
    with pytest.raises(ValueError, match="rtol"):
        brent(lambda x: x, -1.0, 1.0, rtol=1e-17)
    with pytest.raises(ValueError, match="no convergence"):
        brent(lambda x: math.tanh(50.0 * (x - 0.3)), 0.0, 1.0, xtol=0.0, rtol=1e-15, maxiter=2)
