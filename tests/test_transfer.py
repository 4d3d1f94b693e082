"""Element transfer (kernels/transfer.py): meshing, sampling, form factors, radiosity.

Every physics check names its outside reference beside the assertion.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.sparse
from scipy import integrate

from luxsweep.kernels.geometry import Geometry, Material, parametric_room
from luxsweep.kernels.raytrace import Scene
from luxsweep.kernels.transfer import (
    cosine_directions,
    factor_element_parallel_rectangle,
    factor_element_perpendicular_rectangle,
    factor_parallel_rectangles,
    gather_matrix,
    gather_radiosity,
    latin_square,
    mesh_elements,
    onb,
    points_in_triangles,
    solve_radiosity,
    trace_paths,
    transfer_matrix,
)


def _rectangle(origin, eu, ev) -> np.ndarray:
    """Two triangles of the rectangle origin + [0,1]eu + [0,1]ev, normal eu × ev."""
    o, u, v = (np.asarray(a, float) for a in (origin, eu, ev))
    return np.array([[o, o + u, o + u + v], [o, o + u + v, o + v]])


def _plates(a: float, b: float, c: float) -> Geometry:
    """Two directly opposed a × b rectangles c apart, facing each other."""
    lower = _rectangle([0, 0, 0], [a, 0, 0], [0, b, 0])  # normal +z
    upper = _rectangle([0, 0, c], [0, b, 0], [a, 0, 0])  # normal -z
    mat = (Material("plate", "opaque", 0.5),)
    return Geometry(
        triangles=np.concatenate([lower, upper]),
        material=np.zeros(4, np.int32),
        materials=mat,
        glazing_sets=(),
        group=np.array([0, 0, 1, 1], np.int32),
        group_names=("lower", "upper"),
    )


def _array(matrix) -> np.ndarray:
    """A sampled matrix (ndarray or CSR, kernels.transfer.Matrix) as an ndarray."""
    return matrix.toarray() if scipy.sparse.issparse(matrix) else np.asarray(matrix)


# ------------------------------------------------------------------ analytic helpers


def test_analytic_factors_against_scipy_integration():
    # The closed forms (Howell catalogue) against a direct numerical integration of
    # cos θ1 cos θ2 / (π r²) with scipy.integrate.dblquad; 1e-8 is quadrature accuracy.
    a, b, c = 2.0, 3.0, 1.5
    par = integrate.dblquad(lambda y, x: c * c / (x * x + y * y + c * c) ** 2 / np.pi,
                            0, a, 0, b, epsabs=1e-12)[0]
    assert factor_element_parallel_rectangle(a, b, c) == pytest.approx(par, abs=1e-8)
    per = integrate.dblquad(lambda z, x: z * b / (x * x + b * b + z * z) ** 2 / np.pi,
                            0, a, 0, c, epsabs=1e-12)[0]
    assert factor_element_perpendicular_rectangle(a, b, c) == pytest.approx(per, abs=1e-8)
    # Howell catalogue tabulates F = 0.1998 for unit squares one side apart (from memory);
    # four digits as printed.
    assert factor_parallel_rectangles(1.0, 1.0, 1.0) == pytest.approx(0.1998, abs=1e-4)


# ------------------------------------------------------------------ meshing and sampling


def test_mesh_elements_area_and_locate():
    tri = np.array([
        [[0, 0, 0], [7.2, 0, 0], [7.2, 8, 0]],
        [[0, 0, 3], [0, 0.3, 3], [5, 0, 3]],  # a sliver
    ], float)
    el = mesh_elements(tri, np.array([0.2, 0.4]), np.zeros(2, bool), 0.5)
    # areas add up to the parent triangles exactly (analytic: ½ |e1 × e2|)
    assert el.area.sum() == pytest.approx(0.5 * 7.2 * 8 + 0.5 * 0.3 * 5, rel=1e-12)
    assert np.all(el.divisions >= 6)  # the 5 m long sliver is cut along its length too
    rng = np.random.default_rng(3)
    pts = points_in_triangles(el.vertices, *rng.random((2, el.n, 4)))
    found = el.locate(np.repeat(el.triangle, 4), pts.reshape(-1, 3))
    assert np.array_equal(found, np.repeat(np.arange(el.n), 4))


def test_cosine_sampling_moments():
    # Density cos θ / π (Malley 1988): E[cos θ] = 2/3 and E[cos² θ] = 1/2 (analytic);
    # stratified samples: 1e-3 is far above the stratified error for 4096 samples.
    rng = np.random.default_rng(0)
    n = rng.normal(size=(20, 3))
    n /= np.linalg.norm(n, axis=1, keepdims=True)
    t1, t2 = onb(n)
    assert np.allclose(np.einsum("ij,ij->i", t1, n), 0, atol=1e-12)
    assert np.allclose(np.einsum("ij,ij->i", t1, t2), 0, atol=1e-12)
    u1, u2 = latin_square(20, 4096, rng)
    d = cosine_directions(n, u1, u2)
    cos = np.einsum("ijk,ik->ij", d, n)
    assert cos.min() >= 0
    assert np.allclose(np.linalg.norm(d, axis=2), 1, atol=1e-12)
    assert np.abs(cos.mean(axis=1) - 2 / 3).max() < 1e-3
    assert np.abs((cos**2).mean(axis=1) - 0.5).max() < 1e-3


# ------------------------------------------------------------------ form factors


@pytest.mark.parametrize(("a", "b", "c"), [(1.0, 1.0, 1.0), (2.0, 1.0, 0.5)])
def test_parallel_rectangles_form_factor(a, b, c):
    geo = _plates(a, b, c)
    scene = Scene(geo)
    el = mesh_elements(geo.triangles, geo.reflectance, geo.exterior, 0.25)
    tr = transfer_matrix(scene, el, 2048, np.random.default_rng(1))
    lower = np.flatnonzero(el.normal[:, 2] > 0)
    upper = np.flatnonzero(el.normal[:, 2] < 0)
    f = _array(tr.same)
    f_lu = (el.area[lower] @ f[np.ix_(lower, upper)].sum(axis=1)) / el.area[lower].sum()
    f_ul = (el.area[upper] @ f[np.ix_(upper, lower)].sum(axis=1)) / el.area[upper].sum()
    exact = factor_parallel_rectangles(a, b, c)  # Howell catalogue, directly opposed rectangles
    # 2 %: binomial noise of ~100k stratified rays is < 0.5 % (1 σ); 2 % is the required bound
    assert f_lu == pytest.approx(exact, rel=0.02)
    assert f_ul == pytest.approx(exact, rel=0.02)


def test_closed_box_conserves_energy():
    # Energy balance of a closed grey enclosure (Cohen & Wallace 1993, ch. 2; DESIGN §2.5):
    # with first-hit flux Φ and uniform reflectance ρ every surface element ends with mean
    # irradiance Φ / (A (1 − ρ)). Required within 0.5 %; the reciprocity (shooting)
    # estimator makes it hold to round-off, so we also check 1e-9.
    rho = 0.6
    geo = parametric_room(3.0, 4.0, 2.5, [], {"floor": rho, "walls": rho, "ceiling": rho}, {})
    scene = Scene(geo)
    el = mesh_elements(geo.triangles, geo.reflectance, geo.exterior, 0.5)
    tr = transfer_matrix(scene, el, 256, np.random.default_rng(7))
    landed = (el.area @ _array(tr.same)) / el.area
    assert landed.min() > 0.999  # closed: (almost) every ray lands (float32 seams leak < 0.1 %)
    rng = np.random.default_rng(8)
    source = np.zeros((el.n, 3))
    source[el.normal[:, 2] > 0.5, 0] = 1.0  # 1 lx on the floor
    source[:, 1] = rng.random(el.n)  # arbitrary first-hit pattern
    source[np.abs(el.normal[:, 0]) > 0.5, 2] = 10.0  # side walls only
    b = solve_radiosity(tr.same, el.reflectance, source)
    irradiance = b / rho
    area = el.area.sum()
    flux = el.area @ source
    mean = el.area @ irradiance / area
    expected = flux / (area * (1 - rho))
    # the only leak is rays through float32 seams: correct the balance by it exactly
    leak = el.area @ ((1 - landed)[:, None] * b) / area
    assert mean == pytest.approx(expected, rel=0.005)
    assert mean + leak / (1 - rho) == pytest.approx(expected, rel=1e-9)


def test_gather_radiosity_equals_solve_then_gather():
    # Adjoint identity G (I − ρF)⁻¹ ρ S = (G (I − ρF)⁻¹ ρ) S (linear algebra).
    rng = np.random.default_rng(2)
    n = 40
    f = rng.random((n, n))
    f /= f.sum(axis=1, keepdims=True) * 1.1
    rho = rng.uniform(0.1, 0.9, n)
    s = rng.random((n, 7))
    g = rng.random((5, n))
    direct = g @ solve_radiosity(f, rho, s)
    adjoint = gather_radiosity(g, f, rho) @ s
    assert np.allclose(direct, adjoint, rtol=1e-12, atol=1e-12)


def test_sensor_gather_sees_whole_closed_room():
    # A point inside a closed room sees surfaces over its whole hemisphere: the gather
    # fractions sum to 1 (definition of a cosine-weighted fraction).
    geo = parametric_room(3.0, 4.0, 2.5, [], {"floor": 0.2, "walls": 0.5, "ceiling": 0.7}, {})
    scene = Scene(geo)
    el = mesh_elements(geo.triangles, geo.reflectance, geo.exterior, 0.5)
    pts = np.array([[1.5, 2.0, 0.8], [0.3, 3.5, 2.0]])
    nrm = np.array([[0, 0, 1.0], [0.6, 0, 0.8]])
    same, through = gather_matrix(scene, el, pts, nrm, 1024, np.random.default_rng(0))
    assert through == []
    assert np.allclose(_array(same).sum(axis=1), 1.0, atol=1e-3)
    # the upward sensor sees the ceiling with the parallel-rectangle factor (Howell
    # catalogue, superposition of four corner rectangles); 3 % ≈ 3 σ of 1024 stratified rays
    ceiling = el.normal[:, 2] < -0.5
    seen = _array(same)[0, ceiling].sum()
    h = 2.5 - 0.8
    exact = sum(factor_element_parallel_rectangle(x, y, h) for x in (1.5, 1.5) for y in (2.0, 2.0))
    assert seen == pytest.approx(exact, rel=0.03)


# ------------------------------------------------------------------ fast paths (issue 8)


def test_locate_barycentric_matches_locate():
    # Barycentric coordinates (b1, b2) of p = v0 + b1 e1 + b2 e2 (definition) name the same
    # element as the point itself; float32 coordinates (Embree's) agree off the element edges.
    tri = np.array([[[0, 0, 0], [7.2, 0, 0], [7.2, 8, 0]], [[0, 0, 3], [0, 0.3, 3], [5, 0, 3]]],
                   float)
    el = mesh_elements(tri, np.array([0.2, 0.4]), np.zeros(2, bool), 0.5)
    rng = np.random.default_rng(4)
    b1 = rng.random(200_000)
    b2 = rng.random(b1.size) * (1 - b1)
    t = rng.integers(0, 2, b1.size)
    p = tri[t, 0] + b1[:, None] * (tri[t, 1] - tri[t, 0]) + b2[:, None] * (tri[t, 2] - tri[t, 0])
    ref = el.locate(t, p)
    assert np.array_equal(el.locate_barycentric(t, b1, b2), ref)
    f32 = el.locate_barycentric(t, b1.astype(np.float32), b2.astype(np.float32))
    assert np.mean(f32 != ref) < 1e-4


def test_trace_paths_lands_on_the_element_under_the_hit_point():
    # trace_paths locates elements from Embree's barycentrics; the hit point o + t d of
    # first_hit (checked against analytic distances in test_raytrace) must lie in the same
    # element except within float32 rounding of an element edge (< 0.1 % of the rays).
    geo = parametric_room(4.0, 5.0, 2.7, [{"wall": "front", "width": 2.0, "sill": 0.9,
                                           "head": 2.1, "offset": 0.0, "glazing": "main"}],
                          {"floor": 0.2, "walls": 0.5, "ceiling": 0.7}, {"main": 2})
    scene = Scene(geo)
    el = mesh_elements(geo.triangles, geo.reflectance, geo.exterior, 0.5, mask=~geo.is_glazing)
    rng = np.random.default_rng(5)
    o = rng.uniform([0.2, 0.2, 0.2], [3.8, 4.8, 2.5], size=(100_000, 3))
    d = rng.normal(size=o.shape)
    d /= np.linalg.norm(d, axis=1, keepdims=True)
    paths = trace_paths(scene, el, o, d, (2,))
    tri, dist = scene.first_hit(o, d)
    hit = tri >= 0
    ref = np.full(o.shape[0], -1)
    ref[hit] = el.locate(tri[hit], o[hit] + dist[hit, None] * d[hit])
    assert np.mean(paths.element != ref) < 1e-3
    assert np.array_equal(paths.escaped, ~hit)
    assert paths.escaped.sum() > 1000 and np.all(paths.glazing[paths.escaped] == 0)


# ------------------------------------------------------------------ pieces, sums, solves


def _room_with_outside():
    window = [{"wall": "front", "width": 2.0, "sill": 0.8, "head": 2.2, "offset": 0.0,
               "glazing": "main"}]
    return parametric_room(3.0, 4.0, 2.5, window, {"floor": 0.2, "walls": 0.5, "ceiling": 0.7},
                           {"main": 2}, overhang={"depth": 0.6, "gap": 0.1},
                           obstructions=[{"x": 1.5, "y": -6.0, "width": 8.0, "depth": 2.0,
                                          "height": 5.0}])


def test_piece_size_does_not_change_the_sampled_matrices():
    # Pieces only bound the temporary arrays: the same draws, the same rays in the same
    # order, the same sums in the same order, hence the same bits (interior, exterior and
    # through-window transfer, sky sources, sensor gather).
    from luxsweep.kernels.sky import patch_scheme
    from luxsweep.kernels.transfer import PIECE

    geo = _room_with_outside()
    scene = Scene(geo)
    active = ~geo.is_glazing & (geo.reflectance > 0)
    el = mesh_elements(geo.triangles, geo.reflectance, geo.exterior, 0.8, mask=active)
    assert el.exterior.any() and (~el.exterior).any()
    sch = patch_scheme(1)

    def transfer(piece):
        return transfer_matrix(scene, el, 64, np.random.default_rng(3), (2,), sch,
                               batch=64 * 40, piece=piece)

    ref = transfer(1 << 30)
    assert _array(ref.through[0]).sum() > 0  # some interior light reaches the outside
    for piece in (1, 64 * 7, PIECE):
        tr = transfer(piece)
        for name in ("same", "sky_interior", "sky_exterior"):
            assert np.array_equal(_array(getattr(tr, name)), _array(getattr(ref, name))), name
        assert np.array_equal(_array(tr.through[0]), _array(ref.through[0]))
    pts = np.array([[1.5, 2.0, 0.8], [0.4, 3.5, 1.2], [2.5, 0.5, 2.0]])
    nrm = np.array([[0, 0, 1.0], [0, -1.0, 0], [0.6, 0, 0.8]])
    same, through = gather_matrix(scene, el, pts, nrm, 256, np.random.default_rng(4), (2,),
                                  batch=1 << 30)
    for batch in (1, 256 * 2):
        s, t = gather_matrix(scene, el, pts, nrm, 256, np.random.default_rng(4), (2,),
                             batch=batch)
        assert np.array_equal(_array(s), _array(same))
        assert np.array_equal(_array(t[0]), _array(through[0]))


def test_triplet_sums_are_sequential_sums():
    # The dense path adds the values in the order given, as np.add.at does (sequential
    # IEEE additions: the same bits); the sparse path (few values) agrees to rounding.
    from luxsweep.kernels.transfer import _Triplets

    rng = np.random.default_rng(5)
    shape = (30, 40)
    many = _Triplets(shape)
    ref = np.zeros(shape)
    for size in (500, 3000, 1):
        r, c, v = rng.integers(0, 30, size), rng.integers(0, 40, size), rng.random(size)
        many.add(r, c, v)
        np.add.at(ref, (r, c), v)
    dense = many.matrix()
    assert isinstance(dense, np.ndarray) and np.array_equal(dense, ref)
    few = _Triplets(shape)
    r, c, v = rng.integers(0, 30, 20), rng.integers(0, 40, 20), rng.random(20)
    few.add(r, c, v)
    ref = np.zeros(shape)
    np.add.at(ref, (r, c), v)
    sparse = few.matrix()
    assert scipy.sparse.issparse(sparse)
    np.testing.assert_allclose(sparse.toarray(), ref, rtol=1e-15)
    assert _Triplets(shape).matrix().nnz == 0


def test_radiosity_solves_agree_with_numpy_and_leave_inputs_alone():
    # B = (I − diag ρ F)⁻¹ diag ρ S against numpy.linalg.solve (LAPACK gesv, an independent
    # route); relative 1e-12 for this well-conditioned system (ρ < 1, row sums of F < 1).
    rng = np.random.default_rng(6)
    n = 60
    f = rng.random((n, n)) * (rng.random((n, n)) < 0.3)
    f /= f.sum(axis=1, keepdims=True) * 1.05
    rho = rng.uniform(0.1, 0.9, n)
    s = rng.random((n, 4))
    g = rng.random((3, n))
    system = np.eye(n) - rho[:, None] * f
    expected = np.linalg.solve(system, rho[:, None] * s)
    kept = f.copy()
    for transfer in (f, scipy.sparse.csr_matrix(f)):
        np.testing.assert_allclose(solve_radiosity(transfer, rho, s), expected, rtol=1e-12)
        np.testing.assert_allclose(gather_radiosity(g, transfer, rho),
                                   np.linalg.solve(system.T, g.T).T * rho, rtol=1e-12)
    np.testing.assert_allclose(gather_radiosity(scipy.sparse.csr_matrix(g), f, rho) @ s,
                               g @ expected, rtol=1e-12)
    assert np.array_equal(f, kept)  # the inputs are not overwritten
