"""Exposure to sunlight (kernels.sunlight) against the sun's path from pvlib and hand geometry.

References:
- pvlib.solarposition.get_solarposition (NREL SPA, Reda & Andreas 2004) for the
  sun's path, computed here independently of luxsweep's own SPA wrapper;
- plane geometry for the obstruction case (a long wall parallel to the façade).
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pvlib
import pytest
from conftest import TMY3_GREENSBORO

from luxsweep.kernels.climate import read_site
from luxsweep.kernels.geometry import parametric_room
from luxsweep.kernels.raytrace import Scene
from luxsweep.kernels.sunlight import (
    reference_height,
    space_sunlight_hours,
    sun_path,
    sunlight_hours,
    sunlight_level,
    window_reference_points,
)

DAY = dt.date(2023, 3, 21)
STEP = 1.0  # min
MIN_ALTITUDE = 12.0  # deg, a test value (the standard's table is by latitude)
WINDOW = {"wall": "front", "width": 4.0, "sill": 0.9, "head": 2.7, "offset": 0.0,
          "glazing": "main"}
POINT = np.array([[3.5, 0.0, 1.2]])  # centre of the front window, on the glass (thickness 0)
OUT = np.array([[0.0, -1.0, 0.0]])  # front façade outward normal (building frame)


def _room(obstructions=()):
    return parametric_room(7.0, 6.0, 3.0, [WINDOW], {"floor": 0.2, "walls": 0.5, "ceiling": 0.7},
                           {"main": 2}, obstructions=list(obstructions))


def _pvlib_path(site):
    """Apparent altitude and azimuth from pvlib at the middle of every minute of DAY."""
    times = pd.date_range(pd.Timestamp(DAY), periods=1440, freq="1min") + pd.Timedelta("30s")
    times = times.tz_localize(site.tz)
    pos = pvlib.solarposition.get_solarposition(times, site.latitude, site.longitude,
                                                altitude=site.elevation)
    return pos["apparent_elevation"].to_numpy(), pos["azimuth"].to_numpy()


def test_sun_path_matches_pvlib():
    site = read_site(TMY3_GREENSBORO)
    alt, az = sun_path(site, DAY, STEP)
    ref_alt, ref_az = _pvlib_path(site)
    # same SPA; the pressure for refraction differs only in how it is derived (pvlib alt2pres)
    assert np.max(np.abs(alt - ref_alt)) < 0.01
    assert np.max(np.abs(((az - ref_az) + 180) % 360 - 180)) < 0.01


@pytest.mark.parametrize("orientation", [180.0, 135.0, 90.0])
def test_open_window_counts_the_sun_in_front(orientation):
    """No obstruction: the sun counts whenever it is above the minimum altitude in front of
    the façade (a half-plane test on pvlib's azimuth; plane geometry)."""
    site = read_site(TMY3_GREENSBORO)
    alt, az = sun_path(site, DAY, STEP)
    hours = sunlight_hours(Scene(_room()), POINT, OUT, alt, az, orientation, MIN_ALTITUDE, STEP)
    ref_alt, ref_az = _pvlib_path(site)
    front = np.cos(np.radians(ref_az - orientation)) > 0
    expected = np.count_nonzero((ref_alt >= MIN_ALTITUDE) & front) * STEP / 60
    assert hours[0] == pytest.approx(expected, abs=2 * STEP / 60)
    # the south window on the equinox sees the sun for most of the day: a sanity scale
    if orientation == 180.0:
        assert 7.0 < hours[0] < 11.0


def _pvlib_day(site, day):
    times = pd.date_range(pd.Timestamp(day), periods=1440, freq="1min") + pd.Timedelta("30s")
    pos = pvlib.solarposition.get_solarposition(times.tz_localize(site.tz), site.latitude,
                                                site.longitude, altitude=site.elevation)
    return pos["apparent_elevation"].to_numpy(), pos["azimuth"].to_numpy()


def test_wall_in_front_blocks_the_low_sun():
    """A long wall of height H at distance D in front of a south façade hides the sun while
    tan(altitude) < (H − z_P) · cos(Δazimuth) / D (plane geometry; Δazimuth from the façade
    normal); counted with pvlib's path on 1 February, the first day EN 17037 allows."""
    site = read_site(TMY3_GREENSBORO)
    day = dt.date(2023, 2, 1)
    alt, az = sun_path(site, day, STEP)
    distance, height = 8.0, 6.0
    wall = {"x": 3.5, "y": -distance - 0.5, "width": 400.0, "depth": 1.0, "height": height}
    hours = sunlight_hours(Scene(_room([wall])), POINT, OUT, alt, az, 180.0, MIN_ALTITUDE, STEP)
    ref_alt, ref_az = _pvlib_day(site, day)
    rel = np.radians(ref_az - 180.0)
    front = np.cos(rel) > 0
    clear = np.tan(np.radians(ref_alt)) > (height - POINT[0, 2]) * np.cos(rel) / distance
    expected = np.count_nonzero((ref_alt >= MIN_ALTITUDE) & front & clear) * STEP / 60
    assert hours[0] == pytest.approx(expected, abs=2 * STEP / 60)
    open_hours = sunlight_hours(Scene(_room()), POINT, OUT, alt, az, 180.0, MIN_ALTITUDE, STEP)
    assert 1.0 < open_hours[0] - hours[0] < open_hours[0]  # partly hidden, not all


@pytest.mark.parametrize(("height", "seen"), [(-0.5, True), (+1.0, False)])
def test_equinox_rays_meet_a_south_wall_at_one_height(height, seen):
    """On the equinox the sun moves on the celestial equator, so every sun ray from P meets
    a vertical plane due south at distance D at the same height D·cot(latitude) above P
    (spherical astronomy: the sun's direction is perpendicular to the polar axis). A wall
    below that height hides no sun, one above it hides it all day."""
    site = read_site(TMY3_GREENSBORO)
    alt, az = sun_path(site, DAY, STEP)
    distance = 8.0
    top = POINT[0, 2] + distance / np.tan(np.radians(site.latitude)) + height
    wall = {"x": 3.5, "y": -distance - 0.5, "width": 400.0, "depth": 1.0, "height": top}
    hours = sunlight_hours(Scene(_room([wall])), POINT, OUT, alt, az, 180.0, MIN_ALTITUDE, STEP)
    open_hours = sunlight_hours(Scene(_room()), POINT, OUT, alt, az, 180.0, MIN_ALTITUDE, STEP)
    # the declination on 21 March 2023 is not exactly 0 (about +0.2°) and refraction lifts the
    # low sun (< 0.1° above 12°): the most oblique rays travel ~100 m to the wall, so the
    # height they meet it at moves by up to ~0.5 m; margins −0.5 / +1.0 m
    assert hours[0] == (open_hours[0] if seen else 0.0)


def test_north_window_in_march_gets_no_sun():
    """At 36° N on the equinox the sun rises and sets within a few degrees of due east and
    west and stands south at noon, so a north window sees it only near the horizon (below
    the minimum altitude): none (pvlib's path; common practice)."""
    site = read_site(TMY3_GREENSBORO)
    alt, az = sun_path(site, DAY, STEP)
    hours = sunlight_hours(Scene(_room()), POINT, OUT, alt, az, 0.0, MIN_ALTITUDE, STEP)
    assert hours[0] == 0.0
    assert sunlight_level(hours)[0] == 0


def test_levels_and_reference_height():
    # EN 17037 thresholds 1.5 / 3 / 4 h (from memory)
    assert sunlight_level(np.array([0.0, 1.49, 1.5, 2.99, 3.0, 3.99, 4.0, 9.0])).tolist() == [
        0, 0, 1, 1, 2, 2, 3, 3]
    # at least 1.2 m above the floor and 0.3 m above the sill, never above the head
    np.testing.assert_allclose(reference_height([0.0, 0.9, 1.5, 2.0], [2.1, 2.7, 2.4, 2.2]),
                               [1.2, 1.2, 1.8, 2.2])


def test_reference_points_are_on_the_glass_at_the_standard_height():
    # the window's own group gives the point the hand-made POINT above stands for
    found = window_reference_points(_room())
    np.testing.assert_allclose(found.points, POINT, atol=1e-9)
    np.testing.assert_allclose(found.normals, OUT, atol=1e-12)
    assert found.group == ("window_0",) and found.space.tolist() == [0]
    # a high sill: the point is 0.3 m above it (EN 17037, from memory); a roof
    # window has none
    high = dict(WINDOW, sill=1.4)
    roof = {"wall": "roof", "width": 1.0, "length": 1.0, "x": 3.5, "y": 3.0, "glazing": "main"}
    g = parametric_room(7.0, 6.0, 3.0, [high, roof], {"floor": 0.2, "walls": 0.5, "ceiling": 0.7},
                        {"main": 2})
    found = window_reference_points(g)
    assert found.group == ("window_0",)
    assert found.points[0, 2] == pytest.approx(1.7)


def test_reference_points_of_a_building_follow_each_space_and_skip_internal_glass():
    from luxsweep.kernels.geometry import parametric_building

    grey = {"floor": 0.2, "walls": 0.5, "ceiling": 0.7}
    lower = {"name": "lower", "origin": (0.0, 0.0, 0.0), "width": 7.0, "depth": 6.0,
             "height": 3.0, "thickness": 0.2, "reflectance": grey,
             "windows": [WINDOW, {"wall": "back", "width": 2.0, "sill": 2.0, "head": 2.6,
                                  "offset": 0.0, "glazing": "inner"}]}
    behind = dict(lower, name="behind", origin=(0.0, 6.2, 0.0), windows=[])
    upper = dict(lower, name="upper", origin=(0.0, 0.0, 3.2), windows=[WINDOW])
    g = parametric_building([lower, behind, upper], {"main": 2, "inner": 1},
                            internal_transmittance={"inner": 0.8})
    found = window_reference_points(g)
    # one point per outside window: the internal opening into 'behind' has none
    assert found.group == ("lower/window_0", "upper/window_0")
    np.testing.assert_allclose(found.points[:, 2], [1.2, 3.2 + 1.2])
    np.testing.assert_allclose(found.normals, np.repeat(OUT, 2, axis=0), atol=1e-12)
    assert [g.space_names[k] for k in found.space] == ["lower", "upper"]
    # a space is judged by its best window; a space without one gets 0
    hours = np.array([[1.0, 2.5], [4.0, 0.5]])  # two sun paths x two windows
    per_space = space_sunlight_hours(hours, np.array([0, 0]), 2)
    np.testing.assert_allclose(per_space, [[2.5, 0.0], [4.0, 0.0]])
