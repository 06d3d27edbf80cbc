"""Issue 8, tables: every unusable P(k) or T(k) table is a clear InputError naming file and line.

Properties (hypothesis):

* a valid generated table (any separators, comments, blank lines, extra columns, CRLF
  line ends) with exactly one fault planted in one row -- NaN or an infinity, a
  negative or zero k or P, k not increasing, a duplicated row, a field too many or too
  few, a field that is not a number, an empty field, bytes that are not UTF-8, a
  control or Unicode space character inside a number -- raises ``TableError`` (an
  ``InputError``) whose message names the file and exactly that row's line, as an
  editor counts lines;
* any bytes at all, and any text built from number-like tokens and separators, either
  read into a table that keeps its promises (k > 0 strictly increasing, finite positive
  values, the numbers the file holds) or raise ``InputError``; never another exception;
* extreme but finite magnitudes with k in 1/Mpc are either read or refused, never
  turned into infinities or zeros by the unit conversion.

Explicit cases: each fault of issue 8 item 2 with its exact line; an empty file; a huge
file (tens of MB, generated here); non-UTF-8 bytes; the command line (exit 2, one line,
no output file).

Reference: the table format documented in ``icgen.io_input`` (module notes) and issue 8.
The oracle ``_expected_rows`` below reads that format independently (a few lines,
written from the notes, not from the reader).
"""

import collections
import contextlib
import functools
import io
import os
import re
import time

import numpy as np
import pytest
from hypothesis import HealthCheck, settings
from hypothesis import given as hgiven
from hypothesis import strategies as st

from icgen.cli import main
from icgen.errors import InputError, TableError
from icgen.io_input import MIN_ROWS, read_spectrum_table

RUNS = collections.Counter()

#: Examples per property in the default run (the slow variants run ten times more).
N_EXAMPLES = {"one fault": 1200, "any bytes": 600, "token soup": 600, "extremes": 300, "cli table": 150}

FAST = dict(deadline=None, database=None, derandomize=True,  # a CI gate must not depend on luck
            suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large,
                                   HealthCheck.filter_too_much, HealthCheck.large_base_example])


def _examples(n):
    return settings(max_examples=n, **FAST)


def _run_counted(name, prop, at_least):
    before = RUNS[name]
    prop()
    tried = RUNS[name] - before
    print(f"[hypothesis] {name}: {tried} examples")
    assert tried >= at_least, f"{name}: only {tried} examples ran"


def _names_line(msg, line):
    """The message names ``line`` (as 'line N', not a longer number starting with N)."""
    return re.search(rf"\bline {line}\b", msg) is not None


# ---- an independent reader of the documented format (oracle for accepted files) -----------------

def _expected_rows(text, columns):
    """Rows of the wanted columns and their 1-based line numbers, from the module notes:
    lines end at CR LF, LF or CR; '#' starts a comment; a line with a comma is split at
    commas, others at whitespace; blank lines are skipped."""
    rows, lines = [], []
    for n, line in enumerate(re.split(r"\r\n|\n|\r", text), start=1):
        body = line.split("#")[0].strip()
        if body:
            fields = [f.strip() for f in body.split(",")] if "," in body else body.split()
            rows.append([float(fields[c]) for c in columns])
            lines.append(n)
    return rows, lines


def _check_table(tab, text, columns, k_unit="h/Mpc", h=None, quantity="power"):
    """A table that was read keeps every promise of the reader."""
    k, v = tab.k, tab.value
    assert len(k) >= MIN_ROWS and len(k) == len(v) == len(tab.line)
    assert np.all(np.isfinite(k)) and np.all(k > 0) and np.all(np.diff(k) > 0)
    assert np.all(np.isfinite(v)) and np.all(v > 0)
    assert not (k.flags.writeable or v.flags.writeable)
    rows, lines = _expected_rows(text, columns)
    assert tab.line.tolist() == lines
    raw = np.array(rows)
    if k_unit == "h/Mpc":
        np.testing.assert_array_equal(k, raw[:, 0])   # the numbers the file holds, exactly
        np.testing.assert_array_equal(v, raw[:, 1])
    else:  # k / h and P h^3 (module notes), the same floating-point operations: exactly equal
        np.testing.assert_array_equal(k, raw[:, 0] / h)
        np.testing.assert_array_equal(v, raw[:, 1] * h**3 if quantity == "power" else raw[:, 1])


# ---- generated tables ---------------------------------------------------------------------------

#: Characters that cannot be part of a number and are no separator, comment or line end.
_JUNK = st.characters(exclude_categories=("Cs", "Nd", "Zs", "Zl", "Zp"),
                      exclude_characters="0123456789.+-eE_,#\r\n\t\x0b\x0c\x1c\x1d\x1e\x1f\x85 "
                                         "naifNAIFtyTY")
#: Characters str.split() takes for whitespace (and old readers took for line ends).
_SPACES = st.sampled_from(["\x0b", "\x0c", "\x1c", "\x1d", "\x1e", "\x1f", "\x85", "\u2028", "\u2029",
                           "\u3000", "\u00a0", "\u2003"])
_NON_UTF8 = st.sampled_from([b"\xff", b"\xfe\xff", b"\xc3\x28", b"\xa0\xa1", b"\xed\xa0\x80",
                             b"\xf8\x88\x80\x80\x80", b"\xe2\x82", b"\x80", b"\xc0\xaf"])
_NOT_FINITE = st.sampled_from(["nan", "NaN", "-nan", "+nan", "inf", "-inf", "+inf", "Infinity",
                               "-Infinity", "INF", "1e999", "-1e999", "1e400"])
_NOT_POSITIVE = st.sampled_from(["0", "0.0", "-0", "-0.0", "0e0", "-1", "-1e-30", "-5e3", "-1e300"])


_SEPS = st.sampled_from([" ", "\t", "   ", ",", ", ", " , "])
_FMTS = st.sampled_from(["{:.10e}", "{!r}", "{:.12g}", "{:.10E}"])
_EOLS = st.sampled_from(["\n", "\r\n"])
_FILLERS = ["", "   ", "# comment", "\t# indented comment", "# caf\u00e9 \u2028 \x0c \x85 \x1c", "#"]


@st.composite
def tables(draw, min_rows=MIN_ROWS, max_rows=12):
    """A valid table: (lines without ends, data-row indices into lines, columns, separator, eol).

    The numbers and the comment lines come from a numpy Generator seeded by hypothesis
    (few draws per example keep thousands of examples fast).
    """
    n = draw(st.integers(min_rows, max_rows))
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    ncol = 2 + draw(st.integers(0, 2))
    k_col, p_col = draw(st.permutations(range(ncol)))[:2]
    sep, fmt, eol = draw(_SEPS), draw(_FMTS), draw(_EOLS)
    log_k = (rng.uniform(-5.0, 0.0) + np.cumsum(rng.uniform(0.01, 0.5, n))).tolist()
    log_p = rng.uniform(-3.0, 5.0, n).tolist()
    filler = rng.uniform(-1e3, 1e3, (n, ncol)).tolist()
    lines, rows = [], []
    if rng.random() < 0.5:
        lines.append("# k [h/Mpc]   P(k) [(Mpc/h)^3]  -- a header comment")
    for i in range(n):
        fields = [fmt.format(x) for x in filler[i]]
        fields[k_col] = fmt.format(10.0 ** log_k[i])
        fields[p_col] = fmt.format(10.0 ** log_p[i])
        line = sep.join(fields)
        if rng.random() < 0.2:
            line += "  # note \u00b5 \x0c \u2028 \x1c"   # no line end inside a comment
        if rng.random() < 0.2:
            lines.append(_FILLERS[rng.integers(len(_FILLERS))])
        rows.append(len(lines))
        lines.append(line)
    return lines, rows, (k_col, p_col), sep, eol


def _fields(line, sep):
    body = line.split("#")[0].strip()
    return [f.strip() for f in body.split(",")] if "," in sep else body.split()


def _join(fields, sep):
    return sep.join(fields)


FAULTS = ["not finite", "k not positive", "P not positive", "not increasing", "duplicate row",
          "field too many", "field too few", "not a number", "empty field", "not UTF-8",
          "space inside a number", "too few rows"]


@st.composite
def faulty_tables(draw):
    """(bytes, columns, line the message must name or None, words of which one must appear, kind)."""
    lines, rows, columns, sep, eol = draw(tables())
    kind = FAULTS[draw(st.integers(0, 2**32 - 1)) % len(FAULTS)]   # evenly, not first-biased
    i = draw(st.integers(0, len(rows) - 1))
    if kind == "not increasing" or kind == "duplicate row":
        i = max(i, 1) if kind == "not increasing" else i
    li = rows[i]
    fields = _fields(lines[li], sep)
    first_line = rows[0] + 1
    target_line = li + 1
    words = []
    if kind == "not finite":
        fields[draw(st.sampled_from(columns))] = draw(_NOT_FINITE)
        words = ["not a finite number"]
    elif kind == "k not positive":
        fields[columns[0]] = draw(_NOT_POSITIVE)
        words = ["must be positive"]
    elif kind == "P not positive":
        fields[columns[1]] = draw(_NOT_POSITIVE)
        words = ["negative", "zero"]
    elif kind == "not increasing":
        prev = float(_fields(lines[rows[i - 1]], sep)[columns[0]])
        fields[columns[0]] = repr(prev * draw(st.sampled_from([1.0, 0.999999, 0.5, 1e-3])))
        words = ["does not increase"]
    elif kind == "duplicate row":
        lines.insert(li + 1, lines[li])
        rows.insert(i + 1, li + 1)
        target_line = li + 2
        words = ["does not increase"]
    elif kind == "field too many":
        fields.insert(draw(st.integers(0, len(fields))), "1.0")
        words = ["columns", "column(s)"]
    elif kind == "field too few":
        del fields[draw(st.integers(0, len(fields) - 1))]
        words = ["columns", "column(s)"]
    elif kind == "not a number":
        c = draw(st.integers(0, len(fields) - 1))   # any column: every field must be a number
        junk = draw(st.text(_JUNK, min_size=1, max_size=6))
        f = fields[c]
        at = draw(st.integers(0, len(f)))
        fields[c] = f[:at] + junk + f[at:]
        words = ["is not a number"]
    elif kind == "empty field":
        if "," not in sep:
            sep = ","   # only comma-separated rows can have an empty field; make this row one
            lines[li] = _join(_fields(lines[li], " " if "," not in lines[li] else ","), ",")
            fields = _fields(lines[li], ",")
        fields[draw(st.integers(0, len(fields) - 1))] = ""
        words = ["empty field"]
    elif kind == "space inside a number":
        c = draw(st.sampled_from(columns))
        f = fields[c]
        at = draw(st.integers(1, len(f) - 1))
        fields[c] = f[:at] + draw(_SPACES) + f[at:]
        words = ["columns", "column(s)", "is not a number"]
    if kind not in ("duplicate row", "not UTF-8", "too few rows"):
        lines[li] = _join(fields, ", " if "," in sep else sep)
    if kind in ("field too many", "field too few", "space inside a number") and i == 0:
        # the first data row sets the column count: the error is at the next data row or at
        # this one (too few for the columns asked for), and names this line either way
        target_line = first_line
    data = eol.join(lines).encode("utf-8") + eol.encode()
    if kind == "not UTF-8":
        start = len(eol.join(lines[:li]).encode()) + (len(eol) if li else 0)
        pos = start + draw(st.integers(0, len(lines[li].encode())))
        data = data[:pos] + draw(_NON_UTF8) + data[pos:]
        words = ["not UTF-8"]
    if kind == "too few rows":
        keep = draw(st.integers(0, MIN_ROWS - 1))
        drop = set(rows[keep:])
        data = (eol.join(x for j, x in enumerate(lines) if j not in drop) + eol).encode()
        target_line = first_line if keep else None
        words = ["data row(s)"]
    return data, columns, target_line, words, kind


KINDS = collections.Counter()


def _check_refusal(exc, path, line, words):
    msg = str(exc)
    assert isinstance(exc, TableError) and isinstance(exc, InputError)
    assert msg.startswith(str(path)) or f"table {path}" in msg, msg[:300]
    assert "\n" not in msg and "\r" not in msg, msg[:300]
    if line is not None:
        assert _names_line(msg, line), f"line {line} not in: {msg}"
    assert any(w in msg for w in words), f"none of {words} in: {msg}"


def test_one_planted_fault_names_file_and_line(tmp_path):
    path = tmp_path / "pk table.txt"   # a space in the name, as users have

    @_examples(N_EXAMPLES["one fault"])
    @hgiven(faulty_tables())
    def prop(case):
        RUNS["one fault"] += 1
        data, columns, line, words, kind = case
        KINDS[kind] += 1
        path.write_bytes(data)
        with pytest.raises(InputError) as info:
            read_spectrum_table(path, columns)
        _check_refusal(info.value, path, line, words)

    _run_counted("one fault", prop, N_EXAMPLES["one fault"])
    assert min(KINDS.values()) >= 30 and len(KINDS) == len(FAULTS), KINDS


def _read_or_refuse(path, data, columns=(0, 1), k_unit="h/Mpc", h=None, quantity="power"):
    """Read ``data``; check the table or the refusal. Returns 'read' or 'refused'."""
    path.write_bytes(data)
    try:
        tab = read_spectrum_table(path, columns, quantity=quantity, k_unit=k_unit, h=h)
    except InputError as exc:
        msg = str(exc)
        assert str(path) in msg and "\n" not in msg, msg[:300]
        m = re.search(r"\bline (\d+)\b", msg)
        if m:  # a line named exists in the file
            n_lines = len(re.split(rb"\r\n|\n|\r", data))
            assert 1 <= int(m.group(1)) <= n_lines, (msg, n_lines)
        return "refused"
    _check_table(tab, data.decode("utf-8"), columns, k_unit, h, quantity)
    return "read"


_TOKENS = st.sampled_from(["1", "2.5", "0.3e-2", "10", "1e5", "-3", "0", "nan", "inf", "-inf", "1e999",
                           "x", "\x00", "k", "#", ",", ", ", " ", "\t", "\n", "\r\n", "\r", "\x0c", "\x85",
                           "\u2028", "\ufeff", "1_0", "\u0661", "0x10", "", "  # c\n"])
_COLUMNS = st.sampled_from([(0, 1), (1, 0), (0, 2), (2, 1), (0, 3)])
_UNIT = st.sampled_from([("h/Mpc", None), ("1/Mpc", 0.6766), ("1/Mpc", 0.05), ("1/Mpc", 2.0)])


def test_any_bytes_read_or_input_error(tmp_path):
    path = tmp_path / "garbage.txt"
    outcomes = collections.Counter()

    @_examples(N_EXAMPLES["any bytes"])
    @hgiven(st.one_of(st.binary(max_size=3000),
                      st.text(max_size=500).map(lambda t: t.encode("utf-8", "surrogatepass")),
                      st.binary(min_size=1, max_size=64).map(lambda b: b"1 2\n2 3\n3 4\n" + b + b"\n5 6\n")),
            _COLUMNS, st.sampled_from(["power", "transfer"]))
    def prop(data, columns, quantity):
        RUNS["any bytes"] += 1
        outcomes[_read_or_refuse(path, data, columns, quantity=quantity)] += 1

    _run_counted("any bytes", prop, N_EXAMPLES["any bytes"])
    assert outcomes["refused"] >= N_EXAMPLES["any bytes"] // 2, outcomes


def test_number_like_token_soup_read_or_input_error(tmp_path):
    path = tmp_path / "soup.csv"
    outcomes = collections.Counter()

    @_examples(N_EXAMPLES["token soup"])
    @hgiven(st.one_of(st.lists(_TOKENS, max_size=80).map("".join),
                      # rows of two increasing-ish numbers with a token thrown in somewhere
                      st.tuples(st.integers(4, 12), st.integers(0, 50), _TOKENS).map(
                          lambda t: "".join(f"{10.0 ** (j / 4):.6g} {j + 1}\n" for j in range(t[0]))[:t[1]]
                          + t[2] + "".join(f"{10.0 ** (j / 4):.6g} {j + 1}\n" for j in range(t[0]))[t[1]:])),
            _COLUMNS, _UNIT)
    def prop(text, columns, unit):
        RUNS["token soup"] += 1
        k_unit, h = unit
        outcomes[_read_or_refuse(path, text.encode("utf-8", "surrogatepass"), columns, k_unit, h)] += 1

    _run_counted("token soup", prop, N_EXAMPLES["token soup"])
    assert outcomes["read"] >= 20 and outcomes["refused"] >= 100, outcomes


def test_extreme_magnitudes_never_become_inf_or_zero(tmp_path):
    """Finite positive numbers near the ends of double precision, k in 1/Mpc or h/Mpc."""
    path = tmp_path / "extreme.txt"
    outcomes = collections.Counter()
    tiny_or_huge = st.one_of(st.floats(5e-324, 1e-300), st.floats(1e300, 1.7976931348623157e308),
                             st.floats(1e-10, 1e10))

    @_examples(N_EXAMPLES["extremes"])
    @hgiven(st.lists(tiny_or_huge, min_size=4, max_size=8, unique=True).map(sorted),
            st.lists(tiny_or_huge, min_size=8, max_size=8), _UNIT, st.sampled_from(["power", "transfer"]))
    def prop(k, p, unit, quantity):
        RUNS["extremes"] += 1
        k_unit, h = unit
        text = "".join(f"{a!r} {b!r}\n" for a, b in zip(k, p))
        outcomes[_read_or_refuse(path, text.encode(), (0, 1), k_unit, h, quantity)] += 1

    _run_counted("extremes", prop, N_EXAMPLES["extremes"])
    assert outcomes["read"] >= 10 and outcomes["refused"] >= 10, outcomes


# ---- explicit cases (issue 8 item 2) ------------------------------------------------------------

GOOD = ["1e-3 1e3", "1e-2 5e3", "1e-1 2e3", "1e0 1e2", "1e1 1e0"]


def _file(tmp_path, lines, name="pk.txt", eol="\n"):
    p = tmp_path / name
    p.write_bytes(lines if isinstance(lines, bytes) else (eol.join(lines) + eol).encode("utf-8"))
    return p


def _refusal(path, columns=(0, 1), **kw):
    with pytest.raises(InputError) as info:
        read_spectrum_table(path, columns, **kw)
    assert isinstance(info.value, TableError)
    msg = str(info.value)
    assert str(path) in msg and "\n" not in msg
    return msg


@pytest.mark.parametrize("lines, line, words", [
    (["# k P", GOOD[0], "nan 5e3", *GOOD[2:]], 3, ["k = nan", "not a finite number"]),
    ([GOOD[0], GOOD[1], "1e-1 NaN", *GOOD[3:]], 3, ["P(k) = nan", "not a finite number"]),
    ([GOOD[0], GOOD[1], "1e-1 inf", *GOOD[3:]], 3, ["P(k) = inf", "not a finite number"]),
    ([GOOD[0], GOOD[1], "1e-1 -Infinity", *GOOD[3:]], 3, ["P(k) = -inf"]),
    ([GOOD[0], "1e999 5e3", *GOOD[2:]], 2, ["k = inf"]),                     # overflows to inf
    ([GOOD[0], GOOD[1], "1e-1 -2e3", *GOOD[3:]], 3, ["P(k) = -2000.0 is negative"]),
    ([GOOD[0], GOOD[1], "1e-1 0", *GOOD[3:]], 3, ["P(k) = 0.0 is zero"]),
    (["0 1e3", *GOOD[1:]], 1, ["k = 0.0 must be positive"]),
    (["-1e-3 1e3", *GOOD[1:]], 1, ["k = -0.001 must be positive"]),
    ([GOOD[0], GOOD[2], GOOD[1], *GOOD[3:]], 3, ["does not increase", "line 2"]),   # not sorted
    ([GOOD[0], GOOD[1], GOOD[1], *GOOD[2:]], 3, ["does not increase"]),            # duplicate row
    ([GOOD[0], "", "# c", GOOD[1], GOOD[1], *GOOD[2:]], 5, ["does not increase", "line 4"]),
    ([GOOD[0], GOOD[1], "1e-1 2e3 7", *GOOD[3:]], 3, ["3 columns", "(line 1) has 2"]),
    ([GOOD[0], GOOD[1], "1e-1", *GOOD[3:]], 3, ["1 columns"]),
    (["1e-3", *GOOD[1:]], 1, ["1 column(s)", "needs at least 2"]),
    ([GOOD[0], GOOD[1], "1e-1 2e3x", *GOOD[3:]], 3, ["'2e3x' is not a number"]),
    ([GOOD[0], GOOD[1], "1e-1 2e3 x", *GOOD[3:]], 3, ["columns"]),
    (["k P", *GOOD], 1, ["'k' is not a number", "comment out header lines"]),   # header not commented
    ([GOOD[0], GOOD[1], "1e-1,", *GOOD[3:]], 3, ["empty field"]),
    (["1e-3,1e3,a", "1e-2,5e3,b", "1e-1,2e3,c", "1,1e2,d"], 1, ["column 2", "'a' is not a number"]),
    ([GOOD[0], "1e-2 5e3\x0c7", *GOOD[2:]], 2, ["3 columns"]),     # a form feed is no line end
    ([GOOD[0], "1e-2 5e3\x1c", GOOD[2], "x y", *GOOD[3:]], 4, ["'x' is not a number"]),
    ([GOOD[0], "1e-2 5e3\u2028", GOOD[2], "x y"], 4, ["'x' is not a number"]),
    ([GOOD[0], "1e-2\x005e3", *GOOD[2:]], 2, ["1 columns"]),             # NUL is no separator
    (["\ufeff" + GOOD[0], *GOOD[1:]], 1, ["is not a number"]),          # a byte-order mark
    ([GOOD[0], GOOD[1]], 1, ["2 data row(s)", "at least 4"]),
    (["# only", "# comments", "", "   "], None, ["0 data row(s)"]),
])
def test_listed_table_faults(tmp_path, lines, line, words):
    for eol in ("\n", "\r\n", "\r"):   # the same line numbers whatever the line ends
        msg = _refusal(_file(tmp_path, lines, eol=eol))
        if line is not None:
            assert _names_line(msg, line), msg
        for w in words:
            assert w in msg, msg


@pytest.mark.parametrize("data, line, words", [
    (b"", None, ["0 data row(s)"]),                                          # an empty file
    (b"\n\n\n", None, ["0 data row(s)"]),
    (b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR\x00\x00", 1, ["not UTF-8", "binary"]),   # a picture
    (b"\x7fELF\x02\x01\x01\x00" + bytes(range(256)), 3, ["not UTF-8"]),      # LF and CR before 0x80
    ("1e-3 1e3\n1e-2 5e3\n1e-1 2e3 # caf\u00e9\n".encode("latin-1") + b"1 1e2\n", 3, ["not UTF-8"]),
    (b"1e-3 1e3\r\n1e-2 5e3\r\n\xff\xfe 1\r\n", 3, ["not UTF-8"]),
    (b"1e-3 1e3\r1e-2 5e3\r1e-1 2e3\r\xc3\x28 1\r", 4, ["not UTF-8"]),
    ("1e-3 1e3\n1e-2 5e3\n".encode("utf-16"), 1, ["not UTF-8"]),             # UTF-16 text
    (b"\x00" * 100, 1, ["column(s)"]),                                      # NUL bytes are UTF-8
    (bytes(range(1, 10)) + b"\n" + bytes(range(14, 32)), None, ["is not a number", "column"]),
])
def test_binary_empty_and_non_utf8_files(tmp_path, data, line, words):
    msg = _refusal(_file(tmp_path, data, name="table.dat"))
    if line is not None:
        assert _names_line(msg, line), msg
    assert any(w in msg for w in words), msg


def test_unreadable_paths(tmp_path):
    assert "cannot read table" in _refusal(tmp_path / "missing.txt")
    assert "cannot read table" in _refusal(tmp_path)                          # a directory
    with pytest.raises(TableError) as info:                                 # a NUL in the name
        read_spectrum_table(tmp_path / "a\x00b.txt")
    msg = str(info.value)
    assert "cannot read table" in msg and "a\\x00b.txt" in msg and "\x00" not in msg


def test_transfer_and_unit_faults(tmp_path):
    p = _file(tmp_path, ["1e-3 1.0", "1e-2 0.9", "1e-1 -0.5", "1 0.1"])
    msg = _refusal(p, quantity="transfer")
    assert _names_line(msg, 3) and "T(k) = -0.5 is negative" in msg and "multiply it by -1" in msg
    # P h^3 beyond double precision after the 1/Mpc -> h/Mpc conversion (h = 2): line named
    p = _file(tmp_path, ["1e-3 1e307", "1e-2 1e308", "1e-1 1e307", "1 1e306"])
    msg = _refusal(p, k_unit="1/Mpc", h=2.0)
    assert _names_line(msg, 2) and "double precision" in msg
    # k / h underflowing to equal (or zero) values: refused, not silently merged
    p = _file(tmp_path, ["5e-324 1", "1e-323 1", "1.5e-323 1", "2e-323 1"])
    msg = _refusal(p, k_unit="1/Mpc", h=2.0)
    assert "double precision" in msg and re.search(r"\bline [1-4]\b", msg)


def _huge_table(path, rows, bad_last=None):
    """A table of ``rows`` valid rows (k log-spaced), optionally a bad last row; returns its size."""
    k = np.geomspace(1e-5, 1e3, rows)
    p = 1e4 * k / (1.0 + (k / 0.02) ** 2.6)
    block = "\n".join(f"{a:.15e} {b:.15e}" for a, b in zip(k.tolist(), p.tolist())) + "\n"
    with open(path, "w") as f:
        f.write("# a huge table, generated by the test\n")
        f.write(block)
        if bad_last:
            f.write(bad_last + "\n")
    return path.stat().st_size


def test_huge_file_error_names_its_last_line(tmp_path):
    """About 24 MB (500 000 rows) with a bad last row: the reader has no size limit, so it reads
    everything and names the last line (issue 8: a huge file, a clear error naming file and line)."""
    path = tmp_path / "huge.txt"
    rows = 500_000
    size = _huge_table(path, rows, bad_last="1e-6 2.0")
    assert size > 20e6
    t0 = time.perf_counter()
    msg = _refusal(path)
    took = time.perf_counter() - t0
    assert _names_line(msg, rows + 2) and "does not increase" in msg and f"line {rows + 1}" in msg
    print(f"[huge table] {size / 1e6:.1f} MB, {rows + 1} rows: refused in {took:.2f} s")


def test_huge_binary_file_is_refused_at_its_first_bad_byte(tmp_path):
    path = tmp_path / "huge.bin"
    rng = np.random.default_rng(8)
    good = b"1e-3 1e3\n1e-2 5e3\n"
    path.write_bytes(good + b"\xff" + rng.integers(0, 256, 30_000_000, dtype=np.uint8).tobytes())
    msg = _refusal(path)
    assert _names_line(msg, 3) and "not UTF-8" in msg


@pytest.mark.slow
def test_huge_valid_file_reads(tmp_path):
    """About 60 MB of valid rows: read in full (no size limit), every row kept."""
    path = tmp_path / "huge_valid.txt"
    rows = 1_200_000
    size = _huge_table(path, rows)
    t0 = time.perf_counter()
    tab = read_spectrum_table(path)
    print(f"[huge table] {size / 1e6:.1f} MB read in {time.perf_counter() - t0:.2f} s")
    assert len(tab.k) == rows and tab.line[0] == 2 and tab.line[-1] == rows + 1


# ---- the command line ---------------------------------------------------------------------------

def run_cli(argv):
    err, out = io.StringIO(), io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(out):
        code = main(argv)
    return code, out.getvalue(), err.getvalue()


def test_cli_bad_tables_exit_2_one_line_no_output(tmp_path, monkeypatch):
    """``icgen spectrum`` and ``icgen ics`` with a faulty table: exit 2, one line, nothing written."""
    from icgen import background

    # The background is solved before the table is read; the same cosmology every time, so
    # solve it once (0.1 s each otherwise). The table path itself runs unchanged.
    monkeypatch.setattr(background, "solve", functools.lru_cache(maxsize=4)(background.solve))
    table = tmp_path / "in" / "pk.txt"
    table.parent.mkdir()
    out = tmp_path / "out"
    out.mkdir()

    @_examples(N_EXAMPLES["cli table"])
    @hgiven(faulty_tables(), st.sampled_from(["spectrum", "ics"]))
    def prop(case, command):
        RUNS["cli table"] += 1
        data, columns, line, words, _ = case
        table.write_bytes(data)
        argv = [command, "--out", str(out / ("pk.h5" if command == "spectrum" else "ics.h5")),
                "--set=spectrum.source=table", f"--set=spectrum.table={table}",
                f"--set=spectrum.columns=[{columns[0]}, {columns[1]}]", "--set=box.particles_per_side=8",
                "--set=box.size=50.0"] + (["--quiet"] if command == "ics" else [])
        code, stdout, stderr = run_cli(argv)
        assert code == 2, stderr
        lines = stderr.splitlines()
        assert len(lines) == 1 and lines[0].startswith(f"icgen {command}: error: "), stderr[:500]
        assert "Traceback" not in stderr and str(table) in stderr
        if line is not None:
            assert _names_line(stderr, line), stderr
        assert os.listdir(out) == []

    _run_counted("cli table", prop, N_EXAMPLES["cli table"])


# ---- heavier variants (pytest -m slow) ----------------------------------------------------------

@pytest.mark.slow
def test_slow_many_more_planted_faults(tmp_path):
    path = tmp_path / "pk.txt"

    @_examples(10 * N_EXAMPLES["one fault"])
    @hgiven(faulty_tables())
    def prop(case):
        RUNS["slow one fault"] += 1
        data, columns, line, words, _ = case
        path.write_bytes(data)
        with pytest.raises(InputError) as info:
            read_spectrum_table(path, columns)
        _check_refusal(info.value, path, line, words)

    _run_counted("slow one fault", prop, 10 * N_EXAMPLES["one fault"])


@pytest.mark.slow
def test_slow_many_more_bytes(tmp_path):
    path = tmp_path / "garbage.txt"

    @_examples(10 * N_EXAMPLES["token soup"])
    @hgiven(st.one_of(st.binary(max_size=3000), st.lists(_TOKENS, max_size=200).map("".join).map(str.encode)),
            _COLUMNS, _UNIT)
    def prop(data, columns, unit):
        RUNS["slow bytes"] += 1
        _read_or_refuse(path, data, columns, *unit)

    _run_counted("slow bytes", prop, 10 * N_EXAMPLES["token soup"])
