"""Results-store writes: one variant at a time vs one batch per series task.

The shape is one series task of ``bench_series.py``: 36 variants, 195 sensors
(the reference classroom), every metric family (12 per-sensor and 7 per-variant
variables plus ``done``: 720 chunk files), and, for the series, one time block
of 512 occupied steps (two arrays, 72 chunks of 195 × 512 float32).

Three ways to write the same values, timed back to back in this process, each
into a fresh store (best of ``--repeat``):

- ``before``: the writer ``sweep/store.py`` had before batching, kept here verbatim as the
  reference: per variant, open the group, then one zarr array assignment per
  variable (each goes through zarr's asyncio loop), then ``done``;
- ``one_by_one``: today's :func:`sweep.store.write_variant` per variant;
- ``batched``: one :func:`sweep.store.write_variants` call for all 36.

The stores here use the earlier layout, one variant per chunk (no task ranges
in the layout): the figure isolates the per-chunk cost of the write path. For
the task-block layout and its file counts see ``bench_scale_store.py``; since
that layout, per-variant arrays keep zarr's default compressor like the others,
so ``batched_zstd_scalars`` below equals ``batched``.

The figure is ``before / batched``. After timing, the chunk files of the three
stores are compared byte for byte (they must be identical). A fourth timing,
``batched_zstd_scalars``, writes into a store whose 1-element chunks carry
zarr's default zstd compressor (how stores were made before), to show what
dropping it saves.

Not part of the test suite.
"""

from __future__ import annotations

import argparse
import statistics
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any

import bench_common as bc
import numpy as np
import zarr

from luxsweep.sweep import store
from luxsweep.sweep.run import FAMILIES, store_variables

N_VARIANTS = 36
N_SENSORS = 195
N_STEPS = 512


def layout(times: bool) -> store.StoreLayout:
    import pandas as pd

    grid = np.column_stack([np.arange(N_SENSORS) * 0.5, np.zeros(N_SENSORS),
                            np.full(N_SENSORS, 0.8)])
    sensor_vars, variant_vars = store_variables(list(FAMILIES))
    return store.StoreLayout(
        variant_ids=[f"{i:016x}" for i in range(N_VARIANTS)],
        labels=[f"orientation={10 * i}" for i in range(N_VARIANTS)],
        axes={"orientation": [10.0 * i for i in range(N_VARIANTS)]},
        sensors=[grid] * N_VARIANTS,
        sensor_variables=sensor_vars,
        variant_variables=variant_vars,
        times=pd.date_range("2023-01-02 09:00", periods=N_STEPS, freq="h") if times else None,
        series_chunk=N_STEPS,
        attrs={"study_hash": "bench", "study": "name: bench\n"},
    )


def values(lay: store.StoreLayout) -> tuple[dict[str, np.ndarray], dict[str, np.ndarray]]:
    """Random per-sensor (36, 195) and per-variant (36,) results (seeded)."""
    rng = np.random.default_rng(13)
    sensor = {n: rng.random((N_VARIANTS, N_SENSORS), dtype=np.float32)
              for n in lay.sensor_variables}
    variant = {n: (100 * rng.random(N_VARIANTS)).astype(np.float32)
               for n in lay.variant_variables}
    variant["en17037_level"] = rng.integers(1, 4, N_VARIANTS)  # 0 is the fill value
    return sensor, variant


# -- the writer before batching (reference), verbatim apart from its name --------


def before_write_variant(path: Path, index: int, sensor_values: Mapping[str, np.ndarray],
                         variant_values: Mapping[str, float]) -> None:
    group = zarr.open_group(str(path), mode="r+")
    for name, vals in sensor_values.items():
        arr = group[name]
        row = np.full(arr.shape[1], np.nan, dtype=arr.dtype)
        row[: len(vals)] = vals
        arr[index, :] = row
    for name, value in variant_values.items():
        arr = group[name]
        arr[index] = np.asarray(value).astype(arr.dtype)
    group["done"][index] = True


def before_write_series(path: Path, index: int, start: int, illuminance: np.ndarray,
                        direct_sun: np.ndarray) -> None:
    group = zarr.open_group(str(path), mode="r+")
    for name, block in (("illuminance", illuminance), ("direct_sun_illuminance", direct_sun)):
        arr = group[name]
        full = np.full((arr.shape[1], block.shape[1]), np.nan, dtype=arr.dtype)
        full[: block.shape[0]] = block
        arr[index, :, start : start + block.shape[1]] = full


def zstd_scalar_store(path: Path, lay: store.StoreLayout) -> None:
    """A store like :func:`sweep.store.create_store`'s with zstd on 1-element chunks
    (today the same as :func:`sweep.store.create_store`'s)."""
    ds, encoding = store._template(lay)
    for enc in encoding.values():
        enc.pop("compressors", None)
    ds.to_zarr(path, mode="w-", compute=False, zarr_format=3, consolidated=False,
               encoding=encoding)


def chunk_bytes(path: Path, names: list[str]) -> dict[str, bytes]:
    """Chunk files of the named arrays ('c.<...>' with the "." key separator, 'c/...' with "/")."""
    return {str(p.relative_to(path)): p.read_bytes()
            for name in names for p in sorted((path / name).rglob("*"))
            if p.is_file() and p.name != "zarr.json"}


def time_writers(work: Path, writers: dict[str, Callable[[Path], None]],
                 make: dict[str, Callable[[Path], None]], repeat: int,
                 names: list[str]) -> dict[str, Any]:
    seconds: dict[str, list[float]] = {k: [] for k in writers}
    last: dict[str, Path] = {}
    for r in range(repeat):
        for key, write in writers.items():  # interleaved: the same machine state for each
            path = work / f"{key}-{r}.zarr"
            make[key](path)
            seconds[key].append(bc.timed(lambda w=write, p=path: w(p))[0])
            last[key] = path
    reference = chunk_bytes(last["before"], names)
    identical = {k: chunk_bytes(p, names) == reference for k, p in last.items()
                 if k != "batched_zstd_scalars"}
    return {"best_seconds": {k: min(v) for k, v in seconds.items()},
            "median_seconds": {k: statistics.median(v) for k, v in seconds.items()},
            "chunk_files": len(reference), "identical_chunk_files": identical}


def results_writes(work: Path, repeat: int) -> dict[str, Any]:
    lay = layout(times=False)
    sensor, variant = values(lay)

    def before(path: Path) -> None:
        for i in range(N_VARIANTS):
            before_write_variant(path, i, {n: v[i] for n, v in sensor.items()},
                                 {n: v[i] for n, v in variant.items()})

    def one_by_one(path: Path) -> None:
        for i in range(N_VARIANTS):
            store.write_variant(path, i, {n: v[i] for n, v in sensor.items()},
                                {n: v[i] for n, v in variant.items()})

    def batched(path: Path) -> None:
        store.write_variants(path, range(N_VARIANTS), sensor, variant)

    def create(path: Path) -> None:
        store.create_store(path, lay)

    writers = {"before": before, "one_by_one": one_by_one, "batched": batched,
               "batched_zstd_scalars": batched}
    make = {k: create for k in writers}
    make["batched_zstd_scalars"] = lambda p: zstd_scalar_store(p, lay)
    names = [*lay.sensor_variables, *lay.variant_variables, "done"]
    out = time_writers(work, writers, make, repeat, names)
    best = out["best_seconds"]
    out["ratio_before_over_batched"] = best["before"] / best["batched"]
    out["ratio_one_by_one_over_batched"] = best["one_by_one"] / best["batched"]
    out["ms_per_chunk_file"] = {k: 1e3 * v / out["chunk_files"] for k, v in best.items()}
    return out


def series_writes(work: Path, repeat: int) -> dict[str, Any]:
    lay = layout(times=True)
    rng = np.random.default_rng(14)
    # illuminance-like values: 0-5000 lx rounded to 0.1 lx (float32)
    ill = np.round(5000 * rng.random((N_VARIANTS, N_SENSORS, N_STEPS)), 1).astype(np.float32)
    sun = np.where(rng.random(ill.shape) < 0.8, 0, ill).astype(np.float32)

    def before(path: Path) -> None:
        for i in range(N_VARIANTS):
            before_write_series(path, i, 0, ill[i], sun[i])

    def one_by_one(path: Path) -> None:
        for i in range(N_VARIANTS):
            store.write_series(path, i, 0, ill[i], sun[i])

    def batched(path: Path) -> None:
        store.write_series_block(path, range(N_VARIANTS), 0, ill, sun)

    def create(path: Path) -> None:
        store.create_store(path, lay)

    writers = {"before": before, "one_by_one": one_by_one, "batched": batched}
    out = time_writers(work, writers, dict.fromkeys(writers, create), repeat,
                       list(store.SERIES_VARIABLES))
    best = out["best_seconds"]
    out["ratio_before_over_batched"] = best["before"] / best["batched"]
    return out


def main(repeat: int = 5) -> dict[str, Any]:
    with bc.scratch("store") as work:
        load0 = bc.load_average()
        (work / "results").mkdir()
        (work / "series").mkdir()
        res = results_writes(work / "results", repeat)
        ser = series_writes(work / "series", repeat)
        load1 = bc.load_average()
    return {"figure": "results-store writes, 36 variants x 195 sensors, all metric families",
            "results": res, "series_block_512_steps": ser, "repeat": repeat,
            "load_average": [load0, load1], "environment": bc.environment()}


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", help="write the figures to this file")
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    bc.report(main(args.repeat), args.json)
