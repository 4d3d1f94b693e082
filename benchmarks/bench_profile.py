"""Profiles (cProfile) of the stages that miss their goals: hotspots by own time.

* ``coefficients`` — ``compute_coefficients`` of the reference classroom,
  default settings (item 1's stage);
* ``series`` — the engine's series task of item 2 (12 orientations, 15-minute
  steps, MF2, 3 glazing variants), which also carries item 3's marginal costs.

For each, the functions with the largest own time (``tottime``) and their
cumulative time, as shares of the profiled wall time. cProfile adds a little
overhead per Python call; the hot paths here are numpy and Embree calls, so the
shares are representative.
"""

from __future__ import annotations

import argparse
import cProfile
import pstats
from pathlib import Path
from typing import Any

import bench_common as bc
import bench_series as bs

TOP = 15


def _top(profile: cProfile.Profile, total: float) -> list[dict[str, Any]]:
    stats = pstats.Stats(profile)
    rows = []
    for (file, line, func), (_cc, nc, tt, ct, _callers) in stats.stats.items():
        short = str(Path(file).relative_to(bc.REPO)) if file.startswith(str(bc.REPO)) else (
            Path(file).name if file != "~" else "")
        rows.append({"function": f"{short}:{line}({func})" if short else func, "calls": nc,
                     "own_seconds": tt, "own_share": tt / total, "cumulative_seconds": ct,
                     "cumulative_share": ct / total})
    rows.sort(key=lambda r: -r["own_seconds"])
    return rows[:TOP]


def profile_coefficients() -> dict[str, Any]:
    from luxsweep.kernels.coefficients import Settings, compute_coefficients

    geometry, sensors = bc.reference_geometry()
    compute_coefficients(geometry, sensors[:2], Settings(sky_rays_per_patch=1, ground_rays=16,
                                                           element_rays=16, sensor_rays=16))
    prof = cProfile.Profile()
    t, _ = bc.timed(lambda: prof.runcall(compute_coefficients, geometry, sensors, Settings()))
    return {"seconds": t, "top": _top(prof, t)}


def profile_series(cache: Path, work: Path) -> dict[str, Any]:
    study = bs.series_study(work, 15)
    results = work / "profile.zarr"
    plan, _ = bc.plan_and_cache(study, cache, results)
    (task,) = plan.tasks
    prof = cProfile.Profile()
    t, res = bc.timed(lambda: prof.runcall(bc.run_series, plan, task, results, cache))
    return {"seconds": t, "stage_seconds": res["timing"], "top": _top(prof, t)}


def main(cache: Path | None = None) -> dict[str, Any]:
    with bc.scratch("profile") as work:
        cache = cache or work / "cache"
        out = {"coefficients": profile_coefficients(),
               "series": profile_series(cache, work)}
    out["load_average"] = [bc.load_average()] * 2
    return out


def _print(result: dict[str, Any]) -> None:
    for stage in ("coefficients", "series"):
        r = result[stage]
        print(f"\n{stage}: {r['seconds']:.1f} s")
        for row in r["top"]:
            print(f"  {100 * row['own_share']:5.1f} % own  {100 * row['cumulative_share']:5.1f} %"
                  f" cum  {row['calls']:>7}  {row['function']}")


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", help="write the figures to this file")
    parser.add_argument("--cache", help="coefficient cache folder (shared between benchmarks)")
    args = parser.parse_args()
    result = main(Path(args.cache) if args.cache else None)
    _print(result)
    bc.report(result, args.json, show=False)
