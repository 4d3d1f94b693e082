"""Buildings of several spaces (kernels.geometry.parametric_building) and their coefficients.

Every physics check names its outside reference beside the assertion: a symmetry
or superposition argument, an analytic property, or "common practice".
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from luxsweep.kernels.coefficients import Settings, compute_coefficients
from luxsweep.kernels.errors import GeometryError
from luxsweep.kernels.geometry import (
    SEAM_GAP,
    parametric_building,
    parametric_room,
    sensor_grid,
)
from luxsweep.kernels.raytrace import Scene
from luxsweep.kernels.sky import overcast_sky_vector, patch_scheme

GREY = {"floor": 0.2, "walls": 0.5, "ceiling": 0.7}
FRONT = [{"wall": "front", "width": 4.0, "sill": 0.9, "head": 2.7, "glazing": "main"}]
PANES = {"main": 2, "inner": 1}
# coarse but unbiased settings; sun points coarse (direct sun is compared ray for ray)
QUICK = Settings(sky_rays_per_patch=16, ground_rays=1024, sensor_rays=1024, element_rays=512,
                 sun_spacing=6.0, reflected_sun_spacing=6.0)


def _space(name, x=0.0, y=0.0, z=0.0, width=6.0, depth=6.0, height=3.0, thickness=0.3,
           windows=FRONT, reflectance=GREY, **more):
    return {"name": name, "origin": (x, y, z), "width": width, "depth": depth, "height": height,
            "thickness": thickness, "reflectance": reflectance, "windows": windows, **more}


def _grid(space):
    g = sensor_grid(space["width"], space["depth"], 0.8, 1.0, 0.5)
    g[:, :3] += np.asarray(space["origin"])
    return g


def _overcast(coeffs, part):
    """Daylight factor [%] of set 0 under the CIE overcast sky (ρ_g 0.2) from one family."""
    v = overcast_sky_vector(patch_scheme(coeffs.subdivision), 0.2)
    return 100.0 * (getattr(coeffs, part)[0].astype(np.float64) @ v)


# ------------------------------------------------------------------ geometry


def test_one_space_is_the_room():
    # the same box, walls and window as parametric_room (its conventions are the reference):
    # equal areas and area-weighted normals per kind of surface
    room = parametric_room(6, 6, 3, FRONT, GREY, PANES, thickness=0.3,
                           overhang={"depth": 0.5, "gap": 0.1})
    b = parametric_building([_space("a", overhang={"depth": 0.5, "gap": 0.1})], PANES)
    assert b.space_names == ("a",) and b.room is None
    np.testing.assert_array_equal(b.space_boxes, [[[0, 0, 0], [6, 6, 3]]])
    for g in (room, b):
        assert set(np.unique(g.space[g.exterior])) == {-1}
        assert set(np.unique(g.space[~g.exterior])) == {0}
    for sel in (lambda g: g.exterior, lambda g: ~g.exterior & ~g.is_glazing,
                lambda g: g.is_glazing):
        area = [g.areas[sel(g)].sum() for g in (room, b)]
        np.testing.assert_allclose(area[1], area[0], rtol=1e-12)
        moment = [(g.normals * g.areas[:, None])[sel(g)].sum(axis=0) for g in (room, b)]
        np.testing.assert_allclose(moment[1], moment[0], atol=1e-9)


def test_shared_wall_has_no_outer_faces():
    # two 6 m rooms 0.3 m apart with 0.3 m walls: one solid block 12.9 × 6.6 m outside. A closed
    # surface has zero net area vector (divergence theorem, analytic); the outer surface is
    # closed by the ground (the footprint, facing down) and the two 4 × 1.8 m panes (facing
    # out of the building, −y), so its own sum is the footprint up and the panes' area along +y
    b = parametric_building([_space("a"), _space("b", x=6.3)], PANES)
    ext = b.exterior
    moment = (b.normals * b.areas[:, None])[ext].sum(axis=0)
    np.testing.assert_allclose(moment, [0.0, 2 * 4.0 * 1.8, 12.9 * 6.6], atol=1e-9)
    # no exterior face in or on the shared wall (6 ≤ x ≤ 6.3, facing ±x)
    centre = b.triangles.mean(axis=1)
    assert not np.any(ext & (np.abs(b.normals[:, 0]) > 0.5) & (centre[:, 0] > 6.0 - 1e-9)
                      & (centre[:, 0] < 6.3 + 1e-9))


def test_stacked_spaces_partition():
    # an upper storey on a lower one: the floor slab between them is solid, the lower ceiling
    # keeps the lower space's reflectance and the upper floor the upper one's
    upper = {"floor": 0.3, "walls": 0.4, "ceiling": 0.8}
    b = parametric_building([_space("low"), _space("up", z=3.3, reflectance=upper)], PANES)
    centre = b.triangles.mean(axis=1)
    assert not np.any(b.exterior & (np.abs(b.normals[:, 2]) > 0.5) & (centre[:, 2] > 3.0 - 1e-9)
                      & (centre[:, 2] < 3.3 + 1e-9))
    low_ceiling = (b.space == 0) & np.isclose(centre[:, 2], 3.0) & (b.normals[:, 2] < -0.5)
    up_floor = (b.space == 1) & np.isclose(centre[:, 2], 3.3) & (b.normals[:, 2] > 0.5)
    assert np.allclose(b.reflectance[low_ceiling], 0.7) and low_ceiling.sum() >= 2
    assert np.allclose(b.reflectance[up_floor], 0.3) and up_floor.sum() >= 2


def test_zero_gap_twins_face_the_ray():
    # touching spaces: the two coincident faces are twins, and every ray from either side meets
    # the face of its own space from the front (without twins Embree reports the other face
    # for part of the rays: measured ~65 % from the second space)
    b = parametric_building([_space("a", thickness=0.0, windows=[]),
                             _space("b", x=6.0, thickness=0.0, windows=[])], PANES)
    pairs = np.flatnonzero(b.twin >= 0)
    assert pairs.size == 4
    np.testing.assert_array_equal(b.triangles[b.twin[pairs]], b.triangles[pairs][:, [0, 2, 1]])
    scene = Scene(b)
    rng = np.random.default_rng(1)
    n = 20_000
    for space, x0, sign in ((0, 0.1, 1.0), (1, 6.1, -1.0)):
        o = np.column_stack([rng.uniform(x0, x0 + 5.8, n), rng.uniform(0.1, 5.9, n),
                             rng.uniform(0.1, 2.9, n)])
        d = np.column_stack([np.full(n, sign), rng.normal(0, 0.3, (n, 2))])
        hits = scene.trace(o, d)
        assert hits.front.all()
        assert np.all(b.space[hits.triangle] == space)
        tri = b.triangles[hits.triangle]
        seam = np.all(np.isclose(tri[:, :, 0], 6.0), axis=1)
        assert seam.sum() > n // 4
        tri = tri[seam]
        # the barycentric (u, v) on the reported triangle give the point where the ray meets it
        p = ((1 - hits.u[seam] - hits.v[seam])[:, None] * tri[:, 0]
             + hits.u[seam][:, None] * tri[:, 1] + hits.v[seam][:, None] * tri[:, 2])
        unit = d / np.linalg.norm(d, axis=1, keepdims=True)
        expected = o + hits.distance[:, None] * unit
        np.testing.assert_allclose(p, expected[seam], atol=1e-4)  # float32 rays


@pytest.mark.parametrize(("spaces", "field", "words"), [
    ([_space("a"), _space("b", x=5.9)], "spaces.1.origin", ["'a'", "'b'", "overlap"]),
    ([_space("a"), _space("a", x=6.3)], "spaces.1.name", ["'a'", "twice"]),
    ([_space("a"), _space("b", x=6.0 + SEAM_GAP / 2)], "spaces.1.origin", ["mm"]),
    ([_space("a"), _space("b", x=3.0, y=-6.3, windows=[])], "spaces.0.windows.0",
     ["partly covered", "'b'"]),
    ([_space("a", windows=[*FRONT, {"wall": "right", "width": 2, "sill": 1, "head": 2,
                                     "glazing": "main"}]), _space("b", x=6.3)],
     "spaces.0.windows.1.glazing", ["'main'", "internal", "outside"]),
    ([_space("a", windows=[*FRONT, {"wall": "right", "width": 2, "sill": 1, "head": 2,
                                     "glazing": "inner"}]), _space("b", x=6.3)],
     "internal_transmittance.inner", ["transmittance"]),
    ([_space("a", width=-1.0)], "spaces.0.width", ["'a'"]),
])
def test_bad_buildings(spaces, field, words):
    with pytest.raises(GeometryError) as info:
        parametric_building(spaces, PANES)
    assert info.value.field == field
    for w in words:
        assert w in str(info.value)


def test_window_onto_a_neighbours_wall():
    # a side window whose outside is the shell of a space beside it (not covering it face to
    # face) would look into solid wall: refused
    side = [{"wall": "right", "width": 0.2, "offset": 2.45, "sill": 1.0, "head": 2.0,
             "glazing": "main"}]
    with pytest.raises(GeometryError, match="opens onto the walls") as info:
        parametric_building([_space("a", windows=side), _space("b", x=6.3, depth=5.3)], PANES)
    assert info.value.field == "spaces.0.windows.0"


def test_obstruction_overlapping_a_space():
    with pytest.raises(GeometryError, match="'b'") as info:
        parametric_building([_space("a"), _space("b", x=6.3)], PANES,
                            obstructions=[{"x": 9, "y": 3, "width": 1, "depth": 1, "height": 1}])
    assert info.value.field == "obstructions.0"


# ------------------------------------------------------------------ physics


@pytest.mark.parametrize("gap", [0.3, 0.0])
def test_twin_rooms_equal_the_room_alone(gap):
    # Symmetry (common practice): a neighbour behind a shared opaque wall, its façade flush with
    # this room's, changes nothing this room's window sees, nor the room's surfaces; so its
    # sensors get the same coefficients as the room alone. Direct sky and sun: the same rays
    # through the same window against the same outside; the origin offset scales with the
    # scene's size (1e-5 × extent), so a ray grazing an edge may fall on its other side: at
    # most 1 entry in 1,000 differs and the sensors' direct daylight factors agree to 0.1 %.
    # Reflected: the element transfer's noise; measured seed-to-seed spread (standard deviation,
    # 5 seeds) of the mean reflected daylight factor at these settings 0.5 %, per sensor 1.2 %
    # of the reflected part: allowed 4 % on the mean (> 5 σ of a difference of two estimates)
    # and 8 % per sensor on the total daylight factor (reflected ≈ 30 % of it: > 10 σ).
    room = parametric_room(6, 6, 3, FRONT, GREY, PANES, thickness=0.3)
    a, b = _space("a"), _space("b", x=6.0 + gap)
    building = parametric_building([a, b], PANES)
    alone = compute_coefficients(room, _grid(a), QUICK)
    for sp in (a, b):
        shifted = replace_origin(room, sp)
        c = compute_coefficients(building, _grid(sp), QUICK)
        assert c.crossed_twice == 0
        ref = alone if sp is a else compute_coefficients(shifted, _grid(sp), QUICK)
        _same_rays(c, ref)
        r, r0 = _overcast(c, "sky_reflected"), _overcast(ref, "sky_reflected")
        assert abs(r.mean() / r0.mean() - 1.0) < 0.04
        total = _overcast(c, "sky_direct") + r
        total0 = _overcast(ref, "sky_direct") + r0
        np.testing.assert_allclose(total, total0, rtol=0.08)


def _same_rays(c, ref):
    """Direct families equal but for rays grazing an edge (see the callers' comments)."""
    for part in ("sky_direct", "sun_direct"):
        a, b = getattr(c, part), getattr(ref, part)
        differ = ~np.isclose(a, b, rtol=1e-5, atol=1e-7)
        assert differ.mean() < 1e-3, part
    np.testing.assert_allclose(_overcast(c, "sky_direct"), _overcast(ref, "sky_direct"),
                               rtol=1e-3)


def replace_origin(room, space):
    """The room moved to the space's origin (a translated copy: same triangles, shifted)."""
    return replace(room, triangles=room.triangles + np.asarray(space["origin"]))


@pytest.mark.parametrize("gap", [0.2, 0.0])
def test_borrowed_light_is_linear_in_transmittance(gap):
    # A space lit only through an internal glazed opening. Superposition (radiosity is linear,
    # Goral et al., SIGGRAPH 1984): light reaching it is a sum over paths, each crossing the
    # internal pane k ≥ 1 times and scaling as τ^k. Direct sky and sun cross it exactly once:
    # proportional to τ (to float rounding, the same rays); at τ = 0 nothing arrives, exactly.
    # Reflected: linear plus the paths that cross back and forth (k ≥ 2): measured τ² share at
    # τ = 1 about 1 % of the reflected part here; allowed 3 %.
    inner = [{"wall": "back", "width": 4.0, "sill": 0.9, "head": 2.7, "glazing": "inner"}]
    a = _space("a", depth=5.0, thickness=0.2, windows=FRONT + inner)
    b = _space("b", y=5.0 + gap, depth=4.0, thickness=0.2, windows=[])
    sens = _grid(b)
    got = {}
    for tau in (0.0, 0.25, 1.0):
        geo = parametric_building([a, b], PANES, {"inner": tau})
        assert geo.glazing_sets == ("main",) and geo.internal_sets == ("inner",)
        got[tau] = compute_coefficients(geo, sens, QUICK)
    for part in ("sky_direct", "sky_reflected", "sun_direct", "sun_reflected"):
        assert not np.any(getattr(got[0.0], part))
    for part in ("sky_direct", "sun_direct"):
        np.testing.assert_allclose(4.0 * getattr(got[0.25], part), getattr(got[1.0], part),
                                   rtol=1e-5, atol=1e-9)
    assert _overcast(got[1.0], "sky_direct").mean() > 0.1  # it is lit through the opening
    r1, r4 = _overcast(got[1.0], "sky_reflected"), 4.0 * _overcast(got[0.25], "sky_reflected")
    assert 0.0 <= (r1.mean() - r4.mean()) / r1.mean() < 0.03


def test_tall_wing_shades_like_an_obstruction():
    # A wing projecting in front of the façade, 12 m tall, shades the window exactly like an
    # obstruction box of its outer shape (visibility is geometry alone, common practice):
    # the direct parts agree ray for ray; the reflected parts differ only by which outer
    # faces reflect (the wing's shared wall is solid), so they are not compared.
    a = _space("a", thickness=0.25)
    wing = _space("wing", x=6.5, y=-8.0, width=5.0, depth=14.0, height=12.0, thickness=0.25,
                  windows=[])
    building = parametric_building([a, wing], PANES)
    # the wing's outer shape: x 6.25 … 11.75, y −8.25 … 6.25, z 0 … 12.25 (exact in binary)
    box = {"x": 9.0, "y": -1.0, "width": 5.5, "depth": 14.5, "height": 12.25}
    room = parametric_room(6, 6, 3, FRONT, GREY, PANES, thickness=0.25, obstructions=[box])
    bare = parametric_room(6, 6, 3, FRONT, GREY, PANES, thickness=0.25)
    sens = _grid(a)
    c_building, c_box, c_bare = (compute_coefficients(g, sens, QUICK)
                                 for g in (building, room, bare))
    _same_rays(c_building, c_box)
    # and it does shade: less direct sky than without it
    shaded, open_ = (_overcast(c, "sky_direct").mean() for c in (c_building, c_bare))
    assert shaded < 0.97 * open_


def test_two_outside_panes_count_as_blocked():
    # Light leaving through one window and passing through a detached wing's two windows
    # cannot be scaled by one set's transmittance: such rays are refused (blocked) and counted.
    # So the wing shades exactly as if it had no windows (ray for ray), and the count is > 0.
    a = _space("a")
    through = [{"wall": "left", "width": 16.0, "sill": 0.2, "head": 7.5, "glazing": "main"},
               {"wall": "right", "width": 16.0, "sill": 0.2, "head": 7.5, "glazing": "main"}]
    wing = dict(x=7.0, y=-20.0, width=4.0, depth=17.0, height=8.0, thickness=0.2)
    glazed = parametric_building([a, _space("w", windows=through, **wing)], PANES)
    solid = parametric_building([a, _space("w", windows=[], **wing)], PANES)
    sens = _grid(a)
    c_glazed, c_solid = (compute_coefficients(g, sens, QUICK) for g in (glazed, solid))
    assert c_glazed.crossed_twice > 0 and c_solid.crossed_twice == 0
    _same_rays(c_glazed, c_solid)


def test_building_key_follows_internal_transmittance():
    # the baked transmittance enters the coefficient key (it changes the arrays)
    from luxsweep.kernels.coefficients import coefficient_key

    inner = [{"wall": "back", "width": 2.0, "sill": 0.9, "head": 2.1, "glazing": "inner"}]
    spaces = [_space("a", windows=FRONT + inner), _space("b", y=6.3, windows=[])]
    keys = {coefficient_key(parametric_building(spaces, PANES, {"inner": t}),
                            _grid(spaces[1]), QUICK) for t in (0.5, 0.6)}
    assert len(keys) == 2


def test_single_room_unchanged_by_building_paths():
    # a scene of one parametric room keeps the original single-crossing path
    room = parametric_room(6, 6, 3, FRONT, GREY, PANES)
    assert Scene(room).simple
    assert not Scene(parametric_building([_space("a")], PANES)).simple


@pytest.mark.parametrize(("gap", "thickness"), [(0.0, 0.0), (0.2, 0.2)])
def test_closed_building_conserves_energy(gap, thickness):
    # Enclosure rule (Cohen & Wallace 1993, ch. 2: Σ_j F_ij = 1 in a closed enclosure): two
    # spaces with no outside window, joined by an unglazed internal opening (0 panes, τ = 1),
    # form one closed enclosure, so every ray leaving an element lands on one: through the
    # opening, on the partition faces (the twins at gap 0) and in the hole's reveals. Float32
    # seams leak < 0.1 % (as for one closed box).
    from luxsweep.kernels.transfer import mesh_elements, transfer_matrix

    opening = [{"wall": "right", "width": 2.0, "sill": 0.5, "head": 2.2, "glazing": "open"}]
    geo = parametric_building(
        [_space("a", thickness=thickness, windows=opening),
         _space("b", x=6.0 + gap, width=4.0, thickness=thickness, windows=[])],
        {"open": 0}, {"open": 1.0})
    scene = Scene(geo)
    el = mesh_elements(geo.triangles, geo.reflectance, geo.exterior,
                       np.where(geo.exterior, 2.0, 0.75), mask=~geo.is_glazing & ~geo.exterior)
    tr = transfer_matrix(scene, el, 256, np.random.default_rng(3))
    same = np.asarray(tr.same)
    landed = (el.area @ same) / el.area
    assert landed.min() > 0.999
    # light crosses the opening both ways: elements of one space reach the other
    own = geo.space[el.triangle]
    assert same[np.ix_(own == 1, own == 0)].sum() > 0
    assert same[np.ix_(own == 0, own == 1)].sum() > 0


def test_two_outside_panes_counted_the_same_in_parts():
    # the count of refused rays is additive over the split stages (kernels.coefficients):
    # the parts report what the one-process set reports
    from luxsweep.kernels.coefficients import (
        assemble,
        direct_part,
        reflected_part,
        solve_elements,
    )

    a = _space("a")
    through = [{"wall": "left", "width": 16.0, "sill": 0.2, "head": 7.5, "glazing": "main"},
               {"wall": "right", "width": 16.0, "sill": 0.2, "head": 7.5, "glazing": "main"}]
    wing = dict(x=7.0, y=-20.0, width=4.0, depth=17.0, height=8.0, thickness=0.2)
    glazed = parametric_building([a, _space("w", windows=through, **wing)], PANES)
    sens = _grid(a)
    whole = compute_coefficients(glazed, sens, QUICK)
    n = sens.shape[0]
    solution = solve_elements(glazed, n, QUICK)
    split = assemble(glazed, sens, [direct_part(glazed, sens, 0, n, QUICK)],
                     [reflected_part(glazed, sens, solution, 0, n, QUICK)], QUICK,
                     element_crossed_twice=solution.crossed_twice)
    assert split.crossed_twice == whole.crossed_twice > 0
    np.testing.assert_array_equal(split.sky_direct, whole.sky_direct)
