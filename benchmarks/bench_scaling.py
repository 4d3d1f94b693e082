"""Scaling of one coefficient set with the size of an open-plan room.

Open plans of our own: ``W × D × 3 m`` with one long window in the front and
one in the back wall (each ``W − 1 m`` wide, sill 0.9 m, head 2.7 m, double
glazing), reflectances floor 0.2 / walls 0.5 / ceiling 0.7, sensors on a
0.5 m grid with a 0.5 m margin at 0.8 m (15 × 9 m: 493 sensors, 30 × 18 m:
2,065, 60 × 36 m: 8,449), default :class:`kernels.coefficients.Settings`.

Every room is computed in a fresh child process (one BLAS thread, like a Dask
worker slot) that reports its wall time and its peak resident memory
(``resource.getrusage(RUSAGE_SELF).ru_maxrss``, which includes the interpreter
and the imports, ~0.2 GB). The fitted exponent is the slope of log(time)
against log(floor area) by least squares over the rooms measured in one run.

Accuracy: the 30 × 18 m room's daylight factor mean, sDA_300/50% and mean
daylight autonomy (300 lx, weekdays 08:00–18:00, Greensboro TMY3 bundled
with pvlib, orientation 180°, τ = 0.7) are compared with the dense solution
of the start commit (:data:`DENSE_REFERENCE`, computed once with
``--reference`` on that commit and written down here).

Usage::

    python benchmarks/bench_scaling.py                 # 15×9, 30×18, 60×36
    python benchmarks/bench_scaling.py --rooms 15x9 30x18
    python benchmarks/bench_scaling.py --reference     # metrics of the 30×18 room only
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import numpy as np

HERE = Path(__file__).resolve().parent
ROOMS = {"15x9": (15.0, 9.0), "30x18": (30.0, 18.0), "60x36": (60.0, 36.0)}

# 30 × 18 m room on the start commit (dense LU radiosity, element_size 0.5 m),
# measured with ``--reference`` (see the module notes); the per-sensor arrays
# go to a temporary .npz, not into the repository.
DENSE_REFERENCE: dict[str, float] = {
    # commit 5f90394, one BLAS thread, load ~2: 222.9 s, peak 6.64 GiB, 18,000 elements
    "df_mean": 5.3766513929052815, "sda": 100.0, "da_mean": 0.9174909666604582}


def open_plan(width: float, depth: float) -> tuple[Any, np.ndarray]:
    """Geometry and sensors of a ``width × depth × 3 m`` open plan (module notes)."""
    from luxsweep.kernels.geometry import parametric_room, sensor_grid

    windows = [{"wall": wall, "width": width - 1.0, "sill": 0.9, "head": 2.7, "offset": 0.0,
                "glazing": "main"} for wall in ("front", "back")]
    geometry = parametric_room(width, depth, 3.0, windows,
                               {"floor": 0.2, "walls": 0.5, "ceiling": 0.7}, {"main": 2})
    return geometry, sensor_grid(width, depth, 0.8, 0.5, 0.5)


def annual_metrics(coeffs: Any) -> dict[str, Any]:
    """DF mean [%], sDA [%], mean DA [0–1] and per-sensor DF / DA of a coefficient set."""
    import bench_common as bc

    from luxsweep.kernels import metrics as km
    from luxsweep.kernels.climate import read_climate
    from luxsweep.kernels.sky import overcast_sky_vector, patch_scheme, sky_vectors
    from luxsweep.kernels.sun import SunPoints
    from luxsweep.kernels.timeseries import daylight_factor, illuminance

    scheme = patch_scheme(coeffs.subdivision)
    sky = sky_vectors(read_climate(bc.TMY3_GREENSBORO), [180.0], scheme,
                      SunPoints(coeffs.settings.sun_spacing), 60, 0.2)
    tau = [[0.7]]
    total, direct = illuminance(coeffs, sky, tau)
    masks = km.StepMasks(km.occupancy_mask(sky.time, "08:00", "18:00", "weekdays", 60),
                         km.lm83_analysis_mask(sky.time, 60), sky.daylight)
    params = km.MetricParams(step_hours=1.0)
    out = km.finalize(km.accumulate(None, total[0], direct[0], masks, params), params)
    df = daylight_factor(coeffs, overcast_sky_vector(scheme, 0.2), tau)[0]
    return {"df_mean": float(df.mean()), "sda": float(np.ravel(out["sda"])[0]),
            "da_mean": float(np.ravel(out["daylight_autonomy_mean"])[0]),
            "df": df, "da": np.ravel(out["daylight_autonomy"])}


def child(room: str, settings_json: str, metrics_to: str | None) -> dict[str, Any]:
    """Compute one coefficient set in this (fresh) process; time and peak memory."""
    import resource

    from luxsweep.kernels.coefficients import Settings, compute_coefficients

    geometry, sensors = open_plan(*ROOMS[room])
    settings = Settings(**json.loads(settings_json))
    t0 = time.perf_counter()
    coeffs = compute_coefficients(geometry, sensors, settings)
    seconds = time.perf_counter() - t0
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024  # Linux: kB
    out: dict[str, Any] = {"room": room, "sensors": int(sensors.shape[0]),
                           "area": float(np.prod(ROOMS[room])), "seconds": seconds,
                           "peak_bytes": int(peak)}
    if metrics_to:
        m = annual_metrics(coeffs)
        np.savez(metrics_to, df=m.pop("df"), da=m.pop("da"))
        out.update(m)
    return out


def run_child(room: str, settings: dict[str, Any] | None = None,
              metrics_to: str | None = None) -> dict[str, Any]:
    """:func:`child` in a fresh interpreter with one BLAS thread."""
    env = dict(os.environ, OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1", MKL_NUM_THREADS="1")
    cmd = [sys.executable, str(Path(__file__).resolve()), "--child", room,
           "--settings", json.dumps(settings or {})]
    if metrics_to:
        cmd += ["--metrics-to", metrics_to]
    done = subprocess.run(cmd, env=env, cwd=HERE, capture_output=True, text=True, check=True)
    return json.loads(done.stdout.strip().splitlines()[-1])


def exponent(area: list[float], seconds: list[float]) -> float:
    """Least-squares slope of log(seconds) on log(area)."""
    return float(np.polyfit(np.log(area), np.log(seconds), 1)[0])


def main(rooms: list[str], settings: dict[str, Any] | None = None) -> dict[str, Any]:
    load = [os.getloadavg()[0]]
    rows = []
    for room in rooms:
        metrics_to = (str(Path(tempfile.gettempdir()) / f"luxsweep_scaling_{room}.npz")
                      if room == "30x18" else None)
        rows.append(run_child(room, settings, metrics_to))
        rows[-1]["load"] = os.getloadavg()[0]
    load.append(os.getloadavg()[0])
    out: dict[str, Any] = {"rows": rows, "load_average": load}
    if len(rows) > 1:
        area = [r["area"] for r in rows]
        out["time_exponent"] = exponent(area, [r["seconds"] for r in rows])
        out["memory_exponent"] = exponent(area, [r["peak_bytes"] for r in rows])
    ref = next((r for r in rows if r["room"] == "30x18"), None)
    if ref is not None and DENSE_REFERENCE:
        out["against_dense"] = {
            "df_mean_relative": ref["df_mean"] / DENSE_REFERENCE["df_mean"] - 1.0,
            "sda_points": ref["sda"] - DENSE_REFERENCE["sda"],
            "da_mean": ref["da_mean"] - DENSE_REFERENCE["da_mean"]}
    return out


def _print(result: dict[str, Any]) -> None:
    for r in result["rows"]:
        extra = (f"  DF mean {r['df_mean']:.4f} %  sDA {r['sda']:.2f} %  DA mean "
                 f"{r['da_mean']:.4f}" if "df_mean" in r else "")
        per_sensor = 1e3 * r["seconds"] / r["sensors"]
        print(f"{r['room']:>6}: {r['sensors']:5d} sensors  {r['seconds']:7.1f} s  "
              f"{r['peak_bytes'] / 2**30:5.2f} GiB  {per_sensor:6.2f} ms/sensor"
              f"  load {r['load']:.1f}{extra}")
    for k in ("time_exponent", "memory_exponent"):
        if k in result:
            print(f"{k}: {result[k]:.2f}")
    if "against_dense" in result:
        print("against the dense reference:", json.dumps(result["against_dense"]))


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rooms", nargs="+", default=list(ROOMS), choices=list(ROOMS))
    parser.add_argument("--settings", default="{}", help="Settings fields as JSON")
    parser.add_argument("--reference", action="store_true")
    parser.add_argument("--child")
    parser.add_argument("--metrics-to")
    args = parser.parse_args()
    if args.child:
        print(json.dumps(child(args.child, args.settings, args.metrics_to)))
    elif args.reference:
        r = run_child("30x18", json.loads(args.settings),
                      str(Path(tempfile.gettempdir()) / "luxsweep_scaling_dense.npz"))
        print(json.dumps({k: v for k, v in r.items()}))
    else:
        res = main(args.rooms, json.loads(args.settings))
        _print(res)
        (HERE / "scaling.json").write_text(json.dumps(res, indent=1))
