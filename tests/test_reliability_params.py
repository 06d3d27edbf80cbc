"""Issue 8, parameter files: generated bad documents and overrides are refused cleanly.

Properties (hypothesis), each over generated TOML text:

* a valid document with exactly one fault planted in it (a wrong type, a number out of
  range, NaN or an infinity, a misspelt or unknown key or section, a huge string, a
  table or an array where a scalar belongs, sigma_8 with a_s, a_end before a_begin, an
  odd or tiny grid, ...) raises the project's own ``InputError``, and the one-line
  message names the section and key (or the unknown name), the file and, for numbers,
  the allowed range;
* any generated document (valid or not, anything tomllib can parse, and text that is
  not TOML at all) either loads or raises ``InputError``, never another exception; a
  document that loads holds only values inside the schema, and its ``to_toml()`` text
  (what every output stores) reads back to the same run;
* overrides ``section.key=value`` obey the same rules;
* through the command line (in-process ``icgen.cli.main``), a bad file or override
  ends with exit status 2, exactly one line on stderr, no traceback, and nothing in
  the output directory.

References: the rules the parameter files promise (icgen.parameters docstring and
SCHEMA, DEVELOPERS.md, issue 8 item 1). The schema's ranges are the specification the
generated faults are planted against; the checks themselves are written here afresh.

Counts: every property counts the examples it ran (``RUNS``) and the wrapper test asserts
that the planned number ran, so "thousands of generated bad inputs" is checked, not hoped.
"""

import collections
import contextlib
import functools
import io
import math
import os
import re
import tempfile
from pathlib import Path

import pytest
from hypothesis import HealthCheck, assume, settings
from hypothesis import given as hgiven
from hypothesis import strategies as st

from icgen import parameters
from icgen.cli import main
from icgen.cli.common import default_params_text
from icgen.errors import InputError
from icgen.parameters import REQUIRED, SCHEMA

#: Examples run per property (counted in the test bodies).
RUNS = collections.Counter()

#: Examples per property in the default run (the slow variants below run ten times more).
N_EXAMPLES = {"one fault": 1200, "any document": 1000, "raw text": 500, "overrides": 800,
              "cli file": 400, "cli override": 200, "valid": 200}

#: Name every generated document is loaded under; each message must name it.
SOURCE = "sweep/params.toml"

#: Longest message we accept: a huge value or name must be cut, not echoed (one readable line).
MAX_MESSAGE = 2000

FAST = dict(deadline=None, database=None, derandomize=True,  # a CI gate must not depend on luck
            suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                   HealthCheck.filter_too_much, HealthCheck.large_base_example])


def _examples(n):
    return settings(max_examples=n, **FAST)


def _run_counted(name, prop, at_least):
    """Run a @given property and check that it really tried ``at_least`` examples."""
    before = RUNS[name]
    prop()
    tried = RUNS[name] - before
    print(f"[hypothesis] {name}: {tried} examples")
    assert tried >= at_least, f"{name}: only {tried} examples ran"


# ---- a TOML writer for arbitrary values (written here, independent of parameters.to_toml) -------

_BARE = re.compile(r"[A-Za-z0-9_-]+")


_MUST_ESCAPE = re.compile(r'["\\\x00-\x08\x0a-\x1f\x7f]')


def toml_string(s):
    """A TOML basic string: escape quote, backslash and every control character but tab."""
    return '"' + _MUST_ESCAPE.sub(lambda m: f"\\u{ord(m.group()):04X}", s) + '"'


def toml_key(k):
    return k if _BARE.fullmatch(k) else toml_string(k)


class Raw(str):
    """Literal TOML text for a value (a date, say), written as it is."""


def toml_value(v):
    if isinstance(v, Raw):
        return str(v)
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(v, str):
        return toml_string(v)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{toml_key(k)} = {toml_value(x)}" for k, x in v.items()) + "}"
    raise TypeError(v)


def toml_document(doc):
    """TOML text of {name: value}: non-table values first, at the top level, then [tables]."""
    top = [f"{toml_key(k)} = {toml_value(v)}" for k, v in doc.items() if not isinstance(v, dict)]
    body = []
    for k, v in doc.items():
        if isinstance(v, dict):
            body.append(f"[{toml_key(k)}]")
            body += [f"{toml_key(kk)} = {toml_value(vv)}" for kk, vv in v.items()]
    return "\n".join(top + body) + "\n"


# ---- strategies: valid documents ----------------------------------------------------------------

_TEXT = st.characters(exclude_categories=("Cs",))  # any character a UTF-8 file can hold
_SAFE_TEXT = st.characters(exclude_categories=("Cs", "Cc"))

#: Everyday cosmologies: whatever subset is given, the model is valid (the combination
#: rules -- omega_b <= omega_m, omega_de >= -20, only one of sigma_8 and a_s -- hold).
_TYPICAL = {"h": (0.5, 0.9), "omega_m": (0.1, 0.6), "omega_b": (0.0, 0.05), "omega_k": (-0.1, 0.1),
            "w0": (-1.5, -0.5), "wa": (-0.5, 0.5), "t_cmb": (0.0, 3.0), "n_eff": (0.0, 4.0),
            "n_s": (0.8, 1.1), "sigma_8": (0.5, 1.0), "a_s": (1e-9, 3e-9), "alpha_s": (-0.05, 0.05)}


@functools.lru_cache(maxsize=None)  # built once: building strategies is what costs
def valid_value(section, key):
    spec = SCHEMA[section][key]
    if section == "cosmology":
        return st.floats(*_TYPICAL[key])
    if (section, key) == ("snapshots", "a_begin"):
        return st.floats(1e-8, 0.99)          # before any a_end generated below and a = 1
    if (section, key) == ("snapshots", "a_end"):
        return st.floats(1.001, 100.0)        # after a_begin and after 1/(1 + z) for any z >= 0
    kind = spec.kind
    if kind == "float":
        return st.floats(spec.lo, spec.hi)
    if kind == "float_or_auto":
        return st.one_of(st.just("auto"), st.floats(spec.lo, spec.hi))
    if kind == "int":
        lo, hi = int(spec.lo), int(spec.hi)
        if spec.even:
            return st.integers((lo + 1) // 2, hi // 2).map(lambda i: 2 * i)
        return st.integers(lo, hi)
    if kind == "bool":
        return st.booleans()
    if kind == "choice":
        return st.sampled_from(spec.choices)
    if kind in ("str", "path"):
        return st.text(_SAFE_TEXT, min_size=1, max_size=20)
    if kind == "int_pair":
        return st.lists(st.integers(int(spec.lo), int(spec.hi)), min_size=2, max_size=2,
                        unique=True)
    if kind == "float_list":
        return st.lists(st.floats(spec.lo, spec.hi), max_size=5)
    raise AssertionError(kind)


_SECTIONS = st.lists(st.sampled_from(list(SCHEMA)), unique=True, max_size=4)
_KEYS = {section: st.lists(st.sampled_from(list(keys)), unique=True, max_size=3)
         for section, keys in SCHEMA.items()}


@st.composite
def valid_documents(draw):
    """A consistent document: some sections, some keys each, valid values."""
    doc = {}
    for section in draw(_SECTIONS):
        keys = draw(_KEYS[section])
        if section == "cosmology" and "sigma_8" in keys and "a_s" in keys:
            keys.remove("a_s")
        doc[section] = {k: draw(valid_value(section, k)) for k in keys}
    return doc


# ---- strategies: faults -------------------------------------------------------------------------

_DATES = st.sampled_from([Raw("1979-05-27T07:32:00Z"), Raw("1979-05-27"), Raw("07:32:00")])
_HUGE_STRING = st.integers(10_000, 300_000).map(lambda n: "x" * n)
_HUGE_INT = st.integers(20, 400).map(lambda d: int("9" * d))


def _not_a_number(allow_auto=False):
    """Values that are not numbers: strings, booleans, arrays, tables, dates, huge strings."""
    strings = st.text(_TEXT, max_size=12)
    if allow_auto:
        strings = strings.filter(lambda s: s != "auto")
    return st.one_of(strings, st.booleans(), st.lists(st.floats(0, 1), min_size=0, max_size=3),
                     st.dictionaries(st.sampled_from(["a", "value", "lo"]), st.floats(0, 1), max_size=2),
                     _DATES, _HUGE_STRING)


def _outside(spec):
    """Finite numbers just or far outside [lo, hi], NaN, infinities, huge integers."""
    lo, hi = spec.lo, spec.hi
    below = [lo - max(abs(lo), 1.0) * 1e-6, lo - 1.0, -1e300, -abs(hi) - 1.0]
    above = [hi + max(abs(hi), 1.0) * 1e-6, hi + 1.0, 1e300, 2.0 * hi + 10.0]
    cands = [x for x in below if x < lo] + [x for x in above if x > hi]
    out = [st.sampled_from(cands), st.sampled_from([math.nan, math.inf, -math.inf]), _HUGE_INT,
           _HUGE_INT.map(lambda i: -i)]
    if spec.kind == "int":
        out.append(st.integers(int(hi) + 1, int(hi) * 4 + 10))
        out.append(st.integers(-1000, int(lo) - 1))
    return st.one_of(out)


@functools.lru_cache(maxsize=None)
def bad_value(section, key):
    """(value, kind of fault): a value the schema must refuse for [section] key."""
    spec = SCHEMA[section][key]
    kind = spec.kind
    tag = lambda name: (lambda v: (v, name))  # noqa: E731
    if kind in ("float", "int", "float_or_auto"):
        faults = [_not_a_number(allow_auto=kind == "float_or_auto").map(tag("type")),
                  _outside(spec).map(tag("range"))]
        if kind == "int":
            faults.append(st.floats(float(spec.lo), min(float(spec.hi), 1e15))
                          .filter(lambda x: not x.is_integer())
                          .map(tag("not integer")))
            if spec.even:
                faults.append(st.integers(int(spec.lo) // 2, int(spec.hi) // 2 - 1)
                              .map(lambda i: 2 * i + 1).map(tag("odd")))
        return st.one_of(faults)
    if kind == "bool":
        return st.one_of(st.integers(), st.floats(), st.sampled_from(["true", "yes", "1", "False"]),
                         st.lists(st.booleans(), max_size=2), _HUGE_STRING).map(tag("type"))
    if kind == "choice":
        misspelt = st.sampled_from(spec.choices).flatmap(_misspell).filter(lambda s: s not in spec.choices)
        return st.one_of(misspelt.map(tag("choice")),
                         st.text(_TEXT, max_size=15).filter(lambda s: s not in spec.choices).map(tag("choice")),
                         st.one_of(st.integers(), st.floats(), st.booleans(), st.lists(st.text(max_size=3),
                                   max_size=2), _DATES).map(tag("type")),
                         _HUGE_STRING.map(tag("choice")))
    if kind in ("str", "path"):
        return st.one_of(st.just("").map(tag("empty")),
                         st.one_of(st.integers(), st.floats(), st.booleans(),
                                   st.lists(st.text(max_size=3), max_size=2), _DATES).map(tag("type")))
    if kind == "int_pair":
        lo, hi = int(spec.lo), int(spec.hi)
        return st.one_of(
            st.lists(st.integers(lo, hi), max_size=5).filter(lambda v: len(v) != 2).map(tag("length")),
            st.integers(lo, hi).map(lambda i: [i, i]).map(tag("equal")),
            st.tuples(st.integers(lo, hi), st.integers(hi + 1, 10**6)).map(list).map(tag("range")),
            st.tuples(st.integers(-10**6, -1), st.integers(lo, hi)).map(list).map(tag("range")),
            st.tuples(st.integers(lo, hi), st.one_of(st.floats(), st.text(max_size=2), st.booleans()))
            .map(list).map(tag("type")),
            st.one_of(st.integers(), st.text(max_size=5), st.booleans()).map(tag("type")))
    if kind == "float_list":
        bad_entry = st.one_of(_outside(spec), st.text(max_size=3), st.booleans(), st.lists(st.floats(0, 1),
                                                                                            max_size=2))
        return st.one_of(
            st.tuples(st.lists(st.floats(spec.lo, spec.hi), max_size=3), bad_entry,
                      st.lists(st.floats(spec.lo, spec.hi), max_size=3))
            .map(lambda t: t[0] + [t[1]] + t[2]).map(tag("entry")),
            st.one_of(st.floats(), st.integers(), st.text(max_size=4), st.booleans(), _DATES).map(tag("type")))
    raise AssertionError(kind)


@functools.lru_cache(maxsize=None)
def _misspell(name):
    """One edit: drop, double or swap a character, change case, or add a letter."""
    ops = [st.integers(0, len(name) - 1).map(lambda i: name[:i] + name[i + 1:]),
           st.integers(0, len(name) - 1).map(lambda i: name[:i] + name[i] + name[i:]),
           st.just(name.upper()), st.just(name.replace("_", "")), st.just(name.replace("_", "-")),
           st.sampled_from("abcxyz_").map(lambda c: name + c)]
    if len(name) > 1:
        ops.append(st.integers(0, len(name) - 2).map(
            lambda i: name[:i] + name[i + 1] + name[i] + name[i + 2:]))
    return st.one_of(ops)


def _shown(before, name, after):
    """How a name must appear in a one-line message: as it is, or quoted and (if long) cut."""
    if name.isprintable() and len(name) <= 80:
        return before + name + after
    text = repr(name)
    return before + text + after if len(text) <= 80 else before + text[:60]


def _number_text(v):
    return repr(v)[:60]


@st.composite
def faulty_documents(draw):
    """(document, expectation): a valid document with exactly one fault planted in it.

    The expectation lists strings the message must contain.
    """
    doc = draw(valid_documents())
    fault = draw(st.sampled_from(["value", "value", "value", "unknown key", "unknown section",
                                  "not a table", "nested table", "combination"]))
    must = [SOURCE]
    if fault == "value":
        section = draw(st.sampled_from(list(SCHEMA)))
        key = draw(st.sampled_from(list(SCHEMA[section])))
        value, why = draw(bad_value(section, key))
        doc.setdefault(section, {})[key] = value
        must.append(f"[{section}] {key}")
        spec = SCHEMA[section][key]
        if (spec.kind in ("float", "int", "float_or_auto")
                or (spec.kind == "int_pair" and why in ("range", "equal"))
                or (spec.kind == "float_list" and why == "entry")):
            must.append(f"[{spec.lo:g}, {spec.hi:g}]")  # the allowed range
        if why in ("range", "not integer", "odd") and spec.kind != "float_list":
            must.append(_number_text(value))        # the value received
        if why == "choice":
            must.append(repr(spec.choices[0]))      # the choices are listed
        return doc, must, f"{fault}/{why}"
    if fault == "unknown key":
        section = draw(st.sampled_from(list(SCHEMA)))
        valid = SCHEMA[section]
        name = draw(st.one_of(st.sampled_from(list(valid)).flatmap(_misspell),
                              st.text(_TEXT, max_size=30), _HUGE_STRING))
        assume(name not in valid)
        doc.setdefault(section, {})[name] = draw(st.one_of(st.floats(0, 1), st.text(max_size=4)))
        must += [_shown("unknown key '", name, "'"), f"[{section}]"]
        return doc, must, fault
    if fault == "unknown section":
        name = draw(st.one_of(st.sampled_from(list(SCHEMA)).flatmap(_misspell), st.text(_TEXT, max_size=30)))
        assume(name not in SCHEMA)
        doc[name] = draw(st.one_of(st.dictionaries(st.sampled_from(["h", "size", "x"]), st.floats(0, 1),
                                                   max_size=2),
                                   st.floats(0, 1), st.text(max_size=3)))
        must.append(_shown("unknown section [", name, "]"))
        return doc, must, fault
    if fault == "not a table":
        section = draw(st.sampled_from(list(SCHEMA)))
        doc.pop(section, None)
        doc = {section: draw(st.one_of(st.floats(), st.text(max_size=5), st.booleans(),
                                       st.lists(st.dictionaries(st.sampled_from(["h", "size"]),
                                                                st.floats(0, 1), max_size=1),
                                                min_size=1, max_size=2))), **doc}
        must.append(f"'{section}'")
        must.append("must be a section")
        return doc, must, fault
    if fault == "nested table":
        section = draw(st.sampled_from(list(SCHEMA)))
        key = draw(st.sampled_from(list(SCHEMA[section])))
        doc.setdefault(section, {})[key] = {"value": 1.0, "inner": {"deeper": [1, 2]}}
        must.append(f"[{section}] {key}")
        return doc, must, fault
    # combinations of valid values that contradict each other (issue 8 item 1)
    combo = draw(st.sampled_from(["sigma_8 and a_s", "omega_b > omega_m", "omega_de < -20",
                                  "a_end <= a_begin", "a_end <= start", "odd grid", "tiny grid"]))
    cosmo = doc.setdefault("cosmology", {})
    if combo == "sigma_8 and a_s":
        cosmo["sigma_8"] = draw(st.floats(*_TYPICAL["sigma_8"]))
        cosmo["a_s"] = draw(st.floats(*_TYPICAL["a_s"]))
        must += ["sigma_8", "a_s"]
    elif combo == "omega_b > omega_m":
        cosmo["omega_m"] = om = draw(st.floats(0.01, 0.5))
        cosmo["omega_b"] = draw(st.floats(om, 1.0, exclude_min=True))
        must += ["omega_b", "omega_m"]
    elif combo == "omega_de < -20":
        # omega_de = 1 - omega_m - omega_r - omega_k < -20 once omega_m + omega_k > 21
        cosmo["omega_m"] = draw(st.floats(11.0, 20.0))
        cosmo["omega_k"] = draw(st.floats(11.0, 20.0))
        cosmo.pop("omega_b", None)
        must += ["omega_de"]
    elif combo == "a_end <= a_begin":
        snaps = doc.setdefault("snapshots", {})
        snaps["a_begin"] = a0 = draw(st.floats(0.01, 100.0))
        snaps["a_end"] = draw(st.floats(1e-8, a0))
        must += ["[snapshots] a_end", "a_begin", _number_text(snaps["a_end"])]
    elif combo == "a_end <= start":
        z = draw(st.floats(0.0, 1e4))
        doc.setdefault("start", {})["redshift"] = z
        snaps = doc.setdefault("snapshots", {})
        snaps.pop("a_begin", None)
        snaps["a_end"] = draw(st.floats(1e-8, 1.0 / (1.0 + z)))
        must += ["[snapshots] a_end", "[start] redshift"]
    elif combo == "odd grid":
        n = draw(st.integers(2, 8191).map(lambda i: 2 * i + 1))
        doc.setdefault("box", {})["particles_per_side"] = n
        must += ["[box] particles_per_side", str(n), "even"]
    else:  # fewer than 4 particles per side: the box would be under 4 particle spacings
        n = draw(st.integers(-4, 3))
        doc.setdefault("box", {})["particles_per_side"] = n
        must += ["[box] particles_per_side", "[4, 16384]"]
    return doc, must, f"combination/{combo}"


def _check_message(msg, must):
    assert "\n" not in msg and "\r" not in msg, msg[:300]
    assert len(msg) < MAX_MESSAGE, f"message of {len(msg)} characters: {msg[:300]}"
    for piece in must:
        assert piece in msg, f"{piece!r} not in {msg!r}"[:600]


# ---- loader properties --------------------------------------------------------------------------

FAULT_KINDS = collections.Counter()


@_examples(N_EXAMPLES["one fault"])
@hgiven(faulty_documents())
def _prop_one_fault_is_refused_and_named(case):
    RUNS["one fault"] += 1
    doc, must, kind = case
    FAULT_KINDS[kind.split("/")[0]] += 1
    text = toml_document(doc)
    with pytest.raises(InputError) as info:
        parameters.loads(text, source=SOURCE)
    _check_message(str(info.value), must)


def test_one_planted_fault_is_refused_with_a_message_naming_it():
    _run_counted("one fault", _prop_one_fault_is_refused_and_named, N_EXAMPLES["one fault"])
    # every family of faults was planted many times
    for kind in ("value", "unknown key", "unknown section", "not a table", "nested table", "combination"):
        assert FAULT_KINDS[kind] >= 30, FAULT_KINDS


@functools.lru_cache(maxsize=None)
def _any_name(section=None):
    """Section names (section=None) or key names of ``section``: mostly valid, some misspelt or random."""
    valid = list(SCHEMA) if section is None else list(SCHEMA.get(section, SCHEMA["box"]))
    right = st.sampled_from(valid)
    return st.one_of(right, right, right, right.flatmap(_misspell), st.text(_TEXT, max_size=10))


@functools.lru_cache(maxsize=None)
def _value_for(section, key):
    """Mostly a valid value for a known key, sometimes anything at all."""
    if section in SCHEMA and key in SCHEMA[section]:
        return st.one_of(valid_value(section, key), valid_value(section, key), valid_value(section, key),
                         _any_value)
    return _any_value


_any_scalar = st.one_of(st.floats(), st.integers(-10**30, 10**30), _HUGE_INT, st.booleans(),
                        st.text(_TEXT, max_size=10), _DATES, st.sampled_from(["auto", "table", "kdk"]))
_any_value = st.recursive(_any_scalar, lambda inner: st.one_of(
    st.lists(inner, max_size=3), st.dictionaries(st.text(_TEXT, max_size=4), inner, max_size=2)),
    max_leaves=4)


@st.composite
def any_documents(draw):
    """Anything: valid and invalid names, valid values for some key, or any value at all."""
    doc = {}
    for section in draw(_ANY_SECTIONS):
        if draw(_ONE_IN_TEN):
            doc[section] = draw(_any_value)
            continue
        keys = draw(_any_keys(section))
        doc[section] = {k: draw(_value_for(section, k)) for k in keys}
    return doc


_ANY_SECTIONS = st.lists(_any_name(), max_size=3, unique=True)
_ONE_IN_TEN = st.integers(0, 9).map(lambda i: i == 0)


@functools.lru_cache(maxsize=None)
def _any_keys(section):
    return st.lists(_any_name(section), max_size=3, unique=True)


def _check_loaded(p):
    """A document that loads holds only schema values, and its stored form reproduces it."""
    for section, keys in p.given.items():
        assert section in SCHEMA
        for key, value in keys.items():
            spec = SCHEMA[section][key]
            if value is None:
                assert spec.nullable
            elif spec.kind in ("float", "int") or (spec.kind == "float_or_auto" and value != "auto"):
                assert type(value) is (int if spec.kind == "int" else float)
                assert math.isfinite(value) and spec.lo <= value <= spec.hi
                assert not (spec.even and value % 2)
            elif spec.kind == "bool":
                assert type(value) is bool
            elif spec.kind == "choice":
                assert value in spec.choices
            elif spec.kind in ("str", "path"):
                assert isinstance(value, str) and value
            elif spec.kind == "int_pair":
                assert len(value) == 2 and value[0] != value[1]
                assert all(type(v) is int and spec.lo <= v <= spec.hi for v in value)
            elif spec.kind == "float_list":
                assert all(type(v) is float and math.isfinite(v) and spec.lo <= v <= spec.hi for v in value)
    c = p.cosmology
    assert 0.0 <= c.omega_b <= c.omega_m and (c.sigma_8 is None or c.a_s is None)
    # What outputs store (``parameters`` attribute) reads back to the same run: a fixed point.
    stored = p.to_toml()
    again = parameters.loads(stored, source="stored")
    assert again.cosmology == c
    assert again.to_toml() == stored
    for section, keys in p.given.items():
        for key, value in keys.items():
            if section != "cosmology" and SCHEMA[section][key].kind != "path" and value is not None:
                assert again.get(section, key) == value, (section, key)


@_examples(N_EXAMPLES["any document"])
@hgiven(any_documents())
def _prop_any_document_loads_or_input_error(doc):
    RUNS["any document"] += 1
    text = toml_document(doc)
    try:
        p = parameters.loads(text, source=SOURCE)
    except InputError as exc:
        RUNS["any document refused"] += 1
        msg = str(exc)
        assert SOURCE in msg and "\n" not in msg and len(msg) < MAX_MESSAGE, msg[:300]
        return
    RUNS["any document loaded"] += 1
    _check_loaded(p)


def test_any_generated_document_loads_or_raises_input_error():
    _run_counted("any document", _prop_any_document_loads_or_input_error, N_EXAMPLES["any document"])
    # both outcomes were exercised (not all trivially refused, not all accepted)
    n = RUNS["any document"]
    assert RUNS["any document loaded"] >= 0.02 * n and RUNS["any document refused"] >= 0.3 * n, RUNS


_toml_junk = st.one_of(
    st.text(_TEXT, max_size=200),                                                  # not TOML
    valid_documents().map(toml_document).flatmap(                                  # cut short
        lambda t: st.integers(0, len(t)).map(lambda i: t[:i])),
    valid_documents().map(toml_document).map(lambda t: t + t),                     # duplicates
    st.integers(1, 3000).map(lambda d: "[cosmology]\nh = " + "[" * d + "]" * d),   # deep arrays
    st.integers(1, 3000).map(lambda d: "[cosmology]\nh = " + "{a = " * d + "1" + "}" * d),  # tables
    st.integers(1, 200).map(lambda d: "[" + ".".join(["cosmology"] * d) + "]\nh = 1\n"),  # dotted
)


@_examples(N_EXAMPLES["raw text"])
@hgiven(_toml_junk)
def _prop_text_that_may_not_be_toml(text):
    RUNS["raw text"] += 1
    try:
        p = parameters.loads(text, source=SOURCE)
    except InputError as exc:
        msg = str(exc)
        assert SOURCE in msg and "\n" not in msg and len(msg) < MAX_MESSAGE, msg[:300]
        return
    _check_loaded(p)


def test_text_that_is_not_toml_or_nested_too_deeply_raises_input_error():
    _run_counted("raw text", _prop_text_that_may_not_be_toml, N_EXAMPLES["raw text"])


_SECTION_KEY = st.sampled_from([(s, k) for s in SCHEMA for k in SCHEMA[s]])
_RHS = st.one_of(_any_value.map(toml_value), st.text(_TEXT, max_size=20))
_SEP = st.sampled_from(["=", " = ", "= "])
_FORM = st.integers(0, 2)


@st.composite
def planted_overrides(draw):
    """(override text, pieces the message must hold): a bad value for a real key."""
    section, key = draw(_SECTION_KEY)
    value, _ = draw(bad_value(section, key))
    return f"{section}.{key}={toml_value(value)}", [f"[{section}] {key}"]


@st.composite
def free_overrides(draw):
    """(override text, None): names and values of any kind, well- or ill-formed."""
    section = draw(_any_name())
    key = draw(_any_name(section))
    rhs, sep = draw(_RHS), draw(_SEP)
    return [f"{section}.{key}{sep}{rhs}", f"{section}{sep}{rhs}", rhs][draw(_FORM)], None


def overrides():
    return st.one_of(planted_overrides(), free_overrides())


@_examples(N_EXAMPLES["overrides"])
@hgiven(st.lists(overrides(), min_size=1, max_size=3), valid_documents())
def _prop_overrides(ovs, doc):
    RUNS["overrides"] += 1
    ovs = sorted(ovs, key=lambda o: o[1] is not None)  # a later override wins: planted faults last
    texts = [t for t, _ in ovs]
    planted = [m for _, m in ovs if m is not None]
    try:
        p = parameters.loads(toml_document(doc), texts, source=SOURCE)
    except InputError as exc:
        msg = str(exc)
        assert "\n" not in msg and len(msg) < MAX_MESSAGE, msg[:300]
        return
    assert not planted, f"a planted bad override {planted} was accepted"
    _check_loaded(p)


def test_overrides_give_parameters_or_input_error():
    _run_counted("overrides", _prop_overrides, N_EXAMPLES["overrides"])


# ---- the command line ---------------------------------------------------------------------------

#: Commands that read a parameter file, with the arguments naming their outputs.
COMMANDS = {
    "ics": lambda out: ["--out", str(out / "ics.h5"), "--quiet"],
    "background": lambda out: ["--out", str(out / "bg.csv")],
    "spectrum": lambda out: ["--out", str(out / "pk.h5"), "--plot", str(out / "pk.png")],
    "schedule": lambda out: ["--out-dir", str(out / "schedule")],
    "advise-start": lambda out: ["--out", str(out / "advice.csv")],
}


def run_cli(argv):
    """In-process ``icgen``: (exit status, stdout, stderr)."""
    err, out = io.StringIO(), io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(out):
        code = main(argv)
    return code, out.getvalue(), err.getvalue()


def _check_cli_refusal(code, stdout, stderr, command, must, out_dir):
    assert code == 2, (code, stderr[-500:])
    lines = stderr.splitlines()
    assert len(lines) == 1, stderr[:1000]
    assert lines[0].startswith(f"icgen {command}: error: "), lines[0][:200]
    assert "Traceback" not in stderr and stdout == ""
    for piece in must:
        assert piece in lines[0], f"{piece!r} not in {lines[0]!r}"[:600]
    assert os.listdir(out_dir) == [], os.listdir(out_dir)   # no output, no temporary, no directory


@_examples(N_EXAMPLES["cli file"])
@hgiven(faulty_documents(), st.sampled_from(sorted(COMMANDS)))
def _prop_cli_bad_file(case, command):
    RUNS["cli file"] += 1
    doc, must, _ = case
    with tempfile.TemporaryDirectory() as d:
        params = Path(d) / "params.toml"
        params.write_text(toml_document(doc), encoding="utf-8")
        out_dir = Path(d) / "out"
        out_dir.mkdir()
        code, stdout, stderr = run_cli([command, str(params)] + COMMANDS[command](out_dir))
        _check_cli_refusal(code, stdout, stderr, command,
                           [m.replace(SOURCE, str(params)) for m in must], out_dir)


def test_cli_bad_parameter_file_exit_2_one_line_no_output():
    _run_counted("cli file", _prop_cli_bad_file, N_EXAMPLES["cli file"])


@_examples(N_EXAMPLES["cli override"])
@hgiven(st.lists(planted_overrides(), min_size=1, max_size=2),
        st.sampled_from(sorted(COMMANDS)))
def _prop_cli_bad_override(ovs, command):
    RUNS["cli override"] += 1
    with tempfile.TemporaryDirectory() as d:
        out_dir = Path(d)
        argv = [command] + COMMANDS[command](out_dir) + [f"--set={t}" for t, _ in ovs]
        code, stdout, stderr = run_cli(argv)
        # the first planted fault is the one reported (overrides are merged, then checked in order)
        _check_cli_refusal(code, stdout, stderr, command, [], out_dir)
        assert any(m[0] in stderr for _, m in ovs), stderr


def test_cli_bad_override_exit_2_one_line_no_output():
    _run_counted("cli override", _prop_cli_bad_override, N_EXAMPLES["cli override"])


# ---- the specific cases issue 8 lists ------------------------------------------------------------

def _message(text, overrides=()):
    with pytest.raises(InputError) as info:
        parameters.loads(text, overrides, source=SOURCE)
    msg = str(info.value)
    assert SOURCE in msg or overrides, msg
    return msg


@pytest.mark.parametrize("text, pieces", [
    # every key type- and range-checked: key, value, allowed range, file
    ("[cosmology]\nh = -0.7\n", ["[cosmology] h", "-0.7", "[0.05, 2]"]),
    ("[cosmology]\nomega_m = nan\n", ["[cosmology] omega_m", "nan", "[0.0001, 20]"]),
    ("[cosmology]\nsigma_8 = inf\n", ["[cosmology] sigma_8", "inf", "[0.0001, 5]"]),
    ("[box]\nsize = -inf\nparticles_per_side = 64\n", ["[box] size", "-inf", "[0.001, 1e+06]"]),
    ('[box]\nsize = "100"\n', ["[box] size", "expected a number", "'100'"]),
    ("[box]\nsize = [100.0]\n", ["[box] size", "expected a number", "[100.0]"]),
    ("[box]\nsize = {value = 100.0}\n", ["[box] size", "expected a number"]),
    ("[box]\n[box.size]\nvalue = 1\n", ["[box] size", "expected a number"]),
    ("[box]\nparticles_per_side = 64.5\n", ["[box] particles_per_side", "expected an integer", "64.5"]),
    ("[box]\nparticles_per_side = " + "9" * 400 + "\n", ["[box] particles_per_side", "[4, 16384]",
                                                          "characters"]),
    ("[cosmology]\nh = " + "1" * 400 + "\n", ["[cosmology] h", "[0.05, 2]"]),
    ("[snapshots]\nextra_redshifts = [1.0, " + "9" * 400 + "]\n", ["[snapshots] extra_redshifts"]),
    ("[phases]\nseed = -1\n", ["[phases] seed", "-1"]),
    ("[phases]\nseed = 1979-05-27\n", ["[phases] seed", "expected a number"]),
    ("[phases]\npaired = 1\n", ["[phases] paired", "expected true or false"]),
    ('[output]\nprecision = "float16"\n', ["[output] precision", "'float16'", "'float32'"]),
    ('[spectrum]\ntable = ""\n', ["[spectrum] table", "non-empty"]),
    ("[spectrum]\ncolumns = [1, 1]\n", ["[spectrum] columns", "two different integers"]),
    ("[spectrum]\ncolumns = [0, true]\n", ["[spectrum] columns", "two integers"]),
    # tiny grids: fewer than 4 particles per side is a box under 4 particle spacings
    ("[box]\nsize = 100.0\nparticles_per_side = 2\n", ["[box] particles_per_side", "= 2", "[4, 16384]"]),
    ("[box]\nsize = 100.0\nparticles_per_side = 0\n", ["[box] particles_per_side", "= 0", "[4, 16384]"]),
    ("[box]\nsize = 100.0\nparticles_per_side = 15\n", ["[box] particles_per_side", "15", "even"]),
    ("[box]\nsize = 1e-4\nparticles_per_side = 64\n", ["[box] size", "0.0001", "[0.001, 1e+06]"]),
    # inconsistent combinations
    ("[cosmology]\nsigma_8 = 0.8\na_s = 2.1e-9\n", ["sigma_8 = 0.8", "a_s = 2.1e-09", "remove the other"]),
    ("[snapshots]\na_begin = 0.5\na_end = 0.1\n", ["[snapshots] a_end = 0.1", "a_begin = 0.5",
                                                   "a_end > a_begin"]),
    ("[snapshots]\na_begin = 0.5\na_end = 0.5\n", ["[snapshots] a_end = 0.5", "a_begin = 0.5"]),
    ("[snapshots]\na_begin = 2.0\n", ["[snapshots] a_end = 1.0", "a_begin = 2.0"]),  # default a_end
    ("[start]\nredshift = 49.0\n[snapshots]\na_end = 0.01\n", ["[snapshots] a_end = 0.01",
                                                                "[start] redshift = 49"]),
    ("[cosmology]\nomega_m = 0.3\nomega_b = 0.5\n", ["omega_b = 0.5", "omega_m = 0.3"]),
    # unknown names suggest the nearest valid one
    ("[cosmology]\nsigma8 = 0.8\n", ["unknown key 'sigma8'", "[cosmology]", "did you mean 'sigma_8'?"]),
    ("[cosmology]\nOmega_m = 0.3\n", ["unknown key 'Omega_m'", "did you mean 'omega_m'?"]),
    ("[cosmology]\nomgea_b = 0.05\n", ["unknown key 'omgea_b'", "did you mean 'omega_b'?"]),
    ("[box]\nparticles = 64\n", ["unknown key 'particles'", "did you mean 'particles_per_side'?"]),
    ("[snapshot]\ncount = 3\n", ["unknown section [snapshot]", "did you mean 'snapshots'?"]),
    ("[spectra]\nsource = 'table'\n", ["unknown section [spectra]", "did you mean 'spectrum'?"]),
    ("[Cosmology]\nh = 0.7\n", ["unknown section [Cosmology]", "did you mean 'cosmology'?"]),
    ('[spectrum]\nsource = "eisenstein"\n', ["[spectrum] source", "did you mean 'eisenstein_hu'?"]),
    ('[steps]\nleapfrog = "KDK"\n', ["[steps] leapfrog", "did you mean 'kdk'?"]),
    ("h = 0.7\n", ["unknown section [h]"]),                  # a key outside any section
    ("cosmology = 0.7\n", ["'cosmology'", "must be a section"]),
    ("[[cosmology]]\nh = 0.7\n", ["'cosmology'", "must be a section"]),
    # names and values that would break the one-line message are quoted and cut
    ('[cosmology]\n"a\\nb" = 1\n', ["unknown key ''a\\nb''"]),
    ('["x\\ny"]\nh = 1\n', ["unknown section ['x\\ny']"]),
    ('[spectrum]\nsource = "' + "y" * 100_000 + '"\n', ["[spectrum] source", "(100000 characters)"]),
    ("[cosmology]\n" + "k" * 100_000 + " = 1\n", ["unknown key", "(100000 characters)"]),
    # not TOML at all, or nested beyond reason
    ("[cosmology\nh = 0.7\n", ["is not valid TOML"]),
    ("[cosmology]\nh = 0.7\nh = 0.8\n", ["is not valid TOML"]),
    ("\x00\x01binary", ["is not valid TOML"]),
    ("[cosmology]\nh = " + "[" * 5000 + "]" * 5000 + "\n", ["nested too deeply"]),
    ("[cosmology]\nh = " + "{a = " * 3000 + "1" + "}" * 3000 + "\n", ["nested too deeply"]),
])
def test_listed_cases_name_key_value_range_and_file(text, pieces):
    msg = _message(text)
    _check_message(msg, [SOURCE] + pieces)


@pytest.mark.parametrize("override, pieces", [
    ("cosmology.h=" + "9" * 400, ["[cosmology] h", "[0.05, 2]"]),
    ("cosmology.sigma8=0.8", ["unknown key 'sigma8'", "did you mean 'sigma_8'?"]),
    ("cosmo.h=0.7", ["unknown section [cosmo]", "did you mean 'cosmology'?"]),
    ("box.particles_per_side=3", ["[box] particles_per_side", "[4, 16384]"]),
    ("box.size=nan", ["[box] size", "nan"]),
    ("snapshots.a_end=" + "[" * 3000 + "]" * 3000, ["snapshots.a_end", "nested too deeply"]),
    ("cosmology.a_s=2e-9", ["sigma_8", "a_s"]),  # the file sets sigma_8 (below)
    ("spectrum.table=a\x00b", ["[spectrum] table", "NUL"]),
])
def test_listed_override_cases(override, pieces):
    msg = _message("[cosmology]\nsigma_8 = 0.8\n", [override])
    _check_message(msg, pieces)


def test_cli_listed_cases_and_debug_traceback(tmp_path, capsys):
    params = tmp_path / "run.toml"
    out = tmp_path / "out"
    out.mkdir()
    params.write_text("[cosmology]\nsigma_8 = 0.8\na_s = 2.1e-9\n[box]\nsize = 50.0\nparticles_per_side = 16\n")
    code, stdout, stderr = run_cli(["ics", str(params), "--out", str(out / "x.h5"), "--quiet"])
    _check_cli_refusal(code, stdout, stderr, "ics", [str(params), "sigma_8", "a_s"], out)
    # an unreadable and a non-UTF-8 parameter file: exit 2, one line, named
    code, stdout, stderr = run_cli(["ics", str(tmp_path / "missing.toml"), "--out", str(out / "x.h5")])
    _check_cli_refusal(code, stdout, stderr, "ics", ["missing.toml", "cannot read"], out)
    params.write_bytes(b"[cosmology]\nh = 0.7 # caf\xe9\n")
    code, stdout, stderr = run_cli(["ics", str(params), "--out", str(out / "x.h5")])
    _check_cli_refusal(code, stdout, stderr, "ics", [str(params), "not UTF-8"], out)
    # a_end before a_begin through the command that builds the schedule
    params.write_text("[snapshots]\na_begin = 0.5\na_end = 0.1\n")
    code, stdout, stderr = run_cli(["schedule", str(params), "--out-dir", str(out / "s")])
    _check_cli_refusal(code, stdout, stderr, "schedule", ["[snapshots] a_end = 0.1", str(params)], out)
    # --debug shows the traceback instead (the error propagates)
    with pytest.raises(InputError):
        main(["schedule", str(params), "--out-dir", str(out / "s"), "--debug"])
    assert os.listdir(out) == []


def test_cli_table_path_problems_are_input_errors(tmp_path):
    """A [spectrum] table that is missing, a directory, or named with a NUL: exit 2, one line."""
    out = tmp_path / "out"
    out.mkdir()
    for table, piece in (("missing.txt", "missing.txt"), (".", "cannot read table")):
        code, stdout, stderr = run_cli(["spectrum", "--out", str(out / "pk.csv"), "--set=spectrum.source=table",
                                        f"--set=spectrum.table={table}"])
        _check_cli_refusal(code, stdout, stderr, "spectrum", [piece], out)
    code, stdout, stderr = run_cli(["ics", "--out", str(out / "x.h5"), "--set=spectrum.source=table",
                                    '--set=spectrum.table="a\\u0000b"'])
    _check_cli_refusal(code, stdout, stderr, "ics", ["[spectrum] table"], out)


def test_valid_generated_documents_round_trip_through_stored_text():
    """Sanity of the generators: valid documents load, and their stored text reproduces them."""
    @_examples(N_EXAMPLES["valid"])
    @hgiven(valid_documents())
    def prop(doc):
        RUNS["valid"] += 1
        _check_loaded(parameters.loads(toml_document(doc), source=SOURCE))

    _run_counted("valid", prop, N_EXAMPLES["valid"])


def test_bundled_example_and_required_keys():
    p = parameters.loads(default_params_text(), source="<bundled>")
    _check_loaded(p)
    # every REQUIRED key names itself, its meaning and the source when missing
    for section, keys in SCHEMA.items():
        for key, spec in keys.items():
            if spec.default is REQUIRED:
                with pytest.raises(InputError) as info:
                    parameters.loads("", source=SOURCE).get(section, key)
                _check_message(str(info.value), [f"[{section}] {key} is required", SOURCE])


# ---- heavier variants (pytest -m slow) ----------------------------------------------------------

def _more(name, strategy, body, n):
    """A property ``body`` run over ``n`` examples of ``strategy``, counted under ``name``."""
    @_examples(n)
    @hgiven(strategy)
    def prop(x):
        RUNS[name] += 1
        body(x)

    return prop


@pytest.mark.slow
def test_slow_many_more_faults_and_documents():
    for name, strategy, prop in (("slow one fault", faulty_documents(), _prop_one_fault_is_refused_and_named),
                                 ("slow any document", any_documents(), _prop_any_document_loads_or_input_error),
                                 ("slow raw text", _toml_junk, _prop_text_that_may_not_be_toml)):
        n = 10 * N_EXAMPLES[name[5:]]
        _run_counted(name, _more(name, strategy, prop.hypothesis.inner_test, n), n)


@pytest.mark.slow
def test_slow_many_more_cli_cases():
    n = 10 * N_EXAMPLES["cli file"]

    @_examples(n)
    @hgiven(faulty_documents(), st.sampled_from(sorted(COMMANDS)))
    def prop(case, command):
        RUNS["slow cli file"] += 1
        _prop_cli_bad_file.hypothesis.inner_test(case, command)

    _run_counted("slow cli file", prop, n)
