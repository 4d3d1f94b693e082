"""Exposure to sunlight (EN 17037): hours of possible sunlight at a window on one day.

EN 17037:2018 judges a space's exposure to sunlight by the time during which the
sun can be seen from a reference point on the inner surface of a window, on one
chosen day between 1 February and 21 March, counting only the time when the sun
stands above a minimum altitude that the standard gives for the site's latitude
(the sun lower than that is taken as hidden by the surroundings). Weather plays
no part: it is *possible* sunlight, a matter of geometry and the sun's path.

Here the sun's path comes from the NREL SPA (:func:`kernels.sun.solar_position`,
apparent altitude) at the middle of every ``step`` minutes of the day; a step
counts when the sun is in front of the window's plane, at or above the minimum
altitude, and a ray from the reference point towards it leaves the scene without
meeting an opaque surface (reveals, overhangs, obstructions, other spaces and
the room's own walls all block). The hours are the counted steps × ``step``.

Levels (:data:`LEVEL_HOURS`): minimum 1.5 h, medium 3 h, high 4 h of sunlight
on the chosen day (EN 17037:2018, Annex A, from memory). The reference point is
centred on the window's width, on the inner face of the glass, at
``max(sill + 0.3, 1.2)`` m above the floor and not above the head (EN 17037:2018,
from memory; :func:`reference_height`).

The minimum altitude is an input: the standard tabulates it by latitude for a
list of capitals in its national-annex tables, which are not reproduced here.
"""

from __future__ import annotations

import datetime as dt
import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

from luxsweep.kernels.climate import Site
from luxsweep.kernels.geometry import Geometry
from luxsweep.kernels.raytrace import BLOCKED, Scene
from luxsweep.kernels.sun import direction, solar_position, to_building_frame

__all__ = [
    "LEVEL_HOURS",
    "WindowPoints",
    "reference_height",
    "space_sunlight_hours",
    "sun_path",
    "sunlight_hours",
    "sunlight_level",
    "window_reference_points",
]

_WINDOW = re.compile(r"(?:^|/)window_(\d+)$")

LEVEL_HOURS = (1.5, 3.0, 4.0)
"""Sunlight hours [h] for EN 17037 levels 1 (minimum), 2 (medium), 3 (high) (from memory)."""


def reference_height(sill: np.ndarray | float, head: np.ndarray | float) -> np.ndarray:
    """Height of the EN 17037 sunlight reference point above the floor.

    Parameters
    ----------
    sill, head : array_like [m]
        Window sill and head heights above the floor.

    Returns
    -------
    ndarray [m]
        ``min(max(sill + 0.3, 1.2), head)`` (EN 17037:2018, from memory: at
        least 1.2 m above the floor and 0.3 m above the sill).
    """
    return np.minimum(np.maximum(np.asarray(sill, dtype=np.float64) + 0.3, 1.2), head)


def sun_path(site: Site, day: dt.date, step: float = 1.0) -> tuple[np.ndarray, np.ndarray]:
    """Apparent sun altitude and azimuth at the middle of every step of one day.

    Parameters
    ----------
    site : Site
    day : datetime.date
        The day (local standard time, 00:00 to 24:00).
    step : float [min]
        Step length; must divide 1440.

    Returns
    -------
    altitude, azimuth : ndarray (1440 / step,) [deg]
        NREL SPA through :func:`kernels.sun.solar_position`; azimuth clockwise
        from north.
    """
    n = round(1440.0 / step)
    start = pd.Timestamp(day)
    times = start + pd.to_timedelta((np.arange(n) + 0.5) * step, unit="min")
    return solar_position(pd.DatetimeIndex(times), site)


def sunlight_hours(
    scene: Scene,
    points: np.ndarray,
    normals: np.ndarray,
    altitude: np.ndarray,
    azimuth: np.ndarray,
    orientation: float,
    min_altitude: float,
    step: float = 1.0,
) -> np.ndarray:
    """Hours of possible sunlight at reference points on windows.

    Parameters
    ----------
    scene : Scene
        The building and its surroundings (building frame).
    points : ndarray (m, 3) [m]
        Reference points on the inner face of the glass (building frame).
    normals : ndarray (m, 3)
        Outward unit normals of the windows.
    altitude, azimuth : ndarray (k,) [deg]
        Sun positions at the middle of each step (site frame), e.g. from
        :func:`sun_path`.
    orientation : float [deg]
        Site azimuth of the building's front façade normal.
    min_altitude : float [deg]
        Sun altitude below which a step does not count.
    step : float [min]
        Length of each step.

    Returns
    -------
    ndarray (m,) [h]
        Steps with the sun visible through the window × ``step`` / 60.
    """
    p = np.asarray(points, dtype=np.float64).reshape(-1, 3)
    n = np.asarray(normals, dtype=np.float64).reshape(-1, 3)
    up = np.asarray(altitude) >= min_altitude
    sun = to_building_frame(direction(np.asarray(azimuth)[up], np.asarray(altitude)[up]),
                            orientation)
    hours = np.zeros(p.shape[0])
    if sun.shape[0] == 0:
        return hours
    front = sun @ n.T > 0.0  # (k, m): the sun on the outer side of the window's plane
    k, m = np.nonzero(front)
    # start just inside the glass so the ray crosses it
    origins = scene.lift(p[m], -n[m])
    code, _ = scene.sky_view(origins, sun[k], unit=True)
    seen = np.bincount(m[code != BLOCKED], minlength=p.shape[0])
    hours[:] = seen * (step / 60.0)
    return hours


def sunlight_level(hours: np.ndarray) -> np.ndarray:
    """EN 17037 exposure-to-sunlight level from hours on the chosen day.

    Parameters
    ----------
    hours : array_like [h]

    Returns
    -------
    ndarray of int8
        0 none, 1 minimum (≥ 1.5 h), 2 medium (≥ 3 h), 3 high (≥ 4 h)
        (:data:`LEVEL_HOURS`, from memory).
    """
    return np.searchsorted(np.asarray(LEVEL_HOURS), np.asarray(hours, dtype=np.float64),
                           side="right").astype(np.int8)


@dataclass(frozen=True)
class WindowPoints:
    """Sunlight reference points of the outside windows of a geometry.

    Attributes
    ----------
    space : ndarray (k,) int
        Index into ``geometry.space_names`` of the space each window lights.
    group : tuple of str
        The window's group name (``window_<i>`` or ``<space>/window_<i>``).
    points : ndarray (k, 3) [m]
        Reference points on the glass (building frame).
    normals : ndarray (k, 3)
        Outward unit normals of the windows.
    """

    space: np.ndarray
    group: tuple[str, ...]
    points: np.ndarray
    normals: np.ndarray


def window_reference_points(geometry: Geometry) -> WindowPoints:
    """EN 17037 sunlight reference points of every outside wall window.

    The point is centred on the window's width, on the plane of its glass, at
    :func:`reference_height` above the floor of its space (from the sill and
    head heights of the glazed opening). Roof windows and internal openings
    (glazing between two spaces) have none: the standard's point is on a
    façade window (from memory).

    Parameters
    ----------
    geometry : Geometry
        A parametric room or building (its windows are the groups
        ``window_<i>`` or ``<space>/window_<i>``).

    Returns
    -------
    WindowPoints
    """
    outside = geometry.glazing_set_index >= 0
    boxes = geometry.space_boxes
    space, groups, points, normals = [], [], [], []
    for g, name in enumerate(geometry.group_names):
        if not _WINDOW.search(name):
            continue
        tri = geometry.triangles[(geometry.group == g) & outside]
        if tri.shape[0] == 0:
            continue
        n = np.cross(tri[0, 1] - tri[0, 0], tri[0, 2] - tri[0, 0])
        n /= np.linalg.norm(n)
        if abs(n[2]) > 0.5:  # a roof window
            continue
        owner = name.split("/")[0] if "/" in name else None
        k = geometry.space_names.index(owner) if owner else 0
        lo, hi = tri.reshape(-1, 3).min(axis=0), tri.reshape(-1, 3).max(axis=0)
        floor = boxes[k, 0, 2] if boxes is not None and len(boxes) else 0.0
        centre = 0.5 * (lo + hi)
        if boxes is not None and len(boxes) and np.dot(n, centre - boxes[k].mean(axis=0)) < 0:
            n = -n  # point away from the space
        z = floor + reference_height(lo[2] - floor, hi[2] - floor)
        space.append(k)
        groups.append(name)
        points.append([centre[0], centre[1], float(z)])
        normals.append(n)
    return WindowPoints(np.asarray(space, dtype=np.int64), tuple(groups),
                        np.asarray(points, dtype=np.float64).reshape(-1, 3),
                        np.asarray(normals, dtype=np.float64).reshape(-1, 3))


def space_sunlight_hours(hours: np.ndarray, space: np.ndarray, n_spaces: int) -> np.ndarray:
    """Sunlight hours of each space: those of its best window.

    Parameters
    ----------
    hours : ndarray (..., k) [h]
        Per window (:func:`sunlight_hours`), for one or more sun paths.
    space : ndarray (k,) int
        Space of each window (:attr:`WindowPoints.space`).
    n_spaces : int

    Returns
    -------
    ndarray (..., n_spaces) [h]
        The largest over the space's windows; 0 for a space without one.
    """
    h = np.asarray(hours, dtype=np.float64)
    out = np.zeros((*h.shape[:-1], n_spaces))
    for k in range(n_spaces):
        mine = np.asarray(space) == k
        if mine.any():
            out[..., k] = h[..., mine].max(axis=-1)
    return out
