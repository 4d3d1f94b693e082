"""Series efficiency (item 2) and worker memory (item 7) of the time-series stage.

Series efficiency
-----------------
One geometry (the reference classroom, default settings, MF2), 12 orientations
(0°, 30°, …, 330°), one climate (Greensboro TMY3), 15-minute steps, 3 glazing
variants (τ = 0.7, 0.5, 0.35), no operable shading, all metric families. The
stage is the engine's own ``sweep.run.series_task`` run in this process (one
Dask worker's work, after one small warm-up task: a worker's one-off set-up such
as the sun-point triangulation is not part of every task): sky vectors →
illuminance → metrics, plus loading the coefficient set and writing the
results, which are reported apart. The
reference is the bare numpy matmuls of the same shapes: for every call the
engine makes to :func:`kernels.timeseries.unit_illuminance` (recorded by a wrapper
that calls through), one float32 product (n_sensors × n_basis) @ (n_basis ×
n_orient·n_steps) per glazing set, on random data. Goal: sky + illuminance +
metrics ≤ 1.5 × the bare matmuls.

Memory
------
Peak resident memory of a process running the same series task, measured in a
fresh subprocess (the kernel's high-water mark ``VmHWM``, reset before the
stage, and the resident size just before it), for 60-minute steps (8,760 steps)
and 15-minute steps (35,040): a series four times longer. A weather file must
hold a whole year (the reader refuses half a year), so the length of the series
is varied through the time step instead. Bounded by chunking means the peak
grows far less than the 4× longer series would need if it were held at once.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

import bench_common as bc
import numpy as np

ORIENTATIONS = [float(a) for a in range(0, 360, 30)]
TRANSMITTANCES = [0.7, 0.5, 0.35]


def series_study(folder: Path, timestep: int = 15) -> Path:
    return bc.write_study(
        folder, f"series-{timestep}min", {"greensboro": bc.TMY3_GREENSBORO},
        {"orientation": ORIENTATIONS, "glazings.main.transmittance": TRANSMITTANCES},
        timestep=timestep,
    )


class ShapeRecorder:
    """Records the shapes of every ``kernels.timeseries.unit_illuminance`` call (calls through)."""

    def __init__(self) -> None:
        self.calls: list[tuple[int, int, int, int, int]] = []
        self.seconds = 0.0

    def __enter__(self) -> ShapeRecorder:
        import luxsweep.kernels.timeseries as ts

        self._original = ts.unit_illuminance

        def wrapper(coeffs: Any, sky: Any, **kwargs: Any) -> Any:
            n_o, n_b = np.shape(sky.basis_index)
            n_t = np.shape(sky.basis_sky)[2]
            self.calls.append((coeffs.n_sensors, n_b, n_o, n_t, len(coeffs.glazing_sets)))
            t0 = time.perf_counter()
            out = self._original(coeffs, sky, **kwargs)
            self.seconds += time.perf_counter() - t0
            return out

        ts.unit_illuminance = wrapper
        return self

    def __exit__(self, *exc: Any) -> None:
        import luxsweep.kernels.timeseries as ts

        ts.unit_illuminance = self._original


def bare_matmul_seconds(calls: list[tuple[int, int, int, int, int]], repeat: int = 2) -> float:
    """Best time [s] of the float32 products of the recorded shapes, one per glazing set."""
    rng = np.random.default_rng(0)
    shapes = {(s, b, o * t) for s, b, o, t, _ in calls}
    data = {k: (rng.random((k[0], k[1]), dtype=np.float32),
                rng.random((k[1], k[2]), dtype=np.float32)) for k in shapes}

    def run() -> None:
        for s, b, o, t, n_sets in calls:
            c, sky = data[(s, b, o * t)]
            for _ in range(n_sets):
                _ = c @ sky

    return bc.best_of(run, repeat)


def warm_up(cache: Path, work: Path) -> float:
    """Run one small series task (one orientation, hourly) in this process [s].

    What a worker does once and keeps for every later task — imports, first
    calls, the sun-point triangulation (``kernels.sun``, ~0.15 s per process and
    spacing) — then stays out of the measured task, as on a worker of a sweep.
    """
    study = bc.write_study(work, "warm-up", {"greensboro": bc.TMY3_GREENSBORO},
                           {"orientation": [180.0]}, timestep=60)
    results = work / "warm-up.zarr"
    plan, _ = bc.plan_and_cache(study, cache, results)
    t, _ = bc.timed(lambda: bc.run_series(plan, plan.tasks[0], results, cache))
    return t


def series_efficiency(cache: Path, work: Path) -> dict[str, Any]:
    study = series_study(work, 15)
    results = work / "series.zarr"
    plan, _ = bc.plan_and_cache(study, cache, results)
    (task,) = plan.tasks
    t_warm = warm_up(cache, work)
    load0 = bc.load_average()
    with ShapeRecorder() as rec:
        t_wall, res = bc.timed(lambda: bc.run_series(plan, task, results, cache))
    timing = res["timing"]
    t_bare = bare_matmul_seconds(rec.calls)
    stage = timing["sky"] + timing["illuminance"] + timing["metrics"]
    n_cols = sum(o * t for _, _, o, t, _ in rec.calls)
    return {
        "figure": "series efficiency",
        "ratio": stage / t_bare,
        "ratio_with_load_and_write": t_wall / t_bare,
        "goal": "<= 1.5",
        "met": bool(stage / t_bare <= 1.5),
        "stage_seconds": timing,
        "wall_seconds": t_wall,
        "bare_matmul_seconds": t_bare,
        "illuminance_calls": len(rec.calls),
        "matmul_columns": n_cols,
        "shape": {"sensors": rec.calls[0][0], "basis": rec.calls[0][1],
                  "orientations": len(ORIENTATIONS), "glazing_variants": len(TRANSMITTANCES),
                  "timestep_min": 15},
        "variants": len(task.members),
        "warm_up_seconds": t_warm,
        "load_average": [load0, bc.load_average()],
    }


# ---------------------------------------------------------------------------
# memory (subprocess)


def _status_kib(field: str) -> int:
    """A ``VmHWM``/``VmRSS`` line of /proc/self/status [KiB] (Linux)."""
    with open("/proc/self/status", encoding="ascii") as fh:
        for line in fh:
            if line.startswith(field + ":"):
                return int(line.split()[1])
    raise RuntimeError(f"{field} not in /proc/self/status")


def memory_probe(cache: Path, work: Path, timestep: int) -> dict[str, Any]:
    """In a fresh process: resident memory before and peak during one series task.

    The peak is the kernel's high-water mark ``VmHWM``, reset just before the
    stage by writing 5 to ``/proc/self/clear_refs`` (Linux ≥ 4.0), so setup
    (imports, plan, store creation) does not count. ``ru_maxrss`` is not used:
    it carries the parent's peak across fork + exec.
    """
    study = series_study(work, timestep)
    results = work / f"memory-{timestep}.zarr"
    plan, _ = bc.plan_and_cache(study, cache, results)
    (task,) = plan.tasks
    setup_peak = _status_kib("VmHWM")
    with open("/proc/self/clear_refs", "w", encoding="ascii") as fh:
        fh.write("5")
    before = _status_kib("VmRSS")
    t, _ = bc.timed(lambda: bc.run_series(plan, task, results, cache))
    peak = _status_kib("VmHWM")
    return {"timestep_min": timestep, "steps": int(8760 * 60 // timestep),
            "rss_before_stage_mib": before / 1024, "peak_rss_mib": peak / 1024,
            "stage_increase_mib": (peak - before) / 1024, "setup_peak_mib": setup_peak / 1024,
            "seconds": t}


def memory(cache: Path, work: Path) -> dict[str, Any]:
    out: dict[str, Any] = {"figure": "worker memory", "runs": []}
    for step in (60, 15):
        proc = subprocess.run(
            [sys.executable, __file__, "--memory-probe", str(step), "--cache", str(cache),
             "--work", str(work / f"mem{step}")],
            capture_output=True, text=True, env=bc.single_thread_env(), check=False)
        if proc.returncode != 0:
            raise RuntimeError(f"memory probe ({step} min) failed:\n{proc.stderr[-3000:]}")
        run = json.loads(proc.stdout.strip().splitlines()[-1])
        out["runs"].append(run)
    hourly, quarter = out["runs"]
    # what the 15-minute year would need if the series of all orientations and
    # glazing variants were held at once (total + direct sun, float32, daylight steps)
    n_s = len(bc.reference_geometry()[1])
    full_year = 2 * 4 * len(ORIENTATIONS) * len(TRANSMITTANCES) * n_s * (35040 // 2)
    out["series_length_ratio"] = 4.0
    out["peak_ratio"] = quarter["peak_rss_mib"] / hourly["peak_rss_mib"]
    out["stage_increase_ratio"] = quarter["stage_increase_mib"] / max(
        hourly["stage_increase_mib"], 1e-9)
    out["unchunked_series_mib_15min"] = full_year / 2**20
    out["goal"] = "peak bounded by chunking (peak ratio far below the series length ratio 4)"
    out["met"] = bool(out["peak_ratio"] < 1.5)
    return out


def main(cache: Path | None = None) -> dict[str, Any]:
    with bc.scratch("series") as work:
        cache = cache or work / "cache"
        series = series_efficiency(cache, work)
        mem = memory(cache, work)
    return {"series": series, "memory": mem}


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", help="write the figures to this file")
    parser.add_argument("--cache", help="coefficient cache folder (shared between benchmarks)")
    parser.add_argument("--memory-probe", type=int, help=argparse.SUPPRESS)
    parser.add_argument("--work", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.memory_probe:
        print(json.dumps(memory_probe(Path(args.cache), Path(args.work), args.memory_probe)))
        sys.exit(0)
    result = main(Path(args.cache) if args.cache else None)
    bc.report(result, args.json)
