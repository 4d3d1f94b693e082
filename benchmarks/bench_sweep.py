"""Whole sweeps through ``sweep.run.run_study``: scaling (item 5) and throughput (item 6).

Both run the real engine end to end (plan, LocalCluster of single-threaded
worker processes, coefficient tasks, series tasks, Zarr store) on studies of
the reference classroom, with a fresh coefficient cache, hourly steps, all
metric families and these coarse compute settings (stated, as the issue
allows; the demo study uses the same)::

    subdivision 2, sun_spacing 3°, sky_rays_per_patch 8, ground_rays 1024,
    element_size 0.6 m, element_rays 128, sensor_rays 512

Scaling
-------
A 64-variant study (4 window widths × 4 orientations × 2 climates × 2
transmittances: 4 coefficient sets, 8 series tasks) on 1 and on 2 worker
processes; speed-up = wall(1) / wall(2), wall time including cluster start.
Beside it, the speed-up the machine itself gives two processes at that moment
(:func:`machine_parallelism`: a fixed numpy job in one process, then in two at
once) — on a shared machine the sweep cannot beat it.
The cluster projection is a list-scheduling model built from the measured
1-worker run (see :func:`projection`).

Throughput
----------
10 window widths × 8 orientations × 5 climates × 4 transmittances = 1,600
variants (10 coefficient sets, 50 series tasks) on 2 workers: variants per
second and total wall time. Goal: under 10 minutes. The five climates are the
two pvlib TMY3 years and three files derived from them
(:data:`bench_common.DERIVED_CLIMATES`: site longitude moved 7.5° west or
east, weather moved 61 days later in the year).
"""

from __future__ import annotations

import argparse
import logging
import multiprocessing
import os
import time
from pathlib import Path
from typing import Any

import bench_common as bc

COARSE = {"subdivision": 2, "sun_spacing": 3.0, "sky_rays_per_patch": 8, "ground_rays": 1024,
          "element_size": 0.6, "element_rays": 128, "sensor_rays": 512}


def _busy_work(n: int) -> float:
    """A fixed CPU-bound numpy job (single-threaded); its wall time [s]."""
    import numpy as np

    t0 = time.perf_counter()
    rng = np.random.default_rng(0)
    a = rng.random((256, 256))
    for _ in range(n):
        a = np.tanh(a @ a / 256.0)
    return time.perf_counter() - t0


def machine_parallelism(n: int = 1500) -> dict[str, float]:
    """How much two processes gain over one on this machine right now.

    The same fixed job in one process, then in two processes at once (spawned,
    one BLAS thread each): ``2 × T(1) / T(2 at once)``; 2 on an idle 2-core
    machine, less when other work shares the cores.
    """
    env_threads = bc.single_thread_env()
    ctx = multiprocessing.get_context("spawn")
    saved = {k: os.environ.get(k) for k in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS")}
    os.environ.update({k: env_threads[k] for k in saved})
    try:
        with ctx.Pool(2) as pool:
            pool.map(_busy_work, [5, 5])  # start-up and imports
            one = pool.apply(_busy_work, (n,))
            t0 = time.perf_counter()
            pool.map(_busy_work, [n, n])
            both = time.perf_counter() - t0
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v
    return {"one_seconds": one, "two_at_once_seconds": both, "speedup": 2.0 * one / both}


def run(study: Path, workers: int, work: Path, tag: str) -> dict[str, Any]:
    """One ``run_study`` with a fresh cache and store; wall time and worker time by stage."""
    from luxsweep.sweep.run import run_study

    logging.getLogger("distributed").setLevel(logging.ERROR)
    load0 = bc.load_average()
    t, summary = bc.timed(lambda: run_study(study, work / f"{tag}.zarr", workers=workers,
                                            cache_dir=work / f"cache-{tag}",
                                            show_progress=False))
    if not summary.ok:
        raise RuntimeError(f"run {tag} failed: {summary.failed}")
    return {"workers": workers, "wall_seconds": t, "variants": summary.written,
            "variants_per_second": summary.written / t,
            "coefficient_sets": summary.coefficient_sets_computed,
            "worker_seconds": summary.timing, "load_average": [load0, bc.load_average()]}


def projection(one: dict[str, Any], n_tasks: int, n_sets: int,
               workers: tuple[int, ...] = (2, 8, 32, 128)) -> dict[str, Any]:
    """Wall time of the same sweep on N workers, projected from a measured run.

    Model (list scheduling of independent tasks after their coefficient set)::

        T(N) = T_fixed + max(W / N, c + s)

    ``W`` the measured worker-busy seconds (all stages), ``T_fixed`` = wall −
    W / n (n the workers of the measured run, assumed evenly loaded): planning,
    cluster start, client-side bookkeeping, consolidation;
    ``c`` the mean coefficient-set time and ``s`` the mean series-task time
    (the critical path of one geometry). Assumptions: workers as fast as one
    core here; the cache and the store on a shared filesystem whose latency
    adds nothing (measured here on a local disk); scheduler overhead per task
    (milliseconds) neglected; at most ``n_tasks`` workers are useful.
    """
    busy = float(sum(one["worker_seconds"].values()))
    fixed = max(one["wall_seconds"] - busy / one["workers"], 0.0)
    c = one["worker_seconds"].get("coefficients", 0.0) / max(n_sets, 1)
    s = (busy - one["worker_seconds"].get("coefficients", 0.0)) / max(n_tasks, 1)
    out = {"model": "T(N) = T_fixed + max(W/N, c + s)", "T_fixed": fixed, "W": busy,
           "c": c, "s": s, "n_series_tasks": n_tasks, "wall_seconds": {}}
    for n in workers:
        useful = min(n, n_tasks)
        out["wall_seconds"][str(n)] = fixed + max(busy / useful, c + s)
    return out


def scaling(work: Path) -> dict[str, Any]:
    climates = {"greensboro": bc.TMY3_GREENSBORO, "sand-point": bc.TMY3_SAND_POINT}
    vary = {"room.windows.0.width": [2.5, 4.0, 5.0, 6.5], "orientation": [0, 90, 180, 270],
            "climate": list(climates), "glazings.main.transmittance": [0.7, 0.4]}
    study = bc.write_study(work, "scaling", climates, vary, compute=COARSE)
    machine = machine_parallelism()
    one = run(study, 1, work, "w1")
    two = run(study, 2, work, "w2")
    busy1 = sum(one["worker_seconds"].values())
    busy2 = sum(two["worker_seconds"].values())
    return {
        "figure": "scaling",
        "ratio": one["wall_seconds"] / two["wall_seconds"],
        "goal": "(none stated) speed-up on 2 workers, ideal 2",
        "machine_speedup": machine["speedup"],
        "ratio_over_machine_speedup": one["wall_seconds"] / two["wall_seconds"]
        / machine["speedup"],
        "machine": machine,
        "busy_ratio_2_over_1": busy2 / busy1,
        "runs": [one, two],
        "variants": 64,
        "projection": projection(one, n_tasks=8, n_sets=4),
    }


def throughput(work: Path) -> dict[str, Any]:
    climates = bc.derived_climates(work / "climates")
    widths = [2.0, 2.5, 3.0, 3.5, 4.0, 4.5, 5.0, 5.5, 6.0, 6.5]
    vary = {"room.windows.0.width": widths, "orientation": list(range(0, 360, 45)),
            "climate": list(climates), "glazings.main.transmittance": [0.8, 0.65, 0.5, 0.35]}
    study = bc.write_study(work, "throughput", climates, vary, compute=COARSE)
    res = run(study, 2, work, "throughput")
    return {
        "figure": "sweep throughput",
        "ratio": res["variants_per_second"],
        "goal": "1600 variants in < 600 s on 2 cores",
        "met": bool(res["wall_seconds"] < 600.0 and res["variants"] == 1600),
        "climates": bc.DERIVED_CLIMATES,
        "run": res,
        "projection": projection(res, n_tasks=50, n_sets=10, workers=(8, 32, 128)),
    }


def main(include_throughput: bool = False) -> dict[str, Any]:
    out: dict[str, Any] = {}
    with bc.scratch("sweep") as work:
        out["scaling"] = scaling(work)
        if include_throughput:
            out["throughput"] = throughput(work)
    return out


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", help="write the figures to this file")
    parser.add_argument("--throughput", action="store_true",
                        help="also run the 1,600-variant throughput study")
    args = parser.parse_args()
    result = main(args.throughput)
    bc.report(result, args.json)
