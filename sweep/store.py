"""The results store: a Zarr v3 group that ``xarray.open_zarr`` opens (CONTRACT.md §3).

The client creates every array's metadata once, before any task writes, with
xarray's ``to_zarr(compute=False)`` (which writes the coordinates and leaves the
data variables at their fill values). Tasks then write whole chunks: every data
variable is chunked with one variant per chunk (and, for the series,
``series_chunk`` time steps per chunk), so a task that owns a variant owns all of
its chunks and no two tasks ever write the same chunk. :func:`check_alignment`
refuses a store whose chunks would be shared. Consolidated metadata is written
once at the end of a run.

Writing: a series task writes all its variants in one call
(:func:`write_variants`, :func:`write_series_block`): one group open, then each
variable's chunks of all the variants, then all their ``done`` flags, last. Each
chunk is encoded with the array's own codecs and stored in the calling thread
through zarr's synchronous codec and store protocols (:class:`_ChunkWriter`;
``LocalStore`` writes a temporary file and renames it, so a chunk is either
old or new, never torn), bypassing the per-chunk asyncio round trips of zarr's
array API; the bytes are the same as zarr's. A process killed during a call
leaves no variant of it marked done; repeating a call writes the same bytes.
:func:`write_variant` and :func:`write_series` are the one-variant forms.
Per-variant arrays (one value per chunk) are stored without a compressor.

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

import itertools
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

from luxsweep.sweep import __version__
from luxsweep.sweep.errors import ResultsStoreError
from luxsweep.sweep.registry import METRICS, long_name, sensor_metrics, variant_metrics

__all__ = [
    "CREATING",
    "FLAT_KEYS",
    "SENSOR_VARIABLES",
    "SERIES_VARIABLES",
    "VARIANT_VARIABLES",
    "StoreLayout",
    "check_alignment",
    "consolidate",
    "create_store",
    "open_existing",
    "read_attrs",
    "remove_unfinished",
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


FLAT_KEYS = {"name": "default", "separator": "."}
"""Chunk key encoding of the data variables: ``c.<variant>.<sensor>`` files side by
side instead of ``c/<variant>/<sensor>`` folders (standard Zarr v3 "default"
encoding with the "." separator). A variant's results are ~20 small chunk
files; not making a folder for each saves ~40 % of the write time of the
per-sensor variables (measured, benchmarks/bench_store.py). Stores written with
the "/" separator stay readable and writable (every path goes through the
array's own encoding)."""


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
        dtype, units, _ = SENSOR_VARIABLES[name]
        data[name] = (("variant", "sensor"), da.full((nv, ns), np.nan, dtype=dtype,
                                                     chunks=(1, ns)),
                      {"units": units, "long_name": long_name(name, layout.metric_options)})
        encoding[name] = {"chunks": (1, ns), "chunk_key_encoding": FLAT_KEYS}
    for name in [*layout.variant_variables, "done"]:
        dtype, units, text = VARIANT_VARIABLES[name]
        if name != "done":
            text = long_name(name, layout.metric_options)
        fill = np.nan if dtype.startswith("float") else 0
        data[name] = (("variant",), da.full((nv,), fill, dtype=dtype, chunks=1),
                      {"units": units, "long_name": text})
        # one value per chunk: a compressor only adds its frame (and time) to each
        encoding[name] = {"chunks": (1,), "compressors": None, "chunk_key_encoding": FLAT_KEYS}
    if layout.times is not None:
        nt = len(layout.times)
        coords["time"] = ("time", np.asarray(layout.times.tz_localize(None)
                                             if layout.times.tz is not None else layout.times),
                          {"long_name": "local standard time (hour-ending stamps)"})
        for name, (dtype, units, text) in SERIES_VARIABLES.items():
            chunks = (1, ns, min(layout.series_chunk, nt))
            data[name] = (("variant", "sensor", "time"),
                          da.full((nv, ns, nt), np.nan, dtype=dtype, chunks=chunks),
                          {"units": units, "long_name": text})
            encoding[name] = {"chunks": chunks, "chunk_key_encoding": FLAT_KEYS}
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


def _open_arrays(path: str | Path, names: Sequence[str]) -> dict[str, zarr.Array]:
    """Open the group once and the named arrays in it (plus ``done``).

    Consolidated metadata is not read: parsing the whole group's (3 ms for the
    demo's store) costs more than the few arrays a write needs (0.3 ms each).
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
    return arrays


class _ChunkWriter:
    """Writes whole chunks of one array, chunk by chunk, in the calling thread.

    zarr's array API runs every write through its asyncio loop: one call costs
    two thread hops per chunk (encode, store) plus the loop's scheduling, about
    0.4-1.7 ms per 1-variant chunk here. This writer encodes each chunk with the
    array's own codecs through zarr's synchronous codec protocol
    (``SupportsSyncCodec``) and hands the bytes to the store's synchronous
    ``set_sync`` (``SupportsSyncStore``; ``LocalStore`` writes a temporary file
    and renames it over the chunk, as its asynchronous path does). It mirrors
    the two rules of zarr's own write path: an edge chunk is padded with the fill
    value, and with ``write_empty_chunks`` off a chunk equal to the fill value is
    deleted rather than written. The chunk files are therefore byte-identical to
    zarr's (tested).

    :meth:`usable` says whether this applies (regular chunk grid, every codec
    and the store synchronous); otherwise callers write through zarr's API.
    """

    def __init__(self, array: zarr.Array) -> None:
        from zarr.core.buffer import default_buffer_prototype

        self.array = array
        self.codecs = tuple(array.metadata.codecs)
        self.prototype = default_buffer_prototype()
        self.spec = array.metadata.get_chunk_spec((0,) * array.ndim, array.config, self.prototype)
        self.store = array.store
        self.prefix = f"{array.path}/" if array.path else ""

    @staticmethod
    def usable(array: zarr.Array) -> bool:
        try:
            from zarr.abc.codec import SupportsSyncCodec
            from zarr.abc.store import SupportsSyncStore
            from zarr.core.chunk_grids import RegularChunkGrid
        except ImportError:  # zarr without the synchronous protocols
            return False
        return (array.metadata.zarr_format == 3
                and isinstance(array.metadata.chunk_grid, RegularChunkGrid)
                and isinstance(array.store, SupportsSyncStore)
                and all(isinstance(c, SupportsSyncCodec) for c in array.metadata.codecs))

    def write(self, coords: tuple[int, ...], chunk: np.ndarray) -> None:
        """Write one whole chunk (``chunk`` has the chunk shape and the array's dtype)."""
        key = self.prefix + self.array.metadata.encode_chunk_key(coords)
        data = self.prototype.nd_buffer.from_numpy_array(chunk)
        fill, first = self.spec.fill_value, chunk.flat[0]
        # a first value unlike the fill (NaN alike NaN) settles it without zarr's full test
        maybe_empty = first == fill or (first != first and fill != fill)
        if (maybe_empty and not self.spec.config.write_empty_chunks
                and data.all_equal(fill)):
            self.store.delete_sync(key)
            return
        spec = self.spec
        for codec in self.codecs:
            # zarr's synchronous codec protocol has only this underscored name: pyproject
            # bounds zarr below the next minor version for it
            data = codec._encode_sync(data, spec)
            spec = codec.resolve_metadata(spec)
        self.store.set_sync(key, data)


def _write_block(array: zarr.Array, indices: np.ndarray, block: np.ndarray,
                 start: int = 0) -> None:
    """Write ``block`` (n, *region) to the chunks of variants ``indices``.

    The region spans the whole sensor dimension and starts at ``start`` on the
    time dimension. A region made of whole chunks (the last one may end at the
    array's end) goes through :class:`_ChunkWriter`, chunk by chunk; anything
    else through zarr's orthogonal selection (which reads and merges chunks).
    """
    chunks, shape = array.chunks, array.shape
    region = [(0, shape[1])] if array.ndim > 1 else []
    if array.ndim > 2:
        region.append((start, block.shape[2]))
    whole = all(a % c == 0 and (n % c == 0 or a + n == s)
                for (a, n), c, s in zip(region, chunks[1:], shape[1:], strict=True))
    if not (whole and _ChunkWriter.usable(array)):
        selection = (indices, *[slice(a, a + n) for a, n in region])
        array.set_orthogonal_selection(selection, block.astype(array.dtype, copy=False))
        return
    writer = _ChunkWriter(array)
    fill = writer.spec.fill_value
    chunk = np.full(chunks, fill, dtype=array.dtype)
    # tiles: per trailing dimension, (chunk coordinate, offset in block, length)
    tiles = itertools.product(*[[(lo // c, lo - a, min(c, a + n - lo))
                                 for lo in range(a, a + n, c)]
                                for (a, n), c in zip(region, chunks[1:], strict=True)])
    for tile in tiles:
        coords = tuple(t[0] for t in tile)
        inner = tuple(slice(0, t[2]) for t in tile)
        outer = tuple(slice(t[1], t[1] + t[2]) for t in tile)
        if any(t[2] < c for t, c in zip(tile, chunks[1:], strict=True)):
            chunk[...] = fill  # a short edge tile: the rest of the chunk is fill
        for j, index in enumerate(indices):
            chunk[(0, *inner)] = block[(j, *outer)]
            writer.write((int(index), *coords), chunk)


def _mark_done(arrays: Mapping[str, zarr.Array], indices: np.ndarray) -> None:
    _write_block(arrays["done"], indices, np.ones(len(indices), dtype=bool))


def write_variants(
    path: str | Path,
    indices: Sequence[int],
    sensor_values: Mapping[str, np.ndarray],
    variant_values: Mapping[str, np.ndarray],
    n_sensors: int | None = None,
    *,
    mark_done: bool = True,
) -> None:
    """Write several variants' results, each into its own chunks; all ``done`` flags last.

    One group open and one pass per variable over the variants' chunks; every
    chunk holds one variant (CONTRACT §3), so tasks that own different variants
    never write the same chunk. The ``done`` flags are written only after every
    data chunk of every variant of the call: a process killed in between leaves
    none of these variants marked done (a resumed run redoes them), and running
    the same call twice writes the same bytes.

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
    """
    arrays = _open_arrays(path, [*sensor_values, *variant_values])
    idx = _indices(path, indices, arrays["done"].shape[0])
    for name, values in sensor_values.items():
        array = arrays[name]
        values = _rows(path, name, values, idx.size)
        k = values.shape[1] if n_sensors is None else n_sensors
        rows = np.full((idx.size, array.shape[1]), np.nan, dtype=array.dtype)
        rows[:, :k] = values[:, :k]
        _write_block(array, idx, rows)
    for name, values in variant_values.items():
        array = arrays[name]
        values = _rows(path, name, values, idx.size).reshape(idx.size)
        _write_block(array, idx, values.astype(array.dtype))
    if mark_done:
        _mark_done(arrays, idx)


def write_series_block(path: str | Path, indices: Sequence[int], start: int,
                       illuminance: np.ndarray, direct_sun: np.ndarray) -> None:
    """Write one time block of several variants' series, each into its own chunks.

    Parameters
    ----------
    path : str or Path
        The results store (created with ``store_series``).
    indices : sequence of int
        Positions of the variants on the ``variant`` dimension (distinct).
    start : int
        Time index of the block's first step; a block that starts on a chunk
        boundary and spans whole chunks (or ends at the last step) is written
        chunk by chunk without reading anything back.
    illuminance, direct_sun : ndarray (n, n_sensors_of_variants, n_t) [lx]
        Total and direct-sun illuminance; sensor slots beyond the variants'
        sensors are NaN.
    """
    arrays = _open_arrays(path, list(SERIES_VARIABLES))
    idx = _indices(path, indices, arrays["done"].shape[0])
    for name, block in (("illuminance", illuminance), ("direct_sun_illuminance", direct_sun)):
        array = arrays[name]
        block = _rows(path, name, block, idx.size)
        if block.shape[1] < array.shape[1]:
            full = np.full((idx.size, array.shape[1], block.shape[2]), np.nan, dtype=array.dtype)
            full[:, : block.shape[1]] = block
            block = full
        _write_block(array, idx, block, start)


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
