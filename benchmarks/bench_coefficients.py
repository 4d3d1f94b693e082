"""Benchmark: coefficient set of the reference classroom.

Reference classroom: 7.2 × 8 × 3 m, one front window 5 × 1.8 m (sill 0.9 m,
double glazing), sensors on a 0.5 m grid with 0.5 m margin at 0.8 m (195),
default :class:`kernels.coefficients.Settings` (MF2).

Prints
------
* wall and CPU time of the whole coefficient set;
* the rays it resolved and the rays it handed to Embree (counted by wrapping
  private helpers of the stage — the real ones run unchanged, see
  :func:`count_rays`), and its effective rate (resolved rays per second);
* the raw rate of ``embreex`` occlusion queries on the same opaque scene with
  the same number of rays (float32 arrays prepared in advance), and the ratio
  of the two (goal ≥ 0.5).

A tiny coefficient set is computed first (imports, first calls; not timed).
The script also runs against the kernels before issue 8 (it then counts the
Embree rays at the old Scene query methods), for before/after figures in the
same conditions.

Run: ``.venv/bin/python benchmarks/bench_coefficients.py``.
"""

from __future__ import annotations

import time

import numpy as np

from luxsweep.kernels import coefficients, raytrace, transfer
from luxsweep.kernels.coefficients import Settings, compute_coefficients
from luxsweep.kernels.geometry import parametric_room, sensor_grid


def classroom():
    windows = [{"wall": "front", "width": 5.0, "sill": 0.9, "head": 2.7, "offset": 0.0,
                "glazing": "main"}]
    geo = parametric_room(7.2, 8.0, 3.0, windows, {"floor": 0.2, "walls": 0.5, "ceiling": 0.7},
                          {"main": 2})
    return geo, sensor_grid(7.2, 8.0, 0.8, 0.5, 0.5)


class RayCounts(dict):
    """``{"resolved": …, "queries": …}`` filled while the stage runs.

    Rays the stage settles without looking at them one by one (whole sky
    patches outside every window) cannot be counted as it runs without
    slowing it down: the arguments of those calls are recorded and the rays
    with a positive cosine counted when ``"resolved"`` is read (after the
    timed run).
    """

    def __init__(self) -> None:
        super().__init__(resolved=0, queries=0)
        self.pending: list = []

    def __getitem__(self, key: str) -> int:
        if key == "resolved":
            while self.pending:
                super().__setitem__("resolved", super().__getitem__("resolved")
                                    + self.pending.pop()())
        return super().__getitem__(key)


def _sky_rays(sensors: np.ndarray, scheme, settings) -> int:
    """Sky and ground rays of ``coefficients._sensor_sky_direct`` with ``n·d > 0``."""
    from luxsweep.kernels.sky import sample_directions, sample_ground

    n = 0
    for s in range(sensors.shape[0]):
        sky = sample_directions(scheme, settings.sky_rays_per_patch,
                                coefficients._seed(settings, coefficients._STREAM_SKY, s))
        ground = sample_ground(settings.ground_rays,
                               coefficients._seed(settings, coefficients._STREAM_GROUND, s))
        n += int(np.count_nonzero(sky.reshape(-1, 3) @ sensors[s, 3:] > 0.0))
        n += int(np.count_nonzero(ground @ sensors[s, 3:] > 0.0))
    return n


def count_rays() -> RayCounts:
    """Count rays by wrapping private helpers of the stage (the real ones run unchanged).

    ``resolved`` rays are those whose fate the computation settles: every
    sensor/element ray with a positive cosine of the sky and sun tests
    (``coefficients._sensor_sky_direct``, ``coefficients._sun_direct``),
    whether a pre-test settles it or Embree does, and the rays of the element
    and sensor path tracing (``transfer.trace_paths``). ``queries`` are the
    rays actually handed to Embree (``raytrace._run``, through which every
    Scene query of the stage goes). The wrappers stay for the rest of the
    process; see :class:`RayCounts` for when the sky rays are counted.
    """
    counts = RayCounts()

    def wrap(owner, name, record):
        original = getattr(owner, name)

        def counted(*args, _f=original, **kw):
            record(args)
            return _f(*args, **kw)

        setattr(owner, name, counted)

    def add(key, n):
        dict.__setitem__(counts, key, dict.__getitem__(counts, key) + n)

    wrap(coefficients, "_sensor_sky_direct",
         lambda a: counts.pending.append(lambda: _sky_rays(a[1], a[2], a[3])))
    wrap(coefficients, "_sun_direct", lambda a: counts.pending.append(
        lambda: int(np.count_nonzero(a[2] @ a[4].T > 0.0))))
    wrap(transfer, "trace_paths", lambda a: add("resolved", int(np.shape(a[3])[0])))
    if hasattr(raytrace, "_run"):
        wrap(raytrace, "_run", lambda a: add("queries", int(np.shape(a[1])[0])))
    else:  # kernels before issue 8 (for before/after runs of this script)
        for name in ("first_hit", "occluded", "glazing_crossing"):
            wrap(raytrace.Scene, name, lambda a: add("queries", int(np.shape(a[2])[0])))
    return counts


RAW_SAMPLE = 50_000_000
"""Most rays the raw rate is measured on: a building's coefficient set resolves ~10⁹
rays, whose origins and directions alone would take 24 GB; the rate per ray is the
same on a sample of this size (drawn and traced in pieces, only the queries timed)."""


def raw_occlusion_rate(geo, n_rays: int) -> float:
    """Rays per second of bare embreex occlusion queries on the opaque scene.

    Origins are uniform in the room (7.2 × 8 × 3 m), or in the spaces' bounding
    box for a building (``geo.space_boxes``), directions uniform on the sphere;
    ``min(n_rays, RAW_SAMPLE)`` rays, drawn in pieces of ``raytrace.BATCH``.
    """
    scene = raytrace.Scene(geo)
    rng = np.random.default_rng(0)
    boxes = np.asarray(getattr(geo, "space_boxes", ()), dtype=float).reshape(-1, 2, 3)
    lo, hi = ((boxes[:, 0].min(axis=0), boxes[:, 1].max(axis=0)) if len(boxes) > 1
              else (np.zeros(3), np.array([7.2, 8.0, 3.0])))
    embree = scene._opaque[0]
    n = min(int(n_rays), RAW_SAMPLE)
    seconds = 0.0
    for s in range(0, n, raytrace.BATCH):
        m = min(raytrace.BATCH, n - s)
        origins = (lo + rng.random((m, 3)) * (hi - lo)).astype(np.float32)
        dirs = rng.normal(size=(m, 3))
        dirs = (dirs / np.linalg.norm(dirs, axis=1, keepdims=True)).astype(np.float32)
        t0 = time.perf_counter()
        embree.run(origins, dirs, query="OCCLUDED")
        seconds += time.perf_counter() - t0
    return n / seconds


def main() -> None:
    geo, sensors = classroom()
    settings = Settings()
    # warm-up: imports and first-call costs on a tiny setting (not timed, not counted)
    compute_coefficients(geo, sensors[:2], Settings(sky_rays_per_patch=1, ground_rays=16,
                                                     element_rays=16, sensor_rays=16))
    counts = count_rays()
    t0, c0 = time.perf_counter(), time.process_time()
    coeffs = compute_coefficients(geo, sensors, settings)
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    rays = counts["resolved"]
    raw = raw_occlusion_rate(geo, rays)
    print(f"reference classroom: {sensors.shape[0]} sensors, {settings}")
    print(f"coefficient set: wall {wall:.2f} s, cpu {cpu:.2f} s, {coeffs.nbytes / 1e6:.1f} MB")
    print(f"rays resolved {rays:,}, Embree queries {counts['queries']:,}")
    for label, seconds in (("wall", wall), ("cpu", cpu)):
        ours = rays / seconds
        print(f"effective rate ({label}) {ours / 1e6:.2f} M rays/s; raw embreex occlusion "
              f"{raw / 1e6:.2f} M rays/s; ratio {ours / raw:.2f} (goal >= 0.5)")


if __name__ == "__main__":
    main()
