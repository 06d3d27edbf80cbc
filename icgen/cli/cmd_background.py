"""``icgen background``: tabulate a(t), H(a) and the growth factors of a cosmology."""

import time

import numpy as np

from .. import background, io_output, plotting
from ..errors import InputError
from .common import add_params_arguments, load_params, provenance

NAME = "background"
HELP = "tabulate t(a), H(a), D1, f1, D2, f2 of the cosmology (CSV, or HDF5 for .h5)"

#: Columns of the table, in order, with units.
COLUMNS = {
    "a": "1", "z": "1", "t_gyr": "Gyr", "hubble_km_s_mpc": "km/s/Mpc",
    "D1": "1 (D1(a=1) = 1)", "f1": "1", "D2": "1 (-3/7 D1^2 in EdS)", "f2": "1",
}


def add_arguments(p):
    add_params_arguments(p)
    p.add_argument("--out", required=True, help="output table: .csv, or .h5 for HDF5")
    p.add_argument("--a-min", type=float, default=1e-3, help="smallest scale factor (default 1e-3)")
    p.add_argument("--a-max", type=float, default=1.0, help="largest scale factor (default 1)")
    p.add_argument("--points", type=int, default=1000, help="number of rows (default 1000)")
    p.add_argument("--linear", action="store_true", help="space a linearly (default: logarithmically)")
    p.add_argument("--plot", metavar="FILE.png", help="also draw a(t), D1 and f1")
    p.add_argument("--overwrite", action="store_true", help="replace existing outputs")


def table(bg, a):
    """The background table's columns at scale factors ``a`` (dict name -> array)."""
    return {
        "a": a, "z": 1.0 / a - 1.0, "t_gyr": bg.t(a), "hubble_km_s_mpc": bg.hubble(a),
        "D1": bg.D1(a), "f1": bg.f1(a), "D2": bg.D2(a), "f2": bg.f2(a),
    }


def run(args):
    if not (2 <= args.points <= 10**7):
        raise InputError(f"--points = {args.points} is outside the allowed range [2, 1e7]")
    if not (1e-8 <= args.a_min < args.a_max):
        raise InputError(f"need 1e-8 <= --a-min < --a-max, got {args.a_min:g} and {args.a_max:g}")
    params = load_params(args)
    cosmo = params.cosmology
    io_output.check_output_path(args.out, args.overwrite)
    if args.plot:
        io_output.check_output_path(args.plot, args.overwrite)
    t0 = time.perf_counter()
    bg = background.solve(cosmo, a_min=min(1e-8, args.a_min), a_max=max(1.0, min(args.a_max, 1e6)))
    if args.a_max > bg.a_top:
        why = (f"the model recollapses (a_max = {bg.a_turn:.6g}, turnaround at t = {bg.t_turn_gyr:.6g} Gyr, "
               f"crunch at {bg.t_crunch_gyr:.6g} Gyr); growth is tabulated up to a = {bg.a_top:.6g}"
               if bg.a_turn else f"the table reaches a = {bg.a_top:.6g}")
        raise InputError(f"--a-max = {args.a_max:g} is beyond the background: {why}")
    a = (np.linspace if args.linear else np.geomspace)(args.a_min, args.a_max, args.points)
    cols = table(bg, a)
    attrs = {"format": "icgen.background", **provenance(params), "fate": bg.fate}
    io_output.write_columns(args.out, cols, units=COLUMNS, attrs=attrs, overwrite=args.overwrite)
    took = time.perf_counter() - t0
    fate = bg.fate.replace("_", " ")
    if bg.a_turn:
        fate += (f": turnaround at a = {bg.a_turn:.6g}, t = {bg.t_turn_gyr:.6g} Gyr; "
                 f"crunch at t = {bg.t_crunch_gyr:.6g} Gyr")
    print(f"wrote {args.out}: {args.points} rows, a in [{args.a_min:g}, {args.a_max:g}] ({took:.3f} s)")
    print(f"age today t(a=1) = {bg.age_gyr:.6f} Gyr; the model {fate}")
    if args.plot:
        a_plot = np.geomspace(max(bg.a_min, 1e-4), bg.a_top, 400)
        t_plot = bg.t(a_plot)
        note = "recollapses" if bg.a_turn else ""
        if bg.a_turn:  # draw the whole history, collapse included
            t_plot = np.linspace(t_plot[0], bg.t_crunch_gyr - t_plot[0], 800)
            a_hist = bg.a_of_t(t_plot)
        else:
            a_hist = a_plot
        plotting.plot_background(t_plot, a_hist, a_plot, bg.D1(a_plot), bg.f1(a_plot),
                                 f"h = {cosmo.h:g}, omega_m = {cosmo.omega_m:g}, omega_k = {cosmo.omega_k:g}, "
                                 f"omega_de = {cosmo.omega_de:.4g}", args.plot, note)
        print(f"wrote {args.plot}")
    return 0
