"""Benchmark: coefficient set of a small building against its spaces one by one.

The building (default): two storeys, each three classrooms 7.2 × 8 × 3 m side by side
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

Run: ``.venv/bin/python benchmarks/bench_building.py [--quick] [--levels 3 --per-level 12
--spacing 0.5]`` (the larger building of docs/performance.md). Not part of
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


def building(levels: int = 2, per_level: int = 3, spacing: float = 0.75):
    """The building (``levels`` storeys of ``per_level`` classrooms) and its classrooms' sensors."""
    from luxsweep.kernels.geometry import parametric_building, sensor_grid

    spaces, sensors = [], []
    for level in range(levels):
        z = level * (HEIGHT + WALL)
        for k in range(per_level):
            origin = (k * (WIDTH + WALL), 0.0, z)
            spaces.append({"name": f"classroom-{level}{k}", "origin": origin, "width": WIDTH,
                           "depth": DEPTH, "height": HEIGHT, "thickness": WALL,
                           "reflectance": GREY, "windows": WINDOW})
            g = sensor_grid(WIDTH, DEPTH, 0.8, spacing, 0.5)
            g[:, :3] += origin
            sensors.append(g)
        spaces.append({"name": f"corridor-{level}", "origin": (0.0, DEPTH + WALL, z),
                       "width": per_level * WIDTH + (per_level - 1) * WALL, "depth": CORRIDOR,
                       "height": HEIGHT,
                       "thickness": WALL, "reflectance": GREY, "windows": []})
    return parametric_building(spaces, {"main": 2}), np.concatenate(sensors)


def room(spacing: float = 0.75):
    from luxsweep.kernels.geometry import parametric_room, sensor_grid

    return (parametric_room(WIDTH, DEPTH, HEIGHT, WINDOW, GREY, {"main": 2}, thickness=WALL),
            sensor_grid(WIDTH, DEPTH, 0.8, spacing, 0.5))


def child(case: str, settings: dict, shape: dict) -> dict:
    """One case in this fresh process: wall time, peak memory, classroom DF means."""
    import resource

    from luxsweep.kernels.coefficients import Settings, compute_coefficients
    from luxsweep.kernels.sky import overcast_sky_vector, patch_scheme
    from luxsweep.kernels.timeseries import daylight_factor

    geometry, sensors = (building(**shape) if case == "building"
                         else room(shape.get("spacing", 0.75)))
    t0 = time.perf_counter()
    coeffs = compute_coefficients(geometry, sensors, Settings(**settings))
    seconds = time.perf_counter() - t0
    df = daylight_factor(coeffs, overcast_sky_vector(patch_scheme(coeffs.subdivision), 0.2),
                         [[0.7]])[0]
    n_rooms = shape.get("levels", 2) * shape.get("per_level", 3) if case == "building" else 1
    return {"case": case, "sensors": int(sensors.shape[0]), "triangles": geometry.n_triangles,
            "seconds": seconds, "crossed_twice": coeffs.crossed_twice,
            "df_mean_per_classroom": [float(x.mean()) for x in np.split(df, n_rooms)],
            "peak_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}


def run_child(case: str, settings: dict, shape: dict) -> dict:
    env = dict(os.environ, OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1", MKL_NUM_THREADS="1")
    done = subprocess.run([sys.executable, str(Path(__file__).resolve()), "--child", case,
                           "--settings", json.dumps(settings), "--shape", json.dumps(shape)],
                          env=env, capture_output=True, text=True, check=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


def main(settings: dict, shape: dict) -> dict:
    load = [os.getloadavg()[0]]
    one = run_child("room", settings, shape)
    whole = run_child("building", settings, shape)
    load.append(os.getloadavg()[0])
    n = shape["levels"] * shape["per_level"]
    alone = one["seconds"] * n
    df_room = one["df_mean_per_classroom"][0]
    df_b = np.array(whole["df_mean_per_classroom"])
    print(f"one classroom alone: {one['seconds']:.2f} s, peak {one['peak_mib']:.0f} MiB, "
          f"{one['sensors']} sensors, {one['triangles']} triangles")
    print(f"building ({n} classrooms + {shape['levels']} corridors): {whole['seconds']:.2f} s, "
          f"peak {whole['peak_mib']:.0f} MiB, {whole['sensors']} sensors "
          f"({1e3 * whole['seconds'] / whole['sensors']:.1f} ms per sensor), "
          f"{whole['triangles']} triangles, {whole['crossed_twice']} rays refused (two outside "
          f"panes)")
    print(f"time ratio building / {n} rooms one by one: {whole['seconds'] / alone:.2f}; "
          f"building / one room: {whole['seconds'] / one['seconds']:.2f}; "
          f"peak memory ratio: {whole['peak_mib'] / one['peak_mib']:.2f}")
    print(f"classroom DF mean: alone {df_room:.3f} %; in the building median "
          f"{np.median(df_b):.3f} % (range {df_b.min():.3f}-{df_b.max():.3f} %; end rooms and "
          f"the top level differ by design: they have outside walls or a roof)")
    print(f"load average (1 min) before / after: {load[0]:.2f} / {load[1]:.2f}")
    return {"room": one, "building": whole, "load": load, "shape": shape}


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--child")
    parser.add_argument("--settings", default="{}")
    parser.add_argument("--shape", default="{}", help=argparse.SUPPRESS)
    parser.add_argument("--quick", action="store_true", help="coarse ray counts")
    parser.add_argument("--levels", type=int, default=2)
    parser.add_argument("--per-level", type=int, default=3, help="classrooms per level")
    parser.add_argument("--spacing", type=float, default=0.75, help="sensor grid spacing [m]")
    args = parser.parse_args()
    if args.child:
        print(json.dumps(child(args.child, json.loads(args.settings), json.loads(args.shape))))
    else:
        main(QUICK if args.quick else json.loads(args.settings),
             {"levels": args.levels, "per_level": args.per_level, "spacing": args.spacing})
