"""Spaces of a study: which sensor belongs to which space, and each space's grid area.

A study holds one or more *spaces* (CONTRACT.md §1b): a ``room:`` study is a
building of one space named ``room``. Every sensor belongs to exactly one
occupied space; results are computed per sensor, summed per space and pooled
for the building (CONTRACT.md §3). :class:`SpaceLayout` is the one description
of that ownership that the plan hands to the run, the store, the ranking and
the report.
"""

from __future__ import annotations

import difflib
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:
    from luxsweep.sweep.config import StudyFile

__all__ = ["ALL_SPACES", "ROOM", "SpaceLayout", "check_rank_spaces", "single_space"]

ROOM = "room"
"""Name of the one space of a ``room:`` study (CONTRACT.md §1b)."""

ALL_SPACES = "all"
"""``spaces: all`` in a ranking criterion: every occupied space on its own."""


@dataclass(frozen=True, eq=False)
class SpaceLayout:
    """Occupied spaces of one geometry and the space of every sensor.

    Parameters
    ----------
    names : tuple of str
        Occupied spaces in study order (copies expanded: ``classroom-1`` …);
        the store's ``space`` coordinate.
    sensor_space : ndarray (n_sensors,) int32
        Index into ``names`` of the space that owns each sensor.
    area : ndarray (n_spaces,) float64 [m²]
        Floor area covered by each space's grid (the weight of its means in the
        building totals). NaN where it is unknown (sensors read from a file);
        a study with such a space has one space only.
    """

    names: tuple[str, ...]
    sensor_space: np.ndarray
    area: np.ndarray

    def __post_init__(self) -> None:
        own = np.ascontiguousarray(self.sensor_space, dtype=np.int32)
        area = np.ascontiguousarray(self.area, dtype=np.float64)
        if area.shape != (len(self.names),):
            raise ValueError("area must have one entry per space")
        if own.size and (own.min() < 0 or own.max() >= len(self.names)):
            raise ValueError("sensor_space must index names")
        for a in (own, area):
            a.flags.writeable = False
        object.__setattr__(self, "sensor_space", own)
        object.__setattr__(self, "area", area)

    @property
    def n_spaces(self) -> int:
        return len(self.names)

    def canonical(self) -> dict[str, Any]:
        """JSON-able form (names, per-space sensor counts, areas rounded to 1 mm²)."""
        counts = np.bincount(self.sensor_space, minlength=self.n_spaces)
        return {"names": list(self.names), "sensors": counts.tolist(),
                "area": [None if np.isnan(a) else round(float(a), 6) for a in self.area]}


def single_space(n_sensors: int, area: float, name: str = ROOM) -> SpaceLayout:
    """The layout of a study of one space: every sensor belongs to it.

    Parameters
    ----------
    n_sensors : int
    area : float [m²]
        Floor area covered by the grid (NaN when unknown).
    name : str
    """
    return SpaceLayout(names=(name,), sensor_space=np.zeros(n_sensors, dtype=np.int32),
                       area=np.array([area], dtype=np.float64))


def check_rank_spaces(loaded: StudyFile, layouts: Sequence[SpaceLayout]) -> None:
    """Refuse ranking criteria and objectives that name a space the study does not have.

    Called at the end of :func:`sweep.plan.make_plan` (so by ``luxsweep check``,
    ``plan`` and ``run``): a criterion on a misspelt space would otherwise never be
    checked, and its variants would pass without it.

    Parameters
    ----------
    loaded : StudyFile
        The study (its ``rank.require`` entries and their lines).
    layouts : sequence of SpaceLayout
        The occupied spaces of every variant; a name is known when any variant has it.

    Raises
    ------
    StudyFileError
        Naming the file, ``rank.require.<i>.spaces`` (or ``rank.prefer.<i>.spaces``)
        with its line, the unknown name, the closest known one and the study's occupied
        spaces.
    """
    rank = loaded.study.rank
    if rank is None:
        return
    known = list(dict.fromkeys(n for lay in layouts for n in lay.names))
    scoped = [("require", i, r) for i, r in enumerate(rank.require)]
    scoped += [("prefer", i, o) for i, o in enumerate(rank.prefer)]
    for part, i, req in scoped:
        if req.spaces == ALL_SPACES and ALL_SPACES in known:
            raise loaded.error(
                ("rank", part, i, "spaces"),
                f"'spaces: {ALL_SPACES}' means every space, but a space is named "
                f"'{ALL_SPACES}'; rename that space")
        if req.spaces is None or req.spaces == ALL_SPACES:
            continue
        names = [req.spaces] if isinstance(req.spaces, str) else list(req.spaces)
        for name in names:
            if name in known:
                continue
            close = difflib.get_close_matches(name, known, n=1)
            hint = f"did you mean '{close[0]}'? " if close else ""
            raise loaded.error(
                ("rank", part, i, "spaces"),
                f"no occupied space is named '{name}'; {hint}the study's occupied spaces are: "
                f"{', '.join(known)} (or write 'spaces: {ALL_SPACES}')")
