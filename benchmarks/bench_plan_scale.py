"""Planning at sweep scale: ``make_plan`` of 36,000 and 1,000,000 variants, and cold ``plan``.

Studies (the demo classroom, ``configs/demo.yaml``, with its two real TMY3
climates and coarse compute settings):

- ``36k``: the study of ``bench_scale_store.py`` — 36 orientations × 2 climates
  × 10 transmittances × 10 window widths × 5 sills = 36,000 variants, 50
  geometries, 100 series tasks;
- ``1m``: 100 orientations × 2 climates × 50 transmittances × 10 window widths
  × 10 sills = 1,000,000 variants, 100 geometries, 200 series tasks (the cost of
  a plan grows with distinct geometries and series tasks, which stay few, and
  with the variants only through arrays and the bulk id hash).

Each figure is measured in a fresh subprocess: wall time of ``make_plan`` (the
study already loaded, the kernel imports it triggers included) and its peak
memory: ``VmHWM`` after ``make_plan`` minus ``VmRSS`` before it, with the
high-water mark reset through ``/proc/self/clear_refs``; then the same for a
second ``make_plan`` in that process (``warm_*``: kernels imported, weather files
in the page cache). Then the cold wall time
of the command ``luxsweep plan STUDY`` (a new interpreter, imports included),
and its import share (``python -X importtime``).

Not part of the test suite.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

import bench_common as bc
from bench_scale_store import FULL_VARY, write_study

MILLION_VARY = {
    **FULL_VARY,
    "orientation": [round(3.6 * k, 1) for k in range(100)],
    "glazings.main.transmittance": [round(0.30 + 0.01 * k, 2) for k in range(50)],
    "room.windows.0.sill": [round(0.3 + 0.1 * k, 1) for k in range(10)],
}

PROBE = """
import sys, time, warnings
warnings.simplefilter("ignore")
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
n, tasks, sets = len(plan.variants), len(plan.tasks), len(plan.jobs)
del plan
with open("/proc/self/clear_refs", "w") as f:  # again, the kernels now imported
    f.write("5")
base_warm = status("VmRSS:")
t0 = time.perf_counter()
plan = make_plan(loaded, None)
warm = time.perf_counter() - t0
peak_warm = status("VmHWM:")
print(seconds, (peak - base) / 1024, n, tasks, sets, warm, (peak_warm - base_warm) / 1024)
"""


def plan_cost(study: Path) -> dict[str, Any]:
    out = subprocess.run([sys.executable, "-c", PROBE, str(study)], check=True,
                         capture_output=True, text=True).stdout.split()
    seconds, mb, n, tasks, sets = float(out[0]), float(out[1]), *map(int, out[2:5])
    return {"seconds": seconds, "peak_mb": mb, "variants": n, "series_tasks": tasks,
            "coefficient_sets": sets, "us_per_variant": 1e6 * seconds / n,
            "bytes_per_variant": 2**20 * mb / n,
            "warm_seconds": float(out[5]), "warm_peak_mb": float(out[6])}


def cold_plan(study: Path) -> dict[str, Any]:
    """Wall time of ``luxsweep plan STUDY`` in a new interpreter, and its imports."""
    cmd = [sys.executable, "-m", "luxsweep.sweep.cli", "plan", str(study)]
    t0 = time.perf_counter()
    subprocess.run(cmd, check=True, capture_output=True, text=True)
    wall = time.perf_counter() - t0
    proc = subprocess.run([sys.executable, "-X", "importtime", *cmd[1:]], check=True,
                          capture_output=True, text=True)
    imports, top = 0.0, []
    for line in proc.stderr.splitlines():
        parts = line[len("import time:"):].split("|")
        if not line.startswith("import time:") or len(parts) != 3 or not parts[1].strip().isdigit():
            continue
        name = parts[2]
        if len(name) - len(name.lstrip()) == 1:  # a top-level import (nested ones indent more)
            imports += int(parts[1]) / 1e6
            top.append((int(parts[1]) / 1e6, name.strip()))
    top.sort(reverse=True)
    return {"wall_seconds": wall, "import_seconds": imports,
            "largest_imports": [{"module": m, "seconds": s} for s, m in top[:8]]}


def main(which: list[str]) -> dict[str, Any]:
    out: dict[str, Any] = {"figure": "planning at sweep scale (issue 18 item 3)"}
    studies = {"36k": FULL_VARY, "1m": MILLION_VARY}
    with bc.scratch("plan-scale") as work:
        for name in which:
            folder = work / name
            folder.mkdir()
            study = write_study(folder, studies[name], f"plan-{name}")
            load0 = bc.load_average()
            entry = plan_cost(study)
            if name == "36k":
                entry["cold_plan_command"] = cold_plan(study)
            entry["load_average"] = [load0, bc.load_average()]
            out[name] = entry
    out["environment"] = bc.environment()
    return out


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", help="write the figures to this file")
    parser.add_argument("--only", choices=["36k", "1m"], action="append",
                        help="measure only this study (repeatable)")
    args = parser.parse_args()
    os.environ.setdefault("PYTHONWARNINGS", "ignore")
    bc.report(main(args.only or ["36k", "1m"]), args.json)
