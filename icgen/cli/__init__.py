"""The ``icgen`` command line: one subcommand per module ``icgen/cli/cmd_*.py``.

Each command module defines ``NAME``, ``HELP``, ``add_arguments(parser)`` and
``run(args) -> int``. Bad input of any kind (:class:`icgen.errors.InputError`)
ends with one line on stderr and exit status 2; ``--debug`` shows the traceback.
"""

import argparse
import importlib
import os
import pkgutil
import signal
import sys

from .. import __version__
from ..errors import InputError
from ..parallel import launched_rank

__all__ = ["main", "build_parser"]


def _module_names():
    pkg = sys.modules[__name__]
    return sorted(m.name for m in pkgutil.iter_modules(pkg.__path__) if m.name.startswith("cmd_"))


def _command_modules(only=None):
    """Import the command modules: all of them, or just the one named ``only`` (start-up time)."""
    names = _module_names()
    if only is not None:
        wanted = "cmd_" + only.replace("-", "_")
        if wanted in names:
            names = [wanted]
    return [importlib.import_module(f"{__name__}.{n}") for n in names]


def build_parser(command=None):
    """The argument parser with every subcommand registered (or only ``command``'s, if it exists)."""
    parser = argparse.ArgumentParser(
        prog="icgen",
        description="Initial conditions, snapshot schedules, step tables and run checks "
                    "for cosmological N-body simulations.")
    parser.add_argument("--version", action="version", version=f"icgen {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for mod in _command_modules(command):
        p = sub.add_parser(mod.NAME, help=mod.HELP, description=mod.HELP)
        mod.add_arguments(p)
        p.add_argument("--debug", action="store_true", help="show the full traceback on errors")
        p.set_defaults(_run=mod.run)
    return parser


class Terminated(KeyboardInterrupt):
    """Raised in the main thread on SIGTERM, so outputs in progress are cleaned up."""


def _terminate(signum, frame):
    raise Terminated()


def main(argv=None):
    """Entry point of the ``icgen`` console script; returns the exit status."""
    argv = sys.argv[1:] if argv is None else list(argv)
    first = next((a for a in argv if not a.startswith("-")), None)
    parser = build_parser(first)
    args = parser.parse_args(argv)
    if not getattr(args, "_run", None):
        parser.print_help()
        return 2
    previous = signal.signal(signal.SIGTERM, _terminate)  # SIGTERM unwinds like Ctrl-C
    if launched_rank() != 0:  # under MPI only rank 0 speaks (every rank gets the same exit status)
        sys.stdout = sys.stderr = open(os.devnull, "w")  # noqa: SIM115 - lives as long as the process
    try:
        return int(args._run(args) or 0)
    except InputError as exc:
        if args.debug:
            raise
        print(f"icgen {args.command}: error: {exc}", file=sys.stderr)
        return 2
    except OSError as exc:
        if args.debug:
            raise
        where = f" {exc.filename}" if exc.filename else ""
        print(f"icgen {args.command}: error: could not read or write{where}: {exc.strerror or exc}; "
              "no partial output was left behind", file=sys.stderr)
        return 1
    except KeyboardInterrupt as exc:
        if args.debug:
            raise
        what = "terminated (SIGTERM)" if isinstance(exc, Terminated) else "interrupted"
        print(f"icgen {args.command}: {what}; no partial output was left behind", file=sys.stderr)
        return 143 if isinstance(exc, Terminated) else 130
    finally:
        signal.signal(signal.SIGTERM, previous)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
