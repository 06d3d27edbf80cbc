"""Writing outputs safely: atomic files and column tables (CSV or HDF5).

Every output is written under a temporary name in the target directory and
renamed onto its final name only when complete, so an interrupted or failed
write never leaves a file that looks finished. An existing output is only
replaced when the caller says ``overwrite=True``.
"""

import contextlib
import os
import shutil
import tempfile
from pathlib import Path

import numpy as np

from .errors import InputError

__all__ = ["atomic_path", "check_output_path", "write_columns", "CSV_FORMAT", "check_output_dir", "staging_dir",
           "swap_in_dir", "roll_back_dir", "note_interrupt", "pending_interrupt"]

#: printf format of floating values in CSV tables: 15 significant digits.
CSV_FORMAT = "%.15g"


#: The interrupt (KeyboardInterrupt or its SIGTERM subclass) the command line's signal handler
#: raised, if any. Python may run a handler where an exception cannot propagate -- in a weakref
#: callback or a ``__del__`` (h5py frees objects that way), where it is printed and dropped --
#: so :func:`atomic_path` and :func:`swap_in_dir` check this too before they rename: an
#: interrupted output is never committed, wherever the interrupt landed.
_interrupt = None


def note_interrupt(exc):
    """Record the interrupt in progress (``None`` clears it); see :data:`_interrupt`."""
    global _interrupt
    _interrupt = exc


def pending_interrupt():
    """The interrupt recorded by :func:`note_interrupt`, or None."""
    return _interrupt


def _raise_if_interrupted():
    if _interrupt is not None:
        raise type(_interrupt)()


def _umask():
    mask = os.umask(0)
    os.umask(mask)
    return mask


def check_output_path(path, overwrite=False):
    """Refuse an output path that exists (unless overwrite) or whose directory is missing."""
    path = Path(path)
    if path.exists() and not overwrite:
        raise InputError(f"output {path} exists; pass --overwrite to replace it")
    if path.is_dir():
        raise InputError(f"output {path} is a directory")
    parent = path.resolve().parent
    if not parent.is_dir():
        raise InputError(f"output directory {parent} does not exist")
    if not os.access(parent, os.W_OK):
        raise InputError(f"output directory {parent} is not writable")
    return path


@contextlib.contextmanager
def atomic_path(path, overwrite=False):
    """Yield a temporary path next to ``path``; rename it onto ``path`` on success.

    On any exception (including KeyboardInterrupt) the temporary file is removed
    and the exception propagates; ``path`` is untouched.
    """
    path = check_output_path(path, overwrite)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".partial", dir=path.resolve().parent)
    os.close(fd)
    try:
        yield Path(tmp)
        _raise_if_interrupted()  # one that could not propagate (see _interrupt)
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp creates 0600; give the usual permissions
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.remove(tmp)
        raise


def write_columns(path, columns, units=None, attrs=None, overwrite=False):
    """Write named 1-D columns as CSV (header line of names) or HDF5 (one dataset each).

    Parameters
    ----------
    path : str or Path
        Output file; HDF5 if it ends in ``.h5`` or ``.hdf5``, CSV otherwise.
    columns : dict[str, array_like]
        Column name -> 1-D array, all the same length, in output order.
    units : dict[str, str], optional
        Column name -> unit string, stored as each dataset's ``units`` attribute (HDF5).
    attrs : dict, optional
        Root attributes, HDF5 only (a CSV table keeps exactly one header line).
    overwrite : bool
        Replace an existing file.
    """
    names = list(columns)
    data = [np.asarray(columns[n]) for n in names]
    n = {d.shape for d in data}
    if len(n) != 1 or len(next(iter(n))) != 1:
        raise ValueError(f"columns must be 1-D arrays of one length, got shapes {sorted(n)}")
    path = Path(path)
    with atomic_path(path, overwrite) as tmp:
        if path.suffix.lower() in (".h5", ".hdf5"):
            import h5py  # local: only the I/O layer needs it

            with h5py.File(tmp, "w") as f:
                for k, v in (attrs or {}).items():
                    f.attrs[k] = v
                for name, d in zip(names, data):
                    ds = f.create_dataset(name, data=d)
                    if units and name in units:
                        ds.attrs["units"] = units[name]
        else:
            table = np.column_stack(data)
            np.savetxt(tmp, table, delimiter=",", header=",".join(names), comments="",
                       fmt=CSV_FORMAT)
    return path


def check_output_dir(out_dir, overwrite=False):
    """Refuse an output directory that is a file, is non-empty (unless overwrite) or has no parent."""
    out_dir = Path(out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError(f"--out-dir {out_dir} exists and is not a directory")
    if out_dir.exists() and any(out_dir.iterdir()) and not overwrite:
        raise InputError(f"--out-dir {out_dir} exists and is not empty; pass --overwrite to replace it")
    parent = out_dir.resolve().parent
    if not parent.is_dir():
        raise InputError(f"the parent directory {parent} of --out-dir does not exist")
    return out_dir


def staging_dir(out_dir):
    """A new empty temporary directory next to ``out_dir`` to build it in."""
    out_dir = Path(out_dir)
    return Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.", suffix=".partial", dir=out_dir.resolve().parent))


def swap_in_dir(tmp, out_dir):
    """Move a finished staging directory onto out_dir.

    Returns
    -------
    Path or None
        Where an existing out_dir was put aside: remove it with shutil.rmtree once
        the new one is final, or restore it with :func:`roll_back_dir`.
    """
    out_dir = Path(out_dir)
    _raise_if_interrupted()  # one that could not propagate (see _interrupt)
    os.chmod(tmp, 0o777 & ~_umask())
    old = None
    if out_dir.exists():
        old = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.", suffix=".old", dir=out_dir.resolve().parent))
        os.rmdir(old)
        os.replace(out_dir, old)
    os.replace(tmp, out_dir)
    return old


def roll_back_dir(out_dir, old):
    """Remove a failed out_dir and put the old one (if any) back."""
    shutil.rmtree(out_dir, ignore_errors=True)
    if old is not None:
        os.replace(old, out_dir)
