"""Parameter files: TOML sections, their keys, types, ranges and defaults.

A parameter file is TOML with the sections of :data:`SCHEMA`. Every key is type-
and range-checked here, at the boundary, before any work is done; an unknown
section or key is refused with the nearest valid name suggested. Command-line
overrides ``section.key=value`` (value parsed as TOML, or taken as a bare string
when it is not valid TOML) are merged before validation, so a sweep needs no
copies of the file.

Each stage reads its section through :meth:`Parameters.get`; keys with no default
(``REQUIRED``) are only demanded by the stage that needs them.
"""

import dataclasses
import difflib
import math
import re
import tomllib
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path
from types import MappingProxyType

from .cosmology import PLANCK18, RANGES as COSMO_RANGES
from .errors import ParameterError

__all__ = ["Key", "SCHEMA", "REQUIRED", "Parameters", "load", "loads", "parse_override", "to_toml"]


class _Required:
    def __repr__(self):
        return "REQUIRED"


#: Marker for a key with no default.
REQUIRED = _Required()


@dataclass(frozen=True)
class Key:
    """One parameter: its kind, default, allowed range or choices, and meaning.

    ``kind`` is one of "float", "int", "bool", "str", "choice", "path",
    "float_list", "int_pair", "float_or_auto".
    """

    kind: str
    default: object = REQUIRED
    lo: float | None = None
    hi: float | None = None
    choices: tuple = ()
    doc: str = ""
    nullable: bool = False
    even: bool = False


def _cosmo_key(name, doc):
    lo, hi = COSMO_RANGES[name]
    default = getattr(PLANCK18, name)
    return Key("float", default, lo, hi, doc=doc, nullable=name in ("sigma_8", "a_s"))


#: All sections and keys. Defaults of [cosmology] are Planck 2018 (paper VI,
#: Table 2, TT,TE,EE+lowE+lensing+BAO), see :data:`icgen.cosmology.PLANCK18`.
SCHEMA = {
    "cosmology": {
        "h": _cosmo_key("h", "H0 / (100 km/s/Mpc)"),
        "omega_m": _cosmo_key("omega_m", "all matter today, baryons included"),
        "omega_b": _cosmo_key("omega_b", "baryons today"),
        "omega_k": _cosmo_key("omega_k", "curvature today (positive = open)"),
        "w0": _cosmo_key("w0", "dark-energy w today"),
        "wa": _cosmo_key("wa", "dark-energy w(a) = w0 + wa (1 - a)"),
        "t_cmb": _cosmo_key("t_cmb", "CMB temperature in K; 0 switches radiation off"),
        "n_eff": _cosmo_key("n_eff", "massless neutrino species"),
        "n_s": _cosmo_key("n_s", "scalar spectral index"),
        "sigma_8": _cosmo_key("sigma_8", "rms linear density in 8 Mpc/h top hats at z = 0"),
        "a_s": Key("float", None, *COSMO_RANGES["a_s"], doc="primordial amplitude at 0.05/Mpc",
                   nullable=True),
        "alpha_s": _cosmo_key("alpha_s", "running of n_s"),
    },
    "spectrum": {
        "source": Key("choice", "eisenstein_hu",
                      choices=("table", "eisenstein_hu", "eisenstein_hu_nowiggle", "power_law"),
                      doc="where the linear P(k) comes from"),
        "table": Key("path", None, doc="table file, relative to the parameter file", nullable=True),
        "quantity": Key("choice", "power", choices=("power", "transfer"),
                        doc="what the table's second column holds"),
        "columns": Key("int_pair", (0, 1), 0, 1000, doc="zero-based columns of k and P(k) or T(k)"),
        "redshift": Key("float", 0.0, 0.0, 1e4, doc="redshift of the table"),
        "k_unit": Key("choice", "h/Mpc", choices=("h/Mpc", "1/Mpc"), doc="unit of the table's k"),
        "index": Key("float", None, -3.0, 4.0, doc="power-law index n of P = A k^n", nullable=True),
        "extrapolate": Key("bool", True, doc="power-law extrapolation beyond the table (with a "
                           "warning); false: refuse a table not covering the box's k range"),
    },
    "box": {
        "size": Key("float", REQUIRED, 1e-3, 1e6, doc="comoving box side in Mpc/h"),
        "particles_per_side": Key("int", REQUIRED, 4, 16384, even=True,
                                  doc="particles per side, N (even; at least 4 spacings per box side)"),
    },
    "start": {
        "redshift": Key("float_or_auto", "auto", 0.0, 1e4, doc='start redshift or "auto"'),
        "lpt_order": Key("int", 2, 1, 2, doc="1 (Zel'dovich) or 2 (2LPT)"),
        "sigma_limit_1lpt": Key("float", 0.1, 1e-3, 10.0,
                                doc="auto start: largest rms grid density contrast, first order"),
        "sigma_limit_2lpt": Key("float", 0.25, 1e-3, 10.0,
                                doc="auto start: largest rms grid density contrast, second order"),
        "displacement_limit": Key("float", 0.25, 1e-3, 10.0,
                                  doc="auto start: largest rms displacement per component / spacing"),
    },
    "phases": {
        "seed": Key("int", 12345, 0, 2**63 - 1, doc="random seed of the mode generator"),
        "fixed_amplitude": Key("bool", False, doc="|delta_k|^2 = P(k) exactly"),
        "paired": Key("bool", False, doc="shift every phase by pi"),
    },
    "output": {
        "precision": Key("choice", "float32", choices=("float32", "float64"),
                         doc="floating type of positions and velocities"),
        "write_ids": Key("bool", True, doc="write /particles/id"),
        "compression": Key("choice", "none", choices=("none", "gzip"),
                           doc="HDF5 filter of the particle datasets: none, or gzip (deflate after byte shuffle)"),
        "compression_level": Key("int", 4, 1, 9, doc="deflate level of compression = 'gzip', 1 (fast) to 9"),
        "fletcher32": Key("bool", False, doc="add HDF5's Fletcher-32 checksum filter to every chunk"),
    },
    "snapshots": {
        "a_begin": Key("float", None, 1e-8, 100.0, nullable=True,
                       doc="start of the run; default 1/(1 + [start] redshift)"),
        "a_end": Key("float", 1.0, 1e-8, 100.0, doc="last output; the schedule ends exactly here"),
        "spacing": Key("choice", "log_a", choices=("a", "log_a", "power", "time", "growth"),
                       doc="variable the regular outputs are even in: a, ln a, a^power, t, D1"),
        "power": Key("float", 0.5, 0.01, 4.0, doc="exponent p of spacing = 'power' (a^p)"),
        "count": Key("int", 0, 0, 10**6, doc="evenly spaced outputs, the last at a_end (0: none)"),
        "interval": Key("float", None, 1e-12, 1e4, nullable=True,
                        doc="or: spacing between outputs in the spacing variable (Gyr for time)"),
        "extra_redshifts": Key("float_list", (), -0.99, 1e4, doc="further outputs, as redshifts"),
        "include_begin": Key("bool", False, doc="also write an output at a_begin"),
        "merge_tolerance": Key("float", 1e-6, 0.0, 0.1, doc="outputs closer than this in ln a merge"),
    },
    "steps": {
        "spacing": Key("choice", "log_a", choices=("a", "log_a", "power", "time", "growth"),
                       doc="variable the steps are even in: a, ln a, a^power, t, D1"),
        "power": Key("float", 0.5, 0.01, 4.0, doc="exponent p of spacing = 'power' (a^p)"),
        "count": Key("int", 100, 1, 10**7, doc="nominal number of steps, a_begin to a_end"),
        "max_interval": Key("float", None, 1e-12, 1e4, nullable=True,
                            doc="or: widest step in the spacing variable (Gyr for time)"),
        "target_growth_error": Key("float", None, 1e-8, 0.5, nullable=True,
                                   doc="or: fewest steps keeping |psi/D1 - 1| at a_end below this"),
        "leapfrog": Key("choice", "kdk", choices=("kdk", "dkd"),
                        doc="leapfrog form whose growth error is measured"),
    },
}


#: Longest text of a value or a name quoted in a message; a longer one is cut (a
#: message stays one readable line whatever the file holds).
_SHOW_MAX = 80


def _show(value):
    """``repr(value)`` for a message, cut to about _SHOW_MAX characters."""
    text = repr(value)
    if len(text) > _SHOW_MAX:
        size = len(value) if isinstance(value, str) else len(text)
        text = f"{text[:_SHOW_MAX]}... ({size} characters)"
    return text


def _name(name):
    """A section or key name for a message: as it is, unless unprintable (a newline) or huge."""
    name = str(name)
    return name if name.isprintable() and len(name) <= _SHOW_MAX else _show(name)


def _suggest(name, valid):
    by_lower = {v.lower(): v for v in valid}  # "KDK" is nearest to "kdk"
    close = (difflib.get_close_matches(name.lower(), list(by_lower), n=1, cutoff=0.5)
             if len(name) <= 4 * _SHOW_MAX else [])  # no name that long is close to a valid one
    return f"; did you mean '{by_lower[close[0]]}'?" if close else f"; valid: {', '.join(sorted(valid))}"


def _range_text(key):
    return f"[{key.lo:g}, {key.hi:g}]"


def _check_value(section, name, key, value, where):
    """Type- and range-check one value; return it in canonical Python form."""
    label = f"[{section}] {name}{where}"
    if value is None and key.nullable:
        return None
    kind = key.kind
    if kind == "float_or_auto":
        if isinstance(value, str) and value == "auto":
            return "auto"
        kind = "float"
    if kind in ("float", "int"):
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise ParameterError(f"{label}: expected a number in {_range_text(key)}, got {_show(value)}")
        if kind == "int" and not (isinstance(value, int) or float(value).is_integer()):
            raise ParameterError(f"{label}: expected an integer in {_range_text(key)}, got {_show(value)}")
        # (a TOML integer may exceed the float range: math.isfinite would overflow on it)
        if not (isinstance(value, int) or math.isfinite(value)) or not key.lo <= value <= key.hi:
            raise ParameterError(f"{label} = {_show(value)} is outside the allowed range {_range_text(key)}")
        if key.even and int(value) % 2:
            raise ParameterError(f"{label} = {_show(value)} is odd; need an even integer in {_range_text(key)}")
        return int(value) if kind == "int" else float(value)
    if kind == "bool":
        if not isinstance(value, bool):
            raise ParameterError(f"{label}: expected true or false, got {_show(value)}")
        return value
    if kind == "choice":
        if value not in key.choices:
            raise ParameterError(f"{label} = {_show(value)} is not one of {', '.join(map(repr, key.choices))}"
                                 + (_suggest(str(value), key.choices) if isinstance(value, str) else ""))
        return value
    if kind in ("str", "path"):
        if not isinstance(value, str) or not value:
            raise ParameterError(f"{label}: expected a non-empty string, got {_show(value)}")
        if kind == "path" and "\0" in value:  # no file system allows it; open() would raise ValueError
            raise ParameterError(f"{label} = {_show(value)}: a path cannot contain a NUL character")
        return value
    if kind == "int_pair":
        if (not isinstance(value, (list, tuple)) or len(value) != 2
                or not all(isinstance(v, int) and not isinstance(v, bool) for v in value)):
            raise ParameterError(f"{label}: expected two integers like [0, 1], got {_show(value)}")
        if not all(key.lo <= v <= key.hi for v in value) or value[0] == value[1]:
            raise ParameterError(f"{label} = {_show(list(value))}: need two different integers in "
                                 f"{_range_text(key)}")
        return tuple(value)
    if kind == "float_list":
        if not isinstance(value, (list, tuple)):
            raise ParameterError(f"{label}: expected a list of numbers, got {_show(value)}")
        out = []
        for v in value:
            if isinstance(v, bool) or not isinstance(v, (int, float)) \
                    or not (isinstance(v, int) or math.isfinite(v)) or not key.lo <= v <= key.hi:
                raise ParameterError(f"{label}: every entry must be a number in {_range_text(key)}, "
                                     f"got {_show(v)}")
            out.append(float(v))
        return tuple(out)
    raise AssertionError(f"unknown key kind {kind}")  # pragma: no cover - schema bug


def parse_override(text):
    """Parse one ``section.key=value`` override into (section, key, value).

    The value is parsed as TOML (``0.8``, ``true``, ``"table"``, ``[0, 2]``); a value
    that is not valid TOML is taken as a bare string (``source=power_law``).
    """
    if "=" not in text or "." not in text.split("=", 1)[0]:
        raise ParameterError(f"override {_show(text)}: expected section.key=value, e.g. cosmology.sigma_8=0.8")
    lhs, rhs = text.split("=", 1)
    section, key = (s.strip() for s in lhs.split(".", 1))
    rhs = rhs.strip()
    try:
        value = tomllib.loads(f"v = {rhs}")["v"]
    except tomllib.TOMLDecodeError:
        value = rhs
    except RecursionError:  # tomllib recurses once per level of nesting
        raise ParameterError(f"override {_name(section)}.{_name(key)}: the value is nested too deeply") from None
    return section, key, value


def _toml_value(v):
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, float)):
        return repr(v)
    if isinstance(v, str):  # a TOML basic string: control characters but tab must be escaped
        v = v.replace("\\", "\\\\").replace('"', '\\"')
        return '"' + re.sub(r"[\x00-\x08\x0a-\x1f\x7f]", lambda m: f"\\u{ord(m.group()):04X}", v) + '"'
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    raise TypeError(f"cannot write {v!r} as TOML")  # pragma: no cover


def to_toml(sections):
    """Write a dict of sections as TOML text (None values are left out)."""
    lines = []
    for sec, keys in sections.items():
        items = [(k, v) for k, v in keys.items() if v is not None and v is not REQUIRED]
        if not items:
            continue
        lines.append(f"[{sec}]")
        lines += [f"{k} = {_toml_value(v)}" for k, v in items]
        lines.append("")
    return "\n".join(lines)


@dataclass(frozen=True, eq=False)
class Parameters:
    """Validated parameters of one run.

    Attributes
    ----------
    given : mapping
        What the file and the overrides set, validated (section -> key -> value).
    source : str
        The file read, or a description such as "<defaults>".
    base_dir : pathlib.Path
        Directory that relative paths in the file are resolved against.
    """

    given: MappingProxyType
    source: str = "<defaults>"
    base_dir: Path = field(default_factory=Path.cwd)

    def get(self, section, key):
        """The value of ``[section] key``: given, else the default; REQUIRED keys must be given."""
        spec = SCHEMA[section][key]
        value = self.given.get(section, {}).get(key, spec.default)
        if value is REQUIRED:
            raise ParameterError(
                f"[{section}] {key} is required here ({spec.doc}; allowed {_range_text(spec)}) "
                f"but {self.source} does not set it")
        return value

    def section(self, section):
        """All keys of a section with defaults filled in (REQUIRED keys left out if unset)."""
        out = {}
        for key, spec in SCHEMA[section].items():
            v = self.given.get(section, {}).get(key, spec.default)
            if v is not REQUIRED:
                out[key] = v
        return MappingProxyType(out)

    def path(self, section, key):
        """A path-valued key resolved against the parameter file's directory."""
        value = self.get(section, key)
        if value is None:
            raise ParameterError(f"[{section}] {key} is required here ({SCHEMA[section][key].doc}) "
                                 f"but {self.source} does not set it")
        p = Path(value)
        return p if p.is_absolute() else (self.base_dir / p)

    @cached_property
    def cosmology(self):
        """The resolved :class:`~icgen.cosmology.Cosmology` (Planck 2018 where unset)."""
        given = dict(self.given.get("cosmology", {}))
        if "a_s" in given and given["a_s"] is not None and "sigma_8" not in given:
            given["sigma_8"] = None
        try:
            return dataclasses.replace(PLANCK18, **given)
        except ParameterError as exc:
            raise ParameterError(f"{exc} (in {self.source})") from None

    def to_toml(self):
        """TOML text of every given value plus the resolved cosmology: reproduces this run."""
        sections = {sec: dict(keys) for sec, keys in self.given.items()}
        for sec, keys in sections.items():  # relative paths would break once the text moves
            for key, value in keys.items():
                if SCHEMA[sec][key].kind == "path" and value is not None:
                    keys[key] = str(self.path(sec, key).resolve())
        cosmo = dataclasses.asdict(self.cosmology)
        sections["cosmology"] = {k: cosmo[k] for k in SCHEMA["cosmology"]}
        return to_toml(sections)


def _validate(raw, where):
    if not isinstance(raw, dict):  # pragma: no cover - tomllib always returns dict
        raise ParameterError(f"{where}: the file must be a TOML table of sections")
    given = {}
    for sec, keys in raw.items():
        if sec not in SCHEMA:
            raise ParameterError(f"unknown section [{_name(sec)}] in {where}" + _suggest(sec, SCHEMA))
        if not isinstance(keys, dict):
            raise ParameterError(f"'{sec}' in {where} must be a section [{sec}] of keys, got {_show(keys)}")
        out = {}
        for key, value in keys.items():
            if key not in SCHEMA[sec]:
                raise ParameterError(f"unknown key '{_name(key)}' in section [{sec}] of {where}"
                                     + _suggest(key, SCHEMA[sec]))
            out[key] = _check_value(sec, key, SCHEMA[sec][key], value, f" in {where}")
        given[sec] = MappingProxyType(out)
    _check_combinations(given, where)
    return MappingProxyType(given)


def _check_combinations(given, where):
    """Refuse combinations of valid values that contradict each other (beyond the cosmology's own)."""
    snaps, start = given.get("snapshots", {}), given.get("start", {})
    a_end = snaps.get("a_end", SCHEMA["snapshots"]["a_end"].default)
    a_begin = snaps.get("a_begin")
    if a_begin is not None and not a_end > a_begin:
        raise ParameterError(
            f"[snapshots] a_end = {a_end!r} in {where} is not after [snapshots] a_begin = {a_begin!r}; "
            "the outputs run from a_begin to a_end, so need a_end > a_begin")
    z = start.get("redshift")
    if a_begin is None and "a_end" in snaps and isinstance(z, float) and not a_end > 1.0 / (1.0 + z):
        raise ParameterError(
            f"[snapshots] a_end = {a_end!r} in {where} is not after the start of the run, "
            f"a = 1/(1 + z) = {1.0 / (1.0 + z):.6g} for [start] redshift = {z:g}; "
            "need a_end > 1/(1 + redshift)")


def loads(text, overrides=(), source="<string>", base_dir=None):
    """Parse and validate parameter-file text with optional ``section.key=value`` overrides.

    Returns
    -------
    Parameters

    Raises
    ------
    ParameterError
        Invalid TOML, an unknown section or key, a value of the wrong type or out
        of range, or an inconsistent combination.
    """
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ParameterError(f"{source} is not valid TOML: {exc}") from None
    except RecursionError:  # tomllib recurses once per level of nesting
        raise ParameterError(f"{source}: arrays or tables are nested too deeply") from None
    for ov in overrides:
        sec, key, value = parse_override(ov) if isinstance(ov, str) else ov
        if sec not in SCHEMA:
            raise ParameterError(f"override {_name(sec)}.{_name(key)}: unknown section [{_name(sec)}]"
                                 + _suggest(sec, SCHEMA))
        raw.setdefault(sec, {})
        if not isinstance(raw[sec], dict):
            raise ParameterError(f"'{sec}' in {source} must be a section")
        raw[sec][key] = value
    given = _validate(raw, source)
    params = Parameters(given=given, source=source,
                        base_dir=Path(base_dir) if base_dir is not None else Path.cwd())
    params.cosmology  # validate the combination now, before any work
    return params


def load(path, overrides=()):
    """Read and validate a parameter file (see :func:`loads`)."""
    path = Path(path)
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise ParameterError(f"cannot read parameter file {path}: {exc.strerror}") from None
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        raise ParameterError(f"parameter file {path} is not UTF-8 text") from None
    return loads(text, overrides, source=str(path), base_dir=path.resolve().parent)
