"""Ray casting against a :class:`~kernels.geometry.Geometry` with Embree (``embreex``).

A :class:`Scene` holds three Embree scenes built once: the opaque triangles
(visibility), the glazing triangles (which window a ray crosses and at what
angle) and every triangle together in geometry order (so Embree's primitive
index *is* the geometry triangle index, and one query tells opaque from
glazing hits). Queries take arrays of any length and work in batches of
:data:`BATCH` rays; Embree itself works in float32.

Fast paths
----------
Every query takes ``unit``: pass ``unit=True`` when the directions are unit
vectors already (they are then not normalised again), and float32 C-contiguous
direction arrays are used as they are, without a copy. The queries used by the
coefficient stage:

* :meth:`Scene.trace` — nearest opaque hit with its barycentric coordinates and
  the glazing crossed before it, from one query on the combined scene (a second
  one on the opaque scene only for the few rays whose nearest hit is glazing);
* :meth:`Scene.exit_glazing` — through which glazing set a ray from inside
  reaches the sky (glazing scene, then an opaque occlusion query only for the
  rays that cross glazing);
* :meth:`Scene.sky_view` — the same for rays from anywhere, telling blocked
  from unglazed rays.

Buildings
---------
A scene of one parametric room (``geometry.room`` set) is convex from inside:
a ray crosses at most one window, so the nearest glazing tells everything
(:attr:`Scene.simple`, the original path, bit for bit). Any other scene (a
building of several spaces, a mesh) may have rays crossing several panes:
:meth:`Scene.trace` and :meth:`Scene.exit_glazing` then follow every glazing
before the opaque hit (:meth:`Scene._crossings`, re-casting the ray from just
beyond each pane). Internal glazing (between spaces) multiplies the ray by
its baked ``τ_n × τ_rel(cos)`` — the same angular profile as outside glazing,
:func:`kernels.glazing.relative_transmittance` — returned as ``factor``. A
ray crossing two or more *outside* glazings (out of one window and through
another part of the building) cannot be scaled by one set's variant
transmittance: it is treated as blocked and counted
(:attr:`Scene.crossed_twice`, reported as
``CoefficientSet.crossed_twice``). That light is missing from the estimate
(an underestimate), never added wrongly. Zero-gap partitions: a back-face hit
on a triangle with a twin (:attr:`kernels.geometry.Geometry.twin`) becomes a
front-face hit on the twin.

Self-intersection
-----------------
The *Scene* offsets every origin by ``epsilon`` along its direction before the
query and adds ``epsilon`` back to the distances it returns, so callers pass
their points as they are. ``epsilon`` defaults to ``1e-5 ×`` the scene's extent
(≥ 1e-6 m), well above float32 rounding of coordinates (≈ 6e-8 × extent). A
point lying *on* a surface should in addition be lifted off it along the
surface normal with :meth:`Scene.lift` before casting nearly tangential rays.

Measured (embreex, 2-core machine shared with other jobs, 7.2 × 8 × 3 m room
with one front window = 20 triangles, rays from inside): a raw float32
``EmbreeScene.run`` occlusion call reaches 12–19 Mrays/s; an intersection with
hit data 8–13 Mrays/s; on the two glazing triangles alone 25–28 Mrays/s.
``EmbreeScene.run`` releases the GIL, but a Scene runs single-threaded: Dask
worker processes provide the parallelism.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from embreex import rtcore_scene as rtcs
from embreex.mesh_construction import TriangleMesh

from luxsweep.kernels.geometry import Geometry
from luxsweep.kernels.glazing import relative_transmittance

__all__ = ["BATCH", "BLOCKED", "MAX_CROSSINGS", "NO_GLAZING", "Hits", "Scene"]

BATCH = 1 << 20
"""Rays per Embree call (bounds Embree's per-call result arrays)."""

NO_GLAZING = -2
""":meth:`Scene.sky_view` code: the ray reaches the sky without crossing glazing."""

BLOCKED = -1
""":meth:`Scene.sky_view` code: an opaque surface blocks the ray."""

MAX_CROSSINGS = 8
"""Glazings a ray is followed through (:meth:`Scene._crossings`); a ray crossing more is
treated as blocked."""

_MISS = 1e30  # embree reports tfar = 1e37 on a miss

_Embree = tuple[rtcs.EmbreeScene, TriangleMesh]


def _embree(triangles: np.ndarray) -> _Embree | None:
    if triangles.shape[0] == 0:
        return None
    scene = rtcs.EmbreeScene()
    mesh = TriangleMesh(scene, np.ascontiguousarray(triangles, dtype=np.float32))
    return scene, mesh


def _run(scene: _Embree, o: np.ndarray, d: np.ndarray, query: str,
         output: bool = False) -> np.ndarray | dict[str, np.ndarray]:
    """``EmbreeScene.run`` in batches of :data:`BATCH` rays (results concatenated)."""
    kw = {"output": 1} if output else {}
    n = o.shape[0]
    if n <= BATCH:
        return scene[0].run(o, d, query=query, **kw)
    parts = [scene[0].run(o[s:s + BATCH], d[s:s + BATCH], query=query, **kw)
             for s in range(0, n, BATCH)]
    if output:
        return {k: np.concatenate([p[k] for p in parts]) for k in parts[0]}
    return np.concatenate(parts)


def _abs_cos(d: np.ndarray, normals: np.ndarray) -> np.ndarray:
    """|d · n| per row, float64, element by element (the same bits for any subset)."""
    return np.abs(d[:, 0] * normals[:, 0] + d[:, 1] * normals[:, 1] + d[:, 2] * normals[:, 2])


@dataclass(frozen=True, eq=False)
class Hits:
    """Result of :meth:`Scene.trace`: nearest opaque hit and glazing crossed before it.

    Attributes
    ----------
    triangle : ndarray (n,) int64
        Opaque triangle hit (index into ``geometry.triangles``), −1 for none;
        at a zero-gap partition, the twin facing the ray.
    u, v : ndarray (n,) float32
        Barycentric coordinates of the hit point, ``p = (1 − u − v) v0 + u v1 + v v2``
        with the triangle's corners as stored in the geometry (meaningless
        where ``triangle`` is −1).
    front : ndarray (n,) bool
        The ray meets the front face of the triangle (runs against its normal).
    glazing : ndarray (n,) int32
        Glazing set of the nearest glazing crossed before the hit (or on the
        way out, where there is no hit), −1 for none; outside a
        :attr:`Scene.simple` scene, the outside glazing crossed (internal
        panes go into ``factor``; −1 also for two or more outside panes).
    cos_incidence : ndarray (n,) float64
        |cos| of the incidence angle at that glazing (0 where none).
    tfar : ndarray (n,) float32 [m]
        Embree's distance from the offset origin (see :attr:`distance`).
    epsilon : float [m]
        The scene's origin offset.
    factor : ndarray (n,) float64 or None
        Transmittance of the internal glazing crossed before the hit (or on
        the way out), product over the crossings of ``τ_n × τ_rel(cos)``; 0 for
        rays that cross two or more outside glazings (treated as blocked, see
        :meth:`Scene.exit_glazing`). None in a scene of one convex room, where
        it would be 1 for every ray.
    """

    triangle: np.ndarray
    u: np.ndarray
    v: np.ndarray
    front: np.ndarray
    glazing: np.ndarray
    cos_incidence: np.ndarray
    tfar: np.ndarray
    epsilon: float
    factor: np.ndarray | None = None

    @property
    def distance(self) -> np.ndarray:
        """ndarray (n,) float64 [m]: distance of the hit from the given origin (inf: none)."""
        return np.where(self.triangle >= 0, self.tfar.astype(np.float64) + self.epsilon, np.inf)


class Scene:
    """Embree scenes of a geometry's opaque and glazing triangles.

    Parameters
    ----------
    geometry : Geometry
    epsilon : float, optional [m]
        Origin offset along the ray (see module notes).

    Notes
    -----
    Pickles by rebuilding the Embree scenes from the geometry, so it can be
    sent to Dask workers.
    """

    def __init__(self, geometry: Geometry, epsilon: float | None = None) -> None:
        self.geometry = geometry
        extent = float(np.max(np.ptp(geometry.triangles.reshape(-1, 3), axis=0)))
        self.epsilon = float(epsilon) if epsilon is not None else max(1e-5 * extent, 1e-6)
        glz = geometry.is_glazing
        self.opaque_index = np.flatnonzero(~glz).astype(np.int64)
        self.glazing_index = np.flatnonzero(glz).astype(np.int64)
        self._opaque = _embree(geometry.triangles[self.opaque_index])
        self._glazing = _embree(geometry.triangles[self.glazing_index])
        # opaque triangles first, then glazing: primitive index ≥ n_opaque means glazing, and
        # indices below n_opaque agree with the opaque scene's
        self._n_opaque = int(self.opaque_index.size)
        self._all = (_embree(geometry.triangles[np.concatenate([self.opaque_index,
                                                                self.glazing_index])])
                     if self._glazing is not None else self._opaque)
        # primitive index (−1: miss, the last entry) -> geometry triangle index
        self._opaque_table = np.append(self.opaque_index, -1)
        self._normals = np.ascontiguousarray(geometry.normals)
        self._is_glazing = np.asarray(glz, dtype=bool)
        self._glazing_normals = self._normals[self.glazing_index]
        # all glazing in one plane orientation (one window, or coplanar ones): one normal row
        same = self.glazing_index.size > 0 and bool(
            np.all(self._glazing_normals == self._glazing_normals[:1]))
        self._one_glazing_normal = self._glazing_normals[:1] if same else None
        self._glazing_set = geometry.glazing_set_index[self.glazing_index]
        self._twin = np.asarray(geometry.twin, dtype=np.int64)
        self._twins = bool(np.any(self._twin >= 0))
        # one parametric room is convex: a ray from inside crosses at most one window, and there
        # is no internal glazing, so the nearest glazing tells everything (the original path)
        self.simple = geometry.room is not None or self.glazing_index.size == 0
        self._internal_tau = geometry.internal_transmittance[self.glazing_index]
        self._glazing_panes = geometry.panes[self.glazing_index]
        self.crossed_twice = 0
        """Rays refused so far because they cross two or more outside glazings (a tally of
        this scene's queries, for the caller's report)."""

    def __reduce__(self) -> tuple:
        return (Scene, (self.geometry, self.epsilon))

    # ------------------------------------------------------------ internals

    def _prepare(
        self, origins: np.ndarray, directions: np.ndarray, unit: bool = False
    ) -> tuple[np.ndarray, np.ndarray]:
        """Offset origins and unit directions as contiguous float32 (n, 3) arrays.

        With ``unit`` the directions are taken as unit vectors (no
        normalisation); float32 C-contiguous directions are then used without
        a copy. Origins or directions given once (shape (3,) or (1, 3)) are
        broadcast to the other's length.
        """
        o = np.asarray(origins).reshape(-1, 3)
        d = np.asarray(directions).reshape(-1, 3)
        if not unit:
            d = np.asarray(d, dtype=np.float64)
            d = d / np.sqrt(np.einsum("ij,ij->i", d, d))[:, None]
        n = max(o.shape[0], d.shape[0])
        if d.shape[0] != n:
            d = np.broadcast_to(d, (n, 3))
        d32 = np.ascontiguousarray(d, dtype=np.float32)
        o32 = np.multiply(d32, np.float32(self.epsilon))
        np.add(o32, o, out=o32, casting="same_kind")
        return o32, d32

    @staticmethod
    def _intersect(scene: _Embree | None, o: np.ndarray, d: np.ndarray
                   ) -> tuple[np.ndarray, np.ndarray]:
        """Nearest hit per ray: (primitive index int64 or −1, distance float64 or inf)."""
        n = o.shape[0]
        if scene is None or n == 0:
            return np.full(n, -1, dtype=np.int64), np.full(n, np.inf)
        res = _run(scene, o, d, "INTERSECT", output=True)
        prim = res["primID"].astype(np.int64)
        t = res["tfar"].astype(np.float64)
        hit = prim >= 0
        prim[~hit] = -1
        return prim, np.where(hit & (t < _MISS), t, np.inf)

    def _blocked(self, o: np.ndarray, d: np.ndarray) -> np.ndarray:
        """True where an opaque triangle lies anywhere along the (prepared) rays."""
        if self._opaque is None or o.shape[0] == 0:
            return np.zeros(o.shape[0], dtype=bool)
        return _run(self._opaque, o, d, "OCCLUDED") >= 0

    def _glazing_cos(self, d: np.ndarray, rays: np.ndarray, k: np.ndarray) -> np.ndarray:
        """``_abs_cos(d[rays], normals of glazing triangles k)`` (k: glazing-scene index).

        With a single glazing normal the normal is broadcast instead of
        gathered per ray, and for most of the rays the cosine is taken over
        all of them before the selection (element by element, the same bits).
        """
        one = self._one_glazing_normal
        if one is None:
            return _abs_cos(d[rays], self._glazing_normals[k])
        if 4 * rays.size > d.shape[0]:
            return _abs_cos(d, one)[rays]
        return _abs_cos(d[rays], one)

    def _internal_factor(self, k: np.ndarray, cos: np.ndarray) -> np.ndarray:
        """``τ_n × τ_rel(cos)`` of internal glazing triangles ``k`` (glazing-scene index)."""
        out = self._internal_tau[k].copy()
        panes = self._glazing_panes[k]
        for p in np.unique(panes):
            sel = panes == p
            out[sel] *= relative_transmittance(cos[sel], int(p))
        return out

    def _crossings(self, o: np.ndarray, d: np.ndarray, rays: np.ndarray, prim: np.ndarray,
                   t: np.ndarray, limit: np.ndarray
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Every glazing the (prepared) rays ``rays`` cross before ``limit``.

        ``prim``, ``t`` are each ray's first glazing hit (glazing-scene index,
        distance from the offset origin); the rays are cast again from just
        beyond each crossing (``epsilon`` further) until no glazing lies before
        ``limit`` (their nearest opaque hit, or inf), at most
        :data:`MAX_CROSSINGS` times.

        Returns
        -------
        glazing_set : ndarray (m,) int32
            The outside glazing set crossed (−1: none, or two or more).
        cos_incidence : ndarray (m,) float64
            |cos| at that outside glazing (0 where −1).
        factor : ndarray (m,) float64
            Product of ``τ_n τ_rel(cos)`` over the internal glazing crossed;
            0 for rays crossing two or more outside glazings or more than
            :data:`MAX_CROSSINGS` glazings (counted in :attr:`crossed_twice`).
        """
        m = rays.size
        gset = np.full(m, -1, dtype=np.int32)
        cos = np.zeros(m)
        factor = np.ones(m)
        count = np.zeros(m, dtype=np.int64)
        idx, k, dist = np.arange(m), prim, np.asarray(t, dtype=np.float64)
        for _ in range(MAX_CROSSINGS):
            r = rays[idx]
            c = _abs_cos(d[r], self._glazing_normals[k])
            s = self._glazing_set[k]
            out = s >= 0
            first = out & (count[idx] == 0)
            gset[idx[first]], cos[idx[first]] = s[first], c[first]
            count[idx[out]] += 1
            if not np.all(out):
                factor[idx[~out]] *= self._internal_factor(k[~out], c[~out])
            start = dist + self.epsilon
            o2 = np.ascontiguousarray(o[r] + (start[:, None] * d[r]), dtype=np.float32)
            p2, t2 = self._intersect(self._glazing, o2, d[r])
            t2 = t2 + start
            more = (p2 >= 0) & (t2 < limit[idx])
            idx, k, dist = idx[more], p2[more], t2[more]
            if idx.size == 0:
                break
        else:
            count[idx] = 2  # too many panes to follow: refused like a double crossing
        twice = count >= 2
        gset[twice], cos[twice], factor[twice] = -1, 0.0, 0.0
        self.crossed_twice += int(twice.sum())
        return gset, cos, factor

    # ------------------------------------------------------------- queries

    def lift(self, points: np.ndarray, normals: np.ndarray) -> np.ndarray:
        """Points (n, 3) [m] moved ``epsilon`` along their unit normals (n, 3)."""
        return np.asarray(points, dtype=np.float64) + self.epsilon * np.asarray(normals)

    def first_hit(
        self, origins: np.ndarray, directions: np.ndarray, unit: bool = False
    ) -> tuple[np.ndarray, np.ndarray]:
        """Nearest opaque triangle along each ray.

        Parameters
        ----------
        origins : ndarray (n, 3) [m]
        directions : ndarray (n, 3)
            Need not be unit length unless ``unit`` is set.
        unit : bool
            The directions are unit vectors (skip normalisation).

        Returns
        -------
        triangle : ndarray (n,) int64
            Index into ``geometry.triangles`` (−1: no opaque hit); at a
            zero-gap partition either of the two twins (use :meth:`trace`
            to know which face the ray meets).
        distance : ndarray (n,) float64 [m]
            From the given origin (inf: no hit).
        """
        o, d = self._prepare(origins, directions, unit)
        prim, dist = self._intersect(self._opaque, o, d)
        tri = np.where(prim >= 0, self.opaque_index[np.maximum(prim, 0)], -1)
        return tri, dist + self.epsilon

    def occluded(
        self,
        origins: np.ndarray,
        directions: np.ndarray,
        max_distance: float | np.ndarray = np.inf,
        unit: bool = False,
    ) -> np.ndarray:
        """True where an opaque triangle lies within ``max_distance`` [m] along the ray."""
        o, d = self._prepare(origins, directions, unit)
        n = o.shape[0]
        if self._opaque is None or n == 0:
            return np.zeros(n, dtype=bool)
        if np.all(np.isinf(max_distance)):
            return self._blocked(o, d)
        far = np.broadcast_to(np.asarray(max_distance, dtype=np.float64), (n,)) - self.epsilon
        far = np.clip(far, 0.0, 1e37).astype(np.float32)
        out = np.empty(n, dtype=bool)
        for s in range(0, n, BATCH):
            sl = slice(s, s + BATCH)
            out[sl] = self._opaque[0].run(o[sl], d[sl], dists=far[sl], query="OCCLUDED") >= 0
        return out

    def glazing_crossing(
        self, origins: np.ndarray, directions: np.ndarray, unit: bool = False
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Nearest glazing triangle along each ray (opaque triangles ignored).

        Returns
        -------
        glazing_set : ndarray (n,) int32
            Index into ``geometry.glazing_sets`` (−1: no glazing along the ray).
        cos_incidence : ndarray (n,) float64
            |cos| of the angle between ray and glazing normal (0 where none).
        distance : ndarray (n,) float64 [m]
            From the given origin (inf where none); compare it with
            :meth:`first_hit`'s distance to know whether the glazing comes first.
        """
        o, d = self._prepare(origins, directions, unit)
        n = o.shape[0]
        prim, dist = self._intersect(self._glazing, o, d)
        gset = np.full(n, -1, dtype=np.int32)
        cos = np.zeros(n)
        hit = np.flatnonzero(prim >= 0)
        if hit.size:
            k = prim[hit]
            gset[hit] = self._glazing_set[k]
            cos[hit] = self._glazing_cos(d, hit, k)
        return gset, cos, dist + self.epsilon

    def exit_glazing(
        self, origins: np.ndarray, directions: np.ndarray, unit: bool = False,
        factor: bool = False,
    ) -> tuple[np.ndarray, ...]:
        """Glazing set through which each ray reaches the sky (rays from inside).

        A ray reaches the sky through glazing when it crosses a glazing
        triangle and no opaque triangle lies anywhere along it. The glazing
        scene is queried for every ray, the opaque one only for the rays that
        cross glazing.

        In a scene of several spaces (or a mesh) a ray may cross internal
        glazing (between spaces) and more than one outside glazing: every
        crossing is followed (:meth:`_crossings`). Internal glazing multiplies
        the ray by its baked ``τ_n × τ_rel(cos)`` (``factor``); a ray crossing
        two or more *outside* glazings would need the product of two sets'
        variant transmittances, which one coefficient per set cannot hold, so
        it is treated as blocked and counted in :attr:`crossed_twice` (it
        leaves the building and enters it again: light lost in the estimate,
        never added wrongly).

        Parameters
        ----------
        factor : bool
            Also return the internal-glazing factor (required when the
            geometry has internal glazing).

        Returns
        -------
        glazing_set : ndarray (n,) int32
            Set of the outside glazing along the ray, −1 where the ray does not
            reach the sky through exactly one outside glazing.
        cos_incidence : ndarray (n,) float64
            |cos| at that glazing (0 where −1).
        factor : ndarray (n,) float64, only with ``factor=True``
            Transmittance of the internal glazing crossed (1 where none).
        """
        if not factor and self._internal_tau.size and np.any(np.isfinite(self._internal_tau)):
            raise ValueError("the geometry has internal glazing: call exit_glazing(factor=True)")
        o, d = self._prepare(origins, directions, unit)
        n = o.shape[0]
        gset = np.full(n, -1, dtype=np.int32)
        cos = np.zeros(n)
        f = np.ones(n)
        done = (gset, cos, f) if factor else (gset, cos)
        if self._glazing is None or n == 0:
            return done
        if not self.simple:
            prim, t = self._intersect(self._glazing, o, d)
            cross = np.flatnonzero(prim >= 0)
            free = cross[~self._blocked(o[cross], d[cross])]
            if free.size:
                g, c, ff = self._crossings(o, d, free, prim[free], t[free],
                                           np.full(free.size, np.inf))
                gset[free], cos[free], f[free] = g, c, ff
            return done
        prim = _run(self._glazing, o, d, "INTERSECT")
        cross = np.flatnonzero(prim >= 0)
        if cross.size == n:  # every ray crosses glazing (the caller culled the others)
            free = np.flatnonzero(~self._blocked(o, d))
        elif cross.size:
            free = cross[~self._blocked(o[cross], d[cross])]
        else:
            return done
        k = prim[free]
        gset[free] = self._glazing_set[k]
        cos[free] = self._glazing_cos(d, free, k)
        return done

    def sky_view(
        self, origins: np.ndarray, directions: np.ndarray, unit: bool = False
    ) -> tuple[np.ndarray, np.ndarray]:
        """How each ray leaves the scene: through which glazing set, or blocked.

        A ray *reaches the sky* (upper or lower hemisphere, i.e. sky or ground
        basis) when no opaque triangle lies anywhere along it.

        Returns
        -------
        code : ndarray (n,) int32
            Glazing set index ≥ 0 when the ray reaches the sky after crossing
            that set's glazing (the nearest glazing along the ray);
            :data:`NO_GLAZING` (−2) when it reaches the sky without crossing any
            glazing (rays from exterior surfaces); :data:`BLOCKED` (−1) when an
            opaque surface is hit, or when the nearest glazing is an internal
            pane (between two spaces: only a ray that has crossed outside
            glazing already can reach one).
        cos_incidence : ndarray (n,) float64
            |cos| at the crossed glazing (0 unless code ≥ 0).
        """
        o, d = self._prepare(origins, directions, unit)
        n = o.shape[0]
        code = np.full(n, BLOCKED, dtype=np.int32)
        cos = np.zeros(n)
        free = np.flatnonzero(~self._blocked(o, d))
        if free.size == 0:
            return code, cos
        code[free] = NO_GLAZING
        if self._glazing is not None:
            prim = _run(self._glazing, o[free], d[free], "INTERSECT")
            cross = prim >= 0
            k = prim[cross]
            code[free[cross]] = self._glazing_set[k]
            cos[free[cross]] = self._glazing_cos(d, free[cross], k)
        return code, cos

    def trace(self, origins: np.ndarray, directions: np.ndarray, unit: bool = False) -> Hits:
        """Nearest opaque hit along each ray and the glazing crossed before it.

        One intersection query on the combined scene settles every ray whose
        nearest triangle is opaque or that hits nothing; the rays whose nearest
        triangle is glazing are cast again, from the same origin, against the
        opaque scene alone. The glazing crossed is the nearest glazing when it
        lies before the nearest opaque triangle (as :meth:`glazing_crossing`
        and :meth:`first_hit` would tell together).

        Parameters
        ----------
        origins : ndarray (n, 3) [m]
        directions : ndarray (n, 3)
        unit : bool
            The directions are unit vectors (skip normalisation).

        Returns
        -------
        Hits
        """
        o, d = self._prepare(origins, directions, unit)
        n = o.shape[0]
        glazing = np.full(n, -1, dtype=np.int32)
        cos = np.zeros(n)
        if self._all is None or n == 0:
            z = np.zeros(n, dtype=np.float32)
            return Hits(np.full(n, -1, np.int64), z, z, np.zeros(n, bool), glazing, cos,
                        np.full(n, np.inf, np.float32), self.epsilon)
        res = _run(self._all, o, d, "INTERSECT", output=True)
        prim, u, v, t, ng = res["primID"], res["u"], res["v"], res["tfar"], res["Ng"]
        glass = np.flatnonzero(prim >= self._n_opaque)
        factor = None if self.simple else np.ones(n)
        if glass.size:
            local = prim[glass] - self._n_opaque
            first_t = t[glass].astype(np.float64)
            if self.simple:
                glazing[glass] = self._glazing_set[local]
                cos[glass] = self._glazing_cos(d, glass, local)
            if self._opaque is None:
                prim[glass] = -1
            else:
                again = _run(self._opaque, o[glass], d[glass], "INTERSECT", output=True)
                prim[glass] = again["primID"]
                u[glass], v[glass], t[glass] = again["u"], again["v"], again["tfar"]
                ng[glass] = again["Ng"]
            if factor is not None:
                limit = np.where(prim[glass] >= 0, t[glass].astype(np.float64), np.inf)
                glazing[glass], cos[glass], factor[glass] = self._crossings(
                    o, d, glass, local, first_t, limit)
        # Embree's geometric normal Ng points like the geometry's (v1 − v0) × (v2 − v0)
        front = (np.einsum("ij,ij->i", ng, d) < 0.0) & (prim >= 0)
        triangle = self._opaque_table[prim]
        if self._twins:
            self._face_twins(triangle, u, v, front)
        return Hits(triangle, u, v, front, glazing, cos, t, self.epsilon, factor)

    def _face_twins(self, triangle: np.ndarray, u: np.ndarray, v: np.ndarray,
                    front: np.ndarray) -> None:
        """Turn back-face hits on a zero-gap partition into front hits on the twin (in place).

        The two coincident faces of a partition lie at the same distance, so
        Embree may report either; the one facing the ray is the twin of a
        back-face hit. Twins have the same corners in reverse order
        ``(v0, v2, v1)``, so the barycentric ``(u, v)`` of the hit point swap.
        """
        back = np.flatnonzero(~front & (triangle >= 0))
        if back.size == 0:
            return
        twin = self._twin[triangle[back]]
        back, twin = back[twin >= 0], twin[twin >= 0]
        triangle[back] = twin
        u[back], v[back] = v[back], u[back].copy()
        front[back] = True
