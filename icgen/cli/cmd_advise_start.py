"""``icgen advise-start``: displacement and density statistics versus redshift, and a start redshift."""

from .. import io_output, plotting, start
from .common import add_params_arguments, load_params, provenance

NAME = "advise-start"
HELP = "tabulate grid displacement and density statistics versus z and recommend a start redshift"


def add_arguments(p):
    add_params_arguments(p)
    p.add_argument("--out", help="also write the table (.csv or .h5)")
    p.add_argument("--plot", metavar="FILE.png", help="draw the statistics versus z")
    p.add_argument("--overwrite", action="store_true", help="replace existing outputs")


def run(args):
    from .cmd_ics import prepare

    params = load_params(args)
    for path in (args.out, args.plot):
        if path:
            io_output.check_output_path(path, args.overwrite)
    bg, pk, setup, _, _ = prepare(params)
    limits = {k: params.get("start", k) for k in start.DEFAULT_LIMITS}
    adv = start.advise(lambda k: pk.P(k, 0.0), bg, setup.box_size, setup.n, limits=limits)
    print(f"box {setup.box_size:g} Mpc/h, {setup.n}^3 particles, spacing {adv.spacing:.4g} Mpc/h")
    print(f"{'z':>9} {'sigma_delta':>12} {'rms_disp/spacing':>17} {'max_disp/spacing':>17}")
    for row in zip(adv.z, adv.sigma_delta, adv.rms_displacement, adv.max_displacement):
        print(f"{row[0]:9.3f} {row[1]:12.4g} {row[2]:17.4g} {row[3]:17.4g}")
    lim = adv.limits
    print(f"rule (common practice): sigma_delta <= {lim['sigma_limit_1lpt']:g} (1LPT) or "
          f"{lim['sigma_limit_2lpt']:g} (2LPT), and rms displacement <= "
          f"{lim['displacement_limit']:g} spacing")
    print(f"recommended start: z = {adv.z_start_1lpt:.1f} for first order (Zel'dovich), "
          f"z = {adv.z_start_2lpt:.1f} for second order (2LPT)")
    if args.out:
        io_output.write_columns(args.out, {"z": adv.z, "sigma_delta": adv.sigma_delta,
                                           "rms_displacement_spacing": adv.rms_displacement,
                                           "max_displacement_spacing": adv.max_displacement},
                                attrs={"format": "icgen.start_advice", **provenance(params), **adv.limits,
                                       "z_start_1lpt": adv.z_start_1lpt, "z_start_2lpt": adv.z_start_2lpt},
                                overwrite=args.overwrite)
        print(f"wrote {args.out}")
    if args.plot:
        fig, ax = plotting.figure(figsize=(6, 4))
        ax.loglog(1 + adv.z, adv.sigma_delta, label="rms density contrast on the grid")
        ax.loglog(1 + adv.z, adv.rms_displacement, label="rms displacement / spacing")
        ax.loglog(1 + adv.z, adv.max_displacement, "--", label="expected max displacement / spacing")
        for z, name, c in ((adv.z_start_1lpt, "1LPT start", "C3"), (adv.z_start_2lpt, "2LPT start", "C4")):
            ax.axvline(1 + z, color=c, ls=":", label=f"{name}: z = {z:.1f}")
        ax.set_xlabel("1 + z")
        ax.set_ylabel("value")
        ax.set_title(f"{setup.n}^3 particles in {setup.box_size:g} Mpc/h")
        ax.grid(alpha=0.3, which="both")
        ax.legend(fontsize=8)
        plotting.save(fig, args.plot)
        print(f"wrote {args.plot}")
    return 0
