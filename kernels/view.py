"""View out (EN 17037): sight angle, outside distance and layers seen from a position.

EN 17037:2018 judges the view out of a space from positions in it by three
quantities (Annex D, from memory): the *horizontal sight angle* of the view
through the windows, the *outside distance of view* (how far the eye reaches
before the nearest obstruction) and the *layers* seen — sky, landscape (the
band at the horizon: buildings, trees, the distant ground) and ground. Levels
(from memory): sight angle ≥ 14° / 28° / 54°, distance ≥ 6 / 20 / 50 m, and
layers: the landscape (minimum), the landscape and one other (medium), all
three (high), for minimum / medium / high.

Here everything is found by casting rays from the view position (eye height
included in its ``z``):

* a ray *looks out* when the nearest glazing along it is outside glazing and
  lies before the nearest opaque surface (a view through an internal pane into
  another space, or through two rooms, does not count);
* the **sight angle** is the share of a horizontal fan of rays (``step``
  degrees apart, all round) that look out, in degrees — the angle the window
  openings subtend in the horizontal plane through the eye, summed over the
  windows seen (plane geometry: ``2 atan(w / 2D)`` for a window of width ``w``
  centred at distance ``D``);
* the **outside distance** is the median, over those horizontal rays, of the
  distance from the glazing to the first opaque surface beyond it (obstructions,
  other wings; infinite where there is none);
* the **layers** come from rays ``vertical_step`` degrees apart in azimuth
  and elevation (``-89° … 89°``) all round: a ray that looks out and meets nothing
  above the horizon sees **sky**; one that meets an opaque surface outside, or
  the ground (the plane ``z = 0``) farther than ``horizon_distance``, sees
  **landscape**; one that meets the ground nearer sees **ground** (our own
  convention for where the ground layer ends, with 50 m, the standard's
  high-level outside distance, as the default).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from luxsweep.kernels.raytrace import Scene

__all__ = [
    "DISTANCE_LEVELS",
    "EYE_HEIGHT",
    "POSITION_SHARE",
    "SIGHT_ANGLE_LEVELS",
    "SpaceView",
    "ViewOut",
    "space_view",
    "view_level",
    "view_out",
    "view_positions",
]

SIGHT_ANGLE_LEVELS = (14.0, 28.0, 54.0)
"""Horizontal sight angle [deg] for EN 17037 view-out levels 1, 2, 3 (from memory)."""

DISTANCE_LEVELS = (6.0, 20.0, 50.0)
"""Outside distance of view [m] for EN 17037 view-out levels 1, 2, 3 (from memory)."""

EYE_HEIGHT = 1.2
"""Eye height [m] above the floor of a seated person (EN 17037:2018, from memory)."""

POSITION_SHARE = 0.75
"""Share of a space's view positions from which a view-out value must be met for the
space to have it (EN 17037:2018 asks the view of the utilised area, from memory; the
three-quarter share is our own reading)."""


@dataclass(frozen=True)
class ViewOut:
    """What each view position sees out (arrays over the positions).

    Attributes
    ----------
    sight_angle : ndarray (m,) [deg]
    distance : ndarray (m,) [m]
        Median outside distance of view (inf: nothing in the way; NaN: no view out).
    sky, landscape, ground : ndarray (m,) bool
        Layers seen.
    """

    sight_angle: np.ndarray
    distance: np.ndarray
    sky: np.ndarray
    landscape: np.ndarray
    ground: np.ndarray

    @property
    def layers(self) -> np.ndarray:
        """ndarray (m,) int: number of layers seen (0–3)."""
        return self.sky.astype(int) + self.landscape + self.ground


def _looking_out(scene: Scene, origins: np.ndarray, directions: np.ndarray
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Which rays look out; distance to the glazing and to the first opaque surface [m]."""
    gset, _, to_glass = scene.glazing_crossing(origins, directions, unit=True)
    _, to_opaque = scene.first_hit(origins, directions, unit=True)
    out = (gset >= 0) & (to_glass < to_opaque)
    return out, to_glass, to_opaque


def view_out(scene: Scene, positions: np.ndarray, step: float = 0.25,
             vertical_step: float = 1.0, horizon_distance: float = 50.0) -> ViewOut:
    """Sight angle, outside distance and layers seen from view positions.

    Parameters
    ----------
    scene : Scene
        The building and its surroundings (building frame).
    positions : ndarray (m, 3) [m]
        Eye positions (building frame, ``z`` above the ground plane z = 0).
    step : float [deg]
        Spacing of the horizontal fan (the sight angle's resolution).
    vertical_step : float [deg]
        Spacing in azimuth and elevation (−89° to 89°) of the rays for the layers.
    horizon_distance : float [m]
        Ground met farther than this counts as landscape, not ground.

    Returns
    -------
    ViewOut
    """
    p = np.asarray(positions, dtype=np.float64).reshape(-1, 3)
    az = np.deg2rad(np.arange(0.0, 360.0, step))
    flat = np.stack([np.cos(az), np.sin(az), np.zeros_like(az)], axis=1)
    el = np.deg2rad(np.arange(-89.0, 89.0 + 1e-9, vertical_step))
    az2 = np.deg2rad(np.arange(0.0, 360.0, vertical_step))
    ce, se = np.cos(el)[None, :], np.sin(el)[None, :]
    sphere = np.stack([np.cos(az2)[:, None] * ce, np.sin(az2)[:, None] * ce,
                       np.broadcast_to(se, (az2.size, el.size))], axis=-1).reshape(-1, 3)
    up, down = sphere[:, 2] > 0.0, sphere[:, 2] < 0.0
    with np.errstate(divide="ignore"):
        ground_per_height = np.where(down, 1.0 / -sphere[:, 2], 0.0)  # [m per m of z]
    m = p.shape[0]
    sight = np.zeros(m)
    distance = np.full(m, np.nan)
    layers = np.zeros((m, 3), dtype=bool)  # sky, landscape, ground
    for i in range(m):
        out, to_glass, to_opaque = _looking_out(scene, np.broadcast_to(p[i], flat.shape), flat)
        if out.any():
            sight[i] = out.sum() * step
            distance[i] = float(np.median(to_opaque[out] - to_glass[out]))
        looks, _, hit = _looking_out(scene, np.broadcast_to(p[i], sphere.shape), sphere)
        to_ground = np.where(down, p[i, 2] * ground_per_height, np.inf)
        ground_first = to_ground < hit
        sky = looks & ~np.isfinite(hit) & up
        ground = looks & ground_first & (to_ground <= horizon_distance)
        landscape = looks & ((np.isfinite(hit) & ~ground_first)
                             | (ground_first & (to_ground > horizon_distance)))
        layers[i] = sky.any(), landscape.any(), ground.any()
    return ViewOut(sight, distance, layers[:, 0], layers[:, 1], layers[:, 2])


def view_level(view: ViewOut) -> np.ndarray:
    """EN 17037 view-out level of each position: the lowest of its three criteria.

    Returns
    -------
    ndarray (m,) int8
        0 none, 1 minimum, 2 medium, 3 high. Layers: the landscape gives 1, the
        landscape and one more layer 2, all three 3; without the landscape, 0.
    """
    angle = np.searchsorted(np.asarray(SIGHT_ANGLE_LEVELS), view.sight_angle + 1e-9,
                            side="right")
    dist = np.where(np.isnan(view.distance), 0,
                    np.searchsorted(np.asarray(DISTANCE_LEVELS),
                                    np.nan_to_num(view.distance, nan=0.0, posinf=1e300),
                                    side="right"))
    layers = np.where(view.landscape, view.layers, 0)
    return np.minimum(np.minimum(angle, dist), layers).astype(np.int8)


def view_positions(lo: np.ndarray, hi: np.ndarray, eye_height: float = EYE_HEIGHT,
                   n: int = 3) -> np.ndarray:
    """View positions of a box space: an ``n`` × ``n`` plan grid at eye height.

    The floor ``[lo, hi]`` is cut into ``n`` × ``n`` equal cells and each cell's
    centre is a position (``n = 3``: at 1/6, 1/2 and 5/6 of the width and the
    depth), so the positions cover the space evenly and none stands on a wall
    (our own choice of positions, common practice for a room-wide check).

    Parameters
    ----------
    lo, hi : ndarray (3,) [m]
        Interior box corners of the space (building frame); ``lo[2]`` is the floor.
    eye_height : float [m]
        Above the floor.
    n : int
        Positions per side.

    Returns
    -------
    ndarray (n * n, 3) [m]
        Building frame, x fastest.
    """
    lo, hi = np.asarray(lo, dtype=np.float64), np.asarray(hi, dtype=np.float64)
    f = (np.arange(n) + 0.5) / n
    x = lo[0] + f * (hi[0] - lo[0])
    y = lo[1] + f * (hi[1] - lo[1])
    xx, yy = np.meshgrid(x, y)
    return np.column_stack([xx.ravel(), yy.ravel(), np.full(xx.size, lo[2] + eye_height)])


@dataclass(frozen=True)
class SpaceView:
    """View out of each space: the values met from :data:`POSITION_SHARE` of its positions.

    Attributes
    ----------
    sight_angle : ndarray (k,) [deg]
    distance : ndarray (k,) [m]
        inf: nothing in the way; 0: no view out from those positions.
    layers : ndarray (k,) int8
        Layers seen (0–3).
    level : ndarray (k,) int8
        EN 17037 view-out level (0–3) met from that share of positions.
    """

    sight_angle: np.ndarray
    distance: np.ndarray
    layers: np.ndarray
    level: np.ndarray


def _met_by_share(values: np.ndarray, share: float) -> float:
    """The largest v such that at least ``share`` of ``values`` are ≥ v."""
    ordered = np.sort(np.asarray(values, dtype=np.float64))[::-1]
    return float(ordered[int(np.ceil(share * ordered.size - 1e-9)) - 1])


def space_view(view: ViewOut, space: np.ndarray, n_spaces: int,
               share: float = POSITION_SHARE) -> SpaceView:
    """View out of each space from that of its positions.

    Each quantity of a space is the largest value met or exceeded from at least
    ``share`` of its positions (with 9 positions and 3/4: from 7 of them); a
    position without view out has distance 0. The level is likewise the level of
    the positions (:func:`view_level`), not the level of the space's values.

    Parameters
    ----------
    view : ViewOut
        Of every position.
    space : ndarray (m,) int
        Space of each position, 0 … ``n_spaces`` − 1.
    n_spaces : int
    share : float
        In (0, 1].

    Returns
    -------
    SpaceView
        A space without positions has 0 everywhere.
    """
    space = np.asarray(space)
    level = view_level(view)
    distance = np.where(np.isnan(view.distance), 0.0, view.distance)
    out = np.zeros((4, n_spaces))
    for k in range(n_spaces):
        mine = space == k
        if mine.any():
            out[:, k] = [_met_by_share(q[mine], share)
                         for q in (view.sight_angle, distance, view.layers, level)]
    return SpaceView(out[0], out[1], out[2].astype(np.int8), out[3].astype(np.int8))
