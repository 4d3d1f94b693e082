"""State the engine owns for the kernels: the series task's workspace, the worker's
climate and sun-position cache, and the stage timer of a series task."""

from __future__ import annotations

import time
import warnings

import numpy as np
import pytest
from conftest import TMY3_SAND_POINT

from luxsweep.kernels.climate import read_climate
from luxsweep.kernels.sun import daylight_steps, resample, solar_position, step_times
from luxsweep.sweep.run import ClimateSteps, Workspace, _StageTimer


def test_workspace_reuses_a_name_and_keeps_names_apart():
    ws = Workspace()
    a = ws.array("sky", (3, 100, 50))
    a[:] = 1.0
    b = ws.array("total", (3, 100, 50))
    b[:] = 2.0
    assert np.all(a == 1.0)  # another name never shares memory
    again = ws.array("sky", (2, 100, 40))  # the next block of the same name: reused
    assert np.shares_memory(again, a) and again.flags.c_contiguous and again.dtype == np.float32
    bigger = ws.array("sky", (3, 100, 200))  # larger than the buffer: fresh memory
    assert not np.shares_memory(bigger, a) and bigger.shape == (3, 100, 200)


def test_climate_steps_are_those_of_the_kernels_and_kept_once(tmp_path):
    cache = ClimateSteps(max_entries=1)
    climate, altitude, azimuth, daylight = cache.get(TMY3_SAND_POINT, 15)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        raw = read_climate(TMY3_SAND_POINT)
    direct = resample(raw, 15)  # what a caller without the cache computes
    for name in ("ghi", "dni", "dhi"):
        np.testing.assert_array_equal(getattr(climate, name), getattr(direct, name))
    _, sun_times = step_times(raw, 15)
    want_alt, want_az = solar_position(sun_times, raw.site)  # pvlib's SPA, no memo
    np.testing.assert_array_equal(altitude, want_alt)
    np.testing.assert_array_equal(azimuth, want_az)
    # the EN 17037 daylight steps from the kept sun equal the kernel's own computation
    np.testing.assert_array_equal(daylight, daylight_steps(direct))
    assert cache.get(TMY3_SAND_POINT, 15)[1] is altitude  # kept: the same entry
    assert len(cache) == 1 and len(cache.ephemeris) > 0
    cache.get(TMY3_SAND_POINT, 30)  # bounded: the oldest entry goes
    assert len(cache) == 1 and cache.get(TMY3_SAND_POINT, 30)[0].interval == 30
    cache.clear(ephemeris=False)
    assert len(cache) == 0 and len(cache.ephemeris) > 0
    cache.clear()
    assert len(cache.ephemeris) == 0


def test_stage_timer_counts_each_block_once_even_on_error():
    timer = _StageTimer()
    with timer("sky"):
        time.sleep(0.02)
    with pytest.raises(RuntimeError), timer("metrics"):
        time.sleep(0.01)
        raise RuntimeError("stage failed")
    assert set(timer.seconds) == set(_StageTimer.STAGES)
    assert timer.seconds["sky"] >= 0.02 and timer.seconds["metrics"] >= 0.01
    assert timer.seconds["load"] == 0.0
    with pytest.raises(KeyError):  # an unknown stage is refused, not silently added
        with timer("shading"):
            pass
