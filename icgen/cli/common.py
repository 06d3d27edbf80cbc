"""Options and helpers shared by the subcommands."""

from importlib import resources
from pathlib import Path

from .. import parameters

__all__ = ["add_params_arguments", "load_params", "default_params_text"]

#: The bundled default example (a parameter file shipped inside the package).
DEFAULT_PARAMS = "default.toml"


def default_params_text():
    """Text of the bundled default example parameter file."""
    return resources.files("icgen.data").joinpath(DEFAULT_PARAMS).read_text(encoding="utf-8")


def add_params_arguments(p, required=False):
    """PARAMS positional (optional: bundled example) and repeatable --set overrides."""
    p.add_argument("params", nargs=None if required else "?", metavar="PARAMS.toml",
                   help="parameter file (TOML)" + ("" if required else
                                                   "; default: the bundled example"))
    p.add_argument("--set", dest="overrides", action="append", default=[], metavar="SECTION.KEY=VALUE",
                   help="override one parameter (value parsed as TOML); repeatable")


def load_params(args):
    """Load PARAMS (or the bundled example) with the --set overrides applied."""
    if getattr(args, "params", None):
        return parameters.load(args.params, args.overrides)
    return parameters.loads(default_params_text(), args.overrides, source="<bundled example>",
                            base_dir=Path.cwd())
