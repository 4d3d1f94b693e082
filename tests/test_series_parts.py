"""The series stage of one coefficient set split into parts of whole spaces.

A set too large for one series task (its rows above a share of ``compute.memory_limit``)
runs as parts, each holding the rows of some whole spaces, and a join that forms the
building's results. The reference is the unsplit task of the same study: the
grid-level couplings (the IES LM-83-12 shading state, the EN 17037 share of the grid,
the lighting control point) never cross two spaces, so the split must give the same
store: bit for bit in every count, level, share, series and glare value; the three
per-sensor lux sums (cDA, mean illuminance, light exposure) to float32 rounding, as a
BLAS matrix-vector sum rounds a row differently at another position in the matrix.
Real coefficients and a real TMY3 year (pvlib's Greensboro file);
nothing is mocked.
"""

from __future__ import annotations

import dataclasses
import itertools
import json
import shutil
import warnings

import numpy as np
import pytest
from conftest import TINY_COMPUTE, TMY3_GREENSBORO, run_plan_in_process, store_arrays

from luxsweep.sweep import run as sweep_run
from luxsweep.sweep.plan import set_bytes_per_sensor
from luxsweep.sweep.spaces import single_space

STUDY = """\
name: larchmere-annexe
climates:
  coastal: climates/coastal.csv
spaces:
  - name: east
    origin: [0.0, 0.0, 0.0]
    width: 4.0
    depth: 3.0
    height: 2.7
    windows:
      - {{wall: front, width: 2.0, sill: 0.9, head: 2.1, glazing: main}}
    lighting: {{control: on_off, control_point: [0.6, 2.4]}}
  - name: middle
    origin: [4.0, 0.0, 0.0]
    width: 3.0
    depth: 3.0
    height: 2.7
    windows:
      - {{wall: front, width: 1.2, sill: 0.9, head: 2.1, glazing: main}}
  - name: west
    origin: [7.0, 0.0, 0.0]
    width: 3.5
    depth: 4.0
    height: 2.7
    windows:
      - {{wall: front, width: 2.5, sill: 0.6, head: 2.4, glazing: main}}
views:
  - {{name: east-desk, space: east, x: 2.0, y: 1.5}}
  - {{name: west-desk, space: west, x: 8.5, y: 2.0, direction: 90}}
glazings:
  main: {{transmittance: 0.7, panes: 2, shaded_transmittance: 0.15}}
grid: {{height: 0.8, spacing: 1.0, margin: 0.5}}
occupancy: {{start: "07:00", end: "19:00", days: weekdays}}
timestep: 60
compute: {compute}
lighting: {{power_density: 8.0, target: 300, control: dimming, min_power: 0.2}}
metrics: [daylight_factor, daylight_autonomy, udi, sda_ase, en17037, lighting, glare,
          view_out]
store_series: true
vary:
  glazings.main.transmittance: [0.7, 0.4]
  orientation: [180, 250]
"""


LUX_SUMS = ("continuous_daylight_autonomy", "mean_illuminance", "light_exposure")
"""Per-sensor results summed in float32 by BLAS over the occupied steps."""


def assert_same_results(store, reference):
    """Both stores hold the same arrays; equal values (NaN equal to NaN) but for the lux
    sums, equal to float32 rounding of a sum of ~3,000 terms (relative 1e-5)."""
    got, want = store_arrays(store), store_arrays(reference)
    assert sorted(got) == sorted(want)
    for name, expected in want.items():
        assert got[name].shape == expected.shape and got[name].dtype == expected.dtype, name
        if name in LUX_SUMS:
            np.testing.assert_allclose(got[name], expected, rtol=1e-5, err_msg=name)
        else:
            np.testing.assert_array_equal(got[name], expected, err_msg=name)


def _write_study(folder):
    (folder / "climates").mkdir(parents=True)
    shutil.copyfile(TMY3_GREENSBORO, folder / "climates" / "coastal.csv")
    path = folder / "study.yaml"
    path.write_text(STUDY.format(compute=json.dumps(TINY_COMPUTE)))
    return path


def _plan(study, cache):
    from luxsweep.sweep.config import load_study
    from luxsweep.sweep.plan import make_plan

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return make_plan(load_study(study), cache)


@pytest.fixture(scope="module")
def whole(tmp_path_factory):
    """The study run unsplit in this process: (study, cache, plan, store)."""
    from luxsweep.sweep.cache import CoefficientCache

    folder = tmp_path_factory.mktemp("parts")
    study = _write_study(folder / "study")
    cache = CoefficientCache(folder / "cache")
    plan = _plan(study, cache)
    (task,) = plan.tasks
    assert sweep_run.series_ranges(task, plan.jobs[task.key]) == []  # small: one task
    results = folder / "whole.zarr"
    run_plan_in_process(plan, results, cache.root)
    return study, cache, plan, results


def test_parts_hold_whole_spaces_within_the_budget(whole, monkeypatch):
    _, _, plan, _ = whole
    (task,) = plan.tasks
    job = plan.jobs[task.key]
    own = task.layout.sensor_space
    sizes = np.bincount(own).tolist()
    per_sensor = set_bytes_per_sensor(job.settings, len(task.glazing_sets))
    limit = job.settings.memory_limit * 2**30

    def budget(sensors):  # the share of memory_limit that holds `sensors` rows
        monkeypatch.setattr(sweep_run, "SERIES_SET_SHARE", sensors * per_sensor / limit)

    # room for the two first spaces together, not three: [east + middle], [west]
    budget(sizes[0] + sizes[1])
    cut = sizes[0] + sizes[1]
    assert sweep_run.series_ranges(task, job) == [(0, cut), (cut, own.size)]
    # room for less than any space: one space per part, never a space cut in two
    budget(1)
    edges = np.cumsum([0, *sizes]).tolist()
    assert sweep_run.series_ranges(task, job) == list(itertools.pairwise(edges))
    # one space is never split, whatever the budget
    one = dataclasses.replace(task, layout=single_space(own.size, 10.0))
    assert sweep_run.series_ranges(one, job) == []


def test_a_part_reads_only_its_rows(whole):
    _, cache, plan, _ = whole
    (task,) = plan.tasks
    full = cache.load(task.key)
    first, stop = 5, 17
    part = cache.load(task.key, (first, stop))
    assert part.n_sensors == stop - first
    for name in ("sky_direct", "sky_reflected", "sun_direct", "sun_reflected",
                 "overcast_error"):
        got, want = getattr(part, name), getattr(full, name)[:, first:stop]
        assert not isinstance(got, np.memmap) and got.flags.c_contiguous
        np.testing.assert_array_equal(got, want)
    np.testing.assert_array_equal(part.sensors, full.sensors[first:stop])


@pytest.mark.parametrize("budget", ["one space per part", "two parts"])
def test_split_task_writes_the_unsplit_store(whole, tmp_path, monkeypatch, budget):
    from luxsweep.sweep.cache import CoefficientCache

    study, cache, plan, reference = whole
    (task,) = plan.tasks
    job = plan.jobs[task.key]
    per_sensor = set_bytes_per_sensor(job.settings, len(task.glazing_sets))
    east_and_middle = int(np.count_nonzero(task.layout.sensor_space < 2))
    sensors = 1 if budget == "one space per part" else east_and_middle
    monkeypatch.setattr(sweep_run, "SERIES_SET_SHARE",
                        sensors * per_sensor / (job.settings.memory_limit * 2**30))
    assert len(sweep_run.series_ranges(task, job)) == (3 if sensors == 1 else 2)
    # a second cache holding the same set (copied), so the parts read it from disk
    shutil.copytree(cache.root, tmp_path / "cache")
    split_cache = CoefficientCache(tmp_path / "cache")
    results = tmp_path / "split.zarr"
    run_plan_in_process(_plan(study, split_cache), results, split_cache.root)
    # the same arrays, every value equal (NaN where NaN): per-sensor results, the stored
    # series, the spaces' and the building's results, lighting, glare at the views
    assert_same_results(results, reference)


@pytest.mark.parametrize("shared_disk", [True, False])
def test_split_task_on_a_cluster(whole, tmp_path, monkeypatch, shared_disk):
    # the parts and the join as Dask tasks on two local workers: with a shared disk the
    # parts read their rows from the cache or are cut where the new set is held; without
    # one the client keeps the cache and writes the store. The same store as unsplit.
    study, _, plan, reference = whole
    (task,) = plan.tasks
    job = plan.jobs[task.key]
    per_sensor = set_bytes_per_sensor(job.settings, len(task.glazing_sets))
    monkeypatch.setattr(sweep_run, "SERIES_SET_SHARE",
                        per_sensor / (job.settings.memory_limit * 2**30))
    split = []
    ranges = sweep_run.series_ranges
    monkeypatch.setattr(sweep_run, "series_ranges",
                        lambda t, j: split.append(ranges(t, j)) or split[-1])
    results = tmp_path / "cluster.zarr"
    summary = sweep_run.run_study(study, results, workers=2, cache_dir=tmp_path / "cache",
                                  show_progress=False, no_shared_disk=not shared_disk)
    assert summary.ok and summary.written == summary.total > 0
    assert split and all(len(r) == 3 for r in split)  # the run split the task
    assert_same_results(results, reference)
