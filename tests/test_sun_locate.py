"""Locating directions among the sun points (kernels.sun.SunPoints.weights).

The band-and-walk locator must return exactly what the nearest-point locator
(the k-d tree search it replaced, kept as ``_Triangulation.find_near``) returns
— indices and weights bit for bit — on random directions and on the hard
cases: exactly on the altitude rings, on the horizon ring (a great circle, so
on triangle edges), at the sun points themselves, near the zenith and below
the horizon. Independent check: for a sample, the triangle holding each
direction by brute force over every triangle, with weights from
``numpy.linalg.solve`` (gnomonic barycentric coordinates, DEVELOPERS.md).
"""

from __future__ import annotations

import numpy as np
import pytest

from luxsweep.kernels.sun import SunPoints, direction


def _reference(points: SunPoints, s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The nearest-point locator with the same post-processing as ``locate``."""
    t = points._triangulation
    s = s / np.linalg.norm(s, axis=1, keepdims=True)
    simplex, w, inside = t.find_near(s)
    w = np.clip(w, 0.0, None)
    w /= np.where(inside, w.sum(axis=1), 1.0)[:, None]
    w[~inside] = 0.0
    return np.where(inside[:, None], t.simplices[simplex], 0).astype(np.int32), w


def _cases(points: SunPoints, rng: np.random.Generator) -> dict[str, np.ndarray]:
    t = points._triangulation
    ring_altitude = np.degrees(np.arcsin(t.ring_z[:-1]))  # every ring but the zenith
    on_ring = points.directions[rng.integers(0, points.n, 20_000)]
    phi = rng.uniform(0, 2 * np.pi, 20_000)
    r = np.sqrt(1.0 - on_ring[:, 2] ** 2)
    z = rng.uniform(-0.3, 1.0, 100_000)  # uniform on the sphere's cap (Archimedes)
    phi2 = rng.uniform(0, 2 * np.pi, 100_000)
    r2 = np.sqrt(1.0 - z * z)
    spacing = points.spacing
    return {
        "random": np.stack([r2 * np.sin(phi2), r2 * np.cos(phi2), z], axis=1),
        "on rings": direction(rng.uniform(0, 360, 20_000),
                              ring_altitude[rng.integers(0, ring_altitude.size, 20_000)]),
        "on rings, z exactly": np.stack([r * np.sin(phi), r * np.cos(phi), on_ring[:, 2]], 1),
        "near the zenith": direction(rng.uniform(0, 360, 10_000),
                                     90.0 - rng.uniform(0, 3 * spacing, 10_000)),
        "the zenith": np.array([[0.0, 0.0, 1.0], [0.0, 0.0, 2.5]]),
        "on the horizon": direction(rng.uniform(0, 360, 10_000), np.zeros(10_000)),
        "below the horizon": direction(rng.uniform(0, 360, 10_000),
                                       -rng.uniform(0, 90, 10_000)),
        "the sun points": points.directions,
        "not unit length": 3.7 * direction(rng.uniform(0, 360, 1000), rng.uniform(0, 90, 1000)),
    }  # fmt: skip


@pytest.mark.parametrize("spacing", [1.5, 3.0, 1.0, 10.0])
def test_identical_to_the_nearest_point_locator(spacing):
    points = SunPoints(spacing)
    rng = np.random.default_rng(int(spacing * 10))
    total = 0
    for name, s in _cases(points, rng).items():
        index, weight = points.weights(s)
        ref_index, ref_weight = _reference(points, s)
        np.testing.assert_array_equal(index, ref_index, err_msg=name)
        np.testing.assert_array_equal(weight, ref_weight, err_msg=name)
        total += len(s)
    assert total >= 100_000


def test_settles_without_the_reference_locator(monkeypatch):
    # the table and walk settle nearly every direction themselves (the speed-up);
    # only ties on edges and vertices go to the nearest-point locator
    points = SunPoints()
    t = points._triangulation
    assert t.banded  # the Delaunay triangulation links neighbouring rings only
    rng = np.random.default_rng(3)
    z, phi = rng.uniform(0, 1, 50_000), rng.uniform(0, 2 * np.pi, 50_000)
    s = np.stack([np.sqrt(1 - z * z) * np.sin(phi), np.sqrt(1 - z * z) * np.cos(phi), z], 1)
    deferred = []
    real = t.find_near
    monkeypatch.setattr(t, "find_near", lambda d: deferred.append(len(d)) or real(d))
    t.find(s)
    assert sum(deferred) < 0.001 * len(s)


def test_brute_force_triangle_and_weights():
    # independent: solve [A B C] w = s for every triangle (numpy.linalg.solve) and keep
    # the one whose smallest weight is largest; inside it all weights are >= 0 and the
    # normalised weights are those returned. Tolerance 1e-12: round-off of a 3x3 solve.
    points = SunPoints(3.0)
    t = points._triangulation
    rng = np.random.default_rng(11)
    z, phi = rng.uniform(0, 1, 400), rng.uniform(0, 2 * np.pi, 400)
    s = np.stack([np.sqrt(1 - z * z) * np.sin(phi), np.sqrt(1 - z * z) * np.cos(phi), z], 1)
    corners = np.swapaxes(points.directions[t.simplices], 1, 2)  # (F, 3 xyz, 3 corners)
    w_all = np.linalg.solve(corners[None], np.broadcast_to(s[:, None, :, None],
                            (len(s), len(corners), 3, 1)))[..., 0]  # fmt: skip
    best = np.argmax(w_all.min(axis=2), axis=1)
    w_best = w_all[np.arange(len(s)), best]
    assert (w_best.min(axis=1) >= -1e-12).all()
    index, weight = points.weights(s)
    np.testing.assert_array_equal(index, t.simplices[best])
    np.testing.assert_allclose(weight, w_best / w_best.sum(axis=1, keepdims=True), atol=1e-12)
