"""Ray kernel efficiency: the coefficient stage's effective ray rate ÷ raw embreex (item 1).

Figure::

    efficiency = (effective rays of compute_coefficients / its wall time)
               ÷ (raw embreex occlusion rays per second on the same scene, same count)

The ray accounting and the raw rate are those of ``bench_coefficients.py``
(owned by the coefficient kernel's author; imported, not duplicated):
*effective* rays are the rays whose fate the coefficient stage settles (rays
handed to the glazing/sky test, including those a cone pre-test settles without
Embree, the exterior sky test and the element/sensor path tracing); the raw
rate is bare float32 ``EmbreeScene.run(..., query="OCCLUDED")`` on the opaque
triangles with random rays in the room. Here the raw rate is the best of three
passes (the least disturbed), measured right after the coefficient set.

In addition this benchmark records the Embree queries actually made and the
share of the stage's wall time spent inside Embree calls (a wrapper that
times and calls through, :class:`QueryTimer`), which tells how much of the
gap is ray casting and how much is the numpy work around it. Goal ≥ 0.5.

``--levels 3 --per-level 12 --spacing 0.5`` measures the same figure on the
36-classroom building of ``bench_building.py`` (raw rays from origins spread
over the building's spaces).
"""

from __future__ import annotations

import argparse
import time
from typing import Any

import bench_common as bc
import numpy as np


class QueryTimer:
    """Rays and seconds spent inside Embree while active (wraps and calls through).

    Wraps ``kernels.raytrace._run`` — the one function through which the Scene
    calls ``EmbreeScene.run`` — when the module has it; otherwise the public
    Scene query methods. Counts are per Embree query kind.
    """

    def __init__(self) -> None:
        self.rays: dict[str, int] = {}
        self.seconds: dict[str, float] = {}
        self._saved: list[tuple[Any, str, Any]] = []

    def _wrap(self, owner: Any, name: str, label: Any, ray_arg: int) -> None:
        original = getattr(owner, name)
        self._saved.append((owner, name, original))

        def wrapper(*args: Any, _f: Any = original, **kw: Any) -> Any:
            key = label(args, kw)
            t0 = time.perf_counter()
            out = _f(*args, **kw)
            self.seconds[key] = self.seconds.get(key, 0.0) + time.perf_counter() - t0
            self.rays[key] = self.rays.get(key, 0) + int(np.shape(args[ray_arg])[0])
            return out

        setattr(owner, name, wrapper)

    def __enter__(self) -> QueryTimer:
        from luxsweep.kernels import raytrace

        if hasattr(raytrace, "_run"):  # _run(scene, o, d, query, output=False)
            self._wrap(raytrace, "_run",
                       lambda a, k: str(a[3] if len(a) > 3 else k.get("query")), 1)
        else:
            for name in ("occluded", "first_hit", "glazing_crossing"):
                self._wrap(raytrace.Scene, name, lambda a, k, n=name: n, 1)
        return self

    def __exit__(self, *exc: Any) -> None:
        for owner, name, original in reversed(self._saved):
            setattr(owner, name, original)


def main(levels: int = 0, per_level: int = 0, spacing: float = 0.5) -> dict[str, Any]:
    """The figure for the reference classroom, or for the building of
    ``bench_building.py`` (``levels`` × ``per_level`` classrooms) when ``levels``."""
    import bench_coefficients as bcoef

    from luxsweep.kernels.coefficients import Settings, compute_coefficients

    if levels:
        import bench_building

        geometry, sensors = bench_building.building(levels, per_level, spacing)
    else:
        geometry, sensors = bc.reference_geometry()
    settings = Settings()
    # warm-up: imports and first-call costs, on a tiny setting (not timed, not counted)
    compute_coefficients(geometry, sensors[:2], Settings(sky_rays_per_patch=1, ground_rays=16,
                                                           element_rays=16, sensor_rays=16))
    load0 = bc.load_average()
    try:
        counts = bcoef.count_rays()  # wraps for the rest of this process (a subprocess)
        accounting = "resolved rays (bench_coefficients.count_rays)"
    except AttributeError as exc:  # the coefficient module and its benchmark out of step
        counts = None
        accounting = f"rays handed to Embree (bench_coefficients.count_rays failed: {exc})"
    with QueryTimer() as timer:
        t_coeff, _ = bc.timed(lambda: compute_coefficients(geometry, sensors, settings))
    embree_rays = sum(timer.rays.values())
    rays = counts["resolved"] if counts else embree_rays
    raw = max(bcoef.raw_occlusion_rate(geometry, rays) for _ in range(3))
    ours = rays / t_coeff
    return {
        "figure": "ray kernel efficiency",
        "ratio": ours / raw,
        "goal": ">= 0.5",
        "met": bool(ours / raw >= 0.5),
        "rays": rays,
        "ray_accounting": accounting,
        "embree_rays": embree_rays,
        "embree_rays_by_query": timer.rays,
        "seconds_in_embree": timer.seconds,
        "share_of_time_in_scene_queries": sum(timer.seconds.values()) / t_coeff,
        "coefficient_seconds": t_coeff,
        "raw_embree_seconds_same_rays": rays / raw,
        "ours_mrays_per_s": ours / 1e6,
        "raw_mrays_per_s": raw / 1e6,
        "settings": settings.canonical(),
        "n_sensors": len(sensors),
        "load_average": [load0, bc.load_average()],
    }


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", help="write the figures to this file")
    parser.add_argument("--levels", type=int, default=0,
                        help="the building of bench_building.py instead of the classroom")
    parser.add_argument("--per-level", type=int, default=12)
    parser.add_argument("--spacing", type=float, default=0.5)
    args = parser.parse_args()
    result = main(args.levels, args.per_level, args.spacing)
    bc.report(result, args.json)
