"""One coefficient set split across the cluster: 1 → 2 workers.

The 30 × 18 m open plan of ``bench_scaling.py`` (2,065 sensors, default
settings) is computed the way ``luxsweep run`` computes a set of more than
``SENSOR_PART`` sensors: an element stage, one direct and one reflected task
per sensor range, an assembly that publishes the set to a fresh cache
(:func:`sweep.run.submit_split`). Timed from submission to the assembled set on
luxsweep's own local cluster (:func:`sweep.cluster.dask_client`) of 1 and then
2 worker processes (one thread and one BLAS thread each; the workers are
started and warmed up before the clock starts). The same set computed by
``compute_coefficients`` in this process (one BLAS thread) is timed too: the
split on one worker against it is the split's own overhead.
The machine's own two-process speed-up for a fixed CPU-bound job
(``bench_sweep.machine_parallelism``) is measured in the same run, before and
after, because these machines are shared: the split's speed-up is only
meaningful beside it. Both runs' sets are compared bit for bit.

Usage::

    python benchmarks/bench_split.py                # 30 × 18 m
    python benchmarks/bench_split.py --room 15x9    # quicker
"""

from __future__ import annotations

import argparse
import json
import os
import tempfile
import time
from typing import Any

import bench_common as bc
import numpy as np
from bench_scaling import ROOMS, open_plan
from bench_sweep import machine_parallelism


def _warm() -> int:
    from luxsweep.kernels import coefficients  # noqa: F401  (imports paid before the clock)

    return os.getpid()


def split_once(job: Any, n_workers: int) -> dict[str, Any]:
    """Wall time of one split set on ``n_workers`` single-threaded workers."""
    from luxsweep.sweep.cluster import dask_client
    from luxsweep.sweep.run import split_ranges, submit_split

    ranges = split_ranges(job)
    with tempfile.TemporaryDirectory(prefix="luxsweep-bench-split-") as cache, \
            dask_client(n_workers, None) as client:
        client.run(_warm)
        load0 = bc.load_average()
        t0 = time.perf_counter()
        result = submit_split(client, job, cache, ranges).result()
        seconds = time.perf_counter() - t0
        return {"workers": n_workers, "seconds": seconds, "parts": len(ranges),
                "worker_seconds": result["seconds"], "load": [load0, bc.load_average()],
                "coefficients": result["coefficients"]}


def main(room: str = "30x18") -> dict[str, Any]:
    from luxsweep.kernels.coefficients import Settings
    from luxsweep.sweep.plan import CoefficientJob

    geometry, sensors = open_plan(*ROOMS[room])
    job = CoefficientJob(key=f"bench-split-{room}", geometry=geometry,
                         sensors=np.asarray(sensors, dtype=np.float64), settings=Settings(),
                         variants=(), cached=False, rays=0)
    from luxsweep.kernels.coefficients import compute_coefficients

    before = machine_parallelism()
    from threadpoolctl import threadpool_limits

    with threadpool_limits(1):
        t0 = time.perf_counter()
        compute_coefficients(geometry, job.sensors, job.settings)
        plain = time.perf_counter() - t0
    one = split_once(job, 1)
    two = split_once(job, 2)
    after = machine_parallelism()
    same = all(np.array_equal(getattr(one["coefficients"], f), getattr(two["coefficients"], f))
               for f in ("sky_direct", "sky_reflected", "sun_direct", "sun_reflected",
                         "overcast_error"))
    out = {
        "room": room, "sensors": int(sensors.shape[0]), "parts": one["parts"],
        "one_process_seconds": plain, "one_worker_seconds": one["seconds"],
        "two_workers_seconds": two["seconds"],
        "speedup": one["seconds"] / two["seconds"],
        "machine_two_process_speedup": [before["speedup"], after["speedup"]],
        "load": [one["load"], two["load"]], "bit_identical": bool(same),
        "environment": bc.environment(),
    }
    print(f"{room}: {out['sensors']} sensors, {out['parts']} sensor ranges; "
          f"one process (unsplit) {plain:.1f} s; 1 worker {one['seconds']:.1f} s, "
          f"2 workers {two['seconds']:.1f} s: "
          f"speed-up {out['speedup']:.2f}, {plain / two['seconds']:.2f} against the unsplit "
          f"process (machine gave two processes "
          f"{before['speedup']:.2f} before, {after['speedup']:.2f} after); "
          f"sets bit-identical: {same}; load {one['load']} / {two['load']}")
    return out


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--room", default="30x18", choices=sorted(ROOMS))
    parser.add_argument("--json", help="write the figures to this file")
    args = parser.parse_args()
    result = main(args.room)
    if args.json:
        with open(args.json, "w") as fh:
            json.dump(result, fh, indent=2)
