"""The results store: a Zarr v3 group that ``xarray.open_zarr`` opens (CONTRACT.md §3).

The client creates every array's metadata once, before any task writes, with
xarray's ``to_zarr(compute=False)`` (which writes the coordinates and leaves the
data variables at their fill values). Tasks then write their own chunks.

Chunks follow tasks, not variants. The plan stores the variants of each series
task as one contiguous range of indices (:func:`sweep.plan.order_by_task`);
the *block* of the store is the greatest common divisor of the tasks' start
indices, so every task is a whole number of blocks (the last task may end in a
short edge block). Every array on ``variant`` is chunked by a divisor of the
block: per-variant arrays and per-sensor arrays by the block itself unless a
chunk would exceed :data:`CHUNK_BYTES` (then by its largest divisor that fits),
the series likewise with ``series_chunk`` time steps per chunk. So a task owns
whole chunks and no two tasks ever write the same chunk: the files grow with
tasks, not variants. :func:`check_alignment` refuses a store whose chunks do
not line up with the task boundaries. Consolidated metadata is written once at
the end of a run.

Writing (:func:`write_variants`, :func:`write_series_block`) goes through
zarr's public array API only: one group open, each variable's region of the
call's variants, then their ``done`` flags, last. A task writing all its
variants covers whole chunks, which zarr writes without reading; ``LocalStore``
writes a temporary file and renames it, so a chunk is either old or new, never
torn. A call that covers only part of a block (a task resumed with some
variants done, or one variant retried alone) makes zarr read, merge and rewrite
the chunks; on a Dask worker such a call holds a cluster-wide lock on the block
(:func:`_block_locks`), so that retries of the variants of one task, which may
run at the same time, never lose each other's rows. A process killed during a
call leaves no variant of it marked done; repeating a call writes the same
bytes. :func:`write_variant` and :func:`write_series` are the one-variant forms.

Layout:

- dimensions ``variant``, ``sensor`` and, with ``store_series``, ``time``;
- coordinates ``variant_id``, ``label`` and one per varied axis (named by its
  vary key) on ``variant``; ``x``, ``y``, ``z`` [m, building frame] on ``sensor``,
  or on ``(variant, sensor)`` padded with NaN when the grids differ; ``n_sensors``
  on ``variant``; ``time`` (local standard time, hour-ending stamps);
- dimension ``space`` (index coordinate: the occupied spaces' names, every
  variant's spaces, first seen first; one space ``room`` for a room study) and
  the coordinate ``sensor_space`` (the name of the space that owns each
  sensor) on ``sensor``, or on ``(variant, sensor)`` with ``""`` in unused
  slots when the variants' grids or their owners differ;
- ``space_area`` (variant, space) [m²]: the floor area of each space's grid,
  written with the metadata (known at planning), NaN where a variant lacks the
  space;
- data variables listed in :data:`SENSOR_VARIABLES`, :data:`VARIANT_VARIABLES`,
  :data:`SPACE_VARIABLES` (``space_<name>``, (variant, space): NaN, or level
  :data:`SPACE_ABSENT_LEVEL` = −1, where the variant lacks the space; chunked
  like the per-variant arrays with the whole ``space`` dimension) and
  :data:`SERIES_VARIABLES`, each with ``units`` and ``long_name`` attributes;
- attributes ``study_hash``, ``luxsweep_version``, ``study`` (the study file's
  text), ``study_name``, ``axes``, ``store_layout`` (:data:`LAYOUT`) and
  ``variant_block``.

The variant order is the plan's (tasks contiguous), not the factorial order of
the study file: select variants by their coordinates. The store lives in one
folder chosen by the user; no path inside it is derived from variant labels.
"""

from __future__ import annotations

import contextlib
import hashlib
import itertools
import math
import os
import shutil
import uuid
import warnings
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import dask.array as da
import numpy as np
import pandas as pd
import xarray as xr
import zarr

from luxsweep.sweep import __version__
from luxsweep.sweep.errors import ResultsStoreError
from luxsweep.sweep.registry import (
    METRICS,
    SPACE_PREFIX,
    long_name,
    sensor_metrics,
    space_metrics,
    variant_metrics,
    view_metrics,
)
from luxsweep.sweep.spaces import SpaceLayout, single_space

__all__ = [
    "CREATING",
    "FLAT_KEYS",
    "SENSOR_VARIABLES",
    "SERIES_VARIABLES",
    "SPACE_ABSENT_LEVEL",
    "SPACE_VARIABLES",
    "VARIANT_VARIABLES",
    "VIEW_MAP",
    "VIEW_SERIES",
    "VIEW_VARIABLES",
    "StoreLayout",
    "check_alignment",
    "consolidate",
    "create_store",
    "open_existing",
    "read_attrs",
    "remove_unfinished",
    "task_block",
    "update_attrs",
    "write_series",
    "write_series_block",
    "write_variant",
    "write_variants",
]

# name -> (dtype, units, long name at the default thresholds); from sweep.registry
SENSOR_VARIABLES: dict[str, tuple[str, str, str]] = {
    name: (METRICS[name].dtype, METRICS[name].unit, long_name(name))
    for name in sensor_metrics()
}
VARIANT_VARIABLES: dict[str, tuple[str, str, str]] = {
    **{name: (METRICS[name].dtype, METRICS[name].unit, long_name(name))
       for name in variant_metrics()},
    "done": ("bool", "1", "all results of this variant are written"),
}
SPACE_VARIABLES: dict[str, tuple[str, str, str]] = {
    SPACE_PREFIX + name: (METRICS[name].dtype, METRICS[name].unit,
                          long_name(SPACE_PREFIX + name))
    for name in space_metrics()
}
"""Per-space results ``space_<name>`` (variant, space); a space that a variant lacks
holds NaN, or :data:`SPACE_ABSENT_LEVEL` in integer results."""
SPACE_ABSENT_LEVEL = -1
"""``space_en17037_level`` of a space that the variant does not have (levels are 0–3)."""
VIEW_VARIABLES: dict[str, tuple[str, str, str]] = {
    name: (METRICS[name].dtype, METRICS[name].unit, long_name(name)) for name in view_metrics()
}
"""Per-view results (variant, view) of a study with ``views:`` (the ``glare`` family)."""
VIEW_MAP = "view_glare_map"
"""Glare class (0 imperceptible … 3 intolerable; −1 no occupied step) of the worst
step of every hour of the year at each view: (variant, view, day, hour), int8."""
VIEW_SERIES = "view_dgp"
"""With ``store_series``: the DGPs series of every view (variant, view, time)."""
SERIES_VARIABLES: dict[str, tuple[str, str, str]] = {
    "illuminance": ("float32", "lx", "illuminance on the sensors"),
    "direct_sun_illuminance": ("float32", "lx", "illuminance from direct sun only"),
}


@dataclass(frozen=True)
class StoreLayout:
    """Everything needed to create a results store.

    Attributes
    ----------
    variant_ids, labels : sequence of str
        One per variant, in store order.
    axes : mapping of str to sequence
        Vary key -> one value per variant.
    sensors : sequence of ndarray (n_i, 3 or 6)
        Sensor points of each variant [m, building frame].
    sensor_variables, variant_variables : sequence of str
        Which variables of the tables above the store holds.
    times : DatetimeIndex or None
        Occupied steps for the series (local standard time), or None.
    series_chunk : int
        Time steps per series chunk.
    attrs : mapping
        Group attributes (study_hash, study text, ...).
    metric_options : mapping, optional
        The study's ``metric_options``: fills the thresholds into each
        variable's ``long_name`` (:func:`sweep.registry.long_name`).
    tasks : sequence of (int, int), optional
        ``(start, stop)`` of each task's contiguous range of variants (they tile
        ``0..n_variants``); chunks along ``variant`` follow them. Default: one
        task per variant.
    spaces : sequence of SpaceLayout, optional
        The space of every sensor and each space's grid area, one per variant
        (:attr:`sweep.plan.Plan.layouts`). Default: every variant one space
        ``room`` of unknown area.
    space_variables : sequence of str
        Per-space results the store holds (:data:`SPACE_VARIABLES`).
    views : ViewLayout, optional
        The study's views (``views:``; the same in every variant): a ``view``
        dimension with ``view_space``, ``view_x``, ``view_y``, ``view_z``.
    view_variables : sequence of str
        Per-view results the store holds (:data:`VIEW_VARIABLES`), plus
        :data:`VIEW_MAP` when there are views.
    """

    variant_ids: Sequence[str]
    labels: Sequence[str]
    axes: Mapping[str, Sequence[Any]]
    sensors: Sequence[np.ndarray]
    sensor_variables: Sequence[str]
    variant_variables: Sequence[str]
    times: pd.DatetimeIndex | None
    series_chunk: int
    attrs: Mapping[str, Any]
    metric_options: Mapping[str, Any] | None = None
    tasks: Sequence[tuple[int, int]] | None = None
    spaces: Sequence[SpaceLayout] | None = None
    space_variables: Sequence[str] = ()
    views: Any = None
    view_variables: Sequence[str] = ()

    @property
    def n_variants(self) -> int:
        return len(self.variant_ids)

    @property
    def n_sensors(self) -> int:
        return max(len(s) for s in self.sensors)

    @property
    def block(self) -> int:
        """Variants per block: every task is a whole number of blocks (see module doc)."""
        return task_block(self.tasks if self.tasks is not None
                          else [(i, i + 1) for i in range(self.n_variants)], self.n_variants)

    @property
    def shared_grid(self) -> bool:
        first = np.asarray(self.sensors[0])[:, :3]
        return all(np.array_equal(np.asarray(s)[:, :3], first) for s in self.sensors[1:])

    @property
    def layouts(self) -> list[SpaceLayout]:
        """One :class:`SpaceLayout` per variant (the default: one space ``room``)."""
        if self.spaces is not None:
            return list(self.spaces)
        return [single_space(len(s), float("nan")) for s in self.sensors]

    @property
    def space_names(self) -> list[str]:
        """The store's ``space`` coordinate: every variant's spaces, first seen first."""
        return list(dict.fromkeys(n for lay in self.layouts for n in lay.names))


def _space_coords(layout: StoreLayout) -> dict[str, Any]:
    """``space``, ``sensor_space`` (on ``sensor``, or on (variant, sensor) with "" in
    unused slots when the variants' grids or ownership differ) and ``space_area``."""
    names = layout.space_names
    layouts = layout.layouts
    owners = [np.asarray(lay.names, dtype=object)[lay.sensor_space] for lay in layouts]
    coords: dict[str, Any] = {"space": ("space", np.asarray(names, dtype=object),
                                        {"long_name": "occupied space"})}
    text = "name of the space that owns the sensor"
    if layout.shared_grid and all(np.array_equal(o, owners[0]) for o in owners[1:]):
        coords["sensor_space"] = ("sensor", owners[0], {"long_name": text})
    else:
        pad = np.full((layout.n_variants, layout.n_sensors), "", dtype=object)
        for v, o in enumerate(owners):
            pad[v, : o.size] = o
        coords["sensor_space"] = (("variant", "sensor"), pad,
                                  {"long_name": text + " ('' in unused sensor slots)"})
    area = np.full((layout.n_variants, len(names)), np.nan)
    for v, lay in enumerate(layouts):
        area[v, [names.index(n) for n in lay.names]] = lay.area
    return {**coords, "space_area": area}


def _coordinate_values(values: Sequence[Any]) -> np.ndarray:
    arr = np.asarray(list(values))
    if arr.dtype.kind in "USO":
        return np.asarray([str(v) for v in values], dtype=object)
    return arr


FLAT_KEYS = {"name": "default", "separator": "."}
"""Chunk key encoding of the data variables: ``c.<variant>.<sensor>`` files side by
side instead of ``c/<variant>/<sensor>`` folders (standard Zarr v3 "default"
encoding with the "." separator): one folder per array, one file per chunk.
Stores written with the "/" separator stay readable and writable (every path
goes through the array's own encoding)."""

LAYOUT = "task-blocks-1"
"""Value of the ``store_layout`` attribute: chunks along ``variant`` follow task
blocks (module doc). Stores without it were written one variant per chunk by an
earlier luxsweep; they stay readable, but a run does not resume them."""

CHUNK_BYTES = 16 * 2**20
"""Largest uncompressed chunk a block is split below (16 MiB): keeps the read of
one variant's map, and a worker's write buffers, small at any task size."""


def task_block(tasks: Sequence[tuple[int, int]], n_variants: int) -> int:
    """Variants per block: the greatest common divisor of the tasks' start indices.

    Parameters
    ----------
    tasks : sequence of (start, stop)
        Contiguous task ranges tiling ``0..n_variants`` (any order).
    n_variants : int

    Raises
    ------
    ResultsStoreError
        When the ranges do not tile ``0..n_variants`` exactly once.
    """
    bounds = sorted((int(a), int(b)) for a, b in tasks)
    edges = [0, *[b for _, b in bounds]]
    if (not bounds or [a for a, _ in bounds] != edges[:-1] or edges[-1] != n_variants
            or any(b <= a for a, b in bounds)):
        raise ResultsStoreError(f"task ranges {bounds[:4]}... do not tile the {n_variants} "
                                "variants of the store once each; this is a planning bug")
    return math.gcd(*[a for a, _ in bounds[1:]]) or n_variants


def _variant_chunk(block: int, row_bytes: int) -> int:
    """The largest divisor of ``block`` whose chunk stays within :data:`CHUNK_BYTES`."""
    limit = max(1, CHUNK_BYTES // max(row_bytes, 1))
    if block <= limit:
        return block
    best = 1
    for d in range(1, math.isqrt(block) + 1):
        if block % d == 0:
            for c in (d, block // d):
                if best < c <= limit:
                    best = c
    return best


def _template(layout: StoreLayout) -> tuple[xr.Dataset, dict[str, dict[str, Any]]]:
    nv, ns = layout.n_variants, layout.n_sensors
    block = layout.block
    coords: dict[str, Any] = {
        "variant_id": ("variant", np.asarray(layout.variant_ids, dtype=object)),
        "label": ("variant", np.asarray(layout.labels, dtype=object)),
        "n_sensors": ("variant", np.asarray([len(s) for s in layout.sensors], dtype="int32")),
    }
    for axis, values in layout.axes.items():
        coords[axis] = ("variant", _coordinate_values(values))
    if layout.shared_grid:
        pts = np.asarray(layout.sensors[0], dtype="float64")
        for i, name in enumerate("xyz"):
            coords[name] = ("sensor", pts[:, i])
    else:
        pad = np.full((nv, ns, 3), np.nan)
        for v, pts in enumerate(layout.sensors):
            pad[v, : len(pts)] = np.asarray(pts)[:, :3]
        for i, name in enumerate("xyz"):
            coords[name] = (("variant", "sensor"), pad[..., i])
    for name in ("x", "y", "z"):
        coords[name] = (*coords[name], {"units": "m", "long_name": f"{name} (building frame)"})
    spaces = _space_coords(layout)
    area = spaces.pop("space_area")
    coords.update(spaces)
    n_sp = area.shape[1]

    data: dict[str, Any] = {}
    encoding: dict[str, dict[str, Any]] = {}
    # known at planning: written with the metadata (NaN where a variant lacks the space)
    chunks = (_variant_chunk(block, n_sp * 8), n_sp)
    data["space_area"] = (("variant", "space"), area,
                          {"units": "m²", "long_name": "floor area covered by the space's "
                           "sensor grid (the weight of its means in the building totals)"})
    encoding["space_area"] = {"chunks": chunks, "chunk_key_encoding": FLAT_KEYS}
    for name in layout.space_variables:
        dtype, units, text = SPACE_VARIABLES[name]
        text = long_name(name, layout.metric_options)
        fill = np.nan if dtype.startswith("float") else SPACE_ABSENT_LEVEL
        chunks = (_variant_chunk(block, n_sp * np.dtype(dtype).itemsize), n_sp)
        data[name] = (("variant", "space"), da.full((nv, n_sp), fill, dtype=dtype,
                                                    chunks=chunks),
                      {"units": units, "long_name": text})
        encoding[name] = {"chunks": chunks, "chunk_key_encoding": FLAT_KEYS}
    for name in layout.sensor_variables:
        dtype, units, _ = SENSOR_VARIABLES[name]
        chunks = (_variant_chunk(block, ns * np.dtype(dtype).itemsize), ns)
        data[name] = (("variant", "sensor"), da.full((nv, ns), np.nan, dtype=dtype,
                                                     chunks=chunks),
                      {"units": units, "long_name": long_name(name, layout.metric_options)})
        encoding[name] = {"chunks": chunks, "chunk_key_encoding": FLAT_KEYS}
    for name in [*layout.variant_variables, "done"]:
        dtype, units, text = VARIANT_VARIABLES[name]
        if name != "done":
            text = long_name(name, layout.metric_options)
        fill = np.nan if dtype.startswith("float") else 0
        chunks = (_variant_chunk(block, np.dtype(dtype).itemsize),)
        data[name] = (("variant",), da.full((nv,), fill, dtype=dtype, chunks=chunks),
                      {"units": units, "long_name": text})
        encoding[name] = {"chunks": chunks, "chunk_key_encoding": FLAT_KEYS}
    if layout.views is not None:
        _view_template(layout, coords, data, encoding)
    if layout.times is not None:
        nt = len(layout.times)
        coords["time"] = ("time", np.asarray(layout.times.tz_localize(None)
                                             if layout.times.tz is not None else layout.times),
                          {"long_name": "local standard time (hour-ending stamps)"})
        for name, (dtype, units, text) in SERIES_VARIABLES.items():
            nc = min(layout.series_chunk, nt)
            chunks = (_variant_chunk(block, ns * nc * np.dtype(dtype).itemsize), ns, nc)
            data[name] = (("variant", "sensor", "time"),
                          da.full((nv, ns, nt), np.nan, dtype=dtype, chunks=chunks),
                          {"units": units, "long_name": text})
            encoding[name] = {"chunks": chunks, "chunk_key_encoding": FLAT_KEYS}
    attrs = {**layout.attrs, "store_layout": LAYOUT, "variant_block": block}
    ds = xr.Dataset(data, coords=coords, attrs=attrs)
    return ds, encoding


def _view_template(layout: StoreLayout, coords: dict[str, Any], data: dict[str, Any],
                   encoding: dict[str, dict[str, Any]]) -> None:
    """Coordinates and arrays of the views (a study with ``views:``)."""
    views, nv, block = layout.views, layout.n_variants, layout.block
    n = views.n_views
    space_names = layout.layouts[0].names
    coords["view"] = ("view", np.asarray(views.names, dtype=object), {"long_name": "view"})
    coords["view_space"] = ("view", np.asarray([space_names[k] for k in views.space],
                                               dtype=object),
                            {"long_name": "name of the space the view is in"})
    for i, axis in enumerate("xyz"):
        coords[f"view_{axis}"] = ("view", views.sensors[:, i].copy(),
                                  {"units": "m", "long_name": f"{axis} of the eye (building "
                                   "frame)"})
    for name in layout.view_variables:
        dtype, units, _ = VIEW_VARIABLES[name]
        fill = np.nan if dtype.startswith("float") else -1
        chunks = (_variant_chunk(block, n * np.dtype(dtype).itemsize), n)
        data[name] = (("variant", "view"), da.full((nv, n), fill, dtype=dtype, chunks=chunks),
                      {"units": units, "long_name": long_name(name, layout.metric_options)})
        encoding[name] = {"chunks": chunks, "chunk_key_encoding": FLAT_KEYS}
    coords["day"] = ("day", np.arange(1, 366, dtype=np.int16),
                     {"long_name": "day of the year (non-leap year)"})
    coords["hour"] = ("hour", np.arange(24, dtype=np.int8),
                      {"long_name": "hour of the day, local standard time (the hour from "
                       "h:00 to h+1:00)"})
    chunks = (_variant_chunk(block, n * 365 * 24), n, 365, 24)
    data[VIEW_MAP] = (("variant", "view", "day", "hour"),
                      da.full((nv, n, 365, 24), -1, dtype="int8", chunks=chunks),
                      {"units": "1", "long_name": "glare class of the hour's highest simplified "
                       "DGP over its occupied steps: 0 imperceptible, 1 perceptible, "
                       "2 disturbing, 3 intolerable, -1 no occupied step"})
    encoding[VIEW_MAP] = {"chunks": chunks, "chunk_key_encoding": FLAT_KEYS}
    if layout.times is not None:  # with the series: each view's DGPs over the occupied steps
        nt = len(layout.times)
        nc = min(layout.series_chunk, nt)
        chunks = (_variant_chunk(block, n * nc * 4), n, nc)
        data[VIEW_SERIES] = (("variant", "view", "time"),
                             da.full((nv, n, nt), np.nan, dtype="float32", chunks=chunks),
                             {"units": "1", "long_name": "simplified daylight glare "
                              "probability at the view (DGPs, Wienold 2009)"})
        encoding[VIEW_SERIES] = {"chunks": chunks, "chunk_key_encoding": FLAT_KEYS}


CREATING = ".creating-"
"""Infix of the sibling folder a new store is built in: ``<store>.creating-<random>``."""


def create_store(path: str | Path, layout: StoreLayout) -> None:
    """Write the metadata and coordinates of a new store at ``path`` (must not exist).

    The store is built in a sibling folder ``<path>.creating-<random>`` and moved
    into place with one ``os.rename``, so ``path`` holds either no store or one
    with all its arrays (a run killed meanwhile leaves only the sibling, which
    :func:`remove_unfinished` deletes).
    """
    path = Path(path)
    if path.exists():
        raise ResultsStoreError(f"{path}: already exists; delete it or choose another --out")
    ds, encoding = _template(layout)
    attrs = {"luxsweep_version": __version__, **ds.attrs}
    ds.attrs = attrs
    tmp = path.with_name(f"{path.name}{CREATING}{uuid.uuid4().hex[:12]}")
    try:
        ds.to_zarr(tmp, mode="w-", compute=False, zarr_format=3, consolidated=False,
                   encoding=encoding)
        check_alignment(tmp, series_chunk=layout.series_chunk, tasks=layout.tasks)
        try:
            os.rename(tmp, path)
        except OSError as exc:
            raise ResultsStoreError(f"{path}: cannot create the results store ({exc}); "
                                    "delete it or choose another --out") from exc
    finally:
        if tmp.exists():
            shutil.rmtree(tmp, ignore_errors=True)


def remove_unfinished(path: str | Path) -> list[Path]:
    """Delete folders ``<path>.creating-*`` left by runs killed while creating ``path``."""
    path = Path(path)
    if not path.parent.is_dir():
        return []
    stale = [p for p in path.parent.iterdir() if p.name.startswith(f"{path.name}{CREATING}")]
    for p in stale:
        shutil.rmtree(p, ignore_errors=True)
    return stale


def check_alignment(path: str | Path, *, series_chunk: int | None = None,
                    tasks: Sequence[tuple[int, int]] | None = None) -> None:
    """Refuse a store whose chunks could be written by two tasks.

    Every array on the ``variant`` dimension must hold the whole ``sensor``
    dimension in each chunk and, when ``tasks`` are given, chunk boundaries on
    ``variant`` that every task boundary falls on (each task then writes whole
    chunks that it alone owns); series arrays must have ``series_chunk`` steps
    per chunk (the task's time blocks).

    Parameters
    ----------
    path : str or Path
    series_chunk : int, optional
    tasks : sequence of (start, stop), optional
        The run's task ranges (:meth:`sweep.plan.Plan.task_bounds`).
    """
    group = zarr.open_group(str(path), mode="r")
    for name in [*SENSOR_VARIABLES, *VARIANT_VARIABLES, *SPACE_VARIABLES, *SERIES_VARIABLES]:
        if name not in group:
            continue
        arr = group[name]
        dims = arr.metadata.dimension_names or ()
        if not dims or dims[0] != "variant":
            raise ResultsStoreError(f"{path}: array '{name}' has dimensions {dims}; results "
                                    "need 'variant' first. Start a new store.")
        c, n = arr.chunks[0], arr.shape[0]
        if tasks is not None:
            off = [(a, b) for a, b in tasks if a % c or (b % c and b != n)]
            if off:
                raise ResultsStoreError(
                    f"{path}: array '{name}' has {c} variants per chunk, but the tasks "
                    f"{off[:3]} (start, stop) do not begin and end on chunk boundaries, so two "
                    "tasks would write one chunk. Start a new store (delete the folder or "
                    "choose another --out).")
        if len(dims) > 1 and dims[1] in ("sensor", "space") and arr.chunks[1] != arr.shape[1]:
            raise ResultsStoreError(f"{path}: array '{name}' splits the {dims[1]} dimension "
                                    f"({arr.chunks}); start a new store.")
        if len(dims) > 2 and series_chunk is not None and arr.chunks[2] != min(series_chunk,
                                                                                arr.shape[2]):
            raise ResultsStoreError(f"{path}: array '{name}' has {arr.chunks[2]} time steps "
                                    f"per chunk, the run writes {series_chunk}; start a new "
                                    "store.")


def read_attrs(path: str | Path) -> dict[str, Any]:
    """Group attributes of an existing store (raises ResultsStoreError if it is not one)."""
    if Path(path).is_file():
        raise ResultsStoreError(f"{path} is a file, not a results store folder; choose "
                                "another path with --out")
    try:
        group = zarr.open_group(str(path), mode="r")
    except Exception as exc:  # zarr raises several types for a folder that is not a store
        raise ResultsStoreError(
            f"{path} exists but is not a luxsweep results store (it holds no readable Zarr "
            "group); delete the folder or choose another with --out"
        ) from exc
    return dict(group.attrs)


def open_existing(path: str | Path, study_hash: str, expected: Sequence[str] = ()
                  ) -> np.ndarray:
    """Check that the store at ``path`` belongs to this study; return its ``done`` flags.

    Parameters
    ----------
    path : str or Path
    study_hash : str
    expected : sequence of str
        Arrays the run will write (``done`` is always checked).

    Raises
    ------
    ResultsStoreError
        When the store was made for a different study (different variants, axes,
        metrics or series setting), or is damaged (an expected array is missing).
    """
    attrs = read_attrs(path)
    if attrs.get("store_layout") != LAYOUT:
        raise ResultsStoreError(
            f"{path}: this results store was written by an earlier luxsweep "
            f"(layout {attrs.get('store_layout', 'one variant per chunk')!r}, this version "
            f"writes {LAYOUT!r}); it stays readable by rank and report, but a run cannot "
            f"continue it. Delete the folder {path} or write elsewhere with --out."
        )
    if attrs.get("study_hash") != study_hash:
        raise ResultsStoreError(
            f"{path}: this results store belongs to a different study, to an earlier "
            "version of this one (variants, axes, metrics or store_series changed), or was "
            "begun by a luxsweep whose result code differs from this one's. Run again with "
            "--fresh to discard it, or write elsewhere with --out."
        )
    group = zarr.open_group(str(path), mode="r")
    absent = [name for name in ["variant_id", *expected, "done"] if name not in group]
    if absent:
        raise ResultsStoreError(
            f"{path}: this results store is damaged: array(s) {', '.join(absent)} are missing. "
            f"To start fresh, delete the folder {path} or write elsewhere with --out."
        )
    return np.asarray(group["done"][:], dtype=bool)


def update_attrs(path: str | Path, attrs: Mapping[str, Any]) -> None:
    group = zarr.open_group(str(path), mode="r+")
    group.attrs.update(dict(attrs))


# ---------------------------------------------------------------------------
# writing results


def _indices(path: str | Path, indices: Sequence[int], n_variants: int) -> np.ndarray:
    idx = np.asarray(indices, dtype=np.int64).reshape(-1)
    if idx.size and (idx.min() < 0 or idx.max() >= n_variants):
        raise ValueError(f"{path}: variant indices {idx.tolist()} outside 0..{n_variants - 1}")
    if np.unique(idx).size != idx.size:
        raise ValueError(f"{path}: variant indices {idx.tolist()} repeat; each variant's "
                         "chunks are written once per call")
    return idx


def _rows(path: str | Path, name: str, values: np.ndarray, n: int) -> np.ndarray:
    values = np.asarray(values)
    if values.ndim == 0 or values.shape[0] != n:
        raise ValueError(f"{path}: '{name}' holds {values.shape[:1] or 'no'} rows for {n} "
                         "variants; give one row per variant index")
    return values


def _open_arrays(path: str | Path, names: Sequence[str]
                 ) -> tuple[zarr.Group, dict[str, zarr.Array]]:
    """Open the group once and the named arrays in it (plus ``done``).

    Consolidated metadata is not read: parsing the whole group's costs more than
    the few arrays a write needs.
    """
    group = zarr.open_group(str(path), mode="r+", use_consolidated=False)
    arrays = {}
    for name in [*names, "done"]:
        try:
            arrays[name] = group[name]
        except KeyError as exc:
            raise ResultsStoreError(
                f"{path}: the results store has no array '{name}' (it was made for other "
                f"metrics or is damaged). Delete the folder {path} or write elsewhere with "
                "--out."
            ) from exc
    return group, arrays


def _write_block(array: zarr.Array, indices: np.ndarray, block: np.ndarray,
                 start: int = 0, first: int = 0) -> None:
    """Write ``block`` (n, *region) to the rows ``indices`` of ``array`` (zarr's public API).

    The region starts at sensor ``first`` (by default it spans the whole sensor
    dimension) and at ``start`` on the time dimension. Each run of consecutive
    indices is one slice assignment: a task writing all its variants is one run
    covering whole chunks, which zarr writes without reading; a run covering
    part of a chunk makes zarr read and merge it.
    """
    trailing = [slice(first, first + block.shape[1])] if array.ndim > 1 else []
    if array.ndim > 2:
        trailing.append(slice(start, start + block.shape[2]))
    order = np.argsort(indices, kind="stable")
    idx = indices[order]
    block = np.asarray(block)[order].astype(array.dtype, copy=False)
    cuts = [0, *(np.flatnonzero(np.diff(idx) != 1) + 1).tolist(), idx.size]
    for a, b in itertools.pairwise(cuts):
        if b > a:
            array[(slice(int(idx[a]), int(idx[b - 1]) + 1), *trailing)] = block[a:b]


def _store_block(group: zarr.Group) -> int:
    """Variants per block of a store: its ``variant_block`` attribute, or else the
    largest chunk along ``variant`` of its result arrays (stores made by hand)."""
    block = group.attrs.get("variant_block")
    if block:
        return int(block)
    sizes = [group[n].chunks[0] for n in [*SENSOR_VARIABLES, *VARIANT_VARIABLES,
                                          *SERIES_VARIABLES] if n in group]
    return max(sizes, default=1)


@contextlib.contextmanager
def _block_locks(path: str | Path, group: zarr.Group, indices: np.ndarray) -> Iterator[None]:
    """On a Dask worker, hold a cluster-wide lock on every block ``indices`` touch.

    Tasks own whole blocks, so a task never meets another task's writes; but two
    copies of one task (Dask rerunning a task of a worker wrongly presumed dead),
    or the variants of one failed task retried one by one at the same time, write
    the same chunks, and a write that covers part of a chunk reads, merges and
    rewrites it. Holding the block's lock makes those writes follow one another,
    so none loses another's rows. The locks (``distributed.Lock``, one per block,
    taken in block order) live on the scheduler; a worker that dies holding one
    loses it when its lease times out (Dask's ``locks.lease-timeout``, 30 s by
    default). Outside a Dask worker, nothing is locked: one process writes.
    """
    try:
        from distributed import Lock, get_worker

        get_worker()
    except (ImportError, ValueError):
        yield
        return
    block = _store_block(group)
    name = hashlib.sha256(os.path.abspath(str(path)).encode()).hexdigest()[:16]
    locks = [Lock(f"luxsweep-store-{name}-{int(k)}") for k in np.unique(indices // block)]
    held: list[Any] = []
    try:
        for lock in locks:
            lock.acquire()
            held.append(lock)
        yield
    finally:
        for lock in reversed(held):
            lock.release()


def write_variants(
    path: str | Path,
    indices: Sequence[int],
    sensor_values: Mapping[str, np.ndarray],
    variant_values: Mapping[str, np.ndarray],
    n_sensors: int | None = None,
    *,
    mark_done: bool = True,
    space_values: Mapping[str, np.ndarray] | None = None,
    spaces: Sequence[str] = (),
    view_values: Mapping[str, np.ndarray] | None = None,
) -> None:
    """Write several variants' results into their task's chunks; all ``done`` flags last.

    One group open and one region write per variable; a task's variants fill
    chunks that no other task writes (module doc), and on a Dask worker the call
    holds its blocks' locks (:func:`_block_locks`). The ``done`` flags are
    written only after all data of every variant of the call: a process killed
    in between leaves none of these variants marked done (a resumed run redoes
    them), and running the same call twice writes the same bytes.

    Parameters
    ----------
    path : str or Path
        The results store.
    indices : sequence of int
        Positions of the variants on the ``variant`` dimension (distinct, any order).
    sensor_values : mapping of name to ndarray (n, n_columns)
        Per-sensor results, one row per variant of ``indices``.
    variant_values : mapping of name to ndarray (n,)
        Per-variant results (not ``done``).
    n_sensors : int, optional
        Sensors of these variants: the first ``n_sensors`` columns of each
        ``sensor_values`` array are stored (default: all its columns); the
        store's sensor slots beyond them are NaN.
    mark_done : bool
        Set the variants' ``done`` flags after their data (default True).
    space_values : mapping of name to ndarray (n, len(spaces)), optional
        Per-space results (``space_<name>``), columns in the order of ``spaces``;
        the store's other spaces (absent from these variants) get NaN, or
        :data:`SPACE_ABSENT_LEVEL` in integer results.
    spaces : sequence of str
        The spaces of ``space_values``' columns (names on the store's ``space``).
    view_values : mapping of name to ndarray (n, n_views, ...), optional
        Per-view results (:data:`VIEW_VARIABLES`, :data:`VIEW_MAP`), every view.
    """
    space_values = dict(space_values or {})
    view_values = dict(view_values or {})
    group, arrays = _open_arrays(path, [*sensor_values, *variant_values, *space_values,
                                        *view_values])
    idx = _indices(path, indices, arrays["done"].shape[0])
    blocks: dict[str, np.ndarray] = {}
    for name, values in sensor_values.items():
        array = arrays[name]
        values = _rows(path, name, values, idx.size)
        k = values.shape[1] if n_sensors is None else n_sensors
        rows = np.full((idx.size, array.shape[1]), np.nan, dtype=array.dtype)
        rows[:, :k] = values[:, :k]
        blocks[name] = rows
    for name, values in variant_values.items():
        array = arrays[name]
        values = _rows(path, name, values, idx.size).reshape(idx.size)
        blocks[name] = values.astype(array.dtype)
    if space_values:
        stored = [str(n) for n in group["space"][:]]
        missing = [n for n in spaces if n not in stored]
        if missing:
            raise ResultsStoreError(f"{path}: the results store has no space(s) "
                                    f"{', '.join(missing)}; it was made for another study")
        cols = [stored.index(n) for n in spaces]
        for name, values in space_values.items():
            array = arrays[name]
            values = _rows(path, name, values, idx.size).reshape(idx.size, len(cols))
            fill = np.nan if array.dtype.kind == "f" else SPACE_ABSENT_LEVEL
            rows = np.full((idx.size, array.shape[1]), fill, dtype=array.dtype)
            rows[:, cols] = values
            blocks[name] = rows
    for name, values in view_values.items():
        array = arrays[name]
        values = _rows(path, name, values, idx.size)
        if values.shape[1:] != array.shape[1:]:
            raise ResultsStoreError(f"{path}: '{name}' holds {values.shape[1:]} per variant, "
                                    f"the store {array.shape[1:]}; it was made for other views")
        blocks[name] = values.astype(array.dtype)
    if not idx.size:
        return
    with _block_locks(path, group, idx):
        for name, block in blocks.items():
            _write_block(arrays[name], idx, block)
        if mark_done:
            _write_block(arrays["done"], idx, np.ones(idx.size, dtype=bool))


def write_series_block(path: str | Path, indices: Sequence[int], start: int,
                       illuminance: np.ndarray, direct_sun: np.ndarray, first: int = 0,
                       last: bool = True) -> None:
    """Write one time block of several variants' series into their task's chunks.

    Parameters
    ----------
    path : str or Path
        The results store (created with ``store_series``).
    indices : sequence of int
        Positions of the variants on the ``variant`` dimension (distinct).
    start : int
        Time index of the block's first step; a block of a whole task that
        starts on a chunk boundary and spans whole chunks (or ends at the last
        step) is written without reading anything back.
    illuminance, direct_sun : ndarray (n, n_sensors_of_variants, n_t) [lx]
        Total and direct-sun illuminance; sensor slots beyond the variants'
        sensors are NaN.
    first : int
        Sensor of the block's first row: a series task split by ranges of
        sensors writes its range (a write covering part of a chunk is merged
        under the block's lock, :func:`_block_locks`).
    last : bool
        Whether the block ends at the variants' last sensor (the slots beyond
        it are then written NaN).
    """
    group, arrays = _open_arrays(path, list(SERIES_VARIABLES))
    idx = _indices(path, indices, arrays["done"].shape[0])
    blocks = {}
    for name, block in (("illuminance", illuminance), ("direct_sun_illuminance", direct_sun)):
        array = arrays[name]
        block = _rows(path, name, block, idx.size)
        if last and first + block.shape[1] < array.shape[1]:
            full = np.full((idx.size, array.shape[1] - first, block.shape[2]), np.nan,
                           dtype=array.dtype)
            full[:, : block.shape[1]] = block
            block = full
        blocks[name] = block
    if not idx.size:
        return
    with _block_locks(path, group, idx):
        for name, block in blocks.items():
            _write_block(arrays[name], idx, block, start, first)


def write_variant(
    path: str | Path,
    index: int,
    sensor_values: Mapping[str, np.ndarray],
    variant_values: Mapping[str, float],
    *,
    mark_done: bool = True,
) -> None:
    """Write one variant's results into its task's chunks; ``done`` last.

    Parameters
    ----------
    path : str or Path
        The results store.
    index : int
        The variant's position on the ``variant`` dimension.
    sensor_values : mapping of name to ndarray (n_sensors_of_variant,)
        Per-sensor results; slots beyond the variant's sensors stay NaN.
    variant_values : mapping of name to float
        Per-variant results (not ``done``).

    See :func:`write_variants`, which writes several variants at once.
    """
    write_variants(path, [index],
                   {name: np.asarray(v).reshape(1, -1) for name, v in sensor_values.items()},
                   {name: np.asarray(v).reshape(1) for name, v in variant_values.items()},
                   mark_done=mark_done)


def write_series(path: str | Path, index: int, start: int, illuminance: np.ndarray,
                 direct_sun: np.ndarray) -> None:
    """Write a block of series (n_sensors_of_variant, n_t) starting at time index ``start``."""
    write_series_block(path, [index], start, np.asarray(illuminance)[None],
                       np.asarray(direct_sun)[None])


def consolidate(path: str | Path) -> None:
    """Write consolidated metadata (once, at the end of a run)."""
    with warnings.catch_warnings():
        # zarr notes that consolidated metadata is not (yet) in the v3 spec;
        # xarray reads it and falls back to the plain metadata when absent.
        warnings.simplefilter("ignore")
        zarr.consolidate_metadata(str(path))
