"""A bracketed root finder for one scalar equation (Brent's method), numpy-free and scipy-free.

Private helper of :mod:`icgen.background` and :mod:`icgen.start`; it keeps
scipy.optimize out of the start-up imports.

Brent's method keeps a bracket [b, c] with f(b) f(c) <= 0 and |f(b)| <= |f(c)|; each step
tries inverse quadratic interpolation through the last three points (the secant when
only two are distinct) and falls back to bisection whenever the interpolated point
leaves the bracket's inner three quarters or the steps stop halving, so it converges
at least as surely as bisection and superlinearly near a simple root.

References
----------
.. [1] Brent (1973), Algorithms for Minimization without Derivatives, Prentice-Hall,
       ch. 4 (the procedure "zero") -- from memory.
"""

import math

__all__ = ["brent"]

_EPS = 2.220446049250313e-16


def brent(f, lo, hi, xtol=1e-12, rtol=4.0 * _EPS, maxiter=200):
    """Root of f in the bracket [lo, hi] by Brent's method.

    Parameters
    ----------
    f : callable
        f(x) -> float, continuous on [lo, hi].
    lo, hi : float
        Bracket ends with f(lo) and f(hi) of opposite signs (or one of them zero).
    xtol, rtol : float
        The returned x is within xtol + rtol |x| of a sign change of f (the bracket
        is shrunk until its half-width is at most (xtol + rtol |x|) / 2).
        rtol >= 4 eps (2.2e-16) is needed for progress at round-off.
    maxiter : int
        Largest number of evaluations of f after the two ends.

    Returns
    -------
    float

    Raises
    ------
    ValueError
        If f(lo) and f(hi) have the same sign, a tolerance is out of range, or the
        iteration does not converge within maxiter evaluations.
    """
    if not (xtol >= 0.0 and rtol >= 4.0 * _EPS):
        raise ValueError(f"xtol = {xtol!r}, rtol = {rtol!r}: need xtol >= 0 and rtol >= 4 eps")
    a, b = float(lo), float(hi)
    fa, fb = float(f(a)), float(f(b))
    if fa == 0.0:
        return a
    if fb == 0.0:
        return b
    if math.copysign(1.0, fa) == math.copysign(1.0, fb):
        raise ValueError(f"f({a!r}) = {fa!r} and f({b!r}) = {fb!r} have the same sign: "
                         "no bracketed root")
    c, fc = a, fa
    d = e = b - a
    for _ in range(maxiter):
        if (fb > 0.0) == (fc > 0.0):       # keep the root between b and c
            c, fc = a, fa
            d = e = b - a
        if abs(fc) < abs(fb):              # b is the best estimate so far
            a, b, c = b, c, b
            fa, fb, fc = fb, fc, fb
        tol = 0.5 * (xtol + rtol * abs(b))
        half = 0.5 * (c - b)
        if abs(half) <= tol or fb == 0.0:
            return b
        if abs(e) >= tol and abs(fa) > abs(fb):
            s = fb / fa
            if a == c:                     # secant
                p, q = 2.0 * half * s, 1.0 - s
            else:                          # inverse quadratic interpolation
                qa, r = fa / fc, fb / fc
                p = s * (2.0 * half * qa * (qa - r) - (b - a) * (r - 1.0))
                q = (qa - 1.0) * (r - 1.0) * (s - 1.0)
            if p > 0.0:
                q = -q
            else:
                p = -p
            if 2.0 * p < min(3.0 * half * q - abs(tol * q), abs(e * q)):
                e, d = d, p / q            # accept the interpolation
            else:
                d = e = half               # bisection
        else:
            d = e = half                   # bisection
        a, fa = b, fb
        b += d if abs(d) > tol else math.copysign(tol, half)
        fb = float(f(b))
    raise ValueError(f"no convergence in {maxiter} iterations (bracket [{lo!r}, {hi!r}])")
