"""View out (kernels.view) against plane geometry."""

from __future__ import annotations

import numpy as np
import pytest

from luxsweep.kernels.geometry import parametric_room
from luxsweep.kernels.raytrace import Scene
from luxsweep.kernels.view import ViewOut, view_level, view_out

REFLECTANCE = {"floor": 0.2, "walls": 0.5, "ceiling": 0.7}


def room(window_width: float = 2.0, sill: float = 0.9, head: float = 2.1,
         obstructions=()) -> Scene:
    # 6 x 5 x 3 m, one window centred on the front wall (y = 0, outside is y < 0)
    windows = [{"wall": "front", "width": window_width, "sill": sill, "head": head,
                "offset": 0.0, "glazing": "main"}]
    return Scene(parametric_room(6.0, 5.0, 3.0, windows, REFLECTANCE, {"main": 2},
                                 obstructions=obstructions))


@pytest.mark.parametrize(("width", "depth"), [(2.0, 2.0), (2.0, 4.0), (4.0, 1.5)])
def test_sight_angle_is_the_angle_the_window_subtends(width, depth):
    # plane geometry: a window of width w centred at distance D subtends 2 atan(w / 2D)
    view = view_out(room(width), [[3.0, depth, 1.2]], step=0.1)
    expected = np.degrees(2.0 * np.arctan(width / (2.0 * depth)))
    assert abs(view.sight_angle[0] - expected) <= 0.2  # two fan steps


def test_outside_distance_is_the_median_ray_length_to_a_parallel_wall():
    # a wide, tall box whose face is parallel to the facade at L = 10 m: a ray at
    # angle t from the facade normal travels L / cos t beyond the glass; the rays are
    # evenly spread over +-a, so the median |t| is a / 2 (plane geometry)
    L, depth = 10.0, 2.0
    wall = [{"x": 3.0, "y": -L - 2.5, "width": 200.0, "depth": 5.0, "height": 40.0}]
    view = view_out(room(2.0, obstructions=wall), [[3.0, depth, 1.2]], step=0.05)
    a = np.arctan(1.0 / depth)
    assert view.distance[0] == pytest.approx(L / np.cos(a / 2.0), rel=0.01)
    assert view.landscape[0] and not view.sky[0]  # 40 m high at 10 m hides all sky
    # in the open nothing is in the way
    assert np.isinf(view_out(room(2.0), [[3.0, depth, 1.2]]).distance[0])


def test_layers_in_the_open_and_behind_a_near_wall():
    # open site, sill 0.3 m, head 2.4 m: sky above, ground below, and the distant
    # ground beyond the horizon distance is the landscape
    eye = [[3.0, 2.0, 1.2]]
    open_site = view_out(room(2.0, sill=0.3, head=2.4), eye)
    assert open_site.sky[0] and open_site.landscape[0] and open_site.ground[0]
    assert open_site.layers[0] == 3
    # with a high sill (1.5 m) a seated eye sees only upwards: sky, no ground,
    # no landscape (every ray through the window climbs)
    high = view_out(room(2.0, sill=1.5, head=2.7), eye)
    assert high.sky[0] and not high.ground[0] and not high.landscape[0]
    assert high.sight_angle[0] == 0.0  # the horizontal plane through the eye meets no glass
    # a 40 m wall 5 m out hides the sky (steepest ray through the head: 31 deg); the
    # lowest rays (sill 0.3 m: -24 deg) reach the ground 2.7 m from the eye, before it
    wall = [{"x": 3.0, "y": -7.5, "width": 200.0, "depth": 5.0, "height": 40.0}]
    near = view_out(room(2.0, sill=0.3, head=2.4, obstructions=wall), eye)
    assert not near.sky[0] and near.landscape[0] and near.ground[0]


def test_no_view_out_of_a_closed_room():
    # no window: no sight angle, no distance, no layer, level none
    closed = Scene(parametric_room(6.0, 5.0, 3.0, [], REFLECTANCE, {"main": 2}))
    view = view_out(closed, [[3.0, 2.5, 1.2]])
    assert view.sight_angle[0] == 0.0 and np.isnan(view.distance[0])
    assert view.layers[0] == 0 and view_level(view)[0] == 0


def test_level_is_the_lowest_of_the_three_criteria():
    # EN 17037 view-out thresholds (from memory): angle 14/28/54 deg,
    # distance 6/20/50 m, layers landscape / +1 / all three
    t, f = True, False
    view = ViewOut(sight_angle=np.array([60.0, 60.0, 30.0, 60.0, 10.0]),
                   distance=np.array([np.inf, 25.0, np.inf, np.inf, np.inf]),
                   sky=np.array([t, t, t, t, t]), landscape=np.array([t, t, t, f, t]),
                   ground=np.array([t, t, t, t, t]))
    assert view_level(view).tolist() == [3, 2, 2, 0, 0]
