"""Benchmark: coefficient set of a small building against its spaces one by one.

The building: two storeys, each three classrooms 7.2 × 8 × 3 m side by side
(0.25 m walls, one 5 × 1.8 m front window each) with a 2 m corridor behind
them (unoccupied: geometry only), floors 3.25 m apart. Sensors: every
classroom's grid (0.75 m, 0.5 m margin, 0.8 m) — 540 points in one set.
One by one: the same classroom as a single room (``parametric_room``), its own
90 sensors, computed six times (the count of a study that runs the spaces as
separate rooms; identical rooms share a coefficient key, so a sweep would
compute it once — the ratio against one computation is printed too).

Each case runs in a fresh interpreter with one BLAS thread (like a Dask
worker slot); the figures are its wall time and peak resident memory
(``ru_maxrss``, which includes the interpreter and modules), with the
one-minute load average before and after. Default
:class:`kernels.coefficients.Settings` unless ``--quick``.

Run: ``.venv/bin/python benchmarks/bench_building.py [--quick]``. Not part of
the test suite.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

WIDTH, DEPTH, HEIGHT, WALL, CORRIDOR = 7.2, 8.0, 3.0, 0.25, 2.0
WINDOW = [{"wall": "front", "width": 5.0, "sill": 0.9, "head": 2.7, "glazing": "main"}]
GREY = {"floor": 0.2, "walls": 0.5, "ceiling": 0.7}
QUICK = {"sky_rays_per_patch": 16, "ground_rays": 1024, "sensor_rays": 1024,
         "element_rays": 256}


def building():
    """The two-storey building and the sensors of its six classrooms."""
    from luxsweep.kernels.geometry import parametric_building, sensor_grid

    spaces, sensors = [], []
    for level in range(2):
        z = level * (HEIGHT + WALL)
        for k in range(3):
            origin = (k * (WIDTH + WALL), 0.0, z)
            spaces.append({"name": f"classroom-{level}{k}", "origin": origin, "width": WIDTH,
                           "depth": DEPTH, "height": HEIGHT, "thickness": WALL,
                           "reflectance": GREY, "windows": WINDOW})
            g = sensor_grid(WIDTH, DEPTH, 0.8, 0.75, 0.5)
            g[:, :3] += origin
            sensors.append(g)
        spaces.append({"name": f"corridor-{level}", "origin": (0.0, DEPTH + WALL, z),
                       "width": 3 * WIDTH + 2 * WALL, "depth": CORRIDOR, "height": HEIGHT,
                       "thickness": WALL, "reflectance": GREY, "windows": []})
    return parametric_building(spaces, {"main": 2}), np.concatenate(sensors)


def room():
    from luxsweep.kernels.geometry import parametric_room, sensor_grid

    return (parametric_room(WIDTH, DEPTH, HEIGHT, WINDOW, GREY, {"main": 2}, thickness=WALL),
            sensor_grid(WIDTH, DEPTH, 0.8, 0.75, 0.5))


def child(case: str, settings: dict) -> dict:
    """One case in this fresh process: wall time and peak memory."""
    import resource

    from luxsweep.kernels.coefficients import Settings, compute_coefficients

    geometry, sensors = building() if case == "building" else room()
    t0 = time.perf_counter()
    coeffs = compute_coefficients(geometry, sensors, Settings(**settings))
    seconds = time.perf_counter() - t0
    return {"case": case, "sensors": int(sensors.shape[0]), "triangles": geometry.n_triangles,
            "seconds": seconds, "crossed_twice": coeffs.crossed_twice,
            "peak_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}


def run_child(case: str, settings: dict) -> dict:
    env = dict(os.environ, OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1", MKL_NUM_THREADS="1")
    done = subprocess.run([sys.executable, str(Path(__file__).resolve()), "--child", case,
                           "--settings", json.dumps(settings)],
                          env=env, capture_output=True, text=True, check=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


def main(settings: dict) -> dict:
    load = [os.getloadavg()[0]]
    one = run_child("room", settings)
    whole = run_child("building", settings)
    load.append(os.getloadavg()[0])
    six = 6 * one["seconds"]
    print(f"one classroom alone: {one['seconds']:.2f} s, peak {one['peak_mib']:.0f} MiB, "
          f"{one['sensors']} sensors, {one['triangles']} triangles")
    print(f"building (6 classrooms + 2 corridors): {whole['seconds']:.2f} s, peak "
          f"{whole['peak_mib']:.0f} MiB, {whole['sensors']} sensors, {whole['triangles']} "
          f"triangles, {whole['crossed_twice']} rays refused (two outside panes)")
    print(f"time ratio building / six rooms one by one: {whole['seconds'] / six:.2f}; "
          f"building / one room: {whole['seconds'] / one['seconds']:.2f}; "
          f"peak memory ratio: {whole['peak_mib'] / one['peak_mib']:.2f}")
    print(f"load average (1 min) before / after: {load[0]:.2f} / {load[1]:.2f}")
    return {"room": one, "building": whole, "load": load}


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--child")
    parser.add_argument("--settings", default="{}")
    parser.add_argument("--quick", action="store_true", help="coarse ray counts")
    args = parser.parse_args()
    if args.child:
        print(json.dumps(child(args.child, json.loads(args.settings))))
    else:
        main(QUICK if args.quick else json.loads(args.settings))
