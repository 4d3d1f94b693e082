"""Cost of the rest of the verdict: the demo's series stage with and without it.

The demo study (``configs/demo.yaml``: 96 variants, 4 geometries, 2 climates)
is run twice through the engine's own series tasks in this process
(:func:`sweep.run.series_task`, coefficient sets cached beforehand):

* **daylight only** — the five default metric families, no ``lighting:``,
  ``sunlight:`` or ``views:``;
* **full verdict** — the demo as shipped: the default families plus EN 17037
  exposure to sunlight, view out, electric lighting energy and glare at the two
  view positions.

Each figure is the best of three passes over every series task, after one
warm-up pass (which also caches the views' own coefficient sets, so both sides
read every coefficient set from the cache). The ratio full ÷ daylight-only is
measured in one run, on the same machine state, with the same BLAS threads.

Usage: ``python benchmarks/bench_verdict.py [--repeat 3] [--json out.json]``
"""

from __future__ import annotations

import argparse
import shutil
from pathlib import Path

import bench_common as bc
import yaml

REPO = Path(__file__).resolve().parents[1]
VERDICT_KEYS = ("lighting", "sunlight", "views")


def demo_studies(folder: Path) -> tuple[Path, Path]:
    """The demo study as shipped and its daylight-only twin, written into ``folder``."""
    (folder / "climates").mkdir(parents=True, exist_ok=True)
    shutil.copyfile(bc.TMY3_GREENSBORO, folder / "climates" / bc.TMY3_GREENSBORO.name)
    shutil.copyfile(bc.TMY3_SAND_POINT, folder / "climates" / bc.TMY3_SAND_POINT.name)
    text = (REPO / "configs" / "demo.yaml").read_text(encoding="utf-8")
    full = folder / "full.yaml"
    full.write_text(text, encoding="utf-8")
    data = yaml.safe_load(text)
    for key in VERDICT_KEYS:
        data.pop(key, None)
    data["metrics"] = ["daylight_factor", "daylight_autonomy", "udi", "sda_ase", "en17037"]
    data["rank"]["prefer"] = [p for p in data["rank"]["prefer"]
                              if p["metric"] != "lighting_energy"]
    plain = folder / "daylight.yaml"
    plain.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return plain, full


def series_seconds(study: Path, work: Path, repeat: int) -> tuple[float, dict[str, float], int]:
    """Best-of-``repeat`` wall time [s] of every series task of ``study``, the stage
    seconds of the last pass summed over its tasks, and the task count."""
    cache, results = work / "cache", work / f"{study.stem}.zarr"
    plan, _ = bc.plan_and_cache(study, cache, results)
    stages: dict[str, float] = {}

    def one_pass() -> None:
        stages.clear()
        for task in plan.tasks:
            out = bc.run_series(plan, task, results, cache)
            for name, seconds in out.get("timing", {}).items():
                stages[name] = stages.get(name, 0.0) + seconds

    one_pass()  # warm-up: one-off set-up, the views' coefficient sets
    best = bc.best_of(one_pass, repeat)
    return best, {k: round(v, 3) for k, v in stages.items()}, len(plan.tasks)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--json", default=None)
    args = parser.parse_args()
    env = bc.environment()
    with bc.scratch("verdict-") as work:
        plain, full = demo_studies(work)
        t_plain, s_plain, n_tasks = series_seconds(plain, work, args.repeat)
        t_full, s_full, _ = series_seconds(full, work, args.repeat)
    bc.report({
        "study": "configs/demo.yaml (96 variants), series tasks in one process",
        "series_tasks": n_tasks,
        "daylight_only_s": round(t_plain, 3),
        "full_verdict_s": round(t_full, 3),
        "ratio_full_over_daylight_only": round(t_full / t_plain, 3),
        "stage_seconds_daylight_only": s_plain,
        "stage_seconds_full_verdict": s_full,
        "load_average_1min_at_end": bc.load_average(),
        "environment": env,
    }, args.json)


if __name__ == "__main__":
    main()
