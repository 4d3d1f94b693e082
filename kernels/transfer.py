"""Element transfer for reflected light: meshing, hemisphere sampling, radiosity.

The opaque surfaces are cut into small planar *elements* (area ``A_i``,
reflectance ``rho_i``).  With ``S[i, k]`` the first-hit irradiance of element
``i`` from source ``k`` (sky patch, ground, sun point) and ``F[i, j]`` the form
factor from element ``i`` to element ``j`` (the fraction of ``i``'s
cosine-weighted hemisphere that sees ``j``), the radiosity (exitance) of every
element solves

    B = diag(rho) (S + F B)   ->   B = (I - diag(rho) F)^-1 diag(rho) S,

and a sensor with gather vector ``G[s, j]`` (fraction of its cosine-weighted
hemisphere seeing element ``j``) receives the reflected illuminance ``G B``
(Lambertian surfaces: luminance ``B / pi``).

Two estimators of ``F`` from the same cosine-weighted rays exist: *gather*
(rays leaving ``i`` that land on ``j``) and *shoot* (rays leaving ``j`` that
land on ``i``, turned around by reciprocity ``A_i F_ij = A_j F_ji``).  This
module uses the shooting estimator for surface-to-surface transfer inside one
region: every ray that leaves an element lands somewhere or leaves the room, so
``sum_i A_i F_ij = A_j (1 - loss_j)`` holds *exactly* for every sample, and a
closed box conserves energy to round-off (DESIGN §2.5), not merely on average.

Element meshing: every triangle of the scene is cut by uniform ``m x m``
subdivision (edges split into ``m`` equal parts, ``m^2`` congruent
sub-triangles), ``m`` chosen from the triangle's size and ``element_size``.
A ray hit on a triangle is mapped to its element from the barycentric
coordinates of the hit point, so the ray-tracing scene stays the coarse one.

Internal glazing (between spaces of a building): a ray that crosses it carries
its transmittance ``factor`` (:attr:`kernels.raytrace.Hits.factor`), which
multiplies the ray's weight in every sum (same-region transfer, the through
matrices, sky sources, the gather); transmission is the same both ways, so
the shooting estimator's reciprocity still holds.

Everything here is pure numerics (arrays in, arrays out); the ray casting of
the classification step goes through :class:`kernels.raytrace.Scene`
(:meth:`~kernels.raytrace.Scene.trace`: one combined query per ray, the element
found from Embree's barycentric coordinates of the hit). Ray origins and
directions are generated in float32, the precision Embree works in; the
sampling (random draws, strata) is float64 as before.

Memory: the random numbers are drawn for ``batch`` rays at a time (this fixes
them), but rays are traced and tallied in pieces of :data:`PIECE` rays, so the
temporary arrays stay a few hundred kB and are recycled by the allocator
instead of being mapped afresh for every batch (on the 2-core reference
machine fresh pages cost 0.1–0.5 s of system time per coefficient set). The
sampled matrices are dense ndarrays when small and well filled (a room's
``F``; the solve needs it dense anyway), CSR otherwise (:data:`Matrix`). The
results do not depend on the piece size (a test).

References
----------
Cohen, M. F. & Wallace, J. R., *Radiosity and Realistic Image Synthesis*,
Academic Press, 1993 (radiosity equation, reciprocity).
Malley, T. J. V., *A shading method for computer generated images*, MSc thesis,
University of Utah, 1988 (cosine-weighted sampling by projecting a uniform
disc sample onto the hemisphere).
Duff, T. et al., "Building an orthonormal basis, revisited", Journal of
Computer Graphics Techniques 6(1), 2017.
Howell, J. R., *A Catalog of Radiation Heat Transfer Configuration Factors*
(3rd ed., University of Texas at Austin, 2010) — the analytic factors used in
:func:`factor_element_parallel_rectangle`, :func:`factor_element_perpendicular_rectangle`
and :func:`factor_parallel_rectangles`.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.linalg
import scipy.sparse

from luxsweep.kernels.glazing import relative_transmittance

Matrix = np.ndarray | scipy.sparse.csr_matrix
"""A sampled matrix: dense when small and well filled, else CSR (see :class:`_Triplets`)."""

__all__ = [
    "Elements",
    "Matrix",
    "RayPaths",
    "Transfer",
    "cosine_directions",
    "factor_element_parallel_rectangle",
    "factor_element_perpendicular_rectangle",
    "factor_parallel_rectangles",
    "factor_radiosity",
    "gather_matrix",
    "gather_radiosity",
    "inset_triangles",
    "latin_square",
    "mesh_elements",
    "onb",
    "points_in_triangles",
    "relative_transmit",
    "solve_factored",
    "solve_radiosity",
    "trace_paths",
    "transfer_matrix",
]


# ---------------------------------------------------------------------------
# Meshing
# ---------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class Elements:
    """Planar triangular elements cut from the triangles of a scene.

    Attributes
    ----------
    vertices : ndarray (n, 3, 3) [m]
        Element corners, wound like their parent triangle.
    normal : ndarray (n, 3)
        Unit normal of each element (the parent triangle's normal).
    area : ndarray (n,) [m²]
    reflectance : ndarray (n,)
        Diffuse reflectance of each element (0-1).
    exterior : ndarray (n,) bool
        True for surfaces outside the room (obstructions, overhangs, outer
        faces): they see the sky without glazing and are never lit by light
        that has left the room.
    triangle : ndarray (n,) int64
        Index of the parent triangle (in the triangle list given to
        :func:`mesh_elements`).
    first : ndarray (n_triangles,) int64
        Index of the first element of each triangle, -1 for triangles that were
        not meshed.
    divisions : ndarray (n_triangles,) int64
        Subdivision ``m`` of each triangle (``m^2`` elements; 0 if not meshed).
    parents : ndarray (n_triangles, 3, 3) [m]
        The parent triangles themselves (for locating hits).
    """

    vertices: np.ndarray
    normal: np.ndarray
    area: np.ndarray
    reflectance: np.ndarray
    exterior: np.ndarray
    triangle: np.ndarray
    first: np.ndarray
    divisions: np.ndarray
    parents: np.ndarray

    @property
    def n(self) -> int:
        """Number of elements."""
        return int(self.area.shape[0])

    @property
    def centroid(self) -> np.ndarray:
        """Element centroids, ndarray (n, 3) [m]."""
        return self.vertices.mean(axis=1)

    def locate(self, triangle: np.ndarray, points: np.ndarray) -> np.ndarray:
        """Element holding each point on a parent triangle.

        Parameters
        ----------
        triangle : ndarray (k,) int
            Parent triangle index of each point (must be meshed).
        points : ndarray (k, 3) [m]
            Points on (or numerically near) those triangles.

        Returns
        -------
        ndarray (k,) int64
            Element index.
        """
        tri = self.parents[triangle]
        m = self.divisions[triangle]
        b1, b2 = _barycentric(tri, points)
        return self.first[triangle] + _subtriangle_index(b1, b2, m)

    def locate_barycentric(self, triangle: np.ndarray, b1: np.ndarray,
                           b2: np.ndarray) -> np.ndarray:
        """Element holding each point given by barycentric coordinates on its parent.

        Parameters
        ----------
        triangle : ndarray (k,) int
            Parent triangle index of each point (must be meshed).
        b1, b2 : ndarray (k,)
            Barycentric coordinates, ``p = v0 + b1 (v1 − v0) + b2 (v2 − v0)``
            (Embree's ``u``, ``v`` of a hit, :class:`kernels.raytrace.Hits`).

        Returns
        -------
        ndarray (k,) int64
            Element index.
        """
        return self.first[triangle] + _subtriangle_index(b1, b2, self.divisions[triangle])


def _barycentric(tri: np.ndarray, p: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Barycentric coordinates (b1, b2) of p in triangles tri (p = v0 + b1 e1 + b2 e2)."""
    e1 = tri[:, 1] - tri[:, 0]
    e2 = tri[:, 2] - tri[:, 0]
    w = p - tri[:, 0]
    d11 = np.einsum("ij,ij->i", e1, e1)
    d12 = np.einsum("ij,ij->i", e1, e2)
    d22 = np.einsum("ij,ij->i", e2, e2)
    w1 = np.einsum("ij,ij->i", w, e1)
    w2 = np.einsum("ij,ij->i", w, e2)
    det = d11 * d22 - d12 * d12
    b1 = (d22 * w1 - d12 * w2) / det
    b2 = (d11 * w2 - d12 * w1) / det
    return b1, b2


def _subtriangle_index(b1: np.ndarray, b2: np.ndarray, m: np.ndarray) -> np.ndarray:
    """Index of the sub-triangle of a uniform m x m subdivision holding (b1, b2).

    Ordering: first the m(m+1)/2 "lower" triangles (cell (i, j), i + j <= m-1,
    corners (i,j), (i+1,j), (i,j+1)), row by row in i; then the m(m-1)/2
    "upper" ones (i + j <= m-2, corners (i+1,j), (i+1,j+1), (i,j+1)).
    Works in the floating-point type of the coordinates (float32 for Embree's);
    the index arithmetic is exact in it (integers below 2^24 in float32).
    """
    dtype = np.result_type(b1, b2, np.float32)
    if dtype == np.float32 and np.max(m, initial=0) > 2048:
        dtype = np.dtype(np.float64)
    mf = np.asarray(m, dtype=dtype)
    top = mf - 1
    a = np.clip(b1, 0.0, 1.0).astype(dtype, copy=False) * mf
    b = np.clip(b2, 0.0, 1.0).astype(dtype, copy=False) * mf
    i = np.minimum(np.floor(a), top)
    j = np.minimum(np.floor(b), top - i)  # (also) numerically past the hypotenuse
    a -= i
    b -= j
    upper = (a + b > 1.0) & (i + j < top)
    # lower: i m − i(i − 1)/2 + j; upper: m(m + 1)/2 + i(m − 1) − i(i − 1)/2 + j
    index = i * (mf - 0.5 * (i - 1)) + j
    index += upper * (0.5 * mf * (mf + 1) - i)
    return index.astype(np.int64)


def _subdivide(tri: np.ndarray, m: int) -> np.ndarray:
    """The m² sub-triangles of one triangle, in :func:`_subtriangle_index` order."""
    v0, e1, e2 = tri[0], (tri[1] - tri[0]) / m, (tri[2] - tri[0]) / m
    lo = [(i, j) for i in range(m) for j in range(m - i)]
    up = [(i, j) for i in range(m - 1) for j in range(m - 1 - i)]
    lo_a = np.array(lo, dtype=float).reshape(-1, 2)
    up_a = np.array(up, dtype=float).reshape(-1, 2)

    def corner(ij: np.ndarray, di: int, dj: int) -> np.ndarray:
        return v0 + (ij[:, :1] + di) * e1 + (ij[:, 1:] + dj) * e2

    lower = np.stack([corner(lo_a, 0, 0), corner(lo_a, 1, 0), corner(lo_a, 0, 1)], axis=1)
    upper = np.stack([corner(up_a, 1, 0), corner(up_a, 1, 1), corner(up_a, 0, 1)], axis=1)
    return np.concatenate([lower, upper], axis=0)


def mesh_elements(
    triangles: np.ndarray,
    reflectance: np.ndarray,
    exterior: np.ndarray,
    element_size: float | np.ndarray,
    mask: np.ndarray | None = None,
) -> Elements:
    """Cut triangles into elements of about ``element_size``.

    Parameters
    ----------
    triangles : ndarray (n, 3, 3) [m]
        Scene triangles (building frame).
    reflectance : ndarray (n,)
        Diffuse reflectance per triangle.
    exterior : ndarray (n,) bool
        Exterior-surface flag per triangle.
    element_size : float or ndarray (n,) [m]
        Target edge length (one value, or one per triangle). A triangle is
        split into ``m²`` congruent pieces with
        ``m = ceil(max(sqrt(2 A), L_max / 2) / element_size)``, ``A`` its area and
        ``L_max`` its longest edge: the right-angled half of an ``s x s`` square
        gives half-squares of side about ``element_size``, and slivers are
        still cut along their length.
    mask : ndarray (n,) bool, optional
        Triangles to mesh (default all); others get ``first = -1``.

    Returns
    -------
    Elements
    """
    triangles = np.asarray(triangles, dtype=np.float64)
    n_tri = triangles.shape[0]
    mask = np.ones(n_tri, bool) if mask is None else np.asarray(mask, bool)
    cross = np.cross(triangles[:, 1] - triangles[:, 0], triangles[:, 2] - triangles[:, 0])
    area = 0.5 * np.linalg.norm(cross, axis=1)
    edges = np.linalg.norm(triangles - np.roll(triangles, -1, axis=1), axis=2).max(axis=1)
    size = np.maximum(np.sqrt(2.0 * area), 0.5 * edges)
    m = np.where(mask, np.maximum(np.ceil(size / element_size - 1e-9), 1), 0).astype(np.int64)
    counts = m * m
    first = np.where(mask, np.cumsum(counts) - counts, -1)
    parts = [_subdivide(triangles[t], int(m[t])) for t in np.flatnonzero(mask)]
    vertices = np.concatenate(parts, axis=0) if parts else np.zeros((0, 3, 3))
    parent = np.repeat(np.arange(n_tri), counts)
    unit = cross / np.maximum(2.0 * area, 1e-300)[:, None]
    return Elements(
        vertices=vertices,
        normal=unit[parent],
        area=(area / np.maximum(counts, 1))[parent],
        reflectance=np.asarray(reflectance, dtype=np.float64)[parent],
        exterior=np.asarray(exterior, bool)[parent],
        triangle=parent,
        first=first,
        divisions=m,
        parents=triangles,
    )


# ---------------------------------------------------------------------------
# Sampling
# ---------------------------------------------------------------------------


def latin_square(n_sets: int, n: int, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """Stratified (Latin-hypercube) samples of the unit square.

    Each of ``n_sets`` rows gets ``n`` points whose two coordinates each fall
    once in every stratum ``[k/n, (k+1)/n)``.

    Returns
    -------
    u1, u2 : ndarray (n_sets, n)
    """
    strata = np.broadcast_to(np.arange(n), (n_sets, n))
    u1 = (rng.permuted(strata, axis=1) + rng.random((n_sets, n))) / n
    u2 = (rng.permuted(strata, axis=1) + rng.random((n_sets, n))) / n
    return u1, u2


def onb(normal: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Two unit tangents completing an orthonormal basis with each normal.

    Branch-free construction of Duff et al. (2017), JCGT 6(1).

    Parameters
    ----------
    normal : ndarray (..., 3)
        Unit vectors.

    Returns
    -------
    t1, t2 : ndarray (..., 3)
    """
    x, y, z = normal[..., 0], normal[..., 1], normal[..., 2]
    sign = np.where(z >= 0.0, 1.0, -1.0)
    a = -1.0 / (sign + z)
    b = x * y * a
    t1 = np.stack([1.0 + sign * x * x * a, sign * b, -sign * x], axis=-1)
    t2 = np.stack([b, sign + y * y * a, -y], axis=-1)
    return t1, t2


def cosine_directions(normal: np.ndarray, u1: np.ndarray, u2: np.ndarray) -> np.ndarray:
    """Cosine-weighted hemisphere directions (Malley's method).

    Parameters
    ----------
    normal : ndarray (m, 3)
        Unit normal of each hemisphere.
    u1, u2 : ndarray (m, k)
        Uniform samples of the unit square (e.g. from :func:`latin_square`).
        The result has their floating-point type: float32 samples give float32
        directions (unit to float32 rounding, for the ray caster).

    Returns
    -------
    ndarray (m, k, 3)
        Unit directions with density ``cos(theta) / pi`` about each normal.

    Notes
    -----
    A uniform point on the unit disc (radius ``sqrt(u1)``, angle ``2 pi u2``)
    lifted onto the hemisphere has density ``cos(theta)/pi`` in solid angle
    (Malley 1988). The local direction is turned into the frame of
    :func:`onb` by one batched matrix product.
    """
    dtype = np.result_type(u1, u2, np.float32)
    u1, u2 = np.asarray(u1, dtype=dtype), np.asarray(u2, dtype=dtype)
    r = np.sqrt(u1)
    phi = dtype.type(2.0 * np.pi) * u2
    local = np.empty((*u1.shape, 3), dtype=dtype)
    np.multiply(r, np.cos(phi), out=local[..., 0])
    np.multiply(r, np.sin(phi), out=local[..., 1])
    np.sqrt(np.maximum(dtype.type(1.0) - u1, dtype.type(0.0)), out=local[..., 2])
    t1, t2 = onb(normal)
    frame = np.stack([t1, t2, np.asarray(normal)], axis=1).astype(dtype)  # rows t1, t2, n
    return np.matmul(local, frame)


def points_in_triangles(vertices: np.ndarray, r1: np.ndarray, r2: np.ndarray) -> np.ndarray:
    """Uniform points on triangles from unit-square samples.

    Parameters
    ----------
    vertices : ndarray (m, 3, 3) [m]
    r1, r2 : ndarray (m, k)
        The result has their floating-point type (float32 samples: float32 points).

    Returns
    -------
    ndarray (m, k, 3) [m]

    Notes
    -----
    ``p = (1 - sqrt r1) v0 + sqrt r1 (1 - r2) v1 + sqrt r1 r2 v2`` is uniform in
    area (Osada et al., "Shape distributions", ACM TOG 21(4), 2002, eq. 1),
    evaluated as one batched product of the weights with the corners.
    """
    dtype = np.result_type(r1, r2, np.float32)
    r1, r2 = np.asarray(r1, dtype=dtype), np.asarray(r2, dtype=dtype)
    s = np.sqrt(r1)
    weights = np.empty((*r1.shape, 3), dtype=dtype)
    np.subtract(dtype.type(1.0), s, out=weights[..., 0])
    np.multiply(s, r2, out=weights[..., 2])
    np.subtract(s, weights[..., 2], out=weights[..., 1])
    return np.matmul(weights, np.asarray(vertices, dtype=dtype))


def inset_triangles(vertices: np.ndarray, distance: float) -> np.ndarray:
    """Triangles shrunk about their incentre so every edge moves ``distance`` [m] inwards.

    Ray origins sampled on the shrunk triangles stay at least ``distance``
    from the edges, so a ray's origin offset (:class:`kernels.raytrace.Scene`)
    cannot carry it across a surface that meets the triangle's edge (a pane
    of internal glazing meeting its reveal). Triangles narrower than that
    collapse to their incentre.

    Parameters
    ----------
    vertices : ndarray (m, 3, 3) [m]
    distance : float [m]

    Returns
    -------
    ndarray (m, 3, 3), the dtype of ``vertices``
    """
    v = np.asarray(vertices, dtype=np.float64)
    side = np.linalg.norm(np.roll(v, -1, axis=1) - np.roll(v, 1, axis=1), axis=2)  # opposite
    centre = np.einsum("mk,mkc->mc", side, v) / side.sum(axis=1, keepdims=True)
    area = 0.5 * np.linalg.norm(np.cross(v[:, 1] - v[:, 0], v[:, 2] - v[:, 0]), axis=1)
    radius = 2.0 * area / np.maximum(side.sum(axis=1), 1e-300)
    scale = np.clip(1.0 - distance / np.maximum(radius, 1e-300), 0.0, 1.0)
    out = centre[:, None, :] + scale[:, None, None] * (v - centre[:, None, :])
    return out.astype(np.asarray(vertices).dtype)


# ---------------------------------------------------------------------------
# Analytic configuration factors (references for tests and checks)
# ---------------------------------------------------------------------------


def factor_element_parallel_rectangle(a: np.ndarray, b: np.ndarray, c: np.ndarray) -> np.ndarray:
    """Differential planar element to a parallel rectangle, normal through a corner.

    Parameters
    ----------
    a, b : ndarray [m]
        Rectangle sides.
    c : ndarray [m]
        Distance between the planes.

    Returns
    -------
    ndarray
        Configuration factor (0-0.25).

    Notes
    -----
    With ``A = a/c``, ``B = b/c``:
    ``F = 1/(2 pi) [A/sqrt(1+A²) atan(B/sqrt(1+A²)) + B/sqrt(1+B²) atan(A/sqrt(1+B²))]``
    (Howell, catalogue of configuration factors, case "plane element to plane
    parallel rectangle; normal to element passes through corner of rectangle").
    Other positions follow by superposition of corner rectangles.
    """
    A, B = np.asarray(a) / c, np.asarray(b) / c
    sa, sb = np.sqrt(1.0 + A * A), np.sqrt(1.0 + B * B)
    return (A / sa * np.arctan(B / sa) + B / sb * np.arctan(A / sb)) / (2.0 * np.pi)


def factor_element_perpendicular_rectangle(
    a: np.ndarray, b: np.ndarray, c: np.ndarray
) -> np.ndarray:
    """Differential planar element to a rectangle in a perpendicular plane.

    The element lies in the plane ``z = 0`` at the origin with normal ``+z``;
    the rectangle occupies ``0 <= x <= a``, ``y = b``, ``0 <= z <= c``
    (one edge on the element's plane, one corner above the foot of the
    perpendicular from the element).

    Parameters
    ----------
    a : ndarray [m]
        Rectangle side along the intersection line of the two planes.
    b : ndarray [m]
        Distance from the element to the rectangle's plane.
    c : ndarray [m]
        Rectangle side perpendicular to the element's plane.

    Returns
    -------
    ndarray
        Configuration factor.

    Notes
    -----
    With ``X = a/b``, ``Y = c/b``:
    ``F = 1/(2 pi) [atan(X) - atan(X / sqrt(1+Y²)) / sqrt(1+Y²)]``
    (Howell, catalogue, case "plane element to plane rectangle; planes
    intersect at 90°"; it follows from integrating ``cos θ1 cos θ2 / (π r²)``
    over the rectangle, first along ``z`` then along ``x``).
    """
    X, Y = np.asarray(a) / b, np.asarray(c) / b
    s = np.sqrt(1.0 + Y * Y)
    return (np.arctan(X) - np.arctan(X / s) / s) / (2.0 * np.pi)


def factor_parallel_rectangles(a: np.ndarray, b: np.ndarray, c: np.ndarray) -> np.ndarray:
    """Form factor between two directly opposed, parallel, equal rectangles.

    Parameters
    ----------
    a, b : ndarray [m]
        Rectangle sides.
    c : ndarray [m]
        Distance between them.

    Returns
    -------
    ndarray

    Notes
    -----
    With ``X = a/c``, ``Y = b/c`` (Howell, catalogue, case "identical, parallel,
    directly opposed rectangles"):
    ``F = 2/(pi X Y) { ln sqrt((1+X²)(1+Y²)/(1+X²+Y²))
    + X sqrt(1+Y²) atan(X/sqrt(1+Y²)) + Y sqrt(1+X²) atan(Y/sqrt(1+X²))
    - X atan X - Y atan Y }``.
    """
    X, Y = np.asarray(a) / c, np.asarray(b) / c
    x2, y2 = X * X, Y * Y
    term = (
        0.5 * np.log((1 + x2) * (1 + y2) / (1 + x2 + y2))
        + X * np.sqrt(1 + y2) * np.arctan(X / np.sqrt(1 + y2))
        + Y * np.sqrt(1 + x2) * np.arctan(Y / np.sqrt(1 + x2))
        - X * np.arctan(X)
        - Y * np.arctan(Y)
    )
    return 2.0 / (np.pi * X * Y) * term


# ---------------------------------------------------------------------------
# Radiosity
# ---------------------------------------------------------------------------


def _dense(matrix: Matrix) -> np.ndarray:
    """The matrix as an ndarray (no copy when it is one)."""
    return matrix.toarray() if scipy.sparse.issparse(matrix) else np.asarray(matrix)


def _system(F: np.ndarray, rho: np.ndarray) -> np.ndarray:
    """``I - diag(rho) F`` as a new Fortran-ordered array (one pass over F).

    Fortran order is LAPACK's: ``lu_factor(..., overwrite_a=True)`` then
    factors it in place instead of copying it first (same values, same
    factors).
    """
    n = F.shape[0]
    system = np.empty((n, n), order="F")
    np.multiply(F, -rho[:, None], out=system)
    diagonal = np.arange(n)
    system[diagonal, diagonal] += 1.0
    return system


def solve_radiosity(
    transfer: np.ndarray | scipy.sparse.sparray | scipy.sparse.spmatrix,
    reflectance: np.ndarray,
    source: np.ndarray,
) -> np.ndarray:
    """Radiosity of every element for many sources at once.

    Parameters
    ----------
    transfer : ndarray or sparse (n, n)
        Form factors ``F[i, j]`` (gather form: irradiance of ``i`` per unit
        exitance of ``j``).
    reflectance : ndarray (n,)
    source : ndarray (n, k)
        First-hit irradiance of each element per source column.

    Returns
    -------
    ndarray (n, k)
        Exitance ``B = (I - diag(rho) F)^-1 diag(rho) S`` (same units as S).

    Notes
    -----
    Dense LU (LAPACK ``getrf``/``getrs``): for the few thousand elements of a
    room one factorisation serves every source column, and it is faster than
    an iteration. Its ``n³`` cost is bounded by the element budget of
    :mod:`kernels.coefficients` (``Settings.max_elements``), which coarsens
    the elements of large models instead of growing the system. Measured on
    the reference classroom (1,916 elements, 195 sensors, one core): ``F``
    is 24 % filled (1,024 rays per element reach a large share of the room),
    so it is not sparse; the adjoint solve of
    :func:`gather_radiosity` takes 0.15 s by LU, while the fixed-point
    iteration ``H ← Gᵀ + (ρF)ᵀ H`` needs 16 iterations to 1e-7 (spectral
    radius ~ ρ up to 0.7) and 0.76 s as dense products, 1.17 s as sparse ones.
    The system is built in Fortran order so that LAPACK factors it in place.
    """
    rho = np.asarray(reflectance, dtype=np.float64)
    if rho.size == 0:
        return np.zeros_like(source, dtype=np.float64)
    return solve_factored(factor_radiosity(transfer, rho), rho, source)


def factor_radiosity(
    transfer: np.ndarray | scipy.sparse.sparray | scipy.sparse.spmatrix,
    reflectance: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """LU factors of ``I - diag(rho) F`` (LAPACK ``getrf``), for :func:`solve_factored`.

    One factorisation serves every source column and every glazing set of a
    room; its cost (``2 n³ / 3`` flops) and size (``8 n²`` bytes) are bounded by
    the element budget of :mod:`kernels.coefficients`.
    """
    rho = np.asarray(reflectance, dtype=np.float64)
    return scipy.linalg.lu_factor(_system(_dense(transfer), rho), overwrite_a=True,
                                  check_finite=False)


def solve_factored(lu: tuple[np.ndarray, np.ndarray], reflectance: np.ndarray,
                   source: np.ndarray) -> np.ndarray:
    """Exitance ``B = (I - diag(rho) F)^-1 diag(rho) S`` from :func:`factor_radiosity`'s factors.

    Parameters
    ----------
    lu : tuple
        :func:`factor_radiosity` of the same transfer and reflectance.
    reflectance : ndarray (n,)
    source : ndarray (n, k)
        First-hit irradiance per source column.

    Returns
    -------
    ndarray (n, k)
    """
    rho = np.asarray(reflectance, dtype=np.float64)
    return scipy.linalg.lu_solve(lu, rho[:, None] * source, check_finite=False)


def gather_radiosity(
    gather: np.ndarray | scipy.sparse.sparray | scipy.sparse.spmatrix,
    transfer: np.ndarray | scipy.sparse.sparray | scipy.sparse.spmatrix,
    reflectance: np.ndarray,
) -> np.ndarray:
    """Sensor response to first-hit irradiance: ``G (I - diag(rho) F)^-1 diag(rho)``.

    The adjoint form of :func:`solve_radiosity`: solving with the transposed
    system for the few sensors (rows of ``G``) instead of the many sources, so
    ``E_reflected = R @ S`` for any source matrix ``S``.

    Parameters
    ----------
    gather : ndarray (n_sensors, n)
    transfer : ndarray or sparse (n, n)
    reflectance : ndarray (n,)

    Returns
    -------
    R : ndarray (n_sensors, n)
    """
    F = _dense(transfer)
    n = F.shape[0]
    rho = np.asarray(reflectance, dtype=np.float64)
    if n == 0:
        return np.zeros((gather.shape[0], 0))
    lu = scipy.linalg.lu_factor(_system(F, rho), overwrite_a=True, check_finite=False)
    # G M^-1 = (M^-T G^T)^T
    h = scipy.linalg.lu_solve(lu, np.ascontiguousarray(_dense(gather).T), trans=1,
                              check_finite=False)
    return h.T * rho[None, :]


# ---------------------------------------------------------------------------
# Ray classification and sampled matrices
# ---------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class RayPaths:
    """Where rays go: which element they reach, through which glazing set.

    Attributes
    ----------
    element : ndarray (n,) int64
        Element reached (front face of a meshed triangle), -1 otherwise (no
        hit, a back face — e.g. the dark outside of a zero-thickness room
        shell — or a triangle that was not meshed, i.e. a black surface).
    escaped : ndarray (n,) bool
        No opaque surface along the ray: it reaches the sky or the ground.
    glazing : ndarray (n,) int32
        Glazing set crossed before the first opaque hit (-1: none).
    cos_incidence : ndarray (n,) float64
        |cos| of the incidence angle at that glazing (0 where none).
    panes : tuple of int
        Panes of each glazing set.
    factor : ndarray (n,) float64 or None
        Transmittance of the internal glazing crossed (between spaces of a
        building; 0 for rays refused because they cross two outside
        glazings), :attr:`kernels.raytrace.Hits.factor`; None: 1 for every ray.
    transmit : ndarray (n,) float64
        Relative transmittance of that crossing (1 where none) times
        ``factor``; computed when first read (:func:`relative_transmit`), as
        most callers need it for a few rays only.
    """

    element: np.ndarray
    escaped: np.ndarray
    glazing: np.ndarray
    cos_incidence: np.ndarray
    panes: tuple[int, ...]
    factor: np.ndarray | None = None

    @functools.cached_property
    def transmit(self) -> np.ndarray:
        tau = relative_transmit(self.cos_incidence, self.glazing, self.panes)
        return tau if self.factor is None else tau * self.factor


def relative_transmit(cos_incidence: np.ndarray, glazing: np.ndarray,
                      panes: tuple[int, ...]) -> np.ndarray:
    """Relative angular transmittance of the crossed glazing set (1 where none).

    Parameters
    ----------
    cos_incidence : ndarray (n,)
        |cos| of the incidence angle at the glazing.
    glazing : ndarray (n,) int
        Glazing set index, -1 for no crossing.
    panes : sequence of int
        Panes of each glazing set (0 = unglazed opening).
    """
    out = np.ones(glazing.shape, dtype=np.float64)
    for g, p in enumerate(panes):
        sel = glazing == g
        if np.any(sel):
            out[sel] = relative_transmittance(cos_incidence[sel], int(p))
    return out


def trace_paths(scene: Any, elements: Elements, origins: np.ndarray, directions: np.ndarray,
                panes: tuple[int, ...]) -> RayPaths:
    """Follow rays to the first opaque surface and note the glazing crossed.

    Parameters
    ----------
    scene : kernels.raytrace.Scene
    elements : Elements
        Meshed triangles (``elements.first`` indexed by geometry triangle).
    origins, directions : ndarray (n, 3)
        Directions must be unit vectors (float32 arrays are cast as they are).
    panes : sequence of int
        Panes of each glazing set.

    Returns
    -------
    RayPaths

    Notes
    -----
    One :meth:`kernels.raytrace.Scene.trace` query per ray; the element is
    found from the barycentric coordinates of the hit that Embree returns.
    """
    hits = scene.trace(origins, directions, unit=True)
    element = np.full(hits.triangle.shape, -1, dtype=np.int64)
    hit = np.flatnonzero(hits.front)
    t = hits.triangle[hit]
    if not np.all(elements.first[scene.opaque_index] >= 0):  # some surfaces are black
        meshed = elements.first[t] >= 0
        hit, t = hit[meshed], t[meshed]
    element[hit] = elements.locate_barycentric(t, hits.u[hit], hits.v[hit])
    return RayPaths(element=element, escaped=hits.triangle < 0, glazing=hits.glazing,
                    cos_incidence=hits.cos_incidence, panes=tuple(panes), factor=hits.factor)


def _csr(rows: np.ndarray, cols: np.ndarray, values: np.ndarray,
         shape: tuple[int, int]) -> scipy.sparse.csr_matrix:
    """Sparse matrix with duplicate entries summed (in a fixed order)."""
    return scipy.sparse.coo_matrix((values, (rows, cols)), shape=shape).tocsr()


_DENSE_SUM = 1 << 24  # matrix entries up to which _Triplets sums in a dense array


class _Triplets:
    """Entries (row, column, value) collected chunk by chunk, summed into one matrix.

    :meth:`matrix` sums them in the order they were added: into a dense
    ndarray when the matrix is small (at most :data:`_DENSE_SUM` entries)
    and holds at least one value per 16 entries — summing in place beats
    sorting, and the radiosity solve needs the matrix dense anyway — else
    into a CSR matrix.
    """

    def __init__(self, shape: tuple[int, int]) -> None:
        self.shape = shape
        self.parts: list[tuple[np.ndarray, np.ndarray]] = []

    def add(self, rows: np.ndarray, cols: np.ndarray, values: np.ndarray) -> None:
        self.parts.append((rows * self.shape[1] + cols, values))

    def matrix(self) -> Matrix:
        shape = self.shape
        if not self.parts:
            return _csr(np.zeros(0, int), np.zeros(0, int), np.zeros(0), shape)
        flat, values = (np.concatenate(p) for p in zip(*self.parts, strict=True))
        size = shape[0] * shape[1]
        if size > _DENSE_SUM or values.size < size // 16:
            rows, cols = np.divmod(flat, shape[1])
            return _csr(rows, cols, values, shape)
        return np.bincount(flat, values, size).reshape(shape)


@dataclass(frozen=True, eq=False)
class Transfer:
    """Sampled transfer of light between elements and from the sky to elements.

    Attributes
    ----------
    same : Matrix (n, n)
        Gather-form factors ``F[i, j]`` between elements of the same region
        (interior to interior, exterior to exterior) with no glazing crossed.
        An ndarray when the matrix is small and well filled (a room's few
        thousand elements: the radiosity solve needs it dense anyway), a
        ``scipy.sparse.csr_matrix`` otherwise; the same holds for ``through``
        and for the matrices of :func:`gather_matrix`.
    through : list of Matrix (n, n)
        Per glazing set: gather-form factors from interior ``i`` to exterior
        ``j`` through a window of the set, weighted by ``τ_rel``.
    sky_interior : ndarray (n_sets, n, n_basis)
        First-hit irradiance of interior elements per unit ``L_j Ω_j`` of each
        sky-basis entry, through each glazing set (zero rows for exterior).
    sky_exterior : ndarray (n, n_basis)
        The same for exterior elements, unglazed (zero rows for interior).
    """

    same: Matrix
    through: list[Matrix]
    sky_interior: np.ndarray
    sky_exterior: np.ndarray


PIECE = 1 << 16
"""Rays traced and tallied together by :func:`transfer_matrix` and :func:`gather_matrix`.

Small enough that the temporary arrays of a piece (a few hundred kB each) are
recycled by the allocator instead of being mapped afresh, page by page, for
every batch; the results do not depend on it."""


def _tally_landed(paths: RayPaths, owner: np.ndarray, ext: np.ndarray, area: np.ndarray,
                  rays: int, outside: bool, same: _Triplets, through: list[_Triplets]) -> None:
    """Add the rays of one piece that land on an element to the transfer sums.

    Same region: ``A_src / (A_dst rays)`` at ``F[dst, src]`` (shooting, turned
    around by reciprocity); interior to exterior through set ``k``:
    ``τ / rays`` at ``F_k[src, dst]`` (see :func:`transfer_matrix`).
    """
    landed = paths.element >= 0
    src, dst = owner[landed], paths.element[landed]
    g = paths.glazing[landed]
    if outside:
        e_src, e_dst = ext[src], ext[dst]
        sel = (g < 0) & (e_src == e_dst)
    else:  # one region: every ray that lands without crossing glazing counts
        sel = g < 0
    if outside or not sel.all():
        s_src, s_dst = src[sel], dst[sel]
    else:
        s_src, s_dst = src, dst
    weight = area[s_src] / (area[s_dst] * rays)
    if paths.factor is not None:  # internal glazing crossed on the way (reciprocal: τ both ways)
        weight = weight * paths.factor[landed][sel]
    same.add(s_dst, s_src, weight)
    if outside:  # interior -> exterior through the windows of each set
        tau = paths.transmit[landed]
        for k, triplets in enumerate(through):
            sel = (g == k) & ~e_src & e_dst
            triplets.add(src[sel], dst[sel], tau[sel] / rays)


def transfer_matrix(
    scene: Any,
    elements: Elements,
    rays: int,
    rng: np.random.Generator,
    panes: tuple[int, ...] = (),
    scheme: Any = None,
    batch: int = 1 << 20,
    piece: int = PIECE,
) -> Transfer:
    """Form factors and sky sources of elements from cosine-weighted rays.

    Parameters
    ----------
    scene : kernels.raytrace.Scene
    elements : Elements
        Built from ``scene.geometry``'s triangles.
    rays : int
        Rays per element, each from a uniform random point of the element,
        directions stratified (:func:`latin_square`, :func:`cosine_directions`).
    rng : numpy.random.Generator
    panes : tuple of int
        Panes of each glazing set of the geometry.
    scheme : kernels.sky.PatchScheme, optional
        Sky basis for the sky sources (omitted: no sky sources).
    batch : int
        Rays per random draw: the samples of ``batch // rays`` elements are
        drawn together, so this fixes the random numbers (and the result).
    piece : int
        Rays traced and tallied together inside a draw (whole elements); it
        bounds the temporary arrays and does not change the result.

    Returns
    -------
    Transfer

    Notes
    -----
    *Same region* — shooting estimator turned around by reciprocity: a ray
    from ``j`` landing on ``i`` adds ``A_j / (A_i n_j)`` to ``F[i, j]``, so
    ``Σ_i A_i F[i, j]`` is exactly ``A_j`` times the fraction of ``j``'s rays
    that land: every sample conserves energy.
    *Through windows* — gather estimator: each of interior ``i``'s rays that
    crosses glazing of set ``g`` and lands on exterior ``j`` adds
    ``τ_rel / n_i`` to ``F_g[i, j]``. Exterior elements receive nothing from
    interior ones (light leaving the room is not brought back, DESIGN §2.6).
    *Sky* — cosine-weighted rays (density ``cos θ / π``) that escape estimate
    the irradiance from basis entry ``j`` per unit ``L_j Ω_j`` as
    ``π Σ τ / (n Ω_j)``.
    """
    from luxsweep.kernels.sky import patch_index

    n, n_sets = elements.n, len(panes)
    n_basis = scheme.n_patches + 1 if scheme is not None else 0
    omega = (np.concatenate([scheme.solid_angle, [2.0 * np.pi]]) if scheme is not None
             else np.zeros(0))
    ext, area = elements.exterior, elements.area
    outside = bool(ext.any())
    same, through = _Triplets((n, n)), [_Triplets((n, n)) for _ in range(n_sets)]
    sky_int = np.zeros((n_sets, n, n_basis))
    sky_ext = np.zeros((n, n_basis))
    chunk, step = max(1, batch // rays), max(1, piece // rays)
    for start in range(0, n, chunk):
        idx = np.arange(start, min(start + chunk, n))
        u1, u2 = latin_square(idx.size, rays, rng)
        r1, r2 = rng.random((2, idx.size, rays)).astype(np.float32)
        escaped = []
        for first in range(0, idx.size, step):
            part = slice(first, first + step)
            ids = idx[part]
            normal = elements.normal[ids]
            # origins on the lifted elements (lifting is affine: lift corners, then sample)
            lifted = scene.lift(elements.vertices[ids], normal[:, None, :])
            if not scene.simple:
                lifted = inset_triangles(lifted, 3.0 * scene.epsilon)
            origins = points_in_triangles(lifted, r1[part], r2[part]).reshape(-1, 3)
            dirs = cosine_directions(normal, u1[part].astype(np.float32),
                                     u2[part].astype(np.float32)).reshape(-1, 3)
            owner = np.repeat(ids, rays)
            paths = trace_paths(scene, elements, origins, dirs, panes)
            _tally_landed(paths, owner, ext, area, rays, outside, same, through)
            if scheme is not None:
                esc = np.flatnonzero(paths.escaped)
                src, j = owner[esc], patch_index(scheme, dirs[esc])
                escaped.append((src, j, paths.glazing[esc], paths.cos_incidence[esc],
                                *(() if paths.factor is None else (paths.factor[esc],))))
        if escaped:  # one sum per draw, in ray order
            src, j, g, cos_g, *f = (np.concatenate(p) for p in zip(*escaped, strict=True))
            flat = src * n_basis + j
            weight = np.pi * relative_transmit(cos_g, g, panes) / (rays * omega[j])
            if f:
                weight = weight * f[0]
            for k in range(n_sets):
                sel = (g == k) & ~ext[src]
                sky_int[k] += np.bincount(flat[sel], weight[sel], n * n_basis).reshape(n, -1)
            sel = (g < 0) & ext[src]
            sky_ext += np.bincount(flat[sel], weight[sel], n * n_basis).reshape(n, -1)
    return Transfer(same=same.matrix(), through=[t.matrix() for t in through],
                    sky_interior=sky_int, sky_exterior=sky_ext)


def _gather_weight(paths: RayPaths, landed: np.ndarray, sel: np.ndarray,
                   rays: int) -> np.ndarray:
    """``1 / rays`` for each selected landed ray, times its internal-glazing factor."""
    weight = np.full(int(sel.sum()), 1.0 / rays)
    return weight if paths.factor is None else weight * paths.factor[landed][sel]


def gather_matrix(
    scene: Any,
    elements: Elements,
    points: np.ndarray,
    normals: np.ndarray,
    rays: int,
    rng: np.random.Generator,
    panes: tuple[int, ...] = (),
    batch: int = PIECE,
    replicas: int = 1,
) -> tuple[Matrix, list[Matrix]]:
    """Fraction of each point's cosine-weighted hemisphere seeing each element.

    Parameters
    ----------
    scene : kernels.raytrace.Scene
    elements : Elements
    points : ndarray (m, 3) [m]
        Gathering points (sensors) inside the room.
    normals : ndarray (m, 3)
        Unit normals.
    rays : int
        Stratified cosine-weighted rays per point.
    rng : numpy.random.Generator
    panes : tuple of int
    batch : int
        Rays traced together (whole points; the result does not depend on it).
    replicas : int
        Independent sub-samples per point (batch means, e.g. Law & Kelton,
        *Simulation Modeling and Analysis*, 3rd ed., 2000, §9.5.3): each is
        ``rays // replicas`` stratified rays of its own (``rays`` must be a
        multiple), and row ``replicas · p + r`` holds sub-sample ``r`` of point
        ``p`` normalised on its own, so the mean of a point's rows is its
        estimate from all its rays and their scatter its sampling error.

    Returns
    -------
    same : Matrix (m · replicas, n)
        ``G[s, j]``: interior elements seen directly (no glazing crossed).
    through : list of Matrix (m · replicas, n)
        Per glazing set: exterior elements seen through its windows, weighted
        by ``τ_rel``.
    """
    n, n_sets = elements.n, len(panes)
    if replicas > 1:
        points = np.repeat(points, replicas, axis=0)
        normals = np.repeat(normals, replicas, axis=0)
        rays //= replicas
    m = points.shape[0]
    u1, u2 = latin_square(m, rays, rng)
    points32 = np.asarray(points, dtype=np.float32)
    outside = bool(elements.exterior.any())
    same, through = _Triplets((m, n)), [_Triplets((m, n)) for _ in range(n_sets)]
    step = max(1, batch // rays)
    for first in range(0, m, step):
        part = slice(first, first + step)
        dirs = cosine_directions(normals[part], u1[part].astype(np.float32),
                                 u2[part].astype(np.float32)).reshape(-1, 3)
        origins = np.repeat(points32[part], rays, axis=0)
        owner = np.repeat(np.arange(m)[part], rays)
        paths = trace_paths(scene, elements, origins, dirs, panes)
        landed = paths.element >= 0
        src, dst = owner[landed], paths.element[landed]
        g = paths.glazing[landed]
        if not outside:  # one region: the rays that land without crossing glazing
            sel = g < 0
            same.add(src[sel], dst[sel], _gather_weight(paths, landed, sel, rays))
            continue
        ext, tau = elements.exterior[dst], paths.transmit[landed]
        sel = (g < 0) & ~ext
        same.add(src[sel], dst[sel], _gather_weight(paths, landed, sel, rays))
        for k in range(n_sets):
            sel = (g == k) & ext
            through[k].add(src[sel], dst[sel], tau[sel] / rays)
    return same.matrix(), [t.matrix() for t in through]
