"""Shared pieces of the benchmarks: the reference classroom, study files, climates, timing.

Not a benchmark itself. Every benchmark module imports this one; none of it is
physics — the numerics are the project's own kernels, the orchestration is
``sweep`` (plan, cache, store and the real ``sweep.run.series_task``).

Reference classroom (issue 8): 7.2 m × 8 m × 3 m, one front window 5 m × 1.8 m
with its sill at 0.9 m (head 2.7 m), reflectances floor 0.2 / walls 0.5 /
ceiling 0.7, double glazing, sensors on a 0.5 m grid with a 0.5 m margin at
0.8 m (13 × 15 = 195 sensors), MF2 sky and the kernel's default settings.

Climates: the two real TMY3 years bundled with pvlib (Greensboro NC,
``723170TYA.CSV``; Sand Point AK, ``703165TY.csv``). Studies that need more
climates use :func:`derived_climates`, our own documented transformation of
those two files (see there).
"""

from __future__ import annotations

import contextlib
import gc
import json
import os
import platform
import shutil
import sys
import tempfile
import time
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pvlib
import yaml

REPO = Path(__file__).resolve().parent.parent
PVLIB_DATA = Path(pvlib.__file__).parent / "data"
TMY3_GREENSBORO = PVLIB_DATA / "723170TYA.CSV"  # real TMY3 year bundled with pvlib
TMY3_SAND_POINT = PVLIB_DATA / "703165TY.csv"  # real TMY3 year bundled with pvlib

REFERENCE_ROOM: dict[str, Any] = {
    "width": 7.2,
    "depth": 8.0,
    "height": 3.0,
    "reflectance": {"floor": 0.2, "walls": 0.5, "ceiling": 0.7},
    "windows": [{"wall": "front", "width": 5.0, "sill": 0.9, "head": 2.7, "offset": 0.0,
                 "glazing": "main"}],
}
REFERENCE_GRID: dict[str, float] = {"height": 0.8, "spacing": 0.5, "margin": 0.5}
ALL_METRICS = ["daylight_factor", "daylight_autonomy", "udi", "sda_ase", "en17037"]


# ---------------------------------------------------------------------------
# geometry


def reference_geometry() -> tuple[Any, np.ndarray]:
    """Geometry and sensors (195, 6) of the reference classroom.

    From ``bench_coefficients.classroom`` (the coefficient benchmark's owner
    defines it; imported rather than duplicated).
    """
    import bench_coefficients

    return bench_coefficients.classroom()


# ---------------------------------------------------------------------------
# study files


def study_text(
    name: str,
    climates: dict[str, str | Path],
    vary: dict[str, list[Any]] | None = None,
    *,
    timestep: int = 60,
    compute: dict[str, Any] | None = None,
    transmittance: float = 0.7,
    metrics: list[str] | None = None,
) -> str:
    """YAML text of a study of the reference classroom (CONTRACT.md §1)."""
    doc: dict[str, Any] = {
        "name": name,
        "climates": {k: str(v) for k, v in climates.items()},
        "room": REFERENCE_ROOM,
        "glazings": {"main": {"transmittance": transmittance, "panes": 2}},
        "ground_reflectance": 0.2,
        "grid": REFERENCE_GRID,
        "occupancy": {"start": "08:00", "end": "18:00", "days": "weekdays"},
        "timestep": timestep,
        "metrics": metrics or ALL_METRICS,
        "store_series": False,
    }
    if vary:
        doc["vary"] = vary
    if compute:
        doc["compute"] = compute
    return yaml.safe_dump(doc, sort_keys=False)


def write_study(folder: Path, name: str, climates: dict[str, str | Path],
                vary: dict[str, list[Any]] | None = None, **kw: Any) -> Path:
    """Write :func:`study_text` to ``folder/<name>.yaml``; return its path."""
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"{name}.yaml"
    path.write_text(study_text(name, climates, vary, **kw), encoding="utf-8")
    return path


# ---------------------------------------------------------------------------
# climates


def _shift_tmy3_longitude(src: Path, dst: Path, delta_lon: float) -> None:
    """Copy a TMY3 file with its site longitude moved by ``delta_lon`` [deg].

    The records, the time stamps and the time zone are kept, so the sun stands
    ``4 × delta_lon`` minutes earlier (east) on the clock: a different relation
    between the weather and the occupied hours, and different sun paths in
    local standard time.
    """
    lines = src.read_text(encoding="latin-1").splitlines(keepends=True)
    head = lines[0].rstrip("\r\n").split(",")
    head[5] = f"{float(head[5]) + delta_lon:.3f}"
    dst.write_text(",".join(head) + "\n" + "".join(lines[1:]), encoding="latin-1")


def _rotate_tmy3_days(src: Path, dst: Path, days: int) -> None:
    """Copy a TMY3 file with its weather records moved ``days`` days later in the year.

    Date and time columns stay in place; every other field of record ``i``
    comes from record ``i − 24·days`` (cyclically). The weather of each day
    then meets a different sun path (a different season by ``days``).
    """
    lines = src.read_text(encoding="latin-1").splitlines(keepends=True)
    records = [line.rstrip("\r\n").split(",") for line in lines[2:]]
    shift = 24 * days
    out = []
    for i, rec in enumerate(records):
        donor = records[(i - shift) % len(records)]
        out.append(",".join(rec[:2] + donor[2:]) + "\n")
    dst.write_text(lines[0] + lines[1] + "".join(out), encoding="latin-1")


DERIVED_CLIMATES = {
    "greensboro": "pvlib 723170TYA.CSV as is",
    "sand-point": "pvlib 703165TY.csv as is",
    "greensboro-west": "723170TYA.CSV with the site longitude moved 7.5° west",
    "sand-point-east": "703165TY.csv with the site longitude moved 7.5° east",
    "greensboro-shifted": "723170TYA.CSV with the weather moved 61 days later in the year",
}
"""The five climates of the throughput study and how each is made."""


def derived_climates(folder: Path, n: int = 5) -> dict[str, Path]:
    """Write up to five climate files (see :data:`DERIVED_CLIMATES`) into ``folder``."""
    folder.mkdir(parents=True, exist_ok=True)
    out: dict[str, Path] = {}
    for label in list(DERIVED_CLIMATES)[:n]:
        path = folder / f"{label}.csv"
        if label == "greensboro":
            shutil.copyfile(TMY3_GREENSBORO, path)
        elif label == "sand-point":
            shutil.copyfile(TMY3_SAND_POINT, path)
        elif label == "greensboro-west":
            _shift_tmy3_longitude(TMY3_GREENSBORO, path, -7.5)
        elif label == "sand-point-east":
            _shift_tmy3_longitude(TMY3_SAND_POINT, path, +7.5)
        else:
            _rotate_tmy3_days(TMY3_GREENSBORO, path, 61)
        out[label] = path
    return out


# ---------------------------------------------------------------------------
# running the real series stage in this process


def plan_and_cache(study: Path, cache_root: Path, results: Path) -> tuple[Any, Any]:
    """Plan a study, compute its missing coefficient sets in-process, create its store.

    Returns ``(plan, cache)``. The coefficient sets are computed with the real
    :func:`kernels.coefficients.compute_coefficients` and published in the
    real :class:`sweep.cache.CoefficientCache`.
    """
    from luxsweep.kernels.coefficients import compute_coefficients
    from luxsweep.sweep import run as srun
    from luxsweep.sweep import store as sstore
    from luxsweep.sweep.cache import CoefficientCache
    from luxsweep.sweep.config import load_study
    from luxsweep.sweep.plan import make_plan

    cache = CoefficientCache(cache_root)
    plan = make_plan(load_study(study), cache)
    for job in plan.jobs.values():
        if not cache.contains(job.key):
            cache.save(compute_coefficients(job.geometry, job.sensors, job.settings))
    if results.exists():
        shutil.rmtree(results)
    sstore.create_store(results, srun._layout(plan))
    return plan, cache


def run_series(plan: Any, task: Any, results: Path, cache_root: Path) -> dict[str, Any]:
    """Run the engine's own series task (sky → illuminance → metrics → store) in-process."""
    from luxsweep.sweep.run import series_task

    return series_task(task, list(task.members), str(results), str(cache_root), None,
                       plan.jobs.get(task.key))


# ---------------------------------------------------------------------------
# timing and environment


def report(result: dict[str, Any], json_path: str | None, *, show: bool = True) -> None:
    """Print a benchmark's figures as JSON and, when asked, write them to ``json_path``."""
    if show:
        print(json.dumps(result, indent=1))
    if json_path:
        with open(json_path, "w", encoding="utf-8") as fh:
            json.dump(result, fh, indent=1)


def timed(fn: Callable[[], Any]) -> tuple[float, Any]:
    """Wall time [s] of one call and its result (garbage collected first)."""
    gc.collect()
    t0 = time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, out


def best_of(fn: Callable[[], Any], repeat: int = 3) -> float:
    """Smallest wall time [s] of ``repeat`` calls (the least disturbed on a shared machine)."""
    return min(timed(fn)[0] for _ in range(repeat))


def load_average() -> float:
    """One-minute load average of the machine (how disturbed a figure may be)."""
    return float(os.getloadavg()[0])


def environment() -> dict[str, Any]:
    """Machine facts recorded beside the figures."""
    import embreex

    return {
        "python": sys.version.split()[0],
        "numpy": np.__version__,
        "embreex": getattr(embreex, "__version__", "?"),
        "cpus": os.cpu_count(),
        "platform": platform.platform(),
        "load_average_1min_at_start": load_average(),
    }


@contextlib.contextmanager
def scratch(prefix: str) -> Iterator[Path]:
    """A temporary folder removed afterwards."""
    folder = Path(tempfile.mkdtemp(prefix=f"luxsweep-bench-{prefix}-"))
    try:
        yield folder
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def single_thread_env() -> dict[str, str]:
    """Environment of a subprocess whose numpy uses one BLAS thread (like a Dask worker slot)."""
    env = dict(os.environ)
    for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        env[var] = "1"
    return env
