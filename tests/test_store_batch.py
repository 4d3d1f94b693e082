"""Batched results-store writes (``sweep.store.write_variants`` / ``write_series_block``).

The reference for the stored bytes is zarr-python's own array API, one
assignment per variant (``arr[i, :] = row``): a batch over a task's range, the
same variants one by one, and the reference must leave byte-identical chunk
files. The guarantees of CONTRACT §3 and DEVELOPERS.md ("Results store") are
checked with real faults: an obstacle on the file system in the middle of a
batch, a process killed with SIGKILL while it writes, and single-variant writes
of one task's block racing on the worker processes of a real Dask cluster.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import xarray as xr
import zarr

from luxsweep.sweep import store
from luxsweep.sweep.errors import ResultsStoreError
from luxsweep.sweep.run import FAMILIES, store_variables

SENSOR_VARS, VARIANT_VARS = store_variables(list(FAMILIES))  # every metric family


def grid(n: int) -> np.ndarray:
    return np.column_stack([0.5 * np.arange(n), np.zeros(n), np.full(n, 0.8)])


def layout(sensors: list[np.ndarray], times: pd.DatetimeIndex | None = None,
           series_chunk: int = 4, tasks: list[tuple[int, int]] | None = None
           ) -> store.StoreLayout:
    n = len(sensors)
    return store.StoreLayout(
        variant_ids=[f"{i:016x}" for i in range(n)],
        labels=[f"orientation={15 * i}" for i in range(n)],
        axes={"orientation": [15.0 * i for i in range(n)]},
        sensors=sensors,
        sensor_variables=SENSOR_VARS,
        variant_variables=VARIANT_VARS,
        times=times,
        series_chunk=series_chunk,
        attrs={"study_hash": "batch", "study": "name: batch\n"},
        tasks=tasks,
    )


def results(indices: list[int], n_cols: int, seed: int = 1
            ) -> tuple[dict[str, np.ndarray], dict[str, np.ndarray]]:
    """Seeded per-sensor (n, n_cols) and per-variant (n,) values, with fill-valued cases:
    variant 0's ``udi_high`` row is all NaN and ``en17037_level`` 0 occurs (both equal
    the fill value, which zarr stores by deleting the chunk)."""
    rng = np.random.default_rng(seed)
    n = len(indices)
    sensor = {name: rng.random((n, n_cols), dtype=np.float32) for name in SENSOR_VARS}
    sensor["udi_high"][0] = np.nan
    variant = {name: (100 * rng.random(n)).astype(np.float32) for name in VARIANT_VARS}
    variant["en17037_level"] = np.arange(n) % 4
    return sensor, variant


def zarr_api_write(path: Path, indices: list[int], sensor: dict, variant: dict,
                   n_sensors: int) -> None:
    """Reference writer: zarr-python's array API, one assignment per variable and variant."""
    group = zarr.open_group(str(path), mode="r+")
    for j, i in enumerate(indices):
        for name, values in sensor.items():
            row = np.full(group[name].shape[1], np.nan, dtype=np.float32)
            row[:n_sensors] = values[j, :n_sensors]
            group[name][i, :] = row
        for name, values in variant.items():
            group[name][i] = np.asarray(values[j]).astype(group[name].dtype)
        group["done"][i] = True


def chunk_files(path: Path) -> dict[str, bytes]:
    """Every chunk file of the store's arrays, by relative path."""
    return {str(p.relative_to(path)): p.read_bytes()
            for p in sorted(path.rglob("*"))
            if p.is_file() and (p.name.startswith("c.") or "/c/" in f"/{p.relative_to(path)}")}


def test_batched_write_gives_zarrs_bytes_and_equals_one_by_one(tmp_path):
    """Batched = one-by-one = zarr's array API, chunk file by chunk file (exact: the same
    codecs on the same values; the reference is zarr-python's own write path), in a
    store of two tasks (variants 0-3 and 4-6: a block of 4 and the short edge block)."""
    sensors = [grid(6)] * 7
    indices = [5, 0, 3, 6]  # a subset, out of order
    sensor, variant = results(indices, 6)
    paths = {k: tmp_path / f"{k}.zarr" for k in ("batched", "one_by_one", "zarr_api")}
    for p in paths.values():
        store.create_store(p, layout(sensors, tasks=[(0, 4), (4, 7)]))
    store.write_variants(paths["batched"], indices, sensor, variant)
    for j, i in enumerate(indices):
        store.write_variant(paths["one_by_one"], i, {n: v[j] for n, v in sensor.items()},
                            {n: v[j] for n, v in variant.items()})
    zarr_api_write(paths["zarr_api"], indices, sensor, variant, 6)

    want = chunk_files(paths["zarr_api"])
    # two chunks (one per task) of every data array and of done
    results_arrays = {*SENSOR_VARS, *VARIANT_VARS, "done"}
    assert sum(k.split("/")[0] in results_arrays for k in want) == 2 * len(results_arrays)
    assert chunk_files(paths["batched"]) == want
    assert chunk_files(paths["one_by_one"]) == want
    ds = xr.open_zarr(paths["batched"], consolidated=False)
    ref = xr.open_zarr(paths["zarr_api"], consolidated=False)
    for name in [*SENSOR_VARS, *VARIANT_VARS, "done"]:
        assert ds[name].values.tobytes() == ref[name].values.tobytes(), name
    assert ds.done.values.tolist() == [i in indices for i in range(7)]
    np.testing.assert_array_equal(ds.daylight_factor.values[indices], sensor["daylight_factor"])
    assert np.isnan(ds.udi_high.values[5]).all()  # the all-NaN row reads NaN


def test_repeating_a_batch_leaves_the_bytes_unchanged(tmp_path):
    """Duplicate execution (a task run twice) writes the same bytes."""
    path = tmp_path / "r.zarr"
    store.create_store(path, layout([grid(5)] * 4, tasks=[(0, 1), (1, 4)]))
    sensor, variant = results([1, 2, 3], 5)
    store.write_variants(path, [1, 2, 3], sensor, variant)
    first = chunk_files(path)
    store.write_variants(path, [1, 2, 3], sensor, variant)
    assert chunk_files(path) == first


def test_fewer_sensors_than_the_store_are_padded_with_nan(tmp_path):
    """Variants of a smaller grid fill their first sensor slots; the rest stay NaN
    (CONTRACT §3: unused sensor slots are NaN)."""
    path = tmp_path / "r.zarr"
    store.create_store(path, layout([grid(3), grid(3), grid(7)],
                                    times=pd.date_range("2023-01-02 09:00", periods=6, freq="h")))
    sensor, variant = results([0, 1], 3)
    store.write_variants(path, [1, 0], sensor, variant)
    # n_sensors: only the first 2 columns of these 7-column rows are sensors
    wide, wide_v = results([2], 7, seed=2)
    store.write_variants(path, [2], wide, wide_v, n_sensors=2)
    series = np.arange(2 * 3 * 4, dtype=np.float32).reshape(2, 3, 4)
    store.write_series_block(path, [0, 1], 0, series, -series)
    ds = xr.open_zarr(path, consolidated=False)
    for name in SENSOR_VARS:
        got = ds[name].values
        np.testing.assert_array_equal(got[[1, 0], :3], sensor[name], err_msg=name)
        assert np.isnan(got[:2, 3:]).all(), name
        np.testing.assert_array_equal(got[2, :2], wide[name][0, :2], err_msg=name)
        assert np.isnan(got[2, 2:]).all(), name
    np.testing.assert_array_equal(ds.illuminance.values[:2, :3, :4], series)
    assert np.isnan(ds.illuminance.values[:2, 3:, :4]).all()
    assert np.isnan(ds.illuminance.values[:, :, 4:]).all()  # the unwritten time chunk
    np.testing.assert_array_equal(ds.direct_sun_illuminance.values[:2, :3, :4], -series)
    assert ds.done.values.tolist() == [True, True, True]


def test_series_block_matches_zarr_including_edge_and_unaligned_blocks(tmp_path):
    """Series blocks: one whole chunk, a block of a whole chunk and the short last
    chunk (padded like zarr pads it), and an unaligned block (written through zarr's
    own API) give zarr's bytes."""
    times = pd.date_range("2023-01-02 09:00", periods=10, freq="h")  # chunks 4, 4, 2
    rng = np.random.default_rng(3)
    ill = (1000 * rng.random((3, 5, 10))).astype(np.float32)
    sun = np.where(ill > 500, ill, 0).astype(np.float32)
    ours, ref = tmp_path / "ours.zarr", tmp_path / "ref.zarr"
    for p in (ours, ref):
        store.create_store(p, layout([grid(5)] * 3, times=times, tasks=[(0, 3)]))
    store.write_series_block(ours, [2, 0, 1], 0, ill[:, :, 0:4], sun[:, :, 0:4])  # one chunk
    # a whole chunk and the short edge chunk in one block
    store.write_series_block(ours, [2, 0, 1], 4, ill[:, :, 4:], sun[:, :, 4:])
    group = zarr.open_group(str(ref), mode="r+")
    for j, i in enumerate([2, 0, 1]):
        for a, b in ((0, 4), (4, 8), (8, 10)):
            group["illuminance"][i, :, a:b] = ill[j, :, a:b]
            group["direct_sun_illuminance"][i, :, a:b] = sun[j, :, a:b]
    assert chunk_files(ours) == chunk_files(ref)
    # an unaligned block (starts mid-chunk): merged into the existing chunks by zarr
    store.write_series_block(ours, [1], 2, ill[:1, :, :5] + 1, sun[:1, :, :5])
    got = xr.open_zarr(ours, consolidated=False).illuminance.values
    np.testing.assert_array_equal(got[1, :, 2:7], ill[0, :, :5] + 1)
    np.testing.assert_array_equal(got[1, :, :2], ill[2, :, :2])
    np.testing.assert_array_equal(got[1, :, 7:], ill[2, :, 7:])
    # the one-variant form writes the same as the batch
    store.write_series(ref, 1, 2, ill[0, :, :5] + 1, sun[0, :, :5])
    assert chunk_files(ours) == chunk_files(ref)


def test_a_failure_in_the_middle_of_a_batch_sets_no_done_flag(tmp_path):
    """A real fault in the middle of a batch (a folder where the task's chunk file of
    ``sda`` must go, so the file system refuses the rename) stops the call before any
    ``done`` flag is written, although the per-sensor data was complete; once the
    obstacle is gone, the same call completes."""
    path = tmp_path / "r.zarr"
    store.create_store(path, layout([grid(4)] * 5, tasks=[(0, 5)]))
    indices = [0, 1, 2, 3, 4]
    sensor, variant = results(indices, 4)
    obstacle = path / "sda" / "c.0" / "x"  # store.FLAT_KEYS: the one chunk of sda is c.0
    obstacle.mkdir(parents=True)
    with pytest.raises(OSError):
        store.write_variants(path, indices, sensor, variant)
    group = zarr.open_group(str(path), mode="r")
    assert not group["done"][:].any()
    # data before the fault is in place (per-sensor arrays come first), sda is not
    np.testing.assert_array_equal(group["daylight_factor"][:], sensor["daylight_factor"])
    assert np.isnan(group["sda"][:]).all()
    (obstacle.parent / "x").rmdir()
    obstacle.parent.rmdir()
    store.write_variants(path, indices, sensor, variant)
    group = zarr.open_group(str(path), mode="r")
    assert group["done"][:].all()
    np.testing.assert_array_equal(group["sda"][:], variant["sda"])


KILL_WRITER = textwrap.dedent("""
    import sys
    import numpy as np
    from luxsweep.sweep import store
    path, n_sensors = sys.argv[1], int(sys.argv[2])
    names = sys.argv[3].split(",")
    print("ready", flush=True)
    while True:  # until killed; passes after the first rewrite the same bytes
        for first in range(0, 400, 8):
            idx = list(range(first, first + 8))
            sensor = {n: np.array([[i * 100 + k + s for s in range(n_sensors)] for i in idx],
                                  dtype=np.float32) for k, n in enumerate(names)}
            store.write_variants(path, idx, sensor, {"sda": np.array(idx, dtype=np.float32)})
""")


@pytest.mark.parametrize("delay", [0.05, 0.2, 0.45])
def test_a_killed_writer_leaves_no_variant_done_without_its_data(tmp_path, delay):
    """SIGKILL while batches are written: every variant whose ``done`` is set has all its
    data, and every chunk reads (none torn)."""
    path = tmp_path / "r.zarr"
    names = SENSOR_VARS[:6]
    lay = layout([grid(3)] * 400, tasks=[(a, a + 8) for a in range(0, 400, 8)])
    lay = store.StoreLayout(**{**lay.__dict__, "sensor_variables": names,
                               "variant_variables": ["sda"]})
    store.create_store(path, lay)
    proc = subprocess.Popen([sys.executable, "-c", KILL_WRITER, str(path), "3", ",".join(names)],
                            stdout=subprocess.PIPE, text=True)
    assert proc.stdout.readline().strip() == "ready"
    time.sleep(delay)
    os.kill(proc.pid, signal.SIGKILL)
    assert proc.wait(timeout=30) == -signal.SIGKILL  # killed while writing, not finished
    group = zarr.open_group(str(path), mode="r")
    done = group["done"][:]
    data = {n: group[n][:] for n in names}
    sda = group["sda"][:]
    print(f"killed after {delay} s: {int(done.sum())} of 400 variants done")
    for i in np.flatnonzero(done):
        for k, n in enumerate(names):
            np.testing.assert_array_equal(data[n][i], i * 100 + k + np.arange(3), err_msg=n)
        assert sda[i] == i
    # variants not done hold either nothing yet (NaN) or their final values
    for k, n in enumerate(names):
        rest = data[n][~done]
        written = ~np.isnan(rest[:, 0])
        expect = np.flatnonzero(~done)[written, None] * 100 + k + np.arange(3)
        np.testing.assert_array_equal(rest[written], expect, err_msg=n)


def test_part_of_a_task_merges_into_its_chunks(tmp_path):
    """A resumed task writes only its variants not yet done: their rows are merged
    into the task's chunks and the rows already there are kept."""
    path = tmp_path / "r.zarr"
    store.create_store(path, layout([grid(4)] * 6, tasks=[(0, 3), (3, 6)]))
    sensor, variant = results([0, 1, 2], 4)
    store.write_variants(path, [1], {n: v[1:2] for n, v in sensor.items()},
                         {n: v[1:2] for n, v in variant.items()})
    store.write_variants(path, [2, 0], {n: v[[2, 0]] for n, v in sensor.items()},
                         {n: v[[2, 0]] for n, v in variant.items()})
    ds = xr.open_zarr(path, consolidated=False)
    assert ds.done.values.tolist() == [True] * 3 + [False] * 3
    for name in SENSOR_VARS:
        np.testing.assert_array_equal(ds[name].values[:3], sensor[name], err_msg=name)
    np.testing.assert_array_equal(ds.sda.values[:3], variant["sda"])
    assert np.isnan(ds.sda.values[3:]).all()


def test_sharded_arrays_made_by_hand_are_written_through_zarr(tmp_path):
    """A store made by hand with sharded arrays and no ``variant_block`` attribute is
    written through zarr's array API with the same values."""
    path = tmp_path / "r.zarr"
    group = zarr.create_group(str(path), zarr_format=3)
    group.create_array("daylight_factor", shape=(3, 4), chunks=(1, 4), shards=(3, 4),
                       dtype="float32", fill_value=np.nan, dimension_names=["variant", "sensor"])
    group.create_array("done", shape=(3,), chunks=(3,), dtype="bool", fill_value=False,
                       dimension_names=["variant"])
    assert store._store_block(group) == 3
    rows = np.arange(8, dtype=np.float32).reshape(2, 4)
    store.write_variants(path, [2, 0], {"daylight_factor": rows}, {})
    got = zarr.open_group(str(path), mode="r")
    np.testing.assert_array_equal(got["daylight_factor"][[2, 0]], rows)
    assert got["done"][:].tolist() == [True, False, True]


def _write_one(path: str, i: int) -> int:
    sensor = {n: np.full((1, 3), 100 * i + k, dtype=np.float32)
              for k, n in enumerate(SENSOR_VARS[:4])}
    store.write_variants(path, [i], sensor, {"sda": np.array([i], dtype=np.float32)})
    return i


@pytest.mark.slow
def test_one_variant_retries_of_a_task_racing_on_workers_lose_nothing(tmp_path):
    """The variants of one task written one by one at the same time, as a failed
    task's retries are, on two worker processes of a real Dask cluster: every write
    reads, merges and rewrites the task's chunk, and without the block lock rows
    would be lost. Asserts every row and every ``done`` flag is there."""
    from distributed import Client, LocalCluster

    path = tmp_path / "r.zarr"
    names = SENSOR_VARS[:4]
    lay = layout([grid(3)] * 48, tasks=[(0, 48)])
    store.create_store(path, store.StoreLayout(**{**lay.__dict__, "sensor_variables": names,
                                                  "variant_variables": ["sda"]}))
    with LocalCluster(n_workers=2, threads_per_worker=2, processes=True, host="127.0.0.1",
                      dashboard_address=None) as cluster, Client(cluster) as client:
        futures = [client.submit(_write_one, str(path), i, pure=False) for i in range(48)]
        assert sorted(client.gather(futures)) == list(range(48))
    group = zarr.open_group(str(path), mode="r")
    assert group["done"][:].all()
    for k, n in enumerate(names):
        np.testing.assert_array_equal(group[n][:], 100 * np.arange(48)[:, None] + k
                                      + np.zeros((1, 3)), err_msg=n)
    np.testing.assert_array_equal(group["sda"][:], np.arange(48))


def test_bad_calls_are_refused(tmp_path):
    path = tmp_path / "r.zarr"
    store.create_store(path, layout([grid(4)] * 3))
    with pytest.raises(ValueError, match="repeat"):
        store.write_variants(path, [1, 1], {}, {"sda": np.zeros(2)})
    with pytest.raises(ValueError, match="outside"):
        store.write_variants(path, [3], {}, {"sda": np.zeros(1)})
    with pytest.raises(ValueError, match=r"'sda' holds \(2,\) rows for 3 variants"):
        store.write_variants(path, [0, 1, 2], {}, {"sda": np.zeros(2)})
    with pytest.raises(ResultsStoreError, match=r"no array 'light_level'.*--out"):
        store.write_variants(path, [0], {"light_level": np.zeros((1, 4))}, {})
    with pytest.raises(ResultsStoreError, match="no array 'illuminance'"):
        store.write_series_block(path, [0], 0, np.zeros((1, 4, 2)), np.zeros((1, 4, 2)))
    assert not zarr.open_group(str(path), mode="r")["done"][:].any()
