"""Daylight-coefficient sets of a geometry: direct and reflected, sky and sun.

For every glazing set ``g`` and sensor ``s`` (DEVELOPERS.md "Coefficient
definition"; DESIGN §2.2, 2.5, 2.6):

* ``sky_direct[g, s, j]`` — mean over sky-basis entry ``j`` (patch, or the
  ground last) of ``visibility × τ_rel × max(n·d, 0)`` for rays that cross a
  window of set ``g`` and then meet no opaque surface, from stratified rays
  inside each patch (:func:`kernels.sky.sample_directions`) and over the lower
  hemisphere (:func:`kernels.sky.sample_ground`), so that E = Σ_j C_j L_j Ω_j;
* ``sun_direct[g, s, k]`` — ``τ_rel × max(n·s_k, 0) × visibility`` for sun
  point ``k`` (one ray), interpolated between sun points at run time;
* ``sky_reflected``, ``sun_reflected`` — element transfer
  (:mod:`kernels.transfer`): first-hit irradiance of the room's elements
  through set ``g`` (exterior elements lit directly, without glazing),
  radiosity, and a cosine-weighted gather at the sensor.

All four are computed with unit normal transmittance (``τ_rel`` is the
angular profile relative to normal incidence, :func:`kernels.glazing.relative_transmittance`);
a variant's transmittance multiplies them (DESIGN §2.6).

Deviation from DEVELOPERS.md, documented here: :class:`Settings` has one
field more than listed there, ``reflected_sun_spacing`` [deg]. The reflected
sun coefficients are computed on a coarser set of sun points
(``SunPoints(reflected_sun_spacing)``) and interpolated barycentrically onto
the fine sun points (``SunPoints(sun_spacing)``, about 24,000 at 1°): the
reflected part varies smoothly with the sun direction (it integrates the sun
patch over the room), while the element source matrix at 24,000 sun points
would cost tens of millions of rays and hundreds of MB. The stored
``sun_reflected`` array is on the fine points like the other sun family.

Rays settled without Embree: a ray with ``n·d <= 0`` contributes nothing, and a
ray from inside that misses every window cannot reach the sky. The window
pre-test (:func:`_window_wedges`, :func:`_window_mask`) keeps a ray only when it
lies inside the three edge planes of some glazing triangle seen from its origin
(1e-6 rad of slack, so it is conservative and Embree still decides every kept
ray); for ``sky_direct`` whole sky patches are first tested as caps of
directions (:func:`_patch_reach`), so the rays of patches that face away from a
sensor or lie outside every window are never looked at, nor even turned into
directions (``sample_directions(..., patches=kept)`` skips the other patches'
draws). The results are those of testing every ray
(``tests/test_coefficients.py`` checks both pre-tests against Embree and a
brute-force ``sky_direct``).

Speed (reference classroom of ``benchmarks/bench_coefficients.py``, 195
sensors, default settings, one core, the same 14.7 M resolved rays; measured
back to back, alternating processes, load 1–2): 1.52 s best / 1.95 s median
before and 0.98 s best / 1.34 s median after the changes of the ray-kernel
issue (``bench_rays.py`` ratio 0.47–0.57 → 0.77–0.80), with bit-identical
arrays (``KERNEL_VERSION`` unchanged): directions only for kept
patches, the transmittance path of the glazing optics alone, dense transfer
matrices without a CSR round trip and a Fortran-ordered system for LAPACK,
element and sensor rays traced in small pieces (far fewer fresh pages), the
sun points and their interpolation kept per spacing (:func:`_sun_points`),
and direct sun written straight into float32. About a quarter of the time is
inside Embree; the dense LU of the radiosity system (0.15 s, see
:func:`kernels.transfer.solve_radiosity` for why not an iteration) and the
permutations of the Latin-hypercube strata (~0.1 s) are the largest parts
outside it.

Determinism: every random draw takes a seed derived from ``Settings.seed``
and the stage, and sparse sums are accumulated in a fixed order, so the same
inputs give bit-identical arrays.
"""

from __future__ import annotations

import functools
import hashlib
import json
from dataclasses import asdict, dataclass, fields
from typing import Any

import numpy as np

from luxsweep import kernels
from luxsweep.kernels.errors import GeometryError, InputError
from luxsweep.kernels.sky import patch_scheme, sample_directions, sample_ground
from luxsweep.kernels.sun import DEFAULT_SPACING, SunPoints
from luxsweep.kernels.transfer import (
    gather_matrix,
    gather_radiosity,
    mesh_elements,
    points_in_triangles,
    relative_transmit,
    solve_radiosity,
    transfer_matrix,
)

__all__ = ["CoefficientSet", "Settings", "coefficient_key", "compute_coefficients"]

_RAYS_PER_BATCH = 1 << 20  # rays per ray-casting batch (bounds temporary memory)
_INTERPOLATE_SENSORS = 16  # sensors per block of the sun_reflected interpolation
MAX_EXTERIOR_ELEMENTS = 1500
"""Rough upper bound on the number of exterior elements (see ``_element_sizes``)."""
_SENSOR_DECIMALS = 6  # sensor coordinates rounded to 1 µm in the key

# seed streams of the stages (fixed: changing them changes every result)
_STREAM_SKY, _STREAM_GROUND, _STREAM_ELEMENT, _STREAM_SUNPOINT, _STREAM_SENSOR = range(5)


@dataclass(frozen=True)
class Settings:
    """Accuracy settings of a coefficient computation.

    Parameters
    ----------
    subdivision : int
        Sky subdivision (1 = Tregenza 145 patches, 2 = MF2 577, 4 = MF4 2305).
    sun_spacing : float [deg]
        Spacing of the sun points of the direct-sun coefficients
        (:class:`kernels.sun.SunPoints`); sky vectors must use the same.
    sky_rays_per_patch : int
        Stratified rays per sky patch for ``sky_direct``.
    ground_rays : int
        Stratified rays over the lower hemisphere for the ground entry.
    element_size : float [m]
        Target size of the surface elements of the element transfer.
    element_rays : int
        Cosine-weighted rays leaving each element (each from a random point of
        the element).
    sensor_rays : int
        Cosine-weighted gather rays per sensor for the reflected part.
    reflected_sun_spacing : float [deg]
        Spacing of the coarse sun points on which ``sun_reflected`` is
        computed before interpolation to the fine points (see module notes).
    seed : int
        Seed of every random draw.

    Notes
    -----
    Defaults were chosen on the reference classroom (7.2 × 8 × 3 m, one
    5 × 1.8 m window, 195 sensors): see ``benchmarks/bench_coefficients.py``
    and ``tests/test_coefficients.py`` for the measured time and accuracy.
    """

    subdivision: int = 2
    sun_spacing: float = DEFAULT_SPACING
    sky_rays_per_patch: int = 64
    ground_rays: int = 4096
    element_size: float = 0.5
    element_rays: int = 1024
    sensor_rays: int = 4096
    reflected_sun_spacing: float = 3.0
    seed: int = 0

    def __post_init__(self) -> None:
        for name in ("subdivision", "sky_rays_per_patch", "ground_rays", "element_rays",
                     "sensor_rays"):
            value = getattr(self, name)
            if not isinstance(value, int | np.integer) or value < 1:
                raise InputError(f"{name} must be a positive integer, got {value!r}",
                                 field=f"settings.{name}")
        for name in ("sun_spacing", "element_size", "reflected_sun_spacing"):
            value = getattr(self, name)
            if not np.isfinite(value) or value <= 0:
                raise InputError(f"{name} must be a positive number, got {value!r}",
                                 field=f"settings.{name}")

    def canonical(self) -> dict[str, Any]:
        """JSON-able dict of the settings (for keys and metadata)."""
        out = asdict(self)
        for f in fields(self):
            out[f.name] = float(out[f.name]) if f.type == "float" else int(out[f.name])
        return out


@dataclass(frozen=True, eq=False)
class CoefficientSet:
    """Daylight coefficients of one geometry and sensor grid.

    Attributes
    ----------
    key : str
        :func:`coefficient_key` of the inputs.
    glazing_sets : tuple of str
        Glazing-set names, in the order of the first array axis.
    sensors : ndarray (n_sensors, 6)
        x, y, z [m], nx, ny, nz (building frame).
    subdivision : int
        Sky subdivision of the sky basis (n_patches + 1 entries, ground last).
    sun_directions : ndarray (n_sun, 3)
        Sun points (building frame) of the sun families.
    sky_direct, sky_reflected : ndarray (n_sets, n_sensors, n_patches + 1) float32
        ``E = Σ_j C_j L_j Ω_j`` [lx per lx].
    sun_direct, sun_reflected : ndarray (n_sets, n_sensors, n_sun) float32
        ``E = Σ_k C_k w_k E_dn`` [lx per lx].
    settings : Settings
    kernel_version : str
    """

    key: str
    glazing_sets: tuple[str, ...]
    sensors: np.ndarray
    subdivision: int
    sun_directions: np.ndarray
    sky_direct: np.ndarray
    sky_reflected: np.ndarray
    sun_direct: np.ndarray
    sun_reflected: np.ndarray
    settings: Settings
    kernel_version: str

    _ARRAYS = ("sensors", "sun_directions", "sky_direct", "sky_reflected", "sun_direct",
               "sun_reflected")

    def to_arrays(self) -> dict[str, np.ndarray]:
        """The arrays, by name (what a cache stores next to :meth:`metadata`)."""
        return {name: getattr(self, name) for name in self._ARRAYS}

    def metadata(self) -> dict[str, Any]:
        """JSON-able description (everything but the arrays)."""
        return {
            "key": self.key,
            "glazing_sets": list(self.glazing_sets),
            "subdivision": int(self.subdivision),
            "settings": self.settings.canonical(),
            "kernel_version": self.kernel_version,
            "shapes": {name: list(a.shape) for name, a in self.to_arrays().items()},
        }

    @classmethod
    def from_parts(cls, arrays: dict[str, np.ndarray], metadata: dict[str, Any]) -> CoefficientSet:
        """Rebuild from :meth:`to_arrays` and :meth:`metadata` (e.g. read from a cache).

        Raises
        ------
        ValueError
            When an array is missing or its shape disagrees with the metadata.
        """
        shapes = metadata.get("shapes", {})
        for name in cls._ARRAYS:
            if name not in arrays:
                raise ValueError(f"coefficient set {metadata.get('key')}: array '{name}' missing")
            if name in shapes and list(np.shape(arrays[name])) != list(shapes[name]):
                raise ValueError(
                    f"coefficient set {metadata.get('key')}: array '{name}' has shape "
                    f"{np.shape(arrays[name])}, metadata says {shapes[name]}"
                )
        return cls(
            key=str(metadata["key"]),
            glazing_sets=tuple(metadata["glazing_sets"]),
            sensors=np.asarray(arrays["sensors"], dtype=np.float64),
            subdivision=int(metadata["subdivision"]),
            sun_directions=np.asarray(arrays["sun_directions"], dtype=np.float64),
            sky_direct=np.asarray(arrays["sky_direct"], dtype=np.float32),
            sky_reflected=np.asarray(arrays["sky_reflected"], dtype=np.float32),
            sun_direct=np.asarray(arrays["sun_direct"], dtype=np.float32),
            sun_reflected=np.asarray(arrays["sun_reflected"], dtype=np.float32),
            settings=Settings(**metadata["settings"]),
            kernel_version=str(metadata["kernel_version"]),
        )

    @property
    def nbytes(self) -> int:
        """Total size of the arrays [bytes]."""
        return int(sum(a.nbytes for a in self.to_arrays().values()))

    @property
    def n_sensors(self) -> int:
        return int(self.sensors.shape[0])


# ---------------------------------------------------------------------------
# Key
# ---------------------------------------------------------------------------


def _canonical_sensors(sensors: np.ndarray) -> list[list[float]]:
    return (np.round(np.asarray(sensors, dtype=np.float64), _SENSOR_DECIMALS) + 0.0).tolist()


def coefficient_key(geometry: Any, sensors: np.ndarray, settings: Settings) -> str:
    """Content hash of everything that changes the coefficient arrays.

    Parameters
    ----------
    geometry : kernels.geometry.Geometry
    sensors : ndarray (n, 6)
    settings : Settings

    Returns
    -------
    str
        SHA-256 hex digest of the canonical JSON of the geometry
        (``geometry.canonical()``: triangles, materials with reflectances,
        glazing-set assignment and panes — no transmittance, which only scales
        the arrays), the sensors rounded to 1 µm, the settings and
        ``kernels.KERNEL_VERSION``.
    """
    panes = dict(zip(geometry.glazing_sets, geometry.set_panes, strict=True))
    document = {
        "geometry": geometry.canonical(),
        "glazing_panes": panes,
        "sensors": _canonical_sensors(sensors),
        "settings": settings.canonical(),
        "kernel_version": kernels.KERNEL_VERSION,
    }
    text = json.dumps(document, sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


# ---------------------------------------------------------------------------
# Ray-casting stages
# ---------------------------------------------------------------------------


def _rng(settings: Settings, stream: int, *more: int) -> np.random.Generator:
    return np.random.default_rng([int(settings.seed), stream, *more])


def _seed(settings: Settings, stream: int, *more: int) -> int:
    state = np.random.SeedSequence([int(settings.seed), stream, *more]).generate_state(1)
    return int(state[0])


_MAX_WINDOW_TRIANGLES = 64  # glazing triangles above which the window pre-test is skipped
_WEDGE_SLACK = 1e-6  # [rad] the pre-test keeps rays up to this angle outside a triangle


def _window_wedges(scene: Any, points: np.ndarray) -> np.ndarray | None:
    """Edge planes of every glazing triangle seen from every point.

    Returns unit normals ``(n_points, n_glazing, 3, 3)`` (point, triangle,
    edge, xyz) such that a ray from the point in direction ``d`` crosses the
    triangle exactly when ``d · normal >= 0`` for its three edges: with
    ``a, b, c`` the corners relative to the point and ``s = a · (b × c) > 0``
    (else the corners are swapped in sign), the planes through the point and
    each edge, ``a × b``, ``b × c``, ``c × a``, bound the solid angle of the
    triangle (the same construction as Van Oosterom & Strackee, "The solid
    angle of a plane triangle", IEEE Trans. Biomed. Eng. BME-30(2), 1983,
    doi:10.1109/TBME.1983.325207). A point (nearly) in a triangle's plane gets
    zero normals: nothing is rejected. None when the scene has no or too many
    glazing triangles.
    """
    tri = scene.geometry.triangles[scene.glazing_index]
    if tri.shape[0] == 0 or tri.shape[0] > _MAX_WINDOW_TRIANGLES:
        return None
    v = tri[None, :, :, :] - points[:, None, None, :]  # (p, g, 3, 3)
    edge = np.cross(v, np.roll(v, -1, axis=2))  # a × b, b × c, c × a
    s = np.einsum("pgc,pgc->pg", v[:, :, 0], edge[:, :, 1])
    size = np.prod(np.linalg.norm(v, axis=-1), axis=-1)
    sign = np.where(np.abs(s) > 1e-9 * size, np.sign(s), 0.0)
    norm = np.linalg.norm(edge, axis=-1, keepdims=True)
    return edge * (sign[..., None, None] / np.maximum(norm, 1e-300))


def _window_mask(wedges: np.ndarray | None, dots: Any, reach: Any = 0.0) -> np.ndarray | None:
    """False for rays that certainly miss every glazing triangle (window pre-test).

    ``dots(normal)`` gives the cosines between the rays and one unit vector
    per point, ``normal`` (n_points, 3), as an array whose first axis runs
    over the points; the mask has that shape. A ray is kept when it lies
    inside (or within :data:`_WEDGE_SLACK` of) the edge planes of some
    triangle (:func:`_window_wedges`): conservative, Embree decides. With
    ``reach`` = sin(radius) of caps of directions (broadcast against the
    dots), a cap is kept when some of it may lie inside. None when there are
    no wedges (nothing can be rejected).
    """
    if wedges is None:
        return None
    floor = -_WEDGE_SLACK - np.asarray(reach)
    ok = None
    for g in range(wedges.shape[1]):
        inside = dots(wedges[:, g, 0]) >= floor
        for e in (1, 2):
            inside &= dots(wedges[:, g, e]) >= floor
        ok = inside if ok is None else ok | inside
    return ok


def _patch_reach(scheme: Any) -> np.ndarray:
    """sin of the angular radius of every patch about ``scheme.centres``, (n_patches,).

    The radius is the largest angle from the centre to a corner (the farthest
    point of a patch narrower than a half-turn in azimuth lies at a corner:
    along a parallel the angle grows with the azimuth difference, along a
    meridian it has no interior maximum above the horizon); the cap's radius
    is its colatitude span. A cap of directions of radius r about c reaches
    the half-space ``d · n >= 0`` exactly when ``c · n >= -sin r``.
    """
    from luxsweep.kernels.sun import direction

    corners = np.stack([direction(az, alt) for az in (scheme.azimuth_low, scheme.azimuth_high)
                        for alt in (scheme.altitude_low, scheme.altitude_high)], axis=1)
    cos_r = np.einsum("pkc,pc->pk", corners, scheme.centres).min(axis=1)
    cap = scheme.azimuth_high - scheme.azimuth_low >= 360.0
    cos_r = np.where(cap, np.sin(np.radians(scheme.altitude_low)), cos_r)
    return np.sqrt(np.clip(1.0 - cos_r * cos_r, 0.0, 1.0)) + 1e-9


def _sky_blocks(scene: Any, sensors: np.ndarray, owner: np.ndarray, basis: np.ndarray,
                blocks: np.ndarray, wedges: np.ndarray | None, panes: tuple[int, ...],
                shape: tuple[int, int, int]) -> np.ndarray:
    """Sum of τ_rel n·d over rays that reach the sky through glazing, (n_sets, n_s, n_basis).

    ``blocks`` (k, m, 3) holds m unit directions from sensor ``owner[k]`` into
    basis entry ``basis[k]``; ``wedges`` the window wedges of the owners.
    Rays with ``n·d <= 0`` or outside every window are settled here; the
    others go to :meth:`kernels.raytrace.Scene.exit_glazing`.
    """
    cos = np.matmul(blocks, sensors[owner, 3:, None])[..., 0]
    may = _window_mask(wedges, lambda a: np.matmul(blocks, a[:, :, None])[..., 0])
    use = cos > 0.0
    b, r = np.nonzero(use if may is None else use & may)
    gset, cos_w = scene.exit_glazing(sensors[owner[b], :3], blocks[b, r], unit=True)
    ok = np.flatnonzero(gset >= 0)
    b, r, g = b[ok], r[ok], gset[ok]
    tau = relative_transmit(cos_w[ok], g, panes)
    flat = (g.astype(np.int64) * shape[1] + owner[b]) * shape[2] + basis[b]
    return np.bincount(flat, weights=tau * cos[b, r], minlength=int(np.prod(shape))
                       ).reshape(shape)


def _sensor_sky_direct(scene: Any, sensors: np.ndarray, scheme: Any, settings: Settings,
                       panes: tuple[int, ...]) -> np.ndarray:
    """``sky_direct`` (n_sets, n_sensors, n_basis) float64.

    Whole patches that face away from a sensor or lie outside every window
    (:func:`_patch_reach`, :func:`_window_mask`) are settled without looking
    at their rays; the rays of the other patches and of the ground go to
    :func:`_sky_blocks`.
    """
    n_s, n_sets, n_p = sensors.shape[0], len(panes), scheme.n_patches
    rpp = settings.sky_rays_per_patch
    shape = (n_sets, n_s, n_p + 1)
    out = np.zeros(shape)
    # sup of n·d over the upper (lower) hemisphere is |n_horizontal| unless n_z > 0 (< 0)
    tilt = np.hypot(sensors[:, 3], sensors[:, 4]) > 0.0
    sees_sky, sees_ground = tilt | (sensors[:, 5] > 0.0), tilt | (sensors[:, 5] < 0.0)
    reach = _patch_reach(scheme)
    chunk = max(1, _RAYS_PER_BATCH // (n_p * rpp + settings.ground_rays))
    for start in range(0, n_s, chunk):
        idx = np.arange(start, min(start + chunk, n_s))
        wedges = _window_wedges(scene, sensors[idx, :3])
        keep = (sensors[idx, 3:] @ scheme.centres.T >= -reach) & sees_sky[idx, None]
        may = _window_mask(wedges, lambda a: a @ scheme.centres.T, reach)
        if may is not None:
            keep &= may
        owner, patch, parts = [], [], []
        for i in np.flatnonzero(keep.any(axis=1)):
            s = idx[i]
            kept = np.flatnonzero(keep[i])
            parts.append(sample_directions(scheme, rpp, _seed(settings, _STREAM_SKY, s),
                                           patches=kept))
            owner.append(np.full(kept.size, s))
            patch.append(kept)
        if parts:
            c = np.concatenate(owner)
            out += _sky_blocks(scene, sensors, c, np.concatenate(patch), np.concatenate(parts),
                               None if wedges is None else wedges[c - start], panes, shape)
        ground = idx[sees_ground[idx]]
        if ground.size:
            blocks = np.stack([sample_ground(settings.ground_rays,
                                             _seed(settings, _STREAM_GROUND, s)) for s in ground])
            out += _sky_blocks(scene, sensors, ground, np.full(ground.size, n_p), blocks,
                               None if wedges is None else wedges[ground - start], panes, shape)
    counts = np.append(np.full(n_p, float(rpp)), float(settings.ground_rays))
    return out / counts


def _sun_direct(scene: Any, points: np.ndarray, normals: np.ndarray, exterior: np.ndarray,
                sun: np.ndarray, panes: tuple[int, ...], dtype: type = np.float64) -> np.ndarray:
    """Direct sun irradiance per unit E_dn on points (sensors or elements).

    Returns ``(n_sets + 1, n_points, n_sun)`` of ``dtype``: through each
    glazing set for interior points, and (last) unglazed for exterior points
    (only ``n_sets`` layers when no point is exterior). Pairs with
    ``n·s <= 0`` and, for interior points, suns outside every window
    (:func:`_window_mask`) are settled without Embree.
    """
    from luxsweep.kernels.raytrace import NO_GLAZING

    n_p, n_sun, n_sets = points.shape[0], sun.shape[0], len(panes)
    out = np.zeros((n_sets + int(np.any(exterior)), n_p, n_sun), dtype=dtype)
    chunk = max(1, _RAYS_PER_BATCH // max(n_sun, 1))
    for start in range(0, n_p, chunk):
        idx = np.arange(start, min(start + chunk, n_p))
        cos = normals[idx] @ sun.T  # (c, n_sun)
        ext = exterior[idx]
        may = _window_mask(_window_wedges(scene, points[idx]), lambda a: a @ sun.T)
        use = cos > 0.0
        c_idx, k_idx = np.nonzero(use if may is None else use & (may | ext[:, None]))
        outside = ext[c_idx]
        for sel in (np.flatnonzero(~outside), np.flatnonzero(outside)):
            if sel.size == 0:
                continue
            c, k = c_idx[sel], k_idx[sel]
            o, d = points[idx[c]], sun[k]
            if outside[sel[0]]:  # exterior points: open sky, no glazing
                free = scene.sky_view(o, d, unit=True)[0] == NO_GLAZING
                layer, value = np.full(c.size, n_sets), free.astype(np.float64)
            else:
                gset, cos_w = scene.exit_glazing(o, d, unit=True)
                layer, value = gset.astype(np.int64), relative_transmit(cos_w, gset, panes)
            ok = np.flatnonzero((layer >= 0) & (value > 0.0))
            c, k = c[ok], k[ok]
            out[layer[ok], idx[c], k] = value[ok] * cos[c, k]
    return out


def _element_sizes(geometry: Any, active: np.ndarray, element_size: float) -> np.ndarray:
    """Element size of every triangle: ``element_size`` inside, coarser outside.

    Exterior surfaces (obstructions, overhangs, outer faces) light the room only
    through its windows, from a distance, so they are meshed at twice the
    interior size, and coarser still when they are large, so that there are
    about :data:`MAX_EXTERIOR_ELEMENTS` of them at most (a 40 m neighbour would
    otherwise bring tens of thousands of elements and a dense solve of that size).
    """
    outside = active & geometry.exterior
    area = float(geometry.areas[outside].sum())
    coarse = max(2.0 * element_size, float(np.sqrt(2.0 * area / MAX_EXTERIOR_ELEMENTS)))
    return np.where(geometry.exterior, coarse, element_size)


def _reflected(scene: Any, geometry: Any, sensors: np.ndarray, settings: Settings,
               scheme: Any, coarse_sun: np.ndarray, panes: tuple[int, ...]) -> np.ndarray:
    """Reflected coefficients (n_sets, n_sensors, n_basis + n_coarse_sun) float64."""
    n_sets, n_basis = len(panes), scheme.n_patches + 1
    out = np.zeros((n_sets, sensors.shape[0], n_basis + coarse_sun.shape[0]))
    active = ~geometry.is_glazing & (geometry.reflectance > 0.0)
    if n_sets == 0 or not np.any(active):
        return out
    el = mesh_elements(geometry.triangles, geometry.reflectance, geometry.exterior,
                       _element_sizes(geometry, active, settings.element_size), mask=active)
    tr = transfer_matrix(scene, el, settings.element_rays, _rng(settings, _STREAM_ELEMENT),
                         panes, scheme, batch=_RAYS_PER_BATCH)
    r1, r2 = _rng(settings, _STREAM_SUNPOINT).random((2, el.n, 1))
    points = scene.lift(points_in_triangles(el.vertices, r1, r2)[:, 0], el.normal)
    s_sun = _sun_direct(scene, points, el.normal, el.exterior, coarse_sun, panes)
    g_same, g_through = gather_matrix(scene, el, sensors[:, :3], sensors[:, 3:],
                                      settings.sensor_rays, _rng(settings, _STREAM_SENSOR),
                                      panes)
    f_same, f_through, s_sky_int, s_sky_ext = tr.same, tr.through, tr.sky_interior, tr.sky_exterior

    inner, outer = np.flatnonzero(~el.exterior), np.flatnonzero(el.exterior)
    rho = el.reflectance
    if outer.size:
        source_ext = np.concatenate([s_sky_ext[outer], s_sun[n_sets][outer]], axis=1)
        b_ext = solve_radiosity(f_same[outer][:, outer], rho[outer], source_ext)
    everything = inner.size == el.n  # no exterior elements: no selections to copy
    if everything:
        response = gather_radiosity(g_same, f_same, rho)
    else:
        response = gather_radiosity(g_same[:, inner], f_same[inner][:, inner], rho[inner])
    for g in range(n_sets):
        through = f_through[g][inner][:, outer] @ b_ext if outer.size else None
        for cols, first in ((slice(0, n_basis), s_sky_int[g]), (slice(n_basis, None), s_sun[g])):
            source = first if everything else first[inner]
            if through is not None:
                source = source + through[:, cols]
            out[g][:, cols] = response @ source
        if outer.size:
            out[g] += g_through[g][:, outer] @ b_ext
    return out


# ---------------------------------------------------------------------------
# Entry point
# ---------------------------------------------------------------------------


def _check_sensors(sensors: np.ndarray) -> np.ndarray:
    s = np.asarray(sensors, dtype=np.float64)
    if s.ndim != 2 or s.shape[1] != 6 or s.shape[0] == 0:
        raise GeometryError(
            f"sensors must be an (n, 6) array of x, y, z, nx, ny, nz with n ≥ 1, got shape "
            f"{s.shape}", field="sensors")
    if not np.all(np.isfinite(s)):
        row = int(np.flatnonzero(~np.all(np.isfinite(s), axis=1))[0])
        raise GeometryError(f"sensor {row} has a non-finite coordinate: {s[row].tolist()}",
                            field=f"sensors.{row}")
    norm = np.linalg.norm(s[:, 3:], axis=1)
    if np.any(norm < 1e-9):
        row = int(np.flatnonzero(norm < 1e-9)[0])
        raise GeometryError(f"sensor {row} has a zero normal; give nx, ny, nz (e.g. 0, 0, 1)",
                            field=f"sensors.{row}")
    s = s.copy()
    s[:, 3:] /= norm[:, None]
    return s


@functools.lru_cache(maxsize=4)
def _sun_points(fine_spacing: float, coarse_spacing: float
                ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Fine and coarse sun points and the interpolation from coarse to fine.

    Returns read-only ``(fine directions, coarse directions, index, weight)``
    (:meth:`kernels.sun.SunPoints.weights` of the fine points on the coarse
    ones); they depend on the two spacings only, so they are kept for the
    next coefficient set of the process.
    """
    fine, coarse = SunPoints(fine_spacing), SunPoints(coarse_spacing)
    index, weight = coarse.weights(fine.directions)
    out = (fine.directions, coarse.directions, index, weight)
    for a in out:
        a.flags.writeable = False
    return out


def compute_coefficients(geometry: Any, sensors: np.ndarray,
                         settings: Settings | None = None) -> CoefficientSet:
    """Ray-trace the four coefficient families of a geometry.

    Parameters
    ----------
    geometry : kernels.geometry.Geometry
    sensors : ndarray (n, 6)
        x, y, z [m], nx, ny, nz (normals need not be unit length).
    settings : Settings, optional

    Returns
    -------
    CoefficientSet
    """
    from luxsweep.kernels.raytrace import Scene

    settings = settings or Settings()
    sensors = _check_sensors(sensors)
    key = coefficient_key(geometry, sensors, settings)
    scheme = patch_scheme(settings.subdivision)
    fine, coarse, index, weight = _sun_points(
        float(settings.sun_spacing),
        float(max(settings.reflected_sun_spacing, settings.sun_spacing)))
    scene = Scene(geometry)
    panes = tuple(int(p) for p in geometry.set_panes)
    n_sets, n_basis = len(panes), scheme.n_patches + 1

    sky_direct = _sensor_sky_direct(scene, sensors, scheme, settings, panes)
    inside = np.zeros(sensors.shape[0], dtype=bool)
    sun_direct = _sun_direct(scene, sensors[:, :3], sensors[:, 3:], inside, fine, panes,
                             np.float32)
    reflected = _reflected(scene, geometry, sensors, settings, scheme, coarse, panes)
    # barycentric interpolation onto the fine sun points, a few sensors at a time
    sun_coarse = reflected[:, :, n_basis:]
    sun_reflected = np.empty((n_sets, sensors.shape[0], index.shape[0]), dtype=np.float32)
    for first in range(0, sensors.shape[0], _INTERPOLATE_SENSORS):
        part = slice(first, first + _INTERPOLATE_SENSORS)
        sun_reflected[:, part] = sum(sun_coarse[:, part][:, :, index[:, m]] * weight[:, m]
                                     for m in range(3))
    return CoefficientSet(
        key=key,
        glazing_sets=tuple(geometry.glazing_sets),
        sensors=sensors,
        subdivision=scheme.subdivision,
        sun_directions=fine.copy(),
        sky_direct=sky_direct.astype(np.float32),
        sky_reflected=reflected[:, :, :n_basis].astype(np.float32),
        sun_direct=sun_direct,
        sun_reflected=sun_reflected,
        settings=settings,
        kernel_version=kernels.KERNEL_VERSION,
    )
