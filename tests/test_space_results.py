"""Results per space and for the building (CONTRACT.md §3; kernels/metrics.py, sweep store,
rank and report).

Definitions checked, each named beside its assertion:
- a space is its own grid: its sDA, ASE (IES LM-83-12), LM-83 shading group and EN 17037
  reference plane (EN 17037:2018) are those of its sensors alone;
- the building's sDA and ASE pool the sensors of all spaces (IES LM-83-12 takes the whole
  analysis area), its means are weighted by grid area, its EN 17037 level is the lowest
  space's (CONTRACT.md §3);
- a study of one space keeps every result it had before spaces existed.
The building in the store tests is a real one (kernels.geometry.parametric_building, real
coefficients, a real TMY3 year); nothing is mocked.
"""

from __future__ import annotations

import dataclasses
import textwrap
from pathlib import Path

import numpy as np
import pytest
import xarray as xr

from luxsweep.kernels.metrics import (
    MetricParams,
    StepMasks,
    accumulate,
    accumulate_dark,
    area_weighted,
    finalize,
)

P = MetricParams()
GRID_RESULTS = ("sda", "ase", "udi_useful_mean", "daylight_autonomy_mean", "shading_hours",
                "en17037_level")


def _masks(n, seed=3):
    rng = np.random.default_rng(seed)
    return StepMasks(rng.random(n) < 0.5, rng.random(n) < 0.55, rng.random(n) < 0.6)


def _year(seed=5, batch=(2,), n_sensors=30, n_steps=600):
    """Integer lux (float sums exact in any order) with sun on a third of the values."""
    rng = np.random.default_rng(seed)
    total = np.floor(rng.lognormal(6.0, 1.2, size=(*batch, n_sensors, n_steps)))
    total = total.astype(np.float32)
    direct = np.where(rng.random(total.shape) < 0.35, total, 0).astype(np.float32)
    shaded = np.floor(total * 0.3).astype(np.float32)
    return total, direct, shaded


# --------------------------------------------------------------------------- kernel


@pytest.mark.parametrize("order", ["runs", "interleaved"])
@pytest.mark.parametrize("scaled", [False, True])
def test_each_space_is_its_own_grid(order, scaled):
    # Definition (IES LM-83-12; EN 17037:2018): the sDA, ASE, shading rule and EN 17037 plane
    # of a space are those of its own sensors. Folding the building with `space` must give,
    # for each space, exactly what folding that space's sensors alone gives (integer counts:
    # exact; float means over the same values in the same order: exact).
    total, direct, shaded = _year()
    n = total.shape[-2]
    space = np.repeat([0, 1, 2], [12, 10, 8]) if order == "runs" else np.arange(n) % 3
    m = _masks(total.shape[-1])
    p = MetricParams(ase_hours_limit=20.0)
    tau = np.array([0.7, 0.4], np.float32)
    kw = (dict(transmittance=tau, shaded_transmittance=0.3 * tau) if scaled
          else dict(total_shaded=shaded))
    area = np.array([30.0, 20.0, 12.0])
    got = finalize(accumulate(None, total, direct, m, p, space=space, **kw), p, space, area)
    for k in range(3):
        alone = finalize(accumulate(None, total[..., space == k, :], direct[..., space == k, :],
                                    m, p, **({**kw, "total_shaded": shaded[..., space == k, :]}
                                             if not scaled else kw)), p)
        for name in GRID_RESULTS:
            np.testing.assert_array_equal(got[f"space_{name}"][..., k], alone[name],
                                          err_msg=f"{name}, space {k}")
        np.testing.assert_array_equal(got["sda_fraction"][..., space == k],
                                      alone["sda_fraction"], err_msg="sda_fraction")
    # the case exercises the rules (not all zero): shading closes, ASE and levels vary
    assert got["space_shading_hours"].min() > 0 and got["space_ase"].max() > 0
    # building: sDA and ASE pooled over every sensor (IES LM-83-12: one analysis area) —
    # recounted here from the per-sensor results
    sda_ok = got["sda_fraction"] >= 0.5
    np.testing.assert_array_equal(got["sda"], 100.0 * sda_ok.mean(axis=-1))
    np.testing.assert_array_equal(got["ase"], 100.0 * (got["ase_hours"] > 20.0).mean(axis=-1))
    # means weighted by grid area (CONTRACT.md §3), the level of the lowest space
    w = area / area.sum()
    useful = got["udi_supplementary"] + got["udi_autonomous"]
    want = sum(w[k] * useful[..., space == k].mean(axis=-1) for k in range(3))
    np.testing.assert_allclose(got["udi_useful_mean"], want, rtol=1e-14)
    np.testing.assert_array_equal(got["en17037_level"], got["space_en17037_level"].min(-1))


def test_night_steps_count_per_space_as_zero_illuminance():
    # accumulate_dark is accumulate with zero illuminance (module contract), space axis too
    total, direct, _ = _year(n_steps=50)
    space = np.repeat([0, 1], [18, 12])
    m = _masks(50)
    lit = accumulate(None, total, direct, m, P, space=space)
    a = accumulate_dark(lit, _masks(20, seed=9), P, (2,), 30, n_spaces=2)
    zeros = np.zeros((2, 30, 20), np.float32)
    b = accumulate(lit, zeros, zeros, _masks(20, seed=9), P, space=space)
    for f in dataclasses.fields(a):
        np.testing.assert_array_equal(getattr(a, f.name), getattr(b, f.name), err_msg=f.name)


def test_one_space_gives_the_results_of_a_grid_without_spaces():
    # A room study is a building of one space (CONTRACT.md §1b): every result it had before
    # spaces existed is unchanged bit for bit, and its space_* results equal them.
    total, direct, shaded = _year(batch=(3,))
    m = _masks(total.shape[-1])
    one = np.zeros(total.shape[-2], np.int32)
    plain = finalize(accumulate(None, total, direct, m, P, shaded), P)
    spaced = finalize(accumulate(None, total, direct, m, P, shaded, space=one), P, one,
                      np.array([np.nan]))  # unknown area: one space needs none
    assert set(spaced) == set(plain) | {f"space_{n}" for n in GRID_RESULTS}
    for name, value in plain.items():
        assert spaced[name].dtype == value.dtype, name
        np.testing.assert_array_equal(spaced[name], value, err_msg=name)
        if name in GRID_RESULTS:
            np.testing.assert_array_equal(spaced[f"space_{name}"][..., 0], value, err_msg=name)


def test_building_hand_example_pooled_weighted_lowest():
    # Two spaces, a whole year of steady light, hand-computable:
    # A: 6 sensors at 1000 lx, B: 4 sensors at 150 lx, every step occupied, analysed, daylit.
    # sDA_300/50% (IES LM-83-12): A 100 %, B 0 %; building pooled over sensors 6/10 = 60 %
    # (area weighting with A 10 m², B 30 m² would give 25 %: it must not).
    # UDI useful 100–3000 lx (Nabil & Mardaljevic 2005): A 1, B 1. DA 300 lx (Reinhart &
    # Walkenhorst 2001): A 1, B 0 → building 10/40·1 + 30/40·0 = 0.25 (area weighted).
    # EN 17037:2018 Table A.1: A meets 750/500 lx (level 3); B meets 100 lx over the whole
    # plane but not 300 lx target → level 0 at B (target 300 lx for minimum level) → building 0.
    e = np.concatenate([np.full((6, 100), 1000.0), np.full((4, 100), 150.0)]).astype(np.float32)
    space = np.repeat([0, 1], [6, 4])
    m = StepMasks(np.ones(100, bool), np.ones(100, bool), np.ones(100, bool))
    out = finalize(accumulate(None, e, np.zeros_like(e), m, P, space=space), P, space,
                   np.array([10.0, 30.0]))
    np.testing.assert_array_equal(out["space_sda"], [100.0, 0.0])
    assert out["sda"] == 60.0
    np.testing.assert_array_equal(out["space_daylight_autonomy_mean"], [1.0, 0.0])
    assert out["daylight_autonomy_mean"] == 0.25
    np.testing.assert_array_equal(out["space_udi_useful_mean"], [1.0, 1.0])
    assert out["udi_useful_mean"] == 1.0
    np.testing.assert_array_equal(out["space_en17037_level"], [3, 0])
    assert out["en17037_level"] == 0


def test_area_weights_need_areas_for_several_spaces():
    # one space: its value whatever the area (w = 1); several: each needs a positive area
    np.testing.assert_array_equal(area_weighted(np.array([[0.3]]), np.array([np.nan])), [0.3])
    with pytest.raises(ValueError, match="positive grid area"):
        area_weighted(np.array([0.3, 0.5]), np.array([1.0, np.nan]))
    # grid-area weighting (CONTRACT.md §3): 3·0.2 + 1·0.6 over 4 m² = 0.3
    assert area_weighted(np.array([0.2, 0.6]), np.array([3.0, 1.0])) == pytest.approx(0.3,
                                                                                      rel=1e-15)
