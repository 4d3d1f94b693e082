"""What a plan will cost on this machine: a short measured ray and matrix rate.

``luxsweep plan`` prints an estimated wall time. It measures, in well under a
second, the two rates the work scales with on *this* machine:

- the raw Embree occlusion rate [rays/s] on the geometry of the first
  coefficient set to compute (random rays from its sensors), and
- the single-thread float32 matrix-product rate [flop/s] on shapes like the
  series stage's (sensors × sky basis times sky basis × time steps),

and turns the plan's counts (:meth:`sweep.plan.Plan.estimate`: rays of the
missing coefficient sets, flops of the series products) into seconds with two
calibration factors — the share of the raw rate the whole stage achieves,
measured on the demo study (see :data:`RAY_SHARE`, :data:`MATRIX_SHARE`) — then
divides by the workers (with :data:`PARALLEL_EFFICIENCY`) and adds the fixed
start-up time. It is an order-of-magnitude guide (within about a factor of two
on the demo and the benchmark studies), not a promise: other load on the
machine, the cache and the climate files change it.
"""

from __future__ import annotations

import os
import time
from dataclasses import dataclass
from typing import Any

import numpy as np

__all__ = [
    "MATRIX_SHARE",
    "PARALLEL_EFFICIENCY",
    "RAY_SHARE",
    "START_SECONDS",
    "Rates",
    "estimated_seconds",
    "format_duration",
    "measure_rates",
]

RAY_SHARE = 0.09
"""Planned coefficient rays per second ÷ raw Embree occlusion rays per second.

The plan counts every ray the coefficient stage asks for; the stage also solves
the reflected light and handles glazing, so its rate is a fraction of the raw
rate. Demo study on 2 workers, quiet machine: 11.1 M planned rays in about 7 s
of worker time against a raw rate near 18 M rays/s (docs/performance.md).
"""

MATRIX_SHARE = 0.05
"""Planned series flops per second ÷ raw single-thread float32 matrix-product rate.

The plan counts dense products over the whole sky basis and half the year's
steps; the series stage also builds skies, reduces metrics, reads climates and
writes results. Demo study: 29 GFLOP planned in about 10 s of worker time.
"""

PARALLEL_EFFICIENCY = 0.85
"""Speed-up per worker relative to one (two workers measured 1.53–1.72)."""

START_SECONDS = 3.0
"""Validation, planning, cluster start and store creation [s]."""


@dataclass(frozen=True)
class Rates:
    """Rates measured on this machine.

    Attributes
    ----------
    rays_per_second : float
        Raw Embree occlusion rays per second on one core.
    flops_per_second : float
        Single-thread float32 matrix-product flops per second.
    """

    rays_per_second: float
    flops_per_second: float


def _ray_rate(geometry: Any, points: np.ndarray, n_rays: int, rng: np.random.Generator
              ) -> float:
    from luxsweep.kernels.raytrace import Scene

    scene = Scene(geometry)
    origins = points[rng.integers(0, len(points), n_rays)]
    directions = rng.normal(size=(n_rays, 3))
    directions /= np.linalg.norm(directions, axis=1, keepdims=True)
    scene.occluded(origins[:256], directions[:256])  # build and warm up
    t0 = time.perf_counter()
    scene.occluded(origins, directions)
    return n_rays / max(time.perf_counter() - t0, 1e-9)


def _matrix_rate(n_sensors: int, n_basis: int, n_steps: int) -> float:
    from threadpoolctl import threadpool_limits

    rng = np.random.default_rng(0)
    a = rng.random((n_sensors, n_basis), dtype=np.float32)
    b = rng.random((n_basis, n_steps), dtype=np.float32)
    with threadpool_limits(1, "blas"):
        a @ b  # warm up
        t0 = time.perf_counter()
        a @ b
        seconds = time.perf_counter() - t0
    return 2.0 * n_sensors * n_basis * n_steps / max(seconds, 1e-9)


def measure_rates(geometry: Any = None, points: np.ndarray | None = None, *,
                  n_rays: int = 100_000, seed: int = 0) -> Rates:
    """Measure the raw ray and matrix rates of this machine (about 0.1–0.3 s).

    Parameters
    ----------
    geometry : kernels.geometry.Geometry, optional
        Scene to cast rays in (a coefficient set's room); without one the ray
        rate is not measured and reads NaN.
    points : ndarray (n, 3) [m], optional
        Ray origins (the set's sensors).
    n_rays : int
        Rays in the timed pass.
    seed : int
        Seed of the random ray directions.
    """
    rng = np.random.default_rng(seed)
    rays = np.nan
    if geometry is not None and points is not None and len(points):
        rays = _ray_rate(geometry, np.asarray(points, float)[:, :3], n_rays, rng)
    return Rates(rays, _matrix_rate(256, 578, 2048))


def estimated_seconds(estimate: dict[str, Any], rates: Rates, workers: int | None = None
                      ) -> dict[str, float]:
    """Wall time of a plan from its counts and the measured rates.

    Parameters
    ----------
    estimate : dict
        :meth:`sweep.plan.Plan.estimate` (``rays``, ``gemm_flops``).
    rates : Rates
    workers : int, optional
        Worker processes (default: the cores of this machine).

    Returns
    -------
    dict
        ``coefficients``, ``series`` (worker seconds) and ``wall`` [s].
    """
    workers = workers or os.cpu_count() or 1
    coefficients = 0.0
    if estimate["rays"]:
        coefficients = estimate["rays"] / (rates.rays_per_second * RAY_SHARE)
    series = estimate["gemm_flops"] / (rates.flops_per_second * MATRIX_SHARE)
    speedup = 1.0 + (workers - 1) * PARALLEL_EFFICIENCY
    return {"coefficients": coefficients, "series": series,
            "wall": START_SECONDS + (coefficients + series) / speedup}


def format_duration(seconds: float) -> str:
    """``45 s``, ``12 min``, ``3.5 h`` (two significant figures at most)."""
    if not np.isfinite(seconds):
        return "unknown"
    if seconds < 90:
        return f"{seconds:.0f} s"
    if seconds < 90 * 60:
        return f"{seconds / 60:.0f} min"
    return f"{seconds / 3600:.2g} h"
