"""The engine end to end: batching, caching, resume, clusters (DESIGN.md §3).

The reference for the batched engine is each variant computed alone, straight
through the kernels (its own coefficient set, sky vectors of its one
orientation, one glazing row, the whole year in one chunk): the engine's
grouping, time blocks, dark-step skipping and store writes must not change any
result. Physics itself is checked in the kernels' tests.
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
import zarr
from conftest import TINY_COMPUTE, luxsweep_process, run_luxsweep, write_tiny_study

from luxsweep.sweep.cache import CoefficientCache
from luxsweep.sweep.config import load_study
from luxsweep.sweep.expand import expand
from luxsweep.sweep.run import run_study

SENSOR_VARS = ("daylight_factor", "daylight_factor_error", "daylight_autonomy", "udi_low",
               "udi_supplementary", "udi_autonomous", "udi_high", "direct_sun_hours")
VARIANT_VARS = ("sda", "ase", "udi_useful_mean", "daylight_factor_mean", "en17037_level")


def reference(variant) -> dict[str, np.ndarray]:
    """One variant alone through the kernels (no sweep code but the resolved study)."""
    from luxsweep.kernels import metrics as km
    from luxsweep.kernels.climate import read_climate
    from luxsweep.kernels.coefficients import (
        Settings,
        compute_coefficients,
        daylight_factor_error,
    )
    from luxsweep.kernels.geometry import parametric_room, sensor_grid
    from luxsweep.kernels.sky import overcast_sky_vector, patch_scheme, sky_vectors
    from luxsweep.kernels.sun import SunPoints, daylight_steps
    from luxsweep.kernels.timeseries import daylight_factor, illuminance

    s = variant.study
    room = s.room
    geometry = parametric_room(
        room.width, room.depth, room.height, [w.model_dump() for w in room.windows],
        room.reflectance.model_dump(), {"main": 2})
    sensors = sensor_grid(room.width, room.depth, s.grid.height, s.grid.spacing, s.grid.margin)
    settings = Settings(**TINY_COMPUTE)
    coeffs = compute_coefficients(geometry, sensors, settings)
    climate = read_climate(s.climates[s.climate])
    scheme = patch_scheme(settings.subdivision)
    sky = sky_vectors(climate, [s.orientation], scheme, SunPoints(settings.sun_spacing), 60,
                      s.ground_reflectance)
    tau = [[s.glazings["main"].transmittance]]
    total, direct = illuminance(coeffs, sky, tau)
    masks = km.StepMasks(km.occupancy_mask(sky.time, "08:00", "18:00", "weekdays", 60),
                         km.lm83_analysis_mask(sky.time, 60), daylight_steps(climate))
    params = km.MetricParams(step_hours=1.0)
    out = km.finalize(km.accumulate(None, total[0], direct[0], masks, params), params)
    df = daylight_factor(coeffs, overcast_sky_vector(scheme, s.ground_reflectance), tau)
    out["daylight_factor"] = df
    out["daylight_factor_error"] = daylight_factor_error(coeffs, s.ground_reflectance, tau)
    out["daylight_factor_mean"] = km.daylight_factor_stats(df)["daylight_factor_mean"]
    return {k: np.asarray(v).reshape(-1) for k, v in out.items()}


@pytest.fixture(scope="module")
def finished(tmp_path_factory):
    folder = tmp_path_factory.mktemp("engine")
    study = write_tiny_study(folder, orientations=(0.0, 90.0, 180.0, 270.0),
                             transmittances=(0.7, 0.5, 0.3), widths=(1.2, 1.8))
    t0 = time.perf_counter()
    summary = run_study(study, folder / "r.zarr", workers=2, cache_dir=folder / "cache",
                        show_progress=False)
    return study, folder, summary, time.perf_counter() - t0


def test_two_geometries_compute_exactly_two_coefficient_sets(finished):
    _study, folder, summary, _ = finished
    assert summary.ok and summary.total == 48 and summary.written == 48
    assert summary.coefficient_sets_computed == 2
    assert len(CoefficientCache(folder / "cache").keys()) == 2
    ds = xr.open_zarr(folder / "r.zarr")
    assert ds.done.values.all()
    assert set(ds.coords) >= {"variant_id", "orientation", "climate",
                              "glazings.main.transmittance", "room.windows.0.width", "x", "y"}
    # the sampling error is stored beside the daylight factor; its value is checked
    # against the kernel in test_batched_results_equal_each_variant_alone and the
    # estimator against seed scatter and scipy in test_sampling_error.py. Here only
    # a sanity bound of our own: positive, and a small fraction of the value itself
    err, df = ds.daylight_factor_error.values, ds.daylight_factor.values
    assert ds.daylight_factor_error.attrs["units"] == "%"
    assert np.isfinite(err).all() and (err > 0).all()
    assert np.median(err / df) < 0.1


@pytest.mark.parametrize("index", [0, 23, 30, 47])
def test_batched_results_equal_each_variant_alone(finished, index):
    study, folder, _, _ = finished
    ds = xr.open_zarr(folder / "r.zarr").isel(variant=index)
    # the store order is the plan's (each series task a contiguous range): find the
    # variant by its id
    variant = next(v for v in expand(load_study(study))
                   if v.variant_id == str(ds.variant_id.values))
    ref = reference(variant)
    for name in SENSOR_VARS + VARIANT_VARS:
        got = np.asarray(ds[name].values, dtype=np.float64).reshape(-1)
        # float32 products summed in another order (batched GEMM): relative 1e-5;
        # step counts near a threshold could flip, which would show as a larger gap
        np.testing.assert_allclose(got, ref[name], rtol=1e-5, atol=1e-6, err_msg=name)


def test_second_run_computes_nothing(finished):
    study, folder, _, _ = finished
    def chunk_files(root: Path) -> dict[Path, int]:  # "c.<...>" files ("." key separator)
        return {p: p.stat().st_mtime_ns for p in root.rglob("c.*") if p.is_file()}

    before = chunk_files(folder / "r.zarr")
    assert len(before) >= 10
    summary = run_study(study, folder / "r.zarr", workers=2, cache_dir=folder / "cache",
                        show_progress=False)
    assert summary.skipped == 48 and summary.written == 0
    assert summary.coefficient_sets_computed == 0
    after = chunk_files(folder / "r.zarr")
    assert before == after  # no chunk rewritten


def test_store_of_another_study_is_refused(finished, tmp_path):
    _, folder, _, _ = finished
    other = write_tiny_study(tmp_path, transmittances=(0.6,))
    result = run_luxsweep("run", other, "--out", folder / "r.zarr", "--cache",
                          folder / "cache", "--workers", "1")
    assert result.code == 2, result.err
    assert "different study" in result.err and "--out" in result.err
    assert "Traceback" not in result.err


def test_series_are_stored_for_occupied_steps(tmp_path):
    study = write_tiny_study(tmp_path, orientations=(180.0,), climates=("coastal",),
                             transmittances=(0.7,), extra="store_series: true\n")
    run_study(study, tmp_path / "r.zarr", workers=1, cache_dir=tmp_path / "cache",
              show_progress=False)
    ds = xr.open_zarr(tmp_path / "r.zarr")
    # hourly, 08:00-18:00 on weekdays: ten occupied steps per weekday (occupancy_mask) of
    # the reference year 2023 (kernels.climate.REFERENCE_YEAR), which has 260 weekdays
    # (numpy's business-day calendar, Monday to Friday)
    weekdays = int(np.busday_count("2023-01-01", "2024-01-01"))
    assert weekdays == 260
    assert ds.sizes["time"] == weekdays * 10
    e = ds.illuminance.isel(variant=0).values
    assert np.isfinite(e).all() and (e >= 0).all() and e.max() > 100
    assert ds.illuminance.encoding["chunks"][2] == 512
    # the stored series reproduces the stored daylight autonomy (≥ 300 lx share)
    da = (e >= 300).mean(axis=1)
    np.testing.assert_allclose(da, ds.daylight_autonomy.isel(variant=0).values, atol=1e-6)


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.mark.slow
def test_separate_scheduler_and_workers_give_identical_results(finished, tmp_path):
    study, folder, _, _ = finished
    port = _free_port()
    address = f"tcp://127.0.0.1:{port}"
    env = {**os.environ, "PYTHONUNBUFFERED": "1"}
    bindir = Path(sys.executable).parent
    procs = [subprocess.Popen([str(bindir / "dask"), "scheduler", "--host", "127.0.0.1",
                               "--port", str(port), "--dashboard-address", "127.0.0.1:0"],
                              env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                              start_new_session=True)]
    try:
        for _ in range(2):
            procs.append(subprocess.Popen(
                [str(bindir / "dask"), "worker", address, "--nthreads", "1", "--host",
                 "127.0.0.1", "--dashboard-address", "127.0.0.1:0", "--no-nanny"],
                env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                start_new_session=True))
        from distributed import Client

        with Client(address, timeout="60s") as client:
            client.wait_for_workers(2, timeout=60)
        out = tmp_path / "cluster.zarr"
        result = run_luxsweep("run", study, "--out", out, "--cache", tmp_path / "cache",
                              "--scheduler", address, timeout=300)
        assert result.code == 0, result.err
        # Sand Point ('inland') holds 2-31 January in hundreds of lux: the reader's unit
        # warning is printed once for the run, not once per worker or task
        assert result.err.count("judged day by day") == 1, result.err
    finally:
        for p in procs:
            p.terminate()
        for p in procs:
            try:
                p.wait(20)
            except subprocess.TimeoutExpired:
                p.kill()
    local = xr.open_zarr(folder / "r.zarr")
    remote = xr.open_zarr(out)
    for name in SENSOR_VARS + VARIANT_VARS + ("done",):
        np.testing.assert_array_equal(remote[name].values, local[name].values, err_msg=name)


@pytest.mark.slow
def test_killed_run_resumes_to_identical_results(finished, tmp_path):
    study, folder, _, _ = finished
    out = tmp_path / "killed.zarr"
    proc = luxsweep_process("run", study, "--out", out, "--cache", tmp_path / "cache",
                            "--workers", "2", new_session=True)
    deadline = time.monotonic() + 240
    n_done = 0
    try:
        while time.monotonic() < deadline and proc.poll() is None:
            if (out / "done" / "zarr.json").exists():
                n_done = int(np.sum(zarr.open_group(str(out), mode="r")["done"][:]))
                if 0 < n_done < 48:
                    # freeze the whole run (client and workers) where it stands: a series
                    # task writes its variants' done flags together, and the tasks of this
                    # small study take well under a second each
                    os.killpg(proc.pid, signal.SIGSTOP)
                    break
            time.sleep(0.05)
        assert proc.poll() is None and 0 < n_done < 48, "could not catch the run halfway"
        os.killpg(proc.pid, signal.SIGKILL)  # the frozen run dies where it stands
        proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.communicate()
    done_after_kill = int(np.sum(zarr.open_group(str(out), mode="r")["done"][:]))
    assert 0 < done_after_kill < 48
    result = run_luxsweep("run", study, "--out", out, "--cache", tmp_path / "cache",
                          "--workers", "2", timeout=300)
    assert result.code == 0, result.err
    assert f"{done_after_kill} already done (skipped)" in result.out
    local = xr.open_zarr(folder / "r.zarr")
    resumed = xr.open_zarr(out)
    for name in SENSOR_VARS + VARIANT_VARS + ("done",):
        np.testing.assert_array_equal(resumed[name].values, local[name].values, err_msg=name)


def test_series_task_is_bit_identical_whatever_the_callers_blas_threads(finished, tmp_path):
    """A series task run in this process with BLAS allowed 2 threads writes the
    same bytes as the run's single-threaded workers did (issue 7: a multi-threaded
    GEMM may sum in another order and change the last bit)."""
    import shutil

    from threadpoolctl import threadpool_limits

    from luxsweep.sweep.run import prepare, series_task

    study, folder, _, _ = finished
    out = tmp_path / "r.zarr"
    shutil.copytree(folder / "r.zarr", out)
    plan, results, cache, _ = prepare(study, out, folder / "cache")
    zarr.open_group(str(out), mode="r+")["done"][:] = False
    task = max(plan.tasks, key=lambda t: len(t.members))
    with threadpool_limits(limits=2, user_api="blas"):
        series_task(task, list(task.members), str(results), str(cache.root))
    got, want = zarr.open_group(str(out), mode="r"), zarr.open_group(str(folder / "r.zarr"))
    rows = [vi for vi, _, _ in task.members]
    assert got["done"][:][rows].all()
    from luxsweep.sweep.store import SENSOR_VARIABLES, VARIANT_VARIABLES

    names = [n for n in got.array_keys() if n in {**SENSOR_VARIABLES, **VARIANT_VARIABLES}]
    assert {"mean_illuminance", "continuous_daylight_autonomy"} <= set(names)  # sums of lx
    for name in names:
        np.testing.assert_array_equal(got[name][...][rows], want[name][...][rows], err_msg=name)


def test_plain_links_to_remote_schedulers_are_recognised():
    """Dask's default scheme is TCP, so a bare host:port is a plain link too."""
    from luxsweep.sweep.run import is_plain_link

    for address in ("tcp://192.0.2.10:8786", "192.0.2.10:8786", "ws://head.invalid:8786",
                    "head.invalid:8786"):
        assert is_plain_link(address), address
    for address in ("tls://192.0.2.10:8786", "wss://head.invalid:8786",
                    "tcp://127.0.0.1:8786", "localhost:8786", "inproc://192.0.2.10/1/2"):
        assert not is_plain_link(address), address


def test_damaged_cache_entry_counts_as_missing(tmp_path):
    """Before tasks are submitted, a cached entry that fails its checksum is
    reported (naming the key), removed and counted as missing, so it is recomputed
    instead of being read by a series task."""
    import warnings

    from luxsweep.sweep.run import _usable

    cache = CoefficientCache(tmp_path / "cache")
    key = "5e" * 32
    cache.save_arrays(key, {"sky_direct": np.arange(64, dtype=np.float32)}, {})
    assert _usable(cache, key)
    target = cache.root / key / "arrays" / "sky_direct.npy"
    data = bytearray(target.read_bytes())
    data[-3] ^= 0x04
    target.write_bytes(bytes(data))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        assert not _usable(cache, key)
    assert any(key in str(w.message) for w in caught)
    assert not cache.contains(key) and not (cache.root / key).exists()
    assert not _usable(cache, "6f" * 32)  # absent: missing, no warning needed
