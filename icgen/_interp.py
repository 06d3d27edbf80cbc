"""Piecewise cubic interpolation in one variable: Hermite (given slopes) and clamped splines.

Private numpy-only helpers of :mod:`icgen.background`, :mod:`icgen.schedule` and
:mod:`icgen.spectrum` (they keep scipy.interpolate out of the start-up imports).

On the interval [x_i, x_{i+1}] of width h_i, with u = x - x_i, values y and slopes m
at its ends and secant delta_i = (y_{i+1} - y_i)/h_i, the cubic Hermite interpolant is

    p(x) = y_i + m_i u + c2_i u^2 + c3_i u^3,
    c2_i = (3 delta_i - 2 m_i - m_{i+1}) / h_i,   c3_i = (m_i + m_{i+1} - 2 delta_i) / h_i^2,

the unique cubic with those end values and slopes (e.g. de Boor 2001, ch. IV,
"piecewise cubic Hermite interpolation" -- from memory). It is evaluated by Horner's rule;
beyond the end nodes the end cubics are continued (callers check their own ranges).

The clamped (complete) cubic spline takes the slopes that make the second derivative
continuous at the interior nodes, for given end slopes m_0 and m_{n-1}. Equating the
second derivatives 2(m_{i-1} + 2 m_i - 3 delta_{i-1})/h_{i-1} and
2(3 delta_i - 2 m_i - m_{i+1})/h_i of the two cubics meeting at x_i gives, for i = 1..n-2,

    h_i m_{i-1} + 2 (h_{i-1} + h_i) m_i + h_{i-1} m_{i+1} = 3 (h_i delta_{i-1} + h_{i-1} delta_i)

(de Boor 2001, ch. IV, the "complete" cubic spline -- from memory). The system is
tridiagonal and strictly diagonally dominant, so Gaussian elimination without pivoting
(the Thomas algorithm: one forward sweep, one back substitution) is stable (Golub & Van
Loan, Matrix Computations, sec. 4.3, diagonally dominant band systems -- from memory).

References
----------
.. [1] de Boor (2001), A Practical Guide to Splines, revised ed., Springer, ch. IV.
.. [2] Golub & Van Loan (2013), Matrix Computations, 4th ed., sec. 4.3.
"""

import numpy as np

__all__ = ["CubicHermite", "clamped_cubic_spline", "solve_tridiagonal"]


class CubicHermite:
    """Piecewise cubic Hermite interpolant of values and slopes at nodes (module notes).

    Parameters
    ----------
    x : array_like, shape (n,)
        Nodes, finite and strictly increasing, n >= 2.
    y, dydx : array_like, shape (n,)
        Values and first derivatives at the nodes.

    Attributes
    ----------
    x : ndarray, shape (n,)
        The nodes (read-only).

    Notes
    -----
    Call it as ``p(xnew, nu=0)``: ``xnew`` of any shape, ``nu`` = 0, 1 or 2 for the
    value or its first or second derivative; returns an ndarray of ``xnew``'s shape
    (0-d for a scalar). A point on a node uses the interval to its right (the last
    interval for the last node).
    """

    def __init__(self, x, y, dydx):
        x = np.array(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        m = np.asarray(dydx, dtype=np.float64)
        if x.ndim != 1 or x.size < 2 or y.shape != x.shape or m.shape != x.shape:
            raise ValueError(f"x, y and dydx must be 1-D of one length >= 2, got shapes "
                             f"{x.shape}, {y.shape}, {m.shape}")
        h = np.diff(x)
        if not np.all(h > 0.0):
            raise ValueError("x must be strictly increasing")
        delta = np.diff(y) / h
        # Power-basis coefficients on each interval, highest power first (module notes).
        self._c = np.array([(m[:-1] + m[1:] - 2.0 * delta) / h**2,
                            (3.0 * delta - 2.0 * m[:-1] - m[1:]) / h,
                            m[:-1],
                            y[:-1]])
        x.flags.writeable = False
        self._c.flags.writeable = False
        self.x = x

    def __call__(self, xnew, nu=0):
        xnew = np.asarray(xnew, dtype=np.float64)
        i = np.clip(np.searchsorted(self.x, xnew, side="right") - 1, 0, self.x.size - 2)
        u = xnew - self.x[i]
        c3, c2, c1, c0 = (c[i] for c in self._c)
        if nu == 0:
            return ((c3 * u + c2) * u + c1) * u + c0
        if nu == 1:
            return (3.0 * c3 * u + 2.0 * c2) * u + c1
        if nu == 2:
            return 6.0 * c3 * u + 2.0 * c2
        raise ValueError(f"nu = {nu!r}: only the value (0) and derivatives 1 and 2 are available")


def solve_tridiagonal(lower, diag, upper, rhs):
    """Solve a diagonally dominant tridiagonal system by the Thomas algorithm.

    Parameters
    ----------
    lower : ndarray, shape (n - 1,)
        Sub-diagonal, lower[i] = A[i + 1, i].
    diag : ndarray, shape (n,)
        Diagonal.
    upper : ndarray, shape (n - 1,)
        Super-diagonal, upper[i] = A[i, i + 1].
    rhs : ndarray, shape (n,)

    Returns
    -------
    ndarray, shape (n,)

    Notes
    -----
    Gaussian elimination without pivoting, stable for strictly diagonally dominant
    matrices (module notes): diag'_i = diag_i - lower_{i-1} upper_{i-1} / diag'_{i-1},
    rhs'_i = rhs_i - lower_{i-1} rhs'_{i-1} / diag'_{i-1}, then
    x_i = (rhs'_i - upper_i x_{i+1}) / diag'_i from the last row up. The two sweeps are
    sequential recurrences, run in plain float arithmetic.
    """
    n = diag.size
    lo, up = lower.tolist(), upper.tolist()
    d, r = diag.tolist(), rhs.tolist()
    for i in range(1, n):
        f = lo[i - 1] / d[i - 1]
        d[i] -= f * up[i - 1]
        r[i] -= f * r[i - 1]
    x = [0.0] * n
    x[-1] = r[-1] / d[-1]
    for i in range(n - 2, -1, -1):
        x[i] = (r[i] - up[i] * x[i + 1]) / d[i]
    return np.array(x)


def clamped_cubic_spline(x, y, slope_lo, slope_hi):
    """Clamped cubic spline through (x, y) with end slopes slope_lo, slope_hi.

    Parameters
    ----------
    x : array_like, shape (n,)
        Nodes, strictly increasing, n >= 2.
    y : array_like, shape (n,)
    slope_lo, slope_hi : float
        dy/dx at x[0] and x[-1].

    Returns
    -------
    CubicHermite
        The spline (twice continuously differentiable), with the slopes solved from the
        continuity conditions of the module notes.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    if x.ndim != 1 or x.size < 2 or y.shape != x.shape:
        raise ValueError(f"x and y must be 1-D of one length >= 2, got shapes {x.shape}, {y.shape}")
    m = np.empty_like(x)
    m[0], m[-1] = slope_lo, slope_hi
    if x.size > 2:
        h = np.diff(x)
        delta = np.diff(y) / h
        rhs = 3.0 * (h[1:] * delta[:-1] + h[:-1] * delta[1:])
        rhs[0] -= h[1] * slope_lo      # known m_0 moved to the right-hand side (row i = 1)
        rhs[-1] -= h[-2] * slope_hi    # known m_{n-1} (row i = n - 2)
        # Row i (i = 1..n-2): sub-diagonal h_i, diagonal 2 (h_{i-1} + h_i), super-diagonal h_{i-1}.
        m[1:-1] = solve_tridiagonal(h[2:], 2.0 * (h[:-1] + h[1:]), h[:-2], rhs)
    return CubicHermite(x, y, m)
