"""The whole-column reading path of the weather readers (kernels.climate._Records).

Reference: the line-by-line parsers of the same module (``_tmy3_records``,
``_epw_records``), which split each line with ``str.split(",")`` and convert
with Python's ``float``/``int``; the column path must give bit-identical
arrays wherever it answers, and step aside (None) wherever the text is laid
out otherwise, so that the line-by-line parser reads it and reports errors
with their line. Data: the real TMY3 years bundled with pvlib, edited.
"""

from __future__ import annotations

import csv
import importlib.util
import io
from pathlib import Path

import numpy as np
import pvlib
import pytest

from luxsweep.kernels import climate as cl
from luxsweep.kernels.errors import WeatherFileError

PVLIB_DATA = Path(pvlib.__file__).parent / "data"
SAND_POINT = PVLIB_DATA / "703165TY.csv"

_spec = importlib.util.spec_from_file_location(
    "mangle", Path(__file__).parent / "bad_inputs" / "mangle.py"
)
mangle = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(mangle)


def _tmy3_both(text: str):
    """(column path or None, line-by-line path) records of a TMY3 text."""
    lines = text.splitlines()
    header = next(csv.reader([lines[1]]))
    position = {name: header.index(name) for pair in cl._TMY3_COLUMNS.values() for name in pair}
    position |= {n: header.index(n) for n in ("Date (MM/DD/YYYY)", "Time (HH:MM)")}
    fast = cl._tmy3_records_fast(text, len(header), position)
    slow = cl._tmy3_records(lines, header, position, "<test>", 3)
    return fast, slow


def _same(fast, slow):
    for a, b in zip(fast[:3], slow[:3], strict=True):  # month, day, hour
        np.testing.assert_array_equal(a, b)
    for part in (3, 4):  # values (NaN where missing), validity
        for name in cl.QUANTITIES:
            bits, ref_bits = fast[part][name].view(np.uint8), slow[part][name].view(np.uint8)
            np.testing.assert_array_equal(bits, ref_bits, err_msg=name)


def _edit(text: str, fn) -> str:
    """``text`` after ``fn`` changed its list of lines in place."""
    lines = text.split("\n")
    fn(lines)
    return "\n".join(lines)


def _set(lines, line, column, value):
    parts = lines[line - 1].split(",")
    parts[column] = value
    lines[line - 1] = ",".join(parts)


TEXT = SAND_POINT.read_text()
COLS = TEXT.splitlines()[1].split(",")
HEAD = len("\n".join(TEXT.split("\n", 2)[:2])) + 1  # start of the records


@pytest.mark.parametrize(
    "variant",
    [
        lambda t: t,
        lambda t: t.replace("\n", "\r\n"),  # Windows line ends
        lambda t: t.rstrip("\n") + "\n\n\n",  # trailing blank lines
        lambda t: t.rstrip("\n"),  # no final line end
        lambda t: _edit(t, lambda ls: _set(ls, 50, COLS.index("GHI (W/m^2)"), " 12 ")),
        lambda t: _edit(t, lambda ls: _set(ls, 60, COLS.index("DHI (W/m^2)"), "1.5e1")),
        lambda t: _edit(t, lambda ls: _set(ls, 61, COLS.index("DHI (W/m^2)"), "-0")),
        lambda t: _edit(t, lambda ls: (_set(ls, 70, COLS.index("DNI (W/m^2)"), "-9900"),
                                       _set(ls, 70, COLS.index("DNI source"), " ? "))),
        lambda t: _edit(t, lambda ls: _set(ls, 80, COLS.index("Dew-point source"), "?")),
    ],
    ids=["as is", "crlf", "blank tail", "no final newline", "spaces", "exponent",
         "minus zero", "missing flags", "flag only"],
)  # fmt: skip
def test_column_path_equals_line_by_line(variant):
    fast, slow = _tmy3_both(variant(TEXT))
    assert fast is not None  # plainly laid out: the column path answers
    _same(fast, slow)


@pytest.mark.parametrize(
    "variant",
    [
        lambda t: _edit(t, lambda ls: _set(ls, 40, 0, "1/2/1988")),  # date not zero-padded
        lambda t: _edit(t, lambda ls: _set(ls, 41, COLS.index("GHI (W/m^2)"), "abc")),
        lambda t: _edit(t, lambda ls: _set(ls, 42, COLS.index("GHI (W/m^2)"), "nan")),
        lambda t: _edit(t, lambda ls: _set(ls, 43, COLS.index("GHI (W/m^2)"), "")),
        lambda t: _edit(t, lambda ls: ls.__setitem__(44, ls[44] + ",extra")),
        lambda t: _edit(t, lambda ls: ls.insert(45, "")),  # blank line inside
        lambda t: t[:HEAD] + t[HEAD:].replace("\n", "\r", 10),  # lone carriage returns
        lambda t: _edit(t, lambda ls: _set(ls, 46, COLS.index("GHI source"), "\tA")),
        lambda t: _edit(t, lambda ls: _set(ls, 47, COLS.index("GHI source"), "Å")),
        lambda t: t[:HEAD] + t[HEAD:].replace("\n", "\u2028", 5),  # Unicode line separator
    ],
    ids=["date unpadded", "text", "nan", "empty", "extra field", "blank line", "lone cr",
         "tab", "non-ascii", "unicode line break"],
)  # fmt: skip
def test_column_path_steps_aside_for_anything_else(variant):
    text = variant(TEXT)
    lines = text.splitlines()
    header = lines[1].split(",")
    position = {n: header.index(n) for pair in cl._TMY3_COLUMNS.values() for n in pair}
    position |= {n: header.index(n) for n in ("Date (MM/DD/YYYY)", "Time (HH:MM)")}
    assert cl._tmy3_records_fast(text, len(header), position) is None


def test_errors_still_name_the_line():
    # the column path steps aside and the line-by-line parser reports (line = k for
    # hour k - 2 of a TMY3 file, as in the bad-input corpus)
    text = _edit(TEXT, lambda ls: _set(ls, 5009, COLS.index("GHI (W/m^2)"), "abc"))
    with pytest.raises(WeatherFileError, match="not a number") as err:
        cl.read_tmy3(io.StringIO(text))
    assert err.value.line == 5009 and err.value.field == "GHI (W/m^2)"
    text = _edit(TEXT, lambda ls: ls.__setitem__(99, ls[99] + ",x"))
    with pytest.raises(WeatherFileError, match="comma-separated fields") as err:
        cl.read_tmy3(io.StringIO(text))
    assert err.value.line == 100


@pytest.mark.parametrize("crlf", [False, True])
def test_epw_column_path_equals_line_by_line(crlf):
    text = mangle.to_epw(TEXT)
    text = text.replace("\n", "\r\n") if crlf else text
    fast = cl._epw_records_fast(text)
    slow = cl._epw_records(text.splitlines(), "<test>", 9)
    assert fast is not None
    _same(fast, slow)
    # a Latin-1 city name in the header: still the column path, same numbers
    latin = text.replace("LOCATION,", "LOCATION,Sk\u00e5ne ", 1)
    _same(cl._epw_records_fast(latin), slow)


def test_numbers_are_pythons_floats():
    # reference: Python's float() on every spelling, compared bit for bit
    rng = np.random.default_rng(2)
    values = []
    for _ in range(20_000):
        digits = "".join(rng.choice(list("0123456789"), rng.integers(1, 19)))
        cut = rng.integers(-1, len(digits) + 1)
        text = digits if cut < 0 else digits[:cut] + "." + digits[cut:]
        values.append(("-" if rng.random() < 0.5 else "") + text)
    values += ["-0", ".5", "5.", "-.5", "1e5", "+3", " 4", "1_0", "9999", "99.9", "-9900"]
    text = "a\nb\n" + "\n".join(f"x,{v}" for v in values)
    got = cl._Records.of(text, 2, 2).numbers(1)
    ref = np.array([float(v) for v in values])
    np.testing.assert_array_equal(got.view(np.int64), ref.view(np.int64))
