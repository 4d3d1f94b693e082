"""View positions of a study: eye-height sensors facing a view direction (``views:``).

Glare at a view position is estimated from the illuminance on a vertical plane
at the eye facing the view direction (the simplified daylight glare
probability, :mod:`kernels.glare`). The views are sensors of a coefficient
set of their own on the variant's geometry (:func:`sweep.run.view_coefficients`),
never of the grid's: the grid's sensors, coefficient key and results are
exactly those of the same study without views (adding a view to a set would
change the random samples its neighbours share in the reflected-light gather).
:class:`ViewLayout` is what the plan hands to the series task: the views'
names, the space each is in (an index into the geometry's
:class:`~sweep.spaces.SpaceLayout`) and their sensor rows.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from luxsweep.sweep.config import view_boxes, view_direction

if TYPE_CHECKING:
    from luxsweep.sweep.config import Study
    from luxsweep.sweep.spaces import SpaceLayout

__all__ = ["ViewLayout", "view_layout"]


@dataclass(frozen=True, eq=False)
class ViewLayout:
    """The views of one geometry.

    Parameters
    ----------
    names : tuple of str
        View names in study order (the store's ``view`` coordinate).
    space : ndarray (n_views,) int32
        Index of each view's space in the geometry's ``SpaceLayout.names``.
    sensors : ndarray (n_views, 6) float64
        Eye position x, y, z [m] and the unit view direction (horizontal), building frame.
    """

    names: tuple[str, ...]
    space: np.ndarray
    sensors: np.ndarray

    def __post_init__(self) -> None:
        space = np.ascontiguousarray(self.space, dtype=np.int32)
        sensors = np.ascontiguousarray(self.sensors, dtype=np.float64)
        if sensors.shape != (len(self.names), 6) or space.shape != (len(self.names),):
            raise ValueError("one space index and one sensor row (x, y, z, nx, ny, nz) per view")
        for a in (space, sensors):
            a.flags.writeable = False
        object.__setattr__(self, "space", space)
        object.__setattr__(self, "sensors", sensors)

    @property
    def n_views(self) -> int:
        return len(self.names)


def view_layout(study: Study, layout: SpaceLayout) -> ViewLayout | None:
    """The views of a resolved study (None when it has none).

    The study has passed :func:`sweep.config.cross_check` (each view inside an
    occupied space, a direction it can take). The eye is ``height`` above its
    space's floor; its sensor faces the building-frame azimuth ``direction``
    (``(sin az, cos az, 0)``, DEVELOPERS.md "Frames").
    """
    if study.views is None:
        return None
    boxes = view_boxes(study)
    rows, space = [], []
    for v in study.views:
        name = v.space if v.space is not None else next(iter(boxes))
        lo, _, windows = boxes[name]
        az = view_direction(v, windows)
        if az is None:  # refused by cross_check; a programming error here
            raise ValueError(f"view '{v.name}' has no direction")
        rad = np.radians(az)
        rows.append((v.x, v.y, lo[2] + v.height, np.sin(rad), np.cos(rad), 0.0))
        space.append(layout.names.index(name))
    return ViewLayout(names=tuple(v.name for v in study.views),
                      space=np.asarray(space, dtype=np.int32),
                      sensors=np.asarray(rows, dtype=np.float64))
