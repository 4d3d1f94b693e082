"""Benchmark: coefficient set of the reference classroom.

Reference classroom: 7.2 × 8 × 3 m, one front window 5 × 1.8 m (sill 0.9 m,
double glazing), sensors on a 0.5 m grid with 0.5 m margin at 0.8 m (195),
default :class:`kernels.coefficients.Settings` (MF2).

Prints
------
* wall and CPU time of the whole coefficient set;
* the rays it resolved and the Embree queries it made (counted by wrapping
  the ray-casting entry points — the real ones run unchanged), and its
  effective rate (resolved rays per second);
* the raw rate of ``embreex`` occlusion queries on the same opaque scene with
  the same number of rays (float32 arrays prepared in advance), and the ratio
  of the two (goal ≥ 0.5).

Run: ``.venv/bin/python benchmarks/bench_coefficients.py``.
"""

from __future__ import annotations

import time

import numpy as np

from kernels import coefficients, raytrace, transfer
from kernels.coefficients import Settings, compute_coefficients
from kernels.geometry import parametric_room, sensor_grid


def classroom():
    windows = [{"wall": "front", "width": 5.0, "sill": 0.9, "head": 2.7, "offset": 0.0,
                "glazing": "main"}]
    geo = parametric_room(7.2, 8.0, 3.0, windows, {"floor": 0.2, "walls": 0.5, "ceiling": 0.7},
                          {"main": 2})
    return geo, sensor_grid(7.2, 8.0, 0.8, 0.5, 0.5)


def count_rays() -> dict[str, int]:
    """Count rays by wrapping the ray-casting entry points (the real ones run unchanged).

    ``resolved`` rays are those whose fate the computation settles: rays handed
    to the glazing/sky test (including those the cone pre-test settles without
    Embree), the exterior sky test and the path tracing of elements and sensors.
    ``queries`` are the Embree queries actually made by ``Scene``.
    """
    counts = {"resolved": 0, "queries": 0}

    def wrap(owner, name, key, arg):
        original = getattr(owner, name)

        def counted(*args, _f=original, **kw):
            counts[key] += int(np.asarray(args[arg]).reshape(-1, 3).shape[0])
            return _f(*args, **kw)

        setattr(owner, name, counted)

    wrap(coefficients, "_through_glazing", "resolved", 2)
    wrap(coefficients, "_open_sky", "resolved", 2)
    wrap(transfer, "trace_paths", "resolved", 3)
    for name in ("first_hit", "occluded", "glazing_crossing"):
        wrap(raytrace.Scene, name, "queries", 2)
    return counts


def raw_occlusion_rate(geo, n_rays: int) -> float:
    """Rays per second of bare embreex occlusion queries on the opaque scene."""
    scene = raytrace.Scene(geo)
    rng = np.random.default_rng(0)
    origins = (rng.random((n_rays, 3)) * [7.2, 8.0, 3.0]).astype(np.float32)
    dirs = rng.normal(size=(n_rays, 3))
    dirs = (dirs / np.linalg.norm(dirs, axis=1, keepdims=True)).astype(np.float32)
    embree = scene._opaque[0]
    t0 = time.perf_counter()
    for s in range(0, n_rays, raytrace.BATCH):
        embree.run(origins[s:s + raytrace.BATCH], dirs[s:s + raytrace.BATCH], query="OCCLUDED")
    return n_rays / (time.perf_counter() - t0)


def main() -> None:
    geo, sensors = classroom()
    settings = Settings()
    counts = count_rays()
    t0, c0 = time.perf_counter(), time.process_time()
    coeffs = compute_coefficients(geo, sensors, settings)
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    rays = counts["resolved"]
    raw = raw_occlusion_rate(geo, rays)
    print(f"reference classroom: {sensors.shape[0]} sensors, {settings}")
    print(f"coefficient set: wall {wall:.2f} s, cpu {cpu:.2f} s, {coeffs.nbytes / 1e6:.1f} MB")
    print(f"rays resolved {rays / 1e6:.2f} M, Embree queries {counts['queries'] / 1e6:.2f} M")
    for label, seconds in (("wall", wall), ("cpu", cpu)):
        ours = rays / seconds
        print(f"effective rate ({label}) {ours / 1e6:.2f} M rays/s; raw embreex occlusion "
              f"{raw / 1e6:.2f} M rays/s; ratio {ours / raw:.2f} (goal >= 0.5)")


if __name__ == "__main__":
    main()
