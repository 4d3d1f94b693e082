"""Representative sun times of the time steps, worked out with savings (kernels.sun._step_sun).

Reference: the rule of DESIGN §2.4 computed the direct way with pvlib alone —
the NREL SPA (pvlib ``get_solarposition``) at every step boundary, 14 bisections
of each sunrise and sunset step on the sign of the apparent altitude, and the
SPA again at every sun time. The fast version must give the same stamps, sun
times and positions bit for bit, at mid latitudes, near and inside the polar
circles (sun grazing the horizon), on the equator and south of it.
"""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pandas as pd
import pvlib
import pytest

from luxsweep.kernels import sun
from luxsweep.kernels.climate import Site, read_tmy3
from luxsweep.kernels.sun import resample, solar_position, step_sun, step_times

SAND_POINT = Path(pvlib.__file__).parent / "data" / "703165TY.csv"
SITES = {
    "mid-latitude": Site("t", 55.317, -160.517, 7.0, -9.0),
    "arctic": Site("t", 69.65, 18.96, 10.0, 1.0),
    "high arctic": Site("t", 78.2, 15.6, 5.0, 1.0),
    "polar circle": Site("t", 66.56, -20.0, 0.0, -1.0),
    "equator, high": Site("t", 0.0, -78.5, 2800.0, -5.0),
    "south, odd offset": Site("t", -33.9, 151.2, 40.0, 10.5),
}


@pytest.fixture(scope="module")
def sand_point():
    return read_tmy3(SAND_POINT)


def _at(site: Site, climate):
    time = pd.date_range(pd.Timestamp(year=2023, month=1, day=1, hour=1, tz=site.tz),
                         periods=8760, freq="h")  # fmt: skip
    return dataclasses.replace(climate, site=site, time=time)


def _pvlib_altitude(times, site):
    spa = pvlib.solarposition.get_solarposition(
        pd.DatetimeIndex(times), site.latitude, site.longitude, altitude=site.elevation,
        pressure=float(pvlib.atmosphere.alt2pres(site.elevation)), method="nrel_numpy",
        temperature=sun.TEMPERATURE, delta_t=None,  # ΔT from the year, as kernels.sun
    )  # fmt: skip
    return spa["apparent_elevation"].to_numpy(), spa["azimuth"].to_numpy()


def _direct(climate, step_minutes):
    """Stamps, sun times and sun positions by the rule, computed the direct way."""
    step = pd.Timedelta(minutes=step_minutes)
    start = climate.time[0] - pd.Timedelta(minutes=climate.interval)
    n = len(climate) * climate.interval // step_minutes
    stamps = pd.date_range(start + step, periods=n, freq=step)
    edges = start + pd.to_timedelta(np.arange(n + 1) * 60.0 * step_minutes, unit="s")
    lit = _pvlib_altitude(edges, climate.site)[0] > 0
    t0 = np.arange(n) * 60.0 * step_minutes
    t1 = t0 + 60.0 * step_minutes
    mid = 0.5 * (t0 + t1)
    cross = np.flatnonzero(lit[:-1] != lit[1:])
    rising = lit[1:][cross]
    a, b = t0[cross].copy(), t1[cross].copy()
    for _ in range(14):
        m = 0.5 * (a + b)
        lit_m = _pvlib_altitude(start + pd.to_timedelta(m, unit="s"), climate.site)[0] > 0
        left = lit_m == rising
        b, a = np.where(left, m, b), np.where(left, a, m)
    t_cross = 0.5 * (a + b)
    mid[cross] = np.where(rising, 0.5 * (t_cross + t1[cross]), 0.5 * (t0[cross] + t_cross))
    sun_times = pd.DatetimeIndex(start + pd.to_timedelta(np.round(mid * 1e6), unit="us"))
    return stamps, sun_times, *_pvlib_altitude(sun_times, climate.site)


@pytest.mark.parametrize(
    ("where", "step"),
    [("mid-latitude", 60), ("mid-latitude", 15), ("arctic", 60), ("arctic", 5),
     ("high arctic", 20), ("polar circle", 60), ("equator, high", 30),
     ("south, odd offset", 15)],
)  # fmt: skip
def test_same_sun_times_and_positions_as_the_direct_rule(where, step, sand_point):
    climate = _at(SITES[where], sand_point)
    stamps, sun_times = step_times(climate, step)
    altitude, azimuth = step_sun(resample(climate, step))
    ref_stamps, ref_times, ref_alt, ref_az = _direct(climate, step)
    assert stamps.equals(ref_stamps)
    assert sun_times.equals(ref_times)  # exact, to the microsecond
    np.testing.assert_array_equal(altitude, ref_alt)  # exact: same SPA inputs
    np.testing.assert_array_equal(azimuth, ref_az)
    # and the general entry point agrees with the kept positions
    np.testing.assert_array_equal(solar_position(sun_times, climate.site)[0], altitude)


@pytest.mark.parametrize("where", ["mid-latitude", "high arctic", "equator, high"])
@pytest.mark.parametrize("step", [60, 15])
def test_boundary_interpolation_within_its_bound(where, step, sand_point):
    # the skipped boundaries rely on a bound on interpolating z = sin(airless altitude)
    # from mid-steps: |z''''| <= ω⁴, |z''| <= ω² (z = sin φ sin δ + cos φ cos δ cos H,
    # ω the hour-angle rate) -> cubic error <= (9/384)(ωΔ)⁴, linear (ωΔ)²/8 (Lagrange
    # remainder). Checked against the exact SPA airless altitude at every boundary of
    # the year; the code keeps a factor-2 margin over the bound.
    site = SITES[where]
    climate = _at(site, sand_point)
    width = 60.0 * step
    start = climate.time[0] - pd.Timedelta(minutes=60)
    n = 8760 * 60 // step
    mids = start + pd.to_timedelta((np.arange(n) + 0.5) * width, unit="s")
    edges = start + pd.to_timedelta(np.arange(n + 1) * width, unit="s")
    spa_mid = pvlib.solarposition.get_solarposition(
        mids, site.latitude, site.longitude, altitude=site.elevation, method="nrel_numpy",
        delta_t=None)  # fmt: skip
    spa_edge = pvlib.solarposition.get_solarposition(
        edges, site.latitude, site.longitude, altitude=site.elevation, method="nrel_numpy",
        delta_t=None)  # fmt: skip
    z = np.sin(np.radians(spa_mid["elevation"].to_numpy()))  # airless (true) altitude
    z_edge = np.sin(np.radians(spa_edge["elevation"].to_numpy()))
    w = sun._HOUR_ANGLE_RATE * width
    cubic = (9.0 * (z[1:-2] + z[2:-1]) - z[:-3] - z[3:]) / 16.0
    linear = 0.5 * (z[:-1] + z[1:])
    assert np.abs(cubic - z_edge[2:-2]).max() <= 9.0 / 384.0 * w**4
    assert np.abs(linear - z_edge[1:-1]).max() <= w**2 / 8.0


def test_steps_worked_out_once_serve_resampling_and_positions(sand_point):
    # the caller keeps sun_steps and hands it to resample: the same climate as letting
    # resample work the steps out itself, and the same positions as step_sun of it;
    # an ephemeris memo changes no number
    steps = sun.sun_steps(sand_point, 15, ephemeris=sun.Ephemeris())
    r = resample(sand_point, 15, steps=steps)
    alone = resample(sand_point, 15)
    for name in ("ghi", "dni", "dhi", "direct_illuminance", "diffuse_illuminance"):
        np.testing.assert_array_equal(getattr(r, name), getattr(alone, name), err_msg=name)
    assert r.time.equals(alone.time) and steps.stamps.equals(r.time)
    altitude, azimuth = step_sun(r)
    np.testing.assert_array_equal(steps.altitude, altitude)
    np.testing.assert_array_equal(steps.azimuth, azimuth)
    # steps of another step length are refused, not silently used
    with pytest.raises(ValueError, match="steps were worked out"):
        resample(sand_point, 30, steps=steps)


def test_a_poor_estimate_costs_time_not_results(sand_point, monkeypatch):
    # the replayed halvings are confirmed by the sunlit test; with a deliberately wrong
    # estimate of every crossing (a random instant of the step, nonsense rate) the
    # unconfirmed steps are bisected and the result is still the direct rule's
    climate = _at(SITES["arctic"], sand_point)
    rng = np.random.default_rng(7)

    def wrong(site, width, cross, z):
        return (cross + rng.uniform(0, 1, cross.size)) * width, np.full(cross.size, 1e-3)

    monkeypatch.setattr(sun, "_crossing_guess", wrong)
    bisected = []
    real_bisect = sun._bisect
    monkeypatch.setattr(sun, "_bisect", lambda *a: bisected.append(a[2].size) or real_bisect(*a))
    _, sun_times = step_times(climate, 60)
    assert sum(bisected) > 100  # the fallback did run
    assert sun_times.equals(_direct(climate, 60)[1])
