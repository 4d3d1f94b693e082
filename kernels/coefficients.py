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

Reflected light at building scale (issue 13). Method: radiosity (Goral,
Torrance, Greenberg & Battaile, "Modeling the interaction of light between
diffuse surfaces", SIGGRAPH 1984, doi:10.1145/800031.808601; Monte Carlo form
factors and the matrix solve as in Cohen & Wallace 1993) on an *element
budget*: the element size is chosen from the accuracy it buys. Profile of the
dense solution at 0.5 m on a 30 × 18 m open plan (2,065 sensors, 18,000
elements, one BLAS thread): 223 s and 6.6 GiB, of which 101 s LU factors,
54 s the adjoint solve for the sensors, 12 s building the system, 9 s
sparse-to-dense copies, ~18 s the sensors × elements × sources product, and
only ~22 s ray tracing (transfer 10.6 s, gather 3.7 s, direct sky 10.2 s, sun
3.9 s); memory is the 18,000² matrices (2.6 GB each). The reflected light an
upward sensor receives is an integral over metres of ceiling and walls, so
coarser elements change it little (1.0 m instead of 0.5 m moved the mean
daylight factor of that room by 0.04 %). So the interior element size grows
from ``element_size`` until the elements fit ``Settings.max_elements`` (3,000)
and the working arrays fit ``Settings.memory_limit`` beside the results
(:func:`_element_budget`, :func:`_element_sizes`); the system is factored once
(dense LU, at most ``2/3 · 3000³`` flops) and solved for every source column
(or, with fewer sensors than sources, for the sensors: the adjoint); the
sensors gather in blocks of :data:`_SENSOR_BLOCK`. Beyond the budget the
element part costs a fixed amount and everything else is per sensor, so time
and memory grow linearly with the sensors (``benchmarks/bench_scaling.py``,
``docs/performance.md``). Rooms within the budget at ``element_size`` keep
their mesh. Against the dense solution on the 30 × 18 m room: mean daylight
factor −0.04 %, per-sensor RMS 0.5 % (max 2.0 %), sDA equal, mean DA +0.0001.

Buildings (:func:`kernels.geometry.parametric_building`): the same four
families over all sensors of all spaces in one set, the spaces shading and
reflecting for one another. Every ray path — sensor to sky
(:func:`_sky_blocks`), sun (:func:`_sun_direct`), element transfer and gather
(:mod:`kernels.transfer`) — goes through the scene's glazing crossings
(:mod:`kernels.raytrace`, "Buildings"): internal glazing multiplies by its
baked transmittance with the outside glazing's angular profile; rays that
cross two outside glazings are refused (blocked) and counted in
:attr:`CoefficientSet.crossed_twice`. In such scenes element origins are
inset 3 ε from their edges (:func:`kernels.transfer.inset_triangles`) so the
ray caster's origin offset cannot carry a ray from a reveal past the pane it
meets. A single parametric room takes the original path, bit for bit.

Sampling error: every sensor's Monte Carlo estimates (patch rays, ground rays,
gather rays) are drawn as :data:`REPLICAS` independent stratified sub-samples
whose mean is the coefficient; their scatter gives the per-sensor error of the
overcast sums (batch means, Law & Kelton, *Simulation Modeling and Analysis*,
3rd ed., 2000, §9.5.3), :attr:`CoefficientSet.overcast_error`, and
:func:`daylight_factor_error` turns it into the daylight factor's standard
error. ``Settings.target_error`` uses it to choose the ray counts.

Determinism: every random draw takes a seed derived from ``Settings.seed``
and the stage, and sparse sums are accumulated in a fixed order, so the same
inputs give bit-identical arrays.
"""

from __future__ import annotations

import functools
import hashlib
import json
import math
from dataclasses import asdict, dataclass, fields, replace
from typing import Any

import numpy as np
import scipy.linalg

from luxsweep import kernels
from luxsweep.kernels.errors import GeometryError, InputError
from luxsweep.kernels.sky import (
    overcast_sky_vector,
    patch_scheme,
    sample_directions,
    sample_ground,
)
from luxsweep.kernels.sun import DEFAULT_SPACING, SunPoints
from luxsweep.kernels.transfer import (
    factor_radiosity,
    gather_matrix,
    inset_triangles,
    mesh_elements,
    points_in_triangles,
    relative_transmit,
    solve_factored,
    solve_radiosity,
    transfer_matrix,
)

__all__ = [
    "SENSOR_PART",
    "CoefficientSet",
    "ElementSolution",
    "Settings",
    "assemble",
    "coefficient_key",
    "compute_coefficients",
    "daylight_factor_error",
    "direct_part",
    "reflected_part",
    "solve_elements",
]

_RAYS_PER_BATCH = 1 << 20  # rays per ray-casting batch (bounds temporary memory)
_INTERPOLATE_SENSORS = 16  # sensors per block of the sun_reflected interpolation
MAX_EXTERIOR_ELEMENTS = 1500
"""Rough upper bound on the number of exterior elements (see ``_element_sizes``)."""
_SENSOR_DECIMALS = 6  # sensor coordinates rounded to 1 µm in the key
REPLICAS = 4
"""Independent sub-samples (batch means) of every per-sensor Monte Carlo estimate."""
_SENSOR_BLOCK = 256  # sensors gathered together by the reflected part (at most)
SENSOR_PART = _SENSOR_BLOCK
"""Sensor ranges of the split stages start at multiples of this (the gather's seed blocks)."""
_BASE_BYTES = 350 * 2**20  # interpreter, modules, scene, sun points: outside the budget
_MIN_ELEMENTS = 64  # fewer interior elements than this cannot resolve a room
_EXTERIOR_SHARE = 1 / 3  # most of the element budget exterior surfaces of a building may take
_MAX_RAY_FACTOR = 64  # target_error never multiplies the ray counts by more

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
    max_elements : int
        Element budget of the reflected part: when the room's surfaces at
        ``element_size`` would give more elements, the interior element size
        grows until they fit (see :func:`_element_sizes`). It bounds the time
        and memory of the radiosity solve whatever the model.
    memory_limit : float [GiB]
        Bound on the peak memory of one computation: the element budget is
        lowered until the working arrays fit beside the result arrays; a grid
        whose result arrays alone do not fit is refused (split it).
    target_error : float [-]
        0 (off), or a target relative standard error of the daylight factor:
        a first computation estimates the per-sensor error (see
        :attr:`CoefficientSet.overcast_error`) and, when the 95th percentile
        over the sensors exceeds the target, the sensor ray counts are scaled
        by ``(error / target)²`` (at most 64×) and the set computed again.

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
    max_elements: int = 3000
    memory_limit: float = 2.0
    target_error: float = 0.0

    def __post_init__(self) -> None:
        for name in ("subdivision", "sky_rays_per_patch", "ground_rays", "element_rays",
                     "sensor_rays", "max_elements"):
            value = getattr(self, name)
            if not isinstance(value, int | np.integer) or value < 1:
                raise InputError(f"{name} must be a positive integer, got {value!r}",
                                 field=f"settings.{name}")
        for name in ("sun_spacing", "element_size", "reflected_sun_spacing", "memory_limit"):
            value = getattr(self, name)
            if not np.isfinite(value) or value <= 0:
                raise InputError(f"{name} must be a positive number, got {value!r}",
                                 field=f"settings.{name}")
        if not (np.isfinite(self.target_error) and 0.0 <= self.target_error < 1.0):
            raise InputError(
                f"target_error must be a relative standard error in [0, 1) (0: off), got "
                f"{self.target_error!r}", field="settings.target_error")

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
    overcast_error : ndarray (n_sets, n_sensors, 3) float32
        Sampling error of the CIE overcast sky's coefficient sums, from
        :data:`REPLICAS` independent sub-samples of every sensor's rays (sky
        and ground rays of ``sky_direct``, gather rays of the reflected part):
        with ``a = C · v₀`` (``v₀`` = :func:`kernels.sky.overcast_sky_vector`
        with a black ground) and ``b = C_ground · 2`` (the ground entry per unit
        ground reflectance), the variances and covariance of their estimates,
        ``(Var a, Cov(a, b), Var b)`` [(lx/lx)²]; the daylight factor's
        standard error is ``100 τ sqrt(Var a + 2 ρ_g Cov + ρ_g² Var b)``
        (:func:`kernels.timeseries.daylight_factor_error`). The element
        transfer's own noise (shared by neighbouring sensors) is not in it.
        NaN where a ray count is not a multiple of 2 (no sub-samples).
    crossed_twice : int
        Rays (of every stage) treated as blocked because they cross two or
        more outside glazings (:meth:`kernels.raytrace.Scene.exit_glazing`):
        0 for one room; in a building, light that leaves through one window
        and enters another, which no single set's transmittance can scale.
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
    overcast_error: np.ndarray
    crossed_twice: int = 0

    _ARRAYS = ("sensors", "sun_directions", "sky_direct", "sky_reflected", "sun_direct",
               "sun_reflected", "overcast_error")

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
            **({"crossed_twice": int(self.crossed_twice)} if self.crossed_twice else {}),
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
            overcast_error=np.asarray(arrays["overcast_error"], dtype=np.float32),
            crossed_twice=int(metadata.get("crossed_twice", 0)),
        )

    def take_sensors(self, rows: slice | np.ndarray) -> CoefficientSet:
        """The set of some of its sensors (a fresh in-memory copy of their rows).

        Every per-sensor array is cut on its sensor axis; the key stays the whole
        set's (the part is addressed by the key and the rows). Each sensor's rows
        are its own: the coefficients of a part equal the whole set's rows bit for bit.

        Parameters
        ----------
        rows : slice or ndarray of int
            The sensors to keep, in the order given.
        """
        def cut(a: np.ndarray, axis: int) -> np.ndarray:
            index = [slice(None)] * a.ndim
            index[axis] = rows
            return np.array(a[tuple(index)], copy=True, order="C")

        return replace(
            self, sensors=cut(self.sensors, 0), sky_direct=cut(self.sky_direct, 1),
            sky_reflected=cut(self.sky_reflected, 1), sun_direct=cut(self.sun_direct, 1),
            sun_reflected=cut(self.sun_reflected, 1),
            overcast_error=cut(self.overcast_error, 1))

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


def _replicas(rays: int) -> int:
    """Sub-samples of a ray count: :data:`REPLICAS`, or fewer when it does not divide it."""
    return math.gcd(int(rays), REPLICAS)


def _sky_blocks(scene: Any, sensors: np.ndarray, owner: np.ndarray, rows: np.ndarray,
                basis: np.ndarray, blocks: np.ndarray, wedges: np.ndarray | None,
                panes: tuple[int, ...], shape: tuple[int, int, int]) -> np.ndarray:
    """Sums of τ_rel n·d over rays reaching the sky through glazing, (n_sets, rows, n_basis).

    ``blocks`` (k, m, 3) holds m unit directions from sensor ``owner[k]`` into
    basis entry ``basis[k]``, summed into output row ``rows[k]``; ``wedges``
    the window wedges of the owners. Rays with ``n·d <= 0`` or outside every
    window are settled here; the others go to
    :meth:`kernels.raytrace.Scene.exit_glazing`.
    """
    cos = np.matmul(blocks, sensors[owner, 3:, None])[..., 0]
    may = _window_mask(wedges, lambda a: np.matmul(blocks, a[:, :, None])[..., 0])
    use = cos > 0.0
    b, r = np.nonzero(use if may is None else use & may)
    gset, cos_w, f = scene.exit_glazing(sensors[owner[b], :3], blocks[b, r], unit=True,
                                        factor=True)
    ok = np.flatnonzero(gset >= 0)
    b, r, g = b[ok], r[ok], gset[ok]
    tau = relative_transmit(cos_w[ok], g, panes) * f[ok]  # f = 1 without internal glazing
    flat = (g.astype(np.int64) * shape[1] + rows[b]) * shape[2] + basis[b]
    return np.bincount(flat, weights=tau * cos[b, r], minlength=int(np.prod(shape))
                       ).reshape(shape)


def _sensor_sky_direct(scene: Any, sensors: np.ndarray, scheme: Any, settings: Settings,
                       panes: tuple[int, ...], first: int = 0, stop: int | None = None
                       ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``sky_direct`` (n_sets, stop − first, n_basis) float64 and its sub-sample scatter.

    For the sensors ``first`` to ``stop`` (default all) of ``sensors``; seeds
    follow the sensor's index in the whole array, so a range gives exactly the
    rows the whole array would.

    Every sensor's rays of a patch (and of the ground) are drawn as
    :func:`_replicas` independent stratified sub-samples (seeds
    ``(seed, stream, sensor, replica)``); the coefficient is their mean. Whole
    patches that face away from a sensor or lie outside every window
    (:func:`_patch_reach`, :func:`_window_mask`) are settled without looking
    at their rays; the rays of the other patches and of the ground go to
    :func:`_sky_blocks`.

    Returns
    -------
    sky_direct : ndarray (n_sets, n_sensors, n_basis)
    var_sky, var_ground : ndarray (n_sets, n_sensors)
        Variance of the estimates of ``C_sky · v₀`` and of the ground entry
        (batch means: sample variance of the sub-sample values / their number;
        NaN with a single sub-sample).
    """
    stop = sensors.shape[0] if stop is None else stop
    n_s, n_sets, n_p = stop - first, len(panes), scheme.n_patches
    k_sky, k_ground = _replicas(settings.sky_rays_per_patch), _replicas(settings.ground_rays)
    rpp, n_ground = settings.sky_rays_per_patch // k_sky, settings.ground_rays // k_ground
    v0 = overcast_sky_vector(scheme, 0.0)[:n_p]
    out = np.zeros((n_sets, n_s, n_p + 1))
    var_sky, var_ground = np.zeros((n_sets, n_s)), np.zeros((n_sets, n_s))
    # sup of n·d over the upper (lower) hemisphere is |n_horizontal| unless n_z > 0 (< 0)
    tilt = np.hypot(sensors[:, 3], sensors[:, 4]) > 0.0
    sees_sky, sees_ground = tilt | (sensors[:, 5] > 0.0), tilt | (sensors[:, 5] < 0.0)
    reach = _patch_reach(scheme)
    chunk = max(1, _RAYS_PER_BATCH // (n_p * settings.sky_rays_per_patch + settings.ground_rays))
    for start in range(first, stop, chunk):
        idx = np.arange(start, min(start + chunk, stop))
        at = idx - first  # rows of the output
        wedges = _window_wedges(scene, sensors[idx, :3])
        keep = (sensors[idx, 3:] @ scheme.centres.T >= -reach) & sees_sky[idx, None]
        may = _window_mask(wedges, lambda a: a @ scheme.centres.T, reach)
        if may is not None:
            keep &= may
        owner, row, patch, parts = [], [], [], []
        for i in np.flatnonzero(keep.any(axis=1)):
            s = idx[i]
            kept = np.flatnonzero(keep[i])
            for r in range(k_sky):
                parts.append(sample_directions(scheme, rpp, _seed(settings, _STREAM_SKY, s, r),
                                               patches=kept))
                owner.append(np.full(kept.size, s))
                row.append(np.full(kept.size, i * k_sky + r))
                patch.append(kept)
        if parts:
            c = np.concatenate(owner)
            sums = _sky_blocks(scene, sensors, c, np.concatenate(row), np.concatenate(patch),
                               np.concatenate(parts), None if wedges is None else wedges[c - start],
                               panes, (n_sets, idx.size * k_sky, n_p + 1))
            sub = sums.reshape(n_sets, idx.size, k_sky, n_p + 1) / rpp
            out[:, at] += sub.mean(axis=2)
            var_sky[:, at] = _mean_variance(sub[..., :n_p] @ v0)
        ground = idx[sees_ground[idx]]
        if ground.size:
            blocks = np.stack([sample_ground(n_ground, _seed(settings, _STREAM_GROUND, s, r))
                               for s in ground for r in range(k_ground)])
            owner = np.repeat(ground, k_ground)
            sums = _sky_blocks(scene, sensors, owner, np.arange(owner.size),
                               np.full(owner.size, n_p), blocks,
                               None if wedges is None else wedges[owner - start], panes,
                               (n_sets, owner.size, n_p + 1))
            sub = sums[..., n_p].reshape(n_sets, ground.size, k_ground) / n_ground
            out[:, ground - first, n_p] = sub.mean(axis=2)
            var_ground[:, ground - first] = _mean_variance(sub)
    return out, var_sky, var_ground


def _mean_variance(sub: np.ndarray) -> np.ndarray:
    """Variance of the mean of sub-samples along the last axis (NaN for one sub-sample)."""
    k = sub.shape[-1]
    if k < 2:
        return np.full(sub.shape[:-1], np.nan)
    return sub.var(axis=-1, ddof=1) / k


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
                gset, cos_w, f = scene.exit_glazing(o, d, unit=True, factor=True)
                layer, value = gset.astype(np.int64), relative_transmit(cos_w, gset, panes) * f
            ok = np.flatnonzero((layer >= 0) & (value > 0.0))
            c, k = c[ok], k[ok]
            out[layer[ok], idx[c], k] = value[ok] * cos[c, k]
    return out


def _triangle_sizes(geometry: Any) -> np.ndarray:
    """The size :func:`kernels.transfer.mesh_elements` divides by ``element_size`` [m]."""
    tri = geometry.triangles
    edges = np.linalg.norm(tri - np.roll(tri, -1, axis=1), axis=2).max(axis=1)
    return np.maximum(np.sqrt(2.0 * geometry.areas), 0.5 * edges)


def _element_count(sizes: np.ndarray, element_size: float) -> int:
    """Elements :func:`kernels.transfer.mesh_elements` cuts from triangles of these sizes."""
    m = np.maximum(np.ceil(sizes / element_size - 1e-9), 1)
    return int((m * m).sum())


def _element_budget(settings: Settings, n_sources: int, n_sets: int, n_sensors: int,
                    n_fine_sun: int, n_basis: int) -> int:
    """Most elements whose working arrays fit in ``settings.memory_limit`` beside the results.

    Working memory in bytes for ``N`` elements: ``8 N² (3 + n_sets)`` (dense
    transfer, LU factors, one more copy, the through-window matrices) plus
    ``N (8 n_src (2 n_sets + 3) + 32 element_rays)`` (sources, radiosities,
    ray tallies); the result arrays (float32) and :data:`_BASE_BYTES` come off
    the limit first. At most ``settings.max_elements``.

    Raises
    ------
    InputError
        When the result arrays alone leave no room for :data:`_MIN_ELEMENTS`.
    """
    results = 4 * n_sets * n_sensors * (2 * n_basis + 2 * n_fine_sun)
    results += 16 * n_sets * n_sensors * n_basis  # sky_direct in float64 and its sums
    blocks = 8 * _SENSOR_BLOCK * REPLICAS * (n_sources + settings.max_elements) * (1 + n_sets)
    avail = settings.memory_limit * 2**30 - results - _BASE_BYTES - blocks
    q = 8.0 * (3 + n_sets)
    lin = 8.0 * n_sources * (2 * n_sets + 3) + 32.0 * settings.element_rays
    n_max = int((-lin + np.sqrt(lin * lin + 4.0 * q * max(avail, 0.0))) / (2.0 * q))
    if n_max < _MIN_ELEMENTS:
        raise InputError(
            f"memory_limit {settings.memory_limit} GiB is too small for {n_sensors} sensors: "
            f"their coefficient arrays alone take {results / 2**30:.2f} GiB; split the sensor "
            f"grid or raise memory_limit", field="settings.memory_limit")
    return min(settings.max_elements, n_max)


def _element_sizes(geometry: Any, active: np.ndarray, element_size: float,
                   budget: int | None = None) -> np.ndarray:
    """Element size of every triangle: ``element_size`` inside (within a budget), coarser outside.

    Exterior surfaces (obstructions, overhangs, outer faces) light the room only
    through its windows, from a distance, so they are meshed at twice the
    interior size, and coarser still when they are large, so that there are
    about :data:`MAX_EXTERIOR_ELEMENTS` of them at most (a 40 m neighbour would
    otherwise bring tens of thousands of elements and a dense solve of that size).
    With a ``budget`` of elements, the interior size grows from ``element_size``
    until the interior and exterior elements together fit in it (the exterior
    ones counted first): the element size is chosen from the accuracy it buys
    (module notes), which bounds the solve's time and memory whatever the model.
    In a building of several spaces the exterior elements are held to a third
    of the budget (:data:`_EXTERIOR_SHARE`): its own outer shell is large and
    mostly out of sight of its interiors (flush with the windows), and counted
    first it left the 2 × 3-classroom building of ``benchmarks/bench_building.py``
    3.7 m interior elements (1.8 m with the cap).
    """
    outside = active & geometry.exterior
    inside = active & ~geometry.exterior
    area = float(geometry.areas[outside].sum())
    coarse = max(2.0 * element_size, float(np.sqrt(2.0 * area / MAX_EXTERIOR_ELEMENTS)))
    if budget is not None:
        sizes = _triangle_sizes(geometry)
        n_out = _element_count(sizes[outside], coarse)
        if len(getattr(geometry, "space_names", ())) > 1:
            cap = max(int(budget * _EXTERIOR_SHARE), int(np.count_nonzero(outside)))
            while n_out > cap:
                coarse *= max(float(np.sqrt(n_out / cap)), 1.001)
                n_out = _element_count(sizes[outside], coarse)
        room = max(budget - n_out, _MIN_ELEMENTS)
        count = _element_count(sizes[inside], element_size)
        while count > room:
            element_size *= max(float(np.sqrt(count / room)), 1.001)
            count = _element_count(sizes[inside], element_size)
    return np.where(geometry.exterior, coarse, element_size)


def _interpolate_sun(coarse: np.ndarray, index: np.ndarray, weight: np.ndarray,
                     out: np.ndarray) -> None:
    """Barycentric interpolation of (…, n_sensors, n_coarse) onto the fine sun points, in blocks."""
    for first in range(0, coarse.shape[-2], _INTERPOLATE_SENSORS):
        part = slice(first, first + _INTERPOLATE_SENSORS)
        out[..., part, :] = sum(coarse[..., part, :][..., index[:, m]] * weight[:, m]
                                for m in range(3))


@dataclass(frozen=True, eq=False)
class ElementSolution:
    """The element stage of the reflected part: what every sensor block gathers from.

    Made once per coefficient set by :func:`solve_elements` and shared by the
    sensor blocks (:func:`sensor_part`), which may run in other processes (it
    pickles). ``solved[g]`` holds the element radiosities of every source
    column for glazing set ``g`` (or, in the adjoint form, the sources, which
    each block multiplies after solving for its own sensors).

    Attributes
    ----------
    elements : kernels.transfer.Elements
    inner, outer : ndarray of int
        Interior and exterior element indices.
    lu : tuple or None
        LU factors of the interior system (``scipy.linalg.lu_factor``), kept
        only in the adjoint form (the sensor blocks solve with them); None in
        the forward form, so that the solution sent to other workers is smaller.
    rho : ndarray (n_inner,)
        Interior element reflectances.
    solved, solved_overcast : list of ndarray
        Per glazing set: (n_inner, n_sources) and (n_inner, 2).
    b_ext, ext_overcast : ndarray or None
        Exterior radiosities (n_outer, n_sources) and their overcast
        projection (n_outer, 2); None without exterior elements.
    adjoint : bool
        Whether ``solved`` holds the sources (fewer sensors than sources).
    crossed_twice : int
        Rays of this stage that crossed outside glazing twice (counted as
        blocked; :attr:`CoefficientSet.crossed_twice`).
    """

    elements: Any
    inner: np.ndarray
    outer: np.ndarray
    lu: tuple | None
    rho: np.ndarray
    solved: list
    solved_overcast: list
    b_ext: np.ndarray | None
    ext_overcast: np.ndarray | None
    adjoint: bool
    crossed_twice: int = 0


def _solve_elements(scene: Any, geometry: Any, n_sensors: int, settings: Settings,
                    scheme: Any, sun: tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray],
                    panes: tuple[int, ...], budget: int) -> ElementSolution | None:
    """Element stage of the reflected part (None when nothing reflects into a window's light).

    Radiosity on an element budget (module notes): the elements' transfer
    ``F`` and first-hit sources ``S`` are sampled, the system
    ``(I - diag(ρ) F) B = diag(ρ) S`` is factored once (dense LU of at most
    ``max_elements`` unknowns) and solved for every source column of every
    glazing set (forward form), or kept for the sensors to solve for
    themselves when they are fewer than the sources (adjoint form); exterior
    elements are solved first and light the interior through the windows.
    """
    _, coarse_sun, _, _ = sun
    n_sets, n_basis = len(panes), scheme.n_patches + 1
    active = ~geometry.is_glazing & (geometry.reflectance > 0.0)
    if n_sets == 0 or not np.any(active):
        return None
    n_src = n_basis + coarse_sun.shape[0]
    el = mesh_elements(geometry.triangles, geometry.reflectance, geometry.exterior,
                       _element_sizes(geometry, active, settings.element_size, budget),
                       mask=active)
    tr = transfer_matrix(scene, el, settings.element_rays, _rng(settings, _STREAM_ELEMENT),
                         panes, scheme, batch=_RAYS_PER_BATCH)
    r1, r2 = _rng(settings, _STREAM_SUNPOINT).random((2, el.n, 1))
    corners = el.vertices if scene.simple else inset_triangles(el.vertices, 3.0 * scene.epsilon)
    points = scene.lift(points_in_triangles(corners, r1, r2)[:, 0], el.normal)
    s_sun = _sun_direct(scene, points, el.normal, el.exterior, coarse_sun, panes)

    inner, outer = np.flatnonzero(~el.exterior), np.flatnonzero(el.exterior)
    rho = el.reflectance
    everything = inner.size == el.n  # no exterior elements: no selections to copy
    f_same = _dense(tr.same)
    b_ext = None
    if outer.size:
        source_ext = np.concatenate([tr.sky_exterior[outer], s_sun[n_sets][outer]], axis=1)
        b_ext = solve_radiosity(f_same[outer][:, outer], rho[outer], source_ext)
    lu = factor_radiosity(f_same if everything else f_same[inner][:, inner], rho[inner])
    del f_same
    overcast = np.stack([overcast_sky_vector(scheme, 0.0),
                         overcast_sky_vector(scheme, 1.0) - overcast_sky_vector(scheme, 0.0)],
                        axis=1)  # (n_basis, 2): black-ground sky and ground per unit ρ_g
    # forward (B = M⁻¹ ρ S, then G B) costs N² n_src once; adjoint (G M⁻¹ ρ, then times S)
    # N² per sensor: whichever is smaller (both a fixed cost per sensor on the budget)
    adjoint = n_sensors < n_src
    solved, solved_overcast = [], []
    for g in range(n_sets):
        source = np.concatenate([tr.sky_interior[g], s_sun[g]], axis=1)
        source = source if everything else source[inner]
        if b_ext is not None:
            source += tr.through[g][inner][:, outer] @ b_ext
        solved_overcast.append(solve_factored(lu, rho[inner], source[:, :n_basis] @ overcast))
        solved.append(source if adjoint else solve_factored(lu, rho[inner], source))
    ext_overcast = None if b_ext is None else b_ext[:, :n_basis] @ overcast
    return ElementSolution(crossed_twice=scene.crossed_twice,
                           elements=el, inner=inner, outer=outer,
                           lu=lu if adjoint else None, rho=rho[inner],
                           solved=solved, solved_overcast=solved_overcast, b_ext=b_ext,
                           ext_overcast=ext_overcast, adjoint=adjoint)


def _gather(scene: Any, solution: ElementSolution | None, sensors: np.ndarray,
            settings: Settings, scheme: Any,
            sun: tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray],
            panes: tuple[int, ...], first: int = 0, stop: int | None = None
            ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Reflected coefficients of sensors ``first`` to ``stop`` and the scatter of their gather.

    The sensors gather ``E = G B`` block by block (:data:`_SENSOR_BLOCK`
    sensors, each with :data:`REPLICAS` sub-samples of its gather rays, the
    block's seed from its place in the whole array: ``first`` must be a
    multiple of :data:`_SENSOR_BLOCK`), so the sensor part costs a fixed
    amount per sensor.

    Returns
    -------
    sky_reflected : ndarray (n_sets, stop − first, n_basis) float32
    sun_reflected : ndarray (n_sets, stop − first, n_fine_sun) float32
    scatter : ndarray (n_sets, stop − first, 3) float64
        ``(Var a, Cov(a, b), Var b)`` of the gather's estimates of the
        overcast sums (:attr:`CoefficientSet.overcast_error`).
    """
    fine, _, index, weight = sun
    stop = sensors.shape[0] if stop is None else stop
    n_s, n_sets, n_basis = stop - first, len(panes), scheme.n_patches + 1
    sky_out = np.zeros((n_sets, n_s, n_basis), dtype=np.float32)
    sun_out = np.zeros((n_sets, n_s, fine.shape[0]), dtype=np.float32)
    scatter = np.zeros((n_sets, n_s, 3))
    if solution is None:
        return sky_out, sun_out, scatter
    el, inner, outer, b_ext = solution.elements, solution.inner, solution.outer, solution.b_ext
    k = _replicas(settings.sensor_rays)
    for start in range(first, stop, _SENSOR_BLOCK):
        part = slice(start, min(start + _SENSOR_BLOCK, stop))
        rows = slice(part.start - first, part.stop - first)
        b = part.stop - part.start
        g_same, g_through = gather_matrix(scene, el, sensors[part, :3], sensors[part, 3:],
                                          settings.sensor_rays,
                                          _rng(settings, _STREAM_SENSOR,
                                               start // _SENSOR_BLOCK), panes, replicas=k)
        sub = _dense(g_same).reshape(b, k, el.n)[:, :, inner]
        gather = sub.mean(axis=1)
        if solution.adjoint:  # G M⁻¹ ρ = (M⁻ᵀ Gᵀ)ᵀ ρ
            gather = scipy.linalg.lu_solve(solution.lu, np.ascontiguousarray(gather.T),
                                           trans=1, check_finite=False).T * solution.rho
        for g in range(n_sets):
            values = gather @ solution.solved[g]
            proj = sub @ solution.solved_overcast[g]  # (b, k, 2)
            if b_ext is not None:
                seen = _dense(g_through[g]).reshape(b, k, el.n)[:, :, outer]
                values += seen.mean(axis=1) @ b_ext
                proj += seen @ solution.ext_overcast
            sky_out[g, rows] = values[:, :n_basis]
            _interpolate_sun(values[:, n_basis:], index, weight, sun_out[g, rows])
            scatter[g, rows] = _covariance(proj)
    return sky_out, sun_out, scatter


def _dense(matrix: Any) -> np.ndarray:
    """A sampled matrix (:data:`kernels.transfer.Matrix`) as an ndarray."""
    return np.asarray(matrix.toarray() if hasattr(matrix, "toarray") else matrix)


def _covariance(proj: np.ndarray) -> np.ndarray:
    """``(Var a, Cov(a, b), Var b)`` of the means of sub-samples ``proj`` (…, k, 2)."""
    k = proj.shape[-2]
    if k < 2:
        return np.full((*proj.shape[:-2], 3), np.nan)
    d = proj - proj.mean(axis=-2, keepdims=True)
    c = np.einsum("...ki,...kj->...ij", d, d) / ((k - 1) * k)
    return np.stack([c[..., 0, 0], c[..., 0, 1], c[..., 1, 1]], axis=-1)


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
        With ``target_error`` > 0 the sensor ray counts are chosen from a first
        computation's error estimate (:class:`Settings`); the set keeps the
        requested settings (and key).

    Returns
    -------
    CoefficientSet
    """
    settings = settings or Settings()
    sensors = _check_sensors(sensors)
    coeffs = _compute(geometry, sensors, settings, settings)
    if settings.target_error > 0.0:
        factor = _ray_factor(coeffs, settings.target_error)
        if factor > 1.0:
            coeffs = _compute(geometry, sensors, _scaled_rays(settings, factor), settings)
    return coeffs


def _ray_factor(coeffs: CoefficientSet, target: float) -> float:
    """Ray-count multiplier that brings the 95th-percentile relative error to ``target``.

    Relative error of the daylight factor under the CIE overcast sky with a
    ground reflectance of 0.2 (common practice), one glazing set at a time;
    sensors with no daylight at all are left out. Batch-mean variances fall
    as 1 / rays, so the standard error falls as 1 / sqrt(rays).
    """
    v = overcast_sky_vector(patch_scheme(coeffs.subdivision), 0.2)
    value = np.einsum("gsj,j->gs", coeffs.sky_direct.astype(np.float64)
                      + coeffs.sky_reflected.astype(np.float64), v)
    error = daylight_factor_error(coeffs, 0.2, np.eye(len(coeffs.glazing_sets)))
    lit = value > 0.0
    if not np.any(lit):
        return 1.0
    relative = error[lit] / (100.0 * value[lit])
    if np.any(np.isnan(relative)):
        raise InputError("target_error needs ray counts that are multiples of 2 (sub-samples)",
                         field="settings.target_error")
    worst = float(np.percentile(relative, 95.0))
    return min(float((worst / target) ** 2), float(_MAX_RAY_FACTOR))


def _scaled_rays(settings: Settings, factor: float) -> Settings:
    """Settings with the per-sensor ray counts multiplied by ``factor`` (multiples of REPLICAS)."""
    def scaled(n: int) -> int:
        return int(REPLICAS * math.ceil(n * factor / REPLICAS))
    return replace(settings, sky_rays_per_patch=scaled(settings.sky_rays_per_patch),
                   ground_rays=scaled(settings.ground_rays),
                   sensor_rays=scaled(settings.sensor_rays))


@dataclass(frozen=True)
class _Context:
    scheme: Any
    sun: tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]
    panes: tuple[int, ...]
    budget: int


def _context(geometry: Any, n_sensors: int, settings: Settings) -> _Context:
    """Sky scheme, sun points, panes and element budget (refuses before any ray is traced)."""
    scheme = patch_scheme(settings.subdivision)
    sun = _sun_points(float(settings.sun_spacing),
                      float(max(settings.reflected_sun_spacing, settings.sun_spacing)))
    panes = tuple(int(p) for p in geometry.set_panes)
    n_basis = scheme.n_patches + 1
    budget = _element_budget(settings, n_basis + sun[1].shape[0], len(panes), n_sensors,
                             sun[0].shape[0], n_basis)
    return _Context(scheme, sun, panes, budget)


def solve_elements(geometry: Any, n_sensors: int,
                   settings: Settings | None = None) -> ElementSolution | None:
    """The element stage of a coefficient set's reflected part (first of the split stages).

    A coefficient set splits into this stage, one :func:`direct_part` and one
    :func:`reflected_part` per range of sensors, and :func:`assemble`; the
    direct parts need nothing from this stage, so they can run beside it. The
    stages make exactly the arrays :func:`compute_coefficients` makes (it runs
    them in one process).

    Parameters
    ----------
    geometry : kernels.geometry.Geometry
    n_sensors : int
        Sensors of the whole set (it chooses the forward or adjoint form).
    settings : Settings, optional

    Returns
    -------
    ElementSolution or None
        None when no surface reflects (no glazing set or all reflectances 0).
    """
    from luxsweep.kernels.raytrace import Scene

    settings = settings or Settings()
    ctx = _context(geometry, n_sensors, settings)
    return _solve_elements(Scene(geometry), geometry, n_sensors, settings, ctx.scheme, ctx.sun,
                           ctx.panes, ctx.budget)


def _check_range(sensors: np.ndarray, first: int, stop: int) -> None:
    if not (0 <= first < stop <= sensors.shape[0]) or first % SENSOR_PART:
        raise ValueError(f"sensor range {first}:{stop} must lie in 0:{sensors.shape[0]} and "
                         f"start at a multiple of {SENSOR_PART}")


def direct_part(geometry: Any, sensors: np.ndarray, first: int, stop: int,
                settings: Settings | None = None) -> dict[str, np.ndarray]:
    """Direct families of sensors ``first`` to ``stop`` (first of :data:`SENSOR_PART` multiples).

    Parameters
    ----------
    geometry : kernels.geometry.Geometry
    sensors : ndarray (n, 6)
        The whole set's sensors (seeds follow a sensor's place among them).
    first, stop : int
    settings : Settings, optional

    Returns
    -------
    dict
        ``sky_direct`` (n_sets, b, n_basis) float64, ``var_sky`` and
        ``var_ground`` (n_sets, b), ``sun_direct`` (n_sets, b, n_sun) float32.
    """
    from luxsweep.kernels.raytrace import Scene

    settings = settings or Settings()
    sensors = _check_sensors(sensors)
    _check_range(sensors, first, stop)
    scheme = patch_scheme(settings.subdivision)
    fine = _sun_points(float(settings.sun_spacing),
                       float(max(settings.reflected_sun_spacing, settings.sun_spacing)))[0]
    scene = Scene(geometry)
    panes = tuple(int(p) for p in geometry.set_panes)
    sky, var_sky, var_ground = _sensor_sky_direct(scene, sensors, scheme, settings, panes,
                                                  first, stop)
    part = sensors[first:stop]
    inside = np.zeros(part.shape[0], dtype=bool)
    sun = _sun_direct(scene, part[:, :3], part[:, 3:], inside, fine, panes, np.float32)
    return {"sky_direct": sky, "var_sky": var_sky, "var_ground": var_ground, "sun_direct": sun,
            "crossed_twice": np.array(scene.crossed_twice)}


def reflected_part(geometry: Any, sensors: np.ndarray, solution: ElementSolution | None,
                   first: int, stop: int, settings: Settings | None = None
                   ) -> dict[str, np.ndarray]:
    """Reflected families of sensors ``first`` to ``stop`` from the element stage.

    Parameters
    ----------
    geometry : kernels.geometry.Geometry
    sensors : ndarray (n, 6)
        The whole set's sensors.
    solution : ElementSolution or None
        :func:`solve_elements` of the same geometry, sensor count and settings.
    first, stop : int
        ``first`` a multiple of :data:`SENSOR_PART`.
    settings : Settings, optional

    Returns
    -------
    dict
        ``sky_reflected`` (n_sets, b, n_basis) and ``sun_reflected``
        (n_sets, b, n_sun) float32, ``scatter`` (n_sets, b, 3) float64.
    """
    from luxsweep.kernels.raytrace import Scene

    settings = settings or Settings()
    sensors = _check_sensors(sensors)
    _check_range(sensors, first, stop)
    scheme = patch_scheme(settings.subdivision)
    sun = _sun_points(float(settings.sun_spacing),
                      float(max(settings.reflected_sun_spacing, settings.sun_spacing)))
    panes = tuple(int(p) for p in geometry.set_panes)
    scene = Scene(geometry)
    sky, sun_r, scatter = _gather(scene, solution, sensors, settings, scheme, sun,
                                  panes, first, stop)
    return {"sky_reflected": sky, "sun_reflected": sun_r, "scatter": scatter,
            "crossed_twice": np.array(scene.crossed_twice)}


def assemble(geometry: Any, sensors: np.ndarray, direct: list[dict[str, np.ndarray]],
             reflected: list[dict[str, np.ndarray]], settings: Settings | None = None,
             requested: Settings | None = None, element_crossed_twice: int = 0
             ) -> CoefficientSet:
    """The coefficient set from its parts, in sensor order (last of the split stages).

    Parameters
    ----------
    geometry : kernels.geometry.Geometry
    sensors : ndarray (n, 6)
    direct, reflected : list of dict
        :func:`direct_part` and :func:`reflected_part` results covering the
        sensors in order, without gaps.
    settings : Settings, optional
        The settings the parts were computed with.
    requested : Settings, optional
        The settings recorded in the set (and its key); default ``settings``.
    element_crossed_twice : int
        :attr:`ElementSolution.crossed_twice` of the element stage.

    Returns
    -------
    CoefficientSet
    """
    settings = settings or Settings()
    requested = requested or settings
    sensors = _check_sensors(sensors)

    def joined(parts: list[dict[str, np.ndarray]], name: str) -> np.ndarray:
        return np.concatenate([p[name] for p in parts], axis=1)

    sky_direct = joined(direct, "sky_direct")
    if sky_direct.shape[1] != sensors.shape[0]:
        raise ValueError(f"the parts hold {sky_direct.shape[1]} sensors, the set "
                         f"{sensors.shape[0]}")
    scheme = patch_scheme(settings.subdivision)
    scatter = joined(reflected, "scatter")
    # direct sky, direct ground and gather rays are independent: variances add
    ground_unit = overcast_sky_vector(scheme, 1.0)[-1]
    scatter[..., 0] += joined(direct, "var_sky")
    scatter[..., 2] += joined(direct, "var_ground") * ground_unit**2
    fine = _sun_points(float(settings.sun_spacing),
                       float(max(settings.reflected_sun_spacing, settings.sun_spacing)))[0]
    return CoefficientSet(
        key=coefficient_key(geometry, sensors, requested),
        glazing_sets=tuple(geometry.glazing_sets),
        sensors=sensors,
        subdivision=scheme.subdivision,
        sun_directions=fine.copy(),
        sky_direct=sky_direct.astype(np.float32),
        sky_reflected=joined(reflected, "sky_reflected"),
        sun_direct=joined(direct, "sun_direct"),
        sun_reflected=joined(reflected, "sun_reflected"),
        settings=requested,
        kernel_version=kernels.KERNEL_VERSION,
        overcast_error=scatter.astype(np.float32),
        crossed_twice=int(sum(int(p["crossed_twice"]) for p in (*direct, *reflected)))
        + int(element_crossed_twice),
    )


def _compute(geometry: Any, sensors: np.ndarray, settings: Settings,
             requested: Settings) -> CoefficientSet:
    """The four families with these settings (``requested`` is recorded in the set).

    The split stages run one after another in this process, the sensors as one part.
    """
    n = sensors.shape[0]
    _context(geometry, n, settings)  # refuses a too small memory limit before any ray
    direct = direct_part(geometry, sensors, 0, n, settings)
    solution = solve_elements(geometry, n, settings)
    reflected = reflected_part(geometry, sensors, solution, 0, n, settings)
    twice = 0 if solution is None else solution.crossed_twice
    del solution
    return assemble(geometry, sensors, [direct], [reflected], settings, requested, twice)


def daylight_factor_error(coeffs: CoefficientSet, ground_reflectance: float,
                          transmittances: np.ndarray) -> np.ndarray:
    """Standard error of the daylight factor from the sampling of the sensors' rays.

    Parameters
    ----------
    coeffs : CoefficientSet
    ground_reflectance : float [-]
        ρ_g of the uniform ground (as in :func:`kernels.sky.overcast_sky_vector`).
    transmittances : ndarray (n_glazing_variants, n_sets)
        Normal transmittance of each glazing set per variant.

    Returns
    -------
    ndarray (n_glazing_variants, n_sensors) [%]
        ``100 Σ_g τ_g sqrt(Var a_g + 2 ρ_g Cov(a_g, b_g) + ρ_g² Var b_g)``
        (:attr:`CoefficientSet.overcast_error`): exact for one glazing set; for
        several, whose estimates share the sensors' rays, the sum of the
        per-set errors is an upper bound (Minkowski's inequality), never an
        underestimate. NaN where it was not estimated.
    """
    c = coeffs.overcast_error.astype(np.float64)
    rho = float(ground_reflectance)
    per_set = np.sqrt(np.maximum(c[..., 0] + 2.0 * rho * c[..., 1] + rho * rho * c[..., 2], 0.0))
    return 100.0 * np.asarray(transmittances, dtype=np.float64) @ per_set
