"""Checks of what was made: an initial-condition file's contents, and a run's snapshots.

Both entry points are pure: they take arrays and attributes already read (``icgen.io_hdf5``,
``icgen.io_snapshot``), a background and, where needed, a spectrum, and return a frozen
result with one :class:`Check` per test -- "pass", "fail" or "skip" with its reason -- plus
the measured numbers for tables and plots. Nothing here prints or touches files.

Initial conditions (:func:`inspect_initial_conditions`)
-------------------------------------------------------
* layout: the root attributes and datasets of :mod:`icgen.io_hdf5`, with their shapes;
* counts: n_particles = grid_per_side^3 = rows; redshift = 1/a - 1;
* mass: particle_mass = omega_m rho_crit,0 L^3 / N (cosmology of the file);
* growth attributes D1, f1, D2, f2, H at a equal to the background's (rel. 1e-6);
* ids: a permutation of 0 .. N - 1; positions finite and inside [0, L); velocities finite;
* mean displacement zero: the k = 0 mode of the displacement field is zero by
  construction, so the mean of x - q(id) vanishes up to the rounding of the stored
  positions, |mean| <= eps(dtype) L (twice the bound of one rounding);
* displacement rms against linear theory: the Zel'dovich displacement variance per
  component on the grid is sigma^2 = (D1^2 / 3) sum_k P(k)/(L^3 k^2) (Parseval with the
  forward-normalised modes of :mod:`icgen.field`; the Nyquist planes are empty); a
  Gaussian realisation scatters about it with var = (2/9) sum_k (D1^2 P/(L^3 k^2))^2
  (each independent mode's |delta_k|^2 is exponential), a fixed-amplitude one does not;
  second order adds a share of about (D1 sigma_delta)^2 (sigma_delta: rms density contrast
  on the grid at D1 = 1; the cross term <psi_1 . psi_2> vanishes for a Gaussian field),
  allowed on top. Pass if |z| <= 5 with z = (rms^2 - sigma^2) / sqrt(var + allowance^2);
* velocities follow the displacements: the least-squares slope of v on x - q equals
  a H(a) f1(a) (Zel'dovich 1970: v = a H f1 D1 psi_1; H in km/s per Mpc/h), to the
  second-order share |f2/f1 - 1| |D2/D1| sigma_delta ~ D1 sigma_delta plus 1e-4;
* P(k) against the target: measured (CIC, interlaced, mesh of twice the particle grid,
  no shot-noise subtraction since a perturbed lattice has far less than Poisson noise
  on these scales) in bins of width k_f up to half the particle Nyquist wavenumber
  (common practice: there the estimator's alias and lattice errors stay below ~1%,
  tests/test_power.py), compared with the target P(k, z) averaged over each bin's modes,
  in units of the Gaussian error P/sqrt(n_modes) (Feldman, Kaiser & Peacock 1994) with a
  systematic share s(k) P added in quadrature, s = 0.01 + Delta^2(k, z): the estimator's
  1% above, plus the order of the first non-linear correction to the power of a displaced
  lattice, Delta^2 = k^3 P(k, z) / (2 pi^2), the expansion parameter of perturbation theory
  (from memory; at 256^3 in 100 Mpc/h at z = 49 the measured excess near k = 4 h/Mpc is
  2.4% where Delta^2 = 2%). Without it a large grid, whose many modes make P/sqrt(n_modes)
  far smaller than 1%, would fail for effects that are not errors of the file. Pass if the
  chi^2 probability with one degree of freedom per bin exceeds 1e-3. A fixed-amplitude
  realisation sits far inside these errors.

A run (:func:`check_run`)
-------------------------
For snapshots of one run, ordered by a, with the earliest as reference:

* growth: in the largest-scale bins, G = P_i(k) / P_ref(k) against (D1(a_i)/D1(a_ref))^2.
  Bins used: the lowest ``n_bins`` (default 3) whose upper edge is below k_nl / 4, with
  k_nl the smallest k where the last snapshot's Delta^2 = k^3 P / (2 pi^2) reaches 1
  (common practice for "well below the non-linear scale"). The statistical error of G
  is the cosmic variance of the growth ratio: writing delta_i = b delta_ref + n, with n
  uncorrelated with delta_ref (non-linear coupling, discreteness), each of the n_modes
  independent modes gives var(G)/G^2 = (2 / n_modes) (1 - r^2) / r^2, where r is the
  cross-correlation coefficient of the two fields in the bin, measured (derived here;
  in linear theory r = 1 and the ratio has no cosmic variance at all). Tolerance:
  n_sigma sigma + floor, with floor (default 0.01) a fixed allowance for the run's own
  force and time-step errors (common practice: percent accuracy on large scales);
* velocities (when present): the velocity divergence theta = div v of the momentum
  field (mass-weighted velocities; equal to theta at linear order) against linear
  theory theta = -a H f1 delta: f = -P_delta,theta / (a H P_delta,delta) per bin
  against f1(a), with var(f)/f^2 = (1 - r^2) / (2 n_modes r^2) (the same model) and the
  same tolerance rule; sqrt(P_theta,theta / P_delta,delta) / (a H) is reported too;
* time (when recorded): |t_file - t(a)| <= time_tolerance * t(a = 1) (common practice;
  codes differ in how they treat radiation at early times).

Power spectra use TSC with interlacing on a mesh of about three times the particle
grid, no shot-noise subtraction (discreteness noise cancels in the ratios at these k).
"""

import json
import math
from dataclasses import dataclass, field

import numpy as np
from scipy import stats

from . import power
from .errors import InputError
from .units import RHO_CRIT_100

__all__ = ["Check", "ICInspection", "inspect_initial_conditions", "RunCheck", "check_run",
           "REQUIRED_ATTRS", "REQUIRED_DATASETS", "snapshot_mesh_size"]

#: Root attributes an icgen particle file must have (icgen.io_hdf5).
REQUIRED_ATTRS = ("format", "format_version", "box_size", "scale_factor", "redshift", "grid_per_side",
                  "n_particles", "particle_mass", "lpt_order", "seed", "D1", "f1", "D2", "f2", "H",
                  "cosmology", "parameters")
#: Datasets under /particles it must have (id is optional: ``write_ids = false``).
REQUIRED_DATASETS = ("position", "velocity")
#: Relative tolerance of stored background numbers (float64 attributes of the same solver).
ATTR_RTOL = 1e-6


@dataclass(frozen=True)
class Check:
    """One test: its name, outcome ("pass", "fail" or "skip") and a one-line reason."""

    name: str
    status: str
    detail: str

    def __post_init__(self):
        if self.status not in ("pass", "fail", "skip"):
            raise ValueError(f"status must be pass, fail or skip, got {self.status!r}")


def _verdict(checks):
    return all(c.status != "fail" for c in checks)


def _rel(a, b):
    return abs(a / b - 1.0) if b != 0 else abs(a - b)


# ---------------------------------------------------------------------------------------
# Initial conditions
# ---------------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class ICInspection:
    """Result of :func:`inspect_initial_conditions`.

    Attributes
    ----------
    checks : tuple of Check
    spectrum : icgen.power.PowerSpectrum or None
        Measured P(k) (k h/Mpc, P (Mpc/h)^3).
    target : ndarray or None
        Target P(k, z) averaged over each bin's modes, (Mpc/h)^3.
    sigma : ndarray or None
        Gaussian error of each bin from the target, (Mpc/h)^3.
    chi2, p_value : float or None
        Of the P(k) comparison (one degree of freedom per bin).
    amplitude_ratio : float or None
        sqrt of the mode-weighted mean of P / P_target: the amplitude of the file's
        fluctuations relative to the target.
    displacement : dict
        rms (per component) and max |x - q| in Mpc/h, the spacing, the expected rms.
    """

    checks: tuple
    spectrum: object = None
    target: np.ndarray | None = None
    sigma: np.ndarray | None = None
    chi2: float | None = None
    p_value: float | None = None
    amplitude_ratio: float | None = None
    displacement: dict = field(default_factory=dict)

    def __post_init__(self):
        for arr in (self.target, self.sigma):
            if arr is not None:
                arr.flags.writeable = False

    @property
    def passed(self):
        """True if no check failed."""
        return _verdict(self.checks)

    def failures(self):
        """The failed checks."""
        return [c for c in self.checks if c.status == "fail"]


def _grid_mode_sums(power_fn, n, box_size):
    """sum_k P/k^2, sum_k (P/k^2)^2 and sum_k P over the grid's modes (full cube, no Nyquist planes).

    P is taken at |k| of each mode; k in h/Mpc. Returns the three sums (units of P and k).
    """
    from scipy.signal import fftconvolve

    m = np.arange(-(n // 2) + 1, n // 2)  # the Nyquist plane -n/2 holds no mode
    c1 = np.bincount(m**2).astype(np.float64)  # number of 1-D integers with a given square
    # number of 3-D vectors with a given m2 (integers < n^3: exact after rounding)
    c3 = np.rint(fftconvolve(fftconvolve(c1, c1), c1)).astype(np.int64)
    m2 = np.nonzero(c3)[0]
    m2 = m2[m2 > 0]
    k = 2.0 * np.pi / box_size * np.sqrt(m2)
    pk = np.asarray(power_fn(k), dtype=np.float64)
    cnt = c3[m2]
    return np.sum(cnt * pk / k**2), np.sum(cnt * (pk / k**2) ** 2), np.sum(cnt * pk)


def _lattice_displacement(pos, ids, n, box_size):
    """x - q(id), wrapped into [-L/2, L/2), float64, shape (N, 3)."""
    spacing = box_size / n
    ids = np.asarray(ids, dtype=np.int64)
    q = np.empty((ids.size, 3))
    q[:, 0] = ids // (n * n)
    q[:, 1] = (ids // n) % n
    q[:, 2] = ids % n
    d = np.asarray(pos, dtype=np.float64) - q * spacing
    d -= box_size * np.floor(d / box_size + 0.5)
    return d


def inspect_initial_conditions(attrs, data, bg=None, target=None, n_mesh=None, k_max=None,
                               p_threshold=1e-3, workers=None):
    """Check an initial-condition file's contents.

    Parameters
    ----------
    attrs : dict
        Root attributes as read by :func:`icgen.io_hdf5.read_particles`.
    data : dict
        Datasets under /particles (position, velocity, id), as arrays.
    bg : BackgroundTable, optional
        Background of the file's cosmology (growth attributes, velocity slope, P(k, z)).
    target : object with ``P(k, z)``, optional
        Target linear spectrum (k h/Mpc, P (Mpc/h)^3), e.g. the file's own
        :class:`icgen.spectrum.LinearSpectrum`; without it the spectrum checks are skipped.
    n_mesh : int, optional
        Estimator mesh (default twice the particle grid).
    k_max : float, optional
        Largest k compared, h/Mpc (default half the particle Nyquist wavenumber, and at most
        a quarter of the mesh's, so a coarser mesh compares fewer bins).
    p_threshold : float, default 1e-3
        Smallest chi^2 probability accepted.
    workers : int, optional
        FFT threads.

    Returns
    -------
    ICInspection
        Checks as described in the module notes.
    """
    checks = []
    out = {}

    def add(name, ok, detail):
        checks.append(Check(name, "skip" if ok is None else ("pass" if bool(ok) else "fail"), detail))

    # -- layout -------------------------------------------------------------------------
    missing = [a for a in REQUIRED_ATTRS if a not in attrs]
    missing_ds = [d for d in REQUIRED_DATASETS if d not in data]
    fmt_ok = attrs.get("format") == "icgen.particles"
    reasons = []
    if not fmt_ok:
        reasons.append(f"format = {attrs.get('format')!r}, expected 'icgen.particles'")
    if missing:
        reasons.append("missing attribute(s) " + ", ".join(missing))
    if missing_ds:
        reasons.append("missing dataset(s) " + ", ".join(f"/particles/{d}" for d in missing_ds))
    add("layout", not reasons, "; ".join(reasons) if reasons else
        f"{len(REQUIRED_ATTRS)} attributes and /particles/position, velocity"
        + (", id" if "id" in data else " (no ids: written with write_ids = false)"))

    pos = data.get("position")
    vel = data.get("velocity")
    ids = data.get("id")
    box = float(attrs["box_size"]) if "box_size" in attrs else None
    n_side = int(attrs["grid_per_side"]) if "grid_per_side" in attrs else None
    a = float(attrs["scale_factor"]) if "scale_factor" in attrs else None

    # -- shapes and counts --------------------------------------------------------------
    shape_reasons = []
    n_rows = None
    if pos is not None:
        if pos.ndim != 2 or pos.shape[1] != 3 or pos.dtype.kind != "f":
            shape_reasons.append(f"position has shape {pos.shape} and dtype {pos.dtype}, need (N, 3) float")
        else:
            n_rows = pos.shape[0]
    if vel is not None and pos is not None and vel.shape != pos.shape:
        shape_reasons.append(f"velocity shape {vel.shape} differs from position shape {pos.shape}")
    if ids is not None and n_rows is not None and ids.shape != (n_rows,):
        shape_reasons.append(f"id shape {ids.shape}, need ({n_rows},)")
    if n_rows is not None and n_side is not None:
        n_attr = int(attrs.get("n_particles", -1))
        if not (n_attr == n_rows == n_side**3):
            shape_reasons.append(f"n_particles = {n_attr}, rows = {n_rows}, grid_per_side^3 = {n_side**3}")
    if a is not None and "redshift" in attrs and _rel(1.0 + float(attrs["redshift"]), 1.0 / a) > 1e-12:
        shape_reasons.append(f"redshift = {attrs['redshift']!r} but 1/a - 1 = {1 / a - 1!r}")
    if n_rows is None or n_side is None:
        add("counts", None, "needs /particles/position and grid_per_side")
    else:
        add("counts", not shape_reasons, "; ".join(shape_reasons) if shape_reasons else
            f"N = {n_rows:,} = {n_side}^3 rows, redshift = 1/a - 1")

    # -- mass ---------------------------------------------------------------------------
    cosmo_dict = None
    if "cosmology" in attrs:
        try:
            cosmo_dict = json.loads(attrs["cosmology"])
        except (TypeError, ValueError):
            cosmo_dict = None
    if cosmo_dict is None or box is None or n_side is None or "particle_mass" not in attrs:
        add("particle mass", None, "needs cosmology, box_size, grid_per_side and particle_mass")
    else:
        want = cosmo_dict["omega_m"] * RHO_CRIT_100 * box**3 / n_side**3
        got = float(attrs["particle_mass"])
        ok = _rel(got, want) <= ATTR_RTOL
        add("particle mass", ok, f"{got:.6e} Msun/h vs omega_m rho_crit L^3 / N = {want:.6e} "
            f"(omega_m = {cosmo_dict['omega_m']:g}, L = {box:g} Mpc/h, N = {n_side}^3)"
            + ("" if ok else f": off by a factor {got / want:.6g}"))

    # -- growth attributes --------------------------------------------------------------
    if bg is None or a is None or not all(k in attrs for k in ("D1", "f1", "D2", "f2", "H")):
        add("growth attributes", None, "needs the background and the D1, f1, D2, f2, H attributes")
    else:
        want = {"D1": bg.D1(a), "f1": bg.f1(a), "D2": bg.D2(a), "f2": bg.f2(a), "H": bg.hubble(a)}
        bad = [f"{k} = {float(attrs[k]):.9g} (background {v:.9g})" for k, v in want.items()
               if _rel(float(attrs[k]), v) > ATTR_RTOL]
        add("growth attributes", not bad, "; ".join(bad) if bad else
            f"D1, f1, D2, f2, H at a = {a:.6g} match the background to {ATTR_RTOL:g}")

    # -- ids ----------------------------------------------------------------------------
    ids_ok = ids is None
    if ids is None or n_rows is None:
        add("ids", None, "no /particles/id: rows are taken as the grid index (i n + j) n + k")
    else:
        idv = np.asarray(ids)
        ok = idv.dtype.kind in "ui" and idv.size == n_rows and idv.min() >= 0 and idv.max() < n_rows
        if ok:
            seen = np.zeros(n_rows, dtype=bool)
            seen[idv.astype(np.int64)] = True
            ok = bool(seen.all())
        ids_ok = ok
        add("ids", ok, f"a permutation of 0 .. {n_rows - 1}" if ok else
            f"ids are not a permutation of 0 .. {n_rows - 1} (duplicates, gaps or out of range)")

    # -- positions and velocities -------------------------------------------------------
    pos_ok = False
    if pos is None or box is None or n_rows is None:
        add("positions", None, "needs /particles/position and box_size")
    else:
        finite = bool(np.all(np.isfinite(pos)))
        lo, hi = (float(pos.min()), float(pos.max())) if finite else (math.nan, math.nan)
        pos_ok = finite and lo >= 0.0 and hi < box
        add("positions", pos_ok, f"finite, inside [0, {box:g}) Mpc/h" if pos_ok else
            ("non-finite positions" if not finite else
             f"coordinates span [{lo:.9g}, {hi:.9g}], outside [0, {box:g})"))
    vel_ok = False
    if vel is None:
        add("velocities", None, "no /particles/velocity")
    else:
        vel_ok = vel.shape == (n_rows, 3) and bool(np.all(np.isfinite(vel)))
        add("velocities", vel_ok, "finite" if vel_ok else f"non-finite velocities or shape {vel.shape}")

    # -- displacements ------------------------------------------------------------------
    disp = None
    if pos_ok and ids_ok and n_side is not None and n_rows == n_side**3:
        idv = np.arange(n_rows) if ids is None else ids
        disp = _lattice_displacement(pos, idv, n_side, box)
        spacing = box / n_side
        mean = disp.mean(axis=0)
        eps = float(np.finfo(pos.dtype).eps)
        limit = eps * box
        ok = bool(np.all(np.abs(mean) <= limit))
        add("mean displacement", ok, f"|mean(x - q)| = {np.abs(mean).max():.3g} Mpc/h "
            f"{'<=' if ok else '>'} eps L = {limit:.3g} (rounding of {pos.dtype} positions)")
        rms = float(np.sqrt(np.mean(disp**2)))
        out.update(rms=rms, max=float(np.abs(disp).max()), spacing=spacing)
    else:
        add("mean displacement", None, "needs valid positions (and ids)")

    growth_ok = bg is not None and a is not None
    sig_delta = None
    if disp is not None and target is not None and growth_ok:
        z = 1.0 / a - 1.0
        s1, s2, s0 = _grid_mode_sums(lambda k: target.P(k, z), n_side, box)
        expect = s1 / (3.0 * box**3)
        var = 2.0 / 9.0 * s2 / box**6
        if bool(attrs.get("fixed_amplitude", False)):
            var = 0.0
        sig_delta = math.sqrt(s0 / box**3)  # rms grid density contrast at the file's redshift
        allowance = sig_delta**2 * expect
        got = out["rms"] ** 2
        zscore = (got - expect) / math.sqrt(var + allowance**2)
        out.update(rms_expected=math.sqrt(expect))
        ok = abs(zscore) <= 5.0
        add("displacement rms", ok, f"rms per component {out['rms']:.4g} Mpc/h = {out['rms'] / out['spacing']:.3f} "
            f"spacing; linear theory {math.sqrt(expect):.4g} Mpc/h (ratio {out['rms'] / math.sqrt(expect):.4f}), "
            f"z = {zscore:+.2f}; max |x - q| = {out['max'] / out['spacing']:.3f} spacing")
    elif disp is not None:
        add("displacement rms", None, f"rms per component {out['rms']:.4g} Mpc/h, max |x - q| "
            f"{out['max']:.4g} Mpc/h; no target spectrum to compare with")
    else:
        add("displacement rms", None, "needs valid positions")

    if disp is not None and vel_ok and growth_ok:
        slope = float(np.sum(np.asarray(vel, dtype=np.float64) * disp) / np.sum(disp * disp))
        want = a * 100.0 * bg.E(a) * bg.f1(a)
        tol = (sig_delta if sig_delta is not None else 0.05) + 1e-4
        ok = _rel(slope, want) <= tol
        add("velocity-displacement", ok, f"slope of v on x - q = {slope:.6g} km/s per Mpc/h; a H f1 = "
            f"{want:.6g} (ratio {slope / want:.5f}, allowed +-{tol:.3g} for second order)")
    else:
        add("velocity-displacement", None, "needs positions, velocities and the background")

    # -- P(k) ---------------------------------------------------------------------------
    result = {}
    if not (pos_ok and target is not None and growth_ok):
        add("P(k)", None, "needs valid positions and the target spectrum")
    else:
        n_est = n_mesh or 2 * n_side
        kf = 2.0 * np.pi / box
        # Half the particle Nyquist wavenumber, and at most a quarter of the mesh's (the range where
        # the estimator was checked, with the default mesh of twice the particle grid).
        k_top = k_max if k_max is not None else min(0.5 * np.pi * n_side / box, 0.25 * np.pi * n_est / box)
        n_edges = int(np.floor(k_top / kf - 0.5)) + 1
        edges = power.default_k_edges(box, n_est)[:max(n_edges, 2)]
        z = 1.0 / a - 1.0
        ps = power.measure(pos, box, n_est, "cic", True, subtract_shot_noise=False, k_edges=edges,
                           workers=workers)
        want = power.mode_average(lambda k: target.P(k, z), box, n_est, edges)
        delta2 = ps.k**3 * want / (2.0 * np.pi**2)
        sigma = want * np.sqrt(1.0 / ps.n_modes + (0.01 + delta2) ** 2)
        zs = (ps.power - want) / sigma
        chi2 = float(np.sum(zs**2))
        p_value = float(stats.chi2.sf(chi2, len(ps)))
        amp2 = float(np.sum(ps.n_modes * ps.power / want) / np.sum(ps.n_modes))
        amp = math.sqrt(amp2)
        amp_err = 0.5 / math.sqrt(ps.n_modes.sum()) / amp
        worst = int(np.argmax(np.abs(zs)))
        ok = p_value > p_threshold
        add("P(k)", ok, f"{len(ps)} bins k = {edges[0]:.3g}..{edges[-1]:.3g} h/Mpc at z = {z:.4g}: chi2 = "
            f"{chi2:.1f}, p = {p_value:.3g} (need > {p_threshold:g}); amplitude ratio {amp:.4f} +- {amp_err:.4f}; "
            f"worst bin k = {ps.k[worst]:.3g}: P/P_target = {ps.power[worst] / want[worst]:.4f} "
            f"({zs[worst]:+.1f} sigma)")
        result = dict(spectrum=ps, target=want, sigma=sigma, chi2=chi2, p_value=p_value, amplitude_ratio=amp)
    return ICInspection(checks=tuple(checks), displacement=out, **result)


# ---------------------------------------------------------------------------------------
# Runs
# ---------------------------------------------------------------------------------------
def snapshot_mesh_size(n_particles, largest=384):
    """Default estimator mesh of :func:`check_run`: about three times the particle grid, even."""
    n_side = max(1, round(n_particles ** (1.0 / 3.0)))
    n = 2 * math.ceil(1.5 * n_side)
    return int(min(max(n, 16), largest))


@dataclass(frozen=True, eq=False)
class RunCheck:
    """Result of :func:`check_run` (arrays indexed [snapshot, bin], snapshots sorted by a).

    Attributes
    ----------
    checks : tuple of Check
    a : ndarray, shape (ns,)
    sources : tuple of str
    k, k_lo, k_hi, n_modes : ndarray, shape (nb,)
        The bins used (h/Mpc; independent modes).
    k_nl : float
        Smallest k where the last snapshot's Delta^2 reaches 1 (inf if it does not on the mesh).
    growth, growth_expected : ndarray, shapes (ns, nb) and (ns,)
        P_i / P_ref measured, and (D1(a_i) / D1(a_ref))^2.
    growth_sigma, growth_tolerance : ndarray, shape (ns, nb)
        Relative statistical error and allowed |G / G_expected - 1|.
    f, f_auto, f_expected, f_sigma, f_tolerance : ndarray or None
        Velocity-divergence growth rate per bin (cross and auto estimates), f1(a), errors
        and tolerances; rows of snapshots without velocities are nan.
    t_gyr, t_expected : ndarray, shape (ns,)
        Recorded and background times (nan where not recorded).
    """

    checks: tuple
    a: np.ndarray
    sources: tuple
    k: np.ndarray
    k_lo: np.ndarray
    k_hi: np.ndarray
    n_modes: np.ndarray
    k_nl: float
    growth: np.ndarray
    growth_expected: np.ndarray
    growth_sigma: np.ndarray
    growth_tolerance: np.ndarray
    f: np.ndarray
    f_auto: np.ndarray
    f_expected: np.ndarray
    f_sigma: np.ndarray
    f_tolerance: np.ndarray
    t_gyr: np.ndarray
    t_expected: np.ndarray

    def __post_init__(self):
        for name in ("a", "k", "k_lo", "k_hi", "n_modes", "growth", "growth_expected", "growth_sigma",
                     "growth_tolerance", "f", "f_auto", "f_expected", "f_sigma", "f_tolerance", "t_gyr",
                     "t_expected"):
            getattr(self, name).flags.writeable = False

    @property
    def passed(self):
        """True if no check failed."""
        return _verdict(self.checks)

    def failures(self):
        """The failed checks."""
        return [c for c in self.checks if c.status == "fail"]

    @property
    def growth_error(self):
        """G / G_expected - 1, shape (ns, nb)."""
        return self.growth / self.growth_expected[:, None] - 1.0


def _theta_modes(pos, vel, box, n_mesh, workers):
    """Fourier modes of theta = div((1 + delta) v): i k . p_k of the momentum field, km/s h/Mpc."""
    theta = None
    for d in range(3):
        md = power.mesh_modes(pos, box, n_mesh, "tsc", True, weights=vel[:, d], workers=workers)
        kd = md.wavevector_axes()[d]
        term = md.field_k * (1j * kd)
        theta = term if theta is None else theta + term
    theta[0, 0, 0] = 0.0
    return power.MeshModes(field_k=theta, box_size=box, n_mesh=n_mesh, scheme="tsc", interlaced=True,
                           n_particles=pos.shape[0])


def check_run(snapshots, bg, n_mesh=None, n_bins=3, n_sigma=3.0, floor=0.01, time_tolerance=1e-3,
              workers=None):
    """Check a run's snapshots against linear theory on the largest scales.

    Parameters
    ----------
    snapshots : sequence of icgen.io_snapshot.SnapshotData
        Two or more snapshots of one run (positions in Mpc/h in [0, L]; velocities in km/s
        where present; the same box and particle number).
    bg : BackgroundTable
        Background of the run's cosmology.
    n_mesh : int, optional
        Estimator mesh (default :func:`snapshot_mesh_size`).
    n_bins : int, default 3
        Largest-scale bins compared (1 .. 20).
    n_sigma : float, default 3
        Statistical allowance in units of the growth ratio's cosmic variance.
    floor : float, default 0.01
        Systematic allowance (relative), added to the statistical one.
    time_tolerance : float, default 1e-3
        Allowed |t_file - t(a)| as a fraction of the age t(a = 1).
    workers : int, optional
        FFT threads.

    Returns
    -------
    RunCheck

    Raises
    ------
    InputError
        Before any measurement: fewer than two snapshots, different boxes or particle
        numbers, scale factors outside the background, or settings out of range.
    """
    snaps = sorted(snapshots, key=lambda s: s.a)
    if len(snaps) < 2:
        raise InputError(f"check_run needs at least two snapshots, got {len(snaps)}")
    box = snaps[0].box_size
    npart = snaps[0].position.shape[0]
    for s in snaps:
        if s.box_size != box or s.position.shape[0] != npart:
            raise InputError(f"{s.source}: box {s.box_size:g} Mpc/h and {s.position.shape[0]} particles differ "
                             f"from {snaps[0].source}: {box:g} Mpc/h and {npart}")
        if not bg.a_min <= s.a <= bg.a_top:
            raise InputError(f"{s.source}: a = {s.a!r} is outside the background [{bg.a_min:.3g}, {bg.a_top:.6g}]")
    if len({s.a for s in snaps}) != len(snaps):
        raise InputError("two snapshots have the same scale factor")
    if isinstance(n_bins, bool) or not isinstance(n_bins, (int, np.integer)) or not 1 <= n_bins <= 20:
        raise InputError(f"n_bins = {n_bins!r}: need an integer in [1, 20]")
    for name, v, lo, hi in (("n_sigma", n_sigma, 0.0, 100.0), ("floor", floor, 0.0, 1.0),
                            ("time_tolerance", time_tolerance, 0.0, 1.0)):
        if not (isinstance(v, (int, float)) and lo <= v <= hi):
            raise InputError(f"{name} = {v!r}: need a number in [{lo:g}, {hi:g}]")
    n_est = n_mesh or snapshot_mesh_size(npart)
    edges = power.default_k_edges(box, n_est)
    for s in snaps:
        power.check_positions(s.position, box)

    ns = len(snaps)
    a = np.array([s.a for s in snaps])
    ref = power.mesh_modes(snaps[0].position, box, n_est, "tsc", True, workers=workers)
    p_ref = power.bin_power(ref, k_edges=edges)
    nb_all = len(p_ref)
    auto = np.empty((ns, nb_all))
    cross = np.empty((ns, nb_all))
    f_cross = np.full((ns, nb_all), np.nan)
    f_auto = np.full((ns, nb_all), np.nan)
    r_dt = np.full((ns, nb_all), np.nan)
    for i, s in enumerate(snaps):
        modes = ref if i == 0 else power.mesh_modes(s.position, box, n_est, "tsc", True, workers=workers)
        auto[i] = power.bin_power(modes, k_edges=edges).power
        cross[i] = power.bin_power(modes, ref, k_edges=edges).power
        if s.velocity is not None:
            theta = _theta_modes(s.position, np.asarray(s.velocity, dtype=np.float64), box, n_est, workers)
            p_dt = power.bin_power(modes, theta, k_edges=edges).power
            p_tt = power.bin_power(theta, k_edges=edges).power
            a_h = s.a * 100.0 * bg.E(s.a)  # a H in km/s per Mpc/h
            f_cross[i] = -p_dt / (a_h * auto[i])
            f_auto[i] = np.sqrt(p_tt / auto[i]) / a_h
            r_dt[i] = -p_dt / np.sqrt(auto[i] * p_tt)
        del modes

    checks = []
    # Bins well below the non-linear scale of the last snapshot.
    delta2 = p_ref.k**3 * auto[-1] / (2.0 * np.pi**2)
    above = np.nonzero(delta2 >= 1.0)[0]
    k_nl = float(p_ref.k[above[0]]) if above.size else math.inf
    usable = np.nonzero((p_ref.k_hi <= k_nl / 4.0) & (p_ref.n_modes > 0))[0][:n_bins]
    if usable.size == 0:
        checks.append(Check("growth", "fail", f"no bin lies below k_nl/4 = {k_nl / 4:.3g} h/Mpc "
                            f"(k_nl = {k_nl:.3g} h/Mpc at a = {a[-1]:.4g}): the box is too small for a "
                            "linear-growth check"))
        usable = np.arange(min(n_bins, nb_all))
    sel = usable
    n_modes = p_ref.n_modes[sel]
    d1 = bg.D1(a)
    g_exp = (d1 / d1[0]) ** 2
    growth = auto[:, sel] / auto[0, sel]
    with np.errstate(invalid="ignore", divide="ignore"):
        r2 = np.clip(cross[:, sel] ** 2 / (auto[:, sel] * auto[0, sel]), 1e-300, 1.0)
        g_sig = np.sqrt(2.0 / n_modes * (1.0 - r2) / r2)
    g_tol = n_sigma * g_sig + floor
    err = growth / g_exp[:, None] - 1.0
    k_txt = ", ".join(f"{k:.3g}" for k in p_ref.k[sel])
    if not checks:
        bad = [(i, j) for i in range(1, ns) for j in range(sel.size) if abs(err[i, j]) > g_tol[i, j]]
        worst = max(((i, j) for i in range(1, ns) for j in range(sel.size)),
                    key=lambda ij: abs(err[ij]) / g_tol[ij])
        i, j = worst
        where = (f"worst: a = {a[i]:.4g}, k = {p_ref.k[sel][j]:.3g}: G/G_lin - 1 = {err[i, j]:+.4f} "
                 f"(allowed +-{g_tol[i, j]:.4f} = {n_sigma:g} x {g_sig[i, j]:.4f} + {floor:g})")
        checks.append(Check("growth", "fail" if bad else "pass",
                            f"P(k, a)/P(k, a_ref) vs (D1/D1_ref)^2 in {sel.size} bins k = {k_txt} h/Mpc "
                            f"(k_nl = {k_nl:.3g} h/Mpc), {ns - 1} snapshots: "
                            + (f"{len(bad)} outside tolerance; " if bad else "all within tolerance; ") + where))

    f_exp = bg.f1(a)
    with np.errstate(invalid="ignore", divide="ignore"):
        rr = np.clip(r_dt[:, sel] ** 2, 1e-300, 1.0)
        f_sig = np.sqrt((1.0 - rr) / (2.0 * n_modes * rr))
    f_tol = n_sigma * f_sig + floor
    f_sel = f_cross[:, sel]
    have = ~np.isnan(f_sel[:, 0])
    if not have.any():
        checks.append(Check("velocities", "skip", "no snapshot has velocities"))
    else:
        f_err = f_sel / f_exp[:, None] - 1.0
        bad = np.abs(f_err[have]) > f_tol[have]
        idx = np.argwhere(have[:, None] & np.ones_like(f_sel, dtype=bool))
        i, j = max(map(tuple, idx), key=lambda ij: abs(f_err[ij]) / f_tol[ij])
        checks.append(Check("velocities", "fail" if bad.any() else "pass",
                            f"f = -P_delta,theta / (a H P_delta,delta) vs f1(a) in {int(have.sum())} snapshots: "
                            + (f"{int(bad.sum())} bins outside tolerance; " if bad.any() else "all within tolerance; ")
                            + f"worst: a = {a[i]:.4g}, k = {p_ref.k[sel][j]:.3g}: f/f1 - 1 = {f_err[i, j]:+.4f} "
                              f"(allowed +-{f_tol[i, j]:.4f})"))

    t_file = np.array([np.nan if s.time_gyr is None else s.time_gyr for s in snaps])
    t_exp = np.asarray(bg.t(a), dtype=np.float64)
    have_t = ~np.isnan(t_file)
    if not have_t.any():
        checks.append(Check("time", "skip", "no snapshot records its time"))
    else:
        limit = time_tolerance * bg.age_gyr
        dev = np.abs(t_file - t_exp)
        i = int(np.nanargmax(dev))
        ok = bool(np.all(dev[have_t] <= limit))
        checks.append(Check("time", "pass" if ok else "fail",
                            f"|t_file - t(a)| <= {dev[i]:.3g} Gyr (at a = {a[i]:.4g}: {t_file[i]:.6g} vs "
                            f"{t_exp[i]:.6g} Gyr); allowed {limit:.3g} Gyr = {time_tolerance:g} x age"))
    return RunCheck(checks=tuple(checks), a=a, sources=tuple(s.source for s in snaps), k=p_ref.k[sel],
                    k_lo=p_ref.k_lo[sel], k_hi=p_ref.k_hi[sel], n_modes=n_modes, k_nl=k_nl, growth=growth,
                    growth_expected=g_exp, growth_sigma=g_sig, growth_tolerance=g_tol, f=f_sel,
                    f_auto=f_auto[:, sel], f_expected=f_exp, f_sigma=f_sig, f_tolerance=f_tol, t_gyr=t_file,
                    t_expected=t_exp)
