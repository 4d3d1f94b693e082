"""Sun position, time steps, resampling and sun points (kernels.sun).

References: the NREL SPA report's worked example (Reda & Andreas 2004,
NREL/TP-560-34302, Table A5.1), pvlib (solar position, sunrise, Ineichen clear
sky), scipy's root finder, the real TMY3 years bundled with pvlib, and the
analytic error bound of linear interpolation.
"""

from __future__ import annotations

import dataclasses
import pickle
from pathlib import Path

import numpy as np
import pandas as pd
import pvlib
import pytest
from scipy.optimize import brentq

from luxsweep.kernels.climate import Site, read_tmy3
from luxsweep.kernels.sun import (
    DEFAULT_SPACING,
    TEMPERATURE,
    SunPoints,
    azimuth_altitude,
    daylight_steps,
    direction,
    resample,
    solar_position,
    step_sun,
    step_times,
    to_building_azimuth,
    to_building_frame,
)

PVLIB_DATA = Path(pvlib.__file__).parent / "data"
SAND_POINT = PVLIB_DATA / "703165TY.csv"
GREENSBORO = PVLIB_DATA / "723170TYA.CSV"


@pytest.fixture(scope="module")
def sand_point():
    return read_tmy3(SAND_POINT)


@pytest.fixture(scope="module")
def greensboro():
    with pytest.warns(UserWarning):  # its illuminance columns are in 100 lx units
        return read_tmy3(GREENSBORO)


# --------------------------------------------------------------------------- solar position


def test_spa_worked_example():
    # Reda & Andreas (2004), NREL/TP-560-34302, Table A5.1: 2003-10-17 12:30:30 local
    # time, UTC-7, lat 39.742476, lon -105.1786, elevation 1830.14 m, 820 mbar, 11 degC,
    # delta T 67 s -> topocentric zenith 50.11162 deg (refraction included),
    # azimuth 194.34024 deg. Tolerance 1e-4 deg: the report prints 5 decimals and the
    # algorithm is stated to +-0.0003 deg; pvlib reproduces the table to ~1e-6 deg.
    site = Site("SPA example", 39.742476, -105.1786, 1830.14, -7.0)
    t = pd.DatetimeIndex([pd.Timestamp("2003-10-17 12:30:30")])  # naive = local standard
    altitude, azimuth = solar_position(t, site, pressure=82000.0, temperature=11.0, delta_t=67.0)
    assert 90.0 - altitude[0] == pytest.approx(50.11162, abs=1e-4)
    assert azimuth[0] == pytest.approx(194.34024, abs=1e-4)


# --------------------------------------------------------------------------- frames


def test_direction_convention_and_inverse():
    # DESIGN §2.1 frames: x east, y north, z up; azimuth clockwise from north
    np.testing.assert_allclose(direction(0, 0), [0, 1, 0], atol=1e-15)
    np.testing.assert_allclose(direction(90, 0), [1, 0, 0], atol=1e-15)
    np.testing.assert_allclose(direction(180, 0), [0, -1, 0], atol=1e-15)
    np.testing.assert_allclose(direction(123, 90), [0, 0, 1], atol=1e-15)
    rng = np.random.default_rng(3)
    az, alt = rng.uniform(0, 360, 1000), rng.uniform(-89, 89, 1000)
    v = direction(az, alt)
    np.testing.assert_allclose(np.linalg.norm(v, axis=-1), 1.0, atol=1e-14)
    az2, alt2 = azimuth_altitude(v)
    np.testing.assert_allclose(az2, az, atol=1e-9)
    np.testing.assert_allclose(alt2, alt, atol=1e-9)


def test_building_frame_rotation():
    # DEVELOPERS.md frames: building azimuth = site azimuth - orientation + 180
    assert to_building_azimuth(200.0, 180.0) == pytest.approx(200.0)  # 180: frames equal
    # front façade facing east (90): a sun due east is straight in front of it, i.e. along
    # the front normal -y of the building frame (building azimuth 180)
    assert to_building_azimuth(90.0, 90.0) == pytest.approx(180.0)
    np.testing.assert_allclose(to_building_frame(direction(90, 0), 90.0), [0, -1, 0], atol=1e-15)
    rng = np.random.default_rng(4)
    az, alt, phi = rng.uniform(0, 360, 200), rng.uniform(-30, 90, 200), 37.5
    np.testing.assert_allclose(
        to_building_frame(direction(az, alt), phi),
        direction(to_building_azimuth(az, phi), alt),
        atol=1e-12,
    )


# --------------------------------------------------------------------------- time steps


def test_hour_ending_records_use_the_sun_at_mid_interval(sand_point):
    # common practice (DESIGN §2.4): the hourly record stamped 12:00 averages 11:00-12:00
    # local standard time, so its sun is at 11:30
    stamps, sun_times = step_times(sand_point, 60)
    assert stamps.equals(sand_point.time)
    i = stamps.get_loc(pd.Timestamp("2023-06-21 12:00", tz="Etc/GMT+9"))
    assert sun_times[i] == pd.Timestamp("2023-06-21 11:30", tz="Etc/GMT+9")
    # away from sunrise/sunset every hour uses its middle
    altitude, azimuth = solar_position(sun_times, sand_point.site)
    shift = stamps - sun_times
    inner = np.abs(altitude) > 10
    assert (shift[inner] == pd.Timedelta(minutes=30)).all()
    # the wrapper's sun at 11:30 is pvlib's sun at 11:30 (reference: pvlib SPA directly,
    # delta T from the year as in the wrapper)
    ref = pvlib.solarposition.get_solarposition(
        sun_times[i : i + 1], 55.317, -160.517, altitude=7.0,
        pressure=pvlib.atmosphere.alt2pres(7.0), method="nrel_numpy", delta_t=None,
    )  # fmt: skip
    assert altitude[i] == pytest.approx(ref["apparent_elevation"].iloc[0], abs=1e-9)
    assert azimuth[i] == pytest.approx(ref["azimuth"].iloc[0], abs=1e-9)


def _apparent_altitude(seconds: float, start: pd.Timestamp, site: Site) -> float:
    t = pd.DatetimeIndex([start + pd.Timedelta(seconds=seconds)])
    ref = pvlib.solarposition.get_solarposition(
        t, site.latitude, site.longitude, altitude=site.elevation,
        pressure=pvlib.atmosphere.alt2pres(site.elevation), method="nrel_numpy", delta_t=None,
    )  # fmt: skip
    return float(ref["apparent_elevation"].iloc[0])


@pytest.mark.parametrize("step", [60, 15])
def test_sunrise_and_sunset_steps_use_the_middle_of_the_sunlit_part(sand_point, step):
    # common practice (DESIGN §2.4): at sunrise/sunset the sun is taken at the middle of
    # the sunlit part of the interval. Reference crossing: scipy's brentq on pvlib's
    # apparent altitude (independent root finder), tolerance 1 s (our bisection: ~0.2 s).
    site = sand_point.site
    stamps, sun_times = step_times(sand_point, step)
    ends = stamps[(stamps >= pd.Timestamp("2023-03-20", tz="Etc/GMT+9"))
                  & (stamps < pd.Timestamp("2023-03-21", tz="Etc/GMT+9"))]  # fmt: skip
    d = pd.Timedelta(minutes=step)
    a_start, _ = solar_position(ends - d, site)
    a_end, _ = solar_position(ends, site)
    crossing = np.flatnonzero((a_start > 0) != (a_end > 0))
    assert len(crossing) == 2  # one sunrise and one sunset step on the equinox
    for k in crossing:
        start = ends[k] - d
        t_cross = brentq(_apparent_altitude, 0.0, 60.0 * step, args=(start, site), xtol=0.01)
        if a_end[k] > 0:  # sunrise: sunlit from the crossing to the end
            expected = start + pd.Timedelta(seconds=0.5 * (t_cross + 60.0 * step))
        else:  # sunset: sunlit from the start to the crossing
            expected = start + pd.Timedelta(seconds=0.5 * t_cross)
        got = sun_times[stamps.get_loc(ends[k])]
        assert abs((got - expected).total_seconds()) < 1.0
    # pvlib's sunrise (upper limb at -0.8333 deg true altitude) comes earlier than the
    # centre's apparent altitude 0 by the sun's semi-diameter, 0.267 deg: about 1-2 min here
    rise = pvlib.solarposition.sun_rise_set_transit_spa(
        pd.DatetimeIndex([pd.Timestamp("2023-03-20 12:00", tz="Etc/GMT+9")]),
        site.latitude, site.longitude,
    )["sunrise"].iloc[0]  # fmt: skip
    k = crossing[0]
    t_rise = ends[k] - 2 * (ends[k] - sun_times[stamps.get_loc(ends[k])])
    assert pd.Timedelta(0) < t_rise - rise < pd.Timedelta(minutes=3)


@pytest.mark.parametrize("which", ["sand_point", "greensboro"])
def test_sun_is_up_about_half_the_hours(which, request):
    # common practice: outside the polar circles the sun is above the horizon for about
    # half the year, ~4380 of 8760 h. Refraction (0.57 deg at the horizon) and the use of
    # the sun's centre lengthen each day by ~6-12 min (+1-2 %): tolerance +-3 %.
    climate = request.getfixturevalue(which)
    altitude, _ = solar_position(climate.time - pd.Timedelta(minutes=30), climate.site)
    hours_up = int((altitude > 0).sum())
    assert hours_up == pytest.approx(4380, rel=0.03)
    # with the sunrise rule, every hour with a sunlit part has its sun above the horizon
    rep_altitude, _ = step_sun(climate)
    assert (rep_altitude > 0).sum() > hours_up


def _sunlit_hours_pvlib(site: Site) -> float:
    """Hours between pvlib's own sunrise and sunset over the reference year (SPA)."""
    days = pd.date_range("2023-01-01", periods=365, freq="D",
                         tz=f"Etc/GMT{-int(site.utc_offset):+d}")
    rst = pvlib.solarposition.sun_rise_set_transit_spa(days, site.latitude, site.longitude)
    return float((rst["sunset"] - rst["sunrise"]).dt.total_seconds().sum() / 3600.0)


@pytest.mark.parametrize("which", ["greensboro", "sand_point"])
def test_daylight_steps_count_the_sunlit_hours(which, request):
    # Hand count, independent of our code: the hours between sunrise and sunset from
    # pvlib.solarposition.sun_rise_set_transit_spa, summed over the year (Greensboro
    # 4,448.5 h, Sand Point 4,494.3 h). Tolerance 1 % (about 45 h): pvlib's sunrise is
    # the sun's upper limb at the horizon (-0.833 deg), ours its centre (apparent altitude
    # 0, about -0.57 deg airless), 0.27 deg later at each end, i.e. 1.3-2.5 min a day at
    # 36-55 deg N (16-30 h a year, geometry of the sun's path, from memory); rounding each
    # sunrise and sunset to the nearest step middle errs < 0.5 h per event, errors that
    # cancel over the year as the event drifts through the hour.
    climate = request.getfixturevalue(which)
    hours = _sunlit_hours_pvlib(climate.site)
    steps = int(daylight_steps(climate).sum())
    assert steps == pytest.approx(hours, rel=0.01)
    assert steps <= hours  # the centre rises after the upper limb
    # the representative-time rule (any sun in the step) overcounts by ~8 %: 4,788 steps
    # at Greensboro; the tolerance above tells the two apart
    altitude, _ = step_sun(climate)
    assert (altitude > 0).sum() > 1.05 * hours


def test_daylight_steps_mid_step_against_pvlib_minutes(greensboro):
    # Each step is a daylight step exactly when pvlib's SPA puts the sun's centre above
    # the horizon (apparent elevation > 0) at the step's middle; 15-min steps, one week
    # around the winter solstice, where sunrise and sunset steps are many (pvlib is the
    # reference; exact agreement, same algorithm, except within 1 s of a crossing).
    r = resample(greensboro, 15)
    up = daylight_steps(r)
    sl = slice(350 * 96, 357 * 96)
    middles = r.time[sl] - pd.Timedelta(minutes=7.5)
    ref = pvlib.solarposition.get_solarposition(
        middles, greensboro.site.latitude, greensboro.site.longitude,
        altitude=greensboro.site.elevation, method="nrel_numpy",
        pressure=pvlib.atmosphere.alt2pres(greensboro.site.elevation),
        temperature=TEMPERATURE)["apparent_elevation"]
    np.testing.assert_array_equal(up[sl], ref.to_numpy() > 0)
    assert 0 < up[sl].sum() < up[sl].size


def test_sub_hourly_stamps(sand_point):
    stamps, sun_times = step_times(sand_point, 15)
    assert len(stamps) == 4 * 8760
    assert stamps[0] == pd.Timestamp("2023-01-01 00:15", tz="Etc/GMT+9")
    assert stamps[-1] == sand_point.time[-1]
    assert stamps.is_monotonic_increasing and sun_times.is_monotonic_increasing
    lag = (stamps - sun_times).total_seconds()
    assert ((lag > 0) & (lag < 900)).all()
    assert np.median(lag) == 450.0  # mid-step, 7.5 min before the stamp
    for bad in (7, 45, 0, -15, 90, 15.0):
        with pytest.raises(ValueError, match="divides"):
            step_times(sand_point, bad)


# --------------------------------------------------------------------------- resampling


def test_resample_keeps_each_hours_mean_and_is_dark_at_night(sand_point):
    r = resample(sand_point, 15)
    assert r.interval == 15 and len(r) == 4 * 8760
    altitude, _ = step_sun(r)
    for name in ("ghi", "dni", "dhi", "global_illuminance"):
        hourly = getattr(sand_point, name)
        sub = getattr(r, name)
        # energy conservation: each hour's mean of its four 15-min steps equals the
        # file's hourly mean (the file's definition of the value); tolerance 1e-9
        # relative (float rounding only). TMY3 Sand Point has no all-dark sunlit hour.
        np.testing.assert_allclose(sub.reshape(-1, 4).mean(axis=1), hourly, rtol=1e-9, atol=1e-9)
        known = np.isfinite(sub)  # Sand Point's 2-31 Jan illuminance is invalid (its unit)
        assert known.sum() >= 0.9 * sub.size
        assert (sub[known & (altitude <= 0)] == 0).all()
        assert (sub[known] >= 0).all()
    assert resample(sand_point, 60) is sand_point


def test_resample_follows_clear_sky_better_than_holding_hourly_values(sand_point):
    # reference: pvlib's Ineichen-Perez clear-sky model (Linke turbidity 3) sampled every
    # 5 min (hourly and 15-min means from 12 and 3 samples). Its hourly means are
    # resampled to 15 min and compared with its true 15-min means. Tolerances: RMS error
    # at most 40 % of that of holding each hourly value for its four steps (measured
    # 12-28 %), and GHI within 3 % of its peak at every step (measured 1.8 %: the
    # curvature of the daily course within one hour).
    site = sand_point.site
    loc = pvlib.location.Location(site.latitude, site.longitude, tz=site.utc_offset,
                                  altitude=site.elevation)  # fmt: skip
    minutes = pd.date_range(sand_point.time[0] - pd.Timedelta(minutes=57.5),
                            periods=12 * 8760, freq="5min")  # fmt: skip
    clear = loc.get_clearsky(minutes, model="ineichen", linke_turbidity=3.0)
    hourly = {k: clear[k].to_numpy().reshape(-1, 12).mean(axis=1) for k in ("ghi", "dni", "dhi")}
    true15 = {k: clear[k].to_numpy().reshape(-1, 3).mean(axis=1) for k in ("ghi", "dni", "dhi")}
    r = resample(dataclasses.replace(sand_point, **hourly), 15)
    for k in ("ghi", "dni", "dhi"):
        err = getattr(r, k) - true15[k]
        held = np.repeat(hourly[k], 4) - true15[k]
        assert np.sqrt(np.mean(err**2)) < 0.4 * np.sqrt(np.mean(held**2)), k
    assert np.abs(r.ghi - true15["ghi"]).max() < 0.03 * true15["ghi"].max()


def test_resample_marks_sub_steps_of_missing_hours(sand_point):
    valid = dict(sand_point.valid)
    valid["dhi"] = valid["dhi"].copy()
    valid["dhi"][4000] = False
    c = dataclasses.replace(sand_point, valid=valid,
                            dhi=np.where(valid["dhi"], sand_point.dhi, np.nan))  # fmt: skip
    r = resample(c, 30)
    assert not r.valid["dhi"][8000:8002].any() and np.isnan(r.dhi[8000:8002]).all()
    assert r.valid["dhi"][7999] and r.valid["dhi"][8002] and np.isfinite(r.dhi[8002])


# --------------------------------------------------------------------------- sun points


def _random_upper(m: int, seed: int) -> np.ndarray:
    """Uniform random directions on the upper hemisphere (z uniform: Archimedes)."""
    rng = np.random.default_rng(seed)
    z, phi = rng.uniform(0, 1, m), rng.uniform(0, 2 * np.pi, m)
    r = np.sqrt(1 - z * z)
    return np.stack([r * np.sin(phi), r * np.cos(phi), z], axis=1)


@pytest.fixture(scope="module")
def points():
    return SunPoints()


# up, four walls, two tilted
NORMALS = direction([0, 0, 90, 180, 270, 45, 200], [90, 0, 0, 0, 0, 45, 30])


def test_sun_points_cover_the_hemisphere(points):
    assert 1000 < points.n < 20000  # thousands (DESIGN §2.4, 15-minute steps)
    np.testing.assert_allclose(np.linalg.norm(points.directions, axis=1), 1.0, atol=1e-14)
    assert points.directions[:, 2].max() == 1.0  # the zenith
    s = _random_upper(10_000, seed=11)
    index, weight = points.weights(s)
    assert index.dtype == np.int32 and index.shape == (10_000, 3)
    assert (weight >= 0).all()
    np.testing.assert_allclose(weight.sum(axis=1), 1.0, atol=1e-12)
    # weighted corners lie in the direction asked for (gnomonic barycentric coordinates)
    p = np.einsum("mk,mkj->mj", weight, points.directions[index])
    np.testing.assert_allclose(p / np.linalg.norm(p, axis=1, keepdims=True), s, atol=1e-12)


def test_interpolation_is_exact_at_the_points(points):
    up = points.directions[points.directions[:, 2] >= 0]
    index, weight = points.weights(up)
    k = np.argmax(weight, axis=1)
    assert np.abs(weight[np.arange(len(up)), k] - 1.0).max() < 1e-12
    np.testing.assert_array_equal(points.directions[index[np.arange(len(up)), k]], up)


def test_suns_above_horizon_never_weight_points_below_it(points):
    s = direction(np.linspace(0, 360, 5000), np.linspace(0, 3, 5000))  # grazing suns
    index, weight = points.weights(s)
    below = points.directions[index, 2] < -1e-12
    assert weight[below].max(initial=0.0) < 1e-12


def test_cosine_interpolation_within_half_a_percent(points):
    # brief check: interpolating the visibility-free cosine n·s at 10,000 random suns is
    # within 0.5 % of E_dn (absolute in cosine) of the exact value, for several normals.
    s = _random_upper(10_000, seed=12)
    index, weight = points.weights(s)
    for n in NORMALS:
        exact = s @ n
        interpolated = (weight * (points.directions @ n)[index]).sum(axis=1)
        assert np.abs(interpolated - exact).max() < 0.005
    # with the sensor's back side clamped, max(0, n·s), the kink along the great circle
    # n·s = 0 bounds linear interpolation by h/4 (h: longest triangle edge [rad]); analytic
    # bound of linear interpolation of |x| on a segment of length h (error (h/2)/2)
    corners = points.directions[index]  # (m, 3, 3)
    edges = np.einsum("mkj,mkj->mk", corners, np.roll(corners, 1, axis=1))
    h = np.arccos(np.clip(edges, -1, 1)).max()
    for n in NORMALS:
        exact = np.maximum(s @ n, 0.0)
        interpolated = (weight * np.maximum(points.directions @ n, 0.0)[index]).sum(axis=1)
        err = np.abs(interpolated - exact)
        assert err.max() < h / 4 + 3e-4  # + smooth part, measured 1.4e-4 at the default
        assert err.mean() < 5e-4


def test_directions_below_the_cap_get_zero_weight(points):
    index, weight = points.weights(direction([10, 200], [-30, -89]))
    assert (weight == 0).all() and (index == 0).all()


def test_sun_points_pickle_cheaply_and_rebuild(points):
    s = _random_upper(1000, seed=13)
    before = points.weights(s)
    blob = pickle.dumps(points)
    assert len(blob) < 200  # only the spacing travels
    back = pickle.loads(blob)
    assert back.n == points.n and back.spacing == DEFAULT_SPACING
    after = back.weights(s)
    np.testing.assert_array_equal(before[0], after[0])
    np.testing.assert_array_equal(before[1], after[1])


def test_weights_vectorised_for_a_year_of_15_minute_suns(points):
    s = _random_upper(100_000, seed=14)
    index, weight = points.weights(s)
    assert index.shape == weight.shape == (100_000, 3)
    np.testing.assert_allclose(weight.sum(axis=1), 1.0, atol=1e-12)
