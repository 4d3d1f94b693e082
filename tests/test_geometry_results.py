"""EN 17037 exposure to sunlight and view out through the sweep (study file -> store).

The metric families ``sunlight`` and ``view_out`` are computed by the series task
(sweep.run._geometry_results) from the task's real geometry; these tests run real
studies in this process (real coefficients at coarse settings, a real TMY3 year) and
check the stored values against outside references:
- pvlib.solarposition.get_solarposition (NREL SPA, Reda & Andreas 2004) for the sun's
  path of an unobstructed south window;
- spherical astronomy for a wall that hides all the equinox sun (on the equinox every
  sun ray from a point meets a vertical plane due south at distance D at the height
  D·cot(latitude) above the point);
- plane geometry for the horizontal sight angle (2 atan-type angles of a window seen
  from a point) and the outside distance of view to a wall parallel to the façade;
- the EN 17037:2018 thresholds (from memory): sunlight 1.5 / 3 / 4 h, sight angle
  14 / 28 / 54°, distance 6 / 20 / 50 m.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pvlib
import pytest
import xarray as xr
import yaml
from conftest import TMY3_GREENSBORO, run_plan_in_process, write_tiny_study

from luxsweep.kernels.climate import read_site
from luxsweep.kernels.raytrace import Scene

MIN_ALTITUDE = 12.0  # deg, a test value (the standard's is tabulated by latitude)
EQUINOX = pd.Timestamp("2023-03-21")
SUN = f'sunlight: {{day: "03-21", min_altitude: {MIN_ALTITUDE}}}\n'
SUNLIGHT_LEVEL_HOURS = (1.5, 3.0, 4.0)  # EN 17037:2018 (from memory)
WALL = 15.0  # m from the façade to the face of the wall in front of the building


def _run(study_path, folder):
    """Plan and run every series task of a study in this process; the store, opened."""
    from luxsweep.sweep.cache import CoefficientCache
    from luxsweep.sweep.config import load_study
    from luxsweep.sweep.plan import make_plan

    cache = CoefficientCache(folder / "cache")
    plan = make_plan(load_study(study_path), cache)
    results = folder / "results.zarr"
    run_plan_in_process(plan, results, cache.root)
    return xr.open_zarr(results), plan


def _pvlib_path(site):
    """Apparent altitude and azimuth from pvlib at the middle of every minute of the equinox."""
    times = (pd.date_range(EQUINOX, periods=1440, freq="1min") + pd.Timedelta("30s"))
    pos = pvlib.solarposition.get_solarposition(times.tz_localize(site.tz), site.latitude,
                                                site.longitude, altitude=site.elevation)
    return pos["apparent_elevation"].to_numpy(), pos["azimuth"].to_numpy()


def _met_by_three_quarters(values):
    """The value met from 7 of 9 view positions (3/4 of them, our own reading of EN 17037)."""
    return np.sort(np.asarray(values, dtype=float))[::-1][6]


def _window_angles(xs, ys, left, right):
    """Horizontal angle [deg] a window from x = left to right on the wall y = 0 subtends at
    plan points (x, y), y > 0 (plane geometry)."""
    return np.degrees(np.arctan2(right - xs, ys) - np.arctan2(left - xs, ys))


def _positions(width, depth, y0=0.0):
    """The nine view positions of a box space: centres of a 3 × 3 cut of its floor."""
    f = (np.arange(3) + 0.5) / 3
    xx, yy = np.meshgrid(f * width, y0 + f * depth)
    return xx.ravel(), yy.ravel()


@pytest.fixture(scope="module")
def room(tmp_path_factory):
    """The tiny 3 × 3 m room of conftest (a 1.5 m front window, no reveals, nothing
    outside), east and south, with sunlight and view out."""
    folder = tmp_path_factory.mktemp("sun-view-room")
    study = write_tiny_study(folder / "study", name="sun-view-room", climates=("coastal",),
                             transmittances=(0.7,),
                             extra="metrics: [daylight_factor, en17037, sunlight, view_out]\n"
                                   + SUN)
    return _run(study, folder)


def test_open_south_and_east_windows_get_the_sun_pvlib_gives(room):
    ds, _ = room
    site = read_site(TMY3_GREENSBORO)
    alt, az = _pvlib_path(site)
    for v in range(ds.sizes["variant"]):
        orientation = float(ds["orientation"].values[v])
        # no obstruction and no reveal: the sun counts whenever it is at or above the
        # minimum altitude in front of the façade (half-plane test on pvlib's azimuth)
        front = np.cos(np.radians(az - orientation)) > 0
        expected = np.count_nonzero((alt >= MIN_ALTITUDE) & front) / 60.0
        hours = float(ds["space_sunlight_hours"].values[v, 0])
        assert hours == pytest.approx(expected, abs=2 / 60)  # 2 one-minute steps
        level = int(np.searchsorted(SUNLIGHT_LEVEL_HOURS, expected, side="right"))
        assert int(ds["space_sunlight_level"].values[v, 0]) == level
        # one space: the building is that space
        assert float(ds["sunlight_hours"].values[v]) == hours
    # east about half the south window's time; both at least 4 h: high (from memory)
    by_orientation = dict(zip(ds["orientation"].values.tolist(),
                              ds["sunlight_hours"].values.tolist(), strict=True))
    south, east = by_orientation[180.0], by_orientation[90.0]
    assert 7.0 < south < 11.0 and 4.0 < east < south


def test_store_holds_what_the_kernels_give_for_the_task_geometry(room):
    from luxsweep.kernels import sunlight as ks
    from luxsweep.kernels import view as kv

    ds, plan = room
    job = next(iter(plan.jobs.values()))
    scene = Scene(job.geometry)
    site = read_site(TMY3_GREENSBORO)
    alt, az = ks.sun_path(site, EQUINOX.date(), 1.0)
    points = ks.window_reference_points(job.geometry)
    for v in range(ds.sizes["variant"]):
        hours = ks.sunlight_hours(scene, points.points, points.normals, alt, az,
                                  float(ds["orientation"].values[v]), MIN_ALTITUDE, 1.0)
        assert ds["space_sunlight_hours"].values[v, 0] == np.float32(hours.max())
    lo, hi = job.geometry.space_boxes[0]
    view = kv.space_view(kv.view_out(scene, kv.view_positions(lo, hi), 0.5, 2.0),
                         np.zeros(9, int), 1)
    assert (ds["space_view_angle"].values[:, 0] == np.float32(view.sight_angle[0])).all()
    assert (ds["space_view_level"].values[:, 0] == view.level[0]).all()


def test_view_angle_of_the_open_room_follows_plane_geometry(room):
    ds, _ = room
    xs, ys = _positions(3.0, 3.0)
    angles = _window_angles(xs, ys, 0.75, 2.25)  # 1.5 m window centred on the 3 m wall
    expected = _met_by_three_quarters(angles)
    # the fan is 0.5° apart: each edge of the opening is found within half a step
    np.testing.assert_allclose(ds["space_view_angle"].values[:, 0], expected, atol=0.5)
    # the same from every orientation: view out is geometry only
    assert np.unique(ds["view_angle"].values).size == 1
    # nothing outside: no distance limit; sky (up through the window), the landscape
    # (ground beyond 50 m seen just below the horizon) and the near ground are all seen
    assert np.isinf(ds["view_distance"].values).all()
    assert (ds["view_layers"].values == 3).all()
    # sight angle 28–54° -> medium (EN 17037, from memory); distance and layers: high
    assert 28.0 < expected < 54.0
    assert (ds["view_level"].values == 2).all()


@pytest.fixture(scope="module")
def building(tmp_path_factory):
    """Two spaces facing south: 'south' (4 × 3 m, a 1.5 m front window) and 'inner'
    behind it (3 × 2 m, no window at all), a long wall 15 m in front whose top stands 2 m
    above the height where the equinox sun rays from the reference point meet it (the
    declination on 21 March 2023 is about +0.2°, so the most oblique rays, ~200 m long,
    meet it up to ~0.7 m higher; refraction lifts the 12° sun by < 0.1°)."""
    folder = tmp_path_factory.mktemp("sun-view-building")
    study = write_tiny_study(folder / "study", name="sun-view-building", orientations=(180.0,),
                             climates=("coastal",), transmittances=(0.7,),
                             extra="metrics: [en17037, sunlight, view_out]\n" + SUN)
    tree = yaml.safe_load(study.read_text())
    room = tree.pop("room")
    latitude = read_site(TMY3_GREENSBORO).latitude
    reference = 1.2  # m: max(sill + 0.3, 1.2) with a 0.9 m sill (EN 17037, from memory)
    top = reference + WALL / np.tan(np.radians(latitude)) + 2.0
    tree["spaces"] = [
        {**room, "name": "south", "origin": [0.0, 0.0, 0.0], "width": 4.0, "depth": 3.0},
        {**room, "name": "inner", "origin": [0.0, 3.0, 0.0], "width": 3.0, "depth": 2.0,
         "windows": []},
    ]
    tree["obstructions"] = [{"x": 2.0, "y": -WALL - 0.5, "width": 400.0, "depth": 1.0,
                             "height": float(top)}]
    study.write_text(yaml.safe_dump(tree, sort_keys=False))
    ds, _ = _run(study, folder)
    return ds, top


def test_wall_above_the_equinox_ray_height_hides_all_sun(building):
    ds, _ = building
    south = list(ds["space"].values).index("south")
    # spherical astronomy (equinox): every sun ray from the point meets the wall below its
    # top, so no sun reaches the window on that day (the open window gets ~10 h, above)
    assert ds["space_sunlight_hours"].values[0, south] == 0.0
    assert ds["sunlight_level"].values[0] == 0


def test_space_without_window_has_no_sun_and_no_view(building):
    ds, _ = building
    inner = list(ds["space"].values).index("inner")
    assert ds["space_sunlight_hours"].values[0, inner] == 0.0
    assert ds["space_view_angle"].values[0, inner] == 0.0
    assert ds["space_view_distance"].values[0, inner] == 0.0
    assert ds["space_view_layers"].values[0, inner] == 0
    assert ds["space_view_level"].values[0, inner] == 0
    # the building takes its lowest space (like en17037_level, CONTRACT.md §3)
    assert ds["view_level"].values[0] == 0 and ds["view_angle"].values[0] == 0.0


def test_view_from_the_south_space_is_cut_by_the_wall(building):
    ds, top = building
    south = list(ds["space"].values).index("south")
    xs, ys = _positions(4.0, 3.0)
    left, right = 1.25, 2.75  # the 1.5 m window centred on the 4 m wall
    angles = _window_angles(xs, ys, left, right)
    assert ds["space_view_angle"].values[0, south] == pytest.approx(
        _met_by_three_quarters(angles), abs=0.5)
    # plane geometry: a horizontal ray at angle θ from the façade normal travels D / cos θ
    # from the glass (y = 0) to the wall face (y = −D); the median over the rays through
    # the window is D / cos of the median |θ| (monotone), θ uniform between the edges
    distances = []
    for x, y in zip(xs, ys, strict=True):
        theta = np.linspace(np.arctan2(left - x, y), np.arctan2(right - x, y), 2001)
        distances.append(WALL / np.cos(np.median(np.abs(theta))))
    assert ds["space_view_distance"].values[0, south] == pytest.approx(
        _met_by_three_quarters(distances), rel=0.01)
    # sky above the wall only through the window's upper edge from the front row (eye
    # 1.2 m, head 2.1 m): from y = 0.5 the head is at atan(0.9 / 0.5) = 61° and the wall
    # top at atan((top − 1.2) / (D + 0.5)) ≈ 55°; from y = 1.5 at 31°, under the wall top.
    # The ground before the wall: below the sill (0.3 m under the eye) from every row, the
    # back row's down to atan(0.3 / 2.5) = 6.8°, meeting the ground 10 m away, before the
    # wall (D + 2.5 m). So 3 of 9 positions see sky, landscape (the wall) and ground, the
    # rest two layers: 2 from three quarters (the rays are 2° apart: margins above 2°)
    assert np.degrees(np.arctan(0.9 / 0.5)) > np.degrees(np.arctan((top - 1.2) / (WALL + 0.5))) + 4
    assert np.degrees(np.arctan(0.9 / 1.5)) < np.degrees(np.arctan((top - 1.2) / (WALL + 1.5))) - 4
    assert np.degrees(np.arctan(1.2 / (WALL + 2.5))) < np.degrees(np.arctan(0.3 / 2.5)) - 2
    assert ds["space_view_layers"].values[0, south] == 2
    # distance 6–20 m: minimum (EN 17037, from memory) rules over angle and layers
    assert 6.0 < _met_by_three_quarters(distances) < 20.0 and _met_by_three_quarters(angles) > 14
    assert ds["space_view_level"].values[0, south] == 1


def test_rank_and_report_read_the_space_results(building):
    from luxsweep.sweep.rank import rank_table
    from luxsweep.sweep.report import build_report

    ds, _ = building
    # a criterion on every space: 'inner' has no window, so the variant fails there only
    spec = {"require": [{"metric": "view_level", "at_least": 1, "spaces": "all"}]}
    row = rank_table(ds, spec).iloc[0]
    assert row["status"] == "fail" and row["failed_spaces"] == "inner"
    row = rank_table(ds, {"require": [{"metric": "view_level", "at_least": 1,
                                       "spaces": "south"}]}).iloc[0]
    assert row["status"] == "pass"
    # without a rank section the table shows the levels among the main metrics
    table = rank_table(ds, {})
    assert {"sunlight_level", "view_level"} <= set(table.columns)
    html = build_report(ds)
    spaces = html.split('<section class="spaces">')[1].split("</section>")[0]
    assert "sunlight level" in spaces and "view-out level" in spaces
    inner = spaces.split(">inner<")[1]
    assert "view-out level 0 none" in inner and "sunlight hours 0 h" in inner
    # the summary's line for the best variant: the building's (lowest space's) levels
    assert "Its EN 17037 levels (the lowest space): exposure to sunlight 0 none (0 h); " \
           "view out 0 none." in html
    notes = html.split('<section class="notes">')[1]
    assert "EN 17037 exposure to sunlight" in notes and "EN 17037 view out" in notes


def test_an_open_view_ranks_as_the_longest_distance(room):
    # nothing outside the room: the outside distance of view is infinite; as an objective
    # it must still score (an infinite distance is at least as good as any other)
    from luxsweep.sweep.rank import rank_table

    ds, _ = room
    assert np.isinf(ds["view_distance"].values).all()
    table = rank_table(ds, {"prefer": [{"metric": "view_distance", "goal": "max"},
                                       {"metric": "sunlight_hours", "goal": "max"}]})
    best = table.iloc[0]
    assert best["orientation"] == 180.0  # more sun on the equinox (pvlib check above)
    np.testing.assert_allclose(table.sort_values("orientation")["score"], [0.5, 1.0])


def test_space_value_is_met_from_three_quarters_of_its_positions():
    # our own reading of EN 17037 (the view of the utilised area, from memory): a space has
    # the largest value that at least 3/4 of its positions reach; counted by hand here
    from luxsweep.kernels.view import ViewOut, space_view, view_positions

    angles = np.array([60.0, 10.0, 30.0, 20.0, 50.0, 40.0, 70.0, 80.0, 90.0,  # space 0
                       30.0, 30.0, 30.0, 5.0])  # space 1: 3 of 4 reach 30°
    distance = np.array([np.inf] * 8 + [np.nan, 25.0, 25.0, 25.0, 25.0])
    n = angles.size
    view = ViewOut(angles, distance, np.ones(n, bool), np.ones(n, bool), np.ones(n, bool))
    space = np.repeat([0, 1], [9, 4])
    got = space_view(view, space, 3)
    # space 0: 7 of 9 positions reach 30° (the sorted values from the top: 90 … 30);
    # a position without view out counts as distance 0, so 8 of 9 reach inf
    assert got.sight_angle.tolist() == [30.0, 30.0, 0.0]
    assert got.distance.tolist() == [np.inf, 25.0, 0.0]  # space 2 has no positions: 0
    # levels (EN 17037, from memory: 14/28/54°, 6/20/50 m) are those of the positions: in
    # space 0 they are 3 (60°), 0 (10°), 2 (30°), 1 (20°), 2, 2, 3, 3 and 0 (no view out at
    # 90°), so 7 of 9 reach level 1 only — lower than the level of its values (30°, inf);
    # space 1: 30° and 25 m give medium at 3 of 4 positions
    assert got.level.tolist() == [1, 2, 0] and got.layers.tolist() == [3, 3, 0]
    # the nine positions: centres of a 3 × 3 cut of the floor, at eye height 1.2 m above it
    p = view_positions(np.array([1.0, 2.0, 3.0]), np.array([4.0, 8.0, 6.0]))
    assert p[:, 0].tolist() == [1.5, 2.5, 3.5] * 3
    assert p[:, 1].tolist() == [3.0] * 3 + [5.0] * 3 + [7.0] * 3
    assert (p[:, 2] == 4.2).all()


def test_editing_the_sunlight_settings_changes_the_study_hash(tmp_path):
    # a store begun with one sunlight day must not be finished with another (mixed results)
    from luxsweep.sweep.config import load_study
    from luxsweep.sweep.expand import expand, study_hash

    hashes = []
    for day in ("03-21", "02-01"):
        study = write_tiny_study(tmp_path / day, transmittances=(0.7,), climates=("coastal",),
                                 extra="metrics: [en17037, sunlight]\n"
                                       f'sunlight: {{day: "{day}", min_altitude: 12}}\n')
        loaded = load_study(study)
        variants = expand(loaded)
        hashes.append((study_hash(loaded, variants), list(variants.ids)))
    assert hashes[0][0] != hashes[1][0]
    assert hashes[0][1] == hashes[1][1]  # the variants themselves are the same
