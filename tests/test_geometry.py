"""Geometry: parametric rooms, OBJ meshes, sensor grids (kernels/geometry.py).

References are analytic (areas of boxes and rectangles) unless stated otherwise.
"""

from __future__ import annotations

import json
import pickle
from pathlib import Path

import numpy as np
import pytest

from luxsweep.kernels.errors import GeometryError
from luxsweep.kernels.geometry import (
    GLASS_POSITION,
    MAX_SENSORS,
    OVERHANG_SLAB,
    Geometry,
    parametric_room,
    read_obj,
    read_sensors,
    sensor_grid,
    sensor_grid_on,
)
from luxsweep.kernels.raytrace import Scene
from luxsweep.sweep.plan import room_key

DATA = Path(__file__).parent / "data" / "geometry"
REFL = {"floor": 0.2, "walls": 0.5, "ceiling": 0.7}
W, D, H = 7.2, 8.0, 3.0
WINDOWS = [
    {"wall": "front", "width": 5.0, "sill": 0.9, "head": 2.7, "offset": 0.0, "glazing": "main"},
    {"wall": "left", "width": 2.0, "sill": 1.0, "head": 2.2, "offset": 1.5, "glazing": "side"},
    {"wall": "back", "width": 1.0, "sill": 0.0, "head": 2.1, "offset": -3.0, "glazing": "main"},
    {"wall": "roof", "width": 1.2, "length": 1.6, "x": 3.6, "y": 4.0, "glazing": "side"},
]
PANES = {"main": 2, "side": 1}
BOX_OBJ_MATERIALS = {
    "floor": {"reflectance": 0.2},
    "ceiling": {"reflectance": 0.7},
    "walls": {"reflectance": 0.5},
    "front": {"reflectance": 0.5},
    "window": {"glazing": "main", "panes": 2},
}


def room(**kw) -> Geometry:
    args = {"windows": WINDOWS, "reflectance": REFL, "glazing_panes": PANES}
    args.update(kw)
    return parametric_room(W, D, H, **args)


def window_area(w: dict) -> float:
    if w["wall"] == "roof":
        return w["width"] * w["length"]
    return w["width"] * (w["head"] - w["sill"])


def area(g: Geometry, *groups: str) -> float:
    return float(g.areas[g.group_mask(groups)].sum())


# ---------------------------------------------------------------- areas


@pytest.mark.parametrize("thickness", [0.0, 0.3])
def test_interior_plus_windows_equals_box_area(thickness):
    g = room(thickness=thickness)
    interior = ["floor", "ceiling", "wall_front", "wall_back", "wall_left", "wall_right"]
    windows = [f"window_{i}" for i in range(len(WINDOWS))]
    # analytic: surface of a W x D x H box; float sums of a few dozen triangles -> 1e-9 rel.
    assert area(g, *interior, *windows) == pytest.approx(2 * (W * D + W * H + D * H), rel=1e-9)


def test_each_window_area_is_width_times_height():
    g = room()
    for i, w in enumerate(WINDOWS):
        # analytic: width x (head - sill), or width x length on the roof
        assert area(g, f"window_{i}") == pytest.approx(window_area(w), rel=1e-12)


def test_thick_walls_add_facade_and_reveals_of_the_right_area():
    t = 0.3
    g = room(thickness=t)
    outer_box = 2 * ((W + 2 * t) * (H + t) + (D + 2 * t) * (H + t)) + (W + 2 * t) * (D + 2 * t)
    holes = sum(window_area(w) for w in WINDOWS)
    # analytic: outer box without its bottom, minus the window holes
    assert area(g, "facade") == pytest.approx(outer_box - holes, rel=1e-9)
    for i, w in enumerate(WINDOWS):
        a = w["width"]
        b = w["length"] if w["wall"] == "roof" else w["head"] - w["sill"]
        # analytic: the reveals line the hole: perimeter x wall thickness
        assert area(g, f"reveal_{i}") == pytest.approx(2 * (a + b) * t, rel=1e-9)
    # glass sits at GLASS_POSITION of the thickness (front window: y = -f t)
    glass = g.triangles[g.group_mask(["window_0"])]
    assert np.allclose(glass[..., 1], -GLASS_POSITION * t)
    inner = g.exterior[g.group_mask(["reveal_0"])]
    assert 0 < inner.sum() < inner.size  # reveals split at the glass: outer half exterior


def test_overhang_and_obstruction_boxes():
    g = room(overhang={"depth": 0.6, "gap": 0.1},
             obstructions=[{"x": 3.6, "y": -12.0, "width": 20.0, "depth": 4.0, "height": 9.0}])
    slab = g.triangles[g.group_mask(["overhang"])].reshape(-1, 3)
    # geometry as documented: under side at head + gap, projecting depth from the façade
    assert slab[:, 2].min() == pytest.approx(2.7 + 0.1)
    assert slab[:, 2].max() == pytest.approx(2.7 + 0.1 + OVERHANG_SLAB)
    assert slab[:, 1].min() == pytest.approx(-0.6)
    # analytic: 5 faces of a 5 x 0.6 x 0.05 box (the face against the façade left out)
    assert area(g, "overhang") == pytest.approx(2 * 5 * 0.6 + 5 * 0.05 + 2 * 0.6 * 0.05)
    # analytic: a box standing on the ground has 4 sides and a top
    assert area(g, "obstruction_0") == pytest.approx(20 * 4 + 2 * (20 + 4) * 9)
    assert np.all(g.exterior[g.group_mask(["overhang", "obstruction_0"])])


# --------------------------------------------------------------- normals


@pytest.mark.parametrize("thickness", [0.0, 0.25])
def test_room_surfaces_face_inward_and_glazing_outward(thickness):
    g = room(thickness=thickness)
    centre = np.array([W / 2, D / 2, H / 2])
    interior = ~g.exterior & ~g.is_glazing
    reveal = np.isin(g.group, [g.group_names.index(f"reveal_{i}") for i in range(4)]
                     if thickness else [])
    walls = interior & ~reveal
    to_centre = centre - g.triangles.mean(axis=1)
    # common practice for a convex box: inward normals point towards its centre
    assert np.all(np.sum(to_centre * g.normals, axis=1)[walls] > 0)
    assert np.all(np.sum(to_centre * g.normals, axis=1)[g.is_glazing] < 0)
    # and a ray from the centre to each wall triangle's centroid meets it from the inside
    idx = np.flatnonzero(walls)
    target = g.triangles[idx].mean(axis=1)
    tri, dist = Scene(g).first_hit(np.broadcast_to(centre, target.shape), target - centre)
    assert np.array_equal(tri, idx)
    assert np.allclose(dist, np.linalg.norm(target - centre, axis=1), rtol=1e-5)
    assert np.all(np.sum((target - centre) * g.normals[idx], axis=1) < 0)


def test_reveal_normals_point_into_the_opening():
    g = room(thickness=0.3)
    m = g.group_mask(["reveal_0"])  # front window: x in [1.1, 6.1], z in [0.9, 2.7]
    c = g.triangles[m].mean(axis=1)
    axis_point = np.column_stack([np.full(len(c), W / 2), c[:, 1], np.full(len(c), 1.8)])
    assert np.all(np.sum((axis_point - c) * g.normals[m], axis=1) > 0)


# -------------------------------------------------------------- validation


BAD_ROOMS = [
    ({"windows": [{**WINDOWS[0], "width": 8.0}]}, "windows.0.width"),
    ({"windows": [{**WINDOWS[0], "offset": 1.5}]}, "windows.0.offset"),
    ({"windows": [WINDOWS[0], {**WINDOWS[2], "sill": 2.5, "head": 2.0}]}, "windows.1.sill"),
    ({"windows": [{**WINDOWS[0], "sill": 1.0, "head": 1.0}]}, "windows.0.sill"),
    ({"windows": [{**WINDOWS[0], "head": 3.5}]}, "windows.0.head"),
    ({"windows": [{**WINDOWS[0], "wall": "north"}]}, "windows.0.wall"),
    ({"windows": [{**WINDOWS[0], "glazing": "tinted"}]}, "windows.0.glazing"),
    ({"windows": [WINDOWS[0], {**WINDOWS[0], "width": 1.0, "offset": 2.0}]}, "windows.1"),
    ({"windows": [{**WINDOWS[3], "x": 6.9}]}, "windows.0.x"),
    ({"windows": [{**WINDOWS[3], "length": -1.0}]}, "windows.0.length"),
    ({"reflectance": {**REFL, "walls": 1.0}}, "reflectance.walls"),
    ({"reflectance": {**REFL, "floor": -0.1}}, "reflectance.floor"),
    ({"thickness": -0.1}, "thickness"),
    ({"overhang": {"depth": 0.0, "gap": 0.1}}, "overhang.depth"),
    ({"windows": [WINDOWS[1]], "overhang": {"depth": 0.5, "gap": 0.1}}, "overhang"),
    ({"obstructions": [{"x": 3.0, "y": 1.0, "width": 2, "depth": 2, "height": 2}]},
     "obstructions.0"),
    ({"obstructions": [{"x": 3.0, "y": -9.0, "width": 2, "depth": 0, "height": 2}]},
     "obstructions.0.depth"),
    ({"glazing_panes": {"main": 1.5}}, "glazing_panes.main"),
]


@pytest.mark.parametrize(("change", "field"), BAD_ROOMS)
def test_validation_names_the_item(change, field):
    # the kernel names its own parameter; the engine maps it to the study-file key
    with pytest.raises(GeometryError) as err:
        room(**change)
    assert err.value.field == field
    assert field in str(err.value)
    key = room_key(field)
    assert key == (f"room.{field}" if not field.startswith("glazing_panes") else
                   "glazings.main.panes")


def test_bad_dimensions_and_wall_list_in_message():
    with pytest.raises(GeometryError, match=r"field 'height'"):
        parametric_room(W, D, 0.0, WINDOWS, REFL, PANES)
    with pytest.raises(GeometryError) as err:
        room(windows=[{**WINDOWS[0], "wall": "north"}])
    assert "front, back, left, right, roof" in str(err.value)


def test_model_dumps_with_none_for_unset_keys():
    # pydantic models dump unset optional keys as None: treated as absent
    wins = [{**WINDOWS[0], "length": None, "x": None, "y": None},
            {**WINDOWS[3], "sill": None, "head": None, "offset": 0.0}]
    g = room(windows=wins)
    assert area(g, "window_1") == pytest.approx(1.2 * 1.6)
    with pytest.raises(GeometryError) as err:
        room(windows=[{**WINDOWS[0], "sill": None}])
    assert err.value.field == "windows.0.sill"


def test_touching_windows_are_allowed():
    a = {"wall": "front", "width": 2.0, "sill": 1.0, "head": 2.0, "offset": -1.0, "glazing": "main"}
    b = {**a, "offset": 1.0}
    g = room(windows=[a, b])
    assert g.areas.min() > 1e-6  # no sliver triangles between the two windows
    # analytic: front wall area minus both windows
    assert area(g, "wall_front") == pytest.approx(W * H - 2 * 2.0 * 1.0)


# --------------------------------------------------------------- canonical


def test_canonical_is_json_stable_and_sensitive():
    a, b = room(), room()
    ca = json.dumps(a.canonical(), sort_keys=True)
    assert ca == json.dumps(b.canonical(), sort_keys=True)
    c = room(reflectance={**REFL, "walls": 0.55})
    assert json.dumps(c.canonical(), sort_keys=True) != ca
    d = room(windows=[{**WINDOWS[0], "width": 4.9}, *WINDOWS[1:]])
    assert json.dumps(d.canonical(), sort_keys=True) != ca
    e = pickle.loads(pickle.dumps(a))
    assert json.dumps(e.canonical(), sort_keys=True) == ca


def test_glazing_sets_sorted_with_panes():
    g = room()
    assert g.glazing_sets == ("main", "side")
    assert g.set_panes == (2, 1)
    assert set(np.unique(g.glazing_set_index[g.is_glazing])) == {0, 1}
    assert np.all(g.glazing_set_index[~g.is_glazing] == -1)


# --------------------------------------------------------------------- OBJ


def test_obj_unit_box_reads_back():
    g = read_obj(DATA / "unit_box.obj", BOX_OBJ_MATERIALS)
    # analytic: a unit cube has area 6, the window 0.5 x 0.5
    assert g.areas.sum() == pytest.approx(6.0, rel=1e-12)
    assert area(g, "window") == pytest.approx(0.25)
    assert area(g, "front") == pytest.approx(0.75)
    assert g.glazing_sets == ("main",)
    assert g.reflectance[g.group_mask(["ceiling"])] == pytest.approx(0.7)
    assert g.is_glazing.sum() == 2
    to_centre = 0.5 - g.triangles.mean(axis=1)
    assert np.all(np.sum(to_centre * g.normals, axis=1)[~g.is_glazing] > 0)


def test_obj_panes_from_glazing_sets():
    mats = {**BOX_OBJ_MATERIALS, "window": {"glazing": "main"}}
    g = read_obj(DATA / "unit_box.obj", mats, glazing_panes={"main": 3})
    assert g.set_panes == (3,)


def _write(tmp_path: Path, text: str) -> Path:
    p = tmp_path / "room.obj"
    p.write_text(text)
    return p


def test_obj_errors_name_file_line_and_group(tmp_path):
    with pytest.raises(GeometryError) as err:
        read_obj(DATA / "unit_box.obj", {k: v for k, v in BOX_OBJ_MATERIALS.items()
                                         if k != "walls"})
    assert err.value.field == "walls" and err.value.line == 20
    assert "unit_box.obj" in str(err.value)

    with pytest.raises(GeometryError) as err:
        read_obj(DATA / "unit_box.obj", {**BOX_OBJ_MATERIALS, "roof": {"reflectance": 0.3}})
    assert err.value.field == "materials.roof" and "no faces" in str(err.value)

    p = _write(tmp_path, "v 0 0 0\nv 1 0 0\nv 0 1 0\ng tri\nf 1 2 4\n")
    with pytest.raises(GeometryError) as err:
        read_obj(p, {"tri": {"reflectance": 0.5}})
    assert err.value.line == 5 and err.value.field == "tri"

    p = _write(tmp_path, "v 0 0 0\nv 1 zero 0\nv 0 1 0\nf 1 2 3\n")
    with pytest.raises(GeometryError) as err:
        read_obj(p, {"default": {"reflectance": 0.5}})
    assert err.value.line == 2

    p = _write(tmp_path, "v 0 0 0\nv 1 0 0\nv 0 1 0\nf 1 2 3\n")
    with pytest.raises(GeometryError) as err:
        read_obj(p, {"default": {"reflectance": 1.5}})
    assert err.value.field == "materials.default.reflectance"


def test_obj_negative_and_slash_indices(tmp_path):
    p = _write(tmp_path, "v 0 0 0\nv 2 0 0\nv 2 3 0\nv 0 3 0\nvn 0 0 1\ng floor\n"
                         "f -4//1 -3//1 -2//1 -1//1\n")
    g = read_obj(p, {"floor": {"reflectance": 0.2}})
    assert g.areas.sum() == pytest.approx(6.0)  # analytic: 2 m x 3 m quad
    assert np.allclose(g.normals, [0, 0, 1])


# ---------------------------------------------------------------- sensors


def test_sensor_grid_centred_rule():
    s = sensor_grid(7.2, 8.0, 0.8, 0.5, 0.5)
    xs, ys = np.unique(s[:, 0]), np.unique(s[:, 1])
    # rule: n = floor((L - 2m)/s) + 1 points, centred in [m, L - m]
    assert xs.size == 13 and ys.size == 15
    assert xs.min() - 0.0 == pytest.approx(7.2 - xs.max())
    assert ys.min() == pytest.approx(0.5) and ys.max() == pytest.approx(7.5)
    assert np.allclose(np.diff(xs), 0.5)
    assert np.allclose(s[:, 2], 0.8) and np.allclose(s[:, 3:], [0, 0, 1])


def test_sensor_grid_errors():
    with pytest.raises(GeometryError, match="no points") as err:
        sensor_grid(1.0, 1.0, 0.8, 0.5, 0.6)
    assert err.value.field == "grid.margin"
    with pytest.raises(GeometryError, match=str(MAX_SENSORS)) as err:
        sensor_grid(100.0, 100.0, 0.8, 0.1, 0.0)
    assert "1002001" in str(err.value) and err.value.field == "grid.spacing"


def test_sensor_grid_on_l_shaped_floor():
    g = read_obj(DATA / "l_floor.obj", {"floor": {"reflectance": 0.2}})
    s = sensor_grid_on(g, ["floor"], 0.75, 0.25, 0.3)
    x, y = s[:, 0], s[:, 1]
    # analytic: inside the L and more than 0.3 m from its outline
    assert np.all(np.minimum.reduce([x, y, 4 - x, 4 - y]) > 0.3)
    notch = np.where(x > 2 - 0.3, np.where(y > 2 - 0.3, np.hypot(x - 2, y - 2), 1.0), 1.0)
    assert np.all(notch > 0.3)
    assert np.all((x < 2 - 0.3) | (y < 2 - 0.3) | ((x < 2) & (y < 2)))
    assert np.allclose(s[:, 2], 0.75)
    # analytic count: the 17 x 17 grid over [0, 4]² (0.25 m) keeps x, y in 0.5 … 3.5
    # (13 x 13) away from the outer edges; of the 8 x 8 points with x, y ≥ 1.75 only
    # (1.75, 1.75) is more than 0.3 m from the notch (0.354 m from its corner)
    assert len(s) == 13 * 13 - 63
    with pytest.raises(GeometryError, match="no group named 'floors'"):
        sensor_grid_on(g, ["floors"], 0.75, 0.25, 0.3)


def test_read_sensors(tmp_path):
    p = tmp_path / "points.csv"
    p.write_text("x,y,z,nx,ny,nz\n1,2,0.8,0,0,2\n\n3,4,0.8,0,1,0\n")
    s = read_sensors(p)
    assert s.shape == (2, 6) and np.allclose(s[0, 3:], [0, 0, 1])
    p.write_text("1,2,0.8,0,0,1\n3,4,oops,0,0,1\n")
    with pytest.raises(GeometryError) as err:
        read_sensors(p)
    assert err.value.line == 2 and "points.csv" in str(err.value)
    p.write_text("1,2,0.8,0,0,0\n")
    with pytest.raises(GeometryError, match="zero length") as err:
        read_sensors(p)
    assert err.value.line == 1
    p.write_text("1,2,0.8,0,0\n")
    with pytest.raises(GeometryError, match="six") as err:
        read_sensors(p)
