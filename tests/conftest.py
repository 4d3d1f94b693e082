"""Shared fixtures: bundled weather data, tiny studies, the CLI in and out of process,
and a listening socket that records any attempt to reach a scheduler.

Owned by the reliability tests (issue 7); other test files may use these
fixtures — ask for additions rather than editing.
"""

from __future__ import annotations

import json
import logging
import os
import shutil
import signal
import socket
import subprocess
import sys
import textwrap
import threading
import warnings
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pvlib
import pytest

REPO = Path(__file__).resolve().parent.parent
PVLIB_DATA = Path(pvlib.__file__).parent / "data"
TMY3_GREENSBORO = PVLIB_DATA / "723170TYA.CSV"  # real TMY3 year bundled with pvlib
TMY3_SAND_POINT = PVLIB_DATA / "703165TY.csv"  # real TMY3 year bundled with pvlib

CLUSTER_MODULES = frozenset({
    "test_cache_faults", "test_cli", "test_cluster", "test_cluster_trust", "test_exposure",
    "test_faults", "test_no_shared_disk", "test_run", "test_series_parts", "test_split_sets",
    "test_store_batch",
})
"""Test modules that start Dask clusters or whole ``luxsweep`` runs. With ``pytest -n 2
--dist loadgroup`` (the README's test command) they share one test process, so at most one
cluster runs at a time beside the single-process tests: two clusters at once on two cores
would double their wall time and stretch their fault time-outs."""


def pytest_collection_modifyitems(config: pytest.Config, items: list[pytest.Item]) -> None:
    """Put the tests of :data:`CLUSTER_MODULES` in one ``xdist_group``."""
    for item in items:
        if item.module is not None and item.module.__name__ in CLUSTER_MODULES:
            item.add_marker(pytest.mark.xdist_group("cluster"))


@dataclass
class CliResult:
    """Exit status and captured output of one ``luxsweep`` invocation."""

    code: int
    out: str
    err: str
    seconds: float = 0.0

    @property
    def text(self) -> str:
        return self.out + self.err


@pytest.fixture
def cli(capfd: pytest.CaptureFixture[str]) -> Callable[..., CliResult]:
    """Run ``luxsweep.sweep.cli.main(argv)`` in this process; capture fd-level output.

    fd-level capture also catches consoles that bound ``sys.stderr`` at import.
    ``SystemExit`` (argparse) is turned into its exit status.
    """
    import time

    from luxsweep.sweep.cli import main

    def run(*argv: str) -> CliResult:
        capfd.readouterr()
        log = logging.getLogger("luxsweep")
        saved = (list(log.handlers), log.level, log.propagate, warnings.showwarning)
        t0 = time.perf_counter()
        try:
            code = main([str(a) for a in argv])
        except SystemExit as exc:  # argparse errors exit with 2
            code = exc.code if isinstance(exc.code, int) else 1
        finally:
            # main() binds a log handler to this test's captured stderr; drop it so
            # later tests do not log into a closed stream
            log.handlers[:] = saved[0]
            log.level, log.propagate, warnings.showwarning = saved[1:]
        seconds = time.perf_counter() - t0
        cap = capfd.readouterr()
        return CliResult(int(code or 0), cap.out, cap.err, seconds)

    return run


def luxsweep_process(
    *argv: str | Path,
    cwd: Path | None = None,
    env: dict[str, str] | None = None,
    new_session: bool = False,
) -> subprocess.Popen[str]:
    """Start ``python -m luxsweep.sweep.cli ARGV`` as a child process (text pipes).

    ``new_session`` puts it in its own process group (``os.killpg`` kills it with
    everything it started) with Ctrl-C's default meaning: a test runner started in
    the background of a non-interactive shell inherits SIGINT ignored, and so would
    the child, which would then never see the interrupt a test sends.
    """
    full_env = {**os.environ, "PYTHONUNBUFFERED": "1", **(env or {})}
    return subprocess.Popen(
        [sys.executable, "-m", "luxsweep.sweep.cli", *map(str, argv)],
        cwd=cwd,
        env=full_env,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        start_new_session=new_session,
        preexec_fn=_default_sigint if new_session else None,
    )


def _default_sigint() -> None:
    signal.signal(signal.SIGINT, signal.SIG_DFL)


def run_luxsweep(*argv: str | Path, cwd: Path | None = None, timeout: float = 120.0,
                 env: dict[str, str] | None = None) -> CliResult:
    """Run ``luxsweep ARGV`` in a child process to completion."""
    import time

    t0 = time.perf_counter()
    proc = luxsweep_process(*argv, cwd=cwd, env=env)
    try:
        out, err = proc.communicate(timeout=timeout)
    except subprocess.TimeoutExpired:
        proc.kill()
        out, err = proc.communicate()
        raise AssertionError(f"luxsweep {argv} did not finish in {timeout} s:\n{err}") from None
    return CliResult(proc.returncode, out, err, time.perf_counter() - t0)


@dataclass
class Sentinel:
    """A TCP listener on loopback that counts connections (a stand-in scheduler)."""

    sock: socket.socket
    connections: list[tuple[str, int]] = field(default_factory=list)

    @property
    def address(self) -> str:
        host, port = self.sock.getsockname()
        return f"tcp://{host}:{port}"


@pytest.fixture
def sentinel_scheduler() -> Iterator[Sentinel]:
    """A listening socket given as ``--scheduler``: any connection attempt is recorded
    and dropped, so a run that should stop before touching a cluster can be checked.
    """
    sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    sock.bind(("127.0.0.1", 0))
    sock.listen(16)
    sock.settimeout(0.1)
    sentinel = Sentinel(sock)
    stop = threading.Event()

    def serve() -> None:
        while not stop.is_set():
            try:
                conn, peer = sock.accept()
            except (TimeoutError, OSError):
                continue
            sentinel.connections.append(peer)
            conn.close()

    thread = threading.Thread(target=serve, daemon=True)
    thread.start()
    yield sentinel
    stop.set()
    thread.join(timeout=2)
    sock.close()


@pytest.fixture
def short_dask_timeouts() -> Iterator[None]:
    """Make a stray connection attempt fail in seconds rather than hang."""
    import dask
    import distributed  # noqa: F401  (loads distributed's config defaults first)

    with dask.config.set({"distributed.comm.timeouts.connect": "3s"}):
        yield


# --------------------------------------------------------------------- tiny studies

# Cheap compute settings: Tregenza 145 patches, coarse sun points, few rays,
# large elements. Physics accuracy is not under test in the reliability tests,
# only that the engine's bookkeeping gives the same bytes as a serial run.
TINY_COMPUTE = {
    "subdivision": 1,
    "sun_spacing": 10.0,
    "sky_rays_per_patch": 4,
    "ground_rays": 16,
    "element_size": 1.5,
    "element_rays": 16,
    "sensor_rays": 32,
    "seed": 0,
}


def write_tiny_study(
    folder: Path,
    *,
    name: str = "tiny-fault-study",
    orientations: tuple[float, ...] = (90.0, 180.0),
    climates: tuple[str, ...] = ("coastal", "inland"),
    transmittances: tuple[float, ...] = (0.7, 0.4),
    widths: tuple[float, ...] | None = None,
    extra: str = "",
    compute: dict | None = None,
) -> Path:
    """Write a small valid study (3 × 3 × 2.7 m room, 1 m grid) with real TMY3 climates.

    Parameters
    ----------
    folder : Path
        Folder to write ``study.yaml`` and ``climates/`` into.
    orientations, climates, transmittances, widths : tuples
        The varied axes (``widths`` varies the front window width when given, so
        the study has several geometries).
    extra : str
        YAML appended at the top level (e.g. ``store_series: true``).
    compute : dict, optional
        Overrides of :data:`TINY_COMPUTE`.

    Returns
    -------
    Path
        The study file.
    """
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "climates").mkdir(exist_ok=True)
    sources = {"coastal": TMY3_GREENSBORO, "inland": TMY3_SAND_POINT}
    for label in ("coastal", "inland"):
        target = folder / "climates" / f"{label}.csv"
        if not target.exists():
            shutil.copyfile(sources[label], target)
    settings = {**TINY_COMPUTE, **(compute or {})}
    vary = [
        f"  orientation: {list(orientations)}",
        f"  climate: [{', '.join(climates)}]",
        f"  glazings.main.transmittance: {list(transmittances)}",
    ]
    if widths:
        vary.append(f"  room.windows.0.width: {list(widths)}")
    text = textwrap.dedent(
        f"""\
        name: {name}
        climates:
          coastal: climates/coastal.csv
          inland: climates/inland.csv
        room:
          width: 3.0
          depth: 3.0
          height: 2.7
          reflectance: {{floor: 0.2, walls: 0.5, ceiling: 0.7}}
          windows:
            - {{wall: front, width: 1.5, sill: 0.9, head: 2.1, offset: 0.0, glazing: main}}
        glazings:
          main: {{transmittance: 0.7, panes: 2}}
        ground_reflectance: 0.2
        grid: {{height: 0.8, spacing: 1.0, margin: 0.5}}
        occupancy: {{start: "08:00", end: "18:00", days: weekdays}}
        timestep: 60
        compute: {json.dumps(settings)}
        """
    )
    text += "vary:\n" + "\n".join(vary) + "\n" + extra
    path = folder / "study.yaml"
    path.write_text(text)
    return path


# A room no daylight reaches (OBJ): a closed box whose only glazing hangs inside.
SEALED_ROOM = """\
# a closed 3 x 3 x 2.7 m box; its only glazing hangs inside, so no daylight enters
v 0 0 0
v 3 0 0
v 3 3 0
v 0 3 0
v 0 0 2.7
v 3 0 2.7
v 3 3 2.7
v 0 3 2.7
v 1 1.5 1
v 2 1.5 1
v 2 1.5 2
v 1 1.5 2
g floor
f 1 2 3 4
g ceiling
f 5 8 7 6
g walls
f 1 5 6 2
f 2 6 7 3
f 3 7 8 4
f 4 8 5 1
g glass
f 9 10 11 12
"""



def sealed_room_study(name: str, vary: str) -> str:
    """Study text for :data:`SEALED_ROOM` (as ``room.obj``) with the ``coastal``
    climate of :func:`write_tiny_study`, cheap settings and the given ``vary:`` body."""
    return (
        f"name: {name}\n"
        "climates: {coastal: climates/coastal.csv}\n"
        "mesh: room.obj\n"
        "materials:\n  floor: {reflectance: 0.2}\n  walls: {reflectance: 0.5}\n"
        "  ceiling: {reflectance: 0.7}\n  glass: {glazing: main}\n"
        "glazings: {main: {transmittance: 0.7, panes: 2}}\n"
        "grid: {height: 0.8, spacing: 1.0, margin: 0.4, floors: [floor]}\n"
        'compute: {"subdivision": 1, "sun_spacing": 10.0, "sky_rays_per_patch": 4, '
        '"ground_rays": 16, "element_size": 1.5, "element_rays": 16, "sensor_rays": 32}\n'
        f"vary: {vary}\n"
    )

@pytest.fixture
def tiny_study(tmp_path: Path) -> Path:
    """A written tiny study (2 orientations × 2 climates × 2 transmittances = 8 variants)."""
    return write_tiny_study(tmp_path / "study")


# --------------------------------------------------------------------- results stores


def run_plan_in_process(plan: Any, results: Path, cache_root: Path | str,
                        job: Any = None) -> None:
    """Create the store of ``plan`` at ``results`` and run every series task in this
    process (each with its own coefficient job, or ``job`` for all), then consolidate.

    A task that :func:`sweep.run.series_ranges` splits runs as the cluster runs it:
    its parts (each reading its rows from the cache), then their join."""
    from luxsweep.sweep import store as results_store
    from luxsweep.sweep.run import (
        _layout,
        series_join_task,
        series_part_task,
        series_ranges,
        series_task,
    )

    results_store.create_store(results, _layout(plan))
    for task in plan.tasks:
        task_job = job if job is not None else plan.jobs[task.key]
        todo = list(task.members)
        ranges = series_ranges(task, task_job)
        if not ranges:
            series_task(task, todo, str(results), str(cache_root), None, task_job)
            continue
        parts = [series_part_task(task, todo, str(results), str(cache_root), None, task_job,
                                  None, a, b) for a, b in ranges]
        series_join_task(task, todo, str(results), task_job, None, parts)
    results_store.consolidate(results)


def store_arrays(path: Path) -> dict[str, Any]:
    """Every array of a results store, read with zarr-python (name -> ndarray)."""
    import zarr

    group = zarr.open_group(str(path), mode="r")
    return {name: arr[...] for name, arr in group.arrays()}


def store_files(path: Path) -> dict[str, bytes]:
    """Every file of a store folder (relative path -> bytes)."""
    return {str(p.relative_to(path)): p.read_bytes() for p in sorted(path.rglob("*"))
            if p.is_file()}


def assert_same_results(store: Path, reference: Path) -> None:
    """Both stores hold the same arrays with the same values (NaN equal to NaN) and the
    same study attributes; raises AssertionError naming the first difference."""
    import numpy as np
    import zarr

    got, want = store_arrays(store), store_arrays(reference)
    assert sorted(got) == sorted(want), (sorted(got), sorted(want))
    for name, expected in want.items():
        value = got[name]
        assert value.shape == expected.shape and value.dtype == expected.dtype, name
        if value.dtype.kind == "f":
            assert np.array_equal(value, expected, equal_nan=True), f"{name} differs"
        else:
            assert np.array_equal(value, expected), f"{name} differs"
    a = dict(zarr.open_group(str(store), mode="r").attrs)
    b = dict(zarr.open_group(str(reference), mode="r").attrs)
    for key in ("study_hash", "study", "axes", "metrics"):
        assert a.get(key) == b.get(key), f"attribute {key} differs"
