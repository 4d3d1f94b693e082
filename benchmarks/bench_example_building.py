"""Benchmark: the example building (``examples/school-wing.yaml``) against its spaces as rooms.

Measures, for the coefficient set that ``luxsweep run examples/school-wing.yaml``
computes (the study's own coarse ``compute:`` settings):

- *building*: the whole building in one set (every space shades and reflects
  for the others; internal openings included), sensors of every occupied space;
- *rooms*: every distinct occupied space alone as a ``parametric_room`` with its
  outside windows only (its internal openings closed, no obstructions: nothing
  around it), its own grid. Copies of one space are the same room, so a sweep of
  rooms computes each distinct room once; "one by one" multiplies by the number
  of spaces, as separate studies without a shared cache would.

Each case runs in a fresh interpreter with one BLAS thread (a Dask worker slot);
figures: wall time of :func:`kernels.coefficients.compute_coefficients` and
peak resident memory (``ru_maxrss``, including the interpreter and modules),
and the one-minute load average before and after (the machine may be shared).

Run: ``python examples/get_climates.py`` once, then
``.venv/bin/python benchmarks/bench_example_building.py [--json FILE]``.
Not part of the test suite.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

STUDY = Path(__file__).resolve().parent.parent / "examples" / "school-wing.yaml"


def _plan() -> Any:
    from luxsweep.sweep.config import load_study
    from luxsweep.sweep.plan import make_plan

    return make_plan(load_study(STUDY), read_climates=False)


def _rooms(plan: Any) -> dict[str, tuple[Any, Any, int]]:
    """Distinct occupied space -> (room geometry, its sensors, number of spaces it stands for)."""
    from luxsweep.kernels.geometry import parametric_room, sensor_grid

    job = next(iter(plan.jobs.values()))
    internal = set(job.geometry.internal_sets)
    study = plan.variants[0].study
    out = {}
    for sp in study.spaces:
        if not sp.occupied:
            continue
        windows = [w.model_dump() for w in sp.windows if w.glazing not in internal]
        panes = {w["glazing"]: study.glazings[w["glazing"]].panes for w in windows}
        geometry = parametric_room(sp.width, sp.depth, sp.height, windows,
                                   sp.reflectance.model_dump(), panes, thickness=sp.thickness,
                                   overhang=sp.overhang.model_dump() if sp.overhang else None)
        grid = sp.grid or study.grid
        sensors = sensor_grid(sp.width, sp.depth, grid.height, grid.spacing, grid.margin)
        out[sp.name] = (geometry, sensors, sp.copies.count if sp.copies else 1)
    return out


def child(case: str) -> dict[str, Any]:
    """One case in this fresh process: wall time and peak memory."""
    import resource

    from luxsweep.kernels.coefficients import compute_coefficients

    plan = _plan()
    job = next(iter(plan.jobs.values()))
    if case == "building":
        geometry, sensors, count = job.geometry, job.sensors, 1
    else:
        geometry, sensors, count = _rooms(plan)[case]
    t0 = time.perf_counter()
    coeffs = compute_coefficients(geometry, sensors, job.settings)
    seconds = time.perf_counter() - t0
    return {"case": case, "spaces": count, "sensors": int(sensors.shape[0]),
            "triangles": geometry.n_triangles, "seconds": seconds,
            "crossed_twice": coeffs.crossed_twice,
            "peak_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}


def run_child(case: str) -> dict[str, Any]:
    env = dict(os.environ, OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1", MKL_NUM_THREADS="1")
    done = subprocess.run([sys.executable, str(Path(__file__).resolve()), "--child", case],
                          env=env, capture_output=True, text=True, check=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


def main() -> dict[str, Any]:
    load = [os.getloadavg()[0]]
    names = list(_rooms(_plan()))
    whole = run_child("building")
    rooms = [run_child(name) for name in names]
    load.append(os.getloadavg()[0])
    print(f"building: {whole['seconds']:.1f} s, peak {whole['peak_mib']:.0f} MiB, "
          f"{whole['sensors']} sensors, {whole['triangles']} triangles, "
          f"{whole['crossed_twice']} rays refused (two outside panes)")
    for r in rooms:
        print(f"room '{r['case']}' alone (stands for {r['spaces']} spaces): {r['seconds']:.1f} s, "
              f"peak {r['peak_mib']:.0f} MiB, {r['sensors']} sensors, {r['triangles']} triangles")
    distinct = sum(r["seconds"] for r in rooms)
    one_by_one = sum(r["seconds"] * r["spaces"] for r in rooms)
    print(f"rooms: distinct {distinct:.1f} s, one by one {one_by_one:.1f} s; building / "
          f"distinct {whole['seconds'] / distinct:.2f}, building / one by one "
          f"{whole['seconds'] / one_by_one:.2f}; peak memory building / largest room "
          f"{whole['peak_mib'] / max(r['peak_mib'] for r in rooms):.2f}")
    print(f"load average (1 min) before / after: {load[0]:.2f} / {load[1]:.2f}")
    return {"building": whole, "rooms": rooms, "load": load}


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--child")
    parser.add_argument("--json", help="also write the figures to this JSON file")
    args = parser.parse_args()
    if args.child:
        print(json.dumps(child(args.child)))
    else:
        result = main()
        if args.json:
            Path(args.json).write_text(json.dumps(result, indent=2) + "\n")
