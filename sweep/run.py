"""Execute a plan on Dask: coefficient sets first, then one series task per group.

Order of work (DESIGN.md §3):

1. Missing coefficient sets, largest first, at high priority: each task computes
   :func:`kernels.coefficients.compute_coefficients` and publishes it in the
   :class:`~sweep.cache.CoefficientCache` (a task whose key is already in the
   worker's cache reads it); its result holds the set, which Dask sends to the
   set's series tasks wherever they run, so the cache folder need not be shared.
   A set of more than one sensor range (:func:`split_ranges`) is split: its
   element stage and the direct part of every range run at once on any worker,
   the reflected part of every range follows the element stage, and one
   assembly task publishes the set (the same arrays, bit for bit).
2. One task per (coefficient key, climate, series settings) — see
   :class:`sweep.plan.SeriesTask`: sky vectors of all its orientations in time
   blocks (:func:`kernels.sky.sky_vectors`), illuminance of all its glazing rows
   (:func:`kernels.timeseries.illuminance`), metrics accumulated block by block
   (:mod:`kernels.metrics`), then its variants' results written to the
   task's own chunks of the results store and their ``done`` flags last.

Task keys are explicit (``coefficients-<key>``, ``series-<key>-<hash>``), so a
failure names its coefficient key and its variant ids; the other tasks finish
and the run ends with exit status 1. A failed series task is retried member by
member, and members that failed only because workers died run once more alone
at the end (:class:`Collector`), so one poison variant fails alone. A rerun of the
same study skips every variant whose ``done`` flag is set (resume). The store is
created under a temporary sibling name and renamed into place
(:func:`sweep.store.create_store`); a damaged cache entry is recomputed.

The cluster (a loopback ``LocalCluster``, or one joined by address or
scheduler file, over TLS if asked) comes from :mod:`sweep.cluster`; it is
joined after validation, and every worker passes :func:`sweep.preflight.preflight`
before the store is created. A series task checks its weather file against the
client's sha256 first; a mismatch stops the run. Whatever some worker cannot
reach (weather files, the cache, the store's folder) stays with the client and
travels through Dask (:class:`sweep.preflight.Transport`; ``--no-shared-disk``).
Progress (task by task, both phases) is :mod:`sweep.progress`. Series tasks run BLAS on one
thread so results are bit-identical wherever they run.
"""

from __future__ import annotations

import contextlib
import dataclasses
import datetime as dt
import functools
import hashlib
import itertools
import logging
import os
import shutil
import signal
import threading
import time
import warnings
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from luxsweep.sweep import registry
from luxsweep.sweep import store as results_store
from luxsweep.sweep.cache import (
    CoefficientCache,
    UrlCache,
    default_cache,
    local_path,
    open_cache,
)
from luxsweep.sweep.cluster import (
    ALLOWED_FAILURES,
    CONNECT_TIMEOUT,
    TlsFiles,
    check_target,
    dashboard_link,
    dask_client,
    is_loopback,
    is_plain_link,
)
from luxsweep.sweep.config import StudyFile, load_study
from luxsweep.sweep.errors import (
    CacheIntegrityError,
    CacheLocationError,
    InputMismatchError,
    ResultsStoreError,
    UserInputError,
    VariantFailedError,
)
from luxsweep.sweep.plan import CoefficientJob, Plan, SeriesTask, build_geometry, make_plan
from luxsweep.sweep.preflight import Transport, preflight
from luxsweep.sweep.progress import PLAIN_EVERY, Progress
from luxsweep.sweep.registry import space_variables, store_variables, view_variables
from luxsweep.sweep.spaces import SpaceLayout, single_space
from luxsweep.sweep.views import ViewLayout

log = logging.getLogger("luxsweep")

SERIES_CHUNK = 512
"""Occupied time steps per chunk of the stored series (and per engine block then)."""

BLOCK_BYTES = 192 * 2**20
"""Memory budget of one time block of a series task [bytes]."""

FAMILIES = registry.FAMILIES
"""Metric families (:data:`sweep.registry.FAMILIES`)."""


SCATTER_ATTEMPTS = 3
"""Tries to send a cached set to the workers when none is running (:meth:`Collector._send_set`)."""

WORKER_WAIT = 120.0
"""Seconds to wait for a worker to come back between those tries."""


# ---------------------------------------------------------------------------
# worker tasks


def coefficient_task(job: CoefficientJob, cache_root: str | None) -> dict[str, Any]:
    """Compute and publish one coefficient set (read from the cache when there).

    Returns ``key``, ``computed``, ``seconds`` and the set itself
    (``coefficients``): series tasks submitted with this result receive the set
    through Dask, so a worker whose cache folder lacks it (no shared disk) has it.
    With ``cache_root`` None (the client keeps the cache) the set is only computed
    and returned: the client publishes it.
    """
    from luxsweep.kernels.coefficients import compute_coefficients

    t0 = time.perf_counter()
    if cache_root is None:
        coefficients = compute_coefficients(job.geometry, job.sensors, job.settings)
        return {"key": job.key, "computed": True, "seconds": time.perf_counter() - t0,
                "coefficients": coefficients}
    cache = open_cache(cache_root)
    if cache.contains(job.key):
        found = cache.load(job.key)  # checksums verified; a damaged entry is a miss
        if found is not None:
            return {"key": job.key, "computed": False, "seconds": 0.0, "coefficients": found}
    coefficients = compute_coefficients(job.geometry, job.sensors, job.settings)
    cache.save(coefficients)
    return {"key": job.key, "computed": True, "seconds": time.perf_counter() - t0,
            "coefficients": coefficients}


def split_ranges(job: CoefficientJob) -> list[tuple[int, int]]:
    """Sensor ranges of the tasks one coefficient set is split into ([] keeps it one task).

    A set of more than one :data:`kernels.coefficients.SENSOR_PART` of sensors is
    split (the element stage, then one direct and one reflected task per range,
    then the assembly), so that every worker can take a share of one large set
    and no task holds more than a range's arrays; ``target_error`` needs the
    whole set's error before it can choose the ray counts, so such a set stays
    one task.
    """
    from luxsweep.kernels.coefficients import SENSOR_PART

    n = job.n_sensors
    if n <= SENSOR_PART or job.settings.target_error > 0.0:
        return []
    return [(a, min(a + SENSOR_PART, n)) for a in range(0, n, SENSOR_PART)]


def coefficient_elements_task(job: CoefficientJob) -> dict[str, Any]:
    """Element stage of a split set (:func:`kernels.coefficients.solve_elements`)."""
    from luxsweep.kernels.coefficients import solve_elements

    t0 = time.perf_counter()
    solution = solve_elements(job.geometry, job.n_sensors, job.settings)
    return {"solution": solution, "seconds": time.perf_counter() - t0,
            "crossed_twice": 0 if solution is None else solution.crossed_twice}


def coefficient_part_task(job: CoefficientJob, first: int, stop: int,
                          elements: dict[str, Any] | None = None) -> dict[str, Any]:
    """Direct (no ``elements``) or reflected families of sensors ``first`` to ``stop``."""
    from luxsweep.kernels.coefficients import direct_part, reflected_part

    t0 = time.perf_counter()
    if elements is None:
        part = direct_part(job.geometry, job.sensors, first, stop, job.settings)
    else:
        part = reflected_part(job.geometry, job.sensors, elements["solution"], first, stop,
                              job.settings)
    part["seconds"] = np.array(time.perf_counter() - t0)
    return part


def _element_info(elements: dict[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in elements.items() if k != "solution"}


def coefficient_assemble_task(job: CoefficientJob, cache_root: str | None, direct: list[dict],
                              reflected: list[dict], elements: dict[str, Any]
                              ) -> dict[str, Any]:
    """Assemble a split set from its parts and publish it (as :func:`coefficient_task` does).

    The cache entry is written only here, atomically, once every part exists: a
    worker lost midway makes Dask recompute its parts (the same numbers: every
    draw is seeded), never a partial entry.
    """
    from luxsweep.kernels.coefficients import assemble

    t0 = time.perf_counter()
    coefficients = assemble(job.geometry, job.sensors, direct, reflected, job.settings,
                            element_crossed_twice=elements["crossed_twice"])
    if cache_root is not None:  # else the client publishes it
        open_cache(cache_root).save(coefficients)
    seconds = (time.perf_counter() - t0 + elements["seconds"]
               + sum(float(p["seconds"]) for p in (*direct, *reflected)))
    return {"key": job.key, "computed": True, "seconds": seconds, "coefficients": coefficients}


def submit_split(client: Any, job: CoefficientJob, cache_root: str,
                 ranges: list[tuple[int, int]], priority: int = 0) -> Any:
    """Submit the tasks of one split set (:func:`split_ranges`); the future of its assembly.

    The direct parts need nothing from the element stage, so they run beside
    it; the caller keeps only the assembly's future (Dask keeps the parts
    while the assembly needs them, and recomputes any a lost worker held).
    """
    short = job.key[:24]
    submit = functools.partial(client.submit, priority=priority, pure=False, retries=0)
    elements = submit(coefficient_elements_task, job, key=f"coefficient-elements-{short}")
    direct = [submit(coefficient_part_task, job, a, b, key=f"coefficient-direct-{short}-{a}")
              for a, b in ranges]
    reflected = [submit(coefficient_part_task, job, a, b, elements,
                        key=f"coefficient-reflected-{short}-{a}") for a, b in ranges]
    info = submit(_element_info, elements, key=f"coefficient-element-info-{short}")
    return submit(coefficient_assemble_task, job, cache_root, direct, reflected, info,
                  key=f"coefficients-{short}")


SERIES_SET_SHARE = 0.25
"""Share of ``compute.memory_limit`` that the coefficient rows of one series task may
take: a larger set runs its series stage as several tasks over ranges of whole spaces
(:func:`series_ranges`)."""


def series_ranges(task: SeriesTask, job: CoefficientJob | None) -> list[tuple[int, int]]:
    """Sensor ranges ``[first, stop)`` of the series parts of ``task`` ([] keeps it whole).

    Each part holds whole spaces: the grid-level counts (the LM-83 shading state,
    EN 17037) and the lighting control couple the sensors of a space, never of
    two spaces, so parts folded apart join into exactly the task's counts
    (:func:`kernels.metrics.join_counts`). Spaces are packed in sensor order
    while their rows fit :data:`SERIES_SET_SHARE` of the set's
    ``compute.memory_limit``; a space larger than that is a part of its own
    (one space is never split: the bound is the largest space's). A set of one
    space, or whose spaces are not in sensor order, stays one task.
    """
    layout = task.layout
    if job is None or layout is None or layout.n_spaces < 2:
        return []
    own = layout.sensor_space
    if np.any(np.diff(own) < 0):
        return []
    from luxsweep.sweep.plan import set_bytes_per_sensor

    per_sensor = set_bytes_per_sensor(job.settings, len(task.glazing_sets))
    budget = max(1, int(SERIES_SET_SHARE * job.settings.memory_limit * 2**30) // per_sensor)
    if own.size <= budget:
        return []
    cuts = [0, *(np.flatnonzero(np.diff(own)) + 1).tolist(), int(own.size)]
    ranges, first = [], 0
    for a, b in itertools.pairwise(cuts):
        if b - first > budget and a > first:
            ranges.append((first, a))
            first = a
    ranges.append((first, int(own.size)))
    return ranges if len(ranges) > 1 else []


def set_part(result: dict[str, Any], first: int, stop: int) -> dict[str, Any]:
    """Sensors ``first`` to ``stop`` of a set held in Dask (run where it is held, so a
    series part receives its rows only)."""
    return {"coefficients": result["coefficients"].take_sensors(slice(first, stop)),
            "sensors": (first, stop)}


def coefficient_info(result: dict[str, Any]) -> dict[str, Any]:
    """The result of :func:`coefficient_task` without the set (what the client reads).

    ``crossed_twice``: rays of a newly computed set that crossed two or more
    outside glazings and were counted as blocked (0 for a set read from the cache).
    """
    out = {k: v for k, v in result.items() if k != "coefficients"}
    out["crossed_twice"] = int(result["coefficients"].crossed_twice) if result["computed"] else 0
    return out


def _coefficients(task: SeriesTask, cache_root: str | None, coefficient_result: Any,
                  job: CoefficientJob | None, part: tuple[int, int] | None = None
                  ) -> tuple[Any, int]:
    """The task's coefficient set (the rows of sensors ``part``, when given) and how
    many sets were computed here (0 or 1).

    From the coefficient task's result when given (through Dask; the whole set or
    the part, :func:`set_part`), else from this worker's cache (only the part's
    rows are read), else (a worker with a cache of its own that lacks the set, or
    no cache at all: ``cache_root`` None) computed from ``job`` and kept in that
    cache if there is one.
    """
    def cut(coeffs: Any) -> Any:
        return coeffs if part is None else coeffs.take_sensors(slice(*part))

    if isinstance(coefficient_result, dict) and "coefficients" in coefficient_result:
        given = coefficient_result.get("sensors")
        if given is None:
            return cut(coefficient_result["coefficients"]), 0
        if part is None or tuple(given) != tuple(part):
            raise RuntimeError(f"coefficient set {task.key}: got sensors {given}, "
                               f"the task needs {part}")
        return coefficient_result["coefficients"], 0
    cache = open_cache(cache_root) if cache_root is not None else None
    coeffs = cache.load(task.key, part) if cache is not None else None
    if coeffs is not None:
        return coeffs, 0
    if job is None:
        raise RuntimeError(f"coefficient set {task.key} is missing from the cache {cache_root}")
    from luxsweep.kernels.coefficients import compute_coefficients

    coeffs = compute_coefficients(job.geometry, job.sensors, job.settings)
    if cache is not None:  # else the client keeps the cache: nothing to keep here
        cache.save(coeffs)
    return cut(coeffs), 1


def view_coefficients(views: ViewLayout, cache_root: str | None,
                      job: CoefficientJob | None) -> Any:
    """The coefficient set of the view sensors on the job's geometry and settings.

    A set of its own (key from the view sensors), read from this worker's cache
    when there, else computed here (and kept in the cache if there is one). It
    costs one more element solve of the geometry, but the grid's set, key and
    results stay exactly those of the study without views.
    """
    from luxsweep.kernels.coefficients import coefficient_key, compute_coefficients

    if job is None:
        raise RuntimeError("the views' coefficient set needs the task's coefficient job")
    key = coefficient_key(job.geometry, views.sensors, job.settings)
    cache = open_cache(cache_root) if cache_root is not None else None
    if cache is not None and cache.contains(key):
        found = cache.load(key)  # a damaged entry is a miss
        if found is not None:
            return found
    coeffs = compute_coefficients(job.geometry, views.sensors, job.settings)
    if cache is not None:
        cache.save(coeffs)
    return coeffs


def _metric_params(task: SeriesTask) -> Any:
    study = task.study
    return registry.metric_params(study.metric_options.model_dump(), study.timestep)


def _blocks(n_steps: int, occupied: np.ndarray, series: bool, block: int) -> list[tuple[int, int]]:
    """Time blocks ``[a, b)``; with series, each holds exactly SERIES_CHUNK occupied steps."""
    if series:
        occ = np.flatnonzero(occupied)
        edges = [0, *[int(occ[k]) for k in range(SERIES_CHUNK, occ.size, SERIES_CHUNK)], n_steps]
    else:
        edges = [*range(0, n_steps, block), n_steps]
    return [(a, b) for a, b in itertools.pairwise(edges) if b > a]


class ClimateSteps:
    """The one sun-position cache of a worker process, owned by the engine.

    Keeps, for the last few (file, size, mtime, step), the climate resampled to
    the step and the sun's apparent altitude and azimuth [deg] at every step's
    representative time (the step stamps are the climate's own ``time``), plus
    one :class:`kernels.sun.Ephemeris` shared by every climate it locates the
    sun for. One worker usually runs several series tasks of the same climate
    (one per coefficient key), and reading, resampling and locating the sun is
    the same work each time. The kernels keep nothing themselves; tests and
    benchmarks that want a cold start call :meth:`clear` on
    :data:`CLIMATE_STEPS`.
    """

    def __init__(self, max_entries: int = 4) -> None:
        self.max_entries = max_entries
        self._ephemeris: Any = None  # made on first use: importing the engine stays light
        self._entries: dict[tuple, tuple] = {}
        self._lock = threading.Lock()

    @property
    def ephemeris(self) -> Any:
        """The :class:`kernels.sun.Ephemeris` shared by every climate of this process."""
        with self._lock:
            if self._ephemeris is None:
                from luxsweep.kernels.sun import Ephemeris

                self._ephemeris = Ephemeris()
            return self._ephemeris

    def __len__(self) -> int:
        return len(self._entries)

    def clear(self, *, ephemeris: bool = True) -> None:
        """Forget every climate and, unless ``ephemeris=False``, every stored sun place."""
        with self._lock:
            self._entries.clear()
        if ephemeris and self._ephemeris is not None:
            self._ephemeris.clear()

    def get(self, path: str | os.PathLike, step_minutes: int, sha256: str = "",
            data: bytes | None = None) -> tuple:
        """``(climate, altitude, azimuth, daylight)`` of a weather file at ``step_minutes``
        (``daylight``: the EN 17037 daylight steps, :func:`kernels.sun.daylight_steps`).

        With ``sha256`` (the client's hash of the file) the bytes are checked first
        (:func:`sweep.preflight.verify_file`, once per file version per process) and
        again after reading, so a file replaced meanwhile is never used.

        With ``data`` (the file's bytes, read by the client and sent through Dask)
        the file is not opened here: the bytes are checked against ``sha256`` and
        parsed (:func:`kernels.climate.parse_climate`, the same climate bit for bit).

        Raises
        ------
        InputMismatchError
            The file differs from the client's or cannot be read (names file and worker).
        """
        from luxsweep.kernels.climate import parse_climate, read_climate
        from luxsweep.kernels.sun import daylight_steps, resample, sun_steps
        from luxsweep.sweep.preflight import file_version, verify_file, worker_name

        if data is not None:
            found = hashlib.sha256(data).hexdigest()
            if sha256 and found != sha256:
                raise InputMismatchError(
                    f"worker {worker_name()}: the weather data of {os.fspath(path)} received "
                    f"through Dask is not the client's (sha256 {found[:12]}…, expected "
                    f"{sha256[:12]}…); the run stopped so that no result comes from other data")
            version: tuple = ("bytes", found)
        else:
            version = verify_file(path, sha256) if sha256 else file_version(path)
        key = (version, step_minutes)
        with self._lock:
            if key in self._entries:
                return self._entries[key]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # reported once by the client's check
            climate = (read_climate(path) if data is None
                       else parse_climate(data, str(Path(path))))
            steps = sun_steps(climate, step_minutes, ephemeris=self.ephemeris)
            resampled = resample(climate, step_minutes, steps=steps)
            entry = (resampled, steps.altitude, steps.azimuth,
                     daylight_steps(resampled, steps=steps))
        if data is None and sha256 and verify_file(path, sha256) != version:  # replaced
            return self.get(path, step_minutes, sha256)
        with self._lock:
            if len(self._entries) >= self.max_entries:
                self._entries.pop(next(iter(self._entries)))
            self._entries[key] = entry
        return entry


CLIMATE_STEPS = ClimateSteps()
"""The worker process's climate and sun-position cache (:class:`ClimateSteps`)."""


class Workspace:
    """Named scratch arrays of one series task, reused from time block to time block.

    Every block asks for arrays of tens of MB (sky vectors, illuminance). Fresh
    memory of that size is mapped page by page on first write, which costs
    about as much as the arithmetic that fills it (measured: 2 × 33 MB
    allocated and filled in 29 ms, refilled in place in 4 ms). The task asks
    for each array by name; a name's buffer is handed out again on the next
    request of that name, so the caller must be done with the previous array
    of a name before asking again (the series loop is: one block's arrays are
    consumed before the next block starts). Owned by one task, dropped with it.
    """

    def __init__(self) -> None:
        self._buffers: dict[str, np.ndarray] = {}
        self.view_unit: tuple[np.ndarray, np.ndarray] | None = None
        """The block's unit-τ series of the view sensors (a study with ``views:``)."""

    def array(self, name: str, shape: tuple[int, ...], dtype: Any = np.float32) -> np.ndarray:
        """An uninitialised C-contiguous array of ``shape`` in buffer ``name``."""
        dtype = np.dtype(dtype)
        nbytes = int(np.prod(shape, dtype=np.int64)) * dtype.itemsize
        buffer = self._buffers.get(name)
        if buffer is None or buffer.nbytes < nbytes:
            # twice the size: later blocks may be longer, and pages never written
            # are never mapped, so the spare half costs address space only
            buffer = self._buffers[name] = np.empty(2 * nbytes, dtype=np.uint8)
        return buffer[:nbytes].view(dtype).reshape(shape)


def series_task(
    task: SeriesTask,
    todo: list[tuple[int, int, int]],
    store_path: str | None,
    cache_root: str | None,
    coefficient_result: Any = None,
    job: CoefficientJob | None = None,
    climate_data: bytes | None = None,
) -> dict[str, Any]:
    """Series, metrics and writes of one group (runs on a worker).

    BLAS runs on one thread here, wherever the task runs: a multi-threaded GEMM
    may split its sums differently and change results in the last place, and
    results must be bit-identical across machines and resumed runs (the workers
    are single-threaded processes, so nothing is lost on a cluster).

    Parameters
    ----------
    task : SeriesTask
    todo : list of (variant index, orientation index, row index)
        Members not yet done (resume).
    store_path : str or None
        The results store; None when the client writes it (no shared disk): the
        result then holds the variants' arrays (``rows``, ``series``).
    cache_root : str or None
        The coefficient cache as workers reach it; None when the client keeps it
        (the set then always comes as ``coefficient_result``).
    coefficient_result : dict, optional
        Result of the coefficient task computed in this run, or the set the
        client read from its cache (it holds the set).
    job : CoefficientJob, optional
        The set's inputs: the set is computed here when this worker's cache lacks it.
    climate_data : bytes, optional
        The weather file's bytes as the client read them (no shared disk); else
        the file is read here by path.

    Returns
    -------
    dict
        ``variants`` written, ``recomputed`` coefficient sets (0 or 1) and
        seconds spent per stage; without ``store_path`` also ``rows`` (variant
        indices, per-sensor and per-variant arrays) and ``series`` (one
        ``(start, illuminance, direct_sun)`` per time block) for the client to write.
    """
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1, user_api="blas"):
        return _series(task, todo, store_path, cache_root, coefficient_result, job,
                       climate_data)


class _StageTimer:
    """Wall time [s] per stage of a series task: ``with timer("sky"): ...`` adds to ``sky``."""

    STAGES = ("load", "sky", "illuminance", "metrics", "geometry", "write")

    def __init__(self) -> None:
        self.seconds = dict.fromkeys(self.STAGES, 0.0)

    @contextlib.contextmanager
    def __call__(self, stage: str) -> Iterator[None]:
        t0 = time.perf_counter()
        try:
            yield
        finally:
            self.seconds[stage] += time.perf_counter() - t0


@dataclass(frozen=True, eq=False)
class _SeriesInputs:
    """What every time block of a series task reads (built once by :func:`_load_series`)."""

    task: SeriesTask
    coeffs: Any
    climate: Any
    sun_position: tuple[np.ndarray, np.ndarray]
    scheme: Any
    sun_points: Any
    n_classes: int
    sunlit: np.ndarray
    daylight: np.ndarray
    occupied: np.ndarray
    analysis: np.ndarray
    params: Any
    open_rows: np.ndarray
    closed_rows: np.ndarray
    layout: SpaceLayout
    recomputed: int = 0
    views: ViewLayout | None = None
    view_coeffs: Any = None
    """The views' coefficient set (:func:`view_coefficients`)."""
    part: tuple[int, int] | None = None
    """A series part: the sensors ``[first, stop)`` of the set (``layout`` and
    ``views`` are then the part's spaces and their views, numbered from 0)."""
    view_index: np.ndarray | None = None
    """A part's views: their positions among the task's views."""

    @property
    def n_sets(self) -> int:
        return len(self.coeffs.glazing_sets)

    @property
    def layout_sensors(self) -> int:
        """Sensors of the task's whole set (a part's ``layout`` holds only its own)."""
        task_layout = self.task.layout
        return int(task_layout.sensor_space.size if task_layout is not None
                   else self.layout.sensor_space.size)

    def block_steps(self) -> int:
        """Time steps per block within :data:`BLOCK_BYTES` (24 to 8,760)."""
        task = self.task
        n_o, n_r, n_s = len(task.orientations), len(task.rows), self.coeffs.n_sensors
        n_basis, n_sets = self.scheme.n_patches + 1, self.n_sets
        # unit-τ series of every set (total + direct) and the gathered sky rows; with
        # several sets also the combined variants
        per_step = 4 * (2 * n_o * n_sets * n_s + 2 * n_o * n_basis
                        + (n_o * n_r * n_s * (3 if task.shading else 2) if n_sets > 1 else 0))
        return int(np.clip(BLOCK_BYTES // max(per_step, 1), 24, 8760))


def _part_layout(layout: SpaceLayout, views: ViewLayout | None, first: int, stop: int
                 ) -> tuple[SpaceLayout, ViewLayout | None, np.ndarray | None]:
    """The spaces of sensors ``[first, stop)`` (whole spaces, in sensor order) and
    their views, numbered from 0; with the views' positions among the task's."""
    own = layout.sensor_space[first:stop]
    k0, k1 = int(own[0]), int(own[-1]) + 1
    sub = SpaceLayout(names=layout.names[k0:k1], sensor_space=own - k0, area=layout.area[k0:k1])
    if views is None:
        return sub, None, None
    index = np.flatnonzero((views.space >= k0) & (views.space < k1))
    if not index.size:
        return sub, None, index
    mine = ViewLayout(names=tuple(views.names[i] for i in index),
                      space=views.space[index] - k0, sensors=views.sensors[index])
    return sub, mine, index


def _load_series(task: SeriesTask, cache_root: str | None, coefficient_result: Any = None,
                 job: CoefficientJob | None = None,
                 climate_data: bytes | None = None, part: tuple[int, int] | None = None,
                 coefficients: bool = True) -> _SeriesInputs:
    """The coefficient set, the climate with its sun, and the step masks of a task
    (``recomputed``: coefficient sets computed here, :func:`_coefficients`).

    ``part``: the rows, spaces and views of sensors ``[first, stop)`` only (a
    series part, :func:`series_ranges`). ``coefficients`` False: no set at all
    (the join of a task's parts, which needs the steps, spaces and views only).
    The weather file is checked first: a mismatch stops the run before any set is
    computed.
    """
    from luxsweep.kernels import metrics as km
    from luxsweep.kernels.sky import orientation_class_count, patch_scheme
    from luxsweep.kernels.sun import SunPoints

    study = task.study
    climate, altitude, azimuth, daylight = CLIMATE_STEPS.get(task.climate_file, study.timestep,
                                                             task.climate_sha256, climate_data)
    coeffs, recomputed, scheme = None, 0, None
    if coefficients:
        coeffs, recomputed = _coefficients(task, cache_root, coefficient_result, job, part)
        scheme = patch_scheme(coeffs.subdivision)
    layout = (task.layout if task.layout is not None
              else single_space(coeffs.n_sensors, float("nan")))
    views, view_index = task.views, None
    if part is not None:
        layout, views, view_index = _part_layout(layout, views, *part)
    view_coeffs = None
    if coefficients and views is not None:
        view_coeffs = view_coefficients(task.views, cache_root, job)
        if view_index is not None:
            view_coeffs = view_coeffs.take_sensors(view_index)
    stamps = climate.time
    occ = study.occupancy
    return _SeriesInputs(
        task=task, coeffs=coeffs, climate=climate, sun_position=(altitude, azimuth),
        scheme=scheme, sun_points=SunPoints(coeffs.settings.sun_spacing) if coeffs else None,
        n_classes=orientation_class_count(scheme, task.orientations) if coeffs else 0,
        sunlit=altitude > 0.0,  # any sun in the step: its sky and sun are computed
        daylight=daylight,  # EN 17037 daylight hours: sun up at mid-step
        occupied=km.occupancy_mask(stamps, occ.start, occ.end, occ.days, study.timestep),
        analysis=km.lm83_analysis_mask(stamps, study.timestep), params=_metric_params(task),
        open_rows=task.open_rows(), closed_rows=task.closed_rows(), recomputed=recomputed,
        layout=layout, views=views, view_coeffs=view_coeffs, part=part, view_index=view_index,
    )


def _unit_series(inp: _SeriesInputs, lit: np.ndarray, workspace: Workspace,
                 timer: _StageTimer) -> tuple[np.ndarray, np.ndarray]:
    """Sky vectors and unit-τ illuminance (total, direct sun) of the daylight steps ``lit``.

    Both large arrays live in ``workspace`` (names ``"sky"`` and ``"total"``):
    they are valid until the next block asks for them.
    """
    from luxsweep.kernels.sky import sky_vectors
    from luxsweep.kernels.timeseries import unit_illuminance

    task, study = inp.task, inp.task.study
    n_o, n_s = len(task.orientations), inp.coeffs.n_sensors
    with timer("sky"):
        basis = workspace.array("sky", (inp.n_classes, inp.scheme.n_patches + 1, lit.size))
        sky = sky_vectors(inp.climate, task.orientations, inp.scheme, inp.sun_points,
                          study.timestep, study.ground_reflectance, steps=lit,
                          sun_position=inp.sun_position, out=basis)
    with timer("illuminance"):
        if inp.view_coeffs is not None:  # the views' eye sensors under the same sky
            workspace.view_unit = unit_illuminance(inp.view_coeffs, sky)
        total = workspace.array("total", (n_o, inp.n_sets, lit.size, n_s))
        return unit_illuminance(inp.coeffs, sky, out=total)  # (n_o, n_sets, n_lit, n_s) each


def _count_block(inp: _SeriesInputs, counts: Any, a: int, b: int, workspace: Workspace,
                 timer: _StageTimer) -> tuple[Any, np.ndarray, tuple | None]:
    """Add the metric counts of steps ``[a, b)`` to ``counts``.

    Night steps are counted without illuminance (``accumulate_dark``). A single
    glazing set's variants are folded from its unit series
    (``accumulate(transmittance=)``); several sets are combined first.

    Returns
    -------
    counts, lit, unit
        The updated counts, the daylight steps of the block and their unit-τ
        series (``None`` when the block has none).
    """
    from luxsweep.kernels import metrics as km
    from luxsweep.kernels.timeseries import combine

    task = inp.task
    n_o, n_r, n_s = len(task.orientations), len(task.rows), inp.coeffs.n_sensors
    lit = a + np.flatnonzero(inp.sunlit[a:b])
    dark = a + np.flatnonzero(~inp.sunlit[a:b])
    if dark.size:
        with timer("metrics"):
            masks = km.StepMasks(inp.occupied[dark], inp.analysis[dark], inp.daylight[dark])
            counts = km.accumulate_dark(counts, masks, inp.params, (n_o, n_r), n_s,
                                        inp.layout.n_spaces)
    if not lit.size:
        return counts, lit, None
    unit = _unit_series(inp, lit, workspace, timer)
    masks = km.StepMasks(inp.occupied[lit], inp.analysis[lit], inp.daylight[lit])
    if inp.n_sets == 1:  # variants scale one set: fold them from the unit series
        with timer("metrics"):
            counts = km.accumulate(
                counts, unit[0][:, 0].swapaxes(-1, -2), unit[1][:, 0].swapaxes(-1, -2),
                masks, inp.params, transmittance=inp.open_rows[:, 0],
                shaded_transmittance=inp.closed_rows[:, 0] if task.shading else None,
                space=inp.layout.sensor_space)
        return counts, lit, unit
    with timer("illuminance"):
        total, direct = (combine(u, inp.open_rows).swapaxes(-1, -2) for u in unit)
        shaded = (combine(unit[0], inp.closed_rows).swapaxes(-1, -2) if task.shading
                  else None)
    with timer("metrics"):
        counts = km.accumulate(counts, total, direct, masks, inp.params, shaded,
                               space=inp.layout.sensor_space)
    return counts, lit, unit


def _write_series(inp: _SeriesInputs, members: tuple, store_path: str | None, a: int, b: int,
                  lit: np.ndarray, unit: tuple | None, occ_done: int,
                  kept: list | None = None) -> int:
    """Write the occupied steps of ``[a, b)`` of the members' series; returns how many.

    Without ``store_path`` the block is appended to ``kept`` for the client to write.
    """
    from luxsweep.kernels.timeseries import combine

    vis, ois, ris = members
    task = inp.task
    n_o, n_r, n_s = len(task.orientations), len(task.rows), inp.coeffs.n_sensors
    occ_steps = a + np.flatnonzero(inp.occupied[a:b])
    e = np.zeros((n_o, n_r, n_s, occ_steps.size), dtype=np.float32)
    d = np.zeros_like(e)
    if unit is not None:
        pos = np.searchsorted(lit, occ_steps)
        hit = (pos < lit.size) & (lit[np.minimum(pos, lit.size - 1)] == occ_steps)
        for out, u in zip((e, d), unit, strict=True):
            out[..., hit] = combine(u[:, :, pos[hit]], inp.open_rows).swapaxes(-1, -2)
    first, last = 0, True  # a series part writes its sensors' rows
    if inp.part is not None:
        first, last = inp.part[0], inp.part[1] == inp.layout_sensors
    if store_path is None:
        assert kept is not None
        kept.append((occ_done, first, last, e[ois, ris], d[ois, ris]))
    else:
        results_store.write_series_block(store_path, vis, occ_done, e[ois, ris], d[ois, ris],
                                         first, last)
    return int(occ_steps.size)


def _daylight_factors(inp: _SeriesInputs) -> tuple[np.ndarray, np.ndarray]:
    """Daylight factor [%] and its sampling error of every sensor, ``(n_rows, n_sensors)``."""
    from luxsweep.kernels.coefficients import daylight_factor_error
    from luxsweep.kernels.sky import overcast_sky_vector
    from luxsweep.kernels.timeseries import daylight_factor

    ground = inp.task.study.ground_reflectance
    df = daylight_factor(inp.coeffs, overcast_sky_vector(inp.scheme, ground), inp.open_rows)
    return df, daylight_factor_error(inp.coeffs, ground, inp.open_rows)


def _final_results(inp: _SeriesInputs, counts: Any, df: np.ndarray,
                   error: np.ndarray) -> dict[str, np.ndarray]:
    """Metrics from the counts of the whole year, plus the daylight factor (``df`` and
    ``error`` from :func:`_daylight_factors`); per space (``space_<name>``, spaces of
    ``inp.layout``) and for the building."""
    from luxsweep.kernels import metrics as km

    n_o, n_r = len(inp.task.orientations), len(inp.task.rows)
    own, area = inp.layout.sensor_space, inp.layout.area
    results = km.finalize(counts, inp.params, own, area)
    df_space = km.space_mean(np.asarray(df, dtype=np.float64), own)  # (n_r, n_spaces)
    results["daylight_factor"] = np.broadcast_to(df[None], (n_o, *df.shape))
    results["daylight_factor_error"] = np.broadcast_to(error.astype(np.float32)[None],
                                                       (n_o, *error.shape))
    results["daylight_factor_mean"] = np.broadcast_to(km.area_weighted(df_space, area)[None],
                                                      (n_o, n_r))
    results["space_daylight_factor_mean"] = np.broadcast_to(df_space[None], (n_o, *df_space.shape))
    return results


SUNLIGHT_STEP = 1.0
"""Step [min] of the sun's path on the EN 17037 sunlight day (kernels.sunlight)."""

VIEW_STEPS = (0.5, 2.0)
"""Horizontal fan step and layer-ray step [deg] of the view-out rays (kernels.view)."""


def _geometry_results(inp: _SeriesInputs, job: CoefficientJob | None) -> dict[str, np.ndarray]:
    """EN 17037 exposure to sunlight and view out of the task's occupied spaces, for the
    families ``sunlight`` and ``view_out`` the study lists (none: empty).

    Geometry and the sun's path only: the same for every glazing row; sunlight per
    orientation (the day's sun path from the weather file's site, turned into the
    building frame), view out the same for every orientation. Per space
    ``space_<name>`` (n_o, n_r, n_spaces) and for the building ``<name>`` (n_o, n_r):
    the lowest occupied space's value (a space without an outside wall window has
    0 h, no view out and level 0).
    """
    study = inp.task.study
    families = [f for f in study.metrics if f in registry.GEOMETRY_FAMILIES]
    if not families:
        return {}
    from luxsweep.kernels.raytrace import Scene

    geometry = job.geometry if job is not None else build_geometry(study)[0]
    names = inp.layout.names
    index = np.array([geometry.space_names.index(n) for n in names], dtype=np.intp)
    scene = Scene(geometry)
    orientations = inp.task.orientations
    shape = (len(orientations), len(inp.task.rows), len(names))
    results: dict[str, np.ndarray] = {}

    def keep(name: str, per_space: np.ndarray) -> None:  # (n_o, n_spaces)
        dtype = registry.METRICS[name].dtype
        space = np.broadcast_to(np.asarray(per_space)[:, None, :], shape).astype(dtype)
        results[registry.SPACE_PREFIX + name] = space
        results[name] = space.min(axis=-1)

    if "sunlight" in families:
        from luxsweep.kernels import sunlight as ks
        from luxsweep.kernels.climate import REFERENCE_YEAR

        month, day = (int(v) for v in study.sunlight.day.split("-"))
        altitude, azimuth = ks.sun_path(inp.climate.site, dt.date(REFERENCE_YEAR, month, day),
                                        SUNLIGHT_STEP)
        windows = ks.window_reference_points(geometry)
        hours = np.stack([ks.sunlight_hours(scene, windows.points, windows.normals, altitude,
                                            azimuth, o, study.sunlight.altitude(inp.task.climate),
                                            SUNLIGHT_STEP) for o in orientations])
        per_space = ks.space_sunlight_hours(hours, windows.space,
                                            len(geometry.space_names))[:, index]
        keep("sunlight_hours", per_space)
        keep("sunlight_level", ks.sunlight_level(per_space))
    if "view_out" in families:
        from luxsweep.kernels import view as kv

        boxes = geometry.space_boxes[index]
        positions = [kv.view_positions(lo, hi) for lo, hi in boxes]
        owner = np.repeat(np.arange(len(names)), [len(p) for p in positions])
        view = kv.space_view(kv.view_out(scene, np.concatenate(positions), *VIEW_STEPS),
                             owner, len(names))
        for name, values in (("view_angle", view.sight_angle), ("view_distance", view.distance),
                             ("view_layers", view.layers), ("view_level", view.level)):
            keep(name, np.broadcast_to(values[None], (len(orientations), len(names))))
    return results


@dataclass(eq=False)
class _LightingState:
    """Lighting of a series task: each space's settings and control sensor per glazing
    row, and the full-power-equivalent hours summed so far, ``(n_o, n_r, n_spaces)`` [h]."""

    lights: Any
    control: np.ndarray
    hours: np.ndarray


def _lighting_setup(inp: _SeriesInputs) -> _LightingState | None:
    """The task's lighting state, or None when the study does not ask for ``lighting``."""
    from luxsweep.kernels.sky import overcast_sky_vector
    from luxsweep.kernels.timeseries import daylight_factor
    from luxsweep.sweep.lighting import control_sensors, space_lights

    study = inp.task.study
    if "lighting" not in study.metrics:
        return None
    lights = space_lights(study, inp.layout)
    df = daylight_factor(inp.coeffs, overcast_sky_vector(inp.scheme, study.ground_reflectance),
                         inp.open_rows)  # (n_r, n_sensors): picks the median sensors
    control = control_sensors(lights, inp.layout, inp.coeffs.sensors, df)
    n_o, n_r = len(inp.task.orientations), len(inp.task.rows)
    return _LightingState(lights, control, np.zeros((n_o, n_r, inp.layout.n_spaces)))


def _lighting_block(inp: _SeriesInputs, state: _LightingState, a: int, b: int,
                    lit: np.ndarray, unit: tuple | None) -> None:
    """Add the lighting hours of the occupied steps of ``[a, b)`` to ``state``.

    Daylight at each space's control sensor with the LM-83 shading state of the
    space applied (shading closed where more than 2 % of its sensors get direct
    sun above the threshold, the rule the sDA counts use; open without
    operable shading); occupied night steps are full power.
    """
    from luxsweep.kernels import lighting as kl
    from luxsweep.kernels.metrics import shading_closed
    from luxsweep.kernels.timeseries import combine

    task, params, lights = inp.task, inp.params, state.lights
    dark = np.count_nonzero(inp.occupied[a:b] & ~inp.sunlit[a:b])
    state.hours += dark * params.step_hours
    if unit is None:
        return
    sel = np.flatnonzero(inp.occupied[lit])  # occupied daylight steps, positions in `lit`
    if not sel.size:
        return
    used = np.unique(state.control)
    pos = np.searchsorted(used, state.control)  # (n_r, n_spaces) into `used`
    part = unit[0][:, :, sel][..., used]  # (n_o, n_sets, n_sel, n_used)
    e_open = combine(part, inp.open_rows).swapaxes(-1, -2)  # (n_o, n_r, n_used, n_sel)
    closed = e_shut = None
    if task.shading:
        rule = (params.sun_threshold, params.shading_sensor_fraction)
        if inp.n_sets == 1:  # the rows scale one series: one partial sort serves them all
            closed = kl.shading_closed_scaled(unit[1][:, 0][:, sel], inp.layout.sensor_space,
                                              inp.open_rows[:, 0], *rule)
        else:
            direct = combine(unit[1][:, :, sel], inp.open_rows).swapaxes(-1, -2)
            closed = shading_closed(direct, inp.layout.sensor_space, *rule)
        e_shut = combine(part, inp.closed_rows).swapaxes(-1, -2)
    daylight = kl.control_daylight(e_open, pos, closed, e_shut)  # (n_o, n_r, n_sp, n_sel)
    state.hours += kl.lighting_hours(daylight, np.ones(sel.size, bool), params.step_hours,
                                     lights.target, list(lights.control), lights.min_power,
                                     lights.min_light)


def _lighting_results(inp: _SeriesInputs, state: _LightingState) -> dict[str, np.ndarray]:
    """Annual lighting energy [kWh/m²] and saving against no control [%], per space
    (``space_lighting_*``) and for the building (area-weighted energies)."""
    from luxsweep.kernels import lighting as kl
    from luxsweep.kernels import metrics as km

    density = state.lights.power_density  # (n_spaces,) [W/m²]
    area = inp.layout.area
    energy = kl.annual_energy(state.hours, density)  # (n_o, n_r, n_spaces)
    occupied_hours = np.count_nonzero(inp.occupied) * inp.params.step_hours
    full = np.broadcast_to(kl.annual_energy(np.full(density.shape, occupied_hours), density),
                           energy.shape)  # lights at full power whenever occupied
    building, building_full = km.area_weighted(energy, area), km.area_weighted(full, area)
    return {
        "space_lighting_energy": energy,
        "space_lighting_saving": kl.saving_percent(energy, full),
        "lighting_energy": building,
        "lighting_saving": kl.saving_percent(building, building_full),
    }


def _glare_block(inp: _SeriesInputs, a: int, b: int, lit: np.ndarray, unit: tuple | None,
                 view_unit: tuple | None) -> np.ndarray:
    """Simplified DGP at every view in the occupied steps of ``[a, b)``.

    Returns
    -------
    ndarray float32 (n_orient, n_rows, n_views, n_occupied)
        DGPs (:func:`kernels.glare.dgp_simplified`) of each view's vertical
        illuminance at the eye; in an occupied step where the LM-83 rule closes
        the shading of the view's space (:func:`kernels.metrics.shading_closed`,
        applied whenever the space is occupied, as the lighting control applies
        it) the closed glazing row lights the eye. Steps without daylight have
        E_v = 0.
    """
    from luxsweep.kernels.glare import dgp_simplified
    from luxsweep.kernels.metrics import shading_closed
    from luxsweep.kernels.timeseries import combine

    task, views = inp.task, inp.views
    assert views is not None
    n_o, n_r = len(task.orientations), len(task.rows)
    occ_steps = a + np.flatnonzero(inp.occupied[a:b])
    ev = np.zeros((n_o, n_r, views.n_views, occ_steps.size), dtype=np.float32)
    if unit is not None and view_unit is not None and occ_steps.size:
        pos = np.searchsorted(lit, occ_steps)
        hit = (pos < lit.size) & (lit[np.minimum(pos, lit.size - 1)] == occ_steps)
        steps = pos[hit]
        e = combine(view_unit[0][:, :, steps], inp.open_rows).swapaxes(-1, -2)
        if task.shading:
            shut = combine(view_unit[0][:, :, steps], inp.closed_rows).swapaxes(-1, -2)
            sun = unit[1][:, :, steps]
            for r in range(n_r):  # one glazing row at a time: memory of one grid series
                direct = combine(sun, inp.open_rows[r:r + 1])[:, 0].swapaxes(-1, -2)
                closed = shading_closed(direct, inp.layout.sensor_space,
                                        inp.params.sun_threshold,
                                        inp.params.shading_sensor_fraction)  # (n_o, n_sp, n)
                e[:, r] = np.where(closed[:, views.space, :], shut[:, r], e[:, r])
        ev[..., hit] = e
    return dgp_simplified(ev).astype(np.float32)


def _glare_results(inp: _SeriesInputs, dgp: np.ndarray) -> dict[str, np.ndarray]:
    """Per-view, per-space and building glare results from the year's DGPs
    ``(n_orient, n_rows, n_views, n_occupied)`` (:mod:`kernels.glare`)."""
    from luxsweep.kernels.glare import glare_class_shares, glare_level, year_map

    views = inp.views
    assert views is not None
    every = np.ones(dgp.shape[-1], dtype=bool)
    shares = glare_class_shares(dgp, every).astype(np.float32)  # (n_o, n_r, n_v, 4)
    level = glare_level(dgp, every)
    # the hour of the year each occupied step lies in (stamps end their step)
    occ = inp.climate.time[inp.occupied]
    start = occ - np.timedelta64(inp.task.study.timestep * 30, "s")
    day, hour = np.asarray(start.day_of_year) - 1, np.asarray(start.hour)
    out = {f"view_glare_{k}": shares[..., i] for i, k in enumerate(
        ("imperceptible", "perceptible", "disturbing", "intolerable"))}
    out["view_dgp_max"] = (dgp.max(axis=-1) if dgp.shape[-1]
                           else np.full(dgp.shape[:-1], np.nan, np.float32))
    out["view_glare_level"] = level
    out["view_glare_map"] = year_map(dgp, day, hour)
    bad = shares[..., 2] + shares[..., 3]  # disturbing or intolerable
    out["glare_level"] = level.min(axis=-1)
    out["glare_disturbing_share"] = bad.max(axis=-1)
    n_sp = inp.layout.n_spaces
    sp_level = np.full((*level.shape[:-1], n_sp), -1, dtype=np.int8)
    sp_bad = np.full((*level.shape[:-1], n_sp), np.nan, dtype=np.float32)
    for k in range(n_sp):
        mine = views.space == k
        if mine.any():
            sp_level[..., k] = level[..., mine].min(axis=-1)
            sp_bad[..., k] = bad[..., mine].max(axis=-1)
    out["space_glare_level"] = sp_level
    out["space_glare_disturbing_share"] = sp_bad
    return out


def _members(todo: list[tuple[int, int, int]]) -> tuple[list[int], np.ndarray, np.ndarray]:
    """Variant indices, orientation and row positions of the members ``todo``."""
    return ([vi for vi, _, _ in todo], np.array([oi for _, oi, _ in todo], dtype=np.intp),
            np.array([ri for _, _, ri in todo], dtype=np.intp))


@dataclass(eq=False)
class _Year:
    """What the time blocks of a series task (or part) add up: the metric counts,
    the lighting state, the DGPs at the views and (the client writing the store)
    the series blocks."""

    counts: Any = None
    light: _LightingState | None = None
    dgp: np.ndarray | None = None
    kept: list = field(default_factory=list)


def _fold_year(inp: _SeriesInputs, members: tuple, store_path: str | None,
               timer: _StageTimer) -> _Year:
    """Sky, illuminance, counts, lighting, glare and stored series, block by block."""
    task = inp.task
    workspace = Workspace()
    year = _Year()
    occ_done = 0
    with timer("metrics"):
        year.light = _lighting_setup(inp)
    dgp: list[np.ndarray] = []  # with views: each block's DGPs at the views
    for a, b in _blocks(len(inp.climate.time), inp.occupied, task.study.store_series,
                        inp.block_steps()):
        workspace.view_unit = None
        year.counts, lit, unit = _count_block(inp, year.counts, a, b, workspace, timer)
        if year.light is not None:
            with timer("metrics"):
                _lighting_block(inp, year.light, a, b, lit, unit)
        if inp.views is not None:
            with timer("metrics"):
                dgp.append(_glare_block(inp, a, b, lit, unit, workspace.view_unit))
        if task.study.store_series:
            with timer("write"):
                occ_done += _write_series(inp, members, store_path, a, b, lit, unit, occ_done,
                                          year.kept)
        del unit  # the block's direct-sun array is fresh memory: free it before the next
    if inp.views is not None:
        year.dgp = np.concatenate(dgp, axis=-1)
    return year


def _year_results(inp: _SeriesInputs, year: _Year, df: np.ndarray, error: np.ndarray,
                  job: CoefficientJob | None, timer: _StageTimer) -> dict[str, np.ndarray]:
    """Every result of the task's variants from its year (:func:`_fold_year`)."""
    with timer("metrics"):
        results = _final_results(inp, year.counts, df, error)
        if year.light is not None:
            results.update(_lighting_results(inp, year.light))
        if inp.views is not None:
            assert year.dgp is not None
            results[results_store.VIEW_SERIES] = year.dgp
            results.update(_glare_results(inp, year.dgp))
    with timer("geometry"):
        results.update(_geometry_results(inp, job))
    return results


def _write_results(inp: _SeriesInputs, members: tuple, results: dict[str, np.ndarray],
                   store_path: str | None, timer: _StageTimer) -> dict[str, Any]:
    """The members' rows of every result, written to the store (``done`` last) when
    ``store_path`` is given; returns the rows."""
    task = inp.task
    with timer("write"):
        vis, ois, ris = members
        sensor_vars, variant_vars = store_variables(list(task.study.metrics))
        rows = {
            "indices": vis,
            "sensor_values": {name: np.asarray(results[name][ois, ris], dtype=np.float32)
                              for name in sensor_vars},
            "variant_values": {name: np.asarray(results[name][ois, ris])
                               for name in variant_vars},
            "space_values": {name: np.asarray(results[name][ois, ris])
                             for name in space_variables(list(task.study.metrics))},
            "spaces": inp.layout.names,
        }
        if inp.views is not None:
            names = [*view_variables(list(task.study.metrics)), results_store.VIEW_MAP]
            if task.study.store_series:
                names.append(results_store.VIEW_SERIES)
            rows["view_values"] = {name: np.asarray(results[name][ois, ris]) for name in names}
        if store_path is not None:  # every variant's data, then their `done` flags
            results_store.write_variants(store_path, **rows)
    return rows


def _year_of(task: SeriesTask, members: tuple, store_path: str | None, cache_root: str | None,
             coefficient_result: Any, job: CoefficientJob | None, climate_data: bytes | None,
             part: tuple[int, int] | None, timer: _StageTimer
             ) -> tuple[_SeriesInputs, _Year, np.ndarray, np.ndarray]:
    """Load a task (or the part ``part`` of it), fold its year and its daylight factors:
    what the unsplit task and a series part both compute."""
    with timer("load"):
        inp = _load_series(task, cache_root, coefficient_result, job, climate_data, part=part)
    year = _fold_year(inp, members, store_path, timer)
    with timer("metrics"):
        df, error = _daylight_factors(inp)
    return inp, year, df, error


def _series(
    task: SeriesTask,
    todo: list[tuple[int, int, int]],
    store_path: str | None,
    cache_root: str | None,
    coefficient_result: Any = None,
    job: CoefficientJob | None = None,
    climate_data: bytes | None = None,
) -> dict[str, Any]:
    """Body of :func:`series_task` (same parameters and result).

    Stages, each timed by one :class:`_StageTimer` (every second of the task is
    in exactly one stage): load (:func:`_load_series`), then per time block sky
    vectors, illuminance and metric counts (:func:`_count_block`) and, with
    ``store_series``, the series (:func:`_write_series`); finally the metrics
    (:func:`_final_results`), the EN 17037 sunlight and view-out results when
    listed (:func:`_geometry_results`, stage ``geometry``) and the variants' results.
    """
    timer = _StageTimer()
    members = _members(todo)
    inp, year, df, error = _year_of(task, members, store_path, cache_root, coefficient_result,
                                    job, climate_data, None, timer)
    rows = _write_results(inp, members, _year_results(inp, year, df, error, job, timer),
                          store_path, timer)
    out = {"variants": len(todo), "recomputed": inp.recomputed, "timing": timer.seconds}
    if store_path is None:  # the client writes them (no shared disk)
        out.update(rows=rows, series=year.kept)
    return out


def series_part_task(
    task: SeriesTask,
    todo: list[tuple[int, int, int]],
    store_path: str | None,
    cache_root: str | None,
    coefficient_result: Any,
    job: CoefficientJob | None,
    climate_data: bytes | None,
    first: int,
    stop: int,
) -> dict[str, Any]:
    """The year of sensors ``[first, stop)`` (whole spaces) of a split series task.

    Parameters as :func:`series_task`; the set's rows of the part only are read
    (``coefficient_result`` the part, :func:`set_part`, or the whole set). The
    stored series of the part's sensors is written here (or kept for the client).

    Returns
    -------
    dict
        ``counts`` (the part's spaces, :func:`kernels.metrics.join_counts`),
        ``df`` and ``error`` per sensor, lighting ``hours`` per space (or None),
        ``dgp`` of the part's views and their ``view_index``, ``series`` blocks
        for the client, ``recomputed`` and ``timing``.
    """
    from threadpoolctl import threadpool_limits

    timer = _StageTimer()
    with threadpool_limits(limits=1, user_api="blas"):
        inp, year, df, error = _year_of(task, _members(todo), store_path, cache_root,
                                        coefficient_result, job, climate_data, (first, stop),
                                        timer)
    return {"counts": year.counts, "df": df, "error": error,
            "hours": None if year.light is None else year.light.hours,
            "dgp": year.dgp, "view_index": inp.view_index, "series": year.kept,
            "recomputed": inp.recomputed, "timing": timer.seconds}


def series_join_task(
    task: SeriesTask,
    todo: list[tuple[int, int, int]],
    store_path: str | None,
    job: CoefficientJob | None,
    climate_data: bytes | None,
    parts: list[dict[str, Any]],
) -> dict[str, Any]:
    """Join the parts of a split series task (:func:`series_part_task`, in sensor order)
    into the task's results and write them: the same result as :func:`series_task`.

    Every count, daylight factor and lighting hour of a part is its own spaces';
    joined, they are exactly the unsplit task's (:func:`kernels.metrics.join_counts`),
    and the building totals are formed here from them as the unsplit task forms them.
    """
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1, user_api="blas"):  # as the unsplit task forms them
        return _join(task, todo, store_path, job, climate_data, parts)


def _join(task: SeriesTask, todo: list[tuple[int, int, int]], store_path: str | None,
          job: CoefficientJob | None, climate_data: bytes | None,
          parts: list[dict[str, Any]]) -> dict[str, Any]:
    """Body of :func:`series_join_task` (same parameters and result)."""
    from luxsweep.kernels import metrics as km
    from luxsweep.sweep.lighting import space_lights

    timer = _StageTimer()
    with timer("load"):
        inp = _load_series(task, None, None, job, climate_data, coefficients=False)
    year = _Year(counts=km.join_counts(*(p["counts"] for p in parts)))
    with timer("metrics"):
        df = np.concatenate([p["df"] for p in parts], axis=-1)
        error = np.concatenate([p["error"] for p in parts], axis=-1)
        if parts[0]["hours"] is not None:
            year.light = _LightingState(space_lights(task.study, inp.layout), np.empty(0),
                                        np.concatenate([p["hours"] for p in parts], axis=-1))
        if inp.views is not None:
            with_views = [p for p in parts if p["dgp"] is not None]
            shape = with_views[0]["dgp"].shape
            year.dgp = np.empty((*shape[:2], inp.views.n_views, shape[-1]), dtype=np.float32)
            for p in with_views:
                year.dgp[:, :, p["view_index"]] = p["dgp"]
    members = _members(todo)
    rows = _write_results(inp, members, _year_results(inp, year, df, error, job, timer),
                          store_path, timer)
    seconds = timer.seconds
    for p in parts:
        for k, v in p["timing"].items():
            seconds[k] += v
    out = {"variants": len(todo), "recomputed": max(p["recomputed"] for p in parts),
           "timing": seconds}
    if store_path is None:
        out.update(rows=rows, series=[b for p in parts for b in p["series"]])
    return out


# ---------------------------------------------------------------------------
# client side


@dataclass
class RunSummary:
    """What a run did."""

    total: int
    skipped: int
    results: Path
    written: int = 0
    failed: dict[str, list[str]] = field(default_factory=dict)
    coefficient_sets_computed: int = 0
    coefficient_sets_recomputed: int = 0
    seconds: float = 0.0
    timing: dict[str, float] = field(default_factory=dict)
    crossed_twice: int = 0
    """Rays of the sets computed now that crossed two outside glazings (counted as blocked)."""

    @property
    def ok(self) -> bool:
        return not self.failed


def default_results(loaded: StudyFile) -> Path:
    """``<study folder>/<name>.zarr`` (the name is checked to hold no path separators)."""
    folder = Path(os.path.abspath(loaded.folder))
    path = Path(os.path.abspath(folder / f"{loaded.study.name}.zarr"))
    if path.parent != folder:
        raise UserInputError(f"{loaded.path}: study name '{loaded.study.name}' would place the "
                             "results outside the study folder; use a plain name")
    return path


def results_path(out: str | Path) -> Path:
    """The results store's folder for ``--out``: a path, or a ``file://`` URL.

    Raises
    ------
    ResultsStoreError
        For any other URL (``s3://``, ``memory://``, ...): the store's atomic
        creation, its resume checks and its per-block locks rely on a folder,
        so luxsweep refuses rather than writing a store it cannot keep whole.
    """
    try:
        path = local_path(out, "--out")
    except CacheLocationError as exc:
        raise ResultsStoreError(str(exc)) from exc
    if path is None:
        raise ResultsStoreError(
            f"--out {out}: the results store must be a folder (a local or network-mounted "
            "path, or a file:// URL); stores at other URLs are not supported. Write the "
            "store to a folder on the client (workers need not see it: the client writes "
            "it when they cannot) and copy it afterwards; the coefficient cache may live at "
            "an fsspec URL (--cache)")
    # absolute but as given (no symlink resolution): workers open the same name
    return Path(os.path.abspath(Path(path).expanduser()))


def _layout(plan: Plan) -> results_store.StoreLayout:
    study = plan.loaded.study
    sensor_vars, variant_vars = store_variables(list(study.metrics))
    axes = {a: plan.axis_values(a) for a in plan.axes}
    return results_store.StoreLayout(
        variant_ids=plan.variant_ids(),
        labels=plan.labels(),
        axes=axes,
        sensors=plan.sensors,
        sensor_variables=sensor_vars,
        variant_variables=variant_vars,
        times=plan.times,
        series_chunk=SERIES_CHUNK,
        attrs=_attrs(plan),
        metric_options=plan.loaded.study.metric_options.model_dump(),
        tasks=plan.task_bounds(),
        spaces=plan.layouts,
        space_variables=space_variables(list(study.metrics)),
        views=next((j.views for j in plan.jobs.values()), None),
        view_variables=view_variables(list(study.metrics)),
    )


def _attrs(plan: Plan) -> dict[str, Any]:
    return {
        "study_hash": plan.study_hash,
        "study": plan.loaded.text,
        "study_name": plan.loaded.study.name,
        "study_file": str(plan.loaded.path),
        "axes": plan.axes,
        "metrics": list(plan.loaded.study.metrics),
        "inputs": _inputs_record(plan),
    }


def _inputs_record(plan: Plan) -> dict[str, Any]:
    """What the report's inputs section shows that the study text does not hold:
    each weather file's site (read from its header) and the effective ray-tracing
    settings (defaults filled in)."""
    from luxsweep.kernels.climate import read_site

    climates = {}
    for label, path in plan.loaded.study.climates.items():
        site = read_site(path)
        climates[label] = {"file": Path(path).name, "site": site.name,
                           "latitude": site.latitude, "longitude": site.longitude,
                           "elevation": site.elevation, "utc_offset": site.utc_offset}
    settings = next(iter(plan.jobs.values())).settings if plan.jobs else None
    compute = ({k: (list(v) if isinstance(v, tuple) else v)
                for k, v in dataclasses.asdict(settings).items()} if settings else {})
    return {"climates": climates, "compute": compute}


def prepare(study_path: str | Path, out: str | Path | None, cache_dir: str | Path | None,
            *, fresh: bool = False
            ) -> tuple[Plan, Path, CoefficientCache | UrlCache, np.ndarray | None]:
    """Validate everything and open the store (no cluster yet).

    Returns the plan, results path, cache and the ``done`` flags of an existing
    store of this study (None for a new store, and with ``fresh``: the existing
    store, which must be a luxsweep store, is then replaced by :func:`run_study`).
    """
    loaded = load_study(study_path)
    results = results_path(out) if out else default_results(loaded)
    cache = open_cache(cache_dir if cache_dir else default_cache(loaded))
    plan = make_plan(loaded, cache)  # type: ignore[arg-type]  # any cache: contains()
    done = None
    if results.exists() and fresh:
        results_store.read_attrs(results)  # refuses a folder that is not a results store
    elif results.exists():
        sensor_vars, variant_vars = store_variables(list(plan.loaded.study.metrics))
        series = list(results_store.SERIES_VARIABLES) if plan.times is not None else []
        spaced = ["space_area", *space_variables(list(plan.loaded.study.metrics))]
        done = results_store.open_existing(results, plan.study_hash,
                                           [*sensor_vars, *variant_vars, *spaced, *series])
    return plan, results, cache, done


def _usable(cache: CoefficientCache | UrlCache, key: str) -> bool:
    """Whether entry ``key`` is in the cache and passes its checksums.

    A damaged entry is reported with a warning naming the key, removed, and
    counted as missing, so that it is recomputed before any series task reads it.
    """
    if not cache.contains(key):
        return False
    try:
        cache.verify(key)
    except CacheIntegrityError as exc:
        warnings.warn(f"coefficient cache: entry {key} is damaged and will be recomputed: "
                      f"{exc}", UserWarning, stacklevel=2)
        cache.discard(key)
        return False
    return True


def run_study(
    study_path: str | Path,
    out: str | Path | None = None,
    *,
    workers: int | None = None,
    scheduler: str | None = None,
    cache_dir: str | Path | None = None,
    show_progress: bool = True,
    connect_timeout: float = CONNECT_TIMEOUT,
    tls: TlsFiles | None = None,
    progress_every: float = PLAIN_EVERY,
    fresh: bool = False,
    no_shared_disk: bool = False,
) -> RunSummary:
    """Validate, plan and compute a study; resume an interrupted run of the same study.

    Everything is validated before the cluster is joined or started, and the
    results store is created only once the cluster answers, so neither bad input
    nor an unreachable scheduler leaves a store behind.

    Parameters
    ----------
    study_path, out, cache_dir
        Study file, results store (default beside the study) and coefficient cache.
    workers : int, optional
        Worker processes of the local cluster.
    scheduler : str, optional
        Address or scheduler file of a cluster to join (:func:`sweep.cluster.dask_client`).
    show_progress : bool
        Show progress on stderr (a bar in a terminal, plain lines otherwise).
    connect_timeout : float
        Wait for a joined scheduler [s].
    tls : sweep.cluster.TlsFiles, optional
        CA, certificate and key for a ``tls://`` scheduler.
    progress_every : float
        Interval of the plain progress lines [s].
    fresh : bool
        Discard an existing results store at ``out`` (saying so) and start over;
        it must be a luxsweep results store. It is removed only once the cluster
        answers, moved aside first so a run killed meanwhile leaves no half store.
    no_shared_disk : bool
        Do not rely on any disk shared with the workers: weather files travel as
        bytes through Dask, the client keeps the cache and writes the store
        (:class:`sweep.preflight.Transport`); without it the pre-flight check
        chooses this for whatever some worker cannot reach.

    Raises
    ------
    UserInputError, kernels.errors.InputError
        Bad input, found before any cluster starts.
    ResultsStoreError
        ``out`` holds a store of a different study.
    SchedulerError
        The scheduler cannot be found or reached (no store is created).
    """
    t_start = time.perf_counter()
    check_target(scheduler, tls)
    plan, results, cache, done = prepare(study_path, out, cache_dir, fresh=fresh)
    discard = fresh and results.exists()
    n = len(plan.variants)
    for stale in results_store.remove_unfinished(results):
        log.info("removed %s, left by a run killed while creating the store", stale)
    if done is not None:
        results_store.check_alignment(results, series_chunk=SERIES_CHUNK,
                                      tasks=plan.task_bounds())
        # the rank section may have changed: keep the store's study text current
        results_store.update_attrs(results, _attrs(plan))
    done_before = done if done is not None else np.zeros(n, dtype=bool)
    skipped = int(done_before.sum())
    summary = RunSummary(total=n, skipped=skipped, results=results)
    if skipped:
        log.info("resuming %s: %d of %d variants already done, skipped", results, skipped, n)
    pending = [t for t in plan.tasks if any(not done_before[vi] for vi, _, _ in t.members)]
    if not pending and done is not None:
        results_store.consolidate(results)
        summary.seconds = time.perf_counter() - t_start
        return summary
    needed = {t.key for t in pending}
    missing = sorted((plan.jobs[k] for k in needed if not _usable(cache, k)),
                     key=lambda j: -j.rays)

    with dask_client(workers, scheduler, connect_timeout=connect_timeout, tls=tls) as client:
        try:
            cache.create()
        except OSError as exc:
            raise CacheLocationError(f"coefficient cache {cache.location}: cannot be created "
                                     f"({exc}); choose another with --cache") from exc
        # every worker: weather files, cache and store folders, versions (exit 2);
        # what some worker cannot reach stays with the client
        transport = preflight(client, {t.climate_file: t.climate_sha256 for t in pending},
                              cache.location, results, no_shared_disk=no_shared_disk)
        # read before the store exists: a file changed since planning leaves none
        weather = read_weather(pending) if transport.inputs_by_dask else {}
        if discard:
            _discard_store(results, plan)
        if done is None:  # only now that the cluster answers and passed its check
            results_store.create_store(results, _layout(plan))
        link = dashboard_link(client, local=not scheduler)
        if link:
            log.info("dashboard: %s", link)
        cache.clean_temporary(older_than=3600.0)
        collector = Collector(client, plan, results, cache, summary,
                              hold_sets=transport.hold_sets, transport=transport)
        collector.send_climates(weather)
        if transport.client_cache:
            collector.send_cached_sets(sorted(needed - {j.key for j in missing}))
        collector.submit_coefficients(missing)
        for task in pending:
            collector.submit_series(task, [m for m in task.members if not done_before[m[0]]])
        progress = (Progress(len(missing), collector.total_todo, every=progress_every)
                    if show_progress else None)
        with progress if progress is not None else contextlib.nullcontext():
            collector.collect(progress)
    results_store.consolidate(results)
    summary.seconds = time.perf_counter() - t_start
    return summary


def _weather_bytes(data: bytes) -> bytes:
    """The bytes of one weather file, as a task result (:meth:`Collector.send_climates`)."""
    return data


def read_weather(tasks: list[SeriesTask]) -> dict[str, bytes]:
    """The bytes of every weather file of ``tasks``, read once by the client.

    Raises
    ------
    InputMismatchError
        A file's bytes are not those the plan hashed (it changed since planning).
    """
    out: dict[str, bytes] = {}
    for task in tasks:
        path = task.climate_file
        if path in out:
            continue
        data = Path(path).read_bytes()
        found = hashlib.sha256(data).hexdigest()
        if task.climate_sha256 and found != task.climate_sha256:
            raise InputMismatchError(
                f"the weather file {path} changed after the run read it (sha256 "
                f"{found[:12]}… now, {task.climate_sha256[:12]}… then); run again")
        out[path] = data
    return out


def _discard_store(results: Path, plan: Plan) -> None:
    """Say why, then move the store aside (atomically) and delete it."""
    same = results_store.read_attrs(results).get("study_hash") == plan.study_hash
    why = ("it holds results of this study; starting over as asked" if same else
           "it holds results of an earlier version of this study (or another study)")
    log.warning("discarding the results store %s: %s", results, why)
    aside = results.with_name(f"{results.name}{results_store.CREATING}discarded-"
                              f"{os.getpid()}")
    os.rename(results, aside)
    shutil.rmtree(aside, ignore_errors=True)


def _variant_ids(task: SeriesTask, todo: list[tuple[int, int, int]]) -> list[str]:
    ids = {m[0]: vid for m, vid in zip(task.members, task.variant_ids, strict=True)}
    return [ids[vi] for vi, _, _ in todo]


class Collector:
    """Submits a run's tasks and gathers them; retries the members of a failed group.

    Coefficient tasks and series tasks are gathered together as they finish
    (a coefficient set finishing moves the progress at once). When a group's
    series task raises, each of its pending members is submitted again as its
    own task (key ``<task_id>-<variant_id>``), so that one bad variant cannot
    take the others down with it; only members whose own task fails too are
    reported. When a task failed because workers died (``KilledWorker``), the
    cause may be any task that shared those workers, so its members run again
    one at a time at the end, alone on the cluster (key
    ``<task_id>-<variant_id>-alone``), where only a task's own deaths count
    against it: a poison variant then costs two rounds of worker deaths in all.
    When a group failed because its coefficient set could not be computed, its
    members are reported at once. A weather file that differs on a worker from
    the client's (:class:`~sweep.errors.InputMismatchError`) stops the run: every
    task still queued is cancelled and the error is raised.

    A coefficient set computed in this run is its task's result, so a series
    task submitted before it finished receives it through Dask. With
    ``hold_sets`` (some worker keeps its own cache folder) the run holds it in
    the workers' memory until the last series task of its key is gathered, so
    retries get it too; with a shared cache it is released once computed and
    later tasks read the cache. The client reads only a small summary of it
    (``coefficient-info-<key>``). Other finished futures are released as soon
    as they are read, so that a worker dying later does not make Dask recompute
    them (and count them as suspects).

    Without a shared disk (``transport``) the collector also places the weather
    files' bytes and the client's cached sets in Dask, publishes the sets the
    workers compute in the client's cache, and writes the results the series
    tasks return (series blocks, then the variants with ``done`` last), all in
    the thread that gathers them.
    """

    def __init__(self, client: Any, plan: Plan, results: Path,
                 cache: CoefficientCache | UrlCache, summary: RunSummary,
                 hold_sets: bool = True, transport: Transport | None = None) -> None:
        self.client = client
        self.transport = transport or Transport()
        self.cache = cache
        self.results = str(results)
        # what workers are told: None when the client keeps the cache or writes the store
        self.cache_root = None if self.transport.client_cache else cache.location
        self.store_path = None if self.transport.client_store else self.results
        self.climate_data: dict[str, Any] = {}  # weather file -> future of its bytes
        self.sent: set[str] = set()  # sets scattered from the client's cache
        self.summary = summary
        self.timing: dict[str, float] = {"coefficients": 0.0}
        self.jobs = plan.jobs
        self.hold_sets = hold_sets or self.transport.client_cache
        self.coefficients: dict[str, Any] = {}  # set key -> future holding the set
        self.coefficient_keys: dict[Any, str] = {}  # summary future -> set key, until read
        self.users: dict[str, int] = {}  # set key -> series futures not yet gathered
        self.series: dict[Any, tuple[SeriesTask, list[tuple[int, int, int]]]] = {}
        self.failed_sets: set[str] = set()
        self.suspects: list[tuple[SeriesTask, tuple[int, int, int], str]] = []
        self.total_todo = 0
        self.progress: Progress | None = None

    # -- submitting

    def send_climates(self, weather: dict[str, bytes]) -> None:
        """Place each weather file's bytes (:func:`read_weather`) in Dask.

        Each is the argument of a small task (``weather-<sha256>``) rather than
        scattered data: the scheduler keeps the task, so if the worker holding
        the bytes dies they are made again, not lost.
        """
        for path, data in weather.items():
            digest = hashlib.sha256(data).hexdigest()
            self.climate_data[path] = self.client.submit(
                _weather_bytes, data, key=f"weather-{digest[:24]}", pure=False, priority=200)

    def send_cached_sets(self, keys: list[str]) -> None:
        """Place the client's cached sets ``keys`` in Dask (the client keeps the cache)."""
        for key in keys:
            if self._send_set(key) is None:  # damaged since planning: computed like a miss
                self.submit_coefficients([self.jobs[key]])

    def _send_set(self, key: str) -> Any:
        """Scatter set ``key`` from the client's cache; its future (None when not there)."""
        coefficients = self.cache.load(key)
        if coefficients is None:
            return None
        for attempt in range(SCATTER_ATTEMPTS):
            try:  # a list of one: scatter would place a dict's values one by one
                (fut,) = self.client.scatter([{"coefficients": coefficients}], hash=False)
                break
            except (TimeoutError, OSError):
                # every worker just died (a poison variant) and the nannies are still
                # starting new ones: wait for one rather than end the run
                if attempt == SCATTER_ATTEMPTS - 1:
                    raise
                log.warning("no worker to send coefficient set %s to; waiting for one",
                            key[:16])
                self.client.wait_for_workers(1, timeout=WORKER_WAIT)
        self.coefficients[key] = fut
        self.sent.add(key)
        return fut

    def _set_for(self, key: str) -> Any:
        """The future of set ``key`` for a series task, or None (the worker then reads
        its cache or computes the set from its job).

        When the client keeps the cache, a set no longer held (released after its
        last task, or scattered data lost with a worker) is sent again from the
        client's cache, where every set of the run has been published.
        """
        fut = self.coefficients.get(key)
        if not self.transport.client_cache or (
                fut is not None and fut.status in ("pending", "finished")):
            return fut
        return self._send_set(key)

    def submit_coefficients(self, missing: list[CoefficientJob]) -> None:
        """One task per missing set, largest first, ahead of every series task."""
        for rank, job in enumerate(missing):
            priority = 100 + len(missing) - rank
            ranges = split_ranges(job)
            if ranges:
                fut = self._submit_split(job, ranges, priority)
            else:
                fut = self.client.submit(
                    coefficient_task, job, self.cache_root, key=f"coefficients-{job.key[:24]}",
                    priority=priority, pure=False, retries=0,
                )
            info = self.client.submit(coefficient_info, fut, key=f"coefficient-info-"
                                      f"{job.key[:24]}", priority=priority, pure=False)
            self.coefficients[job.key] = fut
            self.coefficient_keys[info] = job.key

    def _submit_split(self, job: CoefficientJob, ranges: list[tuple[int, int]],
                      priority: int) -> Any:
        return submit_split(self.client, job, self.cache_root, ranges, priority)

    def _submit(self, task: SeriesTask, todo: list[tuple[int, int, int]], key: str) -> Any:
        # the set through Dask while this run holds it; else the worker's cache,
        # or computed there from the job when its cache lacks it
        self.users[task.key] = self.users.get(task.key, 0) + 1
        job, climate = self.jobs.get(task.key), self.climate_data.get(task.climate_file)
        ranges = series_ranges(task, job)
        if not ranges:
            return self.client.submit(
                series_task, task, todo, self.store_path, self.cache_root,
                self._set_for(task.key), job, climate, key=key, priority=0,
                pure=False, retries=0,
            )
        # a set too large for one task: parts of whole spaces, each with its rows only
        # (cut where the set is held, or read from the worker's cache), then their join
        submit = functools.partial(self.client.submit, priority=0, pure=False, retries=0)
        held = self._set_for(task.key)
        parts = []
        for a, b in ranges:
            rows = (None if held is None
                    else submit(set_part, held, a, b, key=f"{key}-rows-{a}", priority=1))
            parts.append(submit(series_part_task, task, todo, self.store_path, self.cache_root,
                                rows, job, climate, a, b, key=f"{key}-part-{a}"))
        return submit(series_join_task, task, todo, self.store_path, job, climate, parts,
                      key=key)

    def submit_series(self, task: SeriesTask, todo: list[tuple[int, int, int]],
                      key: str | None = None) -> Any:
        """Submit the members ``todo`` of ``task`` (key: the task id)."""
        fut = self._submit(task, todo, key or task.task_id)
        self.series[fut] = (task, todo)
        if key is None:
            self.total_todo += len(todo)
        return fut

    # -- gathering

    def collect(self, progress: Progress | None = None) -> RunSummary:
        """Gather every task (blocks until all are done or failed); the run's summary."""
        from distributed import as_completed

        self.progress = progress
        pending = as_completed([*self.coefficient_keys, *self.series])
        for fut in pending:
            if fut in self.coefficient_keys:
                self._coefficient_finished(fut)
            else:
                for retry in self._series_finished(fut):
                    pending.add(retry)
        for key in list(self.coefficients):
            self._release_set(key)
        for task, member, vid in self.suspects:
            for attempt in ("", "-again"):  # again once if the set sent with it was lost
                fut = self._submit(task, [member], f"{task.task_id}-{vid}-alone{attempt}")
                try:
                    self._written(fut.result())
                except Exception as exc:
                    if not attempt and self._lost_set(task.key, exc):
                        continue
                    self._report(fut.key, task, [vid], exc)
                finally:
                    self.users[task.key] -= 1
                    fut.release()
                break
        for key in list(self.coefficients):  # sets sent again for the tasks run alone
            self._release_set(key)
        self.summary.timing = self.timing
        return self.summary

    def _coefficient_finished(self, fut: Any) -> None:
        key = self.coefficient_keys.pop(fut)
        if fut.status not in ("error", "cancelled"):
            # "finished", or "lost"/"pending" again when a worker holding the result died
            # after it was done: Dask makes it again and result() waits for it (a set
            # treated as failed here would never be published to the client's cache)
            res = fut.result()
            if self.transport.client_cache and res["computed"]:
                # the client keeps the cache: publish the set the worker returned
                self.cache.save(self.coefficients[key].result()["coefficients"])
            self.summary.coefficient_sets_computed += int(res["computed"])
            self.timing["coefficients"] += res["seconds"]
            self.summary.crossed_twice += int(res.get("crossed_twice", 0))
            if self.progress is not None:
                self.progress.set_done()
            fut.release()
            if not self.hold_sets or not self.users.get(key):
                self._release_set(key)
        else:  # its series tasks fail with it and are reported at once
            self.failed_sets.add(key)

    def _release_set(self, key: str) -> None:
        """Drop the run's hold on set ``key`` (unless its task failed: it is reported)."""
        fut = self.coefficients.get(key)
        if fut is not None and fut.status != "error" and key not in self.failed_sets:
            del self.coefficients[key]
            fut.release()

    def _stop(self) -> None:
        """Cancel every task not yet gathered."""
        futures = [*self.coefficient_keys, *self.coefficients.values(), *self.series]
        if futures:
            self.client.cancel(futures)

    def _series_finished(self, fut: Any) -> list[Any]:
        """Record one series task; the retries it needs (to be gathered too)."""
        from distributed import KilledWorker

        task, todo = self.series.pop(fut)
        self.users[task.key] -= 1
        ids = _variant_ids(task, todo)
        retries: list[Any] = []
        try:
            result = fut.result()
        except InputMismatchError:
            self._stop()
            raise
        except Exception as exc:
            lost = self._lost_set(task.key, exc)
            if self._set_failed(task.key):
                self._report(fut.key, task, ids, exc)
            elif isinstance(exc, KilledWorker) or lost:
                log.warning("task %s failed (%s); its variants %s will run again one at "
                            "a time at the end", fut.key, exc, ", ".join(ids))
                self.suspects += [(task, m, vid) for m, vid in zip(todo, ids, strict=True)]
            elif len(todo) > 1:
                log.warning("task %s (coefficient key %s, climate %s) failed (%s: %s); "
                            "retrying its variants %s one by one", task.task_id,
                            task.key[:16], task.climate, type(exc).__name__, exc,
                            ", ".join(ids))
                retries = [self.submit_series(task, [member], f"{task.task_id}-{vid}")
                           for member, vid in zip(todo, ids, strict=True)]
            else:
                self._report(fut.key, task, ids, exc)
            return retries
        finally:
            fut.release()
            if not self.users[task.key] and not retries \
                    and task.key not in self.coefficient_keys.values():
                self._release_set(task.key)
        self._written(result)
        return retries

    def _lost_set(self, key: str, exc: Exception) -> bool:
        """Whether a task failed because the set the client sent with it was lost (a
        worker holding the only copy died: scattered data cannot be made again). The
        set is then dropped, so the next task of its key gets it sent afresh."""
        from concurrent.futures import CancelledError

        if key not in self.sent or not isinstance(exc, CancelledError):
            return False
        self.sent.discard(key)
        fut = self.coefficients.pop(key, None)
        if fut is not None:
            fut.release()
        return True

    def _set_failed(self, key: str) -> bool:
        """Whether the coefficient task of set ``key`` failed (seen or not yet gathered)."""
        fut = self.coefficients.get(key)
        if fut is not None and fut.status == "error":
            self.failed_sets.add(key)
        return key in self.failed_sets

    def _written(self, result: dict[str, Any]) -> None:
        if "rows" in result:  # the client writes the store: series first, `done` last
            t0 = time.perf_counter()
            indices = result["rows"]["indices"]
            for start, first, last, illuminance, direct in result["series"]:
                results_store.write_series_block(self.results, indices, start, illuminance,
                                                 direct, first, last)
            results_store.write_variants(self.results, **result["rows"])
            self.timing["write"] = (self.timing.get("write", 0.0)
                                    + time.perf_counter() - t0)
        self.summary.written += result["variants"]
        self.summary.coefficient_sets_recomputed += result.get("recomputed", 0)
        for k, v in result["timing"].items():
            self.timing[k] = self.timing.get(k, 0.0) + v
        if self.progress is not None:
            self.progress.variants_done(result["variants"])

    def _report(self, key: str, task: SeriesTask, ids: list[str], exc: Exception) -> None:
        self.summary.failed.setdefault(task.task_id, []).extend(ids)
        log.error("task %s (coefficient key %s, climate %s) failed for variants %s: %s: %s",
                  key, task.key[:16], task.climate, ", ".join(ids), type(exc).__name__, exc)


def format_summary(summary: RunSummary) -> str:
    """Plain-text account of a run (printed by ``luxsweep run``)."""
    lines = [
        f"results: {summary.results}",
        f"variants: {summary.total} total, {summary.written} computed now, "
        f"{summary.skipped} already done (skipped), {sum(map(len, summary.failed.values()))} "
        "failed",
        f"coefficient sets computed: {summary.coefficient_sets_computed}"
        + (f" (and {summary.coefficient_sets_recomputed} again on workers whose cache "
           "lacked them)" if summary.coefficient_sets_recomputed else "")
        + f"; wall time {summary.seconds:.1f} s",
    ]
    if summary.timing:
        busy = sum(summary.timing.values())
        parts = ", ".join(f"{k} {v:.1f} s ({100 * v / busy:.0f} %)"
                          for k, v in summary.timing.items() if busy > 0)
        lines.append(f"worker time: {parts}")
    if summary.crossed_twice:
        lines.append(f"note: {summary.crossed_twice:,} rays left through one outside window and "
                     "met another; they were counted as blocked (light re-entering the "
                     "building from outside is not followed), so results there are slightly "
                     "low")
    for task_id, ids in summary.failed.items():
        lines.append(f"FAILED {task_id}: variants {', '.join(ids)}")
    return "\n".join(lines)


@contextlib.contextmanager
def terminate_as_interrupt() -> Iterator[None]:
    """Turn SIGTERM into KeyboardInterrupt so clusters shut down cleanly."""
    def handler(signum: int, frame: Any) -> None:
        raise KeyboardInterrupt(f"signal {signum}")

    try:
        previous = signal.signal(signal.SIGTERM, handler)
    except ValueError:  # not the main thread
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


__all__ = [
    "ALLOWED_FAILURES",
    "CLIMATE_STEPS",
    "FAMILIES",
    "ClimateSteps",
    "Collector",
    "ResultsStoreError",
    "RunSummary",
    "VariantFailedError",
    "Workspace",
    "coefficient_assemble_task",
    "coefficient_elements_task",
    "coefficient_info",
    "coefficient_part_task",
    "coefficient_task",
    "dask_client",
    "default_cache",
    "default_results",
    "format_summary",
    "is_loopback",
    "is_plain_link",
    "prepare",
    "read_weather",
    "results_path",
    "run_study",
    "series_join_task",
    "series_part_task",
    "series_ranges",
    "series_task",
    "set_part",
    "split_ranges",
    "store_variables",
    "submit_split",
    "terminate_as_interrupt",
    "view_coefficients",
]
