"""Ray kernel efficiency: the coefficient stage's effective ray rate ÷ raw embreex.

Figure (issue 8, item 1)::

    efficiency = (rays of compute_coefficients / its wall time)
               ÷ (the same number of raw embreex occlusion rays / their wall time)

*Effective rays* are every ray handed to Embree by the coefficient stage,
counted by wrapping the three query methods of :class:`kernels.raytrace.Scene`
(``occluded``, ``first_hit``, ``glazing_crossing``) with counters that call the
real methods; a ray tested against both the glazing and the opaque scene
counts twice. The wall time is the whole ``compute_coefficients`` call (ray
generation, Embree, bookkeeping, radiosity solve) on the reference classroom
with default settings.

*Raw embreex*: one ``EmbreeScene`` of the same opaque triangles, the same
number of rays from the sensors in random upper-hemisphere directions, already
in float32, in batches of ``kernels.raytrace.BATCH`` rays, ``query="OCCLUDED"``.
Goal ≥ 0.5.

Both are measured in the same process, back to back; the raw rate is the best
of three passes (the least disturbed), the coefficient stage one pass.
"""

from __future__ import annotations

import argparse
import json
import time
from typing import Any

import bench_common as bc
import numpy as np


class RayCounter:
    """Counts rays and time of the Scene query methods while active (wraps, calls through)."""

    METHODS = ("occluded", "first_hit", "glazing_crossing")

    def __init__(self) -> None:
        self.rays: dict[str, int] = dict.fromkeys(self.METHODS, 0)
        self.seconds: dict[str, float] = dict.fromkeys(self.METHODS, 0.0)
        self._saved: dict[str, Any] = {}

    def __enter__(self) -> RayCounter:
        from kernels.raytrace import Scene

        for name in self.METHODS:
            original = getattr(Scene, name)
            self._saved[name] = original

            def wrapper(scene: Any, origins: Any, directions: Any, *a: Any,
                        _f: Any = original, _n: str = name, **k: Any) -> Any:
                n = max(np.shape(origins)[0] if np.ndim(origins) > 1 else 1,
                        np.shape(directions)[0] if np.ndim(directions) > 1 else 1)
                t0 = time.perf_counter()
                out = _f(scene, origins, directions, *a, **k)
                self.seconds[_n] += time.perf_counter() - t0
                self.rays[_n] += int(n)
                return out

            setattr(Scene, name, wrapper)
        return self

    def __exit__(self, *exc: Any) -> None:
        from kernels.raytrace import Scene

        for name, original in self._saved.items():
            setattr(Scene, name, original)

    @property
    def total(self) -> int:
        return int(sum(self.rays.values()))


def raw_embree_seconds(geometry: Any, sensors: np.ndarray, n_rays: int, seed: int = 0,
                       repeat: int = 3) -> float:
    """Best wall time [s] of ``n_rays`` bare float32 occlusion queries on the opaque triangles."""
    from embreex import rtcore_scene as rtcs
    from embreex.mesh_construction import TriangleMesh

    from kernels.raytrace import BATCH

    tris = np.ascontiguousarray(geometry.triangles[~geometry.is_glazing], dtype=np.float32)
    scene = rtcs.EmbreeScene()
    _mesh = TriangleMesh(scene, tris)
    rng = np.random.default_rng(seed)
    n = min(n_rays, BATCH)
    # one batch of rays from the sensors, upper hemisphere, reused for every batch
    origins = np.ascontiguousarray(sensors[rng.integers(0, len(sensors), n), :3],
                                   dtype=np.float32)
    d = rng.normal(size=(n, 3))
    d[:, 2] = np.abs(d[:, 2])
    d /= np.linalg.norm(d, axis=1, keepdims=True)
    directions = np.ascontiguousarray(d, dtype=np.float32)
    full, rest = divmod(n_rays, n)

    def run() -> None:
        for _ in range(full):
            scene.run(origins, directions, query="OCCLUDED")
        if rest:
            scene.run(origins[:rest], directions[:rest], query="OCCLUDED")

    return bc.best_of(run, repeat)


def main(subdivision: int = 2) -> dict[str, Any]:
    from kernels.coefficients import Settings, compute_coefficients

    geometry, sensors = bc.reference_geometry()
    settings = Settings(subdivision=subdivision)
    # warm-up: imports and first-call costs, on a tiny setting (not timed)
    compute_coefficients(geometry, sensors[:2], Settings(sky_rays_per_patch=1, ground_rays=16,
                                                           element_rays=16, sensor_rays=16))
    load0 = bc.load_average()
    with RayCounter() as counter:
        t_coeff, _ = bc.timed(lambda: compute_coefficients(geometry, sensors, settings))
    t_raw = raw_embree_seconds(geometry, sensors, counter.total)
    ours = counter.total / t_coeff
    raw = counter.total / t_raw
    embree_share = sum(counter.seconds.values()) / t_coeff
    return {
        "figure": "ray kernel efficiency",
        "ratio": ours / raw,
        "goal": ">= 0.5",
        "met": bool(ours / raw >= 0.5),
        "rays": counter.total,
        "rays_by_query": counter.rays,
        "seconds_in_scene_queries": counter.seconds,
        "share_of_time_in_scene_queries": embree_share,
        "coefficient_seconds": t_coeff,
        "raw_embree_seconds": t_raw,
        "ours_mrays_per_s": ours / 1e6,
        "raw_mrays_per_s": raw / 1e6,
        "settings": settings.canonical(),
        "n_sensors": len(sensors),
        "load_average": [load0, bc.load_average()],
    }


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", help="write the figures to this file")
    args = parser.parse_args()
    result = main()
    print(json.dumps(result, indent=1))
    if args.json:
        with open(args.json, "w", encoding="utf-8") as fh:
            json.dump(result, fh, indent=1)
