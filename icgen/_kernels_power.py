"""Private numba kernels of the power-spectrum estimator and the particle-mesh stepper.

Mass assignment (Hockney & Eastwood 1988, ch. 5): a particle at u = x/H (cell units,
mesh point i at u = i) is spread over the mesh points with the weights of

* NGP (p = 1): 1 at j = round(u);
* CIC (p = 2): 1 - d at j0 = floor(u), d at j0 + 1, with d = u - j0;
* TSC (p = 3): 3/4 - d^2 at j = round(u), (1/2 - d)^2 / 2 at j - 1 and
  (1/2 + d)^2 / 2 at j + 1, with d = u - j in [-1/2, 1/2);

in each of the three directions (the 3-D weight is the product).

Determinism
-----------
The particles are first ordered (stable counting sort) by the *group* of their home
plane along the first axis: group g holds home planes [g w, (g + 1) w) with a width
w >= 2 that depends on the mesh size only. A particle of group g writes to planes
[g w - 1, (g + 1) w] at most (TSC), so groups of equal parity never write to the
same plane. The deposit runs in passes: all even groups in parallel, then all odd
groups in parallel (and, if the number of groups is odd, the last group alone, since
it touches plane 0 like group 0). Inside a group the particles are added one after
the other in sorted order. Every mesh value is therefore the same sum in the same
order for any number of threads: results are bit-identical on 1 and N threads.
"""

import numpy as np
from numba import njit, prange


@njit(cache=True, inline="always")
def _axis_weights(u, n, order):
    """First mesh index and the up-to-three weights along one axis (u in cells, -1 <= u <= n).

    The index is wrapped into [0, n) by one comparison (u never leaves [-1, n]).
    """
    if order == 1:
        j = int(np.floor(u + 0.5))
        if j >= n:
            j -= n
        return j, 1.0, 0.0, 0.0
    if order == 2:
        fj = np.floor(u)
        d = u - fj
        j = int(fj)
        if j < 0:
            j += n
        elif j >= n:
            j -= n
        return j, 1.0 - d, d, 0.0
    fj = np.floor(u + 0.5)
    d = u - fj
    j = int(fj) - 1
    if j < 0:
        j += n
    elif j >= n:
        j -= n
    return j, 0.5 * (0.5 - d) ** 2, 0.75 - d * d, 0.5 * (0.5 + d) ** 2


@njit(cache=True, parallel=True)
def _home_groups(pos, box_size, n, order, shift, width, home):
    """home[p] = group of the home plane of particle p along axis 0 (independent elements)."""
    inv_h = n / box_size
    for p in prange(pos.shape[0]):
        j, _, _, _ = _axis_weights(pos[p, 0] * inv_h - shift, n, order)
        if order == 3:  # TSC returns the plane below its home plane
            j += 1
            if j == n:
                j = 0
        home[p] = j // width


@njit(cache=True)
def _group_order(pos, box_size, n, order, shift, width):
    """Stable counting sort of the particles by the group of their home plane (axis 0).

    Returns (perm, offsets): particles perm[offsets[g]:offsets[g + 1]] belong to group g.
    ``shift`` (in cells) is subtracted from every coordinate before assignment.
    """
    npart = pos.shape[0]
    n_groups = (n + width - 1) // width
    home = np.empty(npart, dtype=np.int64)
    _home_groups(pos, box_size, n, order, shift, width, home)
    offsets = np.zeros(n_groups + 1, dtype=np.int64)
    for p in range(npart):
        offsets[home[p] + 1] += 1
    for g in range(n_groups):
        offsets[g + 1] += offsets[g]
    fill = offsets[:-1].copy()
    perm = np.empty(npart, dtype=np.int64)
    for p in range(npart):
        g = home[p]
        perm[fill[g]] = p
        fill[g] += 1
    return perm, offsets


@njit(cache=True, parallel=True)
def _deposit_groups(pos, weight, perm, offsets, groups, box_size, order, shift, mesh):
    """Add the particles of the listed groups to ``mesh`` (n, n, n), float64, in place.

    ``weight`` has one value per particle, or size 0 for unit weights. The listed groups
    must not write to common planes (module notes); each is done serially in perm order.
    """
    n = mesh.shape[0]
    nn = n * n
    flat = mesh.reshape(nn * n)
    inv_h = n / box_size
    unit = weight.size == 0
    for gi in prange(groups.size):
        g = groups[gi]
        for s in range(offsets[g], offsets[g + 1]):
            p = perm[s]
            m = 1.0 if unit else weight[p]
            ix, wx0, wx1, wx2 = _axis_weights(pos[p, 0] * inv_h - shift, n, order)
            iy, wy0, wy1, wy2 = _axis_weights(pos[p, 1] * inv_h - shift, n, order)
            iz, wz0, wz1, wz2 = _axis_weights(pos[p, 2] * inv_h - shift, n, order)
            wxs = (wx0, wx1, wx2)
            wys = (wy0, wy1, wy2)
            wzs = (wz0, wz1, wz2)
            i = ix
            for a in range(order):
                wa = m * wxs[a]
                j = iy
                for b in range(order):
                    base = i * nn + j * n
                    wab = wa * wys[b]
                    k = iz
                    for c in range(order):
                        flat[base + k] += wab * wzs[c]
                        k += 1
                        if k == n:
                            k = 0
                    j += 1
                    if j == n:
                        j = 0
                i += 1
                if i == n:
                    i = 0


@njit(cache=True, parallel=True)
def _interpolate_cic(field, pos, box_size, shift, out):
    """out[p, d] = CIC interpolation of field[d] (3, n, n, n) at particle p (independent gathers).

    The same CIC weights (and mesh offset ``shift``, in cells) as the assignment (Hockney &
    Eastwood 1988, sec. 5-4: one kernel for assignment and interpolation removes the
    self-force).
    """
    n = field.shape[1]
    inv_h = n / box_size
    for p in prange(pos.shape[0]):
        ix, wx0, wx1, _ = _axis_weights(pos[p, 0] * inv_h - shift, n, 2)
        iy, wy0, wy1, _ = _axis_weights(pos[p, 1] * inv_h - shift, n, 2)
        iz, wz0, wz1, _ = _axis_weights(pos[p, 2] * inv_h - shift, n, 2)
        ix1 = ix + 1 if ix + 1 < n else 0
        iy1 = iy + 1 if iy + 1 < n else 0
        iz1 = iz + 1 if iz + 1 < n else 0
        for d in range(3):
            f = field[d]
            out[p, d] = (wx0 * (wy0 * (wz0 * f[ix, iy, iz] + wz1 * f[ix, iy, iz1])
                                + wy1 * (wz0 * f[ix, iy1, iz] + wz1 * f[ix, iy1, iz1]))
                         + wx1 * (wy0 * (wz0 * f[ix1, iy, iz] + wz1 * f[ix1, iy, iz1])
                                  + wy1 * (wz0 * f[ix1, iy1, iz] + wz1 * f[ix1, iy1, iz1])))
