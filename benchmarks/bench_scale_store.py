"""Results at sweep scale: store layout, summary reads, planning (the 36,000-variant study).

The study is the demo classroom (``configs/demo.yaml``, its coarse compute
settings and its two real TMY3 climates) swept over 36 orientations × 2
climates × 10 transmittances × 10 window widths × 5 sills = 36,000 variants,
50 coefficient sets, 100 series tasks of 360 variants each.

Three parts, each measured in this one process (plan in a subprocess):

1. ``plan``: wall time and peak memory (resident set growth over the imports)
   of ``make_plan`` for the full study, in a subprocess (``VmHWM`` reset through
   ``/proc/self/clear_refs`` after the imports; ``--plan-only`` runs this part
   alone);
2. ``run``: a real ``luxsweep run`` of a scaled-down study with the same
   structure and the same task shape (36 orientations × 2 climates × 10
   transmittances × 2 widths × 2 sills = 2,880 variants, 8 tasks of 360) on a
   local cluster of 2 workers: wall time, the write share of worker time, store
   files and bytes; then ``rank`` and ``report`` on it;
3. ``store``: the full 36,000-variant store made from the full plan's layout and
   filled task by task with the real results of part 2 (task ``k`` of the full
   study gets the values of real task ``k mod 8``: real numbers, so the
   compression is real; the values are not the full study's results): files,
   disk size (allocated blocks) against the bytes of the chunk files, the time
   to load ``sda`` for all variants, the per-sensor daylight autonomy's mean
   over sensors, ``rank`` and ``report``. The same values are also written into
   a store of the earlier layout (one variant per chunk) at the scale of part 2,
   and the ratios earlier / now are printed.

``--full-run`` also runs the full study for real (part 2 at full size; tens of
minutes on a shared 2-core machine). Not part of the test suite.
"""

from __future__ import annotations

import argparse
import contextlib
import io
import json
import os
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

import bench_common as bc
import numpy as np
import xarray as xr
import yaml

FULL_VARY = {
    "orientation": [float(a) for a in range(0, 360, 10)],
    "climate": ["humid-piedmont", "subarctic-coast"],
    "glazings.main.transmittance": [round(0.30 + 0.05 * k, 2) for k in range(10)],
    "room.windows.0.width": [round(2.0 + 0.5 * k, 1) for k in range(10)],
    "room.windows.0.sill": [0.3, 0.5, 0.7, 0.9, 1.1],
}
SCALED_VARY = {**FULL_VARY, "room.windows.0.width": [3.0, 5.5],
               "room.windows.0.sill": [0.5, 0.9]}


def write_study(folder: Path, vary: dict[str, list[Any]], name: str) -> Path:
    """The demo study (its climates copied beside it) with ``vary`` replaced."""
    from luxsweep.sweep.demo import demo_text, write_demo

    write_demo(folder)
    data = yaml.safe_load(demo_text())
    data["name"] = name
    data["vary"] = vary
    study = folder / f"{name}.yaml"
    study.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return study


PLAN_PROBE = """
import sys, time
from luxsweep.sweep.config import load_study
from luxsweep.sweep.plan import make_plan

def status(key):
    for line in open("/proc/self/status"):
        if line.startswith(key):
            return int(line.split()[1])

loaded = load_study(sys.argv[1])
with open("/proc/self/clear_refs", "w") as f:  # reset VmHWM to the current RSS
    f.write("5")
base = status("VmRSS:")
t0 = time.perf_counter()
plan = make_plan(loaded, None)
seconds = time.perf_counter() - t0
peak = status("VmHWM:")
print(seconds, (peak - base) / 1024, len(plan.variants), len(plan.tasks), len(plan.jobs))
"""


def plan_only(full: bool) -> dict[str, Any]:
    """Part 1 alone (``--plan-only``)."""
    with bc.scratch("scale-plan") as work:
        study = write_study(work, FULL_VARY if full else SCALED_VARY, "scale-plan")
        load0 = bc.load_average()
        out = plan_cost(study)
        return {**out, "load_average": [load0, bc.load_average()]}


def plan_cost(study: Path) -> dict[str, Any]:
    out = subprocess.run([sys.executable, "-c", PLAN_PROBE, str(study)], check=True,
                         capture_output=True, text=True).stdout.split()
    seconds, mb, n, tasks, sets = float(out[0]), float(out[1]), *map(int, out[2:])
    return {"seconds": seconds, "peak_mb": mb, "variants": n, "series_tasks": tasks,
            "coefficient_sets": sets, "ms_per_variant": 1e3 * seconds / n,
            "kb_per_variant": 1024 * mb / n}


def store_size(path: Path) -> dict[str, Any]:
    files = [p for p in path.rglob("*") if p.is_file()]
    chunks = [p for p in files if p.name != "zarr.json"]
    return {"files": len(files),
            "disk_bytes": sum(p.stat().st_blocks * 512 for p in files),
            "chunk_bytes": sum(p.stat().st_size for p in chunks),
            "disk_over_chunk_bytes": (sum(p.stat().st_blocks * 512 for p in files)
                                      / max(1, sum(p.stat().st_size for p in chunks)))}


def quiet(fn: Any, *args: Any) -> Any:
    with contextlib.redirect_stdout(io.StringIO()):
        return fn(*args)


def summary_reads(path: Path) -> dict[str, float]:
    """Seconds to open and load ``sda``, the sensor mean of daylight autonomy, rank, report."""
    from luxsweep.sweep.rank import rank_command
    from luxsweep.sweep.report import report_command

    def sda() -> np.ndarray:
        return xr.open_zarr(path)["sda"].values

    def da_mean() -> np.ndarray:
        return xr.open_zarr(path)["daylight_autonomy"].mean("sensor").values

    return {
        "sda_load": bc.timed(sda)[0],
        "daylight_autonomy_sensor_mean": bc.timed(da_mean)[0],
        "rank": bc.timed(lambda: quiet(rank_command, str(path), 10,
                                       str(path.with_suffix(".csv"))))[0],
        "report": bc.timed(lambda: quiet(report_command, str(path),
                                         str(path.with_suffix(".html"))))[0],
    }


def copy_store(source: xr.Dataset, plan: Any, path: Path, *, per_task: bool) -> float:
    """A store of ``plan``'s layout filled from ``source`` (a finished run of the scaled
    study) task by task; returns the seconds spent writing. ``per_task=False`` makes the
    earlier layout (one variant per chunk)."""
    from luxsweep.sweep import run as engine
    from luxsweep.sweep import store

    lay = engine._layout(plan)
    if not per_task:
        lay = store.StoreLayout(**{**lay.__dict__, "tasks": None})
    store.create_store(path, lay)
    sensor_vars, variant_vars = engine.store_variables(list(plan.loaded.study.metrics))
    src_bounds = [(int(a), int(b)) for a, b in _bounds_of(source)]
    cache = {}
    seconds = 0.0
    for k, (a, b) in enumerate(plan.task_bounds()):
        sa, sb = src_bounds[k % len(src_bounds)]
        if (sa, sb) not in cache:
            cache[sa, sb] = ({n: source[n].values[sa:sb] for n in sensor_vars},
                             {n: source[n].values[sa:sb] for n in variant_vars})
        sensor, variant = cache[sa, sb]
        n = min(b - a, sb - sa)
        t0 = time.perf_counter()
        store.write_variants(path, range(a, a + n), {m: v[:n] for m, v in sensor.items()},
                             {m: v[:n] for m, v in variant.items()})
        seconds += time.perf_counter() - t0
    store.consolidate(path)
    return seconds


def _bounds_of(ds: xr.Dataset) -> list[tuple[int, int]]:
    block = int(ds.attrs["variant_block"])
    n = ds.sizes["variant"]
    return [(a, min(a + block, n)) for a in range(0, n, block)]


def main(full_run: bool = False) -> dict[str, Any]:
    from luxsweep.sweep.config import load_study
    from luxsweep.sweep.plan import make_plan
    from luxsweep.sweep.run import run_study

    out: dict[str, Any] = {"figure": "results at sweep scale (issue: 36,000 variants)"}
    with bc.scratch("scale") as work:
        full = write_study(work, FULL_VARY, "scale-full")
        scaled = write_study(work, SCALED_VARY, "scale-part")
        load = [bc.load_average()]
        out["plan_full"] = plan_cost(full)
        out["plan_scaled"] = plan_cost(scaled)
        load.append(bc.load_average())

        runs = {"scaled": scaled, **({"full": full} if full_run else {})}
        for key, study in runs.items():
            results = work / f"{key}.zarr"
            t0 = time.perf_counter()
            summary = run_study(study, results, workers=2, cache_dir=work / "cache",
                                show_progress=False)
            wall = time.perf_counter() - t0
            assert summary.ok, summary.failed
            busy = sum(summary.timing.values())
            series_busy = busy - summary.timing.get("coefficients", 0.0)
            out[f"run_{key}"] = {
                "variants": summary.total, "wall_seconds": wall,
                "variants_per_second": summary.total / wall,
                "worker_seconds": summary.timing,
                "write_share_of_worker_time": summary.timing.get("write", 0.0) / busy,
                "write_share_of_series_time": summary.timing.get("write", 0.0) / series_busy,
                **store_size(results), "reads": summary_reads(results)}
            load.append(bc.load_average())

        source = xr.open_zarr(work / "scaled.zarr").load()
        plan_full = make_plan(load_study(full), None, read_climates=False)
        plan_part = make_plan(load_study(scaled), None, read_climates=False)
        stores = {}
        for key, plan, per_task in (("now_36000", plan_full, True),
                                    ("now_2880", plan_part, True),
                                    ("earlier_2880", plan_part, False)):
            path = work / f"{key}.zarr"
            write = copy_store(source, plan, path, per_task=per_task)
            stores[key] = {"client_write_seconds": write, **store_size(path),
                           "reads": summary_reads(path)}
            load.append(bc.load_average())
        out["stores"] = stores
        now, before = stores["now_2880"], stores["earlier_2880"]
        out["ratios_earlier_over_now_2880"] = {
            "files": before["files"] / now["files"],
            "disk_bytes": before["disk_bytes"] / now["disk_bytes"],
            "client_write_seconds": before["client_write_seconds"]
            / now["client_write_seconds"],
            **{k: before["reads"][k] / now["reads"][k] for k in now["reads"]},
        }
        out["load_average"] = load
    out["environment"] = bc.environment()
    return out


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", help="write the figures to this file")
    parser.add_argument("--full-run", action="store_true",
                        help="also run the full 36,000-variant study for real")
    parser.add_argument("--plan-only", action="store_true", help="part 1 only")
    args = parser.parse_args()
    os.environ.setdefault("PYTHONWARNINGS", "ignore")
    if args.plan_only:
        bc.report({"plan_full": plan_only(True), "plan_scaled": plan_only(False)}, args.json)
        raise SystemExit(0)
    result = main(args.full_run)
    bc.report(result, args.json)
    print(json.dumps({k: v for k, v in result.items() if k.startswith("ratios")}, indent=1))
