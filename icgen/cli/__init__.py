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

from .. import __version__, io_output
from ..errors import InputError
from ..parallel import launched_rank

__all__ = ["main", "entry", "build_parser"]


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
    exc = Terminated()
    io_output.note_interrupt(exc)  # in case Python drops it (see io_output._interrupt)
    raise exc


def _interrupt(signum, frame):
    exc = KeyboardInterrupt()
    io_output.note_interrupt(exc)
    raise exc


def _quiet_dropped_interrupts(previous):
    """An unraisable-exception hook that stays silent about an interrupt Python dropped.

    The handler recorded it and it ends the run cleanly later; printing "Exception
    ignored ... Traceback" would break the one-line promise.
    """
    def hook(unraisable):
        if isinstance(unraisable.exc_value, KeyboardInterrupt) and io_output.pending_interrupt():
            return
        previous(unraisable)
    return hook


def _one_line(text):
    """A message on one line (a newline in a name or a library's message would break it)."""
    return " ".join(str(text).splitlines())


def _os_error_in_chain(exc):
    """The OSError that ``exc`` arose from, if any.

    A failed HDF5 write raises OSError inside ``with h5py.File(...)``; closing the file
    then fails too, and h5py raises a RuntimeError ("Can't decrement id ref count")
    chained on the OSError, which would otherwise end in a traceback.
    """
    seen = set()
    while exc is not None and id(exc) not in seen:
        if isinstance(exc, OSError):
            return exc
        seen.add(id(exc))
        exc = exc.__cause__ if exc.__cause__ is not None else (
            None if exc.__suppress_context__ else exc.__context__)
    return None


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
    previous_int = signal.getsignal(signal.SIGINT)
    if previous_int is signal.default_int_handler:  # (an inherited SIG_IGN stays ignored)
        signal.signal(signal.SIGINT, _interrupt)
    previous_hook = sys.unraisablehook
    sys.unraisablehook = _quiet_dropped_interrupts(previous_hook)
    io_output.note_interrupt(None)
    if launched_rank() != 0:  # under MPI only rank 0 speaks (every rank gets the same exit status)
        sys.stdout = sys.stderr = open(os.devnull, "w")  # noqa: SIM115 - lives as long as the process
    try:
        status = int(args._run(args) or 0)
        if io_output.pending_interrupt() is not None:  # one that Python dropped (see io_output)
            raise type(io_output.pending_interrupt())()
        return status
    except InputError as exc:
        if args.debug:
            raise
        print(f"icgen {args.command}: error: {_one_line(exc)}", file=sys.stderr)
        return 2
    except Exception as exc:  # noqa: BLE001 - only I/O failures are reported here, the rest re-raised
        os_error = _os_error_in_chain(exc)
        if args.debug or os_error is None:
            raise
        where = f" {os_error.filename}" if os_error.filename else ""
        # os.strerror: HDF5's own text spans lines and carries buffer addresses and times
        reason = os.strerror(os_error.errno) if os_error.errno else (os_error.strerror or os_error)
        print(f"icgen {args.command}: error: could not read or write{where}: {_one_line(reason)}; "
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
        if previous_int is signal.default_int_handler:
            signal.signal(signal.SIGINT, previous_int)
        sys.unraisablehook = previous_hook
        io_output.note_interrupt(None)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())


def entry():
    """The console script (and ``python -m icgen.cli``): run :func:`main`, then end the process.

    A serial run skips the interpreter's teardown once its work is done and every file is
    closed: after numba has loaded compiled kernels, tearing down the interpreter (LLVM and
    numba's object graph) takes 0.2-0.3 s on the test machine and does nothing for the user.
    stdout and stderr are flushed first; threads other than the main one must be daemons or
    finished (none of ours is left running). Under MPI the normal exit runs, since mpi4py
    finalises MPI at exit.
    """
    import threading

    status = main()
    try:
        sys.stdout.flush()
        sys.stderr.flush()
    except BrokenPipeError:  # a reader that went away (``icgen ... | head``): nothing more to say
        pass
    alive = [t for t in threading.enumerate() if t is not threading.main_thread() and not t.daemon]
    if "mpi4py.MPI" not in sys.modules and not alive:
        os._exit(status)
    sys.exit(status)
