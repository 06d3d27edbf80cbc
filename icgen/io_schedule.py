"""Writing a run's schedule: output list, output table and step table, into one directory.

Files (names in :data:`FILES`):

* ``output_scale_factors.txt`` -- the outputs as plain text, one scale factor a
  line, no header (the common exchange form);
* ``outputs.csv`` (or ``.h5``) -- one row per output: a, z, t_gyr, D1, f1, H and
  the measured growth errors err_D1, err_f1;
* ``steps.csv`` (or ``.h5``) -- one row per step: a_begin, a_end, a_mid, dt_gyr,
  drift, kick, the half-step drifts and kicks and output_index (units in
  :data:`icgen.steps.COLUMN_UNITS`).

All numbers are written with the same 15 significant digits
(:data:`icgen.io_output.CSV_FORMAT`), so an output in the text list and the
step boundary it falls on read back as the same double.

The three files are first written into a hidden temporary directory inside the
target and renamed into place only once all three are complete: a failure leaves
no partial output behind.
"""

import contextlib
import os
import shutil
import tempfile
from pathlib import Path

import numpy as np

from . import io_output
from .errors import InputError
from .growth_check import COLUMN_UNITS as ERROR_UNITS
from .schedule import COLUMN_UNITS as OUTPUT_UNITS
from .steps import COLUMN_UNITS as STEP_UNITS

__all__ = ["FILES", "output_paths", "write_schedule_outputs"]

#: File names (table suffix added by format).
FILES = {"list": "output_scale_factors.txt", "outputs": "outputs", "steps": "steps"}
_SUFFIX = {"csv": ".csv", "hdf5": ".h5"}


def output_paths(out_dir, table_format="csv"):
    """The three output paths in ``out_dir`` (dict: "list", "outputs", "steps")."""
    if table_format not in _SUFFIX:
        raise InputError(f"table_format = {table_format!r} is not one of 'csv', 'hdf5'")
    out_dir = Path(out_dir)
    suf = _SUFFIX[table_format]
    return {"list": out_dir / FILES["list"], "outputs": out_dir / (FILES["outputs"] + suf),
            "steps": out_dir / (FILES["steps"] + suf)}


def write_schedule_outputs(out_dir, snapshots, steps, accuracy, overwrite=False,
                           table_format="csv", attrs=None):
    """Write the output list, the output table and the step table into ``out_dir``.

    Parameters
    ----------
    out_dir : str or Path
        Target directory; created (with its parents) if missing.
    snapshots : Snapshots
    steps : StepTable
    accuracy : GrowthAccuracy
        Growth errors at the same outputs (added to the output table).
    overwrite : bool, default False
        Replace existing files; otherwise an existing one is an error (raised
        before anything is written).
    table_format : {"csv", "hdf5"}, default "csv"
    attrs : dict, optional
        Root attributes of the HDF5 tables (provenance); ignored for CSV.

    Returns
    -------
    dict
        The paths written ("list", "outputs", "steps").

    Raises
    ------
    InputError
        If an output exists (without ``overwrite``) or the three results do not
        describe the same outputs.
    """
    paths = output_paths(out_dir, table_format)
    if not (np.array_equal(snapshots.a, steps.a_outputs) and np.array_equal(snapshots.a, accuracy.a)):
        raise InputError("snapshots, step table and accuracy describe different outputs; "
                         "build the steps and the accuracy from these snapshots")
    out_dir = Path(out_dir)
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError(f"--out-dir {out_dir} exists and is not a directory")
    out_dir.mkdir(parents=True, exist_ok=True)
    for p in paths.values():
        io_output.check_output_path(p, overwrite)

    out_cols = dict(snapshots.columns())
    out_cols.update(accuracy.columns())
    units = dict(OUTPUT_UNITS)
    units.update(ERROR_UNITS)
    tmp = Path(tempfile.mkdtemp(prefix=".schedule.", suffix=".partial", dir=out_dir))
    try:
        staged = {k: tmp / p.name for k, p in paths.items()}
        np.savetxt(staged["list"], snapshots.a, fmt=io_output.CSV_FORMAT)
        io_output.write_columns(staged["outputs"], out_cols, units=units,
                                attrs=dict(attrs or {}, leapfrog=accuracy.leapfrog))
        io_output.write_columns(staged["steps"], steps.columns(), units=STEP_UNITS,
                                attrs=dict(attrs or {}, spacing=steps.spacing))
        for k, p in paths.items():
            os.replace(staged[k], p)
    finally:
        with contextlib.suppress(FileNotFoundError):
            shutil.rmtree(tmp)
    return paths
