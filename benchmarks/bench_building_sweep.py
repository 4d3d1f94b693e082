"""A whole building swept end to end: 36 classrooms, 8 orientations × 2 climates × 3 glazings.

The building (invented, ours): three storeys, each a row of twelve classrooms
7.2 × 8 × 3 m (0.25 m walls, a 5 × 1.8 m front window each, written once with
``copies``) on a 2.4 m corridor (``occupied: false``), floors 3.25 m apart:
36 classrooms and 7,020 sensors on a 0.5 m grid. The study varies the
orientation (8 × 45°), the climate (the two TMY3 years bundled with pvlib) and
the façade glazing's transmittance (3 values) = 48 variants, one coefficient
set (the building), all metric families, hourly, default compute settings
unless ``--quick``; ``--spacing 0.28 --memory-limit 6`` gives the 21,528-sensor
version. ``luxsweep``'s own ``run_study`` on a ``LocalCluster`` of
2 single-threaded worker processes, fresh cache and store: wall time, worker
time by stage, peak resident memory of the workers (sampled) and of this
process. Goal of the issue: ≤ 30 min on 2 cores.

Run: ``.venv/bin/python benchmarks/bench_building_sweep.py [--quick] [--workers 2]``.
Not part of the test suite.
"""

from __future__ import annotations

import argparse
import json
import logging
import resource
import shutil
import threading
import time
from pathlib import Path
from typing import Any

import bench_common as bc
import psutil

LEVELS, PER_LEVEL = 3, 12
WIDTH, DEPTH, HEIGHT, WALL, CORRIDOR = 7.2, 8.0, 3.0, 0.25, 2.4
QUICK = {"subdivision": 1, "sun_spacing": 6.0, "sky_rays_per_patch": 8, "ground_rays": 128,
         "sensor_rays": 256, "element_rays": 64}


def study_text(settings: dict[str, Any], spacing: float = 0.5) -> str:
    """The study file of the building (module notes)."""
    step = WIDTH + WALL
    lines = ["name: kestrel-row-school", "climates:", "  coastal: climates/coastal.csv",
             "  inland: climates/inland.csv", "spaces:"]
    for level in range(LEVELS):
        z = level * (HEIGHT + WALL)
        lines += [
            f"  - name: classroom-l{level}",
            f"    origin: [0.0, 0.0, {z}]",
            f"    width: {WIDTH}", f"    depth: {DEPTH}", f"    height: {HEIGHT}",
            f"    thickness: {WALL}",
            "    reflectance: {floor: 0.2, walls: 0.5, ceiling: 0.7}",
            "    windows:",
            "      - {wall: front, width: 5.0, sill: 0.9, head: 2.7, glazing: facade}",
            f"    copies: {{count: {PER_LEVEL}, step: [{step}, 0.0, 0.0]}}",
            f"  - name: corridor-l{level}",
            f"    origin: [0.0, {DEPTH + WALL}, {z}]",
            f"    width: {PER_LEVEL * step - WALL:.2f}", f"    depth: {CORRIDOR}",
            f"    height: {HEIGHT}", f"    thickness: {WALL}", "    occupied: false",
        ]
    lines += [
        "glazings:", "  facade: {transmittance: 0.70, panes: 2}",
        "ground_reflectance: 0.2",
        f"grid: {{height: 0.8, spacing: {spacing}, margin: 0.5}}",
        'occupancy: {start: "08:00", end: "16:00", days: weekdays}',
        "timestep: 60",
        "vary:",
        "  orientation: [0, 45, 90, 135, 180, 225, 270, 315]",
        "  climate: [coastal, inland]",
        "  glazings.facade.transmittance: [0.70, 0.55, 0.40]",
        "metrics: [daylight_factor, daylight_autonomy, udi, sda_ase, en17037]",
    ]
    if settings:
        lines.append("compute: " + json.dumps(settings))
    return "\n".join(lines) + "\n"


def _sample_worker_memory(stop: threading.Event, peak: dict[str, float]) -> None:
    me = psutil.Process()
    while not stop.is_set():
        rss = 0.0
        for child in me.children(recursive=True):
            try:
                rss = max(rss, child.memory_info().rss)
            except psutil.Error:
                pass
        peak["worker_rss_max"] = max(peak.get("worker_rss_max", 0.0), rss)
        stop.wait(0.5)


def main(settings: dict[str, Any], workers: int, spacing: float = 0.5) -> dict[str, Any]:
    from luxsweep.sweep.run import run_study

    logging.getLogger("distributed").setLevel(logging.ERROR)
    with bc.scratch("building-sweep") as work:
        (work / "climates").mkdir()
        shutil.copyfile(bc.TMY3_GREENSBORO, work / "climates" / "coastal.csv")
        shutil.copyfile(bc.TMY3_SAND_POINT, work / "climates" / "inland.csv")
        study = work / "study.yaml"
        study.write_text(study_text(settings, spacing))
        peak: dict[str, float] = {}
        stop = threading.Event()
        sampler = threading.Thread(target=_sample_worker_memory, args=(stop, peak), daemon=True)
        sampler.start()
        load0 = bc.load_average()
        t0 = time.perf_counter()
        summary = run_study(study, work / "r.zarr", workers=workers, cache_dir=work / "cache",
                            show_progress=False)
        wall = time.perf_counter() - t0
        stop.set()
        import xarray as xr

        ds = xr.open_zarr(work / "r.zarr")
        out = {
            "ok": summary.ok, "variants": summary.written, "sensors": int(ds.sizes["sensor"]),
            "spaces": int(ds.sizes.get("space", 1)), "wall_seconds": wall,
            "coefficient_sets": summary.coefficient_sets_computed,
            "worker_seconds": summary.timing, "workers": workers,
            "worker_peak_rss_gib": peak.get("worker_rss_max", 0.0) / 2**30,
            "client_peak_rss_gib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20,
            "load_average": [load0, bc.load_average()], "settings": settings or "default",
        }
    print(f"{out['variants']} variants, {out['sensors']} sensors, {out['spaces']} spaces, "
          f"{out['coefficient_sets']} coefficient set(s): wall {wall:.0f} s on {workers} "
          f"workers; worker time " + ", ".join(f"{k} {v:.0f} s" for k, v in
                                                summary.timing.items())
          + f"; peak worker RSS {out['worker_peak_rss_gib']:.2f} GiB, client "
          f"{out['client_peak_rss_gib']:.2f} GiB; load {out['load_average']}")
    return out


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="coarse ray counts")
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--spacing", type=float, default=0.5, help="grid spacing [m]")
    parser.add_argument("--memory-limit", type=float,
                        help="compute.memory_limit [GiB] (a finer grid needs more than 2)")
    parser.add_argument("--json", help="write the figures to this file")
    args = parser.parse_args()
    chosen = dict(QUICK) if args.quick else {}
    if args.memory_limit:
        chosen["memory_limit"] = args.memory_limit
    result = main(chosen, args.workers, args.spacing)
    if args.json:
        Path(args.json).write_text(json.dumps(result, indent=2))
