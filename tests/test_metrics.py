"""Annual daylight metrics on small hand-computable series (kernels/metrics.py).

Each expected value is worked out by hand from the metric's published
definition, named beside the assertion. Counts are exact integers, so most
checks are exact; float results carry the tolerance stated beside them.
"""

from __future__ import annotations

import dataclasses
import itertools
from pathlib import Path

import numpy as np
import pandas as pd
import pvlib
import pytest

from luxsweep.kernels.metrics import (
    MetricParams,
    StepMasks,
    accumulate,
    accumulate_dark,
    daylight_factor_stats,
    en17037_time_fractions,
    finalize,
    lm83_analysis_mask,
    merge_counts,
    occupancy_mask,
)

P = MetricParams()


def masks(n: int, occupied=True, analysis=True, daylight=True) -> StepMasks:
    def full(v):
        return np.full(n, v, bool) if isinstance(v, bool) else np.asarray(v, bool)

    return StepMasks(occupied=full(occupied), analysis=full(analysis), daylight=full(daylight))


def run(total, direct=None, m=None, params=P, shaded=None):
    total = np.asarray(total, np.float32)
    direct = np.zeros_like(total) if direct is None else np.asarray(direct, np.float32)
    m = masks(total.shape[-1]) if m is None else m
    return finalize(accumulate(None, total, direct, m, params, shaded), params)


# --------------------------------------------------------------------------- time masks


def test_occupancy_mask_hour_ending_weekdays():
    # Hour-ending stamps (DEVELOPERS.md; EPW/TMY3 convention, common practice):
    # 08:00–18:00 covers the steps stamped 09:00 … 18:00 → 10 per weekday.
    t = pd.date_range("2023-01-02 01:00", periods=7 * 24, freq="h")  # Mon 2 Jan 2023
    m = occupancy_mask(t, "08:00", "18:00", "weekdays")
    assert m.sum() == 50
    stamps = t[m]
    assert stamps[0] == pd.Timestamp("2023-01-02 09:00")
    assert stamps[9] == pd.Timestamp("2023-01-02 18:00")
    assert not m[t.get_loc(pd.Timestamp("2023-01-02 08:00"))]  # covers 07:00–08:00
    assert set(stamps.day_of_week) == {0, 1, 2, 3, 4}


def test_occupancy_mask_midnight_stamp_belongs_to_previous_day_and_all_days():
    # The step stamped Saturday 00:00 covers Friday 23:00–24:00 (hour-ending stamps).
    t = pd.date_range("2023-01-06 01:00", periods=48, freq="h")  # Fri 01:00 → Sun 00:00
    m = occupancy_mask(t, "20:00", "24:00", "weekdays")
    assert list(t[m]) == [pd.Timestamp(f"2023-01-06 {h}:00") for h in (21, 22, 23)] + [
        pd.Timestamp("2023-01-07 00:00")
    ]
    assert occupancy_mask(t, "20:00", "24:00", "all").sum() == 8


def test_occupancy_mask_sub_hourly_and_tz_aware():
    # 30-min steps: 08:00–18:00 holds 20 whole steps per day; an aware index is read
    # on its own wall clock (local standard time).
    t = pd.date_range("2023-03-01 00:30", periods=48, freq="30min", tz="Etc/GMT+5")
    m = occupancy_mask(t, "08:00", "18:00", "all", step_minutes=30)
    assert m.sum() == 20
    assert t[m][0].strftime("%H:%M") == "08:30" and t[m][-1].strftime("%H:%M") == "18:00"
    # A partly occupied step does not count: 08:15 start excludes the 08:00–08:30 step.
    assert occupancy_mask(t, "08:15", "18:00", "all", step_minutes=30).sum() == 19


def test_lm83_analysis_mask_counts_3650_hours():
    # IES LM-83-12: 08:00–18:00 every day → 10 h × 365 d = 3650 analysis hours.
    t = pd.date_range("2023-01-01 01:00", periods=8760, freq="h")
    assert lm83_analysis_mask(t).sum() == 3650


@pytest.mark.parametrize("start,end", [("8:00", "25:00"), ("18:00", "08:00"), ("8h", "18:00")])
def test_occupancy_mask_rejects_bad_times(start, end):
    t = pd.date_range("2023-01-01 01:00", periods=24, freq="h")
    with pytest.raises(ValueError, match=r"start|HH:MM"):
        occupancy_mask(t, start, end, "all")


# --------------------------------------------------------------------------- DA, cDA, UDI


def test_daylight_autonomy_and_continuous():
    # DA_300 (Reinhart & Walkenhorst 2001): share of occupied steps with E ≥ 300 lx.
    # cDA (Rogers 2006, from memory): mean of min(E/300, 1).
    # The last step is unoccupied and must be ignored.
    e = [[0, 150, 300, 450, 75, 9000]]
    m = masks(6, occupied=[1, 1, 1, 1, 1, 0])
    r = run(e, m=m)
    assert r["daylight_autonomy"][0] == pytest.approx(2 / 5, abs=1e-12)  # 300 and 450
    # (0 + 0.5 + 1 + 1 + 0.25) / 5 = 0.55; exact up to float division (1e-12)
    assert r["continuous_daylight_autonomy"][0] == pytest.approx(0.55, abs=1e-12)
    assert r["mean_illuminance"][0] == pytest.approx(975 / 5, abs=1e-9)  # occupied mean


def test_udi_bands_at_their_edges():
    # UDI (Nabil & Mardaljevic 2005, bands 100/300/3000 lx as CONTRACT §3):
    # low E<100, supplementary 100≤E<300, autonomous 300≤E≤3000, high E>3000.
    e = [[99.9, 100, 299, 300, 3000, 3000.5, 0, 50]]
    r = run(e)
    assert r["udi_low"][0] == 3 / 8  # 99.9, 0, 50
    assert r["udi_supplementary"][0] == 2 / 8  # 100, 299
    assert r["udi_autonomous"][0] == 2 / 8  # 300, 3000
    assert r["udi_high"][0] == 1 / 8  # 3000.5
    total = r["udi_low"] + r["udi_supplementary"] + r["udi_autonomous"] + r["udi_high"]
    np.testing.assert_allclose(total, 1.0, atol=1e-15)  # the bands partition the time
    assert r["udi_useful_mean"] == pytest.approx(0.5, abs=1e-15)


def test_udi_useful_mean_is_grid_mean():
    # Two sensors: useful shares 1 and 0 → grid mean 0.5 (CONTRACT §3 definition).
    r = run([[200, 2000], [50, 5000]])
    assert r["udi_useful_mean"] == pytest.approx(0.5, abs=1e-15)


def test_direct_sun_hours_and_exposure_with_half_hour_steps():
    # direct_sun_hours: occupied hours with direct sun > 1000 lx (CONTRACT §3, "above").
    # Light exposure = Σ E Δt over all steps (definition of exposure, lx·h).
    p = MetricParams(step_hours=0.5)
    direct = [[1000, 1000.5, 5000, 0, 2000]]
    total = [[1000, 1000.5, 5000, 100, 2000]]
    m = masks(5, occupied=[1, 1, 1, 1, 0])
    r = run(total, direct, m, params=p)
    assert r["direct_sun_hours"][0] == 1.0  # two steps of 0.5 h (1000 exactly excluded)
    assert r["light_exposure"][0] == pytest.approx(0.5 * 9100.5, rel=1e-12)


# --------------------------------------------------------------------------- LM-83


def lm83_case(n_sunlit_per_step: list[int], n_sensors: int = 50):
    """Open 500 lx everywhere, closed 100 lx; some sensors in > 1000 lx direct sun."""
    n = len(n_sunlit_per_step)
    total = np.full((n_sensors, n), 500, np.float32)
    shaded = np.full((n_sensors, n), 100, np.float32)
    direct = np.zeros((n_sensors, n), np.float32)
    for step, k in enumerate(n_sunlit_per_step):
        direct[:k, step] = 1500
    return total, direct, shaded


def test_lm83_shading_not_triggered_at_exactly_two_percent():
    # IES LM-83-12: shading closes when MORE than 2 % of sensors get > 1000 lx
    # direct sun. 1 of 50 sensors = exactly 2 % → stays open → sDA = 100 %.
    total, direct, shaded = lm83_case([1, 1, 1, 1])
    r = run(total, direct, shaded=shaded)
    assert r["sda"] == 100.0
    assert r["shading_hours"] == 0


def test_lm83_shading_triggered_above_two_percent():
    # 2 of 50 sensors (4 %) → closed in every step → 100 lx < 300 lx → sDA = 0 %.
    total, direct, shaded = lm83_case([2, 2, 2, 2])
    r = run(total, direct, shaded=shaded)
    assert r["sda"] == 0.0
    assert r["shading_hours"] == 4
    # Without operable shading, `total` is used throughout (LM-83-12) → 100 %.
    assert run(total, direct)["sda"] == 100.0


def test_lm83_sda_half_of_analysis_hours_passes():
    # sDA_300/50% (IES LM-83-12): ≥ 300 lx for at least 50 % of analysis hours.
    # Closed in 2 of 4 steps → 2/4 = 50 % → passes; closed in 3 of 4 → 25 % → fails.
    total, direct, shaded = lm83_case([2, 2, 0, 0])
    assert run(total, direct, shaded=shaded)["sda"] == 100.0
    total, direct, shaded = lm83_case([2, 2, 2, 0])
    assert run(total, direct, shaded=shaded)["sda"] == 0.0


def test_lm83_night_steps_in_the_window_count_as_below():
    # Night steps inside 08:00–18:00 count as below 300 lx (IES LM-83-12 analysis
    # period is fixed clock hours). 4 lit steps at 500 lx + 4 dark → 4/8 = 50 % → pass;
    # + 5 dark → 4/9 < 50 % → fail.
    total = np.full((3, 4), 500, np.float32)
    c = accumulate(None, total, np.zeros_like(total), masks(4), P)
    c4 = accumulate_dark(c, masks(4), P, batch_shape=(), n_sensors=3)
    assert finalize(c4, P)["sda"] == 100.0
    c5 = accumulate_dark(c, masks(5), P, batch_shape=(), n_sensors=3)
    assert finalize(c5, P)["sda"] == 0.0


def test_lm83_ase_more_than_250_hours():
    # ASE_1000,250h (IES LM-83-12): share of sensors with direct sun > 1000 lx for
    # more than 250 analysis hours, shading open. 10 sensors over 300 analysis steps:
    # sensors 0–2 sunlit 251 h → count; 3–4 exactly 250 h → not; 5 at exactly
    # 1000 lx for 300 h → not (> 1000); 6 sunlit 260 h of which 20 outside analysis.
    n = 320
    direct = np.zeros((10, n), np.float32)
    direct[0:3, :251] = 1200
    direct[3:5, :250] = 1200
    direct[5, :300] = 1000
    direct[6, 40:300] = 1200  # steps 300.. are outside analysis; 40..299 = 260 inside
    direct[6, 300:] = 1200
    analysis = np.arange(n) < 300
    m = masks(n, analysis=analysis)
    r = run(direct + 100, direct, m)
    assert r["ase"] == pytest.approx(40.0, abs=1e-12)  # sensors 0, 1, 2, 6
    np.testing.assert_array_equal(r["ase_hours"][:7], [251, 251, 251, 250, 250, 0, 260])


# --------------------------------------------------------------------------- EN 17037


def en17037_grid(high, low, floor, n_high, n_low, n_pass, n_day=10):
    """20 sensors: n_high at `high` lx, n_low at `low` lx, the rest at `floor` lx, in
    n_pass of n_day daylight steps; 0 lx in the other daylight steps."""
    e = np.zeros((20, n_day), np.float32)
    e[:, :n_pass] = floor
    e[:n_high, :n_pass] = high
    e[n_high : n_high + n_low, :n_pass] = low
    return e


@pytest.mark.parametrize(
    "level,target,minimum,floor", [(1, 300, 100, 0), (2, 500, 300, 100), (3, 750, 500, 300)]
)
def test_en17037_level_exactly_at_each_threshold(level, target, minimum, floor):
    # EN 17037:2018 Table A.1: target over ≥ 50 % of the grid and minimum target over
    # ≥ 95 % of it, each for ≥ 50 % of daylight hours. 20 sensors: 10 at the target and
    # 9 more at the minimum (19/20 = 95 %), in 5 of 10 daylight steps (50 %) → met.
    # The last sensor sits at the level below's minimum target (`floor`), so a grid
    # one sensor short of this level still meets the level below.
    def level_of(*args):
        return int(run(en17037_grid(*args))["en17037_level"])

    assert level_of(target, minimum, floor, 10, 9, 5) == level
    # One sensor short of the 50 % target share, or of the 95 % minimum share.
    assert level_of(target, minimum, floor, 9, 10, 5) == level - 1
    assert level_of(target, minimum, floor, 10, 8, 5) == level - 1
    # Just under the illuminance (by 0.5 lx) → the level below.
    assert level_of(target - 0.5, minimum, floor, 10, 9, 5) == level - 1
    assert level_of(target, minimum - 0.5, floor, 10, 9, 5) == level - 1
    # 4 of 10 daylight steps (40 %) → no level at all (every level needs ≥ 50 %).
    assert level_of(target, minimum, floor, 10, 9, 4) == 0


def test_en17037_only_daylight_steps_count_and_fractions():
    # Daylight hours are the sun-up steps: dark non-daylight steps do not dilute.
    e = en17037_grid(300, 100, 0, 10, 9, 5, n_day=12)
    day = np.arange(12) < 10  # steps 10, 11 are not daylight hours
    p = P
    c = accumulate(None, e, np.zeros_like(e), masks(12, daylight=day), p)
    assert finalize(c, p)["en17037_level"] == 1
    target, minimum = en17037_time_fractions(c, p)
    np.testing.assert_array_equal(target, [0.5, 0.0, 0.0])
    np.testing.assert_array_equal(minimum, [0.5, 0.0, 0.0])


def test_en17037_level_on_a_real_day_counts_daylight_steps_by_the_sun_at_mid_step():
    # Greensboro (pvlib's TMY3 file), 5 December: pvlib's sun_rise_set_transit_spa puts
    # sunrise at 07:15 and sunset at 17:05 local standard time (hand count, independent
    # of our code). Step middles 07:30 ... 16:30 are sunlit: 10 daylight hours (stamps
    # 08:00 ... 17:00). The step 17:00-18:00 holds 5 min of sun but its middle is dark.
    from luxsweep.kernels.climate import read_tmy3
    from luxsweep.kernels.sun import daylight_steps, step_sun

    path = Path(pvlib.__file__).parent / "data" / "723170TYA.CSV"
    with pytest.warns(UserWarning):  # its illuminance columns are in 100 lx units
        climate = read_tmy3(path)
    day = slice(338 * 24, 339 * 24)  # stamps 5 Dec 01:00 ... 6 Dec 00:00
    stamps = climate.time[day]
    assert stamps[0] == pd.Timestamp("2023-12-05 01:00", tz=stamps.tz)
    rst = pvlib.solarposition.sun_rise_set_transit_spa(
        pd.DatetimeIndex([stamps[0].normalize()]), climate.site.latitude,
        climate.site.longitude)
    middles = stamps - pd.Timedelta(minutes=30)
    hand = np.asarray((middles > rst["sunrise"].iloc[0]) & (middles < rst["sunset"].iloc[0]))
    assert hand.sum() == 10
    daylight = daylight_steps(climate)[day]
    np.testing.assert_array_equal(daylight, hand)
    any_sun = step_sun(climate)[0][day] > 0.0  # the old count: any sun in the step
    assert any_sun.sum() == 11

    # 4 sensors at 600 lx in the 5 steps stamped 10:00-14:00, 50 lx in every other
    # daylight step: EN 17037:2018 Table A.1 medium level (500 lx over >= 50 % of the
    # grid and 300 lx over >= 95 %) for 5 of 10 daylight hours = 50 % -> level 2. Counting
    # the sunset step as a daylight hour gives 5 of 11 < 50 % -> no level at all.
    e = np.where(daylight, 50.0, 0.0)[None].repeat(4, axis=0).astype(np.float32)
    e[:, 9:14] = 600.0
    assert daylight[9:14].all()
    levels = {}
    for name, mask in (("mid-step", daylight), ("any sun", any_sun)):
        m = masks(24, daylight=mask)
        levels[name] = int(finalize(accumulate(None, e, np.zeros_like(e), m, P), P)
                           ["en17037_level"])
    assert levels == {"mid-step": 2, "any sun": 0}


# --------------------------------------------------------------------------- additivity


def random_year(seed=7, batch=(2, 3), n_sensors=12, n_steps=700):
    rng = np.random.default_rng(seed)
    # integer lux so that float sums are exact in any order
    total = np.floor(rng.lognormal(6.0, 1.0, size=(*batch, n_sensors, n_steps)))
    total = total.astype(np.float32)
    direct = np.where(rng.random(total.shape) < 0.3, total, 0).astype(np.float32)
    shaded = np.floor(total * 0.6).astype(np.float32)
    m = StepMasks(
        occupied=rng.random(n_steps) < 0.4,
        analysis=rng.random(n_steps) < 0.45,
        daylight=rng.random(n_steps) < 0.5,
    )
    return total, direct, shaded, m


def test_one_chunk_equals_seven_chunks_and_merge():
    # Additivity over time chunks (the engine's contract): identical results.
    total, direct, shaded, m = random_year()
    p = MetricParams(ase_hours_limit=20.0)
    whole = finalize(accumulate(None, total, direct, m, p, shaded), p)
    edges = [0, 13, 100, 101, 250, 400, 555, 700]  # 7 uneven chunks
    counts, parts = None, []
    for a, b in itertools.pairwise(edges):
        mk = StepMasks(m.occupied[a:b], m.analysis[a:b], m.daylight[a:b])
        args = (total[..., a:b], direct[..., a:b], mk, p, shaded[..., a:b])
        counts = accumulate(counts, *args)
        parts.append(accumulate(None, *args))
    chunked = finalize(counts, p)
    merged = finalize(merge_counts(*parts[::-1]), p)
    assert set(whole) == set(chunked)
    for key in whole:
        np.testing.assert_array_equal(chunked[key], whole[key], err_msg=key)
        np.testing.assert_array_equal(merged[key], whole[key], err_msg=key)
    # the random case exercises the metrics (not all zeros or ones)
    assert 0 < whole["sda"].min() < 100 and 0 < whole["ase"].max() < 100
    assert whole["sda"].shape == (2, 3) and whole["daylight_autonomy"].shape == (2, 3, 12)


def test_batch_equals_per_element():
    # Vectorisation over the batch axes gives the same as one element at a time.
    total, direct, shaded, m = random_year(seed=3, batch=(2,), n_steps=200)
    both = finalize(accumulate(None, total, direct, m, P, shaded), P)
    for i in range(2):
        one = finalize(accumulate(None, total[i], direct[i], m, P, shaded[i]), P)
        for key in one:
            np.testing.assert_array_equal(both[key][i], one[key], err_msg=key)


def test_accumulate_dark_equals_zero_illuminance():
    total, direct, shaded, m = random_year(seed=5, batch=(3,), n_sensors=4, n_steps=50)
    dm = StepMasks(m.occupied[:20], m.analysis[:20], m.daylight[:20])
    zeros = np.zeros((3, 4, 20), np.float32)
    base = accumulate(None, total, direct, m, P, shaded)
    a = accumulate(base, zeros, zeros, dm, P, zeros)
    b = accumulate_dark(base, dm, P, batch_shape=(3,), n_sensors=4)
    for f in dataclasses.fields(a):
        x, y = getattr(a, f.name), getattr(b, f.name)
        np.testing.assert_array_equal(x, y, err_msg=f.name)
        assert x.dtype == y.dtype


# --------------------------------------------------------------------------- daylight factor


def test_daylight_factor_stats():
    # Mean, median, minimum and uniformity = min/mean (common practice).
    s = daylight_factor_stats(np.array([[1.0, 2.0, 3.0, 6.0]]))
    assert s["daylight_factor_mean"][0] == 3.0
    assert s["daylight_factor_median"][0] == 2.5
    assert s["daylight_factor_min"][0] == 1.0
    assert s["daylight_factor_uniformity"][0] == pytest.approx(1 / 3, rel=1e-15)


def test_params_reject_bad_udi_edges():
    with pytest.raises(ValueError, match="udi_edges"):
        MetricParams(udi_edges=(300.0, 100.0, 3000.0))


def _direct_counts(total, direct, shaded, m, p):
    """The count definitions of the module docstring evaluated directly over whole arrays
    (IES LM-83-12 shading rule, sDA, ASE; EN 17037:2018 grid shares; Reinhart & Walkenhorst
    2001 DA; Nabil & Mardaljevic 2005 UDI), with no blocking or shared comparisons."""
    occ, ana = m.occupied[..., None, :], m.analysis[..., None, :]
    s = total.shape[-2]

    def n(cond, mask):
        return np.count_nonzero(cond & mask, axis=-1)

    sunlit = direct > p.sun_threshold
    closed = (np.count_nonzero(sunlit, axis=-2) * 50 > s) & m.analysis  # > 2 % of the grid
    effective = np.where(closed[..., None, :], shaded, total)
    out = {
        "occ_da": n(total >= p.da_threshold, occ),
        "occ_udi_reach_supplementary": n(total >= 100, occ),
        "occ_udi_reach_autonomous": n(total >= 300, occ), "occ_udi_high": n(total > 3000, occ),
        "occ_sun": n(sunlit, occ), "ana_sda": n(effective >= 300, ana), "ana_ase": n(sunlit, ana),
        "ana_shaded": np.count_nonzero(closed, axis=-1),
        "occ_sum_lux": np.where(occ, total, 0).sum(-1, dtype=float),
        "occ_cda_lux": np.where(occ, np.minimum(total, 300), 0).sum(-1, dtype=float),
        "all_sum_lux": total.sum(-1, dtype=float),
    }
    for name, col, share in (("day_target_ok", 0, 0.5), ("day_minimum_ok", 1, 0.95)):
        out[name] = np.stack([np.count_nonzero(
            (np.count_nonzero(total >= lv[col], axis=-2) >= share * s) & m.daylight, axis=-1)
            for lv in p.en17037_levels], -1)
    return out


@pytest.mark.parametrize("batch_masks", [False, True])
def test_accumulate_equals_the_definitions_evaluated_directly(batch_masks):
    # integer lux (float sums exact in any order) with many values on the thresholds
    total, direct, shaded, _ = random_year(seed=11, batch=(3, 2), n_sensors=40, n_steps=300)
    total[..., ::5] = np.round(total[..., ::5] / 100.0) * 100.0
    direct = np.where(direct > 0, np.maximum(direct, 900.0), 0).astype(np.float32)
    rng = np.random.default_rng(2)
    shape = (3, 1, 300) if batch_masks else (300,)
    m = StepMasks(rng.random(shape) < 0.6, rng.random(shape) < 0.7, rng.random(shape) < 0.8)
    got = accumulate(None, total, direct, m, P, shaded)
    want = _direct_counts(total, direct, shaded, m, P)
    assert want["ana_shaded"].sum() > 0 and 0 < want["day_target_ok"].sum()
    for key, value in want.items():
        np.testing.assert_array_equal(getattr(got, key), value, err_msg=key)  # exact: integers


# --------------------------------------------------------------------------- scaled variants


@pytest.mark.parametrize("tau", [0.7, 0.35, 1.0, 0.123456])
@pytest.mark.parametrize("strict", [False, True])
def test_first_passing_level_is_exact(tau, strict):
    # Definition of the level: the smallest float32 u whose rounded product with τ passes
    # the threshold (IEEE 754 rounding is monotone, so everything above passes as well).
    from luxsweep.kernels.metrics import _first_passing

    f32 = np.float32
    for x in (100.0, 300.0, 1000.0, 3000.0, 3.3):
        u = f32(_first_passing(x, tau, strict, np.dtype(np.float32)))
        below = np.nextafter(u, f32(-np.inf))

        def passes(v, x=x):
            return f32(tau) * v > f32(x) if strict else f32(tau) * v >= f32(x)

        assert passes(u) and not passes(below)


def test_transmittance_scaling_equals_forming_each_variant():
    # Illuminance is linear in a single glazing set's normal transmittance (DESIGN §2.6):
    # folding τ_v × E from E must equal folding the formed series τ_v × E (float32, as the
    # engine used to form them). Counts are exact; lux sums are sums of the same products
    # taken in another order (rel 1e-6, float32 sums of ~10² terms).
    total, direct, _, m = random_year(seed=11, batch=(2,), n_steps=1300)
    tau = np.array([0.7, 0.5, 0.35], np.float32)
    tau_closed = 0.25 * tau
    # place values exactly on thresholds after scaling: τ·u lands on 300 lx and 3000 lx
    total[0, 0, :4] = [np.float32(300) / tau[0], np.float32(3000) / tau[1],
                       np.nextafter(np.float32(300) / tau[2], np.float32(0)), 1000 / 0.7]
    p = MetricParams(ase_hours_limit=20.0)
    got = finalize(accumulate(None, total, direct, m, p, transmittance=tau,
                              shaded_transmittance=tau_closed), p)
    formed = tau[None, :, None, None] * total[:, None]  # (2, 3, S, T) float32
    formed_direct = tau[None, :, None, None] * direct[:, None]
    formed_closed = tau_closed[None, :, None, None] * total[:, None]
    want = finalize(accumulate(None, formed, formed_direct, m, p, formed_closed), p)
    assert set(got) == set(want)
    for key in want:
        if np.issubdtype(want[key].dtype, np.integer) or want[key].dtype == bool:
            np.testing.assert_array_equal(got[key], want[key], err_msg=key)
        else:
            np.testing.assert_allclose(got[key], want[key], rtol=1e-6, atol=1e-9, err_msg=key)
    # the case exercises the shading rule and the metrics (not all zeros or ones)
    counts = accumulate(None, total, direct, m, p, transmittance=tau,
                        shaded_transmittance=tau_closed)
    assert counts.ana_shaded.min() > 0
    da = got["daylight_autonomy"]
    assert 0 < da.min() and da.max() < 1 and got["ase"].max() > 0
