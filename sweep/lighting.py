"""Electric lighting settings of a study's spaces, as the series stage needs them.

The study file's ``lighting:`` (top level, for every occupied space) and each
``spaces:`` item's own ``lighting:`` (the keys it gives replace the top level's,
for the space and its copies) are resolved here for the occupied spaces of a
:class:`sweep.spaces.SpaceLayout`, in its order; the numerics (control
illuminance, power fractions, energy) are in :mod:`kernels.lighting`.

Control point ``median``: the sensor of the space whose daylight factor is the
median of the space's (:func:`kernels.lighting.median_sensor`, with each
glazing row's daylight factor). A photosensor sits at one point and reads it all
year, so the control point is one fixed sensor; a per-step median of the grid
would move the point with the weather and decouple it from any place a sensor
could be mounted. ``[x, y]``: in the space's own frame (a copy's frame is
shifted with it; a ``room:`` study's is the building frame), read at the
nearest sensor of that space.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from luxsweep.sweep.config import Lighting

if TYPE_CHECKING:
    from luxsweep.sweep.config import Study
    from luxsweep.sweep.spaces import SpaceLayout

__all__ = ["SpaceLights", "control_sensors", "space_lights"]


@dataclass(frozen=True, eq=False)
class SpaceLights:
    """Resolved lighting of each occupied space of a layout (arrays in layout order).

    Attributes
    ----------
    power_density : ndarray (n_spaces,) [W/m²]
    target : ndarray (n_spaces,) [lx]
    control : tuple of str (n_spaces)
    min_power, min_light : ndarray (n_spaces,) [-]
    point : tuple of (x, y) or None (n_spaces)
        Control point in the building frame [m]; None for the median sensor.
    """

    power_density: np.ndarray
    target: np.ndarray
    control: tuple[str, ...]
    min_power: np.ndarray
    min_light: np.ndarray
    point: tuple[tuple[float, float] | None, ...]


def _settings_by_space(study: Study) -> dict[str, tuple[dict, tuple[float, float]]]:
    """Every occupied space's merged settings and the building-frame origin of its frame."""
    if study.spaces is None:  # one room (building frame) or mesh spaces (no frame of their own)
        merged = Lighting().over(study.lighting)
        names = [sp.name for sp in study.mesh_spaces or []] or ["room"]
        return {name: (merged, (0.0, 0.0)) for name in names}
    out = {}
    for sp in study.spaces:
        if not sp.occupied:
            continue
        merged = (sp.lighting or Lighting()).over(study.lighting)
        for name, origin in sp.expanded():
            out[name] = (merged, (float(origin[0]), float(origin[1])))
    return out


def space_lights(study: Study, layout: SpaceLayout) -> SpaceLights:
    """The lighting of every space of ``layout`` from a resolved study.

    Raises
    ------
    ValueError
        A space of the layout without complete settings (``sweep.config.cross_check``
        refuses such a study first, naming the place in the file).
    """
    settings = _settings_by_space(study)
    rows = []
    for name in layout.names:
        if name not in settings:
            raise ValueError(f"space '{name}' has no lighting settings")
        merged, origin = settings[name]
        if merged["power_density"] is None or merged["target"] is None:
            raise ValueError(f"space '{name}' lacks power_density or target")
        point = merged["control_point"]
        rows.append((merged, None if point == "median"
                     else (origin[0] + float(point[0]), origin[1] + float(point[1]))))
    return SpaceLights(
        power_density=np.array([m["power_density"] for m, _ in rows], dtype=np.float64),
        target=np.array([m["target"] for m, _ in rows], dtype=np.float64),
        control=tuple(str(m["control"]) for m, _ in rows),
        min_power=np.array([m["min_power"] for m, _ in rows], dtype=np.float64),
        min_light=np.array([m["min_light"] for m, _ in rows], dtype=np.float64),
        point=tuple(p for _, p in rows),
    )


def control_sensors(lights: SpaceLights, layout: SpaceLayout, sensors: np.ndarray,
                    daylight_factor: np.ndarray) -> np.ndarray:
    """The control sensor of every space, per glazing row.

    Parameters
    ----------
    lights : SpaceLights
    layout : SpaceLayout
    sensors : ndarray (n_sensors, >= 2) [m]
        Sensor positions in the building frame.
    daylight_factor : ndarray (n_rows, n_sensors) [%]
        Each glazing row's daylight factor (picks the median sensors).

    Returns
    -------
    ndarray (n_rows, n_spaces) of intp
        Index into the grid of each space's control sensor.
    """
    from luxsweep.kernels.lighting import median_sensor, nearest_sensor

    own = layout.sensor_space
    out = median_sensor(np.asarray(daylight_factor), own)
    for k, point in enumerate(lights.point):
        if point is None:
            continue
        members = np.flatnonzero(own == k)
        out[:, k] = members[nearest_sensor(np.asarray(point), np.asarray(sensors)[members])]
    return out
