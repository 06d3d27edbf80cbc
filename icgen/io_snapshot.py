"""HDF5 snapshots: writing the particle-mesh stepper's outputs, and reading snapshots of any run.

Layout written (``format = "icgen.snapshot"``, ``format_version = 1``)
----------------------------------------------------------------------
The particle-file layout of :mod:`icgen.io_hdf5` at a later time. Root attributes:
  format, format_version, created_by, box_size (Mpc/h), scale_factor, redshift,
  time_gyr (cosmic time since the big bang, Gyr, when known), n_particles,
  particle_mass (Msun/h), step (steps completed), cosmology (JSON), parameters (TOML
  text, when known), units (JSON map of quantity -> unit), and any extra attributes.
Datasets (each with a ``units`` attribute):
  /particles/position  (N, 3)  Mpc/h comoving, in [0, box_size)
  /particles/velocity  (N, 3)  km/s peculiar, v = a dx/dt
  /particles/id        (N,)    uint64, the initial condition's ids

Files are written under a temporary name and renamed when complete.

Reading
-------
:func:`read_snapshot` reads our two layouts (``icgen.particles`` initial conditions
are a valid first snapshot) without options, and any other HDF5 file when the caller
names the positions dataset, the box size and the scale-factor attribute.
"""

import json
from dataclasses import dataclass

import h5py
import numpy as np

from . import __version__
from .errors import InputError
from .io_output import atomic_path

__all__ = ["FORMAT", "FORMAT_VERSION", "SnapshotData", "write_snapshot", "read_snapshot"]

FORMAT = "icgen.snapshot"
FORMAT_VERSION = 1
#: Formats read without options: (positions, velocities) datasets of each.
OUR_FORMATS = {"icgen.snapshot": ("particles/position", "particles/velocity"),
               "icgen.particles": ("particles/position", "particles/velocity")}
UNITS = {"position": "Mpc/h (comoving)", "velocity": "km/s (peculiar, a dx/dt)",
         "id": "1 (initial-condition id)", "particle_mass": "Msun/h", "box_size": "Mpc/h",
         "time_gyr": "Gyr"}


@dataclass(frozen=True, eq=False)
class SnapshotData:
    """What a run check needs from one snapshot.

    Attributes
    ----------
    position : ndarray, shape (N, 3)
        Comoving positions in Mpc/h, in [0, box_size].
    velocity : ndarray, shape (N, 3) or None
        Peculiar velocities a dx/dt in km/s.
    box_size : float
        L in Mpc/h.
    a : float
        Scale factor.
    time_gyr : float or None
        Cosmic time since the big bang in Gyr, if the file records it.
    source : str
        Where it came from (a path), for messages.
    attrs : dict
        The file's root attributes (strings decoded).
    """

    position: np.ndarray
    velocity: np.ndarray | None
    box_size: float
    a: float
    time_gyr: float | None
    source: str = ""
    attrs: dict | None = None


def write_snapshot(path, position, velocity, ids, box_size, a, cosmology, particle_mass,
                   time_gyr=None, step=None, parameters_toml=None, overwrite=False, extra_attrs=None):
    """Write one snapshot in the ``icgen.snapshot`` layout, atomically.

    Parameters
    ----------
    path : str or Path
    position : array_like, shape (N, 3)
        Comoving positions in Mpc/h, in [0, box_size).
    velocity : array_like, shape (N, 3)
        Peculiar velocities in km/s.
    ids : array_like, shape (N,) or None
    box_size : float
        L in Mpc/h.
    a : float
        Scale factor.
    cosmology : icgen.cosmology.Cosmology
    particle_mass : float
        Msun/h.
    time_gyr : float, optional
        Cosmic time in Gyr.
    step : int, optional
        Steps completed.
    parameters_toml : str, optional
    overwrite : bool
    extra_attrs : dict, optional
    """
    position = np.asarray(position)
    velocity = np.asarray(velocity)
    attrs = {"format": FORMAT, "format_version": FORMAT_VERSION, "created_by": f"icgen {__version__}",
             "box_size": float(box_size), "scale_factor": float(a), "redshift": 1.0 / float(a) - 1.0,
             "n_particles": int(position.shape[0]), "particle_mass": float(particle_mass),
             "cosmology": json.dumps(cosmology.as_dict()), "units": json.dumps(UNITS)}
    if time_gyr is not None:
        attrs["time_gyr"] = float(time_gyr)
    if step is not None:
        attrs["step"] = int(step)
    if parameters_toml is not None:
        attrs["parameters"] = parameters_toml
    attrs.update(extra_attrs or {})
    with atomic_path(path, overwrite) as tmp:
        with h5py.File(tmp, "w") as f:
            for k, v in attrs.items():
                f.attrs[k] = v
            grp = f.create_group("particles")
            for name, arr in (("position", position), ("velocity", velocity), ("id", ids)):
                if arr is None:
                    continue
                ds = grp.create_dataset(name, data=arr)
                ds.attrs["units"] = UNITS[name]
    return path


def _decode(v):
    if isinstance(v, bytes):
        return v.decode()
    if isinstance(v, np.ndarray) and v.shape == (1,):
        return v[0]
    return v


def read_snapshot(path, positions=None, velocities=None, box_size=None, scale_factor_attr=None,
                  time_attr=None):
    """Read one snapshot: ours without options, any HDF5 file with them.

    Parameters
    ----------
    path : str or Path
    positions : str, optional
        Dataset of the (N, 3) positions in Mpc/h (default: ours).
    velocities : str, optional
        Dataset of the (N, 3) peculiar velocities in km/s (default: ours; other files
        have none unless named).
    box_size : float, optional
        L in Mpc/h (default: the ``box_size`` attribute).
    scale_factor_attr : str, optional
        Root attribute holding the scale factor (default ``scale_factor``; a name
        containing "redshift" is read as z and converted).
    time_attr : str, optional
        Root attribute holding the cosmic time in Gyr (default ``time_gyr`` if present).

    Returns
    -------
    SnapshotData

    Raises
    ------
    InputError
        If the file cannot be read, a named dataset or attribute is missing, or shapes
        are wrong; the message names the file and what to pass.
    """
    try:
        f = h5py.File(path, "r")
    except OSError as exc:
        raise InputError(f"cannot open snapshot {path}: {exc}") from None
    with f:
        attrs = {k: _decode(v) for k, v in f.attrs.items()}
        fmt = attrs.get("format")
        ours = OUR_FORMATS.get(fmt)
        pos_name = positions or (ours[0] if ours else None)
        vel_name = velocities or (ours[1] if ours else None)
        if pos_name is None:
            raise InputError(f"{path}: not an icgen file (format = {fmt!r}); name the positions "
                             "dataset with --positions")
        if pos_name not in f:
            raise InputError(f"{path}: no dataset {pos_name!r}")
        pos = f[pos_name][...]
        vel = None
        if vel_name is not None:
            if vel_name in f:
                vel = f[vel_name][...]
            elif velocities:
                raise InputError(f"{path}: no dataset {vel_name!r}")
    if box_size is None:
        if "box_size" not in attrs:
            raise InputError(f"{path}: no box_size attribute; give the box size (Mpc/h) with --box-size")
        box_size = float(attrs["box_size"])
    name = scale_factor_attr or "scale_factor"
    if name not in attrs:
        raise InputError(f"{path}: no attribute {name!r}; name the scale-factor attribute with "
                         "--scale-factor-attr")
    value = float(attrs[name])
    a = 1.0 / (1.0 + value) if "redshift" in name.lower() else value
    if not (np.isfinite(a) and 0.0 < a):
        raise InputError(f"{path}: scale factor {a!r} from attribute {name!r} is not positive")
    t_name = time_attr or ("time_gyr" if "time_gyr" in attrs else None)
    if time_attr and time_attr not in attrs:
        raise InputError(f"{path}: no attribute {time_attr!r}")
    t = float(attrs[t_name]) if t_name else None
    if pos.ndim != 2 or pos.shape[1] != 3:
        raise InputError(f"{path}: positions {pos_name!r} have shape {pos.shape}, need (N, 3)")
    if vel is not None and vel.shape != pos.shape:
        raise InputError(f"{path}: velocities have shape {vel.shape}, positions {pos.shape}")
    return SnapshotData(position=pos, velocity=vel, box_size=float(box_size), a=a, time_gyr=t,
                        source=str(path), attrs=attrs)
