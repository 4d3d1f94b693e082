"""Reuse: marginal cost of one more orientation, climate or glazing variant (item 3).

Each figure is divided by the cost of computing one coefficient set of the
reference classroom (default settings, MF2) measured in the same run::

    reuse_x = marginal seconds of one more x / seconds of compute_coefficients

Marginal costs come from the engine's own series task (``sweep.run.series_task``,
in this process — one worker's work, including loading the cached coefficient
set, sky vectors, illuminance, metrics and writing the results), hourly steps,
all metric families:

* orientation: (T(9 orientations) − T(1 orientation)) / 8, one climate, τ = 0.7;
* glazing variant: (T(9 transmittances) − T(1)) / 8, one orientation (180°);
* climate: T(the series task of a second climate) for one orientation and one
  glazing variant — a new climate is a new series task (sky vectors, sun
  positions, weather file), so its marginal cost is a whole task, timed as a
  worker meeting the climate for the first time (its per-climate caches
  cleared before each run).

Each T is the best of five runs and the coefficient set the best of three (the least
disturbed on a shared machine).
Goal ≤ 0.01 each.
"""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

import bench_common as bc

CLIMATES = {"greensboro": bc.TMY3_GREENSBORO, "sand-point": bc.TMY3_SAND_POINT}
# two orientation classes at MF2: multiples of 30°, and 45° + 90° k
ORIENTATIONS = [180, 90, 270, 0, 45, 135, 225, 315, 30]
TRANSMITTANCES = [0.7, 0.65, 0.6, 0.55, 0.5, 0.45, 0.4, 0.35, 0.3]


def _forget_climates() -> None:
    """Drop what this process keeps per climate (a worker meeting a climate for the first
    time): the resampled records and step sun positions. The per-instant solar ephemeris
    (``run.CLIMATE_STEPS.ephemeris``) stays: every climate sits on the same reference
    year, so a worker shares it between climates in a real sweep too."""
    from luxsweep.sweep import run

    run.CLIMATE_STEPS.clear(ephemeris=False)


def _task_seconds(folder: Path, cache: Path, name: str, vary: dict[str, list[Any]],
                  climates: dict[str, Path], which: int = 0, repeat: int = 5,
                  fresh_climate: bool = False) -> tuple[float, dict[str, float]]:
    """Best wall time [s] of series task ``which`` of a study, and its stage timing."""
    study = bc.write_study(folder, name, climates, vary)
    best, timing = float("inf"), {}
    for i in range(repeat):
        results = folder / f"{name}-{i}.zarr"
        plan, _ = bc.plan_and_cache(study, cache, results)
        task = plan.tasks[which]
        if fresh_climate:
            _forget_climates()
        t, res = bc.timed(lambda plan=plan, task=task, results=results:
                          bc.run_series(plan, task, results, cache))
        if t < best:
            best, timing = t, res["timing"]
    return best, timing


def main(cache: Path | None = None) -> dict[str, Any]:
    from luxsweep.kernels.coefficients import Settings, compute_coefficients

    with bc.scratch("reuse") as work:
        cache = cache or work / "cache"
        one = {"greensboro": bc.TMY3_GREENSBORO}
        # warm-up (imports, first calls) and the cached coefficient set
        _task_seconds(work, cache, "warm", {}, one, repeat=1)
        load0 = bc.load_average()
        geometry, sensors = bc.reference_geometry()
        t_coeff = bc.best_of(lambda: compute_coefficients(geometry, sensors, Settings()), 3)
        t1, timing1 = _task_seconds(work, cache, "base", {}, one)
        t5o, timing5o = _task_seconds(work, cache, "orient9",
                                      {"orientation": ORIENTATIONS}, one)
        t5g, timing5g = _task_seconds(work, cache, "glazing9",
                                      {"glazings.main.transmittance": TRANSMITTANCES}, one)
        t_clim, timing_c = _task_seconds(work, cache, "climate2",
                                         {"climate": list(CLIMATES)}, CLIMATES, which=1,
                                         fresh_climate=True)
    marginal = {
        "orientation": (t5o - t1) / (len(ORIENTATIONS) - 1),
        "glazing_variant": (t5g - t1) / (len(TRANSMITTANCES) - 1),
        "climate": t_clim,
    }
    ratios = {k: v / t_coeff for k, v in marginal.items()}
    return {
        "figure": "reuse",
        "ratio": ratios,
        "goal": "<= 0.01 each",
        "met": {k: bool(v <= 0.01) for k, v in ratios.items()},
        "coefficient_seconds": t_coeff,
        "marginal_seconds": marginal,
        "task_seconds": {"base": t1, "orient9": t5o, "glazing9": t5g, "climate": t_clim},
        "stage_seconds": {"base": timing1, "orient9": timing5o, "glazing9": timing5g,
                          "climate": timing_c},
        "timestep_min": 60,
        "load_average": [load0, bc.load_average()],
    }


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", help="write the figures to this file")
    parser.add_argument("--cache", help="coefficient cache folder (shared between benchmarks)")
    args = parser.parse_args()
    result = main(Path(args.cache) if args.cache else None)
    bc.report(result, args.json)
