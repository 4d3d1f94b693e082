"""Buildings of several spaces in the study file (CONTRACT.md §1b): ``spaces:``, copies,
``vary`` into a space by name, the geometry and sensors the plan builds, bad inputs.

Physics checks name their outside reference beside the assertion.
"""

from __future__ import annotations

import shutil
import textwrap
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from conftest import TMY3_GREENSBORO, write_tiny_study

from luxsweep.kernels.coefficients import Settings, coefficient_key, compute_coefficients
from luxsweep.kernels.geometry import parametric_room, sensor_grid
from luxsweep.kernels.sky import overcast_sky_vector, patch_scheme
from luxsweep.sweep.config import Study, json_schema, load_study
from luxsweep.sweep.errors import StudyFileError
from luxsweep.sweep.labels import axis_label
from luxsweep.sweep.plan import build_geometry, make_plan, space_key

HEAD = """\
name: alder-test
climates:
  coastal: climates/coastal.csv
glazings:
  main: {transmittance: 0.7, panes: 2}
  inner: {transmittance: 0.8, panes: 1}
grid: {height: 0.8, spacing: 1.0, margin: 0.5}
compute: {subdivision: 1, sun_spacing: 10.0, sky_rays_per_patch: 4, ground_rays: 16,
          element_size: 1.5, element_rays: 16, sensor_rays: 32}
"""

SPACES = """\
spaces:
  - name: classroom
    origin: [0.0, 0.0, 0.0]
    width: 6.0
    depth: 5.0
    height: 3.0
    thickness: 0.2
    windows:
      - {wall: front, width: 4.0, sill: 0.9, head: 2.7, glazing: main}
      - {wall: back, width: 1.0, sill: 2.0, head: 2.6, glazing: inner}
    copies: {count: 3, step: [6.2, 0.0, 0.0]}
  - name: corridor
    origin: [0.0, 5.2, 0.0]
    width: 18.4
    depth: 2.0
    height: 3.0
    thickness: 0.2
    occupied: false
  - name: hall
    origin: [19.0, 0.0, 0.0]
    width: 8.0
    depth: 7.2
    height: 4.0
    thickness: 0.2
    windows:
      - {wall: roof, width: 1.2, length: 1.2, x: 4.0, y: 3.6, glazing: main}
    grid: {height: 0.7, spacing: 2.0, margin: 1.0}
"""


def write(folder: Path, text: str) -> Path:
    """A study file ``text`` in ``folder`` beside a real TMY3 year (pvlib's Greensboro file)."""
    (folder / "climates").mkdir(parents=True, exist_ok=True)
    shutil.copyfile(TMY3_GREENSBORO, folder / "climates" / "coastal.csv")
    path = folder / "study.yaml"
    path.write_text(text)
    return path


def study_text(vary: str = "", spaces: str = SPACES, extra: str = "") -> str:
    return HEAD + spaces + extra + (f"vary:\n{textwrap.indent(vary, '  ')}" if vary else "")


# ------------------------------------------------------------------ parsing and building


def test_spaces_study_builds_the_building(tmp_path):
    loaded = load_study(write(tmp_path, study_text()))
    study = loaded.study
    assert [s.name for s in study.spaces] == ["classroom", "corridor", "hall"]
    assert Study.model_validate(study.canonical(), context={"base": str(tmp_path)}) == study
    geometry, sensors, layout = build_geometry(study)
    names = ("classroom-1", "classroom-2", "classroom-3", "corridor", "hall")
    assert geometry.space_names == names
    # copies: the k-th shifted by (k − 1) × step (CONTRACT.md §1b)
    np.testing.assert_allclose(geometry.space_boxes[:3, 0, 0], [0.0, 6.2, 12.4])
    # only occupied spaces carry sensors, in study order with copies expanded
    assert layout.names == ("classroom-1", "classroom-2", "classroom-3", "hall")
    np.testing.assert_allclose(layout.area, [30.0, 30.0, 30.0, 57.6])  # width × depth
    per_space = np.bincount(layout.sensor_space)
    # the classrooms use the study grid, the hall its own (kernels.geometry.sensor_grid)
    assert per_space.tolist() == [len(sensor_grid(6.0, 5.0, 0.8, 1.0, 0.5))] * 3 + [
        len(sensor_grid(8.0, 7.2, 0.7, 2.0, 1.0))]
    # every sensor lies inside its own space's box, at its grid's height above its floor
    boxes = geometry.space_boxes[[names.index(n) for n in layout.names]][layout.sensor_space]
    assert np.all((sensors[:, :3] > boxes[:, 0]) & (sensors[:, :3] < boxes[:, 1]))
    np.testing.assert_allclose(sensors[:, 2] - boxes[:, 0, 2],
                               np.where(layout.sensor_space == 3, 0.7, 0.8))
    # the back windows open into the corridor: internal openings of set 'inner'
    assert geometry.internal_sets == ("inner",) and geometry.glazing_sets == ("main",)


def test_schema_lists_spaces():
    schema = json_schema()
    assert {"Space", "Copies", "MeshSpace"} <= set(schema["$defs"])
    assert "spaces" in schema["properties"] and "obstructions" in schema["properties"]


# ------------------------------------------------------------------ room studies unchanged


# variant ids of write_tiny_study(widths=(1.5, 2.0)) in store order, computed by the code
# before `spaces:` existed (main at 8235e35): a room study keeps its ids and its stores
ROOM_IDS = ['56b7788cf4abbdea', 'a4dbd541cd777bcc', 'ac316717a9d64227', '7b4a4dd3bf513739',
            '84019dff96dc2bf5', '16b56e3de0997dd1', 'f744e18255a9b658', 'd368f0e2d5d10895',
            '3b2b45bdbef54333', 'e39fb92e3026b8fb', '3962121307d50548', '3f1fd9ce646504f2',
            '4d783b9046bcad32', '5df03ca57171f98c', 'd81aa0214258695b', '3abd834672e5a75a']


def test_room_study_keeps_its_ids_and_keys(tmp_path):
    loaded = load_study(write_tiny_study(tmp_path, widths=(1.5, 2.0)))
    assert not {"spaces", "obstructions", "mesh_spaces"} & set(loaded.study.canonical())
    plan = make_plan(loaded, read_climates=False)
    assert [v.variant_id for v in plan.variants] == ROOM_IDS
    # the keys are those of the room built by the kernel directly (not via spaces)
    for v, key in zip(plan.variants, plan.keys, strict=True):
        r = v.study.room
        room = parametric_room(r.width, r.depth, r.height, [w.model_dump() for w in r.windows],
                               r.reflectance.model_dump(), {"main": 2})
        grid = sensor_grid(r.width, r.depth, 0.8, 1.0, 0.5)
        settings = Settings(**v.study.compute.settings_kwargs())
        assert key == coefficient_key(room, grid, settings)
    assert plan.layouts[0].names == ("room",)


# ------------------------------------------------------------------ vary into spaces


def test_vary_reaches_every_copy(tmp_path):
    vary = ("spaces.classroom.windows.0.width: [3.0, 4.0]\n"
            "glazings.main.transmittance: [0.7, 0.5]\n")
    plan = make_plan(load_study(write(tmp_path, study_text(vary))), read_climates=False)
    assert len(plan.variants) == 4
    assert len(plan.jobs) == 2  # one coefficient set per building variant
    for v, key in zip(plan.variants, plan.keys, strict=True):
        width = v.axes["spaces.classroom.windows.0.width"]
        geometry = plan.jobs[key].geometry
        glass = geometry.is_glazing & (geometry.glazing_set_index == 0)
        for k in range(3):  # every copy's front window is the varied width (× 1.8 m high)
            area = geometry.areas[glass & (geometry.space == k)].sum()
            assert area == pytest.approx(width * 1.8, rel=1e-9)
        assert set(plan.jobs[key].variants) == {
            u.index for u in plan.variants
            if u.axes["spaces.classroom.windows.0.width"] == width}


def test_internal_transmittance_enters_the_key(tmp_path):
    # internal openings bake their set's transmittance into the coefficients (kernels.geometry
    # module notes): varying it is a new coefficient set, varying an outside set is not
    inner = make_plan(load_study(write(tmp_path / "a", study_text(
        "glazings.inner.transmittance: [0.8, 0.4]\n"))), read_climates=False)
    assert len(inner.jobs) == 2 and len(set(inner.keys)) == 2
    for v, key in zip(inner.variants, inner.keys, strict=True):
        baked = inner.jobs[key].geometry.internal_transmittance
        assert np.nanmax(baked) == v.axes["glazings.inner.transmittance"]
    outer = make_plan(load_study(write(tmp_path / "b", study_text(
        "glazings.main.transmittance: [0.7, 0.4]\n"))), read_climates=False)
    assert len(outer.jobs) == 1 and len(outer.tasks[0].rows) == 2


def test_labels_name_the_space():
    assert axis_label("spaces.classroom.windows.0.width") == "classroom window width [m]"
    assert axis_label("spaces.hall.reflectance.walls") == "hall walls reflectance"


def test_space_key_maps_copies_back(tmp_path):
    # the kernel numbers spaces after copies are expanded; errors name the study-file key
    study = load_study(write(tmp_path, study_text())).study
    assert space_key("spaces.2.windows.0.width", study) == "spaces.0.windows.0.width"
    assert space_key("spaces.2.origin", study) == "spaces.0.copies.step"
    assert space_key("spaces.0.origin", study) == "spaces.0.origin"
    assert space_key("spaces.3.width", study) == "spaces.1.width"
    assert space_key("spaces.4.windows.0", study) == "spaces.2.windows.0"
    assert space_key("internal_transmittance.inner", study) == "glazings.inner.transmittance"


# ------------------------------------------------------------------ physics


def _overcast_parts(coeffs):
    """Direct and reflected daylight factor [%] per sensor under the CIE overcast sky
    (ρ_g 0.2), glazing set 0 at unit transmittance."""
    v = overcast_sky_vector(patch_scheme(coeffs.subdivision), 0.2)
    return tuple(100.0 * (part[0].astype(np.float64) @ v)
                 for part in (coeffs.sky_direct, coeffs.sky_reflected))


def test_classrooms_sharing_a_wall_equal_the_room_alone(tmp_path):
    # Symmetry (common practice): two identical classrooms side by side (a `copies:` row), each
    # with its own front window, share an opaque 0.3 m wall whose two faces keep each room's
    # wall reflectance; their façades are flush. The room alone (a `room:` study) has an
    # exterior wall there instead. An opaque wall passes no light either way, its interior
    # face is the same, and the neighbour's flush façade blocks nothing the window sees, so
    # each classroom's sensors must get the room-alone coefficients. The comparison is about
    # interior light only: the outside of that wall (sunlit alone, buried in the pair) is not
    # seen by any sensor. Each classroom's sensors are computed as their own block, so the
    # direct rays are the same rays as alone (translated by the copy step): equal to float
    # rounding. Reflected light is sampled over a different set of surface elements (the
    # pair has more), so it agrees within sampling noise: measured at these settings over 4
    # seeds of the room alone, seed-to-seed standard deviation of the reflected daylight
    # factor 1.1 % on the grid mean and at most 3.8 % per sensor (reflected ≈ 22 % of the
    # total). Allowed: 5 % on the mean reflected part (> 3 σ of a difference of two
    # estimates), 20 % per sensor on the reflected part (> 3.5 σ) and 8 % per sensor on the
    # total.
    settings = Settings(subdivision=1, sky_rays_per_patch=16, ground_rays=256, sensor_rays=512,
                        element_rays=256, element_size=0.75, sun_spacing=10.0,
                        reflected_sun_spacing=15.0)
    room = ("  width: 4.0\n  depth: 4.0\n  height: 3.0\n  thickness: 0.3\n"
            "  windows:\n    - {wall: front, width: 2.4, sill: 0.9, head: 2.4, glazing: main}\n")
    alone = load_study(write(tmp_path / "alone", study_text(spaces="room:\n" + room))).study
    pair = ("spaces:\n  - name: classroom\n    copies: {count: 2, step: [4.3, 0.0, 0.0]}\n"
            + textwrap.indent(room, "  "))
    both = load_study(write(tmp_path / "pair", study_text(spaces=pair))).study
    g0, s0, _ = build_geometry(alone)
    g1, s1, layout = build_geometry(both)
    assert layout.names == ("classroom-1", "classroom-2")
    for k in range(2):
        mine = s1[layout.sensor_space == k]
        np.testing.assert_allclose(mine[:, :3] - [4.3 * k, 0, 0], s0[:, :3], atol=1e-12)
        moved = replace(g0, triangles=g0.triangles + np.array([4.3 * k, 0.0, 0.0]))
        got = compute_coefficients(g1, mine, settings)
        ref = compute_coefficients(moved, mine, settings)
        assert got.crossed_twice == 0
        (direct, reflected), (direct0, reflected0) = _overcast_parts(got), _overcast_parts(ref)
        np.testing.assert_allclose(direct, direct0, rtol=1e-5)
        assert abs(reflected.mean() / reflected0.mean() - 1.0) < 0.05
        np.testing.assert_allclose(reflected, reflected0, rtol=0.20)
        np.testing.assert_allclose(direct + reflected, direct0 + reflected0, rtol=0.08)


# ------------------------------------------------------------------ bad input


BAD = [
    # (what, spaces text or None for SPACES, extra top-level text, vary, expected fragments)
    ("overlap", SPACES.replace("origin: [19.0, 0.0, 0.0]", "origin: [17.0, 0.0, 0.0]"), "", "",
     ["spaces.2.origin", "line 29", "'classroom-3'", "'hall'", "overlap"]),
    ("duplicate name", SPACES.replace("name: hall", "name: corridor"), "", "",
     ["spaces.2.name", "line 28", "'corridor'", "already used"]),
    ("copy name clash", SPACES.replace("name: hall", "name: classroom-2"), "", "",
     ["spaces.2.name", "'classroom-2'", "already used"]),
    ("copies collide", SPACES.replace("step: [6.2, 0.0, 0.0]", "step: [5.0, 0.0, 0.0]"), "", "",
     ["spaces.0.copies.step", "line 20", "overlap", "'classroom-1'", "'classroom-2'"]),
    ("vary missing space", None, "", "spaces.gym.width: [4.0, 5.0]\n",
     ["vary.spaces.gym.width", "line 38", "no space named 'gym'", "classroom, corridor, hall"]),
    ("vary a copy", None, "", "spaces.classroom-2.width: [4.0, 5.0]\n",
     ["copy of space 'classroom'", "spaces.classroom.width"]),
    ("vary copies count", None, "", "spaces.classroom.copies.count: [2, 3]\n",
     ["'copies'", "cannot be varied"]),
    ("vary name", None, "", "spaces.hall.name: [a, b]\n", ["'name'", "cannot be varied"]),
    ("room and spaces", None, "room: {width: 3, depth: 3, height: 3, windows: "
     "[{wall: front, width: 1, sill: 1, head: 2, glazing: main}]}\n", "",
     ["exactly one of", "room", "spaces"]),
    ("unknown key in a space", SPACES.replace("occupied: false", "ocupied: false"), "", "",
     ["spaces.1.ocupied", "did you mean 'occupied'"]),
    ("nothing occupied", SPACES.replace("    grid: {height", "    occupied: false\n    grid: "
                                        "{height").replace("copies:", "occupied: false\n"
                                                           "    copies:"), "", "",
     ["no space is occupied"]),
    ("unknown glazing", SPACES.replace("glazing: inner", "glazing: inside"), "", "",
     ["spaces.0.windows.1.glazing", "'inside'"]),
    ("window too wide, from the kernel", SPACES.replace("width: 4.0, sill", "width: 6.5, sill"),
     "", "", ["spaces.0.windows.0", "line 18", "classroom-1"]),
    ("internal and outside set mixed", SPACES.replace("glazing: inner", "glazing: main"), "", "",
     ["spaces.0.windows", "'main'", "internal"]),
    ("vary makes a window too wide", None, "", "spaces.classroom.windows.0.width: [4.0, 7.0]\n",
     ["spaces.0.windows.0.width", "line 18", "from 'vary'", "classroom-1"]),
    ("vary makes spaces overlap", None, "", "spaces.classroom.origin: [[0, 0, 0], [0, 2, 0]]\n",
     ["vary.spaces.classroom.origin.1", "'classroom-1'", "'corridor'", "overlap"]),
    ("shading on an internal set", None, "", "",
     ["glazings.inner.shaded_transmittance", "line 6", "internal"]),
    ("no outside window", SPACES.replace(
        "      - {wall: front, width: 4.0, sill: 0.9, head: 2.7, glazing: main}\n", "").replace(
        "    windows:\n      - {wall: roof, width: 1.2, length: 1.2, x: 4.0, y: 3.6, glazing: main}"
        "\n", ""), "", "", ["spaces", "no window of the building opens to the outside"]),
    ("obstructions in a space", SPACES.replace("    occupied: false", "    occupied: false\n"
                                               "    obstructions: []"), "", "",
     ["spaces.1.obstructions", "top level"]),
    ("obstructions with a room", "room:\n  width: 3.0\n  depth: 3.0\n  height: 3.0\n"
     "  windows: [{wall: front, width: 1, sill: 1, head: 2, glazing: main}]\n",
     "obstructions: [{x: 1, y: -9, width: 3, depth: 3, height: 9}]\n", "",
     ["obstructions", "room.obstructions"]),
]


@pytest.mark.parametrize(("what", "spaces", "extra", "vary", "expect"), BAD,
                         ids=[b[0] for b in BAD])
def test_bad_space_inputs(tmp_path, what, spaces, extra, vary, expect):
    text = study_text(vary, spaces if spaces is not None else SPACES, extra)
    if what == "shading on an internal set":
        text = text.replace("inner: {transmittance: 0.8,", "inner: {shaded_transmittance: 0.1, "
                            "transmittance: 0.8,")
    path = write(tmp_path, text)
    with pytest.raises(StudyFileError) as info:
        make_plan(load_study(path), read_climates=False)
    message = str(info.value)
    assert "study.yaml" in message
    for fragment in expect:
        assert fragment in message, (fragment, message)


# ------------------------------------------------------------------ mesh studies

# a 6 × 3 × 2.7 m box whose floor is two groups (two rooms' floors), one window in front
TWO_FLOORS_OBJ = """\
v 0 0 0
v 3 0 0
v 6 0 0
v 6 3 0
v 3 3 0
v 0 3 0
v 0 0 2.7
v 6 0 2.7
v 6 3 2.7
v 0 3 2.7
v 1 0 1
v 5 0 1
v 5 0 2
v 1 0 2
g floor_a
f 1 2 5 6
g floor_b
f 2 3 4 5
g ceiling
f 7 10 9 8
g walls
f 1 7 8 3
f 3 8 9 4
f 4 9 10 6
f 6 10 7 1
g glass
f 11 12 13 14
"""


def _mesh_study(tmp_path, spaces: str) -> Path:
    (tmp_path / "building.obj").write_text(TWO_FLOORS_OBJ)
    text = HEAD + ("mesh: building.obj\nmaterials:\n  floor_a: {reflectance: 0.2}\n"
                   "  floor_b: {reflectance: 0.2}\n  ceiling: {reflectance: 0.7}\n"
                   "  walls: {reflectance: 0.5}\n  glass: {glazing: main}\n" + spaces)
    return write(tmp_path, text)


def test_mesh_spaces_own_the_grid_over_their_floors(tmp_path):
    spaces = ("mesh_spaces:\n  - {name: west, floors: [floor_a]}\n"
              "  - {name: east, floors: [floor_b], grid: {height: 0.7, spacing: 0.5, "
              "margin: 0.25}}\n")
    study = load_study(_mesh_study(tmp_path, spaces)).study
    _, sensors, layout = build_geometry(study)
    assert layout.names == ("west", "east")
    np.testing.assert_allclose(layout.area, [9.0, 9.0])  # each floor group 3 × 3 m
    west, east = (sensors[layout.sensor_space == k] for k in range(2))
    # each space's sensors lie over its own floor (x < 3 m west, x > 3 m east), at its height
    assert np.all(west[:, 0] < 3.0) and np.all(east[:, 0] > 3.0)
    np.testing.assert_allclose(west[:, 2], 0.8)
    np.testing.assert_allclose(east[:, 2], 0.7)
    assert len(east) > len(west)  # the finer grid of its own


@pytest.mark.parametrize(("spaces", "expect"), [
    ("mesh_spaces:\n  - {name: west, floors: [floor_a]}\n  - {name: east, floors: [floor_a]}\n",
     ["mesh_spaces.1.floors.0", "'floor_a'", "already belongs"]),
    ("mesh_spaces:\n  - {name: west, floors: [flor_a]}\n", ["mesh_spaces.0.floors", "flor_a"]),
    ("mesh_spaces:\n  - {name: west, floors: [floor_a]}\n  - {name: west, floors: [floor_b]}\n",
     ["mesh_spaces.1.name", "'west'"]),
])
def test_bad_mesh_spaces(tmp_path, spaces, expect):
    with pytest.raises(StudyFileError) as info:
        make_plan(load_study(_mesh_study(tmp_path, spaces)), read_climates=False)
    for fragment in expect:
        assert fragment in str(info.value), (fragment, str(info.value))


# ------------------------------------------------------------------ the example building


def test_example_building_plans(tmp_path):
    # examples/school-wing.yaml: 4 variants (orientation × façade glazing) share one
    # coefficient set; 8 classrooms and the hall carry sensors, the corridors do not
    from conftest import REPO

    folder = tmp_path / "examples"
    (folder / "climates").mkdir(parents=True)
    shutil.copyfile(REPO / "examples" / "school-wing.yaml", folder / "school-wing.yaml")
    shutil.copyfile(TMY3_GREENSBORO, folder / "climates" / "piedmont.csv")
    plan = make_plan(load_study(folder / "school-wing.yaml"), read_climates=False)
    assert len(plan.variants) == 4 and len(plan.jobs) == 1
    layout = plan.layouts[0]
    assert layout.names == (*[f"classroom-ground-{k}" for k in range(1, 5)],
                            *[f"classroom-upper-{k}" for k in range(1, 5)], "hall")
    job = next(iter(plan.jobs.values()))
    assert job.geometry.internal_sets == ("borrowed",)
    assert job.geometry.glazing_sets == ("facade", "rooflight")
