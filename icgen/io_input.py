"""Reading inputs: power-spectrum and transfer-function tables, and the spectrum of a parameter file.

Table format
------------
Plain text, one row per line. Columns are separated by whitespace or by commas
(a line that contains a comma is split at commas). ``#`` starts a comment, on its
own line or after the data; blank lines are skipped. Every data row must have the
same number of columns and every field must be a number. Which columns hold k and
P(k) (or k and T(k)) is given explicitly, as two zero-based indices; so is the
unit of k:

* ``k_unit = "h/Mpc"``: k in h/Mpc and P in (Mpc/h)^3;
* ``k_unit = "1/Mpc"``: k in 1/Mpc and P in Mpc^3 (converted here with k/h and P h^3).

A transfer function T(k) is dimensionless and normalised to T -> 1 on large scales.

Every problem is raised as :class:`~icgen.errors.TableError` naming the file, the
line and what is wrong; nothing is guessed or silently dropped.
"""

import re
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import spectrum
from .errors import ParameterError, TableError

__all__ = [
    "SpectrumTable",
    "read_spectrum_table",
    "spectrum_from_parameters",
    "box_parameters",
    "MIN_ROWS",
    "SIGMA8_EXTRAPOLATION_ERROR",
    "SIGMA8_EXTRAPOLATION_WARN",
    "TRANSFER_NORM_WARN",
]

#: Fewest data rows a table may have (a cubic spline through fewer is not meaningful).
MIN_ROWS = 4
#: If more than this fraction of sigma_8^2 comes from beyond the table, normalising to
#: sigma_8 would rest on the extrapolation: the table is refused (its k range is far too short).
SIGMA8_EXTRAPOLATION_ERROR = 1e-2
#: Above this fraction (and below the error threshold) a warning is issued; 1e-4 in
#: sigma_8^2 is 5e-5 in sigma_8, the accuracy a normalisation should have (common practice).
SIGMA8_EXTRAPOLATION_WARN = 1e-4
#: A transfer table whose first value differs from 1 by more than this is probably not
#: normalised to T -> 1 on large scales (matters for a_s normalisation only).
TRANSFER_NORM_WARN = 0.05


@dataclass(frozen=True, eq=False)
class SpectrumTable:
    """A validated table of k and P(k) or T(k), converted to project units.

    Attributes
    ----------
    path : str
        The file read.
    k : ndarray, shape (n,)
        Wavenumbers in h/Mpc, strictly increasing.
    value : ndarray, shape (n,)
        P(k) in (Mpc/h)^3 (``quantity = "power"``) or T(k) (``"transfer"``), > 0.
    line : ndarray of int, shape (n,)
        1-based line number of each row in the file.
    quantity : str
        ``"power"`` or ``"transfer"``.
    k_unit : str
        Unit of k in the file, ``"h/Mpc"`` or ``"1/Mpc"``.
    columns : tuple of int
        Zero-based columns of k and the value.
    """

    path: str
    k: np.ndarray
    value: np.ndarray
    line: np.ndarray
    quantity: str
    k_unit: str
    columns: tuple

    def __post_init__(self):
        for name in ("k", "value", "line"):
            getattr(self, name).flags.writeable = False

    @property
    def label(self):
        """Origin for messages: the file and its data lines."""
        name = "P(k)" if self.quantity == "power" else "T(k)"
        return f"{name} table {self.path} (data lines {self.line[0]}-{self.line[-1]})"


def _split(line):
    return [f.strip() for f in line.split(",")] if "," in line else line.split()


#: Line ends as an editor counts them. (``str.splitlines`` also breaks at form feeds,
#: \x1c-\x1e, \x85 and U+2028/9, which would put every later line number off.)
_LINE_END = re.compile(r"\r\n|\r|\n")


def _parse_rows(path, text, columns):
    """Numbers of the wanted columns and their line numbers; TableError on any bad row."""
    rows, lines = [], []
    ncol, first_line = None, None
    need = max(columns) + 1
    for n, raw in enumerate(_LINE_END.split(text), start=1):
        body = raw.split("#", 1)[0].strip()
        if not body:
            continue
        fields = _split(body)
        if ncol is None:
            ncol, first_line = len(fields), n
            if ncol < need:
                raise TableError(
                    f"{path}, line {n}: {ncol} column(s), but columns = {list(columns)} needs at least "
                    f"{need} (columns are counted from 0)")
        elif len(fields) != ncol:
            raise TableError(f"{path}, line {n}: {len(fields)} columns, but the first data row "
                             f"(line {first_line}) has {ncol}; every row needs the same columns")
        vals = []
        for c, f in enumerate(fields):  # every field must be a number, not only the two used
            if f == "":
                raise TableError(f"{path}, line {n}, column {c}: empty field")
            try:
                vals.append(float(f))
            except ValueError:
                raise TableError(f"{path}, line {n}, column {c}: {f!r} is not a number "
                                 "(comment out header lines with '#')") from None
        rows.append([vals[c] for c in columns])
        lines.append(n)
    return rows, lines


def read_spectrum_table(path, columns=(0, 1), quantity="power", k_unit="h/Mpc", h=None):
    """Read and validate a table of k and P(k) or T(k).

    Parameters
    ----------
    path : str or Path
        Text file (format in the module notes).
    columns : tuple of two int
        Zero-based columns of k and of P(k) or T(k).
    quantity : {"power", "transfer"}
        What the second column holds.
    k_unit : {"h/Mpc", "1/Mpc"}
        Unit of k in the file (P in the matching inverse cube).
    h : float, optional
        Dimensionless Hubble constant; required when ``k_unit = "1/Mpc"``.

    Returns
    -------
    SpectrumTable
        k in h/Mpc, P in (Mpc/h)^3.

    Raises
    ------
    TableError
        Unreadable file; a row with a different column count; a field that is not a
        number, NaN or infinite; k <= 0; P <= 0 or T <= 0; k not strictly increasing;
        fewer than :data:`MIN_ROWS` rows. The message names the file and the line.
    """
    path = Path(path)
    if quantity not in ("power", "transfer"):
        raise ParameterError(f"quantity = {quantity!r} is not one of 'power', 'transfer'")
    if k_unit not in ("h/Mpc", "1/Mpc"):
        raise ParameterError(f"k_unit = {k_unit!r} is not one of 'h/Mpc', '1/Mpc'")
    columns = tuple(int(c) for c in columns)
    if len(columns) != 2 or min(columns) < 0 or columns[0] == columns[1]:
        raise ParameterError(f"columns = {list(columns)!r}: need two different zero-based indices")
    if k_unit == "1/Mpc" and not (h is not None and h > 0):
        raise ParameterError("k_unit = '1/Mpc' needs the Hubble parameter h to convert to h/Mpc")
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise TableError(f"cannot read table {path}: {exc.strerror}") from None
    except ValueError as exc:  # a NUL character in the name ("embedded null byte")
        raise TableError(f"cannot read table {str(path)!r}: {exc}") from None
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:  # count line ends as _LINE_END does
        line = (data.count(b"\n", 0, exc.start) + data.count(b"\r", 0, exc.start)
                - data.count(b"\r\n", 0, exc.start) + 1)
        raise TableError(f"{path}, line {line}: not UTF-8 text (is this a binary file?)") from None

    rows, lines = _parse_rows(path, text, columns)
    if len(rows) < MIN_ROWS:
        where = f" (line {lines[0]})" if rows else ""
        raise TableError(f"{path}: {len(rows)} data row(s){where}; a table needs at least {MIN_ROWS} "
                         "rows of k and P(k) or T(k)")
    arr = np.array(rows, dtype=np.float64)
    line = np.array(lines, dtype=np.int64)
    k, v = arr[:, 0], arr[:, 1]
    vname = "P(k)" if quantity == "power" else "T(k)"
    for name, col, x in (("k", columns[0], k), (vname, columns[1], v)):
        bad = ~np.isfinite(x)
        if bad.any():
            i = int(np.argmax(bad))
            raise TableError(f"{path}, line {line[i]}, column {col}: {name} = {float(x[i])!r} is not a "
                             "finite number")
    bad = k <= 0.0
    if bad.any():
        i = int(np.argmax(bad))
        raise TableError(f"{path}, line {line[i]}, column {columns[0]}: k = {float(k[i])!r} must be positive")
    bad = v <= 0.0
    if bad.any():
        i = int(np.argmax(bad))
        hint = (" (a transfer function normalised to T -> 1 on large scales is positive; if the "
                "whole column is negative, multiply it by -1)" if quantity == "transfer"
                else " (a power spectrum is positive)")
        word = "negative" if v[i] < 0 else "zero"
        raise TableError(f"{path}, line {line[i]}, column {columns[1]}: {vname} = {float(v[i])!r} is "
                         f"{word}{hint}")
    bad = np.diff(k) <= 0.0
    if bad.any():
        i = int(np.argmax(bad)) + 1
        raise TableError(f"{path}, line {line[i]}: k = {float(k[i])!r} does not increase (previous row, "
                         f"line {line[i - 1]}, has k = {float(k[i - 1])!r}); rows must be sorted by "
                         "strictly increasing k")
    if k_unit == "1/Mpc":
        with np.errstate(all="ignore"):  # overflow or underflow is checked just below
            k_file, v_file = k, v
            k = k / h                                  # 1/Mpc -> h/Mpc
            if quantity == "power":
                v = v * h**3                           # Mpc^3 -> (Mpc/h)^3
        for name, col, x, x_file in (("k", columns[0], k, k_file), (vname, columns[1], v, v_file)):
            bad = ~(np.isfinite(x) & (x > 0.0))
            if name == "k" and not bad.any():
                bad[1:] = np.diff(x) <= 0.0
            if bad.any():
                i = int(np.argmax(bad))
                raise TableError(f"{path}, line {line[i]}, column {col}: {name} = {float(x_file[i])!r} "
                                 f"becomes {float(x[i])!r} in h/Mpc units (h = {h!r}): beyond the range "
                                 "of double precision")
    return SpectrumTable(path=str(path), k=np.ascontiguousarray(k), value=np.ascontiguousarray(v),
                         line=line, quantity=quantity, k_unit=k_unit, columns=columns)


def box_parameters(params):
    """(box_size, particles_per_side) if the parameters' [box] sets both, else None."""
    box = params.given.get("box", {})
    if "size" in box and "particles_per_side" in box:
        return box["size"], box["particles_per_side"]
    return None


def spectrum_from_parameters(params, bg):
    """Build the normalised linear spectrum that a parameter file describes.

    Parameters
    ----------
    params : icgen.parameters.Parameters
        Uses the ``[spectrum]`` section (source, table, quantity, columns, redshift,
        k_unit, index, extrapolate), ``[cosmology]`` (normalisation by sigma_8 or a_s)
        and, when it sets size and particles_per_side, ``[box]``.
    bg : BackgroundTable
        Solved for ``params.cosmology``.

    Returns
    -------
    LinearSpectrum

    Raises
    ------
    TableError
        For an unusable table (see :func:`read_spectrum_table`); if more than
        :data:`SIGMA8_EXTRAPOLATION_ERROR` of sigma_8^2 would come from beyond a
        table that is normalised to sigma_8 (the k range is far too short); or, with
        ``extrapolate = false``, if the table does not cover the k range of the box.
    ParameterError
        For a missing table path or power-law index, or a normalisation that does
        not fit the source.

    Warns
    -----
    SpectrumExtrapolationWarning
        When more than :data:`SIGMA8_EXTRAPOLATION_WARN` of sigma_8^2 comes from
        beyond the table.
    UserWarning
        A transfer table used with a_s whose first value is not close to 1.

    Notes
    -----
    Whether the table covers the run's k range is checked here only with
    ``[spectrum] extrapolate = false`` (an error). Otherwise the caller warns, once,
    with ``spec.warn_if_extrapolating(*spectrum.required_k_range(L, N))``.
    """
    cosmo = params.cosmology
    if not spectrum.same_background(bg.cosmo, cosmo):
        raise ValueError("bg was solved for a different background cosmology than the parameters give")
    source = params.get("spectrum", "source")
    if source == "table":
        path = params.path("spectrum", "table")
        tab = read_spectrum_table(path, params.get("spectrum", "columns"),
                                  params.get("spectrum", "quantity"), params.get("spectrum", "k_unit"),
                                  h=cosmo.h)
        z_tab = params.get("spectrum", "redshift")
        if tab.quantity == "power":
            spec = spectrum.from_power_table(tab.k, tab.value, z_tab, cosmo, bg, label=tab.label)
        else:
            if cosmo.sigma_8 is None and abs(tab.value[0] - 1.0) > TRANSFER_NORM_WARN:
                warnings.warn(
                    f"{path}, line {tab.line[0]}: T(k = {tab.k[0]:.4g} h/Mpc) = {tab.value[0]:.6g}; "
                    "with a_s normalisation the transfer function must be normalised to T -> 1 on "
                    "large scales, and this table does not look so", UserWarning, stacklevel=2)
            spec = spectrum.from_transfer_table(tab.k, tab.value, z_tab, cosmo, bg, label=tab.label)
        frac = spec.extrapolated_fraction(8.0)
        where = (f"{path} (data lines {tab.line[0]}-{tab.line[-1]}): k covers only "
                 f"[{spec.k_min:.4g}, {spec.k_max:.4g}] h/Mpc, so {frac:.3g} of sigma_8^2 comes from "
                 "the power-law extrapolation beyond the table")
        if frac > SIGMA8_EXTRAPOLATION_ERROR and spec.normalisation == "sigma_8":
            raise TableError(where + "; the k range is far too short to normalise to sigma_8 "
                             "(extend the table to about 1e-3 - 10 h/Mpc)")
        if frac > SIGMA8_EXTRAPOLATION_WARN:
            warnings.warn(where, spectrum.SpectrumExtrapolationWarning, stacklevel=2)
    elif source in ("eisenstein_hu", "eisenstein_hu_nowiggle"):
        spec = spectrum.from_eisenstein_hu(cosmo, bg, wiggles=source == "eisenstein_hu")
    elif source == "power_law":
        index = params.get("spectrum", "index")
        if index is None:
            raise ParameterError(f"[spectrum] source = \"power_law\" needs [spectrum] index "
                                 f"(n of P = A k^n, -3 < n < 1) but {params.source} does not set it")
        spec = spectrum.from_power_law(index, cosmo, bg)
    else:  # pragma: no cover - the schema only admits the sources above
        raise ParameterError(f"[spectrum] source = {source!r} is not one of {spectrum.SOURCES}")

    box = box_parameters(params)
    if box is not None and not params.get("spectrum", "extrapolate"):
        k_lo, k_hi = spectrum.required_k_range(*box)
        if not (spec.k_min <= k_lo and k_hi <= spec.k_max):
            raise TableError(
                f"the box (size {box[0]:g} Mpc/h, {box[1]} particles per side) needs P(k) over "
                f"[{k_lo:.4g}, {k_hi:.4g}] h/Mpc (half the fundamental mode to sqrt(3) times the "
                f"particle Nyquist wavenumber) but the {spec.label} covers [{spec.k_min:.4g}, "
                f"{spec.k_max:.4g}] h/Mpc and [spectrum] extrapolate = false; extend the table or "
                "set extrapolate = true")
    return spec
