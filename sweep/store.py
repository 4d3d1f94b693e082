"""The results store: a Zarr v3 group that ``xarray.open_zarr`` opens (CONTRACT.md §3).

The client creates every array's metadata once, before any task writes, with
xarray's ``to_zarr(compute=False)`` (which writes the coordinates and leaves the
data variables at their fill values). Tasks then write whole chunks with
zarr-python: every data variable is chunked with one variant per chunk (and, for
the series, ``series_chunk`` time steps per chunk), so a task that owns a variant
owns all of its chunks and no two tasks ever write the same chunk.
:func:`check_alignment` refuses a store whose chunks would be shared. Per variant,
``done`` is written last; consolidated metadata is written once at the end of a
run.

Layout:

- dimensions ``variant``, ``sensor`` and, with ``store_series``, ``time``;
- coordinates ``variant_id``, ``label`` and one per varied axis (named by its
  vary key) on ``variant``; ``x``, ``y``, ``z`` [m, building frame] on ``sensor``,
  or on ``(variant, sensor)`` padded with NaN when the grids differ; ``n_sensors``
  on ``variant``; ``time`` (local standard time, hour-ending stamps);
- data variables listed in :data:`SENSOR_VARIABLES`, :data:`VARIANT_VARIABLES`
  and :data:`SERIES_VARIABLES`, each with ``units`` and ``long_name`` attributes;
- attributes ``study_hash``, ``luxsweep_version``, ``study`` (the study file's
  text), ``study_name``, ``axes``.

The store lives in one folder chosen by the user; no path inside it is derived
from variant labels.
"""

from __future__ import annotations

import os
import shutil
import uuid
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import dask.array as da
import numpy as np
import pandas as pd
import xarray as xr
import zarr

from sweep import __version__
from sweep.errors import ResultsStoreError

# name -> (dtype, units, long name)
SENSOR_VARIABLES: dict[str, tuple[str, str, str]] = {
    "daylight_factor": ("float32", "%", "daylight factor under the CIE overcast sky"),
    "daylight_autonomy": ("float32", "1", "fraction of occupied time at or above the "
                          "daylight autonomy threshold"),
    "continuous_daylight_autonomy": ("float32", "1", "continuous daylight autonomy "
                                     "(partial credit below the threshold)"),
    "udi_low": ("float32", "1", "fraction of occupied time below the lowest UDI edge"),
    "udi_supplementary": ("float32", "1", "fraction of occupied time in the supplementary "
                          "UDI band"),
    "udi_autonomous": ("float32", "1", "fraction of occupied time in the autonomous UDI band"),
    "udi_high": ("float32", "1", "fraction of occupied time above the highest UDI edge"),
    "direct_sun_hours": ("float32", "h", "occupied hours above the direct-sun threshold "
                         "(direct sun only)"),
    "ase_hours": ("float32", "h", "analysis hours (08:00-18:00) above the direct-sun "
                  "threshold (direct sun only)"),
    "sda_fraction": ("float32", "1", "fraction of analysis hours at or above the sDA "
                     "threshold (shading rule applied)"),
    "mean_illuminance": ("float32", "lx", "mean illuminance over the occupied time"),
    "light_exposure": ("float32", "lx h", "annual light exposure over all steps"),
}
VARIANT_VARIABLES: dict[str, tuple[str, str, str]] = {
    "sda": ("float32", "%", "spatial daylight autonomy sDA (IES LM-83-12)"),
    "ase": ("float32", "%", "annual sunlight exposure ASE (IES LM-83-12)"),
    "udi_useful_mean": ("float32", "1", "grid mean of the fraction of occupied time in "
                        "the useful band"),
    "daylight_autonomy_mean": ("float32", "1", "grid mean of daylight autonomy"),
    "daylight_factor_mean": ("float32", "%", "grid mean daylight factor"),
    "en17037_level": ("int8", "1", "EN 17037 daylight provision level: 0 none, 1 minimum, "
                      "2 medium, 3 high"),
    "shading_hours": ("float32", "h", "analysis hours with the operable shading closed "
                      "(IES LM-83-12 rule)"),
    "done": ("bool", "1", "all results of this variant are written"),
}
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

    @property
    def n_variants(self) -> int:
        return len(self.variant_ids)

    @property
    def n_sensors(self) -> int:
        return max(len(s) for s in self.sensors)

    @property
    def shared_grid(self) -> bool:
        first = np.asarray(self.sensors[0])[:, :3]
        return all(np.array_equal(np.asarray(s)[:, :3], first) for s in self.sensors[1:])


def _coordinate_values(values: Sequence[Any]) -> np.ndarray:
    arr = np.asarray(list(values))
    if arr.dtype.kind in "USO":
        return np.asarray([str(v) for v in values], dtype=object)
    return arr


def _template(layout: StoreLayout) -> tuple[xr.Dataset, dict[str, dict[str, Any]]]:
    nv, ns = layout.n_variants, layout.n_sensors
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

    data: dict[str, Any] = {}
    encoding: dict[str, dict[str, Any]] = {}
    for name in layout.sensor_variables:
        dtype, units, long_name = SENSOR_VARIABLES[name]
        data[name] = (("variant", "sensor"), da.full((nv, ns), np.nan, dtype=dtype,
                                                     chunks=(1, ns)),
                      {"units": units, "long_name": long_name})
        encoding[name] = {"chunks": (1, ns)}
    for name in [*layout.variant_variables, "done"]:
        dtype, units, long_name = VARIANT_VARIABLES[name]
        fill = np.nan if dtype.startswith("float") else 0
        data[name] = (("variant",), da.full((nv,), fill, dtype=dtype, chunks=1),
                      {"units": units, "long_name": long_name})
        encoding[name] = {"chunks": (1,)}
    if layout.times is not None:
        nt = len(layout.times)
        coords["time"] = ("time", np.asarray(layout.times.tz_localize(None)
                                             if layout.times.tz is not None else layout.times),
                          {"long_name": "local standard time (hour-ending stamps)"})
        for name, (dtype, units, long_name) in SERIES_VARIABLES.items():
            chunks = (1, ns, min(layout.series_chunk, nt))
            data[name] = (("variant", "sensor", "time"),
                          da.full((nv, ns, nt), np.nan, dtype=dtype, chunks=chunks),
                          {"units": units, "long_name": long_name})
            encoding[name] = {"chunks": chunks}
    ds = xr.Dataset(data, coords=coords, attrs=dict(layout.attrs))
    return ds, encoding


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
        check_alignment(tmp, series_chunk=layout.series_chunk)
        try:
            os.rename(tmp, path)
        except OSError as exc:
            raise ResultsStoreError(f"{path}: cannot create the results store ({exc}); "
                                    "delete it or choose another --out") from None
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


def check_alignment(path: str | Path, *, series_chunk: int | None = None) -> None:
    """Refuse a store whose chunks could be written by two tasks.

    Every array on the ``variant`` dimension must hold one variant per chunk, and
    series arrays must have ``series_chunk`` steps per chunk (the task's time
    blocks), so that each task writes whole chunks that it alone owns.
    """
    group = zarr.open_group(str(path), mode="r")
    for name in [*SENSOR_VARIABLES, *VARIANT_VARIABLES, *SERIES_VARIABLES]:
        if name not in group:
            continue
        arr = group[name]
        dims = arr.metadata.dimension_names or ()
        if not dims or dims[0] != "variant" or arr.chunks[0] != 1:
            raise ResultsStoreError(
                f"{path}: array '{name}' has chunks {arr.chunks} on {dims}; results need one "
                "variant per chunk so that tasks never share a chunk. Start a new store."
            )
        if len(dims) > 1 and dims[1] == "sensor" and arr.chunks[1] != arr.shape[1]:
            raise ResultsStoreError(f"{path}: array '{name}' splits the sensor dimension "
                                    f"({arr.chunks}); start a new store.")
        if len(dims) > 2 and series_chunk is not None and arr.chunks[2] != min(series_chunk,
                                                                                arr.shape[2]):
            raise ResultsStoreError(f"{path}: array '{name}' has {arr.chunks[2]} time steps "
                                    f"per chunk, the run writes {series_chunk}; start a new "
                                    "store.")


def read_attrs(path: str | Path) -> dict[str, Any]:
    """Group attributes of an existing store (raises ResultsStoreError if it is not one)."""
    try:
        group = zarr.open_group(str(path), mode="r")
    except Exception as exc:
        raise ResultsStoreError(
            f"{path}: not a luxsweep results store ({type(exc).__name__}); delete the folder "
            "or choose another with --out"
        ) from None
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
    if attrs.get("study_hash") != study_hash:
        raise ResultsStoreError(
            f"{path}: this results store belongs to a different study (or an earlier "
            "version of this one: variants, axes, metrics or store_series changed). To start "
            f"fresh, delete the folder {path} or write elsewhere with --out."
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


def write_variant(
    path: str | Path,
    index: int,
    sensor_values: Mapping[str, np.ndarray],
    variant_values: Mapping[str, float],
    *,
    mark_done: bool = True,
) -> None:
    """Write one variant's results into its own chunks; ``done`` last.

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
    """
    group = zarr.open_group(str(path), mode="r+")
    for name, values in sensor_values.items():
        arr = group[name]
        row = np.full(arr.shape[1], np.nan, dtype=arr.dtype)
        row[: len(values)] = values
        arr[index, :] = row
    for name, value in variant_values.items():
        arr = group[name]
        arr[index] = np.asarray(value).astype(arr.dtype)
    if mark_done:
        group["done"][index] = True


def write_series(path: str | Path, index: int, start: int, illuminance: np.ndarray,
                 direct_sun: np.ndarray) -> None:
    """Write a block of series (n_sensors_of_variant, n_t) starting at time index ``start``."""
    group = zarr.open_group(str(path), mode="r+")
    for name, block in (("illuminance", illuminance), ("direct_sun_illuminance", direct_sun)):
        arr = group[name]
        full = np.full((arr.shape[1], block.shape[1]), np.nan, dtype=arr.dtype)
        full[: block.shape[0]] = block
        arr[index, :, start : start + block.shape[1]] = full


def consolidate(path: str | Path) -> None:
    """Write consolidated metadata (once, at the end of a run)."""
    with warnings.catch_warnings():
        # zarr notes that consolidated metadata is not (yet) in the v3 spec;
        # xarray reads it and falls back to the plain metadata when absent.
        warnings.simplefilter("ignore")
        zarr.consolidate_metadata(str(path))
