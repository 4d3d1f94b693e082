"""Ray casting against a :class:`~kernels.geometry.Geometry` with Embree (``embreex``).

A :class:`Scene` holds two Embree scenes: the opaque triangles (visibility) and
the glazing triangles (which window a ray crosses and at what angle). All
queries take float64 arrays of any length and work in batches of
:data:`BATCH` rays; Embree itself works in float32.

Self-intersection
-----------------
The *Scene* offsets every origin by ``epsilon`` along its direction before the
query and adds ``epsilon`` back to the distances it returns, so callers pass
their points as they are. ``epsilon`` defaults to ``1e-5 ×`` the scene's extent
(≥ 1e-6 m), well above float32 rounding of coordinates (≈ 6e-8 × extent). A
point lying *on* a surface should in addition be lifted off it along the
surface normal with :meth:`Scene.lift` before casting nearly tangential rays.

Measured (embreex, 2-core machine shared with other jobs, 6 × 8 × 3 m box room
with one front window = 20 triangles, 1e6 rays from the room centre, float64
in): :meth:`Scene.occluded` 5–10 Mrays/s, :meth:`Scene.first_hit` 3–8 Mrays/s,
:meth:`Scene.sky_view` about 3 Mrays/s; a raw float32 ``EmbreeScene.run``
occlusion call reaches about 18 Mrays/s, the rest is the float64 → float32
conversion and normalisation. ``EmbreeScene.run`` releases the GIL (two Python
threads reach about 1.4× the single-thread rate), but a Scene runs
single-threaded: Dask worker processes provide the parallelism.
"""

from __future__ import annotations

import numpy as np
from embreex import rtcore_scene as rtcs
from embreex.mesh_construction import TriangleMesh

from kernels.geometry import Geometry

BATCH = 1 << 20
"""Rays per Embree call (bounds the float32 copies to ~25 MB)."""

NO_GLAZING = -2
""":meth:`Scene.sky_view` code: the ray reaches the sky without crossing glazing."""

BLOCKED = -1
""":meth:`Scene.sky_view` code: an opaque surface blocks the ray."""

_MISS = 1e30  # embree reports tfar = 1e37 on a miss


def _embree(triangles: np.ndarray) -> tuple[rtcs.EmbreeScene, TriangleMesh] | None:
    if triangles.shape[0] == 0:
        return None
    scene = rtcs.EmbreeScene()
    mesh = TriangleMesh(scene, np.ascontiguousarray(triangles, dtype=np.float32))
    return scene, mesh


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
        self._glazing_normals = geometry.normals[self.glazing_index]
        self._glazing_set = geometry.glazing_set_index[self.glazing_index]

    def __reduce__(self) -> tuple:
        return (Scene, (self.geometry, self.epsilon))

    # ------------------------------------------------------------ internals

    def _prepare(
        self, origins: np.ndarray, directions: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """Offset origins and unit directions as contiguous float32 (n, 3) arrays."""
        o = np.asarray(origins, dtype=np.float64).reshape(-1, 3)
        d = np.asarray(directions, dtype=np.float64).reshape(-1, 3)
        if o.shape != d.shape:
            o, d = np.broadcast_arrays(o, d)
        d = d / np.sqrt(np.einsum("ij,ij->i", d, d))[:, None]
        o32 = np.empty(o.shape, dtype=np.float32)
        np.add(o, self.epsilon * d, out=o32, casting="same_kind")
        return o32, d.astype(np.float32)

    @staticmethod
    def _intersect(
        scene: tuple[rtcs.EmbreeScene, TriangleMesh] | None, o: np.ndarray, d: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """Nearest hit per ray: (primitive index int64 or −1, distance float64 or inf)."""
        n = o.shape[0]
        prim = np.full(n, -1, dtype=np.int64)
        dist = np.full(n, np.inf)
        if scene is None:
            return prim, dist
        for s in range(0, n, BATCH):
            sl = slice(s, s + BATCH)
            res = scene[0].run(
                o[sl], d[sl], query="INTERSECT", output=1
            )
            p = res["primID"].astype(np.int64)
            t = res["tfar"].astype(np.float64)
            hit = p >= 0
            prim[sl] = np.where(hit, p, -1)
            dist[sl] = np.where(hit & (t < _MISS), t, np.inf)
        return prim, dist

    # ------------------------------------------------------------- queries

    def lift(self, points: np.ndarray, normals: np.ndarray) -> np.ndarray:
        """Points (n, 3) [m] moved ``epsilon`` along their unit normals (n, 3)."""
        return np.asarray(points, dtype=np.float64) + self.epsilon * np.asarray(normals)

    def first_hit(
        self, origins: np.ndarray, directions: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """Nearest opaque triangle along each ray.

        Parameters
        ----------
        origins : ndarray (n, 3) [m]
        directions : ndarray (n, 3)
            Need not be unit length.

        Returns
        -------
        triangle : ndarray (n,) int64
            Index into ``geometry.triangles`` (−1: no opaque hit).
        distance : ndarray (n,) float64 [m]
            From the given origin (inf: no hit).
        """
        o, d = self._prepare(origins, directions)
        prim, dist = self._intersect(self._opaque, o, d)
        tri = np.where(prim >= 0, self.opaque_index[np.maximum(prim, 0)], -1)
        return tri, dist + self.epsilon

    def occluded(
        self,
        origins: np.ndarray,
        directions: np.ndarray,
        max_distance: float | np.ndarray = np.inf,
    ) -> np.ndarray:
        """True where an opaque triangle lies within ``max_distance`` [m] along the ray."""
        o, d = self._prepare(origins, directions)
        n = o.shape[0]
        out = np.zeros(n, dtype=bool)
        if self._opaque is None:
            return out
        far = np.broadcast_to(np.asarray(max_distance, dtype=np.float64), (n,)) - self.epsilon
        far = np.clip(far, 0.0, 1e37).astype(np.float32)
        for s in range(0, n, BATCH):
            sl = slice(s, s + BATCH)
            res = self._opaque[0].run(
                o[sl],
                d[sl],
                dists=far[sl],
                query="OCCLUDED",
            )
            out[sl] = res >= 0
        return out

    def glazing_crossing(
        self, origins: np.ndarray, directions: np.ndarray
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
        o, d = self._prepare(origins, directions)
        prim, dist = self._intersect(self._glazing, o, d)
        hit = prim >= 0
        k = np.maximum(prim, 0)
        if self._glazing is None:
            return np.full(o.shape[0], -1, np.int32), np.zeros(o.shape[0]), dist
        gset = np.where(hit, self._glazing_set[k], -1).astype(np.int32)
        cos = np.where(hit, np.abs(np.einsum("ij,ij->i", d, self._glazing_normals[k])), 0.0)
        return gset, cos, dist + self.epsilon

    def sky_view(
        self, origins: np.ndarray, directions: np.ndarray
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
            opaque surface is hit.
        cos_incidence : ndarray (n,) float64
            |cos| at the crossed glazing (0 unless code ≥ 0).
        """
        blocked = self.occluded(origins, directions)
        gset, cos, _ = self.glazing_crossing(origins, directions)
        code = np.where(blocked, BLOCKED, np.where(gset >= 0, gset, NO_GLAZING)).astype(np.int32)
        return code, np.where(code >= 0, cos, 0.0)
