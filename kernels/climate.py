"""Weather files: hourly irradiance and illuminance of a typical year at a site.

Two formats are read, each in two layers (public ``read_*`` opens the file,
private ``_parse_*(text, source)`` parses the text):

* EPW — the text weather format of the EnergyPlus building energy program
  (U.S. DOE), one ``LOCATION`` line, seven more header lines and 35 comma
  separated fields per hourly record;
* TMY3 CSV — NREL's typical meteorological year 3 files (Wilcox & Marion,
  2008): one metadata line, one column-name line, then 68 or 71 columns per
  hourly record.

The records of a plainly laid out file (ASCII, ``\n`` or ``\r\n`` line ends,
the same number of fields on every line, dates ``MM/DD/YYYY HH:MM``) are read
column by column from the bytes (``_Records``, about 15 ms a year); anything
else, and every file with an error, goes through the line-by-line parser,
which is the reference (same numbers bit for bit) and names the line and field
of an error.

Conventions (shared by both readers)
------------------------------------
* **Time stamps** are hour-ending, in local standard time (no daylight saving),
  as both formats define them: the record stamped 12:00 holds the average over
  11:00–12:00. The index is tz-aware with a fixed UTC offset from the header.
* **Reference year.** Typical-year files stitch months from different years.
  luxsweep places every file on the non-leap reference year
  :data:`REFERENCE_YEAR` (2023): the first record is stamped
  2023-01-01 01:00 and the last 2024-01-01 00:00, so every climate shares the
  same 8,760 stamps and the same weekdays (2023-01-01 is a Sunday). The years
  written in the file are ignored.
* **Leap years.** Files with 8,784 hourly records (a leap year with February 29)
  are accepted; the 24 records of February 29 are dropped, so a Climate always
  holds 8,760 records. Daylight metrics over a year change by well under 1 % by
  dropping one winter day.
* **Missing values** are marked invalid in :attr:`Climate.valid` and set to NaN,
  never read as data: EPW uses per-field sentinel values (9999 for irradiance,
  999999 for illuminance, 99.9 for dew point — EnergyPlus Auxiliary Programs,
  "Weather Converter Program", EPW data dictionary; from memory), TMY3 uses the
  value -9900 and the source flag ``?`` (Wilcox & Marion 2008, section 1.3;
  from memory).
* **Implausible illuminance columns.** Some files carry illuminance columns
  filled with zeros or in the wrong unit (pvlib's bundled Greensboro TMY3 file
  holds them in units of 100 lx). A column whose median luminous efficacy
  (illuminance / irradiance, over records with irradiance > 20 W/m²,
  :data:`EFFICACY_MIN_IRRADIANCE`) lies outside 50–250 lm/W
  (:data:`PLAUSIBLE_EFFICACY`) is marked invalid as a whole, with a warning; downstream
  the Perez et al. (1990) efficacy model then converts irradiance. Daylight
  efficacies lie near 90–130 lm/W (common practice; Perez et al. 1990).
* **Illuminance in the wrong unit on some days.** A file may change unit
  within a column (pvlib's Sand Point TMY3 year holds 2–31 January in hundreds
  of lux). Every day of every column still valid is judged on its own
  (:func:`_judge_days`): a day whose median efficacy over records above
  20 W/m² lies outside 10–1000 lm/W is marked invalid as a whole, dim records
  included (alone, 21 cannot be told from 21 hundred lux), and modelled; one
  warning per file says which columns and days.

References
----------
.. [1] Wilcox, S. and Marion, W., "Users Manual for TMY3 Data Sets",
   NREL/TP-581-43156, 2008. https://doi.org/10.2172/928611
.. [2] U.S. DOE, "EnergyPlus Auxiliary Programs", chapter "Weather Converter
   Program" (EPW data dictionary).
.. [3] Perez, R., Ineichen, P., Seals, R., Michalsky, J. and Stewart, R.,
   "Modeling daylight availability and irradiance components from direct and
   global irradiance", Solar Energy 44(5), 271-289, 1990.
   https://doi.org/10.1016/0038-092X(90)90055-H
"""

from __future__ import annotations

import csv
import os
import re
import warnings
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import timedelta, timezone
from pathlib import Path
from typing import IO

import numpy as np
import pandas as pd
import pvlib

from luxsweep.kernels.errors import WeatherFileError

REFERENCE_YEAR = 2023
"""Non-leap year on which every weather file is placed."""

QUANTITIES = (
    "ghi",
    "dni",
    "dhi",
    "global_illuminance",
    "direct_illuminance",
    "diffuse_illuminance",
    "dew_point",
)
"""Names of the per-record climate quantities held by :class:`Climate`."""

IRRADIANCE = ("ghi", "dni", "dhi")
ILLUMINANCE = ("global_illuminance", "direct_illuminance", "diffuse_illuminance")

PLAUSIBLE_EFFICACY = (50.0, 250.0)
"""Luminous efficacy [lm/W] within which a weather file's illuminance is believed.

The one definition for both checks: a whole illuminance column whose median
efficacy lies outside is ignored (here), and a single step's value outside it
is replaced by the Perez et al. (1990) model (:func:`kernels.sky.sky_vectors`).
Daylight efficacies lie near 90–150 lm/W (common practice); the bundled TMY3
file of Sand Point AK stores about a tenth of its records in hundreds of lux."""

EFFICACY_MIN_IRRADIANCE = 20.0
"""Irradiance [W/m²] above which efficacy is judged (both checks); below it the
ratio of whole-W/m² irradiance and illuminance is too coarse to judge."""

# [lm/W] a day (or a lone dim record) is in lux when its median efficacy lies here: a
# factor-of-100 unit error gives 0.3-2.6, real days of pvlib's Sand Point year 35-262
# (see _judge_days; the day's records above EFFICACY_MIN_IRRADIANCE judge it)
_UNIT_RANGE = (10.0, 1000.0)
_ROUNDING = 1.0  # [W/m2] files store whole W/m2; allowance above the extraterrestrial bound

ACCEPTED_FORMATS = (
    "EPW (.epw: first line starts with 'LOCATION,')",
    "TMY3 CSV (.csv: a metadata line, then a line starting 'Date (MM/DD/YYYY)')",
)


@dataclass(frozen=True)
class Site:
    """A place on Earth.

    Parameters
    ----------
    name : str
        Station or place name as written in the weather file.
    latitude : float [deg]
        Positive north.
    longitude : float [deg]
        Positive east.
    elevation : float [m]
        Above sea level.
    utc_offset : float [h]
        Offset of local standard time from UTC (e.g. -5 for US Eastern).
    """

    name: str
    latitude: float
    longitude: float
    elevation: float
    utc_offset: float

    @property
    def tz(self) -> timezone:
        """Fixed-offset time zone of local standard time."""
        return timezone(timedelta(hours=self.utc_offset))


@dataclass(frozen=True, eq=False)
class Climate:
    """A year of climate records at one site.

    Attributes
    ----------
    site : Site
    time : pandas.DatetimeIndex
        Record-ending stamps, local standard time (fixed offset), on the
        reference year :data:`REFERENCE_YEAR`.
    interval : int [min]
        Minutes per record (60 for the files; smaller after
        :func:`kernels.sun.resample`).
    ghi, dni, dhi : ndarray [W/m2]
        Global horizontal, direct normal and diffuse horizontal irradiance,
        averages over the record's interval; NaN where missing.
    global_illuminance, direct_illuminance, diffuse_illuminance : ndarray [lx]
        Global horizontal, direct normal and diffuse horizontal illuminance;
        NaN where missing or implausible.
    dew_point : ndarray [degC]
    valid : dict of str to ndarray of bool
        Per quantity (keys :data:`QUANTITIES`), True where the value is data.
    source : str
        The file read (or ``"<buffer>"``).
    """

    site: Site
    time: pd.DatetimeIndex
    interval: int
    ghi: np.ndarray
    dni: np.ndarray
    dhi: np.ndarray
    global_illuminance: np.ndarray
    direct_illuminance: np.ndarray
    diffuse_illuminance: np.ndarray
    dew_point: np.ndarray
    valid: dict[str, np.ndarray] = field(default_factory=dict)
    source: str = "<buffer>"

    def __len__(self) -> int:
        return len(self.time)


# --------------------------------------------------------------------------- public readers


def read_climate(path: str | os.PathLike) -> Climate:
    """Read an EPW or TMY3 CSV weather file, choosing the reader by extension or content.

    Parameters
    ----------
    path : str or path-like
        ``.epw`` files are read as EPW, ``.csv`` as TMY3; any other extension is
        recognised from its first line.

    Returns
    -------
    Climate

    Raises
    ------
    WeatherFileError
        The file does not exist, has an unknown format, or is malformed.
    """
    path = Path(path)
    text = _decode(_read_bytes(path), str(path))
    return _parser(text, str(path))(text, str(path))  # warnings name our caller


def parse_climate(data: bytes | str, name: str) -> Climate:
    """Parse the bytes (or text) of an EPW or TMY3 CSV weather file.

    :func:`read_climate` is this function on a file's bytes: given the same bytes
    and the file's path as ``name``, both return the same :class:`Climate`, bit
    for bit (``source`` included). It lets a program read a file once and parse
    it elsewhere, e.g. on a machine that cannot see the file.

    Parameters
    ----------
    data : bytes or str
        The file's whole content.
    name : str
        The file's name or path: chooses the reader by extension (``.epw`` EPW,
        ``.csv`` TMY3, otherwise recognised from the first line) and names the
        file in errors and in ``Climate.source``.

    Returns
    -------
    Climate

    Raises
    ------
    WeatherFileError
        Unknown format, not text, or malformed content (naming ``name``).
    """
    text = data if isinstance(data, str) else _decode(data, name)
    return _parser(text, name)(text, name)


def _parser(text: str, name: str) -> Callable[[str, str], Climate]:
    """The parser of a weather file's text: by extension, else by its first lines."""
    suffix = Path(name).suffix.lower()
    head = text.split("\n", 2)
    if suffix == ".epw" or head[0].upper().startswith("LOCATION,"):
        return _parse_epw
    if any(line.startswith("Date (MM/DD/YYYY)") for line in head[:2]):
        return _parse_tmy3
    if not text.strip():
        raise WeatherFileError(
            "the file is empty; give an EPW or TMY3 CSV weather file", file=name
        )
    raise WeatherFileError(
        "unknown weather file format; accepted formats are: " + "; ".join(ACCEPTED_FORMATS),
        file=name,
        line=1,
    )


def read_site(path: str | os.PathLike) -> Site:
    """Read only the site (name, latitude, longitude, elevation, time zone) of a weather file.

    Parameters
    ----------
    path : str or path-like
        An EPW or TMY3 CSV file, recognised as in :func:`read_climate`.

    Returns
    -------
    Site
        From the EPW ``LOCATION`` line or the TMY3 metadata line; no records are read.
    """
    path = Path(path)
    try:
        with path.open("rb") as f:
            head = f.read(4096)
    except OSError as exc:
        raise WeatherFileError(f"cannot be read ({exc.strerror})", file=str(path)) from exc
    text = head.decode("utf-8-sig", errors="replace")
    first = text.split("\n", 1)[0].rstrip("\r")
    if path.suffix.lower() == ".epw" or first.upper().startswith("LOCATION,"):
        return _epw_site(first, str(path))
    return _tmy3_site(first, str(path))


def read_epw(path_or_buffer: str | os.PathLike | IO[str]) -> Climate:
    """Read an EPW weather file.

    Parameters
    ----------
    path_or_buffer : str, path-like or text buffer

    Returns
    -------
    Climate
        On the reference year, Feb 29 dropped (see module docstring).
    """
    text, source = _text_and_source(path_or_buffer)
    return _parse_epw(text, source)


def read_tmy3(path_or_buffer: str | os.PathLike | IO[str]) -> Climate:
    """Read an NREL TMY3 CSV weather file.

    Parameters
    ----------
    path_or_buffer : str, path-like or text buffer

    Returns
    -------
    Climate
        On the reference year, Feb 29 dropped (see module docstring).
    """
    text, source = _text_and_source(path_or_buffer)
    return _parse_tmy3(text, source)


# --------------------------------------------------------------------------- EPW

EPW_FIELDS = (
    "year", "month", "day", "hour", "minute", "data source and uncertainty flags",
    "dry bulb temperature", "dew point temperature", "relative humidity",
    "atmospheric station pressure", "extraterrestrial horizontal radiation",
    "extraterrestrial direct normal radiation", "horizontal infrared radiation intensity",
    "global horizontal radiation", "direct normal radiation", "diffuse horizontal radiation",
    "global horizontal illuminance", "direct normal illuminance",
    "diffuse horizontal illuminance", "zenith luminance", "wind direction", "wind speed",
    "total sky cover", "opaque sky cover", "visibility", "ceiling height",
    "present weather observation", "present weather codes", "precipitable water",
    "aerosol optical depth", "snow depth", "days since last snowfall", "albedo",
    "liquid precipitation depth", "liquid precipitation quantity",
)  # fmt: skip
"""The 35 fields of an EPW data record, in file order (EPW data dictionary)."""

# quantity -> (0-based EPW field index, missing sentinel: values >= it are missing)
_EPW_COLUMNS = {
    "ghi": (13, 9999.0),
    "dni": (14, 9999.0),
    "dhi": (15, 9999.0),
    "global_illuminance": (16, 999999.0),
    "direct_illuminance": (17, 999999.0),
    "diffuse_illuminance": (18, 999999.0),
    "dew_point": (7, 99.9),
}
_EPW_HEADER_LINES = 8
_EPW_LABELS = {
    "ghi": "global horizontal radiation (GHI)",
    "dni": "direct normal radiation (DNI)",
    "dhi": "diffuse horizontal radiation (DHI)",
}


def _parse_epw(text: str, source: str) -> Climate:
    """Parse the text of an EPW file (see :func:`read_epw`)."""
    lines = _head(text, _EPW_HEADER_LINES + 1)
    if not lines or not lines[0].upper().startswith("LOCATION,"):
        raise WeatherFileError(
            "not an EPW file: the first line must start with 'LOCATION,' "
            "(LOCATION,city,state,country,source,WMO,latitude,longitude,time zone,elevation)",
            file=source,
            line=1,
        )
    site = _epw_site(lines[0], source)
    if len(lines) <= _EPW_HEADER_LINES:
        raise WeatherFileError(
            f"the file ends after {len(lines)} lines: an EPW file has 8 header lines "
            "followed by hourly records; the file is truncated",
            file=source,
            line=len(lines),
        )
    first_line = _EPW_HEADER_LINES + 1
    records = _epw_records_fast(text)
    if records is None:
        records = _epw_records(text.splitlines(), source, first_line)
    month, day, hour, values, valid = records
    field_names = {name: _EPW_LABELS.get(name, EPW_FIELDS[idx])
                   for name, (idx, _) in _EPW_COLUMNS.items()}  # fmt: skip
    return _build_climate(
        site, month, day, hour, values, valid, source, first_line, field_names
    )


def _epw_records(lines: list[str], source: str, first_line: int) -> tuple:
    """Month, day, hour, values and validity of the EPW records, line by line.

    The reference parser: any problem raises with the line and field named.
    """
    rows = [ln.split(",") for ln in lines[_EPW_HEADER_LINES:]]
    while rows and rows[-1] == [""]:  # trailing blank lines
        rows.pop()
    for i, row in enumerate(rows):
        if len(row) != len(EPW_FIELDS):
            raise WeatherFileError(
                f"{len(row)} comma-separated fields where an EPW record has "
                f"{len(EPW_FIELDS)}; the line is truncated or damaged",
                file=source,
                line=first_line + i,
            )
    month = _column(rows, 1, "month", source, first_line)
    day = _column(rows, 2, "day", source, first_line)
    hour = _column(rows, 3, "hour", source, first_line)
    values = {}
    valid = {}
    for name, (index, missing) in _EPW_COLUMNS.items():
        v = _column(rows, index, _EPW_LABELS.get(name, EPW_FIELDS[index]), source, first_line)
        valid[name] = v < missing
        values[name] = np.where(valid[name], v, np.nan)
    return month, day, hour, values, valid


def _epw_records_fast(text: str) -> tuple | None:
    """The result of :func:`_epw_records` from whole-column byte operations.

    Returns None whenever the file is not plainly laid out (see :class:`_Records`)
    or a value does not convert; the line-by-line parser then runs and reports.
    """
    records = _Records.of(text, _EPW_HEADER_LINES, len(EPW_FIELDS))
    if records is None:
        return None
    month, day, hour = (records.numbers(k) for k in (1, 2, 3))
    values = {}
    valid = {}
    for name, (index, missing) in _EPW_COLUMNS.items():
        v = records.numbers(index)
        if v is None:
            return None
        valid[name] = v < missing
        values[name] = np.where(valid[name], v, np.nan)
    if month is None or day is None or hour is None:
        return None
    return month, day, hour, values, valid


def _epw_site(line: str, source: str) -> Site:
    parts = [p.strip() for p in line.split(",")]
    names = ("latitude", "longitude", "time zone", "elevation")
    if len(parts) < 10:
        raise WeatherFileError(
            f"the LOCATION line has {len(parts)} fields, needs 10 "
            "(LOCATION,city,state,country,source,WMO,latitude,longitude,time zone,elevation); "
            "the site location is missing",
            file=source,
            line=1,
            field="LOCATION",
        )
    numbers = []
    for name, text in zip(names, parts[6:10], strict=True):
        try:
            numbers.append(float(text))
        except ValueError as exc:
            raise WeatherFileError(
                f"{name} {text!r} is not a number; write the site's {name} in the LOCATION line",
                file=source,
                line=1,
                field=name,
            ) from exc
    latitude, longitude, utc_offset, elevation = numbers
    _check_site(latitude, longitude, utc_offset, elevation, source)
    name = ", ".join(p for p in parts[1:4] if p and p != "-")
    return Site(name, latitude, longitude, elevation, utc_offset)


# --------------------------------------------------------------------------- TMY3

# quantity -> (value column, source-flag column)
_TMY3_COLUMNS = {
    "ghi": ("GHI (W/m^2)", "GHI source"),
    "dni": ("DNI (W/m^2)", "DNI source"),
    "dhi": ("DHI (W/m^2)", "DHI source"),
    "global_illuminance": ("GH illum (lx)", "GH illum source"),
    "direct_illuminance": ("DN illum (lx)", "DN illum source"),
    "diffuse_illuminance": ("DH illum (lx)", "DH illum source"),
    "dew_point": ("Dew-point (C)", "Dew-point source"),
}
_TMY3_MISSING = -9900.0
_TMY3_MISSING_FLAGS = ("?", "")


def _parse_tmy3(text: str, source: str) -> Climate:
    """Parse the text of a TMY3 CSV file (see :func:`read_tmy3`)."""
    lines = _head(text, 3)
    if not text.strip():
        raise WeatherFileError(
            "the file is empty; give an EPW or TMY3 CSV weather file", file=source
        )
    if lines[0].startswith("Date (MM/DD/YYYY)"):
        raise WeatherFileError(
            "the site metadata line is missing: a TMY3 file starts with "
            "'station,\"name\",state,time zone,latitude,longitude,elevation' "
            "before the column names",
            file=source,
            line=1,
        )
    if len(lines) < 3:
        raise WeatherFileError(
            f"the file has {len(lines)} lines: a TMY3 file has a metadata line, a "
            "column-name line and hourly records; the file is truncated",
            file=source,
            line=max(len(lines), 1),
        )
    site = _tmy3_site(lines[0], source)
    header = next(csv.reader([lines[1]]))
    if not header or header[0] != "Date (MM/DD/YYYY)":
        raise WeatherFileError(
            "the second line must be the TMY3 column names starting with 'Date (MM/DD/YYYY)'",
            file=source,
            line=2,
        )
    needed = ["Date (MM/DD/YYYY)", "Time (HH:MM)"]
    for pair in _TMY3_COLUMNS.values():
        needed.extend(pair)
    position = {}
    for name in needed:
        if name not in header:
            raise WeatherFileError(
                f"column {name!r} is missing from the TMY3 column names",
                file=source,
                line=2,
                field=name,
            )
        position[name] = header.index(name)
    first_line = 3
    records = _tmy3_records_fast(text, len(header), position)
    if records is None:
        records = _tmy3_records(text.splitlines(), header, position, source, first_line)
    month, day, hour, values, valid = records
    field_names = {name: column for name, (column, _) in _TMY3_COLUMNS.items()}
    return _build_climate(
        site, month, day, hour, values, valid, source, first_line, field_names
    )


def _tmy3_records(
    lines: list[str], header: list[str], position: dict[str, int], source: str, first_line: int
) -> tuple:
    """Month, day, hour, values and validity of the TMY3 records, line by line.

    The reference parser: any problem raises with the line and field named.
    """
    rows = [ln.split(",") for ln in lines[2:]]
    while rows and rows[-1] == [""]:
        rows.pop()
    for i, row in enumerate(rows):
        if len(row) != len(header):
            raise WeatherFileError(
                f"{len(row)} comma-separated fields where the column names list "
                f"{len(header)}; the line is truncated or damaged",
                file=source,
                line=first_line + i,
            )
    dates = [row[position["Date (MM/DD/YYYY)"]] for row in rows]
    times = [row[position["Time (HH:MM)"]] for row in rows]
    month = np.empty(len(rows))
    day = np.empty(len(rows))
    hour = np.empty(len(rows))
    for i, (d, t) in enumerate(zip(dates, times, strict=True)):
        try:
            mm, dd, _ = d.split("/")
            hh, _ = t.split(":")
            month[i], day[i], hour[i] = int(mm), int(dd), int(hh)
        except ValueError as exc:
            bad, fmt = ("Date (MM/DD/YYYY)", d) if d.count("/") != 2 else ("Time (HH:MM)", t)
            raise WeatherFileError(
                f"cannot read {fmt!r} as a date MM/DD/YYYY and time HH:MM",
                file=source,
                line=first_line + i,
                field=bad,
            ) from exc
    values = {}
    valid = {}
    for name, (column, flag_column) in _TMY3_COLUMNS.items():
        v = _column(rows, position[column], column, source, first_line)
        flags = np.array([row[position[flag_column]].strip() for row in rows])
        valid[name] = (v != _TMY3_MISSING) & ~np.isin(flags, _TMY3_MISSING_FLAGS)
        values[name] = np.where(valid[name], v, np.nan)
    return month, day, hour, values, valid


def _tmy3_records_fast(text: str, n_fields: int, position: dict[str, int]) -> tuple | None:
    """The result of :func:`_tmy3_records` from whole-column byte operations.

    Dates must be written ``MM/DD/YYYY`` and times ``HH:MM`` with two-digit
    fields. Returns None whenever the file is not plainly laid out (see
    :class:`_Records`), a date or time is written otherwise, or a value does
    not convert; the line-by-line parser then runs and reports.
    """
    records = _Records.of(text, 2, n_fields)
    if records is None:
        return None
    date = records.digits(position["Date (MM/DD/YYYY)"], "DD/DD/DDDD")
    time = records.digits(position["Time (HH:MM)"], "DD:DD")
    if date is None or time is None:
        return None
    month = 10.0 * date[:, 0] + date[:, 1]
    day = 10.0 * date[:, 2] + date[:, 3]
    hour = 10.0 * time[:, 0] + time[:, 1]
    values = {}
    valid = {}
    for name, (column, flag_column) in _TMY3_COLUMNS.items():
        v = records.numbers(position[column])
        if v is None:
            return None
        flags = records.stripped(position[flag_column])
        missing = np.isin(flags, [f.encode() for f in _TMY3_MISSING_FLAGS])
        valid[name] = (v != _TMY3_MISSING) & ~missing
        values[name] = np.where(valid[name], v, np.nan)
    return month, day, hour, values, valid


def _tmy3_site(line: str, source: str) -> Site:
    parts = next(csv.reader([line]), [])
    names = ("time zone", "latitude", "longitude", "elevation")
    if len(parts) < 7:
        raise WeatherFileError(
            f"the metadata line has {len(parts)} fields, needs 7 "
            "(station, name, state, time zone, latitude, longitude, elevation); "
            "the site location is missing",
            file=source,
            line=1,
        )
    numbers = []
    for name, text in zip(names, parts[3:7], strict=True):
        try:
            numbers.append(float(text))
        except ValueError as exc:
            raise WeatherFileError(
                f"{name} {text!r} is not a number; write the site's {name} in the metadata line",
                file=source,
                line=1,
                field=name,
            ) from exc
    utc_offset, latitude, longitude, elevation = numbers
    _check_site(latitude, longitude, utc_offset, elevation, source)
    name = ", ".join(p.strip() for p in parts[1:3] if p.strip())
    return Site(name, latitude, longitude, elevation, utc_offset)


# --------------------------------------------------------------------------- shared validation


def _check_site(lat: float, lon: float, utc_offset: float, elev: float, source: str) -> None:
    checks = (
        ("latitude", lat, -90.0, 90.0, "degrees north, -90 to 90"),
        ("longitude", lon, -180.0, 180.0, "degrees east, -180 to 180"),
        ("time zone", utc_offset, -12.0, 14.0, "hours from UTC, -12 to +14"),
        ("elevation", elev, -500.0, 9000.0, "metres above sea level"),
    )
    for name, value, low, high, unit in checks:
        if not low <= value <= high:
            raise WeatherFileError(
                f"{name} {value:g} is impossible; write it in {unit}",
                file=source,
                line=1,
                field=name,
            )


def _head(text: str, k: int) -> list[str]:
    """The first ``k`` lines of ``text.splitlines()``, or all of them if there are no more.

    Splits only a prefix when it holds more than ``k`` lines (its first ``k``
    are then complete).
    """
    lines = text[:65536].splitlines()
    return lines[:k] if len(lines) > k else text.splitlines()


_PAD = 64  # zero bytes after the records: fields up to this wide are gathered as windows

# str.splitlines() breaks lines at these too, besides "\n" (a lone "\r" included)
_OTHER_LINE_BREAKS = re.compile("[\r\x0b\x0c\x1c\x1d\x1e\x85\u2028\u2029]")


@dataclass(frozen=True)
class _Records:
    """Comma-separated records as one byte buffer with the position of every comma.

    Built by :meth:`of` only where splitting bytes gives exactly the fields of
    ``line.split(",")`` over ``text.splitlines()[n_header:]`` less trailing blank
    lines, as the line-by-line parsers read them: ASCII records, no control
    characters but ``\n`` or ``\r\n`` line ends, and ``n_fields`` fields on every
    line. Anything else gives None, and the line-by-line parser runs instead.
    """

    buf: np.ndarray  # uint8, the records followed by _PAD zero bytes
    line_start: np.ndarray  # (n,) first byte of each line
    line_end: np.ndarray  # (n,) one past its last byte (before "\r\n" or "\n")
    commas: np.ndarray  # (n, n_fields - 1) byte positions of the commas of each line

    @classmethod
    def of(cls, text: str, n_header: int, n_fields: int) -> _Records | None:
        parts = text.split("\n", n_header)
        if len(parts) <= n_header or any(
            _OTHER_LINE_BREAKS.search(p.removesuffix("\r")) for p in parts[:n_header]
        ):
            return None
        try:
            data = parts[n_header].rstrip("\r\n").encode("ascii")
        except UnicodeEncodeError:
            return None
        padded = np.frombuffer(data + bytes(_PAD), np.uint8)
        buf = padded[: len(data)]
        lf, cr = buf == 10, buf == 13
        n_cr = np.count_nonzero(cr)
        newline = np.flatnonzero(lf)
        if not buf.size or np.count_nonzero(buf < 32) != newline.size + n_cr:
            return None  # control characters other than line ends
        if n_cr and not np.isin(np.flatnonzero(cr) + 1, newline).all():  # "\r" only in "\r\n"
            return None
        line_start = np.concatenate([[0], newline + 1])
        line_end = np.concatenate([newline, [buf.size]])
        line_end[:-1] -= cr[newline - 1] & (newline > 0)
        commas = np.flatnonzero(buf == 44)
        n = line_start.size
        if commas.size != n * (n_fields - 1):
            return None
        commas = commas.reshape(n, n_fields - 1)
        if n_fields > 1 and not (
            (commas[:, 0] >= line_start).all() and (commas[:, -1] < line_end).all()
        ):  # with the total right, every line then holds exactly n_fields - 1 commas
            return None
        return cls(padded, line_start, line_end, commas)

    def chars(self, k: int) -> np.ndarray:
        """Field ``k`` of every line as a uint8 array (n, widest), padded with zeros."""
        start = self.line_start if k == 0 else self.commas[:, k - 1] + 1
        end = self.line_end if k == self.commas.shape[1] else self.commas[:, k]
        length = end - start
        width = max(int(length.max()), 1)
        if width <= _PAD:  # rows of a sliding window (the padding keeps them inside)
            chars = np.lib.stride_tricks.sliding_window_view(self.buf, width)[start]
        else:
            chars = self.buf[np.minimum(start[:, None] + np.arange(width), self.buf.size - 1)]
        chars[np.arange(width) >= length[:, None]] = 0
        return chars

    def texts(self, k: int) -> np.ndarray:
        """Field ``k`` of every line as a bytes array (dtype ``S``)."""
        chars = self.chars(k)
        return chars.view(f"S{chars.shape[1]}").ravel()

    def numbers(self, k: int) -> np.ndarray | None:
        """Field ``k`` as float64 (Python's ``float`` syntax), or None if any is not finite."""
        try:
            v = self.texts(k).astype(np.float64)
        except ValueError:
            return None
        return v if np.isfinite(v).all() else None

    def digits(self, k: int, pattern: str) -> np.ndarray | None:
        """The digits of field ``k`` where every line matches ``pattern`` ("D" for a digit).

        Returns an int array (n, number of "D"), or None if any line differs.
        """
        chars = self.chars(k)
        if chars.shape[1] != len(pattern) or (chars == 0).any():
            return None
        is_digit = np.array([c == "D" for c in pattern])
        literal = np.frombuffer(pattern.encode("ascii"), np.uint8)
        digits = chars[:, is_digit].astype(np.int64) - 48
        if ((digits < 0) | (digits > 9)).any() or (chars[:, ~is_digit] != literal[~is_digit]).any():
            return None
        return digits

    def stripped(self, k: int) -> np.ndarray:
        """Field ``k`` without surrounding spaces (the only whitespace :meth:`of` lets in)."""
        return np.char.strip(self.texts(k))


def _column(rows: list[list[str]], index: int, name: str, source: str, first_line: int):
    """Column ``index`` of ``rows`` as float64; non-numeric entries raise with their line."""
    texts = [row[index] for row in rows]
    try:
        v = np.array(texts, dtype=np.float64)
    except ValueError:
        v = None
    if v is not None and np.isfinite(v).all():
        return v
    for i, t in enumerate(texts):
        try:
            ok = np.isfinite(float(t))
        except ValueError:
            ok = False
        if not ok:
            raise WeatherFileError(
                f"{t!r} is not a number", file=source, line=first_line + i, field=name
            )
    raise AssertionError("unreachable")  # pragma: no cover


def _expected_calendar(n_records: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Month, day and hour-ending (1..24) of each hour of a full year of ``n_records``."""
    year = REFERENCE_YEAR if n_records == 8760 else REFERENCE_YEAR + 1  # 2024 is leap
    start = pd.Timestamp(year=year, month=1, day=1)
    t = pd.date_range(start, periods=n_records, freq="h")
    return t.month.to_numpy(), t.day.to_numpy(), t.hour.to_numpy() + 1


def _build_climate(
    site: Site,
    month: np.ndarray,
    day: np.ndarray,
    hour: np.ndarray,
    values: dict[str, np.ndarray],
    valid: dict[str, np.ndarray],
    source: str,
    first_line: int,
    field_names: dict[str, str],
) -> Climate:
    """Check the calendar and values, drop Feb 29, place on the reference year."""
    n = len(month)
    if n not in (8760, 8784):
        raise WeatherFileError(
            f"{n} hourly records; a year file must hold 8760 (or 8784 in a leap year). "
            "The file is truncated or not a full hourly year",
            file=source,
            line=first_line + n - 1,
        )
    exp_month, exp_day, exp_hour = _expected_calendar(n)
    wrong = (month != exp_month) | (day != exp_day) | (hour != exp_hour)
    if wrong.any():
        i = int(np.argmax(wrong))
        raise WeatherFileError(
            f"record for month {month[i]:g}, day {day[i]:g}, hour {hour[i]:g} where "
            f"month {exp_month[i]}, day {exp_day[i]}, hour {exp_hour[i]} was expected; "
            "records must run hour by hour from January 1 hour 1 to December 31 hour 24",
            file=source,
            line=first_line + i,
        )

    doy = pd.date_range(pd.Timestamp(year=REFERENCE_YEAR + (n == 8784), month=1, day=1),
                        periods=n, freq="h").day_of_year.to_numpy()  # fmt: skip
    e0n = pvlib.irradiance.get_extra_radiation(doy)  # [W/m2], Spencer (1971)
    for name in (*IRRADIANCE, *ILLUMINANCE):
        v = values[name]
        bad = np.flatnonzero(v < 0)
        if bad.size:
            i = int(bad[0])
            raise WeatherFileError(
                f"negative value {v[i]:g}; irradiance and illuminance cannot be negative "
                "(use the format's missing-value flag for missing data)",
                file=source,
                line=first_line + i,
                field=field_names[name],
            )
    for name in IRRADIANCE:
        v = values[name]
        bad = np.flatnonzero(v > e0n + _ROUNDING)
        if bad.size:
            i = int(bad[0])
            raise WeatherFileError(
                f"value {v[i]:g} W/m2 exceeds the extraterrestrial normal irradiance "
                f"{e0n[i]:.0f} W/m2 of that day; no surface on the ground can receive more. "
                "Check the column order and units",
                file=source,
                line=first_line + i,
                field=field_names[name],
            )

    for name in IRRADIANCE:
        if not valid[name].any():
            raise WeatherFileError(
                "every value is missing (the format's missing-value flag); luxsweep needs "
                "measured or modelled irradiance (GHI, DNI and DHI) for every hour",
                file=source,
                field=field_names[name],
            )

    if n == 8784:
        keep = ~((month == 2) & (day == 29))
        values = {k: v[keep] for k, v in values.items()}
        valid = {k: v[keep] for k, v in valid.items()}

    dropped = []
    for lux, watt in zip(ILLUMINANCE, IRRADIANCE, strict=True):
        ok = valid[lux] & valid[watt] & (values[watt] > EFFICACY_MIN_IRRADIANCE)
        if not ok.any():
            continue
        efficacy = float(np.median(values[lux][ok] / values[watt][ok]))
        if not PLAUSIBLE_EFFICACY[0] <= efficacy <= PLAUSIBLE_EFFICACY[1]:
            dropped.append(f"'{field_names[lux]}' ({efficacy:.3g} lm/W)")
            valid[lux] = np.zeros_like(valid[lux])
            values[lux] = np.full_like(values[lux], np.nan)
    if dropped:
        warnings.warn(
            f"{source}: median luminous efficacy of {', '.join(dropped)} is outside "
            f"{PLAUSIBLE_EFFICACY[0]:g}-{PLAUSIBLE_EFFICACY[1]:g} lm/W (wrong unit or placeholder "
            "values); these columns are ignored and illuminance is modelled from irradiance",
            stacklevel=4,
        )
    wrong = _judge_days(values, valid)
    if wrong:
        n_days = len(set().union(*(days for days, _, _ in wrong.values())))
        n_lit = sum(n for _, n, _ in wrong.values())
        parts = ", ".join(f"'{field_names[name]}' on {len(days)} days ({_day_span(days)}, "
                          f"median efficacy {eff:.3g} lm/W)"
                          for name, (days, _, eff) in wrong.items())
        warnings.warn(
            f"{source}: illuminance not in lux (hundreds of lux or placeholder values, judged "
            f"day by day): {parts}. These {n_lit} values with daylight (on {n_days} days) are "
            "ignored and modelled from irradiance (Perez et al. 1990); the other days are "
            "read as lux",
            stacklevel=4,
        )

    tz = site.tz
    time = pd.date_range(
        pd.Timestamp(year=REFERENCE_YEAR, month=1, day=1, hour=1, tz=tz), periods=8760, freq="h"
    )
    return Climate(
        site=site,
        time=time,
        interval=60,
        **{k: np.ascontiguousarray(values[k], dtype=np.float64) for k in QUANTITIES},
        valid={k: valid[k].copy() for k in QUANTITIES},
        source=source,
    )


def _judge_days(values: dict[str, np.ndarray],
                valid: dict[str, np.ndarray]) -> dict[str, tuple[list[int], int, float]]:
    """Mark invalid, day by day, illuminance records that are not in lux.

    A file may change unit within a column (pvlib's Sand Point TMY3 year holds
    January in hundreds of lux and the other months in lux), so every day of
    every illuminance column still valid is judged on its own: by the median
    luminous efficacy of its records with more than
    :data:`EFFICACY_MIN_IRRADIANCE` W/m² (outside :data:`_UNIT_RANGE`:
    the whole day is not in lux, dim records included, which alone cannot
    tell 21 lx from 21 hundred lux); a day without such a record is judged
    record by record, a positive value being in lux when its efficacy lies in
    :data:`_UNIT_RANGE` give or take the file's whole-W/m² rounding. The range
    is wide on purpose: it tells units apart (a factor of 100), while single
    real days reach 35 lm/W (direct, low sun) and 262 lm/W (diffuse, dark
    overcast) in pvlib's Sand Point year; records outside the narrower
    plausible range are still modelled one by one where the sky is built.
    ``valid`` and ``values`` are changed in place (NaN, invalid).

    Returns
    -------
    dict
        Column name -> (days of the year re-judged, 0-based; their records
        with irradiance > 0; the median efficacy [lm/W] of those days).
    """
    lo, hi = _UNIT_RANGE
    out = {}
    for lux, watt in zip(ILLUMINANCE, IRRADIANCE, strict=True):
        if values[lux].size % 24 or not valid[lux].any():
            continue
        e = values[lux].reshape(-1, 24)
        w = values[watt].reshape(-1, 24)
        both = (valid[lux] & valid[watt]).reshape(-1, 24)
        with np.errstate(divide="ignore", invalid="ignore"):
            k = np.where(both & (w > EFFICACY_MIN_IRRADIANCE), e / w, np.nan)
        judged = np.isfinite(k).any(axis=1)
        median = np.full(len(k), np.nan)
        median[judged] = np.nanmedian(k[judged], axis=1)
        bad = np.zeros(e.shape, dtype=bool)
        bad[judged & ~((median >= lo) & (median <= hi))] = True
        alone = both & ~judged[:, None] & (e > 0)  # dim days: each record on its own
        bad |= alone & ((e < lo * (w - _ROUNDING / 2)) | (e > hi * (w + _ROUNDING / 2)))
        bad &= both
        if bad.any():
            days = np.flatnonzero(bad.any(axis=1))
            lit = int(np.count_nonzero(bad & (w > 0)))
            eff = float(np.nanmedian(k[days])) if np.isfinite(k[days]).any() else float("nan")
            out[lux] = (days.tolist(), lit, eff)
            flat = bad.reshape(-1)
            valid[lux] = valid[lux] & ~flat
            values[lux] = np.where(flat, np.nan, values[lux])
    return out


def _day_span(days: list[int]) -> str:
    """Days of the reference year (0-based) as 'd Mon – d Mon' runs."""
    base = pd.Timestamp(year=REFERENCE_YEAR, month=1, day=1)
    runs, start = [], days[0]
    for a, b in zip(days, [*days[1:], None], strict=True):
        if b != a + 1:
            first, last = (base + pd.Timedelta(days=d) for d in (start, a))
            runs.append(f"{first:%-d %b}" if start == a else f"{first:%-d %b} – {last:%-d %b}")
            start = b
    return ", ".join(runs[:3]) + (", ..." if len(runs) > 3 else "")


# --------------------------------------------------------------------------- file access


def _read_bytes(path: Path) -> bytes:
    try:
        return path.read_bytes()
    except FileNotFoundError as exc:
        raise WeatherFileError(
            "file not found; check the path (relative paths resolve against the study file)",
            file=str(path),
        ) from exc
    except IsADirectoryError as exc:
        raise WeatherFileError("is a folder, not a weather file", file=str(path)) from exc


def _read_text(path: Path) -> str:
    return _decode(_read_bytes(path), str(path))


def _decode(raw: bytes, source: str) -> str:
    """The text of a weather file's bytes (UTF-8, else Latin-1); refuses binary data."""
    if b"\x00" in raw[:65536]:
        raise WeatherFileError(
            "is a binary file, not a text weather file; accepted formats are: "
            + "; ".join(ACCEPTED_FORMATS),
            file=source,
        )
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        pass
    text = raw.decode("latin-1")  # EPW headers are often Latin-1 (accented city names)
    printable = sum(ch.isprintable() or ch in "\r\n\t" for ch in text[:65536])
    if printable < 0.95 * min(len(text), 65536):
        raise WeatherFileError(
            "is not a text file; accepted formats are: " + "; ".join(ACCEPTED_FORMATS),
            file=source,
        )
    return text


def _text_and_source(path_or_buffer: str | os.PathLike | IO[str]) -> tuple[str, str]:
    if isinstance(path_or_buffer, (str, os.PathLike)):
        return _read_text(Path(path_or_buffer)), str(path_or_buffer)
    text = path_or_buffer.read()
    if isinstance(text, bytes):
        text = text.decode("utf-8-sig", errors="replace")
    return text, str(getattr(path_or_buffer, "name", "<buffer>"))


__all__ = [
    "ACCEPTED_FORMATS",
    "EFFICACY_MIN_IRRADIANCE",
    "EPW_FIELDS",
    "PLAUSIBLE_EFFICACY",
    "QUANTITIES",
    "REFERENCE_YEAR",
    "Climate",
    "Site",
    "parse_climate",
    "read_climate",
    "read_epw",
    "read_site",
    "read_tmy3",
]
