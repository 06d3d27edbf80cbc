"""``icgen separate-universe``: the local cosmology of a region with linear overdensity delta_L.

From a global parameter file and ``--delta-l`` this writes, into one directory
(staged under a temporary name and renamed into place; with ``--ics`` the local
initial conditions are then made in place, from the final ``local.toml`` so that
they record final paths, and any failure removes the directory and restores an
old one: complete or not at all):

* ``local.toml`` -- the local model as an ordinary parameter file (every other
  subcommand reads it): local cosmology ("today" = the global age), the local
  spectrum (``local_pk.txt``), the box in Mpc/h with the local h, the start and
  the outputs at the global start and output times;
* ``local_pk.txt`` -- the local linear P(k) at local z = 0 (k in h/Mpc, P in
  (Mpc/h)^3, both with the local h), 17 significant digits;
* ``mapping.csv`` -- t_gyr, a_global, a_local, delta_linear, delta_nonlinear
  (15 significant digits; ``a_local`` normalised to 1 at the global age);
* ``summary.json`` -- every scalar of the construction (curvature, scale ratio,
  box ratio, growth ratio, turnaround and collapse);
* ``global.toml`` -- the global parameters as read (provenance);
* with ``--ics``: ``ics_local.h5`` (the local initial conditions through the
  usual pipeline), ``output_scale_factors.txt``, ``outputs.csv`` and
  ``steps.csv`` of the local run, with each output's and step boundary's global
  scale factor as extra columns.

``--plot`` draws delta(t) (linear and exact) with turnaround and collapse marked.
Physics and conventions: :mod:`icgen.separate_universe`.
"""

import json
import math
import os
import shutil
import time
import warnings
from pathlib import Path

import numpy as np

from .. import (__version__, growth_check, io_input, io_output, parameters, pipeline, plotting, schedule,
                separate_universe, spectrum)
from ..errors import InputError, ParameterError
from .common import add_params_arguments, load_params, warn_line

NAME = "separate-universe"
HELP = ("local cosmology of a region with linear overdensity delta_L today: its parameter file, "
        "the a_global <-> a_local mapping and delta(t), optionally its initial conditions")

#: Files of the output directory.
FILES = {"parameters": "local.toml", "spectrum": "local_pk.txt", "mapping": "mapping.csv",
         "summary": "summary.json", "global_parameters": "global.toml", "ics": "ics_local.h5",
         "list": "output_scale_factors.txt", "outputs": "outputs.csv", "steps": "steps.csv",
         "plot": "delta_of_t.png"}

#: Columns of mapping.csv with units.
MAPPING_COLUMNS = {
    "t_gyr": "Gyr since the big bang",
    "a_global": "1 (global scale factor, 1 at t0)",
    "a_local": "1 (local scale factor, 1 at the global age t0)",
    "delta_linear": "1 (delta_l D1_global(a_global))",
    "delta_nonlinear": "1 ((scale_ratio a_global / a_local)^3 - 1)",
}

#: Largest global scale factor of the mapping table (the global background's table).
A_MAX_MAPPING = 1e4


def add_arguments(p):
    add_params_arguments(p)
    p.add_argument("--delta-l", type=float, required=True, metavar="X",
                   help="linear overdensity of the region today (extrapolated with the linear growth "
                        "D1, D1(a=1) = 1)")
    p.add_argument("--out-dir", required=True, metavar="DIR",
                   help="output directory; created complete or not at all")
    p.add_argument("--ics", action="store_true",
                   help="also generate the local initial conditions and the local step table")
    p.add_argument("--plot", nargs="?", const=True, metavar="FILE.png",
                   help=f"draw delta(t) with turnaround and collapse marked (bare --plot: "
                        f"DIR/{FILES['plot']}; a path is taken relative to the working directory)")
    p.add_argument("--a-min", type=float, default=1e-3,
                   help="first row of mapping.csv, as a global scale factor (default 1e-3)")
    p.add_argument("--a-max", type=float, default=None,
                   help="last row of mapping.csv, as a global scale factor (default: the global "
                        "[snapshots] a_end or 1, extended to the local collapse if there is one)")
    p.add_argument("--points", type=int, default=2000, help="rows of mapping.csv (default 2000)")
    p.add_argument("--overwrite", action="store_true", help="replace an existing output directory")
    p.add_argument("--workers", type=int, default=os.cpu_count(), help="FFT threads (with --ics)")
    p.add_argument("--quiet", action="store_true", help="no progress bar (with --ics)")


# --------------------------------------------------------------------------------------
# Global start and schedule
# --------------------------------------------------------------------------------------
def global_start(params, pk, bg):
    """The global run's starting scale factor, or None if it cannot be known.

    [start] redshift if it is a number; the start rule's choice when it is "auto"
    and [box] is given (as ``icgen ics`` would choose it); None otherwise.
    """
    if io_input.box_parameters(params) is None:
        z = params.get("start", "redshift")
        return None if z == "auto" else 1.0 / (1.0 + z)
    setup = pipeline.grid_setup(params)
    a_start, _ = pipeline.start_scale_factor(params, pk, bg, setup)
    return a_start


def global_snapshots(params, bg, a_start):
    """The global output schedule (as ``icgen run`` builds it), or None without a known start."""
    if a_start is None and params.get("snapshots", "a_begin") is None:
        return None
    return schedule.from_parameters(params, bg, a_begin=a_start)


# --------------------------------------------------------------------------------------
# The local parameter file
# --------------------------------------------------------------------------------------
def local_sections(params, su, sigma_8, table_name, a_start=None, snapshots=None):
    """Sections of the local parameter file (dict of dicts, for :func:`icgen.parameters.to_toml`).

    Parameters
    ----------
    params : Parameters
        The global parameters.
    su : SeparateUniverse
    sigma_8 : float
        sigma_8 of the local spectrum (local units, local z = 0); written so that
        the normalisation of the local table to sigma_8 is the identity.
    table_name : str
        File name of the local P(k) table, relative to the local parameter file.
    a_start : float, optional
        Global starting scale factor (mapped to the local start redshift).
    snapshots : Snapshots, optional
        Global output schedule; the local outputs are placed at the same cosmic
        times, as explicit redshifts.

    Returns
    -------
    dict

    Raises
    ------
    ParameterError
        If an output (or the start) falls after the local region's turnaround.
    """
    given = {sec: dict(keys) for sec, keys in params.given.items()}
    cosmo = su.model.cosmology
    out = {"cosmology": {k: getattr(cosmo, k) for k in parameters.SCHEMA["cosmology"]}}
    out["cosmology"]["sigma_8"] = float(sigma_8)
    out["cosmology"]["a_s"] = None
    if params.get("spectrum", "source") == "power_law":
        out["spectrum"] = {"source": "power_law", "index": params.get("spectrum", "index")}
    else:
        out["spectrum"] = {"source": "table", "table": table_name, "quantity": "power",
                           "columns": [0, 1], "redshift": 0.0, "k_unit": "h/Mpc",
                           "extrapolate": params.get("spectrum", "extrapolate")}
    if "box" in given:
        box = dict(given["box"])
        if "size" in box:
            box["size"] = box["size"] * su.length_ratio
        out["box"] = box
    start = dict(given.get("start", {}))

    def local_a(a_glob, what):
        return np.atleast_1d(local_scale_factors(su, a_glob, what))

    if a_start is not None:
        a_l = float(local_a(a_start, "[start] redshift")[0])
        start["redshift"] = 1.0 / a_l - 1.0
    if start:
        out["start"] = start
    for sec in ("phases", "output"):
        if sec in given:
            out[sec] = dict(given[sec])
    if snapshots is not None:
        snap = dict(given.get("snapshots", {}))
        a_out = local_a(snapshots.a, "[snapshots] the last output")
        a_beg = float(local_a(snapshots.a_begin, "[snapshots] a_begin")[0])
        snap.pop("interval", None)
        snap.update({"a_begin": a_beg, "a_end": float(a_out[-1]), "count": 0,
                     "extra_redshifts": [float(1.0 / a - 1.0) for a in a_out[:-1]]})
        out["snapshots"] = snap
    elif "snapshots" in given:
        out["snapshots"] = dict(given["snapshots"])
    if "steps" in given:
        out["steps"] = dict(given["steps"])
    return out


def local_scale_factors(su, a_global, what="a_global"):
    """Local scale factors at the times of global scale factors, on the local expanding branch.

    Raises
    ------
    ParameterError
        If a time falls after the local turnaround (beyond the local table), naming ``what``.
    """
    a_global = np.asarray(a_global, dtype=np.float64)
    t = np.asarray(su.global_bg.t(a_global))
    t_top = su.local_bg.t(su.local_bg.a_top)  # the local table ends here (below a turnaround)
    if np.any(t > t_top):
        raise ParameterError(
            f"{what} at t = {float(t.max()):.6g} Gyr falls after the local region stops expanding "
            f"(turnaround at t = {su.t_turn_gyr:.6g} Gyr; the local background is tabulated to "
            f"t = {t_top:.6g} Gyr); lower delta_l or the last output")
    return su.a_local_of_a_global(a_global)


def local_toml_text(sections, su, source):
    """The local parameter file: a comment header (conventions) and the sections."""
    m = su.model
    head = [
        f"# Separate-universe (local) model written by icgen {__version__} separate-universe",
        f"# from {source}, for a region of linear overdensity delta_l = {m.delta_l!r} today.",
        f"# 'Today' (a = 1, z = 0) is the global age t0 = {m.t0_gyr:.12g} Gyr; lengths are in Mpc/h",
        f"# with this file's h (= {m.cosmology.h:.12g}); the box is the global one times "
        f"J = {m.length_ratio:.12g}.",
        f"# Exact overdensity today delta(t0) = {m.delta_nonlinear_today:.12g}; "
        "see summary.json and mapping.csv.",
        "",
    ]
    return "\n".join(head) + parameters.to_toml(sections)


def write_spectrum_table(path, pk_local, su):
    """Write the local spectrum's nodes (k, P(k, 0)) as a commented two-column table, 17 digits."""
    k = np.exp(pk_local.ln_k)
    p = np.exp(pk_local.ln_p0)
    header = (f"separate-universe linear P(k) at local z = 0 (the global age), delta_l = {su.delta_l!r}\n"
              "k [h/Mpc] and P [(Mpc/h)^3], both with the LOCAL h = "
              f"{su.model.cosmology.h!r}; written by icgen {__version__}\n"
              f"P_local(k) = J^3 P_global(J k) / R^2, J = {su.length_ratio!r}, "
              f"R = {su.growth_ratio_early!r}\nk,P")
    with io_output.atomic_path(path) as tmp:
        np.savetxt(tmp, np.column_stack([k, p]), fmt="%.17g", delimiter=",", header=header,
                   comments="# ")
    return path


# --------------------------------------------------------------------------------------
# Mapping table
# --------------------------------------------------------------------------------------
def mapping_times(su, a_min, a_max, points):
    """Rows of the mapping table in cosmic time (Gyr), dense near turnaround and collapse.

    Rows are spaced evenly in ln a_global from a_min to a_max; a recollapsing
    region adds its turnaround time and rows approaching the collapse
    geometrically (down to 1e-5 of t_collapse - t_turn before it), and rows at or
    after the collapse are left out.
    """
    t = np.asarray(su.global_bg.t(np.geomspace(a_min, a_max, points)))
    t_c = su.t_collapse_gyr
    if t_c is not None:
        t_turn = su.t_turn_gyr
        gap = t_c - t_turn
        near = t_c - gap * np.geomspace(0.5, 1e-5, 60)
        extra = np.concatenate([[t_turn], near])
        t = np.concatenate([t[t < t_c - 1e-5 * gap], extra[(extra <= t.max()) & (extra >= t.min())]])
    return np.unique(t)


def mapping_columns(su, t):
    """The mapping table's columns at times t (dict, :data:`MAPPING_COLUMNS` order)."""
    return {"t_gyr": t, "a_global": np.asarray(su.a_global(t)), "a_local": np.asarray(su.a_local(t)),
            "delta_linear": np.asarray(su.delta_linear(t)),
            "delta_nonlinear": np.asarray(su.delta_nonlinear(t))}


# --------------------------------------------------------------------------------------
# Summary
# --------------------------------------------------------------------------------------
def _event(su, t, collapse=False):
    if t is None:
        return None
    return {"t_gyr": t, "a_global": su.a_global(t), "a_local": 0.0 if collapse else su.a_local(t),
            "delta_linear": su.delta_linear(t)}


def summary_dict(su, params, box_global=None):
    """Every scalar of the construction, JSON-ready."""
    m = su.model
    out = {
        "format": "icgen.separate_universe", "created_by": f"icgen {__version__}",
        "global_parameters": str(params.source),
        "delta_l": m.delta_l,
        "kappa": m.kappa,
        "kappa_meaning": "K c^2/H0^2 of the local model (global H0, a normalised to the global at early times)",
        "scale_ratio": m.scale_ratio,
        "scale_ratio_meaning": "lim_{t->0} a_local/a_global = (1 + delta(t0))^(1/3)",
        "delta_nonlinear_today": m.delta_nonlinear_today,
        "length_ratio": m.length_ratio,
        "length_ratio_meaning": "L_local [Mpc/h_local] / L_global [Mpc/h]",
        "growth_ratio_early": su.growth_ratio_early,
        "growth_ratio_today": su.growth_ratio(m.t0_gyr),
        "t0_gyr": m.t0_gyr,
        "delta_l_turnaround_at_t0": separate_universe.delta_l_turnaround_at_t0(m.global_cosmo),
        "turnaround": _event(su, su.t_turn_gyr),
        "collapse": _event(su, su.t_collapse_gyr, collapse=True),
        "global_cosmology": m.global_cosmo.as_dict(),
        "local_cosmology": m.cosmology.as_dict(),
        "conventions": ("local a = 1 and local z = 0 at the global age t0; local lengths in Mpc/h with "
                        "the local h; D1 of each model normalised to D1(a=1) = 1; growth ratios at "
                        "equal cosmic time normalised to 1 at early times; see icgen.separate_universe"),
    }
    if box_global is not None:
        out["box_size_global"] = box_global
        out["box_size_local"] = box_global * m.length_ratio
    return out


def _jsonable(obj):
    if isinstance(obj, dict):
        return {k: _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, (np.floating, np.integer)):
        return obj.item()
    return obj


# --------------------------------------------------------------------------------------
# Plot
# --------------------------------------------------------------------------------------
def plot_delta(cols, su, path):
    """delta_linear and delta_nonlinear against t, and both scale factors, with the events marked."""
    fig, (ax1, ax2) = plotting.figure(1, 2, figsize=(12, 4.5))
    t = cols["t_gyr"]
    sign = 1.0 if su.delta_l >= 0.0 else -1.0  # an underdense region: plot -delta
    pre = "" if sign > 0 else "-"
    ax1.loglog(t, sign * cols["delta_nonlinear"], color="k", lw=1.5, label=f"{pre}delta, exact (local model)")
    ax1.loglog(t, sign * cols["delta_linear"], color="C0", ls="--", lw=1.2,
               label=f"{pre}delta, linear: delta_l D1(a_global)")
    events = [(su.t0_gyr, "global age t0", "0.5")]
    if su.t_turn_gyr is not None:
        events.append((su.t_turn_gyr, f"turnaround, delta_lin = {su.delta_linear(su.t_turn_gyr):.5g}", "C2"))
    if su.t_collapse_gyr is not None and su.t_collapse_gyr <= su.global_bg.t(su.global_bg.a_top):
        events.append((su.t_collapse_gyr,
                       f"collapse, delta_lin = {su.delta_linear(su.t_collapse_gyr):.5g}", "C3"))
    for tt, lab, col in events:
        for ax in (ax1, ax2):
            ax.axvline(tt, color=col, ls=":", lw=1.2, label=lab if ax is ax1 else None)
    if sign > 0:
        for val, lab in ((separate_universe.EDS_DELTA_TURNAROUND, "linear delta at turnaround in EdS, 1.0624"),
                         (separate_universe.EDS_DELTA_COLLAPSE, "linear delta at collapse in EdS, 1.6865")):
            ax1.axhline(val, color="0.7", lw=0.8)
            ax1.text(t[0], val, f" {lab}", fontsize=7, color="0.4",
                     va="bottom" if val > 1.5 else "top")
    ax1.set_xlabel("cosmic time t [Gyr]")
    ax1.set_ylabel("overdensity of the region, delta" if sign > 0 else "underdensity of the region, -delta")
    ax1.set_title(f"delta_l = {su.delta_l:g}")
    if sign > 0 and np.nanmax(cols["delta_nonlinear"]) > 1e3:  # approaching collapse: delta -> infinity
        ax1.set_ylim(top=1e3)
    ax1.legend(fontsize=7, loc="lower right")
    ax1.grid(alpha=0.3, which="both")
    ax2.loglog(t, cols["a_global"], color="C0", label="a_global")
    ax2.loglog(t, cols["a_local"], color="k", label="a_local (1 at t0)")
    ax2.set_xlabel("cosmic time t [Gyr]")
    ax2.set_ylabel("scale factor")
    ax2.set_title("global and local expansion")
    ax2.legend(fontsize=8, loc="upper left")
    ax2.grid(alpha=0.3, which="both")
    m = su.model.cosmology
    fig.suptitle(f"separate universe: local h = {m.h:.4g}, omega_m = {m.omega_m:.4g}, "
                 f"omega_k = {m.omega_k:.4g}, omega_de = {m.omega_de:.4g}")
    return plotting.save(fig, path)


# --------------------------------------------------------------------------------------
# Local run: ICs, schedule and step table with the global scale factors
# --------------------------------------------------------------------------------------
def write_local_schedule(out_dir, su, snaps, plan):
    """Write output_scale_factors.txt, outputs.csv and steps.csv with global scale factors added."""
    out_dir = Path(out_dir)
    table, acc = plan.table, plan.accuracy
    cols = dict(snaps.columns())
    cols.update(acc.columns())
    cols["a_global"] = np.asarray(su.a_global_of_a_local(snaps.a))
    cols["z_global"] = 1.0 / cols["a_global"] - 1.0
    with io_output.atomic_path(out_dir / FILES["list"]) as tmp:
        np.savetxt(tmp, snaps.a, fmt=io_output.CSV_FORMAT)
    io_output.write_columns(out_dir / FILES["outputs"], cols)
    steps_cols = dict(table.columns())
    steps_cols["a_global_begin"] = np.asarray(su.a_global_of_a_local(table.a_begin))
    steps_cols["a_global_end"] = np.asarray(su.a_global_of_a_local(table.a_end))
    io_output.write_columns(out_dir / FILES["steps"], steps_cols)
    return cols, steps_cols


def summary_lines(su, summ, sigma_8_local):
    """Human summary of the construction (lines of text)."""
    m = su.model
    lines = [
        f"separate universe: delta_l = {m.delta_l:g} (regions above delta_l = "
        f"{summ['delta_l_turnaround_at_t0']:.6g} turn around before t0)",
        f"  local today    t0 = {m.t0_gyr:.6f} Gyr; h = {m.cosmology.h:.8g}, omega_m = {m.cosmology.omega_m:.8g}, "
        f"omega_k = {m.cosmology.omega_k:.8g}, omega_de = {m.cosmology.omega_de:.8g}, "
        f"t_cmb = {m.cosmology.t_cmb:.6g} K",
        f"  exact delta    delta(t0) = {m.delta_nonlinear_today:.8g}; scale ratio a_local/a_global -> "
        f"{m.scale_ratio:.10g} early; box ratio J = {m.length_ratio:.10g}",
        f"  growth         D1_local/D1_global at t0 (1 early) = {su.growth_ratio(m.t0_gyr):.10g}; "
        f"local sigma_8 = {sigma_8_local:.6g}",
    ]
    for name, ev in (("turnaround", summ["turnaround"]), ("collapse", summ["collapse"])):
        if ev is not None:
            lines.append(f"  {name:<14} t = {ev['t_gyr']:.6g} Gyr, a_global = {ev['a_global']:.6g}, "
                         f"delta_linear = {ev['delta_linear']:.8g}")
    if summ["turnaround"] is None:
        lines.append("  the region expands forever")
    return lines


def _write_summary(path, summ, overwrite=False):
    with io_output.atomic_path(path, overwrite=overwrite) as tmp:
        tmp.write_text(json.dumps(_jsonable(summ), indent=2) + "\n", encoding="utf-8")


def local_run(out_dir, su, snaps_global, summ, workers=None, quiet=False):
    """The local ICs, schedule and step table, made in ``out_dir`` from its local.toml.

    Adds the figures to ``summ`` (key "ics") and returns lines of human summary.
    """
    from .cmd_ics import generate, summary  # local: only --ics needs the grid stages

    local_params = parameters.load(out_dir / FILES["parameters"])
    info = generate(local_params, out_dir / FILES["ics"], workers=workers, quiet=quiet)
    bg_l, a_l0 = info["bg"], info["growth"].a
    snaps = schedule.from_parameters(local_params, bg_l, a_begin=a_l0)
    if snaps_global is not None and len(snaps) != len(snaps_global):
        raise ParameterError(
            f"the local schedule has {len(snaps)} outputs, the global one {len(snaps_global)}: two "
            "global outputs merged in the local model; lower [snapshots] merge_tolerance")
    plan = growth_check.from_parameters(local_params, bg_l, snaps)
    out_cols, _ = write_local_schedule(out_dir, su, snaps, plan)
    summ["ics"] = {"a_start_local": a_l0, "a_start_global": su.a_global_of_a_local(a_l0),
                   "growth_ratio_start": su.growth_ratio(su.local_bg.t(a_l0)),
                   "n_outputs": len(snaps), "n_steps": plan.table.n_steps}
    if snaps_global is not None:
        summ["ics"]["outputs_a_global_max_rel_error"] = float(
            np.max(np.abs(out_cols["a_global"] / snaps_global.a - 1.0)))
    return ["", "local initial conditions", summary(info),
            f"  schedule       {len(snaps)} outputs at the global output times, "
            f"{plan.table.n_steps} steps even in {plan.table.spacing}"]


def _check_args(args):
    if not math.isfinite(args.delta_l):
        raise InputError(f"--delta-l = {args.delta_l!r}: need a finite number")
    if not (2 <= args.points <= 10**7):
        raise InputError(f"--points = {args.points} is outside the allowed range [2, 1e7]")
    a_max = args.a_max if args.a_max is not None else 1.0
    if not (1e-8 <= args.a_min < a_max <= A_MAX_MAPPING):
        raise InputError(f"need 1e-8 <= --a-min < --a-max <= {A_MAX_MAPPING:g}, got {args.a_min:g} "
                         f"and {a_max:g}")


def run(args):
    from .. import parallel

    if parallel.launched_size() > 1:
        raise InputError("separate-universe runs on one process; make the local model without mpiexec, "
                         "then generate its initial conditions on several ranks with "
                         f"mpiexec -n R icgen ics DIR/{FILES['parameters']} --out ...")
    _check_args(args)
    params = load_params(args)
    cosmo = params.cosmology
    out_dir = io_output.check_output_dir(args.out_dir, args.overwrite)
    plot_path = None
    if args.plot is not None and args.plot is not True:  # bare --plot: inside the directory
        plot_path = io_output.check_output_path(args.plot, args.overwrite)
    if args.ics:
        pipeline.grid_setup(params)  # [box] and friends are needed: fail now, not after the work
    t_wall = time.perf_counter()
    su = separate_universe.solve(cosmo, args.delta_l, a_max_global=A_MAX_MAPPING)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        pk_global = io_input.spectrum_from_parameters(params, su.global_bg)
    for w in caught:
        warn_line(f"global spectrum: {w.message}")
    pk_local = separate_universe.local_spectrum(su, pk_global)
    a_start = global_start(params, pk_global, su.global_bg)
    snaps_global = global_snapshots(params, su.global_bg, a_start)
    sections = local_sections(params, su, pk_local.sigma_8, FILES["spectrum"], a_start, snaps_global)

    # Mapping rows: up to the last global output (or a = 1), and through the collapse if any.
    if args.a_max is not None:
        a_hi = args.a_max
    else:
        a_hi = max(1.0, snaps_global.a_end if snaps_global is not None else params.get("snapshots", "a_end"))
        if su.t_collapse_gyr is not None:
            t_top = su.global_bg.t(su.global_bg.a_top)
            a_hi = max(a_hi, su.a_global(min(su.t_collapse_gyr, t_top)))
    a_hi = min(a_hi, su.global_bg.a_top)
    if not a_hi > args.a_min:
        raise InputError(f"--a-min = {args.a_min:g} is not below the end of the mapping, a_global = {a_hi:g}")
    cols = mapping_columns(su, mapping_times(su, args.a_min, a_hi, args.points))

    tmp = io_output.staging_dir(out_dir)
    lines = []
    try:
        toml_path = tmp / FILES["parameters"]
        toml_path.write_text(local_toml_text(sections, su, params.source), encoding="utf-8")
        (tmp / FILES["global_parameters"]).write_text(params.to_toml(), encoding="utf-8")
        if pk_local.source == "table":
            write_spectrum_table(tmp / FILES["spectrum"], pk_local, su)
        # Read the local file back as every other subcommand will: it must give our model.
        local_params = parameters.load(toml_path)
        if not spectrum.same_background(local_params.cosmology, su.model.cosmology):  # pragma: no cover
            raise AssertionError("local.toml does not reproduce the local cosmology")
        pk_read = io_input.spectrum_from_parameters(local_params, su.local_bg)
        k_test = np.geomspace(pk_local.k_min, pk_local.k_max, 200)
        roundtrip = float(np.max(np.abs(np.asarray(pk_read.P(k_test)) / np.asarray(pk_local.P(k_test)) - 1.0)))
        io_output.write_columns(tmp / FILES["mapping"], cols, units=MAPPING_COLUMNS)
        box = io_input.box_parameters(params)
        summ = summary_dict(su, params, box[0] if box else None)
        summ["spectrum_roundtrip_max_rel"] = roundtrip
        summ["sigma_8_local"] = pk_local.sigma_8
        if a_start is not None:
            summ["a_start_global"] = a_start
            summ["a_start_local"] = su.a_local_of_a_global(a_start)
        if snaps_global is not None:
            summ["outputs_a_global"] = list(snaps_global.a)
            summ["outputs_a_local"] = list(np.atleast_1d(local_scale_factors(su, snaps_global.a)))
        lines += summary_lines(su, summ, pk_local.sigma_8)
        _write_summary(tmp / FILES["summary"], summ)
        if args.plot is True:
            plot_delta(cols, su, tmp / FILES["plot"])
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    old = io_output.swap_in_dir(tmp, out_dir)
    try:
        if args.ics:
            # The ICs are made in place, from the final local.toml, so that the parameters and the
            # table path they record are the final ones; on failure the whole directory goes and
            # the old one (if any) comes back.
            lines += local_run(out_dir, su, snaps_global, summ, args.workers, args.quiet)
            _write_summary(out_dir / FILES["summary"], summ, overwrite=True)
    except BaseException:
        io_output.roll_back_dir(out_dir, old)
        raise
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)
    if plot_path is not None:
        plot_delta(cols, su, plot_path)
    lines.append(f"wrote {out_dir}/: " + ", ".join(sorted(p.name for p in out_dir.iterdir()))
                 + (f"; {plot_path}" if plot_path is not None else "")
                 + f" ({time.perf_counter() - t_wall:.1f} s)")
    print("\n".join(lines))
    return 0
