"""The results store (CONTRACT.md §3): layout, xarray compatibility, chunk ownership."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr
import zarr

from luxsweep.sweep import store
from luxsweep.sweep.errors import ResultsStoreError


def layout(sensors=None, times=None, tasks=None, **attrs) -> store.StoreLayout:
    grid = np.column_stack([np.arange(4.0), np.zeros(4), np.full(4, 0.8)])
    sensors = sensors if sensors is not None else [grid, grid, grid]
    n = len(sensors)
    return store.StoreLayout(
        variant_ids=[f"{i:016x}" for i in range(n)],
        labels=[f"orientation={90 * i}" for i in range(n)],
        axes={"orientation": [90.0 * i for i in range(n)],
              "climate": ["coastal"] * n,
              "glazings.main.transmittance": [0.7] * n},
        sensors=sensors,
        sensor_variables=["daylight_factor", "daylight_autonomy", "udi_low"],
        variant_variables=["sda", "ase", "en17037_level"],
        times=times,
        series_chunk=3,
        attrs={"study_hash": "abc", "study": "name: x\n", "axes": ["orientation", "climate"],
               **attrs},
        tasks=tasks,
    )


def test_new_store_opens_with_xarray(tmp_path):
    path = tmp_path / "r.zarr"
    store.create_store(path, layout())
    store.consolidate(path)
    ds = xr.open_zarr(path, consolidated=False)
    # CONTRACT.md §3: every store has a `space` dimension (one space `room` by default)
    assert dict(ds.sizes) == {"variant": 3, "sensor": 4, "space": 1}
    assert [str(s) for s in ds.space.values] == ["room"]
    assert [str(s) for s in ds.sensor_space.values] == ["room"] * 4
    assert list(ds.variant_id.values) == [f"{i:016x}" for i in range(3)]
    assert ds["glazings.main.transmittance"].dims == ("variant",)
    assert ds.x.dims == ("sensor",) and ds.x.attrs["units"] == "m"
    assert ds.attrs["study_hash"] == "abc" and ds.attrs["luxsweep_version"]
    assert not ds.done.values.any()
    assert np.isnan(ds.sda.values).all()
    assert zarr.open_group(str(path)).metadata.zarr_format == 3


def test_write_variant_fills_its_own_chunks_done_last(tmp_path):
    path = tmp_path / "r.zarr"
    store.create_store(path, layout())
    store.write_variant(path, 1, {"daylight_factor": np.array([1, 2, 3, 4], "f4")},
                        {"sda": 55.0, "en17037_level": 2})
    ds = xr.open_zarr(path, consolidated=False)
    assert ds.done.values.tolist() == [False, True, False]
    assert ds.daylight_factor.values[1].tolist() == [1, 2, 3, 4]
    assert np.isnan(ds.daylight_factor.values[[0, 2]]).all()
    assert float(ds.sda.values[1]) == 55.0 and int(ds.en17037_level.values[1]) == 2
    # without task ranges every variant is its own task: one variant per chunk
    group = zarr.open_group(str(path))
    for name in ("daylight_factor", "sda", "done"):
        assert group[name].chunks[0] == 1


def test_different_grids_give_padded_variant_sensor_coordinates(tmp_path):
    small = np.column_stack([np.arange(2.0), np.zeros(2), np.zeros(2)])
    large = np.column_stack([np.arange(5.0), np.ones(5), np.zeros(5)])
    path = tmp_path / "r.zarr"
    store.create_store(path, layout(sensors=[small, large]))
    store.write_variant(path, 0, {"daylight_factor": np.array([7, 8], "f4")}, {})
    ds = xr.open_zarr(path, consolidated=False)
    assert ds.x.dims == ("variant", "sensor") and ds.sizes["sensor"] == 5
    assert np.isnan(ds.x.values[0, 2:]).all() and ds.x.values[1].tolist() == [0, 1, 2, 3, 4]
    assert ds.n_sensors.values.tolist() == [2, 5]
    assert np.isnan(ds.daylight_factor.values[0, 2:]).all()


def test_series_chunked_along_time(tmp_path):
    times = pd.date_range("2023-01-02 09:00", periods=7, freq="h")
    path = tmp_path / "r.zarr"
    store.create_store(path, layout(times=times))
    block = np.arange(12, dtype="f4").reshape(4, 3)
    store.write_series(path, 2, 3, block, block * 0)
    ds = xr.open_zarr(path, consolidated=False)
    assert ds.illuminance.dims == ("variant", "sensor", "time")
    assert ds.illuminance.encoding["chunks"] == (1, 4, 3)
    assert pd.DatetimeIndex(ds.time.values).equals(times)
    assert np.array_equal(ds.illuminance.values[2, :, 3:6], block)


def test_existing_store_of_another_study_is_refused(tmp_path):
    path = tmp_path / "r.zarr"
    store.create_store(path, layout())
    assert store.open_existing(path, "abc").tolist() == [False] * 3
    with pytest.raises(ResultsStoreError, match="--out"):
        store.open_existing(path, "another-hash")
    with pytest.raises(ResultsStoreError, match="already exists"):
        store.create_store(path, layout())


def test_not_a_store_is_refused(tmp_path):
    (tmp_path / "junk").mkdir()
    with pytest.raises(ResultsStoreError, match="not a luxsweep results store"):
        store.open_existing(tmp_path / "junk", "abc")


def test_misaligned_chunks_are_refused(tmp_path):
    """Task ranges that do not begin and end on chunk boundaries would make two tasks
    write one chunk: refused before anything is written (ranges on boundaries, the
    last one ending in the short edge chunk, pass)."""
    path = tmp_path / "r.zarr"
    ds = xr.Dataset({"sda": (("variant",), np.zeros(5, "f4"))})
    ds.to_zarr(path, zarr_format=3, encoding={"sda": {"chunks": (2,)}}, consolidated=False)
    store.check_alignment(path, tasks=[(0, 2), (2, 4), (4, 5)])
    with pytest.raises(ResultsStoreError, match=r"\(1, 4\).*chunk boundaries"):
        store.check_alignment(path, tasks=[(0, 1), (1, 4), (4, 5)])


def test_chunks_follow_task_ranges(tmp_path):
    """Tasks of 4, 4 and 2 variants: blocks of 4 (the gcd of the starts 4 and 8), the
    last task in the short edge chunk; every array's chunks line up with the tasks."""
    grid = np.column_stack([np.arange(4.0), np.zeros(4), np.full(4, 0.8)])
    tasks = [(0, 4), (4, 8), (8, 10)]
    path = tmp_path / "r.zarr"
    store.create_store(path, layout(sensors=[grid] * 10, tasks=tasks,
                                    times=pd.date_range("2023-01-02 09:00", periods=7,
                                                        freq="h")))
    group = zarr.open_group(str(path))
    assert group.attrs["variant_block"] == 4 and group.attrs["store_layout"] == store.LAYOUT
    for name in ("daylight_factor", "sda", "done", "illuminance"):
        assert group[name].chunks[0] == 4, name
    assert group["illuminance"].chunks == (4, 4, 3)
    store.check_alignment(path, series_chunk=3, tasks=tasks)
    with pytest.raises(ResultsStoreError, match="chunk boundaries"):
        store.check_alignment(path, tasks=[(0, 2), (2, 10)])


def test_task_block_and_chunk_size_rules():
    # gcd of the task starts; a single task is one block
    assert store.task_block([(0, 360), (360, 720), (720, 1080)], 1080) == 360
    assert store.task_block([(6, 10), (0, 6)], 10) == 6
    assert store.task_block([(0, 6), (6, 10), (10, 12)], 12) == 2
    assert store.task_block([(0, 7)], 7) == 7
    with pytest.raises(ResultsStoreError, match="tile"):
        store.task_block([(0, 4), (5, 8)], 8)  # a gap
    with pytest.raises(ResultsStoreError, match="tile"):
        store.task_block([(0, 4), (4, 8)], 9)  # does not reach the end
    # a block too large for CHUNK_BYTES is split by its largest divisor that fits
    row = store.CHUNK_BYTES // 100
    assert store._variant_chunk(360, row) == 90
    assert store._variant_chunk(360, 4) == 360
    assert store._variant_chunk(101, row) == 1  # a prime block: one variant per chunk


def test_file_count_grows_with_tasks_not_variants(tmp_path):
    """Eight tasks of 5 and eight tasks of 60 variants, every variant written by its
    task: the same number of files (one chunk per task and array), although the
    second store holds twelve times the variants."""
    grid = np.column_stack([np.arange(4.0), np.zeros(4), np.full(4, 0.8)])
    counts = {}
    for size in (5, 60):
        n = 8 * size
        tasks = [(k * size, (k + 1) * size) for k in range(8)]
        path = tmp_path / f"r{size}.zarr"
        store.create_store(path, layout(sensors=[grid] * n, tasks=tasks))
        rng = np.random.default_rng(size)
        for a, b in tasks:
            store.write_variants(
                path, list(range(a, b)),
                {name: rng.random((b - a, 4), dtype=np.float32)
                 for name in ("daylight_factor", "daylight_autonomy", "udi_low")},
                {"sda": rng.random(b - a), "ase": rng.random(b - a),
                 "en17037_level": np.ones(b - a)})
        store.consolidate(path)
        assert xr.open_zarr(path).done.values.all()
        counts[size] = sum(1 for p in path.rglob("*") if p.is_file())
    assert counts[5] == counts[60], counts
    # 7 result arrays x 8 tasks, plus metadata and coordinates
    assert 7 * 8 <= counts[60] < 7 * 8 + 40, counts


def test_store_of_an_earlier_layout_is_not_resumed(tmp_path):
    """A store written one variant per chunk (no ``store_layout`` attribute) is
    refused for a run, with a message saying how to start fresh."""
    path = tmp_path / "r.zarr"
    store.create_store(path, layout())
    group = zarr.open_group(str(path), mode="r+")
    del group.attrs["store_layout"]
    with pytest.raises(ResultsStoreError, match=r"earlier luxsweep.*--out"):
        store.open_existing(path, "abc")


def test_store_appears_whole_and_leaves_nothing_beside_it(tmp_path):
    """The store is built beside its final name and moved into place in one rename,
    so nothing else is left in the folder (issue 7, killed while creating)."""
    path = tmp_path / "r.zarr"
    store.create_store(path, layout())
    assert sorted(p.name for p in tmp_path.iterdir()) == ["r.zarr"]
    assert store.open_existing(path, "abc", ["daylight_factor", "sda"]).tolist() == [False] * 3


def test_unfinished_creations_are_removed(tmp_path):
    path = tmp_path / "r.zarr"
    left = tmp_path / f"r.zarr{store.CREATING}0123456789ab"
    (left / "sda").mkdir(parents=True)
    other = tmp_path / "rr.zarr.creating-keep"  # another store's name: not ours
    other.mkdir()
    assert store.remove_unfinished(path) == [left]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["rr.zarr.creating-keep"]


def test_store_missing_an_array_is_refused_as_damaged(tmp_path):
    """A store whose metadata lacks an array the run writes is refused with a
    message that says how to start fresh (not accepted and then failing per task)."""
    import shutil

    path = tmp_path / "r.zarr"
    store.create_store(path, layout())
    shutil.rmtree(path / "daylight_factor")
    with pytest.raises(ResultsStoreError, match=r"damaged.*daylight_factor.*delete"):
        store.open_existing(path, "abc", ["daylight_factor", "sda"])
