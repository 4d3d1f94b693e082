"""Plan a sweep: geometry and coefficient key per variant, groups, tasks, cost; nothing computed.

Variants that share a coefficient key (same geometry, sensors and compute
settings) share one coefficient set. Within a key, the variants that also share
their climate and their time-series settings (time step, ground reflectance,
occupancy, metric thresholds) form one *series task*: one set of sky vectors for
all their orientations, one batched illuminance product for all their glazing
rows (open and, with operable shading, closed), the metrics accumulated chunk
by chunk, and its variants' results written to the task's own chunks of the
store. The plan numbers the variants so that every series task is one
contiguous range of store indices (:func:`order_by_task`), which lets the
store's chunks follow task boundaries (:mod:`sweep.store`).

Building the plan also validates every input that ``luxsweep run`` will read
(geometry of every variant, sensor grids, every weather file), so ``check``,
``plan`` and ``run`` refuse bad input before any cluster starts.
"""

from __future__ import annotations

import functools
import hashlib
import json
import logging
import os
from collections.abc import Callable, Iterable, Iterator, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from luxsweep.kernels.errors import InputError
from luxsweep.sweep.cache import CoefficientCache
from luxsweep.sweep.config import Study, StudyFile, canonical_json
from luxsweep.sweep.errors import StudyFileError
from luxsweep.sweep.expand import (
    Variant,
    Variants,
    axis_names,
    expand,
    named_parts,
    split_path,
    study_hash,
)
from luxsweep.sweep.spaces import SpaceLayout, check_rank_spaces, single_space
from luxsweep.sweep.views import ViewLayout, view_layout

__all__ = [
    "BYTES_PER_VALUE",
    "ROOM_PARAMETERS",
    "CoefficientJob",
    "Members",
    "PerVariant",
    "Plan",
    "SeriesTask",
    "axis_roles",
    "build_geometry",
    "check_climates",
    "make_plan",
    "occupied_times",
    "order_by_task",
    "room_key",
    "set_bytes_per_sensor",
    "settings_of",
    "space_key",
]

BYTES_PER_VALUE = 4  # float32 results

log = logging.getLogger("luxsweep")


class Members(Sequence[tuple[int, int, int]]):
    """A series task's members: ``(variant index, orientation index, row index)`` rows.

    Held as one (n, 3) integer array; iterating or indexing yields tuples of ints,
    so it reads like the tuple of tuples it replaces.
    """

    def __init__(self, rows: Any) -> None:
        arr = np.ascontiguousarray(np.asarray(rows, dtype=np.int64).reshape(-1, 3))
        arr.flags.writeable = False
        self.array = arr

    def __len__(self) -> int:
        return int(self.array.shape[0])

    def __getitem__(self, i: Any) -> Any:
        if isinstance(i, slice):
            return Members(self.array[i])
        vi, oi, ri = self.array[i].tolist()
        return (vi, oi, ri)

    def __iter__(self) -> Iterator[tuple[int, int, int]]:
        yield from map(tuple, self.array.tolist())

    def __eq__(self, other: object) -> bool:
        if isinstance(other, Members):
            return bool(np.array_equal(self.array, other.array))
        if isinstance(other, tuple | list):
            return list(self) == [tuple(m) for m in other]
        return NotImplemented

    __hash__ = None  # type: ignore[assignment]

    def __repr__(self) -> str:
        return f"Members({len(self)} variants)"


class PerVariant(Sequence[Any]):
    """One item per variant without one object per variant: ``items[index[i]]``.

    The plan's sensors, layouts and keys are shared by every variant of a
    geometry; this holds each once and an index array.
    """

    def __init__(self, items: list[Any], index: np.ndarray) -> None:
        self.items = items
        self.index = np.asarray(index, dtype=np.int32)

    def __len__(self) -> int:
        return int(self.index.shape[0])

    def __getitem__(self, i: Any) -> Any:
        if isinstance(i, slice):
            return PerVariant(self.items, self.index[i])
        return self.items[int(self.index[i])]

    def __iter__(self) -> Iterator[Any]:
        items = self.items
        for j in self.index.tolist():
            yield items[j]

    def counts(self) -> np.ndarray:
        """How many variants hold each item."""
        return np.bincount(self.index, minlength=len(self.items))



@dataclass(frozen=True)
class CoefficientJob:
    """One distinct coefficient set: inputs of :func:`kernels.coefficients.compute_coefficients`."""

    key: str
    geometry: Any
    sensors: np.ndarray
    settings: Any
    variants: Sequence[int]
    """Store indices of the variants using the set (an int array from :func:`make_plan`)."""
    cached: bool
    rays: int
    layout: SpaceLayout | None = None
    """Space of every sensor and grid area per space (None only in hand-made jobs)."""
    views: ViewLayout | None = None
    """The study's views (``views:``): the series task computes (or reads from the
    cache) their own coefficient set on this geometry (:func:`sweep.run.view_coefficients`)."""

    @property
    def n_sensors(self) -> int:
        return int(self.sensors.shape[0])


@dataclass(frozen=True, eq=False)  # members and ids are arrays: identity, not value
class SeriesTask:
    """One (coefficient key, climate, series settings) group of variants.

    Attributes
    ----------
    task_id : str
        ``series-<key[:12]>-<hash>``: explicit Dask key, names the group.
    key : str
        Coefficient key.
    climate, climate_file : str
        Climate label and weather file.
    orientations : tuple of float
        Distinct orientations [deg] of the variants (sky-vector batch).
    rows : tuple of tuple of float
        Distinct glazing rows ``(τ_open per set..., τ_closed per set...)``.
    glazing_sets : tuple of str
        Order of the sets within a row.
    members : Members
        ``(variant index, orientation index, row index)`` of each member.
    study : Study
        The resolved study of the first member (time step, occupancy, ...).
    climate_sha256 : str
        sha256 of the weather file as the client read it (workers check theirs).
    layout : SpaceLayout or None
        The space of every sensor of the set and each space's grid area (the
        coefficient job's); None in hand-made tasks: one space.
    views : ViewLayout or None
        The views (``views:``; their own coefficient set on the same geometry); None
        without views.
    """

    task_id: str
    key: str
    climate: str
    climate_file: str
    orientations: tuple[float, ...]
    rows: tuple[tuple[float, ...], ...]
    glazing_sets: tuple[str, ...]
    members: Sequence[tuple[int, int, int]]
    study: Study
    variant_ids: Sequence[str]
    climate_sha256: str = ""
    layout: SpaceLayout | None = None
    views: ViewLayout | None = None

    @property
    def shading(self) -> bool:
        n = len(self.glazing_sets)
        return any(r[:n] != r[n:] for r in self.rows)

    def open_rows(self) -> np.ndarray:
        n = len(self.glazing_sets)
        return np.asarray([r[:n] for r in self.rows], dtype=np.float32).reshape(-1, n)

    def closed_rows(self) -> np.ndarray:
        n = len(self.glazing_sets)
        return np.asarray([r[n:] for r in self.rows], dtype=np.float32).reshape(-1, n)


@dataclass
class Plan:
    """What a run will do."""

    loaded: StudyFile
    variants: Sequence[Variant]
    """:class:`~sweep.expand.Variants` in store order (lazy: bulk ``ids``, ``labels()``,
    ``axis_values(path)``)."""
    study_hash: str
    sensors: Sequence[np.ndarray]
    """Per variant (a :class:`PerVariant`: one array per geometry, shared)."""
    layouts: Sequence[SpaceLayout]
    keys: Sequence[str]
    jobs: dict[str, CoefficientJob]
    tasks: list[SeriesTask]
    n_steps: dict[str, int] = field(default_factory=dict)
    times: Any = None  # occupied step stamps (only with store_series)

    @property
    def axes(self) -> list[str]:
        return axis_names(self.loaded.study)

    def task_bounds(self) -> list[tuple[int, int]]:
        """``(start, stop)`` store indices of each series task (contiguous ranges).

        Raises
        ------
        RuntimeError
            When a task's members are not a contiguous range (a planning bug that
            would make tasks share chunks of the store).
        """
        bounds = []
        for t in self.tasks:
            idx = np.sort(t.members.array[:, 0] if isinstance(t.members, Members)
                          else np.asarray([m[0] for m in t.members], dtype=np.int64))
            if idx[-1] - idx[0] + 1 != len(idx) or len(np.unique(idx)) != len(idx):
                raise RuntimeError(f"series task {t.task_id}: variants {idx[0]}..{idx[-1]} are "
                                   "not contiguous in the store; tasks would share chunks")
            bounds.append((int(idx[0]), int(idx[-1]) + 1))
        return bounds

    # -- per variant, in bulk -------------------------------------------------
    def variant_ids(self) -> list[str]:
        """``variant_id`` of every variant in store order."""
        if isinstance(self.variants, Variants):
            return self.variants.ids.tolist()
        return [v.variant_id for v in self.variants]

    def labels(self) -> list[str]:
        """Label of every variant in store order."""
        if isinstance(self.variants, Variants):
            return self.variants.labels()
        return [v.label for v in self.variants]

    def axis_values(self, axis: str) -> list[Any]:
        """Coordinate of ``axis`` for every variant in store order."""
        if isinstance(self.variants, Variants):
            return self.variants.axis_values(axis)
        return [v.axes[axis] for v in self.variants]

    def n_sensors_total(self) -> int:
        """Sensors summed over all variants."""
        if isinstance(self.sensors, PerVariant):
            return int(sum(len(s) * int(c) for s, c in
                           zip(self.sensors.items, self.sensors.counts(), strict=True)))
        return sum(len(s) for s in self.sensors)

    # -- cost -----------------------------------------------------------------
    def estimate(self) -> dict[str, Any]:
        """Rays for the missing coefficient sets, GEMM flops, bytes written (the study's
        per-sensor, per-variant and per-space variables, :mod:`sweep.registry`, before
        compression)."""
        missing = [j for j in self.jobs.values() if not j.cached]
        flops = 0
        for t in self.tasks:
            job = self.jobs[t.key]
            n_basis = _n_basis(job.settings.subdivision)
            n_steps = self.n_steps.get(t.climate, 8760) // 2  # about half the steps are lit
            n_sets = len(t.glazing_sets)
            per_set = 2 * job.n_sensors * n_basis * len(t.orientations) * n_steps
            flops += per_set * n_sets * (2 if t.shading else 1)
        from luxsweep.sweep.registry import space_variables, store_variables

        metrics = list(self.loaded.study.metrics)
        sensor_vars, variant_vars = store_variables(metrics)
        distinct = (self.layouts.items if isinstance(self.layouts, PerVariant)
                    else self.layouts)
        n_spaces = max((len(lay.names) for lay in distinct), default=1)
        per_variant = len(variant_vars) + 1 + len(space_variables(metrics)) * n_spaces  # + done
        total = self.n_sensors_total()
        written = total * len(sensor_vars) * BYTES_PER_VALUE
        written += len(self.variants) * per_variant * BYTES_PER_VALUE
        if self.times is not None:
            written += 2 * total * len(self.times) * BYTES_PER_VALUE
        return {
            "variants": len(self.variants),
            "coefficient_sets": len(self.jobs),
            "cache_hits": len(self.jobs) - len(missing),
            "cache_misses": len(missing),
            "series_tasks": len(self.tasks),
            "rays": int(sum(j.rays for j in missing)),
            "gemm_flops": int(flops),
            "bytes_written": int(written),
        }

    def to_dict(self) -> dict[str, Any]:
        """JSON-able summary (``luxsweep plan --json``)."""
        return {
            "study": str(self.loaded.path),
            "name": self.loaded.study.name,
            "study_hash": self.study_hash,
            "axes": self.axes,
            "estimate": self.estimate(),
            "coefficient_sets": [
                {"key": j.key, "cached": j.cached, "sensors": j.n_sensors,
                 "variants": len(j.variants), "rays": j.rays,
                 "glazing_sets": list(j.geometry.glazing_sets)}
                for j in self.jobs.values()
            ],
            "series_tasks": [
                {"task": t.task_id, "key": t.key, "climate": t.climate,
                 "orientations": list(t.orientations), "glazing_rows": len(t.rows),
                 "variants": len(t.members)}
                for t in self.tasks
            ],
            "variants": [
                {"index": i, "variant_id": vid, "label": label, "key": key,
                 "axes": dict(zip(self.axes, values, strict=True))}
                for i, (vid, label, key, *values) in enumerate(zip(
                    self.variant_ids(), self.labels(), self.keys,
                    *[self.axis_values(a) for a in self.axes], strict=True))
            ],
        }


def _n_basis(subdivision: int) -> int:
    return 144 * subdivision * subdivision + 1 + 1


def _estimate_rays(geometry: Any, sensors: np.ndarray, settings: Any) -> int:
    """Rough ray count of one coefficient set (for the plan's cost line only)."""
    n_s = sensors.shape[0]
    n_basis = _n_basis(settings.subdivision)
    n_sun = _sun_points(settings.sun_spacing)
    area = float(np.sum(geometry.areas[~geometry.is_glazing]))
    n_elements = max(1, min(int(area / settings.element_size**2), settings.max_elements))
    rays = n_s * ((n_basis - 1) * settings.sky_rays_per_patch + settings.ground_rays + n_sun)
    rays += n_s * settings.sensor_rays + n_elements * settings.element_rays
    rays += n_elements * (n_basis + _sun_points(settings.reflected_sun_spacing))
    return int(rays)


def set_bytes_per_sensor(settings: Any, n_sets: int) -> int:
    """Bytes of one sensor's rows in a coefficient set: its four families (sky and sun,
    direct and reflected) for every glazing set, float32."""
    return (BYTES_PER_VALUE * n_sets * 2
            * (_sun_points(settings.sun_spacing) + _n_basis(settings.subdivision)))


@functools.lru_cache(maxsize=8)
def _sun_points(spacing: float) -> int:
    """Number of sun points at ``spacing`` [deg] (made once per spacing)."""
    from luxsweep.kernels.sun import SunPoints

    return int(SunPoints(spacing).n)


# ---------------------------------------------------------------------------
# building


def _geometry_inputs(study: Study) -> dict[str, Any]:
    """What fixes the built geometry and sensors, except internal openings' transmittances.

    Which glazing sets sit on internal openings is known only once the building
    is built; :func:`make_plan` adds their transmittances (:func:`_internal_inputs`).
    """
    data = study.canonical()
    keys = ("room", "mesh", "materials", "sensors", "grid", "compute")
    doc = {k: data[k] for k in keys}
    for key in ("spaces", "obstructions", "mesh_spaces"):  # only when given
        if key in data:
            doc[key] = data[key]
    if "spaces" in doc:  # a space's lighting settings do not change ray tracing
        doc["spaces"] = [{k: v for k, v in sp.items() if k != "lighting"}
                         for sp in doc["spaces"]]
    doc["panes"] = {name: g["panes"] for name, g in data["glazings"].items()}
    return doc


def _internal_inputs(study: Study, internal_sets: Iterable[str]) -> dict[str, float]:
    """Normal transmittance of every glazing set used on an internal opening.

    They are baked into the coefficients (``kernels.geometry`` module notes), so
    a variant that changes one needs its own geometry and coefficient set.
    """
    return {s: study.glazings[s].transmittance for s in sorted(internal_sets)}


def _wrap_geometry_error(loaded: StudyFile, variant: Variant | None, exc: InputError) -> Exception:
    """A kernel error about the room as a study-file error naming the key path.

    Errors in an OBJ or sensor file pass through (the kernel's message names that
    file and its line), unless their field is a study-file key (``materials.*``,
    ``grid.*``): then the mistake is in the study file, and the other file is
    named as context.
    """
    loc = tuple(int(p) if p.isdigit() else p for p in (exc.field or "").split(".") if p)
    elsewhere = bool(exc.file) and Path(os.path.abspath(str(exc.file))) != loaded.path
    if elsewhere and not (exc.field or "").startswith(("materials.", "grid.", "mesh_spaces.")):
        return exc
    where = ""
    if variant is not None and variant.axes:
        key = ".".join(str(p) for p in loc)
        base = loaded.study.canonical()  # a space in a vary path is named, in `loc` numbered
        indexed = [".".join(map(str, named_parts(base, split_path(p)))) for p in variant.axes]
        varied = [path for path in indexed
                  if key == path or key.startswith(path + ".") or path.startswith(key + ".")]
        if varied:
            where = f" (in variant '{variant.label}', from 'vary')"
        elif not _fails_without_vary(loaded):  # else the mistake is in every variant
            where = f" (in variant '{variant.label}')"
    line = loaded.line_of(loc)
    line_text = f"line {line}, " if line is not None else ""
    key = ".".join(str(p) for p in loc) or "room"
    source = f" (in {exc.file})" if elsewhere else ""
    return StudyFileError(f"{loaded.path}: {line_text}key '{key}'{where}: {exc.message}{source}")


def _fails_without_vary(loaded: StudyFile) -> bool:
    """Whether the study's room, with the values written in the file, fails to build."""
    try:
        build_geometry(loaded.study)
    except InputError:
        return True
    return False


ROOM_PARAMETERS = ("width", "depth", "height", "thickness", "reflectance", "windows",
                   "overhang", "obstructions")
"""Parameters of :func:`kernels.geometry.parametric_room` that are keys under ``room``."""


def room_key(parameter: str | None) -> str | None:
    """The study-file key path of a ``parametric_room`` parameter path.

    The kernel names its own parameters in errors (``windows.1.sill``,
    ``glazing_panes.main``); the study file holds them at ``room.windows.1.sill``
    and ``glazings.main.panes``. Other names pass through unchanged.
    """
    if not parameter:
        return parameter
    head, _, rest = parameter.partition(".")
    if head == "glazing_panes" and rest:
        return f"glazings.{rest}.panes"
    if head in ROOM_PARAMETERS:
        return f"room.{parameter}"
    return parameter


def _parametric_room(study: Study, panes: dict[str, int]) -> Any:
    """``kernels.geometry.parametric_room`` of the study's ``room``; errors name study keys."""
    from luxsweep.kernels import geometry as kg

    room = study.room
    used = {w.glazing for w in room.windows}
    try:
        return kg.parametric_room(
            width=room.width, depth=room.depth, height=room.height,
            windows=[w.model_dump() for w in room.windows],
            reflectance=room.reflectance.model_dump(),
            glazing_panes={k: v for k, v in panes.items() if k in used},
            thickness=room.thickness,
            overhang=room.overhang.model_dump() if room.overhang else None,
            obstructions=[o.model_dump() for o in room.obstructions],
        )
    except InputError as exc:
        raise type(exc)(exc.message, file=exc.file, line=exc.line,
                        field=room_key(exc.field)) from exc


def space_key(field: str | None, study: Study) -> str | None:
    """The study-file key path of a ``parametric_building`` error field.

    The kernel numbers the spaces after copies are expanded (``spaces.7.windows.0``);
    the study file holds the space that was copied (``spaces.2.windows.0``; an
    origin of a later copy is its ``copies.step``). ``internal_transmittance.<set>``
    is ``glazings.<set>.transmittance``; ``glazing_panes.<set>`` is ``glazings.<set>.panes``.
    """
    if not field:
        return field
    parts = field.split(".")
    if parts[0] == "internal_transmittance" and len(parts) > 1:
        return f"glazings.{parts[1]}.transmittance"
    if parts[0] == "glazing_panes" and len(parts) > 1:
        return f"glazings.{parts[1]}.panes"
    if parts[0] != "spaces" or len(parts) < 2 or not parts[1].isdigit():
        return field
    i = int(parts[1])
    for j, sp in enumerate(study.spaces or []):
        n = sp.copies.count if sp.copies is not None else 1
        if i < n:
            rest = parts[2:]
            if i > 0 and rest[:1] == ["origin"]:
                rest = ["copies", "step"]
            elif rest[:1] == ["name"] and sp.copies is not None:
                rest = ["copies"]
            return ".".join(["spaces", str(j), *rest])
        i -= n
    return field


def _building(study: Study, panes: dict[str, int]) -> tuple[Any, list[dict[str, Any]]]:
    """``kernels.geometry.parametric_building`` of the study's ``spaces`` (copies expanded).

    Returns the geometry and the expanded spaces (``name``, ``origin``, the
    study's :class:`~sweep.config.Space` as ``model``). Kernel errors name the
    study-file key (:func:`space_key`).
    """
    from luxsweep.kernels import geometry as kg

    expanded: list[dict[str, Any]] = []
    for sp in study.spaces or []:
        body = sp.model_dump(exclude={"name", "origin", "copies", "occupied", "grid"})
        for name, origin in sp.expanded():
            expanded.append({**body, "name": name, "origin": origin, "model": sp})
    used = {w.glazing for sp in study.spaces or [] for w in sp.windows}
    try:
        geometry = kg.parametric_building(
            [{k: v for k, v in e.items() if k != "model"} for e in expanded],
            glazing_panes={k: v for k, v in panes.items() if k in used},
            internal_transmittance={k: study.glazings[k].transmittance for k in used},
            obstructions=[o.model_dump() for o in study.obstructions],
        )
    except InputError as exc:
        raise type(exc)(exc.message, file=exc.file, line=exc.line,
                        field=space_key(exc.field, study)) from exc
    return geometry, expanded


def _space_sensors(study: Study, expanded: list[dict[str, Any]]
                   ) -> tuple[np.ndarray, SpaceLayout]:
    """Sensor grid of every occupied space in the building frame, and the layout."""
    from luxsweep.kernels import geometry as kg

    blocks, names, owner, area = [], [], [], []
    for j, e in enumerate(expanded):
        sp = e["model"]
        if not sp.occupied:
            continue
        grid = sp.grid or study.grid
        try:
            pts = kg.sensor_grid(sp.width, sp.depth, grid.height, grid.spacing, grid.margin)
        except InputError as exc:
            where = space_key(f"spaces.{j}", study) if sp.grid else None
            field = f"{where}.{exc.field}" if where and exc.field else exc.field
            raise type(exc)(f"space '{e['name']}': {exc.message}", file=exc.file,
                            line=exc.line, field=field) from exc
        pts[:, :3] += np.asarray(e["origin"], dtype=np.float64)
        owner.append(np.full(pts.shape[0], len(names), dtype=np.int32))
        names.append(e["name"])
        area.append(sp.width * sp.depth)
        blocks.append(pts)
    layout = SpaceLayout(names=tuple(names), sensor_space=np.concatenate(owner),
                         area=np.asarray(area, dtype=np.float64))
    return np.concatenate(blocks), layout


def _mesh_space_sensors(study: Study, geometry: Any) -> tuple[np.ndarray, SpaceLayout]:
    """Sensor grid over each mesh space's floor groups, and the layout."""
    from luxsweep.kernels import geometry as kg

    blocks, owner, area = [], [], []
    spaces = study.mesh_spaces or []
    for j, sp in enumerate(spaces):
        grid = sp.grid or study.grid
        try:
            pts = kg.sensor_grid_on(geometry, sp.floors, grid.height, grid.spacing,
                                    grid.margin)
            mask = geometry.group_mask(sp.floors, "grid.floors")
        except InputError as exc:
            base = f"mesh_spaces.{j}"
            field = {"grid.floors": f"{base}.floors"}.get(exc.field or "", exc.field)
            if sp.grid is not None and field and field.startswith("grid."):
                field = f"{base}.{field}"
            raise type(exc)(f"mesh space '{sp.name}': {exc.message}", file=exc.file,
                            line=exc.line, field=field) from exc
        owner.append(np.full(pts.shape[0], j, dtype=np.int32))
        area.append(float(geometry.areas[mask].sum()))
        blocks.append(pts)
    layout = SpaceLayout(names=tuple(sp.name for sp in spaces),
                         sensor_space=np.concatenate(owner), area=np.asarray(area))
    return np.concatenate(blocks), layout


def build_geometry(study: Study) -> tuple[Any, np.ndarray, SpaceLayout]:
    """The geometry, sensors (n, 6) and space layout of a resolved study.

    Returns
    -------
    geometry : kernels.geometry.Geometry
    sensors : ndarray (n, 6)
        ``x, y, z, nx, ny, nz`` in the building frame.
    layout : SpaceLayout
        The space of every sensor and the grid area of every occupied space.
    """
    from luxsweep.kernels import geometry as kg

    panes = {name: g.panes for name, g in study.glazings.items()}
    if study.spaces is not None:
        geometry, expanded = _building(study, panes)
        sensors, layout = _space_sensors(study, expanded)
        return geometry, sensors, layout
    if study.room is not None:
        room = study.room
        geometry = _parametric_room(study, panes)
        sensors = kg.sensor_grid(room.width, room.depth, study.grid.height, study.grid.spacing,
                                 study.grid.margin)
        area = room.width * room.depth
    else:
        materials = {
            name: ({"reflectance": m.reflectance} if m.glazing is None
                   else {"glazing": m.glazing, "panes": panes[m.glazing]})
            for name, m in (study.materials or {}).items()
        }
        geometry = kg.read_obj(study.mesh, materials, panes)
        if study.mesh_spaces is not None:
            sensors, layout = _mesh_space_sensors(study, geometry)
            return geometry, np.asarray(sensors, dtype=np.float64), layout
        if study.sensors is not None:
            sensors = kg.read_sensors(study.sensors)
            area = float("nan")
        else:
            floors = study.grid.floors or []
            sensors = kg.sensor_grid_on(geometry, floors, study.grid.height,
                                        study.grid.spacing, study.grid.margin)
            area = float(geometry.areas[geometry.group_mask(floors, "grid.floors")].sum())
    sensors = np.asarray(sensors, dtype=np.float64)
    return geometry, sensors, single_space(sensors.shape[0], area)


def settings_of(study: Study) -> Any:
    from luxsweep.kernels.coefficients import Settings

    return Settings(**study.compute.settings_kwargs())


def _series_params(study: Study) -> dict[str, Any]:
    data = study.canonical()
    params = {k: data[k] for k in ("timestep", "ground_reflectance", "occupancy",
                                   "metric_options")}
    # lighting settings (only when given, so tasks of other studies keep their ids):
    # variants that differ in them need their own series task, which reads its study's
    lights = [data.get("lighting")] + [sp.get("lighting") for sp in data.get("spaces") or []]
    if any(x is not None for x in lights):
        params["lighting"] = lights
    return params


def check_climates(loaded: StudyFile, labels: Iterable[str]) -> dict[str, Any]:
    """Read every weather file used; kernel errors (naming file and line) pass through."""
    from luxsweep.kernels.climate import read_climate

    out = {}
    for label in labels:
        out[label] = read_climate(loaded.study.climates[label])
    return out


def order_by_task(groups: list[str] | np.ndarray) -> np.ndarray:
    """Store order of variants given each one's series-task group: tasks contiguous.

    Parameters
    ----------
    groups : list of str or ndarray
        One group label (or integer group number) per variant, in factorial order.

    Returns
    -------
    ndarray of int
        Factorial positions in store order: groups in order of first appearance,
        largest first (a stable sort, so that the chunk size along ``variant``,
        the greatest common divisor of the task boundaries, stays large when
        tasks differ in size); the factorial order within a group.
    """
    values = groups if isinstance(groups, np.ndarray) else np.asarray(groups, dtype=object)
    _, first, inverse, counts = np.unique(values, return_index=True, return_inverse=True,
                                          return_counts=True)
    inverse = inverse.reshape(-1)
    # rank of each group: by size (descending), then by first appearance
    rank = np.empty(len(first), dtype=np.int64)
    rank[np.lexsort((first, -counts))] = np.arange(len(first))
    return np.argsort(rank[inverse], kind="stable")


def axis_roles(variants: Variants,
               geometry_doc: Callable[[Study], str] | None = None) -> list[str]:
    """What each axis changes: ``"geometry"``, ``"series"`` or ``"member"``.

    ``geometry``: some value changes the geometry document (``geometry_doc``:
    :func:`_geometry_inputs`, plus the transmittances of the glazing sets on
    internal openings, which are baked into the coefficients); ``series``: else
    some value changes the climate or the series settings; ``member``: neither —
    the axis only moves a variant within its series task (orientation, glazing
    transmittance of outside windows). Decided on the resolved study of each
    value of the axis with every other key as in the study file; the plan then
    checks every task's first and last variant against it.
    """
    doc = geometry_doc or (lambda s: canonical_json(_geometry_inputs(s)))
    roles = []
    for a in range(variants.n_axes):
        studies = variants.axis_studies(a)
        if len({doc(s) for s in studies}) > 1:
            roles.append("geometry")
        elif len({(s.default_climate, canonical_json(_series_params(s)))
                  for s in studies}) > 1:
            roles.append("series")
        else:
            roles.append("member")
    return roles


def make_plan(loaded: StudyFile, cache: CoefficientCache | None = None,
              *, read_climates: bool = True) -> Plan:
    """Expand, build every geometry, group by coefficient key, split into series tasks.

    Works on the variants' axis codes: one resolved study per combination of the
    axes that change the geometry or the series settings (a *task combination*),
    one geometry per distinct geometry document, no Python object per variant.

    Raises
    ------
    StudyFileError, kernels.errors.InputError
        For any bad input (study file, geometry, OBJ, sensors, weather files).
    """
    from luxsweep.kernels.coefficients import coefficient_key

    variants = expand(loaded)
    n = len(variants)
    built: dict[str, int] = {}  # geometry document -> geometry number
    geometries: list[tuple[Any, np.ndarray, str, Any, SpaceLayout, ViewLayout | None]] = []
    groups: dict[tuple[str, str, str], int] = {}
    group_info: list[tuple[int, str, str, Study]] = []  # geometry, climate, series, study

    internal: dict[str, tuple[str, ...]] = {}  # geometry inputs -> sets on internal openings

    def geometry_doc(study: Study, fallback: tuple[str, ...] | None = None
                     ) -> tuple[str, str | None]:
        """Geometry inputs and the full document (with the internal openings'
        transmittances; None while that geometry's internal sets are unknown and
        no ``fallback`` sets are given)."""
        shape = canonical_json(_geometry_inputs(study))
        sets = internal.get(shape, fallback)
        if sets is None:
            return shape, None
        return shape, shape + canonical_json(_internal_inputs(study, sets))

    def build(rep: Variant) -> str:
        """Build ``rep``'s geometry (when new); its full geometry document."""
        shape, doc = geometry_doc(rep.study)
        if doc is not None and doc in built:
            return doc
        try:
            settings = settings_of(rep.study)
            geometry, pts, layout = build_geometry(rep.study)
        except InputError as exc:
            raise _wrap_geometry_error(loaded, rep, exc) from exc
        internal[shape] = tuple(geometry.internal_sets)
        if rep.study.spaces is not None and not geometry.glazing_sets:
            raise loaded.error(("spaces",), "no window of the building opens to the "
                               "outside (every window is missing or an internal opening), "
                               "so no daylight reaches any space; add an outside window")
        for name in internal[shape]:
            if rep.study.glazings[name].shaded_transmittance is not None:
                raise loaded.error(
                    ("glazings", name, "shaded_transmittance"),
                    f"glazing set '{name}' is used on internal openings (windows between "
                    "two spaces), where operable shading is not modelled; remove "
                    "'shaded_transmittance' or give the internal windows a set without it")
        _, doc = geometry_doc(rep.study)
        assert doc is not None
        if doc not in built:
            built[doc] = len(geometries)
            geometries.append((geometry, pts, coefficient_key(geometry, pts, settings),
                               settings, layout, view_layout(rep.study, layout)))
        return doc

    def group_variants(roles: list[str]) -> np.ndarray | None:
        """Series-task number of every variant (factorial order), or None when a task
        combination's first and last variants differ in geometry or series settings
        (an axis taken as ``member`` is not one in some combination)."""
        combo = np.zeros(n, dtype=np.int64)
        for a, role in enumerate(roles):
            if role != "member":
                combo = combo * variants.axis_length(a) + variants.codes(a)
        _, first, inverse = np.unique(combo, return_index=True, return_inverse=True)
        inverse = inverse.reshape(-1)
        last = np.zeros(len(first), dtype=np.int64)
        np.maximum.at(last, inverse, np.arange(n))
        group_of_combo = np.empty(len(first), dtype=np.int64)
        for c in np.argsort(first, kind="stable").tolist():  # in order of first appearance
            rep = variants[int(first[c])]
            doc = build(rep)
            series = canonical_json(_series_params(rep.study))
            if last[c] != first[c]:
                tail = variants[int(last[c])]
                if (geometry_doc(tail.study)[1] != doc
                        or tail.climate != rep.climate
                        or canonical_json(_series_params(tail.study)) != series):
                    return None
            g = built[doc]
            label = (geometries[g][2], rep.climate, series)
            if label not in groups:
                groups[label] = len(group_info)
                group_info.append((g, rep.climate, series, rep.study))
            group_of_combo[c] = groups[label]
        return group_of_combo[inverse]

    # the internal sets of the first variant's building stand for every building when
    # the roles of the axes are decided (each task is checked against its own below)
    build(variants[0])
    base_sets = internal[canonical_json(_geometry_inputs(variants[0].study))]
    roles = axis_roles(variants, lambda st: str(geometry_doc(st, base_sets)[1]))
    group = group_variants(roles)
    if group is None:  # axes interact: one resolved study per variant (slow, exact)
        log.warning("%s: which axes change the geometry depends on other axes; planning "
                    "variant by variant", loaded.path)
        groups.clear()
        group_info.clear()
        group = group_variants(["geometry"] * variants.n_axes)
        assert group is not None

    # store order: every series task (key, climate, series settings) a contiguous
    # range of indices, so that chunks along `variant` can follow task boundaries
    order = order_by_task(group)
    variants = variants.reordered(order)
    group = group[order]
    geometry_of = np.asarray([info[0] for info in group_info], dtype=np.int64)[group]
    key_names: list[str] = []
    key_number: dict[str, int] = {}
    for _, _, key, _, _, _ in geometries:
        key_number.setdefault(key, len(key_names))
        if len(key_names) < len(key_number):
            key_names.append(key)
    key_of_geometry = np.asarray([key_number[geo[2]] for geo in geometries], dtype=np.int64)
    key_index = key_of_geometry[geometry_of]
    sensors = PerVariant([geo[1] for geo in geometries], geometry_of)
    layouts = PerVariant([geo[4] for geo in geometries], geometry_of)
    keys = PerVariant(key_names, key_index)

    jobs: dict[str, CoefficientJob] = {}
    for geometry, pts, key, settings, layout, views in geometries:
        if key in jobs:
            continue
        members = np.flatnonzero(key_index == key_number[key])
        members.flags.writeable = False
        jobs[key] = CoefficientJob(
            key=key, geometry=geometry, sensors=pts, settings=settings, variants=members,
            cached=bool(cache is not None and cache.contains(key)),
            rays=_estimate_rays(geometry, pts, settings), layout=layout, views=views,
        )

    climates: dict[str, Any] = {}
    if read_climates:
        climates = check_climates(loaded, sorted({info[1] for info in group_info}))

    ids = variants.ids
    orient_studies, orient_index = variants.studies_for("orientation")
    orientation = np.asarray([s.orientation for s in orient_studies], dtype=np.float64)
    glazing_studies, glazing_index = variants.studies_for("glazings")
    starts = np.flatnonzero(np.r_[True, group[1:] != group[:-1]])
    stops = np.r_[starts[1:], n]
    tasks = []
    for start, stop in zip(starts.tolist(), stops.tolist(), strict=True):
        g, climate, series, study = group_info[int(group[start])]
        key = geometries[g][2]
        sets = tuple(jobs[key].geometry.glazing_sets)
        values = orientation[orient_index[start:stop]]
        orientations = np.unique(values)
        o_index = np.searchsorted(orientations, values)
        r_index, rows = _row_index(glazing_studies, glazing_index[start:stop], sets)
        digest = hashlib.sha256(json.dumps([climate, series]).encode()).hexdigest()[:8]
        tasks.append(SeriesTask(
            task_id=f"series-{key[:12]}-{digest}", key=key, climate=climate,
            climate_file=loaded.study.climates[climate],
            orientations=tuple(float(o) for o in orientations),
            rows=rows, glazing_sets=sets,
            members=Members(np.column_stack([np.arange(start, stop), o_index, r_index])),
            study=study, variant_ids=ids[start:stop],
            climate_sha256=variants.file_hash(loaded.study.climates[climate]),
            layout=jobs[key].layout, views=jobs[key].views,
        ))

    n_steps = {label: len(c) * c.interval // loaded.study.timestep
               for label, c in climates.items()}
    times = None
    if loaded.study.store_series and climates:
        times = occupied_times(loaded, climates)
    check_rank_spaces(loaded, layouts)
    return Plan(loaded=loaded, variants=variants, study_hash=study_hash(loaded, variants),
                sensors=sensors, layouts=layouts, keys=keys, jobs=jobs, tasks=tasks,
                n_steps=n_steps, times=times)


def _row_index(studies: list[Study], index: np.ndarray,
               sets: tuple[str, ...]) -> tuple[np.ndarray, tuple[tuple[float, ...], ...]]:
    """Glazing row of every member and the distinct rows in order of first appearance.

    A row is ``(τ_open per set..., τ_closed per set...)``; ``studies[index[i]]``
    holds member ``i``'s glazings.
    """
    present, first, inverse = np.unique(index, return_index=True, return_inverse=True)
    rows: list[tuple[float, ...]] = []
    number = np.empty(len(present), dtype=np.int64)
    for u in np.argsort(first, kind="stable").tolist():
        g = studies[int(present[u])].glazings
        row = tuple(g[s].transmittance for s in sets) + tuple(
            g[s].shaded_transmittance if g[s].shaded_transmittance is not None
            else g[s].transmittance for s in sets)
        if row not in rows:
            rows.append(row)
        number[u] = rows.index(row)
    return number[inverse.reshape(-1)], tuple(rows)


def occupied_times(loaded: StudyFile, climates: dict[str, Any]) -> Any:
    """Occupied step stamps (local standard time, naive) shared by all climates.

    Raises
    ------
    StudyFileError
        When ``store_series`` is on and the climates' occupied steps differ
        (a common time axis is needed for the stored series).
    """
    import pandas as pd

    from luxsweep.kernels.metrics import occupancy_mask
    from luxsweep.kernels.sun import step_times

    study = loaded.study
    found = None
    for label, climate in climates.items():
        stamps, _ = step_times(climate, study.timestep)
        stamps = stamps.tz_localize(None) if stamps.tz is not None else stamps
        mask = occupancy_mask(stamps, study.occupancy.start, study.occupancy.end,
                              study.occupancy.days, study.timestep)
        times = pd.DatetimeIndex(stamps[mask])
        if found is None:
            found = (label, times)
        elif not times.equals(found[1]):
            raise loaded.error(
                ("store_series",),
                f"climates '{found[0]}' and '{label}' have different occupied time steps, so "
                "their series cannot share one time axis; set store_series: false or use "
                "weather files on the same reference year",
            )
    return found[1] if found else None
