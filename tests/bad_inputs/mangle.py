"""Build the weather files of the bad-input corpus from pvlib's bundled TMY3 years.

The corpus does not commit 1.7 MB copies of mangled weather files: each case's
``case.yaml`` lists, under ``files:``, the weather files it needs as a source file
plus a short list of edits, and :func:`build` writes them next to the case's study
file at test time. Sources are the real TMY3 files bundled with pvlib
(``723170TYA.CSV``, Greensboro NC; ``703165TY.csv``, Sand Point AK).

Line numbers in edits are 1-based line numbers of the *written* file, i.e. what
a user sees in an editor and what an error message must name. In a TMY3 file,
line 1 is the site header, line 2 the column names and line ``k >= 3`` holds hour
``k - 2`` of the year. After ``to_epw`` the file has the eight EPW header lines,
so line ``k >= 9`` holds hour ``k - 8``.

Edits (applied in order)::

    {op: to_epw}                                   convert TMY3 text to EPW text
    {op: keep_lines, count: N}                     keep the first N lines only
    {op: cut_line, line: N, keep_chars: K}         keep K characters of line N, drop the rest
    {op: set, line: N | all, column: NAME, value: V}   set one field (all: every data line)
    {op: drop_field, line: N, column: NAME}        remove one field (wrong column count)
    {op: drop_line, line: N}                       remove line N
    {op: swap_lines, line: N, with: M}             exchange two lines
    {op: replace_line, line: N, text: T}           replace a whole line
    {op: copy_line, line: N, to: M}                line M becomes a copy of line N
    {op: empty}                                    an empty file
    {op: garbage, size: S, seed: K}                S random bytes (not text)
"""

from __future__ import annotations

import csv
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np
import pvlib

PVLIB_DATA = Path(pvlib.__file__).parent / "data"
SOURCES = ("723170TYA.CSV", "703165TY.csv")

# EPW data columns in file order (EnergyPlus weather file format, "Auxiliary
# Programs", chapter "Weather Converter Program" - field list from memory).
EPW_COLUMNS = (
    "year", "month", "day", "hour", "minute", "source_flags",
    "dry_bulb", "dew_point", "relative_humidity", "pressure",
    "extraterrestrial_horizontal", "extraterrestrial_normal", "horizontal_infrared",
    "ghi", "dni", "dhi",
    "global_illuminance", "direct_illuminance", "diffuse_illuminance", "zenith_luminance",
    "wind_direction", "wind_speed", "total_sky_cover", "opaque_sky_cover",
    "visibility", "ceiling_height", "weather_observation", "weather_codes",
    "precipitable_water", "aerosol_optical_depth", "snow_depth", "days_since_snow",
    "albedo", "liquid_precipitation_depth", "liquid_precipitation_quantity",
)


EPW_SOURCE_FLAGS = "?9?9?9?9E0?9?9?9?9?9?9?9?9?9?9?9?9?9*9*9?9"


def _tmy3_columns(lines: Sequence[str]) -> list[str]:
    return next(csv.reader([lines[1]]))


def _header_lines(lines: Sequence[str]) -> int:
    """Number of header lines: 2 for TMY3, 8 for EPW."""
    return 8 if lines[0].startswith("LOCATION") else 2


def _columns(lines: Sequence[str]) -> list[str]:
    return list(EPW_COLUMNS) if lines[0].startswith("LOCATION") else _tmy3_columns(lines)


def to_epw(text: str) -> str:
    """Convert a TMY3 year to EPW text (our own conversion of real data).

    Only the fields luxsweep reads are carried over (irradiance, illuminance,
    dew point, dry bulb, pressure, zenith luminance); the others get the EPW
    missing-value codes.
    """
    lines = text.splitlines()
    site = next(csv.reader([lines[0]]))
    usaf, name, state, tz, lat, lon, elev = site[:7]
    header = [
        f"LOCATION,{name.strip()},{state},USA,TMY3,{usaf},{lat},{lon},{tz},{elev}",
        "DESIGN CONDITIONS,0",
        "TYPICAL/EXTREME PERIODS,0",
        "GROUND TEMPERATURES,0",
        "HOLIDAYS/DAYLIGHT SAVINGS,No,0,0,0",
        "COMMENTS 1,converted from a TMY3 file bundled with pvlib for the luxsweep test corpus",
        "COMMENTS 2,",
        "DATA PERIODS,1,1,Data,Sunday, 1/ 1,12/31",
    ]
    cols = _tmy3_columns(lines)
    idx = {c: i for i, c in enumerate(cols)}
    out = []
    for row in csv.reader(lines[2:]):
        month, day, year = row[0].split("/")
        hour = int(row[1].split(":")[0])

        def g(name: str, row: list[str] = row) -> str:
            return row[idx[name]]

        out.append(",".join([
            year, str(int(month)), str(int(day)), str(hour), "60", EPW_SOURCE_FLAGS,
            g("Dry-bulb (C)"), g("Dew-point (C)"), g("RHum (%)"),
            str(int(float(g("Pressure (mbar)")) * 100)),
            g("ETR (W/m^2)"), g("ETRN (W/m^2)"), "9999",
            g("GHI (W/m^2)"), g("DNI (W/m^2)"), g("DHI (W/m^2)"),
            g("GH illum (lx)"), g("DN illum (lx)"), g("DH illum (lx)"), g("Zenith lum (cd/m^2)"),
            g("Wdir (degrees)"), g("Wspd (m/s)"), g("TotCld (tenths)"), g("OpqCld (tenths)"),
            "9999", "99999", "9", "999999999", "999", "0.999", "999", "99",
            "999", "999", "99",
        ]))
    return "\n".join(header + out) + "\n"


def _apply(lines: list[str], edit: Mapping) -> list[str]:
    op = edit["op"]
    if op == "keep_lines":
        return lines[: int(edit["count"])]
    if op == "drop_line":
        n = int(edit["line"]) - 1
        return lines[:n] + lines[n + 1 :]
    if op == "swap_lines":
        a, b = int(edit["line"]) - 1, int(edit["with"]) - 1
        lines = list(lines)
        lines[a], lines[b] = lines[b], lines[a]
        return lines
    if op == "copy_line":
        lines = list(lines)
        lines[int(edit["to"]) - 1] = lines[int(edit["line"]) - 1]
        return lines
    if op == "replace_line":
        lines = list(lines)
        lines[int(edit["line"]) - 1] = str(edit["text"])
        return lines
    if op in ("set", "drop_field"):
        cols = _columns(lines)
        col = cols.index(edit["column"])
        first = _header_lines(lines)
        targets = (
            range(first, len(lines)) if edit["line"] == "all" else [int(edit["line"]) - 1]
        )
        lines = list(lines)
        for t in targets:
            fields = lines[t].split(",")
            if op == "set":
                fields[col] = str(edit["value"])
            else:
                del fields[col]
            lines[t] = ",".join(fields)
        return lines
    raise ValueError(f"unknown line edit {op!r}")


def render(source: str, edits: Sequence[Mapping] = ()) -> bytes:
    """Return the bytes of a weather file made from a bundled TMY3 year and edits.

    Parameters
    ----------
    source : str
        File name of a TMY3 year in pvlib's data folder (see :data:`SOURCES`).
    edits : sequence of mappings
        The edits of the module docstring, applied in order.
    """
    text = (PVLIB_DATA / source).read_text()
    cut: tuple[int, int] | None = None
    for edit in edits:
        op = edit["op"]
        if op == "to_epw":
            text = to_epw(text)
        elif op == "empty":
            return b""
        elif op == "garbage":
            rng = np.random.default_rng(int(edit.get("seed", 0)))
            return rng.integers(0, 256, int(edit["size"]), dtype=np.uint8).tobytes()
        elif op == "cut_line":
            cut = (int(edit["line"]), int(edit["keep_chars"]))
        else:
            text = "\n".join(_apply(text.splitlines(), edit)) + "\n"
    if cut is not None:
        lines = text.splitlines()
        n, k = cut
        text = "\n".join([*lines[: n - 1], lines[n - 1][:k]])  # no newline: cut mid-write
    return text.encode()


def build(case_dir: Path, files: Mapping[str, Mapping]) -> list[Path]:
    """Write the weather files a case lists under ``files:`` into ``case_dir``.

    Each entry is ``{from: SOURCE, edits: [...]}`` (see the module docstring).
    """
    written = []
    for rel, spec in files.items():
        path = case_dir / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_bytes(render(spec["from"], spec.get("edits", ())))
        written.append(path)
    return written

