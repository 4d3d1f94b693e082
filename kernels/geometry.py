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
    """

    name: str
    kind: str
    reflectance: float
    glazing_set: str | None = None
    panes: int | None = None
    exterior: bool = False


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
        ``(width, depth, height)`` [m] of a parametric room; None for meshes.
    source : str or None
        File the geometry was read from (for messages).
    """

    triangles: np.ndarray
    material: np.ndarray
    materials: tuple[Material, ...]
    glazing_sets: tuple[str, ...]
    group: np.ndarray
    group_names: tuple[str, ...]
    room: tuple[float, float, float] | None = None
    source: str | None = field(default=None)

    def __post_init__(self) -> None:
        tri = np.ascontiguousarray(self.triangles, dtype=np.float64)
        mat = np.ascontiguousarray(self.material, dtype=np.int32)
        grp = np.ascontiguousarray(self.group, dtype=np.int32)
        if tri.ndim != 3 or tri.shape[1:] != (3, 3):
            raise ValueError(f"triangles must have shape (n, 3, 3), got {tri.shape}")
        if mat.shape != (tri.shape[0],) or grp.shape != (tri.shape[0],):
            raise ValueError("material and group must have one entry per triangle")
        for a in (tri, mat, grp):
            a.flags.writeable = False
        object.__setattr__(self, "triangles", tri)
        object.__setattr__(self, "material", mat)
        object.__setattr__(self, "group", grp)

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
        """(n,) int32 index into ``glazing_sets`` (−1 for opaque triangles)."""
        idx = np.array(
            [
                self.glazing_sets.index(m.glazing_set) if m.kind == "glazing" else -1
                for m in self.materials
            ],
            dtype=np.int32,
        )
        return idx[self.material]

    @property
    def set_panes(self) -> tuple[int, ...]:
        """Number of panes of every glazing set, aligned with ``glazing_sets``."""
        panes: dict[str, int] = {}
        for m in self.materials:
            if m.kind == "glazing":
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
        return {
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
                }
                for m in self.materials
            ],
            "glazing_sets": list(self.glazing_sets),
        }


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

    def add(self, tris: np.ndarray, material: Material, group: str) -> None:
        if material not in self.materials:
            self.materials.append(material)
        if group not in self.groups:
            self.groups.append(group)
        self.tris.append(np.asarray(tris, dtype=np.float64).reshape(-1, 3, 3))
        n = self.tris[-1].shape[0]
        self.mats += [self.materials.index(material)] * n
        self.grps += [self.groups.index(group)] * n

    def build(self, room: tuple[float, float, float] | None, source: str | None) -> Geometry:
        sets = sorted({m.glazing_set for m in self.materials if m.kind == "glazing"})
        return Geometry(
            triangles=np.concatenate(self.tris),
            material=np.array(self.mats, dtype=np.int32),
            materials=tuple(self.materials),
            glazing_sets=tuple(sets),
            group=np.array(self.grps, dtype=np.int32),
            group_names=tuple(self.groups),
            room=room,
            source=source,
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
                np.array([0.0, 0, 1])), materials["floor"], "floor")
    for wall in ("front", "back", "left", "right", "roof"):
        _add_wall(b, wall, [w for w in wins if w.wall == wall], (width, depth, height), t,
                  materials)
    slabs = [] if overhang is None else _add_overhang(b, overhang, wins, height, t,
                                                      materials["exterior"])
    _add_obstructions(b, obstructions, slabs, width, depth, t, materials["exterior"])
    return b.build(room=(width, depth, height), source=None)


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
        b.add(plane.rect(*r, 0.0, -ew), inner_mat, group)
    for w in mine:
        b.add(plane.rect(w.u0, w.u1, w.v0, w.v1, wg, ew), materials["glazing"][w.glazing],
              f"window_{w.index}")
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
            b.add(_quad(corners, normal), mat, f"reveal_{w.index}")


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
    "WALLS",
    "Geometry",
    "Material",
    "parametric_room",
    "read_obj",
    "read_sensors",
    "sensor_grid",
    "sensor_grid_on",
]
