"""Ray casting (kernels/raytrace.py) against analytic distances, angles and solid angles."""

from __future__ import annotations

import pickle
import time

import numpy as np
import pytest
from scipy import integrate

from luxsweep.kernels.geometry import parametric_room
from luxsweep.kernels.raytrace import BLOCKED, NO_GLAZING, Scene

REFL = {"floor": 0.2, "walls": 0.5, "ceiling": 0.7}
W, D, H = 6.0, 8.0, 3.0
FRONT = {"wall": "front", "width": 2.0, "sill": 1.0, "head": 2.0, "offset": 0.0, "glazing": "main"}

# float32 inside Embree: distances of a few metres carry ~1e-6 m rounding, so
# distances are compared to 1e-5 relative and cosines to 1e-6 absolute.
RTOL = 1e-5


def box(windows=(FRONT,), **kw):
    return parametric_room(W, D, H, list(windows), REFL, {"main": 2, "top": 1}, **kw)


def solid_angle_triangle(r1: np.ndarray, r2: np.ndarray, r3: np.ndarray) -> float:
    """Solid angle [sr] of a plane triangle with corners r1, r2, r3 seen from the origin.

    A. van Oosterom, J. Strackee, "The Solid Angle of a Plane Triangle",
    IEEE Trans. Biomed. Eng. BME-30(2), 125–126, 1983, doi:10.1109/TBME.1983.325207:
    tan(Ω/2) = |r1·(r2×r3)| / (|r1||r2||r3| + (r1·r2)|r3| + (r1·r3)|r2| + (r2·r3)|r1|).
    """
    n1, n2, n3 = (np.linalg.norm(r) for r in (r1, r2, r3))
    num = abs(np.dot(r1, np.cross(r2, r3)))
    den = n1 * n2 * n3 + np.dot(r1, r2) * n3 + np.dot(r1, r3) * n2 + np.dot(r2, r3) * n1
    return 2.0 * np.arctan2(num, den)


def solid_angle_rectangle(p: np.ndarray, corners: np.ndarray) -> float:
    """Solid angle [sr] of the planar rectangle ``corners`` (4, 3) seen from ``p``."""
    r = corners - p
    return solid_angle_triangle(r[0], r[1], r[2]) + solid_angle_triangle(r[0], r[2], r[3])


def test_solid_angle_formula_against_scipy_integration():
    # independent check of the formula: Ω = ∫∫ h / (h² + x² + y²)^{3/2} dx dy
    # (definition of solid angle, integrated with scipy.integrate.dblquad)
    p = np.array([0.3, 0.0, -0.2])
    h = 1.7
    corners = np.array([[-0.5, h, 0.4], [1.5, h, 0.4], [1.5, h, 1.6], [-0.5, h, 1.6]])
    ref, _ = integrate.dblquad(
        lambda z, x: h / (h * h + (x - p[0]) ** 2 + (z - p[2]) ** 2) ** 1.5, -0.5, 1.5, 0.4, 1.6,
        epsabs=1e-12, epsrel=1e-12,
    )
    assert solid_angle_rectangle(p, corners) == pytest.approx(ref, rel=1e-9)


def test_axis_rays_hit_the_right_wall_at_the_right_distance():
    g = box()
    s = Scene(g)
    o = np.array([1.0, 5.0, 2.5])  # the −y ray passes beside the front window
    dirs = np.array([[1, 0, 0], [-1, 0, 0], [0, 1, 0], [0, -1, 0], [0, 0, 1], [0, 0, -1]], float)
    expect_group = ["wall_right", "wall_left", "wall_back", "wall_front", "ceiling", "floor"]
    expect_dist = [W - 1.0, 1.0, D - 5.0, 5.0, H - 2.5, 2.5]  # analytic
    tri, dist = s.first_hit(np.tile(o, (6, 1)), dirs)
    assert [g.group_names[g.group[t]] for t in tri] == expect_group
    np.testing.assert_allclose(dist, expect_dist, rtol=RTOL)
    # hits come from the inside: the ray runs against the surface normal
    assert np.all(np.sum(dirs * g.normals[tri], axis=1) < 0)


def test_ray_out_of_the_window_has_no_opaque_hit():
    s = Scene(box())
    o = np.array([[3.0, 4.0, 1.5]])
    tri, dist = s.first_hit(o, [[0, -1, 0]])
    assert tri[0] == -1 and np.isinf(dist[0])
    gset, cos, gdist = s.glazing_crossing(o, [[0, -1, 0]])
    assert gset[0] == 0 and cos[0] == pytest.approx(1.0, abs=1e-6)
    assert gdist[0] == pytest.approx(4.0, rel=RTOL)  # analytic: distance to y = 0


def test_rays_through_window_have_the_analytic_incidence_cosine():
    g = box()
    s = Scene(g)
    rng = np.random.default_rng(7)
    c = np.array([W / 2, D / 2, H / 2])
    target = np.column_stack(
        [rng.uniform(2.0, 4.0, 500), np.zeros(500), rng.uniform(1.0, 2.0, 500)]
    )
    d = target - c
    gset, cos, dist = s.glazing_crossing(np.tile(c, (500, 1)), d)
    # analytic: cos θ = (distance of the centre to the window plane) / (ray length)
    length = np.linalg.norm(d, axis=1)
    assert np.all(gset == 0)
    np.testing.assert_allclose(cos, c[1] / length, atol=1e-6)
    np.testing.assert_allclose(dist, length, rtol=RTOL)
    code, cos2 = s.sky_view(np.tile(c, (500, 1)), d)
    assert np.all(code == 0) and np.array_equal(cos, cos2)


@pytest.mark.parametrize(
    ("origin", "window"),
    [
        ((1.2, 1.7, 1.1), {"wall": "front", "width": 2.5, "sill": 0.8, "head": 2.3,
                           "offset": 0.7, "glazing": "main"}),
        ((4.0, 5.5, 0.8), {"wall": "roof", "width": 1.5, "length": 2.0, "x": 2.5, "y": 3.0,
                           "glazing": "top"}),
    ],
)
def test_escape_fraction_equals_window_solid_angle(origin, window):
    g = box(windows=[window])
    s = Scene(g)
    p = np.array(origin)
    n = 400_000
    d = np.random.default_rng(11).normal(size=(n, 3))  # uniform directions on the sphere
    code, _ = s.sky_view(np.broadcast_to(p, (n, 3)), d)
    frac = np.mean(code >= 0)
    glass = g.triangles[g.is_glazing].reshape(-1, 3)
    lo, hi = glass.min(axis=0), glass.max(axis=0)
    if window["wall"] == "roof":
        corners = np.array([[lo[0], lo[1], H], [hi[0], lo[1], H], [hi[0], hi[1], H],
                            [lo[0], hi[1], H]])
    else:
        corners = np.array([[lo[0], 0, lo[2]], [hi[0], 0, lo[2]], [hi[0], 0, hi[2]],
                            [lo[0], 0, hi[2]]])
    expect = solid_angle_rectangle(p, corners) / (4 * np.pi)  # Van Oosterom & Strackee 1983
    se = np.sqrt(expect * (1 - expect) / n)
    # a closed box leaks nowhere else: escapes are exactly the window rays (binomial, 3 SE)
    assert abs(frac - expect) < 3 * se
    assert not np.any(code == NO_GLAZING)


def test_occluded_respects_max_distance():
    s = Scene(box())
    o = np.tile([3.0, 4.0, 1.5], (4, 1))
    d = np.array([[1, 0, 0], [1, 0, 0], [0, 0, 1], [0, -1, 0]], float)
    # analytic: right wall 3 m away, ceiling 1.5 m away, window straight ahead (−y)
    got = s.occluded(o, d, max_distance=np.array([2.9, 3.1, 1.6, 10.0]))
    assert got.tolist() == [False, True, True, False]
    assert s.occluded(o, d).tolist() == [True, True, True, False]


def test_obstruction_and_overhang_block_rays_through_the_window():
    ob = {"x": 3.0, "y": -10.0, "width": 20.0, "depth": 2.0, "height": 6.0}
    o = np.array([[3.0, 2.0, 1.5]] * 2)
    # towards the obstruction's face at y = -9, z = 3 (analytic target), and upwards
    # through the window into the overhang's underside (z = 2.1 at y ∈ [-0.8, 0])
    d = np.array([[0.0, -11.0, 1.5], [0.0, -2.4, 0.55]])
    free = Scene(box())
    shaded = Scene(box(obstructions=[ob], overhang={"depth": 0.8, "gap": 0.1}))
    assert free.sky_view(o, d)[0].tolist() == [0, 0]
    code, cos = shaded.sky_view(o, d)
    assert code.tolist() == [BLOCKED, BLOCKED] and np.all(cos == 0)
    g = shaded.geometry
    tri, dist = shaded.first_hit(o, d)
    assert [g.group_names[g.group[t]] for t in tri] == ["obstruction_0", "overhang"]
    # analytic: the obstruction's front face is at y = -9, 11 m from y = 2 along −y
    assert dist[0] == pytest.approx(np.linalg.norm(d[0]), rel=RTOL)
    # the overhang underside z = 2.1: t = (2.1 - 1.5) / 0.55 of the direction vector
    assert dist[1] == pytest.approx(0.6 / 0.55 * np.linalg.norm(d[1]), rel=RTOL)
    assert np.all(g.exterior[tri])


def test_reveals_of_thick_walls():
    g = box(thickness=0.3)  # glass at mid-depth y = -0.15, opening x 2..4, z 1..2
    s = Scene(g)
    o = np.array([[3.0, 1.0, 1.5], [3.0, 1.0, 1.5]])
    d = np.array([[0.0, -1.0, 0.45], [0.0, -1.0, 0.30]])
    tri, dist = s.first_hit(o, d)
    # slope 0.45 passes the inner edge (z = 1.95 at y = 0) and meets the head reveal
    # z = 2 at y = -1/9, before the glass: an interior surface (analytic)
    assert g.group_names[g.group[tri[0]]] == "reveal_0" and not g.exterior[tri[0]]
    assert dist[0] == pytest.approx(np.hypot(1 + 1 / 9, 0.5), rel=RTOL)
    # slope 0.30 clears the opening at both faces (z = 1.89 at y = -0.3) and escapes
    code, cos = s.sky_view(o, d)
    assert code.tolist() == [BLOCKED, 0]
    assert cos[1] == pytest.approx(1 / np.hypot(1, 0.3), abs=1e-6)  # analytic incidence


def test_exterior_point_sees_sky_without_glazing():
    s = Scene(box())
    code, cos = s.sky_view([[3.0, -5.0, 1.0]], [[0.0, -1.0, 1.0]])
    assert code.tolist() == [NO_GLAZING] and cos[0] == 0.0


def test_pickle_round_trip_gives_identical_answers():
    s = Scene(box(windows=[FRONT, {"wall": "roof", "width": 1.0, "length": 1.0, "x": 3.0,
                                   "y": 4.0, "glazing": "top"}]))
    t = pickle.loads(pickle.dumps(s))
    rng = np.random.default_rng(3)
    o = rng.uniform([0.1, 0.1, 0.1], [W - 0.1, D - 0.1, H - 0.1], size=(20_000, 3))
    d = rng.normal(size=(20_000, 3))
    for a, b in zip(s.first_hit(o, d), t.first_hit(o, d), strict=True):
        assert np.array_equal(a, b)
    for a, b in zip(s.glazing_crossing(o, d), t.glazing_crossing(o, d), strict=True):
        assert np.array_equal(a, b)
    assert np.array_equal(s.occluded(o, d), t.occluded(o, d))
    assert t.epsilon == s.epsilon


def test_occlusion_throughput():
    s = Scene(box())
    n = 1_000_000
    d = np.random.default_rng(5).normal(size=(n, 3))
    o = np.array([3.0, 4.0, 1.5])
    s.occluded(o, d[:1000])  # warm-up
    t0 = time.perf_counter()
    occ = s.occluded(o, d)
    rate = n / (time.perf_counter() - t0)
    print(f"occlusion: {rate / 1e6:.1f} Mrays/s")
    # loose floor (2-core CI under load): a per-ray Python loop would be ~100x slower
    assert rate > 2e5
    assert 0.9 < occ.mean() < 1.0


def test_room_without_windows_blocks_everything():
    s = Scene(box(windows=()))
    d = np.random.default_rng(9).normal(size=(1000, 3))
    o = np.array([3.0, 4.0, 1.5])
    gset, cos, dist = s.glazing_crossing(o, d)
    assert np.all(gset == -1) and np.all(cos == 0) and np.all(np.isinf(dist))
    assert np.all(s.sky_view(o, d)[0] == BLOCKED)  # a closed box: nothing escapes
    assert np.all(s.first_hit(o, d)[0] >= 0)


# ------------------------------------------------------------------ fast paths (issue 8)


def _random_rays(n, seed):
    rng = np.random.default_rng(seed)
    o = rng.uniform([0.1, 0.1, 0.1], [W - 0.1, D - 0.1, H - 0.1], size=(n, 3))
    d = rng.normal(size=(n, 3))
    return o, d / np.linalg.norm(d, axis=1, keepdims=True)


def _two_window_box():
    return box(windows=[FRONT, {"wall": "roof", "width": 1.0, "length": 1.0, "x": 3.0,
                                "y": 4.0, "glazing": "top"}],
               obstructions=[{"x": 3.0, "y": -6.0, "width": 8.0, "depth": 2.0, "height": 4.0}])


def test_trace_agrees_with_separate_queries():
    # Scene.trace (one combined query + a second one for glazing-first rays) against
    # first_hit and glazing_crossing (each checked against analytic distances above).
    g = _two_window_box()
    s = Scene(g)
    o, d = _random_rays(50_000, 21)
    hits = s.trace(o, d, unit=True)
    tri, dist = s.first_hit(o, d)
    gset, cos, gdist = s.glazing_crossing(o, d)
    assert np.array_equal(hits.triangle, tri)
    np.testing.assert_allclose(hits.distance, dist, rtol=RTOL)
    crossed = (gset >= 0) & (gdist < dist)
    assert crossed.sum() > 500  # the rays do reach both windows
    assert np.array_equal(hits.glazing, np.where(crossed, gset, -1))
    assert np.array_equal(hits.cos_incidence, np.where(crossed, cos, 0.0))
    # barycentric definition: p = (1 − u − v) v0 + u v1 + v v2 is the hit point o + t d
    # (float32 inside Embree: 1e-5 m on a room of a few metres)
    h = tri >= 0
    t = g.triangles[tri[h]]
    u, v = hits.u[h, None].astype(float), hits.v[h, None].astype(float)
    p = (1 - u - v) * t[:, 0] + u * t[:, 1] + v * t[:, 2]
    np.testing.assert_allclose(p, o[h] + dist[h, None] * d[h], atol=1e-5 * D)
    # front face: the ray runs against the geometry's normal (winding (v1−v0)×(v2−v0));
    # grazing rays (|cos| < 1e-6) may go either way in float32
    c = np.einsum("ij,ij->i", g.normals[tri[h]], d[h])
    clear = np.abs(c) > 1e-6
    assert np.array_equal(hits.front[h][clear], (c < 0)[clear])
    assert not hits.front[~h].any()


def test_exit_glazing_and_sky_view_agree_with_separate_queries():
    # A ray from inside reaches the sky through glazing when it crosses glazing and no
    # opaque triangle lies anywhere along it (definition, DEVELOPERS.md coefficients).
    s = Scene(_two_window_box())
    o, d = _random_rays(50_000, 22)
    gset, cos, _ = s.glazing_crossing(o, d)
    blocked = s.occluded(o, d)
    expect = np.where(blocked, -1, gset)
    assert (expect >= 0).sum() > 200
    got, got_cos = s.exit_glazing(o, d, unit=True)
    assert np.array_equal(got, expect)
    assert np.array_equal(got_cos, np.where(expect >= 0, cos, 0.0))
    code, code_cos = s.sky_view(o, d)
    assert np.array_equal(np.where(code >= 0, code, -1), expect)
    assert np.array_equal(code_cos, got_cos)


def test_float32_unit_directions_are_used_as_given():
    # unit=True with float32 unit directions: the same answers as float64 input up to
    # float32 rounding of the directions (1e-7), i.e. identical triangles except grazing
    s = Scene(_two_window_box())
    o, d = _random_rays(20_000, 23)
    d32 = d.astype(np.float32)
    a = s.trace(o, d32, unit=True)
    b = s.trace(o, d)
    assert np.mean(a.triangle == b.triangle) > 0.999
    np.testing.assert_allclose(a.distance[a.triangle == b.triangle],
                               b.distance[a.triangle == b.triangle], rtol=1e-5)
    _, dd = s._prepare(o, d32, unit=True)
    assert dd is d32 or np.shares_memory(dd, d32)  # no copy of float32 unit directions


def test_glazing_cosines_with_one_and_with_several_window_normals():
    # |cos| of incidence = |d · n| of the crossed glazing triangle (definition), here
    # against numpy's float64 dot product with the geometry's normals (1e-12: rounding
    # of the float32 directions' products only). With all windows in one plane the
    # normal is broadcast instead of gathered per ray: the same products, the same bits.
    from luxsweep.kernels.raytrace import _abs_cos

    o, d = _random_rays(40_000, 24)
    d32 = d.astype(np.float32)
    for geo, one in ((box(), True), (_two_window_box(), False)):
        s = Scene(geo)
        assert (s._one_glazing_normal is not None) == one
        gset, cos = s.exit_glazing(o, d32, unit=True)
        through = gset >= 0
        assert through.sum() > 100
        _, gcos, _ = s.glazing_crossing(o, d32, unit=True)
        assert np.array_equal(cos[through], gcos[through])
        normals = geo.normals[s.glazing_index]
        exact = np.abs(d32[through].astype(float) @ normals.T)  # every window plane
        assert np.all(np.isclose(exact, cos[through, None], rtol=1e-12, atol=0).any(axis=1))
        rng = np.random.default_rng(5)
        tri = rng.integers(0, s.glazing_index.size, d32.shape[0])
        for rays in (np.arange(d32.shape[0]), np.sort(rng.choice(d32.shape[0], 300, False))):
            assert np.array_equal(s._glazing_cos(d32, rays, tri[rays]),
                                  _abs_cos(d32[rays], s._glazing_normals[tri[rays]]))
        # rays that all cross glazing (as the coefficient stage sends them) answer as in a mix
        sub = np.flatnonzero(s.glazing_crossing(o, d32, unit=True)[0] >= 0)
        g_sub, c_sub = s.exit_glazing(o[sub], d32[sub], unit=True)
        assert np.array_equal(g_sub, gset[sub]) and np.array_equal(c_sub, cos[sub])
