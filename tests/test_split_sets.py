"""A coefficient set split across the cluster gives the set one process computes.

The run splits a set of more than ``SENSOR_PART`` sensors into an element
stage, direct and reflected parts per sensor range and an assembly
(:func:`sweep.run.split_ranges`); the reference is
:func:`kernels.coefficients.compute_coefficients` run here, in one process —
the seeded draws make the two equal bit for bit (kernels.coefficients notes).
"""

from __future__ import annotations

import hashlib
import os
import random
import threading
import time
from pathlib import Path

import numpy as np
import pytest
from conftest import write_tiny_study
from distributed.diagnostics.plugin import WorkerPlugin

from luxsweep.kernels.coefficients import SENSOR_PART, compute_coefficients
from luxsweep.sweep.cache import CoefficientCache
from luxsweep.sweep.config import load_study
from luxsweep.sweep.plan import make_plan
from luxsweep.sweep.run import run_study, split_ranges


def _fine_grid_study(folder: Path) -> Path:
    study = write_tiny_study(folder, orientations=(180.0,), climates=("coastal",),
                             transmittances=(0.7,))
    text = study.read_text().replace("grid: {height: 0.8, spacing: 1.0, margin: 0.5}",
                                     "grid: {height: 0.8, spacing: 0.12, margin: 0.06}")
    study.write_text(text)
    return study


def test_split_set_equals_the_one_process_set(tmp_path):
    study = _fine_grid_study(tmp_path)
    plan = make_plan(load_study(study), read_climates=False)
    (job,) = plan.jobs.values()
    assert job.n_sensors > 2 * SENSOR_PART  # three ranges, the last one short
    ranges = split_ranges(job)
    assert ranges[0] == (0, SENSOR_PART) and ranges[-1][1] == job.n_sensors
    summary = run_study(study, tmp_path / "r.zarr", workers=2, cache_dir=tmp_path / "cache",
                        show_progress=False)
    assert summary.ok and summary.coefficient_sets_computed == 1
    split = CoefficientCache(tmp_path / "cache").load(job.key)
    whole = compute_coefficients(job.geometry, job.sensors, job.settings)
    for name, value in whole.to_arrays().items():
        np.testing.assert_array_equal(getattr(split, name), value, err_msg=name)


def test_small_sets_and_target_error_stay_one_task(tmp_path):
    study = write_tiny_study(tmp_path, orientations=(180.0,), climates=("coastal",),
                             transmittances=(0.7,))
    (job,) = make_plan(load_study(study), read_climates=False).jobs.values()
    assert split_ranges(job) == []  # 4 sensors
    big = _fine_grid_study(tmp_path / "big")
    (job,) = make_plan(load_study(big), read_climates=False).jobs.values()
    import dataclasses

    chosen = dataclasses.replace(job, settings=dataclasses.replace(job.settings,
                                                                   target_error=0.05))
    assert split_ranges(chosen) == []


class KillEveryPartOnce(WorkerPlugin):
    """``os._exit`` the worker at a random moment after each task of a split set starts
    (once per task key, across restarts: an O_EXCL ledger file per key)."""

    PREFIXES = ("coefficient-elements-", "coefficient-direct-", "coefficient-reflected-",
                "coefficients-")

    def __init__(self, ledger: str, max_delay: float) -> None:
        self.ledger = ledger
        self.max_delay = max_delay

    def transition(self, key, start, finish, **kwargs) -> None:
        name = str(key)
        if finish != "executing" or not name.startswith(self.PREFIXES):
            return
        marker = Path(self.ledger) / hashlib.sha256(name.encode()).hexdigest()[:20]
        try:
            fd = os.open(marker, os.O_CREAT | os.O_EXCL | os.O_WRONLY)
        except FileExistsError:
            return
        os.write(fd, name.encode())
        os.close(fd)
        delay = random.Random(name).uniform(0.0, self.max_delay)
        threading.Timer(delay, os._exit, args=(1,)).start()


@pytest.mark.slow
def test_workers_killed_in_every_part_leave_the_set_unchanged(tmp_path):
    """Every task of the split set (element stage, 3 direct, 3 reflected, assembly) kills
    its worker once at a random moment. Asserts: all 8 faults happened, the run succeeds,
    and the published set equals the one-process set bit for bit."""
    import dask
    from distributed import Client, LocalCluster

    study = _fine_grid_study(tmp_path)
    (job,) = make_plan(load_study(study), read_climates=False).jobs.values()
    ledger = tmp_path / "ledger"
    ledger.mkdir()
    with dask.config.set({"distributed.scheduler.allowed-failures": 20}), \
            LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                         dashboard_address=None) as cluster, Client(cluster) as client:
        client.register_plugin(KillEveryPartOnce(str(ledger), max_delay=0.4))
        summary = run_study(study, tmp_path / "r.zarr", scheduler=cluster.scheduler_address,
                            cache_dir=tmp_path / "cache", show_progress=False)
        time.sleep(0.5)  # a last pending kill timer
    assert len(list(ledger.iterdir())) == 2 + 2 * len(split_ranges(job))
    assert summary.ok, summary.failed
    split = CoefficientCache(tmp_path / "cache").load(job.key)
    whole = compute_coefficients(job.geometry, job.sensors, job.settings)
    for name, value in whole.to_arrays().items():
        np.testing.assert_array_equal(getattr(split, name), value, err_msg=name)
