"""Planning: coefficient keys group variants; tasks per key and climate; nothing computed."""

from __future__ import annotations

import json

import numpy as np
from conftest import write_tiny_study

from luxsweep.sweep.cache import CoefficientCache
from luxsweep.sweep.config import load_study
from luxsweep.sweep.plan import make_plan


def test_two_geometries_give_two_coefficient_sets(tmp_path):
    study = write_tiny_study(tmp_path, orientations=(0.0, 90.0, 180.0, 270.0),
                             transmittances=(0.7, 0.5, 0.3), widths=(1.2, 1.8))
    cache = CoefficientCache(tmp_path / "cache")
    plan = make_plan(load_study(study), cache)
    assert len(plan.variants) == 2 * 4 * 2 * 3
    assert len(plan.jobs) == 2  # one coefficient set per window width
    assert len(plan.tasks) == 2 * 2  # per coefficient set and climate
    for task in plan.tasks:
        assert task.orientations == (0.0, 90.0, 180.0, 270.0)
        assert len(task.rows) == 3 and len(task.members) == 12
        assert not task.shading
    for job in plan.jobs.values():
        assert not job.cached and len(job.variants) == 24
    est = plan.estimate()
    assert est["cache_misses"] == 2 and est["rays"] > 0 and est["gemm_flops"] > 0
    json.dumps(plan.to_dict())  # JSON-able
    assert not cache.root.exists()  # nothing computed, nothing written


def test_cache_hits_are_reported(tmp_path):
    study = write_tiny_study(tmp_path)
    cache = CoefficientCache(tmp_path / "cache")
    plan = make_plan(load_study(study), cache)
    key = next(iter(plan.jobs))
    cache.save_arrays(key, {"a": plan.sensors[0]}, {})
    again = make_plan(load_study(study), cache)
    assert again.estimate()["cache_hits"] == 1 and again.estimate()["cache_misses"] == 0


def test_shaded_transmittance_adds_closed_rows(tmp_path):
    study = write_tiny_study(tmp_path)
    text = study.read_text().replace("main: {transmittance: 0.7, panes: 2}",
                                     "main: {transmittance: 0.7, panes: 2, "
                                     "shaded_transmittance: 0.1}")
    study.write_text(text)
    plan = make_plan(load_study(study), None)
    task = plan.tasks[0]
    assert task.shading
    assert np.allclose(task.closed_rows().ravel(), [0.1, 0.1])
    assert np.allclose(sorted(task.open_rows().ravel()), [0.4, 0.7])


def test_everything_sent_to_workers_pickles(tmp_path):
    import pickle

    plan = make_plan(load_study(write_tiny_study(tmp_path)), None)
    for obj in (*plan.jobs.values(), *plan.tasks):
        again = pickle.loads(pickle.dumps(obj))
        assert type(again) is type(obj)
    task = pickle.loads(pickle.dumps(plan.tasks[0]))
    assert task.study == plan.tasks[0].study and task.members == plan.tasks[0].members


def test_loopback_detection_for_scheduler_addresses():
    from luxsweep.sweep.run import is_loopback

    assert is_loopback("tcp://127.0.0.1:8786") and is_loopback("tcp://localhost:1")
    assert is_loopback("tcp://[::1]:8786")
    assert not is_loopback("tcp://10.1.2.3:8786") and not is_loopback("tcp://example.org:1")
