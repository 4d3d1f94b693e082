"""How variants, axes, orientations and numbers are written for people.

The ranking table, its CSV, the command line and the report all name a variant
the same way — by its values, not its hash: ``south · humid-piedmont · τ 0.55 ·
window width 5.5 m``. Axis names come from the study's optional ``labels:``
section (``room.windows.0.width: "window width [m]"``) or, without one, from a
short automatic name (the last words of the dotted path, a unit where the key
has one).

Conventions (written once here, used everywhere):

- orientation is the site azimuth of the front façade's outward normal, in
  degrees clockwise from north; the eight compass points are written as words
  (0 north, 90 east, 180 south, 270 west; 45 north-east ...), other angles as
  ``125°``;
- numbers keep up to three significant digits, integers without a decimal
  point; lengths carry ``m``;
- time shares are shown in percent of the occupied (or daylight) time in
  human-facing text; the results store keeps fractions 0–1 where CONTRACT fixes
  them (see :mod:`sweep.store`).
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

__all__ = [
    "EN17037_LEVELS",
    "axis_label",
    "axis_short",
    "display_unit",
    "en17037_text",
    "format_number",
    "metric_heading",
    "metric_text",
    "orientation_text",
    "plural",
    "scoped_metric",
    "value_text",
    "variant_name",
]

_COMPASS = {0: "north", 45: "north-east", 90: "east", 135: "south-east", 180: "south",
            225: "south-west", 270: "west", 315: "north-west"}

EN17037_LEVELS = {
    0: ("none", "the minimum level is not reached"),
    1: ("minimum", "target 300 lx over half of the plane and 100 lx over 95 % of it, "
                   "each for half of the daylight hours"),
    2: ("medium", "target 500 lx over half of the plane and 300 lx over 95 % of it"),
    3: ("high", "target 750 lx over half of the plane and 500 lx over 95 % of it"),
}
"""EN 17037:2018 daylight provision levels (Table A.1; values from memory)."""

# keys (last path component) that hold a length in metres
_LENGTHS = {"width", "depth", "height", "sill", "head", "offset", "thickness", "length",
            "x", "y", "gap", "spacing", "margin", "overhang"}


def plural(count: int, one: str, many: str | None = None) -> str:
    """``1 variant``, ``2 variants`` (``many`` for irregular plurals)."""
    word = one if count == 1 else (many or one + "s")
    return f"{count:,} {word}"


def format_number(value: Any) -> str:
    """A number with up to three significant digits (integers as integers).

    NaN is written as an en dash; non-numbers as ``str``.
    """
    if isinstance(value, bool | np.bool_):
        return "yes" if value else "no"
    if isinstance(value, int | np.integer):
        return f"{int(value):,}" if abs(int(value)) >= 10_000 else str(int(value))
    if isinstance(value, float | np.floating):
        v = float(value)
        if math.isnan(v):
            return "–"
        if v.is_integer() and abs(v) < 1e6:
            return str(int(v))
        if abs(v) >= 100:
            return f"{v:.0f}"
        return f"{v:.3g}"
    return str(value)


def orientation_text(azimuth: Any) -> str:
    """A front-façade orientation [deg from north] as a word or ``125°``."""
    try:
        a = float(azimuth) % 360.0
    except (TypeError, ValueError):
        return str(azimuth)
    if math.isclose(a, round(a)) and round(a) % 360 in _COMPASS:
        return _COMPASS[round(a) % 360]
    return f"{format_number(a)}°"


def _auto_label(axis: str) -> str:
    """Short automatic name of a dotted path: ``room.windows.0.width`` -> ``window width``,
    ``spaces.classroom.windows.0.width`` -> ``classroom window width``."""
    if axis == "orientation":
        return "orientation"
    if axis == "climate":
        return "climate"
    parts = axis.split(".")
    last = parts[-1]
    if parts[0] in ("spaces", "mesh_spaces") and len(parts) >= 3:
        # a key of a named space: the space's name, then the key as for a room
        inner = _auto_label(".".join(["room", *parts[2:]])).removeprefix("room ")
        return f"{parts[1]} {inner}"
    if parts[0] == "glazings" and len(parts) == 3:
        return f"glazing {parts[1]} {last.replace('_', ' ')}"
    owner = next((p for p in reversed(parts[:-1]) if not p.isdigit()), "")
    owner = {"windows": "window", "obstructions": "obstruction", "reflectance": "reflectance",
             "room": "room", "spaces": "space"}.get(owner, owner.replace("_", " "))
    word = last.replace("_", " ")
    if owner == "reflectance":
        return f"{word} reflectance"
    if owner in ("", "room"):
        return f"room {word}" if owner else word
    return f"{owner} {word}"


def _unit(axis: str) -> str:
    return "m" if axis.split(".")[-1] in _LENGTHS else ""


def axis_label(axis: str, labels: Mapping[str, str] | None = None) -> str:
    """The heading of an axis: the study's ``labels:`` entry, else an automatic name
    with its unit in brackets (``window width [m]``)."""
    if labels and axis in labels:
        return str(labels[axis])
    unit = _unit(axis)
    if axis == "orientation":
        return "orientation (front façade)"
    return f"{_auto_label(axis)} [{unit}]" if unit else _auto_label(axis)


def axis_short(axis: str, labels: Mapping[str, str] | None = None) -> str:
    """The axis name used inside a variant name (``labels:`` entry without a unit in
    brackets, else the automatic name)."""
    if labels and axis in labels:
        return re.sub(r"\s*\[[^\]]*\]\s*$", "", str(labels[axis]))
    return _auto_label(axis)


def value_text(axis: str, value: Any) -> str:
    """One axis value as written in tables: orientation as a word, lengths with ``m``."""
    if axis == "orientation":
        return orientation_text(value)
    text = format_number(value)
    unit = _unit(axis)
    return f"{text} {unit}" if unit and text != "–" else text


def variant_name(values: Mapping[str, Any], axes: Sequence[str],
                 labels: Mapping[str, str] | None = None) -> str:
    """A variant named by its values, axes in study order, joined by `` · ``.

    Orientation and climate appear as their values alone (``south``,
    ``humid-piedmont``); a glazing transmittance as ``τ 0.55`` (with the set's
    name when the study has several sets); any other axis as ``name value``.
    """
    sets = {a.split(".")[1] for a in axes if a.startswith("glazings.")}
    parts = []
    for axis in axes:
        value = values[axis]
        if axis in ("orientation", "climate") and not (labels and axis in labels):
            parts.append(value_text(axis, value))
        elif axis.startswith("glazings.") and axis.endswith(".transmittance") and not (
                labels and axis in labels):
            name = axis.split(".")[1]
            parts.append(f"τ {format_number(value)}" + (f" ({name})" if len(sets) > 1 else ""))
        else:
            parts.append(f"{axis_short(axis, labels)} {value_text(axis, value)}")
    return " · ".join(parts) if parts else "the study as written"


def en17037_text(level: Any) -> str:
    """``2 medium`` for an EN 17037 daylight provision level (``–`` when missing)."""
    try:
        k = int(level)
    except (TypeError, ValueError):  # None, NaN
        return "–"
    return f"{k} {EN17037_LEVELS.get(k, ('?', ''))[0]}"


_SHORT = {
    "sda": "sDA",
    "ase": "ASE",
    "udi_useful_mean": "useful daylight, mean",
    "daylight_factor_mean": "daylight factor, mean",
    "daylight_autonomy_mean": "daylight autonomy, mean",
    "en17037_level": "EN 17037 level",
    "sunlight_hours": "sunlight hours",
    "sunlight_level": "sunlight level",
    "view_angle": "sight angle",
    "view_distance": "view distance",
    "view_layers": "view layers",
    "view_level": "view-out level",
    "lighting_energy": "lighting energy",
    "lighting_saving": "lighting saved",
}


_SCOPED = re.compile(r"^(\w+) \((.+)\)$")


def scoped_metric(column: str) -> tuple[str, str]:
    """A ranking column split into its metric and its space scope:
    ``"sda (worst space)"`` → ``("sda", "worst space")``, ``"sda"`` → ``("sda", "")``
    (:attr:`sweep.rank.Objective.column`)."""
    match = _SCOPED.match(column)
    return (match.group(1), match.group(2)) if match else (column, "")


def display_unit(metric: str) -> tuple[float, str]:
    """Scale and unit a metric is shown in: shares of time and of the grid in percent.

    Store values times the scale give the shown value (a share stored as a fraction
    0–1 is shown ×100 in %; :mod:`sweep.registry` marks the shares); other units are
    shown as stored; the EN 17037 level and unregistered names have no unit.
    """
    from luxsweep.sweep.registry import METRICS

    metric = scoped_metric(metric)[0]
    entry = METRICS.get(metric)
    if entry is None or entry.display == "0–3":  # levels and layer counts
        return 1.0, ""
    return (100.0, "%") if entry.share else (1.0, entry.unit)


def metric_heading(metric: str, options: Mapping[str, Any] | None = None) -> str:
    """Short column heading with the shown unit: ``sDA [%]``, ``EN 17037 level``.

    A metric without a short name is headed by its registry label, thresholds
    filled from the study's ``metric_options`` (``options``).
    """
    from luxsweep.sweep.registry import label

    metric, scope = scoped_metric(metric)
    short = _SHORT.get(metric) or label(metric, options)
    short = f"{short}, {scope}" if scope else short
    unit = display_unit(metric)[1]
    return f"{short} [{unit}]" if unit else short


def metric_text(metric: str, value: Any) -> str:
    """A stored metric value as shown (percent for shares, EN 17037 levels in words)."""
    from luxsweep.sweep.registry import LEVEL_METRICS

    metric = scoped_metric(metric)[0]
    if metric in LEVEL_METRICS:
        return en17037_text(value)
    try:
        return format_number(float(value) * display_unit(metric)[0])
    except (TypeError, ValueError):
        return format_number(value)
