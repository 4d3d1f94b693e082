"""Room geometry: parametric rooms, OBJ meshes and sensor points.

A :class:`Geometry` is a flat list of triangles in the building frame (metres)
with one :class:`Material` per triangle. It is what the ray caster
(:mod:`kernels.raytrace`) and the element transfer (:mod:`kernels.transfer`)
work on.

Conventions
-----------
- Building frame (CONTRACT.md §1): origin at the interior floor corner where the
  front and left walls meet; x along the front wall (0 to ``width``), y into the
  room (0 at the front wall, ``depth`` at the back wall), z up from the floor.
  The front façade's outward normal is −y.
- Winding: a triangle's vertices run counter-clockwise seen from the side its
  normal points to, so ``normal = (v1 − v0) × (v2 − v0) / |…|``.
- Opaque surfaces of the room (floor, ceiling, walls, inner reveals) face *into*
  the room. Exterior surfaces (façade outer faces, outer reveals, overhang,
  obstruction boxes) are faces of closed or ground-standing solids and face
  *out of* their solid. Glazing triangles face *out of* the room (their normal
  is the window's outward normal); ray queries use |cos| so either side works.
- With ``thickness == 0`` the room shell has no outer faces: a ray arriving
  from outside the building meets the *back* of an interior triangle
  (``dot(direction, normal) > 0``). Callers that cast rays from exterior
  surfaces treat such back-face hits as the building's dark exterior shell.
- Parametric-room choices not fixed by CONTRACT.md, documented here:

  * ``thickness > 0``: the walls and roof grow outwards (the interior box stays
    ``[0, width] × [0, depth] × [0, height]``); outer faces are added at
    ``x = −t``, ``x = width + t``, ``y = −t``, ``y = depth + t`` and
    ``z = height + t`` (the building stands on the ground, so there is no
    outer floor face). Each window hole is lined by four reveal rectangles;
    the glass sits at :data:`GLASS_POSITION` (0.5 = middle) of the wall
    thickness. Reveals between the interior face and the glass are interior
    surfaces with the wall reflectance; those between the glass and the outer
    face are exterior surfaces with ``exterior_reflectance``.
  * overhang: one slab per front window, as wide as that window, projecting
    ``depth`` from the outer face of the front façade, its underside at
    ``head + gap`` and its top :data:`OVERHANG_SLAB` higher; a closed box
    without the face against the façade.
  * obstructions: boxes standing on the ground (z = 0) with ``x``, ``y`` the
    *centre* of their footprint (as for roof windows), ``width`` along x,
    ``depth`` along y; no bottom face.
  * exterior surfaces (outer faces, outer reveals, overhang, obstructions) all
    take ``exterior_reflectance`` (default 0.2, common practice for built
    surroundings, the same as the usual ground reflectance).

Buildings (:func:`parametric_building`)
---------------------------------------
- A building is a list of box *spaces*, each given like a parametric room in
  its own frame plus ``origin``, the building-frame position of its
  front-left interior floor corner (z > 0: an upper storey). Its interior box
  is ``[origin, origin + (width, depth, height)]``; every space's front faces
  the building's front (−y). ``Geometry.space_boxes`` lists the boxes and
  ``Geometry.space`` the owner space of every interior triangle (its faces,
  its reveals up to the glass, its glazing); exterior triangles have −1.
- Walls: the building's solid is the union of every space's box grown by its
  own ``thickness`` (not below the ground), less every interior and every
  window hole. Its faces towards the outside are found on the rectilinear
  grid of all box and hole coordinates and merged into rectangles; so where
  two spaces' facing walls are closer than the sum of their thicknesses the
  gap is solid (a *partition*: no outer faces, each side keeps its own
  interior face with its own space's reflectance), a lower ceiling under an
  upper floor is a partition, and corners, wings and steps close without
  gaps or doubled faces. Farther apart, each space has its own outer faces
  (exterior surfaces, which shade and reflect for the other spaces like any
  obstruction).
- Touching spaces (gap 0): the two interior faces coincide and face opposite
  ways, which a ray caster cannot tell apart (Embree reports either at the
  same distance). The covered part is built once as a pair of *twins* — the
  same triangles, one per space with its material, the second with its
  corners in reverse order — recorded in ``Geometry.twin``; the ray caster
  turns a back-face hit on one into a front-face hit on the other
  (:meth:`kernels.raytrace.Scene.trace`). Gaps between 0 and
  :data:`SEAM_GAP` (1 mm) are refused rather than left to float32 rounding.
- Internal openings: a window on a wall that another space covers (facing,
  within the partition distance) opens into that space. Its glass sits at
  :data:`GLASS_POSITION` of the gap between the two interior faces, the hole
  is lined by each space's wall material on its side of the glass, and its
  glazing set's normal transmittance is baked into the material
  (``Material.transmittance``; the set is listed in
  ``Geometry.internal_sets``, not in ``glazing_sets``, so variants cannot
  scale it: the sweep puts it into the coefficient key instead). Refused: a
  window partly covered by another space, a set used on both outside and
  internal windows, two internal windows filling the same opening, an
  outside window whose far end meets another space's walls, overlapping
  interiors (naming both spaces), obstructions or overhangs that run into a
  space's walls.
- Group names are prefixed by the space's name (``classroom-1/floor``,
  ``classroom-1/window_0``); outer faces are ``facade``.
"""

from __future__ import annotations

import csv
import hashlib
import itertools
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path
from typing import Any

import numpy as np

from luxsweep.kernels.errors import GeometryError

WALLS = ("front", "back", "left", "right", "roof")
"""Valid ``wall`` names of a window."""

GLASS_POSITION = 0.5
"""Position of the glass inside a wall of non-zero thickness, as a fraction of
the thickness measured from the interior face (0 = flush inside, 1 = flush outside)."""

OVERHANG_SLAB = 0.05
"""Thickness of an overhang slab [m]."""

MAX_SENSORS = 100_000
"""Largest number of sensor points accepted (more is almost surely a unit mistake)."""

_ROUND = 6  # decimals [m] of coordinates in the canonical form (1 µm)
_PAIRS = 2_000_000  # point × triangle (or segment) pairs held at once by the sensor grid


# --------------------------------------------------------------------------- data


@dataclass(frozen=True)
class Material:
    """Optical kind of a surface.

    Parameters
    ----------
    name : str
        Label of the material (e.g. ``"walls"``, ``"glazing main"``).
    kind : str
        ``"opaque"`` or ``"glazing"``.
    reflectance : float
        Diffuse reflectance [-] of an opaque surface in [0, 1); 0 for glazing.
    glazing_set : str or None
        Name of the glazing set (glazing only).
    panes : int or None
        Number of panes (glazing only; 0 is an unglazed opening).
    exterior : bool
        True for surfaces outside the room (façade outer faces, outer reveals,
        overhang, obstructions).
    transmittance : float or None
        Normal-incidence transmittance [-] of the glazing of an internal
        opening (baked into the geometry); None for outside glazing, whose
        transmittance the series stage applies per variant.
    """

    name: str
    kind: str
    reflectance: float
    glazing_set: str | None = None
    panes: int | None = None
    exterior: bool = False
    transmittance: float | None = None


@dataclass(frozen=True, eq=False)
class Geometry:
    """Triangles with materials in the building frame.

    Parameters
    ----------
    triangles : ndarray (n, 3, 3) [m]
        Vertices, counter-clockwise seen from the side the normal points to.
    material : ndarray (n,) int32
        Index into ``materials`` for every triangle.
    materials : tuple of Material
    glazing_sets : tuple of str
        Sorted names of the glazing sets present; a glazing triangle's set index
        is its position in this tuple.
    group : ndarray (n,) int32
        Index into ``group_names`` for every triangle (OBJ group, or the
        parametric room's part: ``floor``, ``ceiling``, ``wall_front`` …,
        ``window_<i>``, ``reveal_<i>``, ``facade``, ``overhang``,
        ``obstruction_<i>``).
    group_names : tuple of str
    room : tuple of float or None
        ``(width, depth, height)`` [m] of a parametric room; None for meshes
        and buildings of several spaces.
    source : str or None
        File the geometry was read from (for messages).
    space_names : tuple of str
        Names of the spaces of a parametric building (``("room",)`` for
        :func:`parametric_room`, ``()`` for meshes).
    space_boxes : ndarray (k, 2, 3) [m]
        Interior box (low corner, high corner) of every space, building frame.
    space : ndarray (n,) int32
        Owner space of every interior triangle (index into ``space_names``);
        −1 for exterior surfaces and obstructions (and every triangle of a mesh).
    internal_sets : tuple of str
        Sorted names of the glazing sets used on internal openings (glazing
        between two spaces, its normal transmittance baked into its material);
        ``glazing_sets`` lists only the sets on outside glazing.
    twin : ndarray (n,) int32
        For a triangle of a zero-gap partition, the coincident triangle of the
        other space (the same corners in reverse order, see the module notes);
        −1 for every other triangle.
    """

    triangles: np.ndarray
    material: np.ndarray
    materials: tuple[Material, ...]
    glazing_sets: tuple[str, ...]
    group: np.ndarray
    group_names: tuple[str, ...]
    room: tuple[float, float, float] | None = None
    source: str | None = field(default=None)
    space_names: tuple[str, ...] = ()
    space_boxes: np.ndarray | None = None
    space: np.ndarray | None = None
    internal_sets: tuple[str, ...] = ()
    twin: np.ndarray | None = None

    def __post_init__(self) -> None:
        tri = np.ascontiguousarray(self.triangles, dtype=np.float64)
        mat = np.ascontiguousarray(self.material, dtype=np.int32)
        grp = np.ascontiguousarray(self.group, dtype=np.int32)
        if tri.ndim != 3 or tri.shape[1:] != (3, 3):
            raise ValueError(f"triangles must have shape (n, 3, 3), got {tri.shape}")
        n = tri.shape[0]
        if mat.shape != (n,) or grp.shape != (n,):
            raise ValueError("material and group must have one entry per triangle")
        boxes = np.ascontiguousarray(
            np.zeros((0, 2, 3)) if self.space_boxes is None else self.space_boxes,
            dtype=np.float64)
        if boxes.shape != (len(self.space_names), 2, 3):
            raise ValueError("space_boxes must have shape (len(space_names), 2, 3)")
        own = np.ascontiguousarray(np.full(n, -1) if self.space is None else self.space,
                                   dtype=np.int32)
        twin = np.ascontiguousarray(np.full(n, -1) if self.twin is None else self.twin,
                                    dtype=np.int32)
        if own.shape != (n,) or twin.shape != (n,):
            raise ValueError("space and twin must have one entry per triangle")
        for a in (tri, mat, grp, boxes, own, twin):
            a.flags.writeable = False
        object.__setattr__(self, "triangles", tri)
        object.__setattr__(self, "material", mat)
        object.__setattr__(self, "group", grp)
        object.__setattr__(self, "space_boxes", boxes)
        object.__setattr__(self, "space", own)
        object.__setattr__(self, "twin", twin)

    @property
    def n_triangles(self) -> int:
        return int(self.triangles.shape[0])

    @cached_property
    def normals(self) -> np.ndarray:
        """Unit normals (n, 3) from the winding: (v1 − v0) × (v2 − v0)."""
        t = self.triangles
        c = np.cross(t[:, 1] - t[:, 0], t[:, 2] - t[:, 0])
        return c / np.linalg.norm(c, axis=1, keepdims=True)

    @cached_property
    def areas(self) -> np.ndarray:
        """Triangle areas (n,) [m²]."""
        t = self.triangles
        return 0.5 * np.linalg.norm(np.cross(t[:, 1] - t[:, 0], t[:, 2] - t[:, 0]), axis=1)

    @cached_property
    def is_glazing(self) -> np.ndarray:
        """(n,) bool: True for glazing triangles."""
        kinds = np.array([m.kind == "glazing" for m in self.materials], dtype=bool)
        return kinds[self.material]

    @cached_property
    def reflectance(self) -> np.ndarray:
        """(n,) float64 diffuse reflectance [-] (0 for glazing)."""
        r = np.array([m.reflectance for m in self.materials], dtype=np.float64)
        return r[self.material]

    @cached_property
    def exterior(self) -> np.ndarray:
        """(n,) bool: True for surfaces outside the room."""
        e = np.array([m.exterior for m in self.materials], dtype=bool)
        return e[self.material]

    @cached_property
    def glazing_set_index(self) -> np.ndarray:
        """(n,) int32 index into ``glazing_sets`` (−1 for opaque triangles and internal glazing)."""
        idx = np.array(
            [
                self.glazing_sets.index(m.glazing_set)
                if m.kind == "glazing" and m.transmittance is None else -1
                for m in self.materials
            ],
            dtype=np.int32,
        )
        return idx[self.material]

    @cached_property
    def internal_transmittance(self) -> np.ndarray:
        """(n,) float64 baked normal transmittance [-] of internal glazing (NaN elsewhere)."""
        t = np.array([np.nan if m.transmittance is None else float(m.transmittance)
                      for m in self.materials], dtype=np.float64)
        return t[self.material]

    @cached_property
    def panes(self) -> np.ndarray:
        """(n,) int32 number of panes of glazing triangles (0 for opaque ones)."""
        p = np.array([int(m.panes or 0) if m.kind == "glazing" else 0 for m in self.materials],
                     dtype=np.int32)
        return p[self.material]

    @property
    def set_panes(self) -> tuple[int, ...]:
        """Number of panes of every outside glazing set, aligned with ``glazing_sets``."""
        panes: dict[str, int] = {}
        for m in self.materials:
            if m.kind == "glazing" and m.transmittance is None:
                panes[m.glazing_set] = int(m.panes or 0)
        return tuple(panes[s] for s in self.glazing_sets)

    @property
    def bounds(self) -> np.ndarray:
        """(2, 3) lower and upper corner of all triangles [m]."""
        flat = self.triangles.reshape(-1, 3)
        return np.stack([flat.min(axis=0), flat.max(axis=0)])

    def group_mask(self, names: Sequence[str], field: str | None = None) -> np.ndarray:
        """(n,) bool: triangles belonging to any of the named groups.

        Parameters
        ----------
        names : sequence of str
        field : str, optional
            Key that lists ``names`` (named by the error); default the group name.

        Raises
        ------
        GeometryError
            When a name is not a group of this geometry (lists the valid ones).
        """
        idx = []
        for name in names:
            if name not in self.group_names:
                raise GeometryError(
                    f"no group named '{name}'; the geometry has groups "
                    f"{', '.join(sorted(self.group_names))}",
                    file=self.source,
                    field=field or name,
                )
            idx.append(self.group_names.index(name))
        return np.isin(self.group, idx)

    def canonical(self) -> dict[str, Any]:
        """JSON-able description for hashing (coordinates rounded to 1 µm).

        The triangle coordinates and per-triangle material indices enter as
        SHA-256 digests of their rounded little-endian bytes, so the dict stays
        small for large meshes while any change of geometry changes it.
        """
        tri = np.round(self.triangles, _ROUND) + 0.0  # + 0.0 turns −0 into 0
        out: dict[str, Any] = {
            "n_triangles": self.n_triangles,
            "triangles_sha256": hashlib.sha256(tri.astype("<f8").tobytes()).hexdigest(),
            "material_sha256": hashlib.sha256(self.material.astype("<i4").tobytes()).hexdigest(),
            "materials": [
                {
                    "name": m.name,
                    "kind": m.kind,
                    "reflectance": round(float(m.reflectance), _ROUND),
                    "glazing_set": m.glazing_set,
                    "panes": m.panes,
                    "exterior": bool(m.exterior),
                    **({} if m.transmittance is None
                       else {"transmittance": round(float(m.transmittance), _ROUND)}),
                }
                for m in self.materials
            ],
            "glazing_sets": list(self.glazing_sets),
        }
        if self.internal_sets:
            out["internal_sets"] = list(self.internal_sets)
        if np.any(self.twin >= 0):  # zero-gap partitions change which face a ray meets
            out["twin_sha256"] = hashlib.sha256(self.twin.astype("<i4").tobytes()).hexdigest()
        return out


# ------------------------------------------------------------------ small helpers


def _get(item: Any, key: str, default: Any = ...) -> Any:
    """Read ``key`` from a mapping or an attribute of an object (pydantic model).

    A value of None counts as missing (models dump unset optional keys as None).
    """
    if isinstance(item, Mapping):
        value = item.get(key)
    else:
        value = getattr(item, key, None)
    if value is not None:
        return value
    if default is ...:
        raise KeyError(key)
    return default


def _number(item: Any, key: str, path: str, default: Any = ...) -> float:
    try:
        value = _get(item, key, default)
    except KeyError as exc:
        raise GeometryError(f"'{key}' is missing; give it in metres", field=path) from exc
    try:
        value = float(value)
    except (TypeError, ValueError) as exc:
        raise GeometryError(f"'{value}' is not a number", field=path) from exc
    if not math.isfinite(value):
        raise GeometryError(f"{value} is not a finite number", field=path)
    return value


def _positive(item: Any, key: str, path: str, default: Any = ...) -> float:
    value = _number(item, key, path, default)
    if value <= 0:
        raise GeometryError(f"{value:g} must be greater than 0 m", field=path)
    return value


def _quad(corners: np.ndarray, normal: np.ndarray) -> np.ndarray:
    """Two triangles (2, 3, 3) of the planar quad ``corners`` (4, 3) facing ``normal``."""
    a, b, c, d = corners
    tris = np.array([[a, b, c], [a, c, d]], dtype=np.float64)
    n = np.cross(tris[:, 1] - tris[:, 0], tris[:, 2] - tris[:, 0])
    flip = n @ normal < 0
    tris[flip] = tris[flip][:, ::-1]
    return tris


def _box_faces(lo: np.ndarray, hi: np.ndarray, skip: Sequence[str] = ()) -> np.ndarray:
    """Outward-facing triangles of the axis-aligned box [lo, hi], minus ``skip`` faces.

    Face names: ``-x``, ``+x``, ``-y``, ``+y``, ``-z``, ``+z``.
    """
    out = []
    for axis in range(3):
        for sign, name in ((-1, f"-{'xyz'[axis]}"), (1, f"+{'xyz'[axis]}")):
            if name in skip:
                continue
            u, v = [k for k in range(3) if k != axis]
            plane = hi[axis] if sign > 0 else lo[axis]
            corners = np.zeros((4, 3))
            corners[:, axis] = plane
            corners[:, u] = [lo[u], hi[u], hi[u], lo[u]]
            corners[:, v] = [lo[v], lo[v], hi[v], hi[v]]
            normal = np.zeros(3)
            normal[axis] = sign
            out.append(_quad(corners, normal))
    return np.concatenate(out)


def _rect_minus_holes(
    u0: float, u1: float, v0: float, v1: float, holes: Sequence[tuple[float, float, float, float]]
) -> list[tuple[float, float, float, float]]:
    """Split the rectangle [u0, u1] × [v0, v1] into rectangles around ``holes``.

    Cells of the grid through every hole edge (coordinates rounded to 1 nm so
    touching edges coincide) are kept unless inside a hole; kept cells next to
    each other along u in one row are merged.
    """
    us = sorted({round(c, 9) for c in (u0, u1, *[c for h in holes for c in h[:2]])})
    vs = sorted({round(c, 9) for c in (v0, v1, *[c for h in holes for c in h[2:]])})
    rects = []
    for vb, vt in itertools.pairwise(vs):
        run: list[float] | None = None
        for ul, ur in itertools.pairwise(us):
            cu, cv = 0.5 * (ul + ur), 0.5 * (vb + vt)
            inside = any(h[0] < cu < h[1] and h[2] < cv < h[3] for h in holes)
            if inside:
                if run is not None:
                    rects.append((run[0], run[1], vb, vt))
                    run = None
            elif run is None:
                run = [ul, ur]
            else:
                run[1] = ur
        if run is not None:
            rects.append((run[0], run[1], vb, vt))
    return rects


class _Builder:
    """Collects triangles with materials and groups."""

    def __init__(self) -> None:
        self.tris: list[np.ndarray] = []
        self.mats: list[int] = []
        self.grps: list[int] = []
        self.materials: list[Material] = []
        self.groups: list[str] = []
        self.spaces: list[int] = []
        self.twins: list[tuple[int, int]] = []

    def add(self, tris: np.ndarray, material: Material, group: str, space: int = -1) -> int:
        """Append triangles; returns the index of the first one."""
        if material not in self.materials:
            self.materials.append(material)
        if group not in self.groups:
            self.groups.append(group)
        first = len(self.mats)
        self.tris.append(np.asarray(tris, dtype=np.float64).reshape(-1, 3, 3))
        n = self.tris[-1].shape[0]
        self.mats += [self.materials.index(material)] * n
        self.grps += [self.groups.index(group)] * n
        self.spaces += [space] * n
        return first

    def pair(self, a: int, b: int, n: int) -> None:
        """Mark triangles ``a … a+n−1`` and ``b … b+n−1`` as twins (zero-gap partition)."""
        self.twins += [(a + k, b + k) for k in range(n)]

    def build(self, room: tuple[float, float, float] | None, source: str | None,
              space_names: tuple[str, ...] = (), space_boxes: np.ndarray | None = None
              ) -> Geometry:
        outside = {m.glazing_set for m in self.materials
                   if m.kind == "glazing" and m.transmittance is None}
        inside = {m.glazing_set for m in self.materials
                  if m.kind == "glazing" and m.transmittance is not None}
        twin = np.full(len(self.mats), -1, dtype=np.int32)
        for a, b in self.twins:
            twin[a], twin[b] = b, a
        return Geometry(
            triangles=np.concatenate(self.tris),
            material=np.array(self.mats, dtype=np.int32),
            materials=tuple(self.materials),
            glazing_sets=tuple(sorted(outside)),
            group=np.array(self.grps, dtype=np.int32),
            group_names=tuple(self.groups),
            room=room,
            source=source,
            space_names=space_names,
            space_boxes=space_boxes,
            space=np.array(self.spaces, dtype=np.int32),
            internal_sets=tuple(sorted(inside)),
            twin=twin,
        )


# ------------------------------------------------------------- parametric room


@dataclass(frozen=True)
class _Window:
    index: int
    wall: str
    u0: float
    u1: float
    v0: float
    v1: float
    glazing: str
    head: float


def _wall_frame(
    wall: str, width: float, depth: float, height: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, float, float]:
    """Affine frame of a wall: point = origin + u·eu + v·ev + w·ew.

    u runs along the wall (x on front/back/roof, y on left/right), v up the wall
    (y on the roof), w outwards through the wall. Returns the origin, the three
    axes and the interior extent of u and v.
    """
    ex, ey, ez = np.eye(3)
    frames = {
        "front": (np.zeros(3), ex, ez, -ey, width, height),
        "back": (depth * ey, ex, ez, ey, width, height),
        "left": (np.zeros(3), ey, ez, -ex, depth, height),
        "right": (width * ex, ey, ez, ex, depth, height),
        "roof": (height * ez, ex, ey, ez, width, depth),
    }
    return frames[wall]


def _validate_windows(
    windows: Sequence[Any],
    width: float,
    depth: float,
    height: float,
    glazing_panes: Mapping[str, int],
) -> list[_Window]:
    out: list[_Window] = []
    for i, win in enumerate(windows):
        path = f"windows.{i}"
        try:
            wall = _get(win, "wall")
        except KeyError as exc:
            raise GeometryError(
                f"'wall' is missing; give one of {', '.join(WALLS)}", field=f"{path}.wall"
            ) from exc
        if wall not in WALLS:
            raise GeometryError(
                f"unknown wall '{wall}'; use one of {', '.join(WALLS)}", field=f"{path}.wall"
            )
        try:
            glazing = _get(win, "glazing")
        except KeyError:
            glazing = None
        if glazing not in glazing_panes:
            known = ", ".join(sorted(glazing_panes)) or "(none defined)"
            raise GeometryError(
                f"glazing set '{glazing}' is not defined; use one of {known} "
                "or add it under 'glazings'",
                field=f"{path}.glazing",
            )
        ww = _positive(win, "width", f"{path}.width")
        if wall == "roof":
            length = _positive(win, "length", f"{path}.length")
            x = _number(win, "x", f"{path}.x")
            y = _number(win, "y", f"{path}.y")
            u0, u1, v0, v1 = x - ww / 2, x + ww / 2, y - length / 2, y + length / 2
            if u0 < 0 or u1 > width:
                raise GeometryError(
                    f"the roof window spans x = {u0:g} … {u1:g} m, outside the roof "
                    f"(0 … {width:g} m); move its centre x or make it narrower",
                    field=f"{path}.x",
                )
            if v0 < 0 or v1 > depth:
                raise GeometryError(
                    f"the roof window spans y = {v0:g} … {v1:g} m, outside the roof "
                    f"(0 … {depth:g} m); move its centre y or make it shorter",
                    field=f"{path}.y",
                )
            out.append(_Window(i, wall, u0, u1, v0, v1, glazing, height))
            continue
        sill = _number(win, "sill", f"{path}.sill")
        head = _number(win, "head", f"{path}.head")
        offset = _number(win, "offset", f"{path}.offset", 0.0)
        if sill < 0:
            raise GeometryError(f"sill {sill:g} m is below the floor; use sill ≥ 0",
                                field=f"{path}.sill")
        if sill >= head:
            raise GeometryError(
                f"sill {sill:g} m is not below head {head:g} m; the sill must be lower "
                "than the head", field=f"{path}.sill",
            )
        if head > height:
            raise GeometryError(
                f"head {head:g} m is above the ceiling ({height:g} m); lower the head",
                field=f"{path}.head",
            )
        length = width if wall in ("front", "back") else depth
        u0, u1 = length / 2 + offset - ww / 2, length / 2 + offset + ww / 2
        if u0 < -1e-9 or u1 > length + 1e-9:
            raise GeometryError(
                f"the window spans {u0:g} … {u1:g} m along the {wall} wall, which is "
                f"{length:g} m long; reduce its width or offset",
                field=f"{path}.width" if ww > length else f"{path}.offset",
            )
        out.append(_Window(i, wall, max(u0, 0.0), min(u1, length), sill, head, glazing, head))
    for a_i, a in enumerate(out):
        for b in out[:a_i]:
            if (a.wall == b.wall and min(a.u1, b.u1) > max(a.u0, b.u0) + 1e-9
                    and min(a.v1, b.v1) > max(a.v0, b.v0) + 1e-9):
                raise GeometryError(
                    f"window {a.index} overlaps window {b.index} on the {a.wall} wall; "
                    "move or resize one of them",
                    field=f"windows.{a.index}",
                )
    return out


def parametric_room(
    width: float,
    depth: float,
    height: float,
    windows: Sequence[Any],
    reflectance: Mapping[str, float] | Any,
    glazing_panes: Mapping[str, int],
    thickness: float = 0.0,
    overhang: Mapping[str, float] | Any | None = None,
    obstructions: Sequence[Any] = (),
    exterior_reflectance: float = 0.2,
) -> Geometry:
    """Build a box room with windows, reveals, an overhang and obstruction boxes.

    Parameters
    ----------
    width, depth, height : float [m]
        Interior size along building x, y and z (CONTRACT.md §1).
    windows : sequence of mappings (or objects with these attributes)
        Wall windows ``{wall: front|back|left|right, width, sill, head, offset,
        glazing}`` [m]; ``offset`` moves the window centre from the wall centre
        towards +x (front, back) or +y (left, right). Roof windows
        ``{wall: roof, width (x), length (y), x, y (centre), glazing}`` [m].
    reflectance : mapping
        ``{floor, walls, ceiling}`` diffuse reflectances [-] in [0, 1).
    glazing_panes : mapping
        Glazing set name → number of panes (0 = unglazed opening).
    thickness : float [m]
        Wall and roof thickness (adds outer faces and window reveals).
    overhang : mapping, optional
        ``{depth, gap}`` [m]: a slab above every front window (see module notes).
    obstructions : sequence of mappings
        Exterior boxes ``{x, y, width, depth, height}`` [m] standing on z = 0,
        ``x, y`` the centre of the footprint.
    exterior_reflectance : float [-]
        Reflectance of all exterior surfaces.

    Returns
    -------
    Geometry

    Raises
    ------
    GeometryError
        With a dotted ``field`` naming this function's parameter, such as
        ``windows.1.sill`` or ``glazing_panes.main``, and a fix (the engine
        maps these to study-file keys).

    Notes
    -----
    Stages: the inputs are checked (:func:`_room_materials`,
    :func:`_validate_windows`), then the floor, each wall with its windows and
    reveals (:func:`_add_wall`), the overhang slabs (:func:`_add_overhang`) and
    the obstruction boxes (:func:`_add_obstructions`) are added in that order.
    """
    width = _positive({"width": width}, "width", "width")
    depth = _positive({"depth": depth}, "depth", "depth")
    height = _positive({"height": height}, "height", "height")
    t = _number({"thickness": thickness}, "thickness", "thickness")
    if t < 0:
        raise GeometryError(f"thickness {t:g} m is negative; use 0 or more", field="thickness")
    materials = _room_materials(reflectance, glazing_panes, exterior_reflectance)
    wins = _validate_windows(windows, width, depth, height, glazing_panes)

    b = _Builder()
    b.add(_quad(np.array([[0, 0, 0], [width, 0, 0], [width, depth, 0], [0, depth, 0]], float),
                np.array([0.0, 0, 1])), materials["floor"], "floor", 0)
    for wall in ("front", "back", "left", "right", "roof"):
        _add_wall(b, wall, [w for w in wins if w.wall == wall], (width, depth, height), t,
                  materials)
    slabs = [] if overhang is None else _add_overhang(b, overhang, wins, height, t,
                                                      materials["exterior"])
    _add_obstructions(b, obstructions, slabs, width, depth, t, materials["exterior"])
    return b.build(room=(width, depth, height), source=None, space_names=("room",),
                   space_boxes=np.array([[[0.0, 0.0, 0.0], [width, depth, height]]]))


def _room_materials(reflectance: Mapping[str, float] | Any, glazing_panes: Mapping[str, int],
                    exterior_reflectance: float) -> dict[str, Any]:
    """Checked materials of a parametric room.

    Returns ``{"floor", "walls", "ceiling", "exterior": Material, "glazing": {set:
    Material}}``; reflectances must lie in [0, 1) and panes be whole numbers ≥ 0.
    """
    refl = {}
    for part in ("floor", "walls", "ceiling"):
        r = _number(reflectance, part, f"reflectance.{part}")
        if not 0 <= r < 1:
            raise GeometryError(
                f"reflectance {r:g} is outside [0, 1); give a fraction such as 0.5",
                field=f"reflectance.{part}",
            )
        refl[part] = r
    if not 0 <= exterior_reflectance < 1:
        raise GeometryError(
            f"reflectance {exterior_reflectance:g} is outside [0, 1)",
            field="exterior_reflectance",
        )
    for name, panes in glazing_panes.items():
        if int(panes) != panes or panes < 0:
            raise GeometryError(
                f"panes {panes} must be a whole number ≥ 0", field=f"glazing_panes.{name}"
            )
    return {
        "floor": Material("floor", "opaque", refl["floor"]),
        "ceiling": Material("ceiling", "opaque", refl["ceiling"]),
        "walls": Material("walls", "opaque", refl["walls"]),
        "exterior": Material("exterior", "opaque", exterior_reflectance, exterior=True),
        "glazing": {
            s: Material(f"glazing {s}", "glazing", 0.0, glazing_set=s, panes=int(p))
            for s, p in glazing_panes.items()
        },
    }


@dataclass(frozen=True)
class _WallPlane:
    """Coordinates ``(u, v)`` in a wall's plane and ``w`` along its outward normal ``ew``."""

    origin: np.ndarray
    eu: np.ndarray
    ev: np.ndarray
    ew: np.ndarray

    def point(self, u: float, v: float, w: float) -> np.ndarray:
        return self.origin + u * self.eu + v * self.ev + w * self.ew

    def rect(self, u0: float, u1: float, v0: float, v1: float, w: float,
             normal: np.ndarray) -> np.ndarray:
        """Two triangles of the rectangle [u0, u1] × [v0, v1] at depth ``w``, facing ``normal``."""
        pt = self.point
        return _quad(np.array([pt(u0, v0, w), pt(u1, v0, w), pt(u1, v1, w), pt(u0, v1, w)]),
                     normal)


def _add_wall(b: _Builder, wall: str, mine: list[_Window], room: tuple[float, float, float],
              t: float, materials: dict[str, Any]) -> None:
    """Add one wall (or the roof) with its windows; with ``t`` > 0 its outer face and reveals.

    The inner face is the wall minus its window holes; glass sits at
    ``GLASS_POSITION × t`` into the wall. The outer face grows by ``t`` beyond the
    interior box on every side but the ground; each window gets four reveal
    strips, inner part wall material up to the glass, outer part exterior.
    """
    o, eu, ev, ew, lu, lv = _wall_frame(wall, *room)
    plane = _WallPlane(o, eu, ev, ew)
    holes = [(w.u0, w.u1, w.v0, w.v1) for w in mine]
    wg = GLASS_POSITION * t
    inner_mat = materials["ceiling"] if wall == "roof" else materials["walls"]
    group = "ceiling" if wall == "roof" else f"wall_{wall}"
    for r in _rect_minus_holes(0.0, lu, 0.0, lv, holes):
        b.add(plane.rect(*r, 0.0, -ew), inner_mat, group, 0)
    for w in mine:
        b.add(plane.rect(w.u0, w.u1, w.v0, w.v1, wg, ew), materials["glazing"][w.glazing],
              f"window_{w.index}", 0)
    if t == 0:
        return
    ou0, ou1 = -t, lu + t
    ov0, ov1 = (-t, lv + t) if wall == "roof" else (0.0, lv + t)
    for r in _rect_minus_holes(ou0, ou1, ov0, ov1, holes):
        b.add(plane.rect(*r, t, ew), materials["exterior"], "facade")
    for w in mine:
        _add_reveals(b, plane, w, wg, t, materials)


def _add_reveals(b: _Builder, plane: _WallPlane, w: _Window, wg: float, t: float,
                 materials: dict[str, Any]) -> None:
    """The four reveal strips of window ``w``, facing the window's centre."""
    pt = plane.point
    uc, vc = 0.5 * (w.u0 + w.u1), 0.5 * (w.v0 + w.v1)
    sides = [  # (u0, u1, v0, v1) of a reveal strip in the wall plane, collapsed
        (w.u0, w.u0, w.v0, w.v1),
        (w.u1, w.u1, w.v0, w.v1),
        (w.u0, w.u1, w.v0, w.v0),
        (w.u0, w.u1, w.v1, w.v1),
    ]
    for su0, su1, sv0, sv1 in sides:
        normal = pt(uc, vc, 0) - pt(0.5 * (su0 + su1), 0.5 * (sv0 + sv1), 0)
        normal /= np.linalg.norm(normal)
        for wa, wb, mat in ((0.0, wg, materials["walls"]), (wg, t, materials["exterior"])):
            if wb <= wa:
                continue
            corners = np.array([pt(su0, sv0, wa), pt(su1, sv1, wa),
                                pt(su1, sv1, wb), pt(su0, sv0, wb)])
            b.add(_quad(corners, normal), mat, f"reveal_{w.index}", -1 if mat.exterior else 0)


def _add_overhang(b: _Builder, overhang: Mapping[str, float] | Any, wins: list[_Window],
                  height: float, t: float, exterior: Material) -> list[tuple]:
    """One 0.05 m slab above every front window; returns the slabs' (lo, hi) corners [m].

    Checked: depth > 0, gap ≥ 0, a front window exists, no slab rises above the
    roof or crosses another front window.
    """
    od = _positive(overhang, "depth", "overhang.depth")
    gap = _number(overhang, "gap", "overhang.gap", 0.0)
    if gap < 0:
        raise GeometryError(f"gap {gap:g} m is negative; use 0 or more", field="overhang.gap")
    front = [w for w in wins if w.wall == "front"]
    if not front:
        raise GeometryError(
            "there is no front window to shade; add a front window or remove 'overhang'",
            field="overhang",
        )
    slabs = []
    for w in front:
        z0 = w.head + gap
        z1 = z0 + OVERHANG_SLAB
        if z1 > height + t + 1e-9:
            raise GeometryError(
                f"the overhang above window {w.index} (z = {z0:g} … {z1:g} m) rises "
                f"above the roof ({height + t:g} m); reduce 'gap'",
                field="overhang.gap",
            )
        for other in front:
            if other is not w and min(other.u1, w.u1) > max(other.u0, w.u0) and min(
                other.v1, z1
            ) > max(other.v0, z0):
                raise GeometryError(
                    f"the overhang above window {w.index} crosses window {other.index}; "
                    "change 'gap' or the windows' heights",
                    field="overhang.gap",
                )
        lo = np.array([w.u0, -t - od, z0])
        hi = np.array([w.u1, -t, z1])
        slabs.append((lo, hi))
        b.add(_box_faces(lo, hi, skip=("+y",)), exterior, "overhang")
    return slabs


def _add_obstructions(b: _Builder, obstructions: Sequence[Any], slabs: list[tuple],
                      width: float, depth: float, t: float, exterior: Material) -> None:
    """Exterior boxes standing on z = 0, outside the building and clear of the overhang."""
    for i, ob in enumerate(obstructions):
        path = f"obstructions.{i}"
        x = _number(ob, "x", f"{path}.x")
        y = _number(ob, "y", f"{path}.y")
        bw = _positive(ob, "width", f"{path}.width")
        bd = _positive(ob, "depth", f"{path}.depth")
        bh = _positive(ob, "height", f"{path}.height")
        lo = np.array([x - bw / 2, y - bd / 2, 0.0])
        hi = np.array([x + bw / 2, y + bd / 2, bh])
        if min(hi[0], width + t) > max(lo[0], -t) and min(hi[1], depth + t) > max(lo[1], -t):
            raise GeometryError(
                f"the box x = {lo[0]:g} … {hi[0]:g} m, y = {lo[1]:g} … {hi[1]:g} m overlaps "
                f"the building (x = {-t:g} … {width + t:g} m, y = {-t:g} … {depth + t:g} m); "
                "move it outside (y < 0 is in front of the front façade)",
                field=path,
            )
        for slo, shi in slabs:
            if np.all(np.minimum(hi, shi) > np.maximum(lo, slo)):
                raise GeometryError(
                    "the box intersects the overhang; move it away from the façade",
                    field=path,
                )
        b.add(_box_faces(lo, hi, skip=("-z",)), exterior, f"obstruction_{i}")


# ------------------------------------------------------------ parametric building


SEAM_GAP = 1e-3
"""Smallest gap [m] other than 0 between facing interior faces of two spaces.

Facing faces closer than this (but not touching) could not be told apart by
the ray caster's float32 coordinates and origin offset; they are refused. At
a gap of exactly 0 the two faces are built as *twins* (module notes)."""

_TOL = 1e-9  # [m] coordinates closer than this are equal
# cell kinds of the building solid (labels ≥ 0 are window holes, see _solid)
_NOFACE, _INSIDE, _SOLID, _AIR = -4, -3, -2, -1
# interior faces of a space, in the order they are built
_FACES = ("floor", "front", "back", "left", "right", "roof")
_FACE_GROUP = {"floor": "floor", "roof": "ceiling"}


@dataclass(frozen=True, eq=False)
class _Space:
    """A checked space: interior box ``[lo, hi]`` [m] in the building frame."""

    index: int
    name: str
    lo: np.ndarray
    hi: np.ndarray
    t: float
    materials: dict[str, Any]
    windows: list[_Window]
    overhang: Any

    @property
    def size(self) -> tuple[float, float, float]:
        return tuple(float(c) for c in self.hi - self.lo)  # type: ignore[return-value]

    @property
    def grown(self) -> tuple[np.ndarray, np.ndarray]:
        """The box with its walls and roof (``t`` outwards; not below the ground)."""
        lo, hi = self.lo - self.t, self.hi + self.t
        lo[2] = max(self.lo[2] - self.t, 0.0) if self.lo[2] > _TOL else self.lo[2]
        return lo, hi

    def plane(self, wall: str) -> tuple[_WallPlane, float, float]:
        """The wall's plane in the building frame and its interior extent along u and v."""
        if wall == "floor":
            ex, ey, ez = np.eye(3)
            o, eu, ev, ew, lu, lv = np.zeros(3), ex, ey, -ez, self.size[0], self.size[1]
        else:
            o, eu, ev, ew, lu, lv = _wall_frame(wall, *self.size)
        return _WallPlane(self.lo + o, eu, ev, ew), lu, lv


@dataclass(frozen=True, eq=False)
class _Partition:
    """Facing faces of two spaces: ``low``'s +axis face, ``high``'s −axis face.

    ``lo``, ``hi`` (3,) bound the covered rectangle (on the two other axes);
    ``gap`` [m] is the distance between the two interior faces.
    """

    low: _Space
    high: _Space
    axis: int
    gap: float
    lo: np.ndarray
    hi: np.ndarray

    def wall(self, space: _Space) -> str:
        """The name of the partition's wall in ``space``'s frame."""
        names = (("left", "right"), ("front", "back"), ("floor", "roof"))[self.axis]
        return names[1] if space is self.low else names[0]


def _prefixed(exc: GeometryError, i: int, name: str) -> GeometryError:
    """``exc`` of a space's parameter, its field under ``spaces.<i>.`` and naming the space."""
    return GeometryError(f"space '{name}': {exc.message}",
                         field=f"spaces.{i}" + (f".{exc.field}" if exc.field else ""))


def _check_spaces(spaces: Sequence[Any], glazing_panes: Mapping[str, int],
                  exterior_reflectance: float) -> list[_Space]:
    """Each space's parameters checked as :func:`parametric_room` checks them, plus names."""
    out: list[_Space] = []
    seen: dict[str, int] = {}
    if len(spaces) == 0:
        raise GeometryError("a building needs at least one space", field="spaces")
    for i, sp in enumerate(spaces):
        name = str(_get(sp, "name", f"#{i}"))
        if name in seen:
            raise GeometryError(f"space name '{name}' is used twice (spaces {seen[name]} and "
                                f"{i}); give every space its own name", field=f"spaces.{i}.name")
        seen[name] = i
        try:
            origin = _get(sp, "origin", (0.0, 0.0, 0.0))
            if len(origin) != 3:
                raise GeometryError(f"origin needs three numbers x, y, z, got {len(origin)}",
                                    field="origin")
            lo = np.array([_number({"c": c}, "c", f"origin.{k}") for k, c in enumerate(origin)])
            if lo[2] < 0:
                raise GeometryError(f"origin z = {lo[2]:g} m is below the ground; use z ≥ 0",
                                    field="origin.2")
            size = np.array([_positive(sp, k, k) for k in ("width", "depth", "height")])
            t = _number(sp, "thickness", "thickness", 0.0)
            if t < 0:
                raise GeometryError(f"thickness {t:g} m is negative; use 0 or more",
                                    field="thickness")
            materials = _room_materials(_get(sp, "reflectance"), glazing_panes,
                                        exterior_reflectance)
            wins = _validate_windows(_get(sp, "windows", ()), *size, glazing_panes)
        except KeyError as exc:
            raise _prefixed(GeometryError(f"'{exc.args[0]}' is missing", field=exc.args[0]),
                            i, name) from exc
        except GeometryError as exc:
            raise _prefixed(exc, i, name) from exc
        out.append(_Space(i, name, lo, lo + size, t, materials, wins, _get(sp, "overhang", None)))
    return out


def _partitions(spaces: list[_Space]) -> list[_Partition]:
    """Overlap check and every pair of facing faces joined by walls (gap ≤ t_a + t_b).

    Raises
    ------
    GeometryError
        Two interiors overlap (naming both), or facing faces lie closer than
        :data:`SEAM_GAP` without touching.
    """
    out = []
    for a in spaces:
        for b in spaces:
            if b.index <= a.index:
                continue
            common = np.minimum(a.hi, b.hi) - np.maximum(a.lo, b.lo)
            if np.all(common > _TOL):
                raise GeometryError(
                    f"spaces '{a.name}' and '{b.name}' overlap (by {common[0]:g} × {common[1]:g}"
                    f" × {common[2]:g} m); move one of them or make it smaller",
                    field=f"spaces.{b.index}.origin")
    for a in spaces:
        for b in spaces:
            if a is b:
                continue
            for axis in range(3):
                gap = float(b.lo[axis] - a.hi[axis])
                if gap < -_TOL or gap > a.t + b.t + _TOL:
                    continue
                other = [k for k in range(3) if k != axis]
                lo, hi = np.maximum(a.lo, b.lo), np.minimum(a.hi, b.hi)
                if not np.all(hi[other] - lo[other] > _TOL):
                    continue
                if _TOL < gap < SEAM_GAP:
                    raise GeometryError(
                        f"spaces '{a.name}' and '{b.name}' face each other {gap * 1000:.3g} mm "
                        f"apart; make them touch (gap 0) or leave at least {SEAM_GAP * 1000:g} mm",
                        field=f"spaces.{b.index}.origin")
                lo[axis], hi[axis] = a.hi[axis], b.lo[axis]
                out.append(_Partition(a, b, axis, max(gap, 0.0), lo, hi))
    return out


def _window_box(space: _Space, w: _Window) -> tuple[np.ndarray, np.ndarray, int, int]:
    """The window's rectangle as a flat box in the building frame, its axis and outward sign."""
    plane, _, _ = space.plane(w.wall)
    corners = np.array([plane.point(w.u0, w.v0, 0.0), plane.point(w.u1, w.v1, 0.0)])
    axis = int(np.flatnonzero(plane.ew)[0])
    return corners.min(axis=0), corners.max(axis=0), axis, int(plane.ew[axis])


def _cover(spaces: list[_Space], parts: list[_Partition]) -> dict[tuple[int, int], _Partition]:
    """The partition behind every internal opening: ``{(space, window): partition}``.

    Raises
    ------
    GeometryError
        A window partly covered by another space (naming both).
    """
    out = {}
    for sp in spaces:
        for w in sp.windows:
            lo, hi, axis, _ = _window_box(sp, w)
            other = [k for k in range(3) if k != axis]
            area = float(np.prod(hi[other] - lo[other]))
            for p in parts:
                if sp not in (p.low, p.high) or p.wall(sp) != w.wall:
                    continue
                common = np.minimum(hi, p.hi)[other] - np.maximum(lo, p.lo)[other]
                shared = float(np.prod(np.maximum(common, 0.0)))
                if shared <= _TOL * max(area, 1.0):
                    continue
                nb = p.high if sp is p.low else p.low
                if shared < area * (1.0 - 1e-9):
                    raise GeometryError(
                        f"space '{sp.name}': window {w.index} on the {w.wall} wall is partly "
                        f"covered by space '{nb.name}' ({shared:.3g} of {area:.3g} m²); a "
                        "window must open either wholly outside or wholly into one other "
                        "space", field=f"spaces.{sp.index}.windows.{w.index}")
                out[(sp.index, w.index)] = p
    return out


def _rectangles(mask: np.ndarray) -> list[tuple[int, int, int, int]]:
    """Cover the True cells of a 2-D mask with rectangles ``(i0, i1, j0, j1)`` (exclusive ends).

    Runs along the first axis in every row ``j``; equal runs of consecutive
    rows are merged.
    """
    rects, open_runs = [], {}
    for j in range(mask.shape[1] + 1):
        runs = set()
        if j < mask.shape[1]:
            col = np.concatenate([[False], mask[:, j], [False]])
            edges = np.flatnonzero(col[1:] != col[:-1])
            runs = {(int(a), int(b)) for a, b in zip(edges[::2], edges[1::2], strict=True)}
        for key in sorted(open_runs):
            if key not in runs:
                rects.append((*key, open_runs.pop(key), j))
        for key in sorted(runs):
            open_runs.setdefault(key, j)
    return sorted(rects)


def _solid(spaces: list[_Space], holes: list[tuple[np.ndarray, np.ndarray, int]]
           ) -> tuple[list[np.ndarray], np.ndarray]:
    """The building's walls as cells of a rectilinear grid.

    Every space's box grown by its thickness is solid, except the interiors
    (kind :data:`_INSIDE`) and the window holes (``holes``: box corners and a
    label ≥ 0, or :data:`_AIR` for the part of an outside window beyond its
    glass). Returns the grid coordinates per axis and the kind of every cell.
    """
    boxes = [sp.grown for sp in spaces] + [(sp.lo, sp.hi) for sp in spaces]
    boxes += [(lo, hi) for lo, hi, _ in holes]
    coords = [np.unique(np.round([c for lo, hi in boxes for c in (lo[k], hi[k])], 9))
              for k in range(3)]
    mid = [0.5 * (c[1:] + c[:-1]) for c in coords]

    def inside(lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
        m = [(x > lo[k]) & (x < hi[k]) for k, x in enumerate(mid)]
        return m[0][:, None, None] & m[1][None, :, None] & m[2][None, None, :]

    kind = np.full([len(m) for m in mid], _AIR, dtype=np.int64)
    for sp in spaces:
        kind[inside(*sp.grown)] = _SOLID
    for lo, hi, label in holes:
        kind[inside(lo, hi)] = label
    for sp in spaces:
        kind[inside(sp.lo, sp.hi)] = _INSIDE
    return coords, kind


def _solid_faces(coords: list[np.ndarray], kind: np.ndarray
                 ) -> list[tuple[int, int, float, int, tuple[float, float, float, float]]]:
    """Faces of the solid cells towards air or window holes, merged into rectangles.

    Returns ``(axis, sign, plane, label, (u0, u1, v0, v1))`` with ``sign`` the
    direction the face looks (out of the solid) and ``u``, ``v`` the other two
    axes in increasing order. No face towards the interiors (each space builds
    its own) nor towards the ground (below z = 0).
    """
    out = []
    for axis in range(3):
        low = _NOFACE if axis == 2 and abs(coords[2][0]) <= _TOL else _AIR
        pad = [(0, 0)] * 3
        pad[axis] = (1, 0)
        k = np.pad(kind, pad, constant_values=low)
        pad[axis] = (0, 1)
        k = np.pad(k, pad, constant_values=_AIR)
        c0 = np.take(k, np.arange(k.shape[axis] - 1), axis=axis)
        c1 = np.take(k, np.arange(1, k.shape[axis]), axis=axis)
        u, v = [a for a in range(3) if a != axis]
        for sign, solid, other in ((1, c0, c1), (-1, c1, c0)):
            face = (solid == _SOLID) & (other >= _AIR)
            for plane in np.flatnonzero(face.any(axis=tuple(a for a in range(3) if a != axis))):
                f = np.take(face, plane, axis=axis)
                lab = np.take(other, plane, axis=axis)
                for label in np.unique(lab[f]):
                    for i0, i1, j0, j1 in _rectangles(f & (lab == label)):
                        out.append((axis, sign, float(coords[axis][plane]), int(label),
                                    (float(coords[u][i0]), float(coords[u][i1]),
                                     float(coords[v][j0]), float(coords[v][j1]))))
    return out


def _axis_rect(axis: int, plane: float, rect: tuple[float, float, float, float],
               sign: int) -> np.ndarray:
    """Two triangles of an axis-aligned rectangle, facing ``sign`` along ``axis``."""
    u, v = [a for a in range(3) if a != axis]
    corners = np.zeros((4, 3))
    corners[:, axis] = plane
    corners[:, u] = [rect[0], rect[1], rect[1], rect[0]]
    corners[:, v] = [rect[2], rect[2], rect[3], rect[3]]
    normal = np.zeros(3)
    normal[axis] = sign
    return _quad(corners, normal)


def parametric_building(
    spaces: Sequence[Mapping[str, Any] | Any],
    glazing_panes: Mapping[str, int],
    internal_transmittance: Mapping[str, float] | None = None,
    obstructions: Sequence[Any] = (),
    exterior_reflectance: float = 0.2,
) -> Geometry:
    """Build a building of box spaces: shared walls, outer shell, windows, overhangs.

    Parameters
    ----------
    spaces : sequence of mappings (or objects with these attributes)
        ``{name, origin: (x, y, z), width, depth, height, thickness,
        reflectance: {floor, walls, ceiling}, windows, overhang}`` [m]: the
        parameters of :func:`parametric_room` in the space's own frame, whose
        origin (front-left interior floor corner) lies at ``origin`` in the
        building frame (copies already expanded by the caller).
    glazing_panes : mapping
        Glazing set name → number of panes (0 = unglazed opening).
    internal_transmittance : mapping, optional
        Glazing set → normal transmittance [-] of the sets used on internal
        openings (a window on a wall that another space covers).
    obstructions : sequence of mappings
        Exterior boxes ``{x, y, width, depth, height}`` [m] in the building
        frame, standing on z = 0 (as for :func:`parametric_room`).
    exterior_reflectance : float [-]
        Reflectance of all exterior surfaces.

    Returns
    -------
    Geometry
        With ``space_names``, ``space_boxes`` and ``space`` filled;
        ``room`` is None.

    Raises
    ------
    GeometryError
        ``field`` ``spaces.<i>.<parameter>`` (``i`` the index in ``spaces``,
        the message naming the space) for a space's own parameters,
        overlapping spaces (naming both), a window partly covered by another
        space or blocked by its walls, facing faces closer than
        :data:`SEAM_GAP` without touching; ``obstructions.<i>`` for a box that
        overlaps the building.

    Notes
    -----
    The building's walls are the union of every space's box grown by its
    thickness, less the interiors and the window holes; its faces towards the
    outside are found on the rectilinear grid of all box and hole
    coordinates (:func:`_solid`, :func:`_solid_faces`), so shared walls,
    corners and wings of any arrangement close without gaps or doubled
    faces. Each space then adds its own interior faces and glazing
    (:func:`_add_space`). See the module notes for the conventions.
    """
    sp = _check_spaces(spaces, glazing_panes, exterior_reflectance)
    parts = _partitions(sp)
    covered = _cover(sp, parts)
    glass = _glass_materials(sp, covered, glazing_panes, internal_transmittance or {})
    holes, reveal = [], []
    for s in sp:
        for w in s.windows:
            lo, hi, axis, sign = _window_box(s, w)
            p = covered.get((s.index, w.index))
            depth = s.t if p is None else p.gap
            glass_at = lo[axis] + sign * GLASS_POSITION * depth
            end_at = lo[axis] + sign * depth
            reveal.append((s, s.materials["walls"], f"{s.name}/reveal_{w.index}"))
            inner = _slab(lo, hi, axis, lo[axis], glass_at)
            holes.append((*inner, len(reveal) - 1))
            outer = _slab(lo, hi, axis, glass_at, end_at)
            if p is None:
                holes.append((*outer, _AIR))
            else:
                nb = p.high if s is p.low else p.low
                reveal.append((nb, nb.materials["walls"], f"{nb.name}/reveal_{s.name}.{w.index}"))
                holes.append((*outer, len(reveal) - 1))
    coords, kind = _solid(sp, holes)
    _check_openings(sp, covered, coords, kind)

    b = _Builder()
    for s in sp:
        _add_space(b, s, sp, parts, covered, glass)
    exterior = Material("exterior", "opaque", exterior_reflectance, exterior=True)
    for axis, sign, plane, label, rect in _solid_faces(coords, kind):
        tris = _axis_rect(axis, plane, rect, sign)
        if label == _AIR:
            b.add(tris, exterior, "facade")
        else:
            s, mat, group = reveal[label]
            b.add(tris, mat, group, s.index)
    slabs = []
    for s in sp:
        if s.overhang is not None:
            slabs += _building_overhang(b, s, sp, covered, exterior)
    _building_obstructions(b, obstructions, sp, slabs, exterior)
    return b.build(room=None, source=None, space_names=tuple(s.name for s in sp),
                   space_boxes=np.array([[s.lo, s.hi] for s in sp]))


def _slab(lo: np.ndarray, hi: np.ndarray, axis: int, a: float, b: float
          ) -> tuple[np.ndarray, np.ndarray]:
    """The box of the rectangle ``[lo, hi]`` (flat along ``axis``) swept from ``a`` to ``b``."""
    lo, hi = lo.copy(), hi.copy()
    lo[axis], hi[axis] = min(a, b), max(a, b)
    return lo, hi


def _glass_materials(spaces: list[_Space], covered: dict[tuple[int, int], _Partition],
                     glazing_panes: Mapping[str, int], transmittance: Mapping[str, float]
                     ) -> dict[tuple[int, int], Material]:
    """The glazing material of every window: outside, or internal with its baked transmittance.

    Raises
    ------
    GeometryError
        A set used on both outside and internal windows (naming the set and
        the window), an internal set without a transmittance in [0, 1], or
        two internal windows filling the same opening.
    """
    use: dict[str, tuple[bool, int, int]] = {}
    out = {}
    for s in spaces:
        for w in s.windows:
            inside = (s.index, w.index) in covered
            field = f"spaces.{s.index}.windows.{w.index}.glazing"
            first = use.setdefault(w.glazing, (inside, s.index, w.index))
            if first[0] != inside:
                a, b = (first, (inside, s.index, w.index))
                kinds = {True: "an internal opening", False: "an outside window"}
                raise GeometryError(
                    f"glazing set '{w.glazing}' is used on {kinds[a[0]]} (space "
                    f"'{spaces[a[1]].name}', window {a[2]}) and on {kinds[b[0]]} (space "
                    f"'{s.name}', window {w.index}); an internal opening's transmittance is "
                    "fixed in the geometry, an outside one varies: give them separate sets",
                    field=field)
            if not inside:
                out[(s.index, w.index)] = s.materials["glazing"][w.glazing]
                continue
            tau = transmittance.get(w.glazing)
            if tau is None or not 0.0 <= float(tau) <= 1.0:
                raise GeometryError(
                    f"space '{s.name}': window {w.index} is an internal opening and needs the "
                    f"normal transmittance of its glazing set '{w.glazing}' in [0, 1], got "
                    f"{tau!r}", field=f"internal_transmittance.{w.glazing}")
            out[(s.index, w.index)] = Material(
                f"internal {w.glazing}", "glazing", 0.0, glazing_set=w.glazing,
                panes=int(glazing_panes[w.glazing]), transmittance=float(tau))
    keys = sorted(covered)
    for n, a in enumerate(keys):
        for b in keys[:n]:
            if covered[a] is not covered[b]:
                continue
            la, ha, _, _ = _window_box(spaces[a[0]], spaces[a[0]].windows[a[1]])
            lb, hb, _, _ = _window_box(spaces[b[0]], spaces[b[0]].windows[b[1]])
            axis = covered[a].axis
            other = [k for k in range(3) if k != axis]
            if np.all(np.minimum(ha, hb)[other] - np.maximum(la, lb)[other] > _TOL):
                raise GeometryError(
                    f"window {a[1]} of space '{spaces[a[0]].name}' and window {b[1]} of space "
                    f"'{spaces[b[0]].name}' fill the same opening between the two spaces; "
                    "keep one of them", field=f"spaces.{a[0]}.windows.{a[1]}")
    return out


def _check_openings(spaces: list[_Space], covered: dict[tuple[int, int], _Partition],
                    coords: list[np.ndarray], kind: np.ndarray) -> None:
    """Refuse an outside window whose far end opens onto solid wall (another space's shell)."""
    mid = [0.5 * (c[1:] + c[:-1]) for c in coords]
    for s in spaces:
        for w in s.windows:
            if (s.index, w.index) in covered:
                continue
            lo, hi, axis, sign = _window_box(s, w)
            probe = lo[axis] + sign * (s.t + 1e-6)
            sel = []
            for k in range(3):
                if k == axis:
                    sel.append(np.flatnonzero((coords[k][:-1] < probe) & (coords[k][1:] > probe)))
                else:
                    sel.append(np.flatnonzero((mid[k] > lo[k]) & (mid[k] < hi[k])))
            if any(x.size == 0 for x in sel):
                continue
            cells = kind[np.ix_(*sel)]
            if np.any(cells == _SOLID):
                raise GeometryError(
                    f"space '{s.name}': window {w.index} on the {w.wall} wall opens onto the "
                    "walls of another space; move the window or the spaces apart",
                    field=f"spaces.{s.index}.windows.{w.index}")


_Rect = tuple[float, float, float, float]


def _openings(space: _Space, wall: str, spaces: list[_Space],
              covered: dict[tuple[int, int], _Partition]) -> list[_Rect]:
    """Holes ``(u0, u1, v0, v1)`` in a face of ``space``: its windows and the internal
    openings of other spaces that open into it there."""
    plane, _, _ = space.plane(wall)
    out = [(w.u0, w.u1, w.v0, w.v1) for w in space.windows if w.wall == wall]
    for (i, k), p in covered.items():
        if i != space.index and space in (p.low, p.high) and p.wall(space) == wall:
            lo, hi, _, _ = _window_box(spaces[i], spaces[i].windows[k])
            out.append(_plane_rect(plane, lo, hi))
    return out


def _plane_rect(plane: _WallPlane, lo: np.ndarray, hi: np.ndarray
                ) -> tuple[float, float, float, float]:
    """The box ``[lo, hi]`` projected on a wall plane: ``(u0, u1, v0, v1)``."""
    u = sorted(float((c - plane.origin) @ plane.eu) for c in (lo, hi))
    v = sorted(float((c - plane.origin) @ plane.ev) for c in (lo, hi))
    return u[0], u[1], v[0], v[1]


def _clip(holes: list[tuple[float, float, float, float]], r: tuple[float, float, float, float]
          ) -> list[tuple[float, float, float, float]]:
    """The parts of ``holes`` inside the rectangle ``r`` (empty ones dropped)."""
    out = []
    for h in holes:
        c = (max(h[0], r[0]), min(h[1], r[1]), max(h[2], r[2]), min(h[3], r[3]))
        if c[1] - c[0] > _TOL and c[3] - c[2] > _TOL:
            out.append(c)
    return out


def _add_space(b: _Builder, s: _Space, spaces: list[_Space], parts: list[_Partition],
               covered: dict[tuple[int, int], _Partition],
               glass: dict[tuple[int, int], Material]) -> None:
    """A space's interior faces (with window holes) and the glazing of its windows.

    Holes are cut for the space's own windows and for the internal openings
    of other spaces into it. Where a zero-gap partition covers a face, that
    part is cut out and built once for both spaces as twins (this space's
    triangles and the same corners in reverse order for the other, each with
    its own space's material), when this space is the partition's low side.
    The glass of a window sits at :data:`GLASS_POSITION` of the wall's
    thickness, or of the gap to the other space for an internal opening.
    """
    for wall in _FACES:
        plane, lu, lv = s.plane(wall)
        openings = _openings(s, wall, spaces, covered)
        holes = list(openings)
        seams = []
        for p in parts:
            if p.gap == 0.0 and s in (p.low, p.high) and p.wall(s) == wall:
                r = _plane_rect(plane, p.lo, p.hi)
                holes.append(r)
                seams.append((p, r))
        mat = s.materials[{"floor": "floor", "roof": "ceiling"}.get(wall, "walls")]
        group = f"{s.name}/{_FACE_GROUP.get(wall, 'wall_' + wall)}"
        for r in _rect_minus_holes(0.0, lu, 0.0, lv, _clip(holes, (0.0, lu, 0.0, lv))):
            b.add(plane.rect(*r, 0.0, -plane.ew), mat, group, s.index)
        for p, r in seams:
            if s is not p.low:
                continue
            nb = p.high
            nb_wall = p.wall(nb)
            nb_mat = nb.materials[{"floor": "floor", "roof": "ceiling"}.get(nb_wall, "walls")]
            nb_group = f"{nb.name}/{_FACE_GROUP.get(nb_wall, 'wall_' + nb_wall)}"
            for q in _rect_minus_holes(*r, _clip(openings, r)):
                tris = plane.rect(*q, 0.0, -plane.ew)
                first = b.add(tris, mat, group, s.index)
                twin = b.add(tris[:, [0, 2, 1]], nb_mat, nb_group, nb.index)
                b.pair(first, twin, tris.shape[0])
        for w in s.windows:
            if w.wall != wall:
                continue
            p = covered.get((s.index, w.index))
            depth = s.t if p is None else p.gap
            b.add(plane.rect(w.u0, w.u1, w.v0, w.v1, GLASS_POSITION * depth, plane.ew),
                  glass[(s.index, w.index)], f"{s.name}/window_{w.index}", s.index)


def _building_overhang(b: _Builder, s: _Space, spaces: list[_Space],
                       covered: dict[tuple[int, int], _Partition],
                       exterior: Material) -> list[tuple[np.ndarray, np.ndarray]]:
    """The overhang slabs of space ``s`` over its outside front windows (as
    :func:`_add_overhang`), clear of every space."""
    outside = [w for w in s.windows if (s.index, w.index) not in covered]
    try:
        local = _Builder()
        slabs = _add_overhang(local, s.overhang, outside, s.size[2], s.t, exterior)
    except GeometryError as exc:
        raise _prefixed(exc, s.index, s.name) from exc
    out = []
    for lo, hi in slabs:
        lo, hi = lo + s.lo, hi + s.lo
        for other in spaces:
            glo, ghi = other.grown
            if np.all(np.minimum(hi, ghi) - np.maximum(lo, glo) > _TOL):
                raise GeometryError(
                    f"space '{s.name}': the overhang runs into space '{other.name}'; reduce its "
                    "depth or move the spaces", field=f"spaces.{s.index}.overhang.depth")
        out.append((lo, hi))
        b.add(_box_faces(lo, hi, skip=("+y",)), exterior, "overhang")
    return out


def _building_obstructions(b: _Builder, obstructions: Sequence[Any], spaces: list[_Space],
                           slabs: list[tuple], exterior: Material) -> None:
    """Exterior boxes standing on z = 0, clear of every space's walls and of the overhangs."""
    for i, ob in enumerate(obstructions):
        path = f"obstructions.{i}"
        x = _number(ob, "x", f"{path}.x")
        y = _number(ob, "y", f"{path}.y")
        bw = _positive(ob, "width", f"{path}.width")
        bd = _positive(ob, "depth", f"{path}.depth")
        bh = _positive(ob, "height", f"{path}.height")
        lo = np.array([x - bw / 2, y - bd / 2, 0.0])
        hi = np.array([x + bw / 2, y + bd / 2, bh])
        for s in spaces:
            glo, ghi = s.grown
            if np.all(np.minimum(hi, ghi) - np.maximum(lo, glo) > _TOL):
                raise GeometryError(
                    f"the box x = {lo[0]:g} … {hi[0]:g} m, y = {lo[1]:g} … {hi[1]:g} m overlaps "
                    f"space '{s.name}' with its walls (x = {glo[0]:g} … {ghi[0]:g} m, "
                    f"y = {glo[1]:g} … {ghi[1]:g} m); move it outside", field=path)
        for slo, shi in slabs:
            if np.all(np.minimum(hi, shi) > np.maximum(lo, slo)):
                raise GeometryError("the box intersects an overhang; move it away from the "
                                    "façade", field=path)
        b.add(_box_faces(lo, hi, skip=("-z",)), exterior, f"obstruction_{i}")


# ----------------------------------------------------------------------- OBJ


def read_obj(
    path: str | Path,
    materials: Mapping[str, Mapping[str, Any]],
    glazing_panes: Mapping[str, int] | None = None,
) -> Geometry:
    """Read a Wavefront OBJ mesh whose groups are mapped to materials.

    Parameters
    ----------
    path : str or Path
        OBJ file; ``v x y z`` vertices [m, building frame], ``f`` faces (any of
        the ``i``, ``i/t``, ``i//n``, ``i/t/n`` forms, negative indices relative
        to the end; polygons are fanned into triangles), ``g`` or ``o`` lines
        naming the group of the faces that follow. Faces keep their winding:
        opaque room surfaces must face into the room (counter-clockwise seen
        from inside).
    materials : mapping
        Group name → ``{"reflectance": r}`` (opaque, optionally
        ``"exterior": True``) or ``{"glazing": set, "panes": n}``.
    glazing_panes : mapping, optional
        Glazing set → panes, used when a glazing entry has no ``panes``.

    Returns
    -------
    Geometry

    Raises
    ------
    GeometryError
        Naming the file, the line and the group: a group with faces but no
        material, a material for a group not in the file, a face with bad
        indices, a vertex that is not numeric.
    """
    path = Path(path)
    src = str(path)
    try:
        text = path.read_text(encoding="utf-8", errors="replace")
    except OSError as exc:
        raise GeometryError(f"cannot read the mesh: {exc.strerror}", file=src) from exc
    verts: list[tuple[float, float, float]] = []
    faces: list[tuple[int, int, int]] = []
    face_group: list[str] = []
    group_line: dict[str, int] = {}
    group = "default"
    for lineno, raw in enumerate(text.splitlines(), start=1):
        line = raw.split("#", 1)[0].strip()
        if not line:
            continue
        key, *rest = line.split()
        if key == "v":
            try:
                xyz = tuple(float(s) for s in rest[:3])
            except ValueError as exc:
                raise GeometryError(
                    f"vertex '{line}' is not three numbers", file=src, line=lineno
                ) from exc
            if len(xyz) != 3 or not all(math.isfinite(c) for c in xyz):
                raise GeometryError(
                    f"vertex '{line}' needs three finite numbers x y z", file=src, line=lineno
                )
            verts.append(xyz)  # type: ignore[arg-type]
        elif key in ("g", "o"):
            group = " ".join(rest) if rest else "default"
        elif key == "f":
            idx = []
            for tok in rest:
                s = tok.split("/", 1)[0]
                try:
                    k = int(s)
                except ValueError as exc:
                    raise GeometryError(
                        f"face index '{tok}' is not an integer", file=src, line=lineno,
                        field=group,
                    ) from exc
                k = k - 1 if k > 0 else len(verts) + k
                if k < 0 or k >= len(verts) or s.startswith("0"):
                    raise GeometryError(
                        f"face index {s} refers to no vertex (the file has {len(verts)} "
                        "vertices before this line; OBJ indices start at 1)",
                        file=src, line=lineno, field=group,
                    )
                idx.append(k)
            if len(idx) < 3:
                raise GeometryError("a face needs at least three vertices", file=src,
                                    line=lineno, field=group)
            for j in range(1, len(idx) - 1):
                faces.append((idx[0], idx[j], idx[j + 1]))
                face_group.append(group)
            group_line.setdefault(group, lineno)
    if not faces:
        raise GeometryError("the mesh has no faces ('f' lines)", file=src)
    for name in materials:
        if name not in group_line:
            raise GeometryError(
                f"a material is given for group '{name}', which has no faces in the file; "
                f"the file's groups are {', '.join(sorted(group_line))}",
                file=src, field=f"materials.{name}",
            )
    b = _Builder()
    v = np.array(verts, dtype=np.float64)
    f = np.array(faces, dtype=np.int64)
    fg = np.array(face_group)
    for name in group_line:
        spec = materials.get(name)
        if spec is None:
            raise GeometryError(
                f"group '{name}' (first face on line {group_line[name]}) has no material; "
                "map it to {reflectance: r} or {glazing: set}",
                file=src, line=group_line[name], field=name,
            )
        tris = v[f[fg == name]]
        areas = np.linalg.norm(np.cross(tris[:, 1] - tris[:, 0], tris[:, 2] - tris[:, 0]), axis=1)
        if np.any(areas <= 1e-12):
            raise GeometryError(
                f"group '{name}' has {int(np.sum(areas <= 1e-12))} degenerate (zero-area) faces; "
                "remove them", file=src, line=group_line[name], field=name,
            )
        b.add(tris, _obj_material(spec, name, src, glazing_panes), name)
    return b.build(room=None, source=src)


def _obj_material(
    spec: Mapping[str, Any], name: str, src: str, glazing_panes: Mapping[str, int] | None
) -> Material:
    if "glazing" in spec:
        gset = str(spec["glazing"])
        panes = spec.get("panes", (glazing_panes or {}).get(gset))
        if panes is None or int(panes) != panes or panes < 0:
            raise GeometryError(
                f"glazing set '{gset}' of group '{name}' needs a whole number of panes ≥ 0",
                file=src, field=f"materials.{name}.panes",
            )
        return Material(f"glazing {gset}", "glazing", 0.0, glazing_set=gset, panes=int(panes))
    if "reflectance" in spec:
        r = float(spec["reflectance"])
        if not 0 <= r < 1:
            raise GeometryError(
                f"reflectance {r:g} is outside [0, 1); give a fraction such as 0.5",
                file=src, field=f"materials.{name}.reflectance",
            )
        ext = bool(spec.get("exterior", False))
        return Material(name, "opaque", r, exterior=ext)
    raise GeometryError(
        f"material of group '{name}' needs 'reflectance' or 'glazing'",
        file=src, field=f"materials.{name}",
    )


# -------------------------------------------------------------------- sensors


def _axis_points(length: float, spacing: float, margin: float) -> np.ndarray:
    """Points at ``spacing`` centred in [margin, length − margin] (empty if none fit)."""
    span = length - 2 * margin
    if span < -1e-12:
        return np.empty(0)
    n = math.floor(max(span, 0.0) / spacing + 1e-9) + 1
    start = margin + 0.5 * (max(span, 0.0) - (n - 1) * spacing)
    return start + spacing * np.arange(n)


MIN_SENSORS = 4
"""Fewest grid points a room may have: shares of the grid (sDA, EN 17037's 50 % and
95 % of the plane) mean little over fewer points (common practice)."""


def _check_count(n: int, what: str) -> None:
    if n < MIN_SENSORS:
        found = "no points" if n == 0 else f"only {n} point{'s' if n > 1 else ''}"
        raise GeometryError(
            f"the sensor grid {what} has {found}; at least {MIN_SENSORS} are needed for "
            "shares of the grid (sDA, EN 17037) to mean anything: reduce 'margin' or "
            "'spacing'", field="grid.margin" if n == 0 else "grid.spacing",
        )
    if n > MAX_SENSORS:
        raise GeometryError(
            f"the sensor grid {what} has {n} points, more than {MAX_SENSORS}; "
            "increase 'spacing'", field="grid.spacing",
        )


def sensor_grid(
    width: float, depth: float, height: float, spacing: float, margin: float
) -> np.ndarray:
    """Regular upward-facing sensor grid over the rectangle of a parametric room.

    Along x, ``n = floor((width − 2·margin) / spacing) + 1`` points spaced by
    ``spacing`` are centred in ``[margin, width − margin]`` (same along y), so
    the leftover is split equally between both ends.

    Parameters
    ----------
    width, depth : float [m]
        Floor size along x and y.
    height : float [m]
        Height of the working plane above the floor.
    spacing, margin : float [m]
        Grid spacing (> 0) and distance kept from the walls (≥ 0).

    Returns
    -------
    ndarray (n, 6)
        ``x, y, z, nx, ny, nz`` with the normal (0, 0, 1); x varies fastest.
    """
    if spacing <= 0:
        raise GeometryError(f"spacing {spacing:g} m must be greater than 0",
                            field="grid.spacing")
    if margin < 0:
        raise GeometryError(f"margin {margin:g} m is negative; use 0 or more",
                            field="grid.margin")
    xs = _axis_points(width, spacing, margin)
    ys = _axis_points(depth, spacing, margin)
    _check_count(xs.size * ys.size, f"on {width:g} × {depth:g} m")
    gx, gy = np.meshgrid(xs, ys)
    n = gx.size
    return np.column_stack(
        [gx.ravel(), gy.ravel(), np.full(n, height), np.zeros(n), np.zeros(n), np.ones(n)]
    )


def _segment_distance(p: np.ndarray, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Distance (n_points, n_segments) [m] from 2-D points to segments a→b."""
    ab = b - a
    ap = p[:, None, :] - a[None, :, :]
    tt = np.clip(np.sum(ap * ab, axis=-1) / np.maximum(np.sum(ab * ab, axis=-1), 1e-300), 0, 1)
    return np.linalg.norm(ap - tt[..., None] * ab, axis=-1)


def _locate_xy(p: np.ndarray, tris: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Which points (n, 2) lie in some triangle (m, 3, 3) seen from above, and its z there.

    Barycentric coordinates of every point in every triangle, in chunks of
    points so that no more than :data:`_PAIRS` point–triangle pairs are held.
    """
    a, b, c = tris[:, 0, :2], tris[:, 1, :2], tris[:, 2, :2]
    det = (b[:, 0] - a[:, 0]) * (c[:, 1] - a[:, 1]) - (c[:, 0] - a[:, 0]) * (b[:, 1] - a[:, 1])
    hit = np.zeros(len(p), dtype=bool)
    z = np.zeros(len(p))
    step = max(1, _PAIRS // len(tris))
    for i in range(0, len(p), step):
        q = p[i:i + step]
        dx = q[:, None, 0] - a[None, :, 0]
        dy = q[:, None, 1] - a[None, :, 1]
        l1 = (dx * (c[:, 1] - a[:, 1]) - dy * (c[:, 0] - a[:, 0])) / det
        l2 = (dy * (b[:, 0] - a[:, 0]) - dx * (b[:, 1] - a[:, 1])) / det
        l0 = 1 - l1 - l2
        inside = (l0 >= -1e-9) & (l1 >= -1e-9) & (l2 >= -1e-9)
        k = np.argmax(inside, axis=1)
        rows = np.arange(len(q))
        hit[i:i + step] = inside.any(axis=1)
        z[i:i + step] = (l0[rows, k] * tris[k, 0, 2] + l1[rows, k] * tris[k, 1, 2]
                         + l2[rows, k] * tris[k, 2, 2])
    return hit, z


def sensor_grid_on(
    geometry: Geometry, groups: Sequence[str], height: float, spacing: float, margin: float
) -> np.ndarray:
    """Sensor grid over the floor triangles of a mesh room.

    A regular grid at ``spacing`` is laid over the XY bounding box of the named
    groups' triangles (centred as in :func:`sensor_grid`, with no margin on the
    box). A point is kept when it lies inside one of those triangles (seen from
    above) and more than ``margin`` from the outline of their union (edges used
    by only one triangle). Its z is the floor's height at that point plus
    ``height``; the normal is (0, 0, 1).

    Raises
    ------
    GeometryError
        Unknown group, a floor triangle tilted more than 10°, no point kept, or
        more than :data:`MAX_SENSORS` points.
    """
    if spacing <= 0:
        raise GeometryError(f"spacing {spacing:g} m must be greater than 0",
                            field="grid.spacing")
    if margin < 0:
        raise GeometryError(f"margin {margin:g} m is negative; use 0 or more",
                            field="grid.margin")
    mask = geometry.group_mask(groups, field="grid.floors")
    tris = geometry.triangles[mask]
    steep = np.abs(geometry.normals[mask][:, 2]) < math.cos(math.radians(10.0))
    if np.any(steep):
        raise GeometryError(
            f"{int(steep.sum())} triangles of the floor groups {', '.join(groups)} are tilted "
            "more than 10° from horizontal; name only floor groups under 'grid'",
            file=geometry.source, field="grid",
        )
    lo = tris[..., :2].reshape(-1, 2).min(axis=0)
    hi = tris[..., :2].reshape(-1, 2).max(axis=0)
    xs = lo[0] + _axis_points(hi[0] - lo[0], spacing, 0.0)
    ys = lo[1] + _axis_points(hi[1] - lo[1], spacing, 0.0)
    _check_count(xs.size * ys.size, f"over groups {', '.join(groups)} (before clipping)")
    gx, gy = np.meshgrid(xs, ys)
    p = np.column_stack([gx.ravel(), gy.ravel()])
    hit, z = _locate_xy(p, tris)
    # outline: edges used by exactly one triangle (vertices matched after rounding)
    edges = np.concatenate([tris[:, [0, 1], :2], tris[:, [1, 2], :2], tris[:, [2, 0], :2]])
    key = np.round(edges, _ROUND)
    key = np.where((key[:, 0, 0] < key[:, 1, 0])[:, None, None]
                   | ((key[:, 0, 0] == key[:, 1, 0]) & (key[:, 0, 1] <= key[:, 1, 1]))[:, None,
                                                                                          None],
                   key, key[:, ::-1])
    _, inverse, counts = np.unique(key.reshape(len(key), 4), axis=0, return_inverse=True,
                                   return_counts=True)
    outline = edges[counts[inverse.ravel()] == 1]
    keep = hit
    if margin > 0 and outline.size:
        step = max(1, _PAIRS // len(outline))
        dist = np.concatenate([
            _segment_distance(p[i:i + step], outline[:, 0], outline[:, 1]).min(axis=1)
            for i in range(0, len(p), step)
        ])
        keep = keep & (dist > margin)
    _check_count(int(keep.sum()), f"over groups {', '.join(groups)}")
    n = int(keep.sum())
    return np.column_stack(
        [p[keep], z[keep] + height, np.zeros(n), np.zeros(n), np.ones(n)]
    )


def read_sensors(path: str | Path) -> np.ndarray:
    """Read sensor points from a CSV file ``x,y,z,nx,ny,nz`` (header line optional).

    Parameters
    ----------
    path : str or Path
        CSV file; positions [m] in the building frame and a direction (any
        length, normalised here). Blank lines and ``#`` comments are skipped.

    Returns
    -------
    ndarray (n, 6)
        Positions and unit normals.

    Raises
    ------
    GeometryError
        Naming the file and line: wrong number of columns, a non-numeric value,
        a zero-length normal, no points, or more than :data:`MAX_SENSORS`.
    """
    path = Path(path)
    src = str(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except OSError as exc:
        raise GeometryError(f"cannot read the sensor file: {exc.strerror}", file=src) from exc
    rows: list[list[float]] = []
    first = True
    for lineno, rec in enumerate(csv.reader(text.splitlines()), start=1):
        cells = [c.strip() for c in rec]
        if not cells or not any(cells) or cells[0].startswith("#"):
            continue
        try:
            vals = [float(c) for c in cells]
        except ValueError as exc:
            if first:  # a header line
                first = False
                continue
            raise GeometryError(
                f"'{','.join(cells)}' holds a value that is not a number", file=src, line=lineno
            ) from exc
        first = False
        if len(vals) != 6 or not all(math.isfinite(v) for v in vals):
            raise GeometryError(
                f"expected six finite numbers x,y,z,nx,ny,nz, got {len(vals)} values",
                file=src, line=lineno,
            )
        if math.hypot(*vals[3:]) == 0:
            raise GeometryError("the normal nx,ny,nz has zero length; give a direction",
                                file=src, line=lineno)
        rows.append(vals)
    if not rows:
        raise GeometryError("the sensor file holds no points", file=src)
    if len(rows) > MAX_SENSORS:
        raise GeometryError(
            f"the sensor file holds {len(rows)} points, more than {MAX_SENSORS}", file=src
        )
    out = np.array(rows, dtype=np.float64)
    out[:, 3:] /= np.linalg.norm(out[:, 3:], axis=1, keepdims=True)
    return out


__all__ = [
    "GLASS_POSITION",
    "MAX_SENSORS",
    "OVERHANG_SLAB",
    "SEAM_GAP",
    "WALLS",
    "Geometry",
    "Material",
    "parametric_building",
    "parametric_room",
    "read_obj",
    "read_sensors",
    "sensor_grid",
    "sensor_grid_on",
]
