"""Options and helpers shared by the subcommands."""

from importlib import resources
from pathlib import Path

from .. import parameters

__all__ = ["add_params_arguments", "load_params", "default_params_text", "progress_bar", "warn_line"]

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


def progress_bar(total, desc, disable=False):
    """A tqdm progress bar on stderr (a context manager)."""
    from tqdm import tqdm

    return tqdm(total=total, desc=desc, disable=disable, leave=False, unit="stage",
                bar_format="{desc}: {percentage:3.0f}%|{bar}| {n_fmt}/{total_fmt} [{elapsed}]")


def warn_line(message):
    """Print one warning line on stderr."""
    import sys

    print(f"icgen: warning: {message}", file=sys.stderr)


def provenance(params):
    """Attributes every output stores: package version, resolved cosmology, the parameters
    that reproduce it, and (for a table spectrum) the table's path and SHA-256."""
    import hashlib
    import json

    from .. import __version__

    attrs = {"created_by": f"icgen {__version__}", "cosmology": json.dumps(params.cosmology.as_dict()),
             "parameters": params.to_toml()}
    if params.get("spectrum", "source") == "table" and params.get("spectrum", "table") is not None:
        table = params.path("spectrum", "table")
        if table.is_file():
            attrs["input_table"] = str(table.resolve())
            attrs["input_table_sha256"] = hashlib.sha256(table.read_bytes()).hexdigest()
    return attrs
