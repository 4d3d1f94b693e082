"""The study file (CONTRACT.md §1) as frozen pydantic models, with errors that name places.

A study file is YAML read with :func:`yaml.safe_load` (so a Python object tag is
refused). Its node tree is also composed to map every key path to its line, so
that every problem is reported as ``file, line N, key 'room.windows.0.sill': what
is wrong. What to do.`` through :class:`sweep.errors.StudyFileError`.

Every model is frozen, keyword-only and forbids unknown keys; ``model_dump(mode=
"json")`` followed by ``model_validate`` gives back an equal model (canonical dict
round trip). Relative paths are resolved against the study file's folder at
load time and stored as absolute paths.

Extensions to CONTRACT.md §1 (all optional; documented on the models below):

- ``orientation:`` and ``climate:`` at the top level give the value used when the
  axis is not varied (defaults 180 and the first climate label), so the built-in
  axes are ordinary paths for ``vary``.
- ``glazings.<set>.shaded_transmittance``: normal transmittance of the set with
  its operable shading closed; used for the IES LM-83 sDA shading rule.
- ``vary_together:`` a list of groups ``{path: [values], path2: [values]}``
  whose lists have equal length and are varied in step (zipped), not crossed.
- ``exclude:`` a list of partial assignments ``{path: value, ...}``; a variant
  that matches every entry of one of them is dropped.
- ``metric_options:`` thresholds of the metrics (daylight autonomy threshold, UDI
  band edges, sDA illuminance and time percentage, direct-sun threshold, ASE
  hours limit); names and units in :mod:`sweep.registry`.
- ``compute:`` ray-tracing settings passed to :class:`kernels.coefficients.Settings`
  (sky subdivision, sun-point spacing, ray counts, element size, seed); they
  enter the coefficient key.
- ``labels:`` names for the varied axes in tables and charts
  (``room.windows.0.width: "window width [m]"``); presentation only.
- ``project:`` project, client, author and issue date for the report's cover;
  presentation only.
- mesh rooms: ``mesh:`` (OBJ), ``materials:`` (group -> reflectance or glazing
  set), ``grid.floors:`` (floor groups for the grid) or ``sensors:`` (CSV).
- ``rank.require.<i>.spaces``: a criterion on spaces instead of the building
  total: ``all`` (every occupied space on its own), a space name or a list of
  names (``{metric: sda, at_least: 55, spaces: all}``). Names are checked
  against the study's occupied spaces at plan time
  (:func:`sweep.spaces.check_rank_spaces`, called by ``make_plan``).
- buildings (CONTRACT.md §1b): ``spaces:`` (:class:`Space`, with ``copies``,
  ``occupied`` and a per-space ``grid``) and top-level ``obstructions:``
  instead of ``room:``; for a mesh, ``mesh_spaces:`` (:class:`MeshSpace`: a
  name and the OBJ floor groups it owns) instead of ``grid.floors``.
- ``sunlight:`` the EN 17037 exposure-to-sunlight settings (:class:`Sunlight`:
  the day, 1 February to 21 March, and the minimum sun altitude of the site),
  needed when ``metrics:`` lists ``sunlight``; not varied, out of the variant hash.
- ``metrics:`` may also list the opt-in families ``sunlight`` and ``view_out``
  (EN 17037 exposure to sunlight and view out, per space; parametric rooms and
  buildings only). Left out, ``metrics:`` is the five default families.
"""

from __future__ import annotations

import difflib
import hashlib
import json
import math
import os
import re
import typing
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Annotated, Any, Literal

import yaml
from pydantic import (
    AfterValidator,
    BaseModel,
    ConfigDict,
    Field,
    ValidationError,
    ValidationInfo,
    field_validator,
    model_validator,
)

from luxsweep.sweep import registry
from luxsweep.sweep.errors import LuxsweepError, StudyFileError
from luxsweep.sweep.spaces import ALL_SPACES

__all__ = [
    "ALL_SPACES",
    "LIGHTING_CONTROLS",
    "LIGHTING_DEFAULTS",
    "MAX_NODES",
    "METRIC_FAMILIES",
    "NOT_VARIABLE",
    "RANK_FAMILY",
    "RANK_METRICS",
    "VIEW_MARGIN",
    "WALL_AZIMUTH",
    "Compute",
    "Copies",
    "Glazing",
    "Grid",
    "Lighting",
    "MeshMaterial",
    "MeshSpace",
    "MetricOptions",
    "Obstruction",
    "Occupancy",
    "Overhang",
    "Positive",
    "Preference",
    "Project",
    "Rank",
    "Reflectance",
    "Requirement",
    "Room",
    "Space",
    "Study",
    "StudyFile",
    "Sunlight",
    "View",
    "WeatherFile",
    "Window",
    "canonical_json",
    "cross_check",
    "dotted",
    "json_schema",
    "load_study",
    "parse_study",
    "validation_problems",
    "view_boxes",
    "view_direction",
]

# ---------------------------------------------------------------------------
# helpers shared by the models

METRIC_FAMILIES = registry.FAMILIES
# Top-level keys that describe the sweep or the store layout rather than a
# variant: they cannot be varied, and they stay out of a variant's hash.
NOT_VARIABLE = ("name", "vary", "vary_together", "exclude", "rank", "metrics", "store_series",
                "climates", "labels", "project", "sunlight", "views")

_NAME = re.compile(r"^[A-Za-z0-9_-]+$")
_CLOCK = re.compile(r"^(([01]\d|2[0-3]):[0-5]\d|24:00)$")


class _Model(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


def _resolve_file(value: str, info: ValidationInfo, what: str) -> str:
    """Resolve ``value`` against the study folder (validation context) and check it exists."""
    base = (info.context or {}).get("base")
    path = Path(value).expanduser()
    if not path.is_absolute() and base is not None:
        path = Path(base) / path
    path = Path(os.path.abspath(path))  # as given: symlinks kept (workers see the same name)
    if not path.is_file():
        raise ValueError(
            f"{what} '{value}' does not exist (looked for {path}); give a path relative to "
            "the study file's folder or an absolute path"
        )
    return str(path)


def _unit_interval(value: float, what: str, *, closed_top: bool = False) -> float:
    ok = 0.0 <= value <= 1.0 if closed_top else 0.0 <= value < 1.0
    if not ok:
        top = "1]" if closed_top else "1)"
        raise ValueError(f"{what} must lie in [0, {top}, got {value}")
    return value


Positive = Annotated[float, Field(gt=0)]


def _weather_file(value: str, info: ValidationInfo) -> str:
    return _resolve_file(str(value), info, "weather file")


WeatherFile = Annotated[str, AfterValidator(_weather_file)]

# ---------------------------------------------------------------------------
# room


class Reflectance(_Model):
    """Diffuse reflectances of the interior surfaces of a parametric room (0 to < 1)."""

    floor: float = 0.2
    walls: float = 0.5
    ceiling: float = 0.7

    @field_validator("floor")
    @classmethod
    def _floor(cls, v: float) -> float:
        return _unit_interval(v, "floor reflectance")

    @field_validator("walls")
    @classmethod
    def _walls(cls, v: float) -> float:
        return _unit_interval(v, "wall reflectance")

    @field_validator("ceiling")
    @classmethod
    def _ceiling(cls, v: float) -> float:
        return _unit_interval(v, "ceiling reflectance")


class Window(_Model):
    """A window of a parametric room [m], building frame (CONTRACT.md §1).

    Wall windows (front, back, left, right) use ``width``, ``sill``, ``head`` and
    ``offset``; roof windows use ``width`` (along x), ``length`` (along y) and the
    centre ``x``, ``y``. Whether the window fits its wall is checked by the
    geometry kernel when the room is built.
    """

    wall: Literal["front", "back", "left", "right", "roof"]
    width: Positive
    sill: float | None = None
    head: float | None = None
    offset: float = 0.0
    length: Positive | None = None
    x: float | None = None
    y: float | None = None
    glazing: str

    @field_validator("sill")
    @classmethod
    def _sill(cls, v: float | None) -> float | None:
        if v is not None and v < 0:
            raise ValueError(f"sill height must be >= 0 m, got {v}")
        return v

    @field_validator("head")
    @classmethod
    def _head(cls, v: float | None, info: ValidationInfo) -> float | None:
        sill = info.data.get("sill")
        if v is not None and sill is not None and v <= sill:
            raise ValueError(f"head ({v} m) must be above the sill ({sill} m)")
        return v

    @field_validator("glazing")
    @classmethod
    def _glazing(cls, v: str) -> str:
        if not _NAME.match(v):
            raise ValueError(f"glazing set name '{v}' may hold only letters, digits, '-' and '_'")
        return v


class Overhang(_Model):
    """A slab above the front windows: projection ``depth``, ``gap`` above the head [m]."""

    depth: Positive
    gap: float = 0.0

    @field_validator("gap")
    @classmethod
    def _gap(cls, v: float) -> float:
        if v < 0:
            raise ValueError(f"overhang gap must be >= 0 m, got {v}")
        return v


class Obstruction(_Model):
    """An exterior box on the ground: footprint centre ``x``, ``y``; size [m]."""

    x: float
    y: float
    width: Positive
    depth: Positive
    height: Positive


class Room(_Model):
    """A parametric box room [m] (CONTRACT.md §1): front façade at y = 0, normal −y."""

    width: Positive
    depth: Positive
    height: Positive
    thickness: float = 0.0
    reflectance: Reflectance = Reflectance()
    windows: list[Window] = Field(min_length=1)
    overhang: Overhang | None = None
    obstructions: list[Obstruction] = []

    @field_validator("thickness")
    @classmethod
    def _thickness(cls, v: float) -> float:
        if v < 0:
            raise ValueError(f"wall thickness must be >= 0 m, got {v}")
        return v


LIGHTING_CONTROLS = ("none", "on_off", "dimming", "dimming_off")
"""Daylight-linked lighting controls (:data:`kernels.lighting.CONTROLS`, checked by a test)."""

LIGHTING_DEFAULTS: dict[str, Any] = {"control": "dimming", "min_power": 0.1, "min_light": 0.1,
                                     "control_point": "median"}
"""Values of the ``lighting:`` keys a study leaves out (``power_density`` and ``target``
have none: they must be given)."""


class Lighting(_Model):
    """Extension ``lighting:``: electric lighting with daylight-linked control.

    At the top level it applies to every occupied space; a ``lighting:`` in a
    ``spaces:`` item overrides the keys it gives for that space (and its
    copies). ``power_density`` [W/m²] installed lighting power per floor area
    and ``target`` [lx] the illuminance the lights top daylight up to must be
    given (here or at the top level); ``control`` none | on_off | dimming |
    dimming_off (default dimming); ``min_power`` [0–1) the power fraction of
    dimmed lights at their lowest output ``min_light`` [0–1) (defaults 0.1
    and 0.1, dimming controls only); ``control_point`` ``median`` (the sensor
    of the space whose daylight factor is the space's median) or ``[x, y]``
    [m] in the space's own frame (a ``room:`` study: the building frame), read
    at the nearest sensor of the space's grid. Listed under ``metrics:`` as
    ``lighting``; neither is accepted without the other.
    """

    power_density: float | None = None
    target: float | None = None
    control: Literal[LIGHTING_CONTROLS] | None = None  # type: ignore[valid-type]
    min_power: float | None = None
    min_light: float | None = None
    control_point: Literal["median"] | tuple[float, float] | None = None

    @field_validator("power_density")
    @classmethod
    def _power_density(cls, v: float | None) -> float | None:
        if v is not None and not (math.isfinite(v) and 0.0 < v <= 100.0):
            raise ValueError(f"power_density is installed lighting power in W per m² of floor "
                             f"(typically 2 to 15), in (0, 100]; got {v}")
        return v

    @field_validator("target")
    @classmethod
    def _target(cls, v: float | None) -> float | None:
        if v is not None and not (math.isfinite(v) and 0.0 < v <= 5000.0):
            raise ValueError(f"target is the illuminance the lights keep, in lux (typically "
                             f"300 or 500), in (0, 5000]; got {v}")
        return v

    @field_validator("min_power", "min_light")
    @classmethod
    def _fraction(cls, v: float | None, info: ValidationInfo) -> float | None:
        return None if v is None else _unit_interval(v, str(info.field_name))

    @field_validator("control_point")
    @classmethod
    def _control_point(cls, v: Any) -> Any:
        if isinstance(v, tuple) and not all(math.isfinite(c) for c in v):
            raise ValueError(f"control_point [x, y] must be finite metres, got {list(v)}")
        return v

    def over(self, base: Lighting | None) -> dict[str, Any]:
        """These settings over ``base`` (a top-level block) over the defaults, as a dict."""
        out = dict(LIGHTING_DEFAULTS, power_density=None, target=None)
        for block in (base, self):
            if block is not None:
                out.update({k: v for k, v in block.model_dump().items() if v is not None})
        return out


class Copies(_Model):
    """CONTRACT.md §1b ``copies:``: ``count`` copies, the k-th shifted by (k-1)·step [m]."""

    count: int = Field(ge=1, le=1000)
    step: tuple[float, float, float]


class Space(_Model):
    """A parametric space of a building (CONTRACT.md §1b) [m], in its own frame.

    Every key of :class:`Room` except ``obstructions`` (top level in a spaces
    study), plus ``name``, ``origin`` (building-frame position of the space's
    front-left interior floor corner), ``copies``, ``occupied`` and its own
    ``grid``. A space may have no windows (a corridor lit through internal
    openings, or an unoccupied space that only shades).
    """

    name: str
    origin: tuple[float, float, float] = (0.0, 0.0, 0.0)
    width: Positive
    depth: Positive
    height: Positive
    thickness: float = 0.0
    reflectance: Reflectance = Reflectance()
    windows: list[Window] = []
    overhang: Overhang | None = None
    copies: Copies | None = None
    occupied: bool = True
    grid: Grid | None = None
    lighting: Lighting | None = None

    @field_validator("name")
    @classmethod
    def _name(cls, v: str) -> str:
        if not _NAME.match(v):
            raise ValueError(f"space name '{v}' may hold only letters, digits, '-' and '_'")
        return v

    @field_validator("thickness")
    @classmethod
    def _thickness(cls, v: float) -> float:
        if v < 0:
            raise ValueError(f"wall thickness must be >= 0 m, got {v}")
        return v

    def expanded(self) -> list[tuple[str, tuple[float, float, float]]]:
        """``(name, origin)`` of every copy: ``name`` alone, or ``name-1`` … ``name-N``."""
        if self.copies is None:
            return [(self.name, self.origin)]
        return [(f"{self.name}-{k + 1}",
                 tuple(o + k * d for o, d in zip(self.origin, self.copies.step, strict=True)))
                for k in range(self.copies.count)]  # type: ignore[misc]


class MeshSpace(_Model):
    """Extension ``mesh_spaces:``: a space of a mesh study, named by its OBJ floor groups.

    Each space owns the sensor grid laid over its ``floors`` (the study's
    ``grid:`` settings, or its own ``grid:`` without ``floors``).
    """

    name: str
    floors: list[str] = Field(min_length=1)
    grid: Grid | None = None

    @field_validator("name")
    @classmethod
    def _name(cls, v: str) -> str:
        if not _NAME.match(v):
            raise ValueError(f"space name '{v}' may hold only letters, digits, '-' and '_'")
        return v


class MeshMaterial(_Model):
    """An OBJ group: an opaque surface with ``reflectance`` or a window of a ``glazing`` set."""

    reflectance: float | None = None
    glazing: str | None = None

    @field_validator("reflectance")
    @classmethod
    def _reflectance(cls, v: float | None) -> float | None:
        return None if v is None else _unit_interval(v, "reflectance")

    @field_validator("glazing")
    @classmethod
    def _glazing(cls, v: str | None, info: ValidationInfo) -> str | None:
        if v is not None and info.data.get("reflectance") is not None:
            raise ValueError("give either 'reflectance' or 'glazing' for a group, not both")
        return v


class Glazing(_Model):
    """A glazing set: normal ``transmittance`` (0–1], ``panes`` (0 = unglazed opening).

    Extension: ``shaded_transmittance`` is the set's normal transmittance with its
    operable shading closed; when given, sDA follows the IES LM-83-12 rule
    (shading closed in any hour where more than 2 % of sensors get more than
    1000 lx of direct sun).
    """

    transmittance: float
    panes: int = 2
    shaded_transmittance: float | None = None

    @field_validator("transmittance")
    @classmethod
    def _transmittance(cls, v: float) -> float:
        if not 0.0 < v <= 1.0:
            raise ValueError(f"transmittance must lie in (0, 1], got {v}")
        return v

    @field_validator("panes")
    @classmethod
    def _panes(cls, v: int) -> int:
        if not 0 <= v <= 4:
            raise ValueError(f"panes must be 0 (an opening) to 4, got {v}")
        return v

    @field_validator("shaded_transmittance")
    @classmethod
    def _shaded(cls, v: float | None, info: ValidationInfo) -> float | None:
        if v is None:
            return v
        tau = info.data.get("transmittance")
        if not 0.0 <= v <= (tau if tau is not None else 1.0):
            raise ValueError(
                f"shaded_transmittance must lie in [0, transmittance = {tau}], got {v}"
            )
        return v


class Grid(_Model):
    """Sensor grid on the working plane [m]; ``floors`` names the floor groups of a mesh room."""

    height: float = 0.8
    spacing: Positive = 0.5
    margin: float = 0.5
    floors: list[str] | None = None

    @field_validator("height")
    @classmethod
    def _height(cls, v: float) -> float:
        if v < 0:
            raise ValueError(f"grid height must be >= 0 m, got {v}")
        return v

    @field_validator("margin")
    @classmethod
    def _margin(cls, v: float) -> float:
        if v < 0:
            raise ValueError(f"grid margin must be >= 0 m, got {v}")
        return v

    @field_validator("floors")
    @classmethod
    def _floors(cls, v: list[str] | None) -> list[str] | None:
        if v is not None and not v:
            raise ValueError("list at least one floor group, or leave 'floors' out")
        return v


class Occupancy(_Model):
    """Occupied period in local standard time: ``start``, ``end`` ("HH:MM"), ``days``."""

    start: str = "08:00"
    end: str = "18:00"
    days: Literal["weekdays", "all"] = "weekdays"

    @field_validator("start")
    @classmethod
    def _start(cls, v: str) -> str:
        if not _CLOCK.match(str(v)):
            raise ValueError(f"start must be a time \"HH:MM\" (quoted), got {v!r}")
        return v

    @field_validator("end")
    @classmethod
    def _end(cls, v: str, info: ValidationInfo) -> str:
        if not _CLOCK.match(str(v)):
            raise ValueError(f"end must be a time \"HH:MM\" (quoted), got {v!r}")
        start = info.data.get("start")
        if start is not None and v <= start:
            raise ValueError(f"end ({v}) must be later than start ({start})")
        return v


_MONTH_DAY = re.compile(r"^(\d\d)-(\d\d)$")


class Sunlight(_Model):
    """Extension ``sunlight:``: EN 17037 exposure to sunlight (``metrics: [..., sunlight]``).

    ``day`` is "MM-DD" between 1 February and 21 March (EN 17037:2018, from
    memory), default "03-21"; ``min_altitude`` [deg] is the sun altitude below
    which the sun does not count: one value, or one per climate label (the
    climates of a study may lie at different latitudes). The standard tabulates
    it by site latitude in a national-annex table that luxsweep does not
    reproduce, so it has no default: a study that asks for sunlight must give it.
    """

    day: str = "03-21"
    min_altitude: float | dict[str, float]

    @field_validator("day", mode="before")
    @classmethod
    def _day(cls, v: Any) -> Any:
        match = _MONTH_DAY.match(str(v))
        month, day = (int(match.group(1)), int(match.group(2))) if match else (0, 0)
        if not match or not ((month == 2 and 1 <= day <= 28) or (month == 3 and 1 <= day <= 21)):
            raise ValueError(f"day must be \"MM-DD\" (quoted) between \"02-01\" and \"03-21\" "
                             f"(EN 17037 takes a day from 1 February to 21 March), got {v!r}")
        return str(v)

    @field_validator("min_altitude")
    @classmethod
    def _min_altitude(cls, v: float | dict[str, float]) -> float | dict[str, float]:
        for label, value in (v.items() if isinstance(v, dict) else [("", v)]):
            if not 0.0 <= value <= 45.0:
                where = f" for climate '{label}'" if label else ""
                raise ValueError(f"min_altitude{where} is a sun altitude in degrees from 0 to "
                                 f"45 (the standard's value for the site's latitude), got {value}")
        return v

    def altitude(self, climate: str) -> float:
        """Minimum sun altitude [deg] for the climate labelled ``climate``."""
        m = self.min_altitude
        return float(m[climate] if isinstance(m, dict) else m)


class Project(_Model):
    """Extension ``project:``: what the report's cover names (presentation only).

    All fields are optional free text; ``issue_date`` is a date such as
    "2026-12-04" (written as given).
    """

    project: str | None = Field(None, max_length=200, description="Project name on the cover.")
    client: str | None = Field(None, max_length=200, description="Client on the cover.")
    author: str | None = Field(None, max_length=200, description="Author or firm on the cover.")
    issue_date: str | None = Field(None, max_length=40,
                                   description="Issue date on the cover, as written.")
    reference: str | None = Field(None, max_length=80,
                                  description="Document or revision reference on the cover.")

    @field_validator("issue_date", mode="before")
    @classmethod
    def _issue_date(cls, v: Any) -> Any:
        return v.isoformat() if hasattr(v, "isoformat") else v  # YAML reads 2026-12-04 as a date


class MetricOptions(_Model):
    """Extension ``metric_options:``: thresholds of the metrics [lx, h, %].

    Defaults (:data:`sweep.registry.DEFAULT_THRESHOLDS`): daylight autonomy at
    300 lx; UDI band edges 100, 300, 3000 lx (Nabil & Mardaljevic 2005); sDA
    300 lx (``sda_illuminance``) for 50 % of the analysis hours
    (``sda_time_percent``) and ASE above 1000 lx of direct sun (``sun_threshold``,
    also the level of ``direct_sun_hours``) for more than 250 h
    (``ase_hours_limit``) (IES LM-83-12). The former spellings
    ``ase_illuminance``, ``ase_hours`` and ``sda_time_fraction`` (a percentage)
    are read with a warning naming the new key.
    """

    daylight_autonomy: Positive = registry.DEFAULT_THRESHOLDS["daylight_autonomy"]
    udi_edges: tuple[float, float, float] = registry.DEFAULT_THRESHOLDS["udi_edges"]
    sda_illuminance: Positive = registry.DEFAULT_THRESHOLDS["sda_illuminance"]
    sda_time_percent: float = registry.DEFAULT_THRESHOLDS["sda_time_percent"]
    sun_threshold: Positive = registry.DEFAULT_THRESHOLDS["sun_threshold"]
    ase_hours_limit: Positive = registry.DEFAULT_THRESHOLDS["ase_hours_limit"]

    @model_validator(mode="before")
    @classmethod
    def _former_spellings(cls, data: Any) -> Any:
        if not isinstance(data, dict):
            return data
        for old, new in registry.RENAMED_OPTIONS.items():
            if old in data:
                warnings.warn(f"metric_options: '{old}' is now spelled '{new}' (same value and "
                              "unit); rename the key", FutureWarning, stacklevel=2)
        return registry.renamed_options(data)

    @field_validator("udi_edges")
    @classmethod
    def _udi(cls, v: tuple[float, float, float]) -> tuple[float, float, float]:
        if not 0 < v[0] < v[1] < v[2]:
            raise ValueError(f"UDI band edges must be positive and increasing, got {list(v)}")
        return v

    @field_validator("sda_time_percent")
    @classmethod
    def _percent(cls, v: float) -> float:
        if not 0 < v <= 100:
            raise ValueError(f"sda_time_percent is a percentage in (0, 100], got {v}")
        return v


class Compute(_Model):
    """Extension ``compute:``: ray-tracing settings for :class:`kernels.coefficients.Settings`.

    Every key left out takes the kernel's default. All of them change the
    coefficient matrices and so enter the coefficient key.
    ``subdivision`` 1 = Tregenza 145 patches, n = Reinhart subdivision n (144 n² + 1 patches);
    ``sun_spacing`` [deg] between sun points; ray counts per patch / element /
    sensor; ``element_size`` [m] of the reflected-light mesh;
    ``reflected_sun_spacing`` [deg] of the coarse sun points of the reflected
    sun family; ``seed``; ``max_elements``, the element budget of the
    reflected part (elements grow past ``element_size`` to fit it);
    ``memory_limit`` [GiB] of one coefficient computation; ``target_error``,
    a target relative standard error of the daylight factor (a fraction:
    0.01 = 1 %; 0 = off) from which the sensor ray counts are chosen.
    """

    subdivision: int | None = None
    sun_spacing: Positive | None = None
    sky_rays_per_patch: int | None = None
    ground_rays: int | None = None
    element_size: Positive | None = None
    element_rays: int | None = None
    sensor_rays: int | None = None
    reflected_sun_spacing: Positive | None = None
    seed: int | None = None
    max_elements: int | None = None
    memory_limit: Positive | None = None
    target_error: float | None = None

    @field_validator("subdivision")
    @classmethod
    def _subdivision(cls, v: int | None) -> int | None:
        if v is not None and not 1 <= v <= 8:
            raise ValueError(f"subdivision must be 1 (Tregenza 145) to 8, got {v}")
        return v

    @field_validator("sky_rays_per_patch", "ground_rays", "element_rays", "sensor_rays")
    @classmethod
    def _ray_count(cls, v: int | None, info: ValidationInfo) -> int | None:
        return _positive_count(v, info.field_name)

    @field_validator("max_elements")
    @classmethod
    def _max_elements(cls, v: int | None) -> int | None:
        if v is not None and v < 100:
            raise ValueError(f"max_elements must be at least 100 (default 3000), got {v}")
        return v

    @field_validator("target_error")
    @classmethod
    def _target_error(cls, v: float | None) -> float | None:
        if v is not None and not (math.isfinite(v) and 0.0 <= v < 0.5):
            raise ValueError(
                f"target_error is a fraction (0.01 for 1 %; 0 switches it off) below 0.5, "
                f"got {v!r}")
        return v

    @field_validator("seed")
    @classmethod
    def _seed(cls, v: int | None) -> int | None:
        if v is not None and v < 0:
            raise ValueError(f"seed must be >= 0, got {v}")
        return v

    def settings_kwargs(self) -> dict[str, Any]:
        """Keyword arguments for :class:`kernels.coefficients.Settings` (only the keys given)."""
        return {k: v for k, v in self.model_dump().items() if v is not None}


def _positive_count(v: int | None, what: str) -> int | None:
    if v is not None and v < 1:
        raise ValueError(f"{what} must be at least 1, got {v}")
    return v


RANK_METRICS = registry.rank_metrics()
"""Per-variant results that ranking criteria and objectives may name."""
RANK_FAMILY = {name: registry.METRICS[name].family for name in RANK_METRICS}
"""Rankable result -> the metric family that computes it."""


def _rank_metric(v: str) -> str:
    if v not in RANK_METRICS:
        close = difflib.get_close_matches(v, RANK_METRICS, n=1)
        hint = f"did you mean '{close[0]}'? " if close else ""
        raise ValueError(f"unknown metric '{v}'; {hint}valid metrics: {', '.join(RANK_METRICS)}")
    return v


def _space_scope(v: str | list[str] | None) -> str | list[str] | None:
    """The ``spaces`` of a criterion or objective: ``all``, a name or a list of names."""
    names = [v] if isinstance(v, str) else (v or [])
    if isinstance(v, list) and not v:
        raise ValueError("give at least one space name, or 'all'")
    if isinstance(v, list) and ALL_SPACES in v:
        raise ValueError(f"'{ALL_SPACES}' stands alone: spaces: {ALL_SPACES}")
    for name in names:
        if not _NAME.match(name):
            raise ValueError(f"space name '{name}' may hold only letters, digits, '-' and "
                             "'_'")
    if len(set(names)) != len(names):
        raise ValueError(f"space names repeat: {names}")
    return v


class Requirement(_Model):
    """A ranking criterion: ``{metric, at_least}`` or ``{metric, at_most}``, on the
    building total (default) or on spaces (``spaces: all``, a name or a list of names;
    names are checked against the study's spaces by :func:`sweep.spaces.check_rank_spaces`)."""

    metric: str
    at_least: float | None = None
    at_most: float | None = None
    spaces: str | list[str] | None = None

    @field_validator("metric")
    @classmethod
    def _metric(cls, v: str) -> str:
        return _rank_metric(v)

    @field_validator("spaces")
    @classmethod
    def _spaces(cls, v: str | list[str] | None) -> str | list[str] | None:
        return _space_scope(v)

    @field_validator("at_most")
    @classmethod
    def _bound(cls, v: float | None, info: ValidationInfo) -> float | None:
        if (v is None) == (info.data.get("at_least") is None):
            raise ValueError("give exactly one of 'at_least' or 'at_most'")
        return v


class Preference(_Model):
    """A ranking objective: ``{metric, goal: max|min, weight}``, on the building total
    (default), on one space (``spaces: name``) or on the worst of several (``spaces:
    all`` or a list of names; :class:`sweep.rank.Objective`)."""

    metric: str
    goal: Literal["max", "min"] = "max"
    weight: float = 1.0
    spaces: str | list[str] | None = None

    @field_validator("metric")
    @classmethod
    def _metric(cls, v: str) -> str:
        return _rank_metric(v)

    @field_validator("spaces")
    @classmethod
    def _spaces(cls, v: str | list[str] | None) -> str | list[str] | None:
        return _space_scope(v)

    @field_validator("weight")
    @classmethod
    def _weight(cls, v: float) -> float:
        if v < 0:
            raise ValueError(f"weight must be >= 0, got {v}")
        return v


class Rank(_Model):
    """Criteria (``require``) and objectives (``prefer``) read by ``luxsweep rank``."""

    require: list[Requirement] = []
    prefer: list[Preference] = []


# ---------------------------------------------------------------------------
# the study


class View(_Model):
    """A view position for glare (extension ``views:``) [m, deg], building frame.

    An eye at ``height`` above the floor of ``space`` at building-frame ``x``,
    ``y``, looking horizontally towards ``direction``: a building-frame
    azimuth in degrees, clockwise from building +y (0 towards the back wall,
    90 towards +x, 180 towards the front façade, 270 towards x = 0), or
    ``window``: square on to the space's largest wall window, looking out.
    The eye's sensor faces that direction (a vertical plane at the eye).
    """

    name: str
    space: str | None = None
    x: float
    y: float
    height: Positive = 1.2
    direction: float | Literal["window"] = "window"

    @field_validator("name")
    @classmethod
    def _name(cls, v: str) -> str:
        if not _NAME.match(v):
            raise ValueError(f"view name '{v}' may hold only letters, digits, '-' and '_'")
        return v

    @field_validator("direction")
    @classmethod
    def _direction(cls, v: float | str) -> float | str:
        if not isinstance(v, str) and not (math.isfinite(v) and 0.0 <= v < 360.0):
            raise ValueError(f"direction {v} is not a building-frame azimuth; give degrees "
                             "from 0 to below 360 (0 towards the back wall, 180 towards the "
                             "front facade) or 'window'")
        return v


class Study(_Model):
    """A study file (CONTRACT.md §1) with the extensions listed in the module docstring.

    A room is either ``room:`` (parametric) or ``mesh:`` + ``materials:`` (OBJ).
    ``orientation`` [deg] and ``climate`` are the values used when the built-in
    axes are not varied (180 and the first climate label by default).
    """

    name: str
    climates: dict[str, WeatherFile] = Field(min_length=1)
    room: Room | None = None
    spaces: list[Space] | None = None
    obstructions: list[Obstruction] = []
    mesh: str | None = None
    mesh_spaces: list[MeshSpace] | None = None
    materials: dict[str, MeshMaterial] | None = None
    sensors: str | None = None
    glazings: dict[str, Glazing] = Field(min_length=1)
    ground_reflectance: float = 0.2
    grid: Grid = Grid()
    occupancy: Occupancy = Occupancy()
    timestep: int = 60
    orientation: float = 180.0
    climate: str | None = None
    vary: dict[str, list[Any]] = {}
    vary_together: list[dict[str, list[Any]]] = []
    exclude: list[dict[str, Any]] = []
    metrics: list[Literal[METRIC_FAMILIES]] = list(  # type: ignore[valid-type]
        registry.DEFAULT_FAMILIES)
    views: list[View] | None = None
    metric_options: MetricOptions = MetricOptions()
    sunlight: Sunlight | None = None
    compute: Compute = Compute()
    store_series: bool = False
    lighting: Lighting | None = None
    rank: Rank | None = None
    labels: dict[str, str] = {}
    project: Project | None = None

    @field_validator("name")
    @classmethod
    def _name(cls, v: str) -> str:
        if not _NAME.match(v):
            raise ValueError(f"name '{v}' may hold only letters, digits, '-' and '_'")
        return v

    @field_validator("climates")
    @classmethod
    def _climates(cls, v: dict[str, str]) -> dict[str, str]:
        for label in v:
            if not _NAME.match(str(label)):
                raise ValueError(f"climate label '{label}' may hold only letters, digits, '-', '_'")
        return v

    @field_validator("mesh")
    @classmethod
    def _mesh(cls, v: str | None, info: ValidationInfo) -> str | None:
        return None if v is None else _resolve_file(v, info, "mesh file")

    @field_validator("materials")
    @classmethod
    def _materials(cls, v: dict[str, MeshMaterial] | None) -> dict[str, MeshMaterial] | None:
        if v is not None and not v:
            raise ValueError("map each OBJ group to {reflectance: r} or {glazing: set}")
        return v

    @field_validator("sensors")
    @classmethod
    def _sensors(cls, v: str | None, info: ValidationInfo) -> str | None:
        return None if v is None else _resolve_file(v, info, "sensor file")

    @field_validator("glazings")
    @classmethod
    def _glazings(cls, v: dict[str, Glazing]) -> dict[str, Glazing]:
        for name in v:
            if not _NAME.match(str(name)):
                raise ValueError(
                    f"glazing set name '{name}' may hold only letters, digits, '-', '_'"
                )
        return v

    @field_validator("ground_reflectance")
    @classmethod
    def _ground(cls, v: float) -> float:
        return _unit_interval(v, "ground_reflectance")

    @field_validator("timestep")
    @classmethod
    def _timestep(cls, v: int) -> int:
        if v <= 0 or 60 % v:
            raise ValueError(f"timestep must divide 60 minutes (60, 30, 20, 15, 10, 5...), got {v}")
        return v

    @field_validator("orientation")
    @classmethod
    def _orientation(cls, v: float) -> float:
        if not 0.0 <= v < 360.0:
            raise ValueError(f"orientation is a site azimuth in [0, 360) degrees, got {v}")
        return v

    @field_validator("climate")
    @classmethod
    def _climate(cls, v: str | None, info: ValidationInfo) -> str | None:
        labels = info.data.get("climates")
        if v is not None and labels is not None and v not in labels:
            raise ValueError(f"climate '{v}' is not a label of 'climates' ({', '.join(labels)})")
        return v

    @field_validator("vary")
    @classmethod
    def _vary(cls, v: dict[str, list[Any]]) -> dict[str, list[Any]]:
        for path in v:
            if not isinstance(path, str) or not path:
                raise ValueError(f"vary keys are dotted paths, got {path!r}")
        return v

    @field_validator("vary_together")
    @classmethod
    def _together(cls, v: list[dict[str, list[Any]]]) -> list[dict[str, list[Any]]]:
        for i, group in enumerate(v):
            lengths = {len(values) for values in group.values()}
            if len(lengths) > 1:
                raise ValueError(
                    f"group {i}: the lists varied together must have equal lengths, "
                    f"got {[len(x) for x in group.values()]}"
                )
        return v

    @field_validator("exclude")
    @classmethod
    def _exclude(cls, v: list[dict[str, Any]]) -> list[dict[str, Any]]:
        for i, entry in enumerate(v):
            if not entry:
                raise ValueError(f"exclusion {i} is empty; give {{path: value, ...}}")
        return v

    @field_validator("metrics")
    @classmethod
    def _metrics(cls, v: list[str]) -> list[str]:
        if not v:
            raise ValueError(f"list at least one metric of {', '.join(METRIC_FAMILIES)}")
        return v

    @field_validator("views")
    @classmethod
    def _views(cls, v: list[View] | None) -> list[View] | None:
        if v is not None and not v:
            raise ValueError("list at least one view {name, x, y}, or leave 'views' out")
        return v

    @field_validator("store_series")
    @classmethod
    def _store_series(cls, v: bool) -> bool:
        return v

    @field_validator("rank")
    @classmethod
    def _rank(cls, v: Rank | None) -> Rank | None:
        return v

    @field_validator("spaces")
    @classmethod
    def _spaces(cls, v: list[Space] | None) -> list[Space] | None:
        if v is not None and not v:
            raise ValueError("list at least one space, or use 'room:'")
        return v

    @field_validator("mesh_spaces")
    @classmethod
    def _mesh_spaces(cls, v: list[MeshSpace] | None) -> list[MeshSpace] | None:
        if v is not None and not v:
            raise ValueError("list at least one space {name, floors}, or leave it out")
        return v

    # -- derived ------------------------------------------------------------
    @property
    def default_climate(self) -> str:
        """Climate label used when ``climate`` is not varied."""
        return self.climate if self.climate is not None else next(iter(self.climates))

    def canonical(self) -> dict[str, Any]:
        """The canonical JSON-able dict (round-trips through :meth:`model_validate`).

        The building keys added after the first stores (``spaces``,
        ``obstructions``, ``mesh_spaces``) appear only when given, so a study
        without them has the same canonical form, and the same variant ids,
        as before they existed.
        """
        data = self.model_dump(mode="json")
        for key, empty in _LATER_KEYS.items():
            if data.get(key) == empty:
                del data[key]
        compute = data.get("compute")
        if isinstance(compute, dict):
            for key in _LATER_COMPUTE_KEYS:
                if compute.get(key, 0) is None:
                    del compute[key]
        for item in (data.get("rank") or {}).get("require") or []:
            if isinstance(item, dict) and item.get("spaces", 0) is None:
                del item["spaces"]
        for item in data.get("spaces") or []:
            if isinstance(item, dict) and item.get("lighting", 0) is None:
                del item["lighting"]
        return data


_LATER_KEYS: dict[str, Any] = {"spaces": None, "obstructions": [], "mesh_spaces": None,
                               "sunlight": None, "lighting": None, "views": None}
"""Study keys left out of the canonical form when at their default (see Study.canonical)."""

_LATER_COMPUTE_KEYS = ("max_elements", "memory_limit", "target_error")
"""``compute`` keys left out of the canonical form when not given (likewise a
criterion's ``spaces``)."""


# ---------------------------------------------------------------------------
# cross-field checks (the place of each problem is a key path)


def cross_check(study: Study) -> list[tuple[tuple, str]]:
    """Problems that involve several fields, as ``(key path, message)`` pairs."""
    problems: list[tuple[tuple, str]] = []
    given = [k for k in ("room", "spaces", "mesh") if getattr(study, k) is not None]
    if len(given) != 1:
        where = (given[1],) if len(given) > 1 else ()
        both = f" (this study gives {' and '.join(given)})" if given else ""
        problems.append((where, "give exactly one of 'room:' (a parametric room), 'spaces:' "
                         f"(a building of parametric spaces) or 'mesh:' (an OBJ file){both}"))
    if study.obstructions and study.spaces is None:
        problems.append((("obstructions",), "top-level 'obstructions' belong to a 'spaces:' "
                         "study; put them under 'room.obstructions' for a room, or in the "
                         "OBJ file for a mesh"))
    if study.mesh_spaces is not None and study.mesh is None:
        problems.append((("mesh_spaces",), "'mesh_spaces' names OBJ groups of a mesh study; "
                         "use 'spaces:' for parametric spaces"))
    if study.spaces is not None:
        problems += _space_problems(study)
    if study.room is not None:
        for key in ("materials", "sensors"):
            if getattr(study, key) is not None:
                problems.append(
                    ((key,), f"'{key}' belongs to a mesh room; remove it or use 'mesh:'")
                )
        if study.grid.floors is not None:
            problems.append((("grid", "floors"), "'floors' names OBJ groups of a mesh room; "
                             "remove it for a parametric room"))
        if study.grid.height >= study.room.height:
            problems.append((("grid", "height"),
                             f"the working plane at {study.grid.height:g} m lies at or above the "
                             f"ceiling (room height {study.room.height:g} m), where every sensor "
                             "would read 0 lx; give a height between 0 and the room height"))
        problems += _window_problems(study, study.room.windows, ("room",))
    if study.mesh is not None:
        if not study.materials:
            problems.append((("mesh",), "a mesh room needs 'materials:' mapping its OBJ groups"))
        for group, m in (study.materials or {}).items():
            if m.glazing is None and m.reflectance is None:
                problems.append((("materials", group),
                                 "give {reflectance: r} or {glazing: set} for this group"))
            if m.glazing is not None and m.glazing not in study.glazings:
                problems.append(
                    (("materials", group, "glazing"),
                     f"glazing set '{m.glazing}' is not defined under 'glazings'")
                )
        if study.mesh_spaces is not None:
            problems += _mesh_space_problems(study)
        elif study.sensors is None and study.grid.floors is None:
            problems.append((("grid",), "a mesh room needs 'grid: {floors: [group, ...]}', "
                             "'mesh_spaces:' or 'sensors: points.csv'"))
    problems += _geometry_family_problems(study)
    problems += _view_problems(study)
    for i, req in enumerate(study.rank.require if study.rank else []):
        if req.at_least is None and req.at_most is None:
            problems.append((("rank", "require", i), "give 'at_least' or 'at_most'"))
    problems += _lighting_problems(study)
    for part in ("require", "prefer"):
        for i, item in enumerate(getattr(study.rank, part) if study.rank else []):
            family = RANK_FAMILY[item.metric]
            if family not in study.metrics:
                problems.append(((("rank", part, i, "metric")),
                                 f"'{item.metric}' is computed by the metric family "
                                 f"'{family}', which is not listed under 'metrics'; add it"))
    return problems


def _geometry_family_problems(study: Study) -> list[tuple[tuple, str]]:
    """The EN 17037 sunlight and view-out families: a parametric room or building (their
    window reference points and view positions come from its boxes and windows), and
    the ``sunlight:`` settings when sunlight is asked for."""
    problems: list[tuple[tuple, str]] = []
    for i, family in enumerate(study.metrics):
        if family in registry.GEOMETRY_FAMILIES and study.mesh is not None:
            problems.append((("metrics", i), f"'{family}' (EN 17037) needs a parametric "
                             "'room:' or 'spaces:' study: a mesh has no window reference "
                             "points or view positions luxsweep can place; remove it from "
                             "'metrics'"))
    if "sunlight" in study.metrics and study.sunlight is None:
        i = study.metrics.index("sunlight")
        problems.append((("metrics", i), "'sunlight' needs a 'sunlight:' section with the "
                         "minimum sun altitude of the site, e.g. 'sunlight: {day: \"03-21\", "
                         "min_altitude: 12}' (EN 17037 tabulates it by latitude)"))
    altitudes = study.sunlight.min_altitude if study.sunlight is not None else None
    if isinstance(altitudes, dict):
        for label in study.climates:
            if label not in altitudes:
                problems.append((("sunlight", "min_altitude"), f"no minimum sun altitude for "
                                 f"climate '{label}'; give one per climate label "
                                 f"({', '.join(study.climates)}) or a single number"))
        for label in altitudes:
            if label not in study.climates:
                problems.append((("sunlight", "min_altitude", label), f"'{label}' is not a "
                                 f"climate label ({', '.join(study.climates)})"))
    if study.sunlight is not None and "sunlight" not in study.metrics:
        problems.append((("sunlight",), "'sunlight:' settings are given but 'metrics' does "
                         "not list 'sunlight'; add it to 'metrics' or remove the section"))
    return problems


def _lighting_problems(study: Study) -> list[tuple[tuple, str]]:
    """``lighting:`` and the ``lighting`` metric together; every occupied space's
    settings complete; no lighting on an unoccupied space; ``min_power`` and
    ``min_light`` only with a dimming control; ``[x, y]`` control points inside
    their parametric space (mesh studies: ``median`` only)."""
    problems: list[tuple[tuple, str]] = []
    spaces = study.spaces or []
    given = ([("lighting",)] if study.lighting is not None else []) + [
        ("spaces", j, "lighting") for j, sp in enumerate(spaces) if sp.lighting is not None]
    wanted = "lighting" in study.metrics
    if given and not wanted:
        return [(given[0], "lighting settings are given but 'lighting' is not listed under "
                 "'metrics', so they would be ignored; add lighting to 'metrics' or remove "
                 "the settings")]
    if not wanted:
        return problems
    if not given:
        return [(("metrics",), "the metric 'lighting' needs lighting settings: add a "
                 "top-level 'lighting:' with power_density [W/m²] and target [lx]")]
    # (place, space name, settings, width, depth) of every occupied space
    items: list[tuple[tuple, str, Lighting | None, float | None, float | None]] = []
    if study.spaces is not None:
        for j, sp in enumerate(spaces):
            if not sp.occupied:
                if sp.lighting is not None:
                    problems.append((("spaces", j, "lighting"), f"space '{sp.name}' is not "
                                     "occupied, so it has no lighting result; remove its "
                                     "'lighting:'"))
                continue
            items.append((("spaces", j, "lighting") if sp.lighting is not None
                          else ("lighting",), sp.name, sp.lighting, sp.width, sp.depth))
    else:
        room = study.room
        items.append((("lighting",), "room", None, room.width if room else None,
                      room.depth if room else None))
    for place, name, own, width, depth in items:
        if own is None and study.lighting is None:
            problems.append((("spaces",), f"occupied space '{name}' has no lighting settings; "
                             "give it a 'lighting:' or add a top-level 'lighting:' for all "
                             "spaces"))
            continue
        settings = (own or Lighting()).over(study.lighting)
        for key, unit in (("power_density", "W/m²"), ("target", "lx")):
            if settings[key] is None:
                problems.append((place, f"no '{key}' [{unit}] for space '{name}'; give it "
                                 "here or in the top-level 'lighting:'"))
        # dimming limits given beside a control that does not dim (a space's own
        # control may differ from the top level's, whose limits then serve other spaces)
        top = Lighting().over(study.lighting)["control"]
        for block, where, control in ((study.lighting, ("lighting",), top),
                                      (own, place, settings["control"])):
            for key in ("min_power", "min_light"):
                if (block is not None and getattr(block, key) is not None
                        and control not in ("dimming", "dimming_off")):
                    problems.append(((*where, key), f"'{key}' applies to a dimming control, "
                                     f"but the control here is '{control}'; remove it or "
                                     "use dimming"))
        point = settings["control_point"]
        if point == "median":
            continue
        source = place if own is not None and own.control_point is not None else ("lighting",)
        if width is None or depth is None:
            problems.append(((*source, "control_point"), "a control point [x, y] needs a "
                             "parametric room or spaces (a mesh study has no space frame); "
                             "use control_point: median"))
        elif not (0.0 <= point[0] <= width and 0.0 <= point[1] <= depth):
            problems.append(((*source, "control_point"), f"control point {list(point)} lies "
                             f"outside space '{name}' (x from 0 to {width:g} m, y from 0 to "
                             f"{depth:g} m in the space's own frame); give a point inside "
                             "it"))
    return problems


VIEW_MARGIN = 0.01
"""Least distance [m] from a view position to its space's walls, floor and ceiling."""


def view_boxes(study: Study) -> dict[str, tuple[tuple[float, ...], tuple[float, ...],
                                                list[Window]]]:
    """Occupied spaces a view may name: ``name -> (low corner, high corner, windows)``
    in the building frame [m] (``room`` for a ``room:`` study; copies expanded)."""
    if study.room is not None:
        r = study.room
        return {"room": ((0.0, 0.0, 0.0), (r.width, r.depth, r.height), list(r.windows))}
    boxes = {}
    for sp in study.spaces or []:
        if not sp.occupied:
            continue
        for name, origin in sp.expanded():
            lo = tuple(float(o) for o in origin)
            hi = tuple(a + b for a, b in zip(lo, (sp.width, sp.depth, sp.height), strict=True))
            boxes[name] = (lo, hi, list(sp.windows))
    return boxes


WALL_AZIMUTH = {"front": 180.0, "back": 0.0, "left": 270.0, "right": 90.0}
"""Building-frame azimuth [deg] of the outward normal of each wall (front: −y)."""


def view_direction(view: View, windows: list[Window]) -> float | None:
    """Building-frame azimuth [deg] a view looks towards (None: ``window`` with no wall window).

    ``window``: out through the space's largest wall window (area width × (head − sill);
    the first of equal ones).
    """
    if not isinstance(view.direction, str):
        return float(view.direction)
    wall = [w for w in windows if w.wall != "roof"]
    if not wall:
        return None
    best = max(wall, key=lambda w: w.width * ((w.head or 0.0) - (w.sill or 0.0)))
    return WALL_AZIMUTH[best.wall]


def _view_problems(study: Study) -> list[tuple[tuple, str]]:
    """``views:`` and the ``glare`` family go together; each view inside its space."""
    problems: list[tuple[tuple, str]] = []
    glare = "glare" in study.metrics
    if glare and study.views is None:
        problems.append((("metrics",), "'glare' is computed at view positions, but the study "
                         "has no 'views:'; add views (e.g. views: [{name: desk, x: 3.0, "
                         "y: 2.0}]) or remove 'glare' from 'metrics'"))
    if study.views is None:
        return problems
    if not glare:
        problems.append((("views",), "'views:' are used only by the 'glare' metric family, "
                         "which is not listed under 'metrics'; add 'glare' to 'metrics' or "
                         "remove 'views'"))
    if study.mesh is not None:
        problems.append((("views",), "'views:' need a parametric 'room:' or 'spaces:' (a "
                         "mesh study has no space boxes to check them against); remove them"))
        return problems
    boxes = view_boxes(study)
    seen: set[str] = set()
    for i, v in enumerate(study.views):
        if v.name in seen:
            problems.append((("views", i, "name"), f"view name '{v.name}' is used twice; give "
                             "every view its own name"))
        seen.add(v.name)
        if v.space is None:
            if len(boxes) != 1:
                problems.append((("views", i), f"view '{v.name}' must name its space ('space:' "
                                 f"one of {', '.join(boxes)}): the study has several"))
                continue
            name = next(iter(boxes))
        elif v.space not in boxes:
            close = difflib.get_close_matches(v.space, list(boxes), n=1)
            hint = f"did you mean '{close[0]}'? " if close else ""
            problems.append((("views", i, "space"), f"no occupied space is named '{v.space}'; "
                             f"{hint}the occupied spaces are: {', '.join(boxes)}"))
            continue
        else:
            name = v.space
        lo, hi, windows = boxes[name]
        m = VIEW_MARGIN
        for key, value, a in (("x", v.x, 0), ("y", v.y, 1)):
            if not lo[a] + m <= value <= hi[a] - m:
                problems.append((("views", i, key), f"view '{v.name}' at {key} = {value:g} m "
                                 f"lies outside space '{name}' ({key} from {lo[a]:g} to "
                                 f"{hi[a]:g} m, building frame); give a position at least "
                                 f"{m:g} m inside its walls"))
        if not v.height <= (hi[2] - lo[2]) - m:
            problems.append((("views", i, "height"), f"view '{v.name}' at height {v.height:g} m "
                             f"is at or above the ceiling of space '{name}' (height "
                             f"{hi[2] - lo[2]:g} m); give the eye height above the floor "
                             "(1.2 m seated)"))
        if view_direction(v, windows) is None:
            problems.append((("views", i, "direction"), f"view '{v.name}' looks towards "
                             f"'window', but space '{name}' has no wall window; give an "
                             "azimuth in degrees instead"))
    return problems


def _window_problems(study: Study, windows: list[Window], prefix: tuple
                     ) -> list[tuple[tuple, str]]:
    """Glazing set defined, and the keys a wall or roof window needs."""
    problems: list[tuple[tuple, str]] = []
    for i, w in enumerate(windows):
        if w.glazing not in study.glazings:
            problems.append(((*prefix, "windows", i, "glazing"),
                             f"glazing set '{w.glazing}' is not defined under 'glazings' "
                             f"({', '.join(study.glazings)})"))
        needed = ("length", "x", "y") if w.wall == "roof" else ("sill", "head")
        for key in needed:
            if getattr(w, key) is None:
                kind = "roof" if w.wall == "roof" else w.wall
                problems.append(((*prefix, "windows", i), f"a {kind} window needs '{key}'"))
    return problems


_TOUCH = 1e-9  # [m] interiors that share less than this along an axis only touch


def _space_problems(study: Study) -> list[tuple[tuple, str]]:
    """Cross checks of a ``spaces:`` study (CONTRACT.md §1b).

    Names unique after copies are expanded, copies that do not collide, no
    two spaces overlapping (naming both), windows' glazing sets defined, a
    working plane below every occupied space's ceiling, at least one occupied
    space.
    """
    problems: list[tuple[tuple, str]] = []
    spaces = study.spaces or []
    for key in ("materials", "sensors"):
        if getattr(study, key) is not None:
            problems.append(((key,), f"'{key}' belongs to a mesh study; remove it or use "
                             "'mesh:'"))
    if study.grid.floors is not None:
        problems.append((("grid", "floors"), "'floors' names OBJ groups of a mesh study; "
                         "remove it for parametric spaces"))
    owner: dict[str, tuple[int, str]] = {}
    boxes: list[tuple[int, str, Any, Any]] = []
    for j, sp in enumerate(spaces):
        problems += _window_problems(study, sp.windows, ("spaces", j))
        if sp.grid is not None and sp.grid.floors is not None:
            problems.append((("spaces", j, "grid", "floors"), "'floors' names OBJ groups of "
                             "a mesh study; remove it for a parametric space"))
        grid = sp.grid or study.grid
        if sp.occupied and grid.height >= sp.height:
            place = ("spaces", j, "grid", "height") if sp.grid else ("grid", "height")
            problems.append((place, f"the working plane at {grid.height:g} m lies at or above "
                             f"the ceiling of space '{sp.name}' (height {sp.height:g} m), where "
                             "every sensor would read 0 lx; give a height between 0 and the "
                             "space's height"))
        size = (sp.width, sp.depth, sp.height)
        for k, (name, origin) in enumerate(sp.expanded()):
            place = ("spaces", j, "copies") if sp.copies is not None else ("spaces", j, "name")
            if name in owner:
                other_j, other_name = owner[name]
                made = (f" (copy {k + 1} of '{sp.name}')" if sp.copies is not None else "")
                problems.append((place, f"space name '{name}'{made} is already used by space "
                                 f"{other_j} ('{other_name}'); give every space, after its "
                                 "copies are numbered name-1 … name-N, its own name"))
            else:
                owner[name] = (j, sp.name)
            lo = tuple(float(o) for o in origin)
            boxes.append((j, name, lo, tuple(a + b for a, b in zip(lo, size, strict=True))))
    for n, (ja, na, loa, hia) in enumerate(boxes):
        for jb, nb, lob, hib in boxes[n + 1:]:
            common = [min(hia[a], hib[a]) - max(loa[a], lob[a]) for a in range(3)]
            if not all(c > _TOUCH for c in common):
                continue
            by = " × ".join(f"{c:g}" for c in common)
            if ja == jb:
                step = spaces[ja].copies.step  # type: ignore[union-attr]
                problems.append((("spaces", ja, "copies", "step"),
                                 f"copies '{na}' and '{nb}' overlap (by {by} m): the step "
                                 f"{list(step)} is shorter than the space along every axis; "
                                 "make the step at least the width (or depth, or height) of "
                                 "the space"))
            else:
                problems.append((("spaces", jb, "origin"),
                                 f"spaces '{na}' and '{nb}' overlap (by {by} m); move one of "
                                 "them or make it smaller (spaces may touch, not overlap)"))
            if len(problems) > 20:
                return problems
    if spaces and not any(sp.occupied for sp in spaces):
        problems.append((("spaces",), "no space is occupied, so there is nothing to measure; "
                         "set 'occupied: true' (the default) on at least one space"))
    return problems


def _mesh_space_problems(study: Study) -> list[tuple[tuple, str]]:
    """Cross checks of ``mesh_spaces:``: unique names, each floor group owned once."""
    problems: list[tuple[tuple, str]] = []
    if study.sensors is not None or study.grid.floors is not None:
        key = "sensors" if study.sensors is not None else "grid"
        problems.append(((key,), f"give either 'mesh_spaces:' or '{key}"
                         f"{'' if key == 'sensors' else '.floors'}:', not both"))
    names: dict[str, int] = {}
    floors: dict[str, str] = {}
    for j, sp in enumerate(study.mesh_spaces or []):
        if sp.name in names:
            problems.append((("mesh_spaces", j, "name"), f"space name '{sp.name}' is already "
                             f"used by mesh space {names[sp.name]}; give each its own name"))
        names.setdefault(sp.name, j)
        if sp.grid is not None and sp.grid.floors is not None:
            problems.append((("mesh_spaces", j, "grid", "floors"), "a mesh space's floor "
                             "groups are its 'floors:' key; remove 'grid.floors'"))
        for i, group in enumerate(sp.floors):
            if group in floors:
                problems.append((("mesh_spaces", j, "floors", i), f"floor group '{group}' "
                                 f"already belongs to space '{floors[group]}'; a floor is "
                                 "owned by one space"))
            floors.setdefault(group, sp.name)
    return problems


# ---------------------------------------------------------------------------
# loading with line numbers


@dataclass(frozen=True)
class StudyFile:
    """A loaded study: the model, its source text and where each key path sits."""

    path: Path
    text: str
    study: Study
    lines: dict[tuple, int] = field(repr=False)

    @property
    def folder(self) -> Path:
        return self.path.parent

    def line_of(self, loc: tuple) -> int | None:
        """Line of ``loc`` (or of its nearest ancestor present in the file)."""
        return _line_of(self.lines, loc)

    def error(self, loc: tuple, message: str) -> StudyFileError:
        """A :class:`StudyFileError` naming this file, the key path and its line."""
        return _error(self.path, self.lines, [(loc, message)])

    def sha256(self) -> str:
        return hashlib.sha256(self.text.encode()).hexdigest()


def _line_map(node: yaml.Node, prefix: tuple = ()) -> dict[tuple, int]:
    """Key path -> 1-based line; raises ``_Duplicate`` for a key given twice."""
    lines: dict[tuple, int] = {prefix: node.start_mark.line + 1}
    if isinstance(node, yaml.MappingNode):
        for key, value in node.value:
            k: Any = key.value
            path = (*prefix, k)
            if path in lines:
                raise _Duplicate(path, lines[path], key.start_mark.line + 1)
            sub = _line_map(value, path)
            sub[path] = key.start_mark.line + 1
            lines.update(sub)
    elif isinstance(node, yaml.SequenceNode):
        for i, item in enumerate(node.value):
            lines.update(_line_map(item, (*prefix, i)))
    return lines


class _Duplicate(LuxsweepError):
    """A key given twice in one mapping (turned into a StudyFileError by the loader)."""

    def __init__(self, path: tuple, first: int, second: int) -> None:
        self.path, self.first, self.second = path, first, second


def _norm(loc: tuple) -> tuple:
    return tuple(str(p) for p in loc)


def _line_of(lines: dict[tuple, int], loc: tuple) -> int | None:
    norm = {_norm(k): v for k, v in lines.items()}
    loc = _norm(loc)
    while True:
        if loc in norm:
            return norm[loc]
        if not loc:
            return None
        loc = loc[:-1]


def dotted(loc: tuple) -> str:
    """Key path as shown to users: ``room.windows.0.sill``."""
    return ".".join(str(p) for p in loc) if loc else "(top level)"


def _error(
    path: Path, lines: dict[tuple, int], problems: list[tuple[tuple, str]]
) -> StudyFileError:
    parts = []
    for loc, message in problems[:6]:
        line = _line_of(lines, loc)
        where = f"line {line}, " if line is not None else ""
        parts.append(f"{path}: {where}key '{dotted(loc)}': {message}")
    if len(problems) > 6:
        parts.append(f"... and {len(problems) - 6} more problems")
    err = StudyFileError("\n".join(parts))
    first = problems[0][0] if problems else ()
    err.file = str(path)  # type: ignore[attr-defined]
    err.key = dotted(first)  # type: ignore[attr-defined]
    err.line = _line_of(lines, first)  # type: ignore[attr-defined]
    return err


def _strip_optional(tp: Any) -> Any:
    if typing.get_origin(tp) in (typing.Union, __import__("types").UnionType):
        args = [a for a in typing.get_args(tp) if a is not type(None)]
        if len(args) == 1:
            return _strip_optional(args[0])
    if typing.get_origin(tp) is Annotated:
        return _strip_optional(typing.get_args(tp)[0])
    return tp


def _keys_at(loc: tuple) -> list[str]:
    """Valid keys of the model found at ``loc`` inside :class:`Study` (for hints)."""
    tp: Any = Study
    for part in loc:
        tp = _strip_optional(tp)
        if isinstance(tp, type) and issubclass(tp, BaseModel):
            if part not in tp.model_fields:
                return []
            tp = tp.model_fields[part].annotation
        elif typing.get_origin(tp) is dict:
            tp = typing.get_args(tp)[1]
        elif typing.get_origin(tp) in (list, tuple):
            tp = typing.get_args(tp)[0]
        else:
            return []
    tp = _strip_optional(tp)
    if isinstance(tp, type) and issubclass(tp, BaseModel):
        return list(tp.model_fields)
    return []


def _describe(err: dict[str, Any]) -> tuple[tuple, str]:
    loc = tuple(err["loc"])
    kind = err["type"]
    if kind == "extra_forbidden":
        key = str(loc[-1])
        if key == "obstructions" and loc[0] == "spaces":
            return loc, ("'obstructions' of a building stand at the top level of the study, "
                         "in building axes (they shade every space); move them there")
        valid = _keys_at(loc[:-1])
        close = difflib.get_close_matches(key, valid, n=1, cutoff=0.6)
        hint = f" — did you mean '{close[0]}'?" if close else ""
        listing = f" Valid keys here: {', '.join(valid)}." if valid else ""
        return loc, f"unknown key '{key}'{hint} Remove it or fix its spelling.{listing}"
    if kind == "missing":
        return loc, f"required key '{loc[-1]}' is missing; add it."
    msg = err["msg"].removeprefix("Value error, ")
    value = err.get("input")
    shown = "" if isinstance(value, dict | list) else f" (got {value!r})"
    if kind.startswith(("float", "int", "bool", "string", "literal", "dict", "list")):
        return loc, f"{msg}{shown}; correct the value."
    return loc, f"{msg}."


def validation_problems(exc: ValidationError) -> list[tuple[tuple, str]]:
    """Turn a pydantic error into ``(key path, message)`` pairs, unknown keys first."""
    errors = sorted(exc.errors(), key=lambda e: e["type"] != "extra_forbidden")
    return [_describe(e) for e in errors]


MAX_NODES = 100_000
"""Largest study document accepted, counted in YAML nodes with every alias expanded.

A real study file has a few hundred; a few hundred bytes of nested anchors and
aliases ("billion laughs") expand to millions and would exhaust time and memory.
"""


class _AliasRecordingLoader(yaml.SafeLoader):
    """A safe loader that records every alias: (anchor name, line, node it stands for)."""

    def __init__(self, stream: str) -> None:
        super().__init__(stream)
        self.aliases: list[tuple[str, int, yaml.Node]] = []

    def compose_node(self, parent: Any, index: Any) -> Any:
        if self.check_event(yaml.AliasEvent):
            event = self.peek_event()
            if event.anchor in self.anchors:
                self.aliases.append((event.anchor, event.start_mark.line + 1,
                                     self.anchors[event.anchor]))
        return super().compose_node(parent, index)


def _expanded_size(node: yaml.Node, memo: dict[int, float]) -> float:
    """Nodes in ``node``'s tree with aliases expanded (shared nodes counted once per use).

    Memoised per node, so it costs one visit per distinct node; a node that
    contains itself (a recursive alias) expands without end (``inf``).
    """
    key = id(node)
    if key in memo:
        return memo[key]
    memo[key] = float("inf")  # while in progress: meeting it again is a cycle
    size = 1.0
    if isinstance(node, yaml.MappingNode):
        for k, v in node.value:
            size += _expanded_size(k, memo) + _expanded_size(v, memo)
    elif isinstance(node, yaml.SequenceNode):
        for item in node.value:
            size += _expanded_size(item, memo)
    memo[key] = size
    return size


def _refuse_alias_bombs(path: Path, node: yaml.Node,
                        aliases: list[tuple[str, int, yaml.Node]]) -> None:
    """Raise StudyFileError when aliases expand the document beyond :data:`MAX_NODES`."""
    memo: dict[int, float] = {}
    if _expanded_size(node, memo) <= MAX_NODES:
        return
    if not aliases:
        raise StudyFileError(f"{path}: holds more than {MAX_NODES:,} values; a study file "
                             "describes one room and its variants, so split or shorten it.")
    anchor, line, _ = max(aliases, key=lambda a: memo.get(id(a[2]), 0.0))
    raise StudyFileError(
        f"{path}: line {line}: the YAML aliases expand this file to more than {MAX_NODES:,} "
        f"values (alias '*{anchor}' here repeats a block that is itself built from aliases, "
        "or refers to itself). A study file needs no such repetition: write the values out "
        "or remove the anchors ('&') and aliases ('*')."
    )


def parse_study(text: str, path: str | Path) -> StudyFile:
    """Parse study ``text`` that came from file ``path`` (relative paths resolve beside it).

    Raises
    ------
    StudyFileError
        For YAML syntax errors, Python object tags, aliases that expand beyond
        :data:`MAX_NODES` nodes, unknown keys (with a "did you mean" hint), wrong
        types or values, and bad ``vary`` entries; the message
        names the file, the line and the dotted key path.
    """
    path = Path(os.path.abspath(path))
    try:
        loader = _AliasRecordingLoader(text)
        try:
            node = loader.get_single_node()
        finally:
            loader.dispose()
        if node is not None:
            _refuse_alias_bombs(path, node, loader.aliases)
        lines = _line_map(node) if node is not None else {}
        data = yaml.safe_load(text)
    except _Duplicate as dup:
        raise StudyFileError(
            f"{path}: line {dup.second}, key '{dotted(dup.path)}': given twice (first on line "
            f"{dup.first}); YAML would silently keep only the last one. Keep one of them."
        ) from dup
    except yaml.constructor.ConstructorError as exc:
        line = exc.problem_mark.line + 1 if exc.problem_mark else None
        raise StudyFileError(
            f"{path}: line {line}: YAML tag not allowed ({exc.problem}). Study files hold "
            "plain data only; remove the '!!' tag."
        ) from exc
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        line = f"line {mark.line + 1}: " if mark else ""
        problem = getattr(exc, "problem", None) or str(exc)
        raise StudyFileError(
            f"{path}: {line}not valid YAML ({problem}). Check indentation and quoting there."
        ) from exc
    if not isinstance(data, dict):
        raise StudyFileError(f"{path}: line 1: a study file is a YAML mapping of keys "
                             "(name, climates, room, ...); configs/demo.yaml is a complete "
                             "example (`luxsweep check --schema` lists every key).")
    context = {"base": str(path.parent)}
    try:
        study = Study.model_validate(data, context=context)
    except ValidationError as exc:
        raise _error(path, lines, validation_problems(exc)) from exc
    problems = cross_check(study)
    if problems:
        raise _error(path, lines, problems)
    loaded = StudyFile(path=path, text=text, study=study, lines=lines)
    # vary entries are checked here so that `luxsweep check` catches them
    from luxsweep.sweep.expand import check_vary

    check_vary(loaded)
    return loaded


def load_study(path: str | Path) -> StudyFile:
    """Read and validate a study file (see :func:`parse_study`)."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError as exc:
        raise StudyFileError(f"{p}: study file not found; check the path.") from exc
    except (OSError, UnicodeDecodeError) as exc:
        raise StudyFileError(f"{p}: cannot read the study file ({exc}).") from exc
    return parse_study(text, p)


# ---------------------------------------------------------------------------
# JSON Schema text: plain sentences for editors and users (no markup, no code paths)

_SCHEMA_TEXT: dict[str, tuple[str, dict[str, str]]] = {
    "Study": (
        "A luxsweep study: one room (a parametric box or an OBJ mesh), its glazing, the "
        "weather files, the sensor grid, the occupancy and what to vary. Building axes: the "
        "origin is the interior floor corner where the front and left walls meet; x runs "
        "along the front wall, y into the room (0 at the front wall), z up from the floor; "
        "the front facade faces minus y. Lengths are in metres, angles in degrees, "
        "illuminance in lux, times in local standard time.",
        {
            "name": "Name of the study: letters, digits, '-' and '_'. It names the results "
                    "store.",
            "climates": "Weather files by label: each value is the path of an EPW or TMY3 CSV "
                        "file, relative to the study file's folder or absolute.",
            "room": "A parametric box room. Give one of room, spaces or mesh.",
            "spaces": "A building of parametric box spaces (classrooms, corridors, halls) "
                      "in one building frame, as an alternative to room; spaces may touch "
                      "but not overlap, and a window on a wall that another space covers "
                      "opens into that space.",
            "obstructions": "For a building of spaces: boxes standing on the ground "
                            "outside, such as neighbouring buildings.",
            "mesh_spaces": "For a mesh study: the spaces of the building, each named and "
                           "given by the OBJ groups of its floor; each owns the sensor grid "
                           "over its floor groups.",
            "mesh": "Path of an OBJ file holding the room as triangles, as an alternative to "
                    "room; its coordinates are in the building axes, in metres.",
            "materials": "For a mesh room: each OBJ group name mapped to an opaque surface "
                         "(reflectance) or a window (glazing set).",
            "sensors": "For a mesh room: path of a CSV file of sensor points, one per line "
                       "as x, y, z, nx, ny, nz (position in metres and facing direction), "
                       "instead of a grid.",
            "glazings": "Glazing sets by name; each window names one set.",
            "ground_reflectance": "Diffuse reflectance of the ground outside, from 0 to "
                                  "below 1.",
            "grid": "The sensor grid on the working plane.",
            "occupancy": "When the room is in use: the period of the day and the days of "
                         "the week.",
            "timestep": "Length of a time step in minutes; it must divide 60 (60, 30, 20, "
                        "15, 10, 5).",
            "orientation": "Orientation of the building when it is not varied: the compass "
                           "direction, in degrees clockwise from north, that the front "
                           "facade faces (the direction of its outward normal). 0 means the "
                           "front facade faces north, 90 east, 180 south and 270 west.",
            "climate": "Label of the climate used when the climate is not varied. Default: "
                       "the first label under climates.",
            "vary": "The options to sweep: each key is a dotted path into this file (for "
                    "example room.windows.0.width or glazings.main.transmittance) or one of "
                    "the axes orientation and climate, with the list of values to try. "
                    "Every combination of the lists is one variant. A path may not lie "
                    "inside another varied path (room.windows.0 and "
                    "room.windows.0.offset): vary the whole item or the key, not both.",
            "vary_together": "Groups of paths whose value lists have equal lengths and "
                             "change in step (the first values together, then the second "
                             "values, and so on) instead of in every combination.",
            "exclude": "Partial assignments of varied paths to values; a variant that "
                       "matches every entry of one of them is left out.",
            "metrics": f"Metric families to compute: {', '.join(METRIC_FAMILIES)}. "
                       "sunlight and view_out (EN 17037 exposure to sunlight and view out, "
                       "per space), lighting (needs lighting) and glare (needs views) are "
                       "computed only when listed; left out, the list is "
                       f"{', '.join(registry.DEFAULT_FAMILIES)}.",
            "views": "View positions for glare: eyes at a given height in a space, each "
                     "looking horizontally in a direction; used by the glare metric family.",
            "metric_options": "Thresholds of the metrics.",
            "sunlight": "EN 17037 exposure to sunlight: the day and the minimum sun "
                        "altitude. Needed when metrics lists sunlight.",
            "compute": "Ray-tracing settings; they change the daylight coefficients, so a "
                       "change recomputes them.",
            "store_series": "Also keep the annual illuminance of every sensor and occupied "
                            "time step in the results store (large).",
            "lighting": "Electric lighting with daylight-linked control, for every occupied "
                        "space (a space's own lighting overrides the keys it gives). Needs "
                        "lighting under metrics.",
            "rank": "Criteria and objectives for ranking the variants.",
            "labels": "Names for the varied axes in tables and charts, by vary key (for "
                      "example room.windows.0.width: window width [m]); presentation only.",
            "project": "What the report's cover names: project, client, author, issue "
                       "date and reference; presentation only.",
        },
    ),
    "Project": (
        "What the report's cover names. Every field is optional free text.",
        {},
    ),
    "Room": (
        "A parametric box room. Its interior spans x from 0 to width along the front wall, "
        "y from 0 (front wall) to depth (back wall) and z from 0 (floor) to height. Seen "
        "from outside facing the front facade, the left wall is at x = 0 and the right "
        "wall at x = width.",
        {
            "width": "Interior size along the front wall (building x), in metres.",
            "depth": "Interior size from the front wall to the back wall (building y), in "
                     "metres.",
            "height": "Interior height from floor to ceiling, in metres.",
            "thickness": "Thickness of the walls and roof in metres; they grow outwards and "
                         "give the windows reveals, with the glass in the middle of the "
                         "wall.",
            "reflectance": "Diffuse reflectances of the floor, walls and ceiling.",
            "windows": "The windows, at least one.",
            "overhang": "An optional horizontal slab above every front window.",
            "obstructions": "Optional boxes standing on the ground outside, such as "
                            "neighbouring buildings.",
        },
    ),
    "Space": (
        "A parametric box space of a building. In its own axes it is like a room (x "
        "along its front wall, y into it, z up from its floor); origin places that "
        "frame in the building. Every space faces the building's front.",
        {
            "name": "Name of the space: letters, digits, '-' and '_'; unique in the "
                    "building, also after its copies are numbered name-1 to name-N.",
            "origin": "Building x, y, z of the space's front-left interior floor corner, in "
                      "metres (z above 0 is an upper storey).",
            "width": "Interior size along the front wall (building x), in metres.",
            "depth": "Interior size from the front wall to the back wall (building y), in "
                     "metres.",
            "height": "Interior height from floor to ceiling, in metres.",
            "thickness": "Thickness of the space's walls and roof in metres; they grow "
                         "outwards.",
            "reflectance": "Diffuse reflectances of the floor, walls and ceiling.",
            "windows": "The windows of the space, in its own axes; a window on a wall that "
                       "another space covers is an opening into that space.",
            "overhang": "An optional horizontal slab above every front window.",
            "copies": "Repeat the space: count copies named name-1 to name-N, the k-th "
                      "shifted by k - 1 times step.",
            "occupied": "Whether the space is measured: false for a corridor or store that "
                        "only shades and reflects (no sensors, not in any total).",
            "grid": "The space's own sensor grid settings, instead of the study's grid.",
            "lighting": "The space's own lighting settings: the keys given here replace "
                        "those of the top-level lighting for this space and its copies.",
        },
    ),
    "Lighting": (
        "Electric lighting that tops daylight up to a target illuminance, with a control "
        "that reads daylight at one point of the space. Annual energy counts the occupied "
        "time steps only.",
        {
            "power_density": "Installed lighting power per floor area, in watts per square "
                             "metre (typically 2 to 15). No default: give it.",
            "target": "Illuminance in lux that the lights keep on the working plane "
                      "together with daylight (typically 300 or 500). No default: give it.",
            "control": "none (full power whenever occupied), on_off (off while daylight "
                       "alone reaches the target), dimming (output tops daylight up to the "
                       "target, never below the minimum power) or dimming_off (dimming, "
                       "and off when no electric light is needed).",
            "min_power": "For dimming: the share of full power the lights draw at their "
                         "lowest output, from 0 to below 1.",
            "min_light": "For dimming: the lowest share of full light output the lights "
                         "dim to, from 0 to below 1.",
            "control_point": "Where the control reads daylight: median (the sensor whose "
                             "daylight factor is the median of the space's) or [x, y] in "
                             "metres in the space's own axes, read at the nearest sensor of "
                             "the space.",
        },
    ),
    "Copies": (
        "Identical copies of a space in a row or a stack.",
        {
            "count": "Number of copies, 1 or more.",
            "step": "Building x, y, z shift from one copy to the next, in metres.",
        },
    ),
    "MeshSpace": (
        "A space of a mesh study, named and given by the OBJ groups of its floor.",
        {
            "name": "Name of the space: letters, digits, '-' and '_'; unique.",
            "floors": "The OBJ groups that form the space's floor under its grid.",
            "grid": "The space's own grid settings (height, spacing, margin), instead of "
                    "the study's grid.",
        },
    ),
    "Reflectance": (
        "Diffuse reflectances of the interior surfaces, each from 0 to below 1.",
        {
            "floor": "Reflectance of the floor.",
            "walls": "Reflectance of the walls.",
            "ceiling": "Reflectance of the ceiling.",
        },
    ),
    "Window": (
        "A window. Wall windows (front, back, left, right) take width, sill, head and "
        "offset; roof windows take width, length, x and y. Every window must fit its wall.",
        {
            "wall": "The wall that holds the window: front, back, left, right or roof.",
            "width": "Width of the window in metres: along the wall, or along x for a roof "
                     "window.",
            "sill": "Height of the bottom of the window above the floor, in metres. "
                    "Required for wall windows.",
            "head": "Height of the top of the window above the floor, in metres, above "
                    "the sill. Required for wall windows.",
            "offset": "Shift of the window's centre from the centre of its wall, in "
                      "metres: towards plus x (to the right, seen from outside the front "
                      "facade) on the front and back walls, towards plus y (away from the "
                      "front wall) on the left and right walls. 0 centres the window.",
            "length": "Length of a roof window along y, in metres. Required for roof "
                      "windows.",
            "x": "Building x of the centre of a roof window, in metres. Required for roof "
                 "windows.",
            "y": "Building y of the centre of a roof window, in metres. Required for roof "
                 "windows.",
            "glazing": "Name of the glazing set of this window (a key under glazings).",
        },
    ),
    "Overhang": (
        "A horizontal slab above each front window, as wide as the window.",
        {
            "depth": "How far the slab projects from the facade, in metres.",
            "gap": "Height of the slab's underside above the window head, in metres.",
        },
    ),
    "Obstruction": (
        "A box standing on the ground outside the room, in the building axes.",
        {
            "x": "Building x of the centre of the box's footprint, in metres.",
            "y": "Building y of the centre of the box's footprint, in metres (negative "
                 "values lie in front of the front facade).",
            "width": "Size of the box along x, in metres.",
            "depth": "Size of the box along y, in metres.",
            "height": "Height of the box above the ground, in metres.",
        },
    ),
    "MeshMaterial": (
        "What an OBJ group is: an opaque surface with a reflectance, or a window of a "
        "glazing set. Give one of the two.",
        {
            "reflectance": "Diffuse reflectance of the surface, from 0 to below 1.",
            "glazing": "Name of the glazing set when the group is a window.",
        },
    ),
    "Glazing": (
        "A glazing product: its light transmittance at normal incidence, the number of "
        "panes (which sets how transmittance falls at oblique angles) and optionally the "
        "transmittance with its blinds closed.",
        {
            "transmittance": "Visible light transmittance at normal incidence, above 0 "
                             "and at most 1.",
            "panes": "Number of panes, 1 to 4, or 0 for an unglazed opening (which "
                     "transmits everything at every angle).",
            "shaded_transmittance": "Transmittance at normal incidence with the operable "
                                    "shading closed, at most transmittance. When given, "
                                    "the sDA count closes the shading in the hours when "
                                    "more than 2 % of the sensors get more than 1000 lx of "
                                    "direct sun (IES LM-83-12).",
        },
    ),
    "Grid": (
        "Upward-facing sensors on a regular grid on the working plane. Every room must "
        "get at least 4 sensors, on a plane between the floor and the ceiling.",
        {
            "height": "Height of the working plane above the floor, in metres; it must be "
                      "below the ceiling.",
            "spacing": "Distance between neighbouring sensors, in metres.",
            "margin": "Distance kept free along the walls, in metres; the grid is centred "
                      "in what is left.",
            "floors": "For a mesh room: the OBJ groups that form the floor under the grid.",
        },
    ),
    "Occupancy": (
        "The occupied period, in local standard time. A time step counts as occupied when "
        "it lies wholly inside the period.",
        {
            "start": "Start of the occupied period, \"HH:MM\" (quoted).",
            "end": "End of the occupied period, \"HH:MM\" (quoted), after the start.",
            "days": "weekdays (Monday to Friday) or all.",
        },
    ),
    "Sunlight": (
        "EN 17037 exposure to sunlight: hours of possible sunlight on one day at a "
        "reference point on each window of a space, counting the sun only above a minimum "
        "altitude.",
        {
            "day": "The day, \"MM-DD\" (quoted), from \"02-01\" to \"03-21\".",
            "min_altitude": "Sun altitude in degrees below which the sun does not count: "
                            "the value the standard gives for the site's latitude. One "
                            "number, or one per climate label when the climates lie at "
                            "different latitudes.",
        },
    ),
    "MetricOptions": (
        "Thresholds of the metrics.",
        {
            "daylight_autonomy": "Illuminance in lux that daylight autonomy counts "
                                 "(daylight alone reaching at least this much).",
            "udi_edges": "The three edges in lux of the useful daylight illuminance bands: "
                         "too dark below the first, supplementary up to the second, "
                         "autonomous up to the third, too bright above it.",
            "sda_illuminance": "Illuminance in lux of spatial daylight autonomy (sDA).",
            "sda_time_percent": "Share of the analysis hours, in percent, for which a "
                                "sensor must reach the sDA illuminance (formerly "
                                "sda_time_fraction).",
            "sun_threshold": "Direct-sun illuminance in lux of annual sunlight exposure "
                             "(ASE) and of the direct-sun hours (formerly ase_illuminance).",
            "ase_hours_limit": "Number of analysis hours above the direct-sun illuminance "
                               "that makes a sensor count as over-exposed (formerly "
                               "ase_hours).",
        },
    ),
    "Compute": (
        "Ray-tracing settings. Every key left out takes its default; all of them change "
        "the daylight coefficients.",
        {
            "subdivision": "Sky subdivision: 1 is the Tregenza sky of 145 patches; n from 2 "
                           "to 8 is the Reinhart subdivision n, with 144 n² + 1 patches "
                           "(577 for n = 2).",
            "sun_spacing": "Angular spacing in degrees between the sun points that the "
                           "direct sun is interpolated from.",
            "sky_rays_per_patch": "Rays traced per sky patch and sensor for the direct "
                                  "sky light.",
            "ground_rays": "Rays traced per sensor towards the ground.",
            "element_size": "Size in metres of the surface elements used for reflected "
                            "light.",
            "element_rays": "Rays traced per surface element for reflected light.",
            "sensor_rays": "Rays traced per sensor to gather reflected light.",
            "reflected_sun_spacing": "Angular spacing in degrees of the coarser sun points "
                                     "used for reflected sunlight.",
            "seed": "Seed of the random ray directions (the same seed gives the same "
                    "results).",
            "max_elements": "Largest number of surface elements for reflected light: in a "
                            "large space the elements grow beyond element_size until they "
                            "fit, which bounds time and memory whatever the model.",
            "memory_limit": "Memory in GiB that one coefficient computation may use; the "
                            "element count is lowered to fit, and a sensor grid too large "
                            "for it is refused.",
            "target_error": "Target relative standard error of the daylight factor, as a "
                            "fraction (0.01 is 1 %); when the estimated error of the 95th "
                            "percentile sensor is larger, the sensor rays are increased to "
                            "meet it. 0 switches this off.",
        },
    ),
    "View": (
        "A view position: an eye looking horizontally; glare is estimated from the "
        "illuminance on a vertical plane at the eye facing the view direction.",
        {
            "name": "Name of the view: letters, digits, '-' and '_'; unique.",
            "space": "The occupied space the eye is in (a copy by its numbered name). "
                     "Default: the only occupied space.",
            "x": "Position of the eye along the building x axis, in metres.",
            "y": "Position of the eye along the building y axis, in metres.",
            "height": "Eye height above the floor of the space, in metres (1.2 seated).",
            "direction": "Where the eye looks: degrees clockwise from the building's y axis "
                         "(0 towards the back wall, 90 towards the right wall, 180 towards "
                         "the front facade, 270 towards the left wall), or window: out "
                         "through the space's largest wall window.",
        },
    ),
    "Rank": (
        "Criteria that a variant must meet (require) and objectives to score the variants "
        "that meet them (prefer).",
        {
            "require": "Criteria, each a metric with at_least or at_most.",
            "prefer": "Objectives, each a metric with a goal (max or min) and a weight.",
        },
    ),
    "Requirement": (
        "A criterion: a per-variant metric and a bound.",
        {
            "metric": f"The metric, one of: {', '.join(RANK_METRICS)}.",
            "at_least": "Lowest acceptable value (give this or at_most).",
            "at_most": "Highest acceptable value (give this or at_least).",
            "spaces": "Where the criterion applies: left out, the building total; all, every "
                      "occupied space on its own; or one space name or a list of names. Each "
                      "named space must be an occupied space of the study.",
        },
    ),
    "Preference": (
        "An objective for the score of the variants.",
        {
            "metric": f"The metric, one of: {', '.join(RANK_METRICS)}.",
            "goal": "max to prefer high values, min to prefer low ones.",
            "weight": "Weight of this objective in the score, 0 or more.",
            "spaces": "What the objective scores: left out, the building total; one space "
                      "name, that space's value; all or a list of names, the worst of those "
                      "spaces (the lowest for max, the highest for min).",
        },
    ),
}


def _schema_default(model: str, name: str, prop: dict[str, Any]) -> Any:
    """The default a left-out key takes (the kernel's for the ray-tracing settings)."""
    if model == "Compute":
        import dataclasses

        from luxsweep.kernels.coefficients import Settings

        return {f.name: f.default for f in dataclasses.fields(Settings)}[name]
    return prop.get("default")


def _plain(value: Any) -> str:
    if isinstance(value, list | tuple):
        return ", ".join(_plain(v) for v in value)
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float) and value.is_integer():
        return f"{value:g}"
    if isinstance(value, str):
        return f"\"{value}\""
    return str(value)


def json_schema() -> dict[str, Any]:
    """JSON Schema of the study file (``luxsweep check --schema``).

    Titles and descriptions come from :data:`_SCHEMA_TEXT` (plain sentences);
    every key with a default says it ("Default: ...") and carries it as
    ``default`` (the ray-tracing settings with the kernel's values).
    """
    schema = Study.model_json_schema()
    models = {"Study": schema, **schema.get("$defs", {})}
    for model, body in models.items():
        text, fields = _SCHEMA_TEXT[model]
        body["description"] = text
        for name, prop in body.get("properties", {}).items():
            description = fields.get(name) or prop.get("description")
            if not description:
                raise KeyError(f"no schema description for '{model}.{name}'; add it to "
                               "_SCHEMA_TEXT")
            default = _schema_default(model, name, prop)
            if "Default:" in description or "Required for" in description:
                pass
            elif name in body.get("required", []):
                description += " Required."
            elif default is None:
                description += " Optional; no default."
            elif default in ({}, []):
                description += " Default: none."
            elif not isinstance(default, dict):
                description += f" Default: {_plain(default)}."
                prop["default"] = default
            else:
                description += " Default: every key at its own default."
                if model == "Study" and name == "compute":
                    prop["default"] = {k: _schema_default("Compute", k, {})
                                       for k in default}
            prop["description"] = description
    schema["title"] = "luxsweep study file"
    schema["$schema"] = "https://json-schema.org/draft/2020-12/schema"
    return schema


def canonical_json(obj: Any) -> str:
    """Canonical JSON text: sorted keys, no spaces, ASCII (the basis of every hash)."""
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), ensure_ascii=True,
                      allow_nan=False)
