"""Gauss-Legendre collocation for linear second-order equations, all steps built at once.

The equation is y'' = alpha(x) y - beta(x) y' + g(x) for one unknown y(x) (the growth
equations of :mod:`icgen.background` have this form). The s-stage Gauss-Legendre
collocation method (the s-stage Gauss implicit Runge-Kutta method) applied to the
first-order system (y, p = y') takes a step of length h from x_i by solving

    Y_j = y_i + h sum_k a_jk P_k,
    P_j = p_i + h sum_k a_jk (alpha_k Y_k - beta_k P_k + g_k),        j = 1..s,

(subscript k: value at the stage abscissa x_i + c_k h) and setting
y_{i+1} = y_i + h sum_j b_j P_j, p_{i+1} = p_i + h sum_j b_j (alpha_j Y_j - beta_j P_j + g_j).
Eliminating Y leaves s linear equations for the stage slopes,

    K P = p_i 1 + y_i h a alpha + h a g,   K = I + h a diag(beta) - h^2 a diag(alpha) a,

so every step is an affine map (y, p)_{i+1} = phi_i (y, p)_i + q_i, and so are the
stage values. The maps of all steps are built together (one vectorised LU factorisation
of the s x s matrices K, which are I + O(h |beta|, h^2 |alpha|) and diagonally dominant),
then chained from the initial value one step after the other.

Order: the values at the step ends are accurate to O(h^(2s)) globally (superconvergence
of collocation at the Gauss points), the stage values locally to O(h^(s+1)) (stage order
s). A system solved in sequence with stage values of the first equation feeding the source
of the second (D1 then D2 in the background) is exactly the Gauss method applied to the
combined system, so it keeps the order 2s at the step ends. For a quadrature y' = f(x)
the method reduces to the s-point Gauss rule.

Tableau (simplifying assumption C(s)): c_j are the Gauss-Legendre nodes mapped to
[0, 1], b_j their weights / 2, and a_jk = int_0^{c_j} l_k(u) du with l_k the Lagrange
polynomial of the nodes (l_k(c_m) = delta_km). That integral of a polynomial of degree
s - 1 is computed exactly by the s-point Gauss rule on [0, c_j] from the product form of
l_k (no Vandermonde matrix, so the tableau is accurate to a few units of round-off).

References
----------
.. [1] Butcher (1964), "Implicit Runge-Kutta processes", Math. Comp. 18, 50
       (the Gauss methods and their order 2s) -- from memory.
.. [2] Hairer, Norsett & Wanner (1993), Solving Ordinary Differential Equations I,
       2nd ed., Springer, sec. II.7 (collocation methods, their equivalence with the
       implicit Runge-Kutta methods satisfying C(s), order 2s at the Gauss points,
       stage order s) -- from memory.
"""

from dataclasses import dataclass

import numpy as np

__all__ = ["GaussTableau", "gauss_legendre", "SecondOrderSteps", "second_order_steps", "chain"]


@dataclass(frozen=True)
class GaussTableau:
    """Butcher tableau of the s-stage Gauss-Legendre method.

    Attributes
    ----------
    c : ndarray, shape (s,)
        Stage abscissae in (0, 1), increasing.
    a : ndarray, shape (s, s)
        Collocation matrix a_jk = int_0^{c_j} l_k(u) du.
    b : ndarray, shape (s,)
        Weights b_k = int_0^1 l_k(u) du (they sum to 1).
    """

    c: np.ndarray
    a: np.ndarray
    b: np.ndarray


def _lagrange(c, u):
    """l_k(u) for every node k of c (product form); u of any shape -> u.shape + (s,)."""
    u = np.asarray(u, dtype=np.float64)[..., None]
    out = np.ones(u.shape[:-1] + (c.size,))
    for m in range(c.size):
        other = np.arange(c.size) != m
        out[..., other] *= (u - c[m]) / (c[other] - c[m])  # factor m of every l_k, k != m
    return out


def gauss_legendre(s):
    """Tableau of the s-stage Gauss-Legendre collocation method (order 2s).

    Parameters
    ----------
    s : int
        Number of stages, 1 <= s <= 10.

    Returns
    -------
    GaussTableau

    Notes
    -----
    Nodes z and weights w of ``numpy.polynomial.legendre.leggauss`` on [-1, 1] mapped
    to [0, 1]: c = (z + 1)/2, b = w/2; a_jk = c_j sum_m b_m l_k(c_j c_m) (the Gauss rule
    on [0, c_j], exact for the polynomial l_k of degree s - 1).
    """
    if not (isinstance(s, int) and 1 <= s <= 10):
        raise ValueError(f"s = {s!r}: need an integer number of stages in [1, 10]")
    z, w = np.polynomial.legendre.leggauss(s)
    c, b = 0.5 * (z + 1.0), 0.5 * w
    a = c[:, None] * np.einsum("m,jmk->jk", b, _lagrange(c, c[:, None] * c[None, :]))
    for arr in (c, a, b):
        arr.flags.writeable = False
    return GaussTableau(c=c, a=a, b=b)


def _lu(k_mat):
    """LU factors (unit lower L below the diagonal, U on and above it) of every K, no pivoting.

    k_mat has shape (s, s, n): entry (j, m) of all n matrices is one contiguous array.
    Elimination without pivoting is stable because the matrices are checked to be strictly
    diagonally dominant by rows (growth factor at most 2; Higham 2002, Accuracy and
    Stability of Numerical Algorithms, 2nd ed., sec. 9.5 -- from memory).
    """
    s = k_mat.shape[0]
    off = np.abs(k_mat).sum(axis=1) - 2.0 * np.abs(k_mat[np.arange(s), np.arange(s)])
    if not np.all(off < 0.0):
        raise ValueError("collocation stage matrices are not diagonally dominant: "
                         "the steps are too long for the coefficients")
    lu = k_mat.copy()
    for k in range(s):
        lu[k + 1:, k] /= lu[k, k]
        lu[k + 1:, k + 1:] -= lu[k + 1:, k, None] * lu[k, None, k + 1:]
    return lu


def _lu_solve(lu, rhs):
    """Solve K z = rhs for every step from the factors of :func:`_lu`; rhs of shape (s, n)."""
    z = rhs.copy()
    s = lu.shape[0]
    for k in range(s):                   # forward substitution, unit lower triangle
        z[k + 1:] -= lu[k + 1:, k] * z[k]
    for k in range(s - 1, -1, -1):       # back substitution
        z[k] /= lu[k, k]
        z[:k] -= lu[:k, k] * z[k]
    return z


@dataclass(frozen=True)
class SecondOrderSteps:
    """Step maps of y'' = alpha y - beta y' + g over n consecutive intervals (module notes).

    Arrays are laid out with the step index last.

    Attributes
    ----------
    tableau : GaussTableau
    h : ndarray, shape (n,)
        Step lengths.
    alpha, beta : ndarray, shape (s, n)
        Coefficients at the stage abscissae x_i + c_j h_i.
    lu : ndarray, shape (s, s, n)
        LU factors of the stage matrix K of every step.
    dphi : ndarray, shape (2, 2, n)
        Increments of the homogeneous step maps, phi - I: (y, y')_{i+1} = (I + dphi[:, :, i]) (y, y')_i
        (+ the source term). Kept without the identity so that these O(h) entries carry full
        relative precision (1 + dphi would round them to the precision of 1).
    stage_y : ndarray, shape (2, s, n)
        Homogeneous stage maps: Y_ji = stage_y[0, j, i] y_i + stage_y[1, j, i] y'_i.
    """

    tableau: GaussTableau
    h: np.ndarray
    alpha: np.ndarray
    beta: np.ndarray
    lu: np.ndarray
    dphi: np.ndarray
    stage_y: np.ndarray

    def stage_values(self, y, dy):
        """Stage values Y (shape (s, n)) of the homogeneous equation from y_i and y'_i (shape (n,))."""
        return self.stage_y[0] * y + self.stage_y[1] * dy

    def source_terms(self, g):
        """Source term q of the step maps for g at the stage abscissae.

        Parameters
        ----------
        g : ndarray, shape (s, n)

        Returns
        -------
        ndarray, shape (2, n)
            (y, y')_{i+1} = (I + dphi_i) (y, y')_i + q_i.
        """
        a, b, h = self.tableau.a, self.tableau.b, self.h
        w_g = _lu_solve(self.lu, h * (a @ g))       # stage slopes P driven by g alone
        y_g = h * (a @ w_g)                         # stage values Y driven by g alone
        return np.array([h * (b @ w_g), h * (b @ (self.alpha * y_g - self.beta * w_g + g))])


def second_order_steps(h, alpha, beta, tableau):
    """Gauss-Legendre collocation step maps of y'' = alpha(x) y - beta(x) y' (+ g) for many steps.

    Parameters
    ----------
    h : ndarray, shape (n,)
        Step lengths (nonzero).
    alpha, beta : ndarray, shape (s, n)
        alpha(x) and beta(x) at the stage abscissae x_i + c_j h_i of every step.
    tableau : GaussTableau
        With s stages.

    Returns
    -------
    SecondOrderSteps

    Raises
    ------
    ValueError
        If a stage matrix K is not strictly diagonally dominant (steps too long for
        the coefficients: h |beta| and h^2 |alpha| must be well below 1).

    Notes
    -----
    With w_p = K^-1 1 and w_y = K^-1 (h a alpha) the stage slopes are P = p_i w_p + y_i w_y
    and the stage values Y = y_i (1 + h a w_y) + p_i h a w_p (module notes); then
    phi = I + dphi, dphi = [[h b.w_y, h b.w_p], [h b.(alpha Y_y - beta w_y), h b.(alpha Y_p - beta w_p)]]
    with Y_y, Y_p the two columns of the stage map.
    """
    a, b = tableau.a, tableau.b
    s = a.shape[0]
    # K_jm = delta_jm + h a_jm beta_m - h^2 sum_k a_jk alpha_k a_km  (a_jk a_km as a (s, s, s) array)
    aa = np.einsum("jk,km->jmk", a, a)
    k_mat = (np.eye(s)[:, :, None] + h * a[:, :, None] * beta[None, :, :]
             - h**2 * np.tensordot(aa, alpha, axes=(2, 0)))
    lu = _lu(k_mat)
    w_p = _lu_solve(lu, np.ones_like(alpha))
    w_y = _lu_solve(lu, h * (a @ alpha))
    stage_y = np.array([1.0 + h * (a @ w_y), h * (a @ w_p)])
    dphi = np.array([[h * (b @ w_y), h * (b @ w_p)],
                     [h * (b @ (alpha * stage_y[0] - beta * w_y)),
                      h * (b @ (alpha * stage_y[1] - beta * w_p))]])
    return SecondOrderSteps(tableau=tableau, h=h, alpha=alpha, beta=beta, lu=lu, dphi=dphi,
                            stage_y=stage_y)


def chain(dphi, q, y0):
    """Values of the recursion v_{i+1} = v_i + dphi_i v_i + q_i for 2-vectors v, i = 0..n-1.

    Parameters
    ----------
    dphi : ndarray, shape (2, 2, n)
        Increments phi - I of the step maps.
    q : ndarray, shape (2, n), or None (homogeneous)
    y0 : array_like, shape (2,)
        v_0.

    Returns
    -------
    ndarray, shape (2, n + 1)
        v_0 .. v_n as columns.

    Notes
    -----
    The maps are applied in order, one after the other, in plain double-precision float
    arithmetic, each as v_i plus its increment. Round-off grows at most linearly with n
    (measured: 7.5e-15 relative after 6460 identical steps, Einstein-de Sitter growth in
    tests/test_background_integrator.py).
    """
    n = dphi.shape[2]
    if q is None:
        q = np.zeros((2, n))
    y, p = float(y0[0]), float(y0[1])
    ys, ps = [y], [p]
    for f00, f01, f10, f11, q0, q1 in zip(*dphi.reshape(4, n).tolist(), *q.tolist()):
        y, p = y + (f00 * y + f01 * p + q0), p + (f10 * y + f11 * p + q1)
        ys.append(y)
        ps.append(p)
    return np.array([ys, ps])
