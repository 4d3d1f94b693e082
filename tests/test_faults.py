"""Sweeps under faults: killed workers, a poison variant, a killed run, duplicate tasks,
all-zero variants (issue 7, items 1-3, 7, 8).

Faults are injected from the test side only: a Dask worker plugin registered on a
cluster the test starts (the engine joins it with ``scheduler=``), or signals sent
to a ``luxsweep run`` process group. Nothing in the engine can trigger them.
Every check compares the store with an uninterrupted serial run of the same
study (bit for bit) and counts what was recomputed.
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import random
import shutil
import signal
import threading
import time
from pathlib import Path

import numpy as np
import psutil
import pytest
import zarr
from conftest import (
    SEALED_ROOM,
    assert_same_results,
    luxsweep_process,
    sealed_room_study,
    store_files,
    write_tiny_study,
)
from distributed.diagnostics.plugin import WorkerPlugin

from luxsweep.sweep.cache import CoefficientCache
from luxsweep.sweep.run import run_study

N_VARIANTS = 16  # 2 window widths x 2 orientations x 2 climates x 2 transmittances


# ------------------------------------------------------------------ fault plugins


def _members_of(args: tuple) -> set[str]:
    """Variant ids a series task will write, read from its arguments.

    Follows ``sweep.run.series_task(task, todo, ...)``: ``task`` has ``members``
    (variant index, orientation index, row index) and ``variant_ids`` in the same
    order; ``todo`` lists the members to compute.
    """
    task = next((a for a in args if hasattr(a, "variant_ids") and hasattr(a, "members")), None)
    todo = next((a for a in args if isinstance(a, list) and a and isinstance(a[0], tuple)),
                None)
    if task is None or todo is None:
        return set()
    ids = {m[0]: vid for m, vid in zip(task.members, task.variant_ids, strict=True)}
    return {ids[m[0]] for m in todo}


class KillOnceAtRandom(WorkerPlugin):
    """``os._exit`` the worker at a random moment after a task starts, once per task key.

    A ledger file per key (created with O_EXCL, so across restarted workers each
    key is hit once) records the delay; its count is the number of faults.
    """

    def __init__(self, ledger: str, seed: int, max_delay: float) -> None:
        self.ledger = ledger
        self.seed = seed
        self.max_delay = max_delay

    def setup(self, worker) -> None:
        self.worker = worker

    def transition(self, key, start, finish, **kwargs) -> None:
        name = str(key)
        if finish != "executing" or not name.startswith(("series-", "coefficients-")):
            return
        marker = Path(self.ledger) / hashlib.sha256(name.encode()).hexdigest()[:20]
        try:
            fd = os.open(marker, os.O_CREAT | os.O_EXCL | os.O_WRONLY)
        except FileExistsError:
            return
        delay = random.Random(f"{self.seed}-{name}").uniform(0.0, self.max_delay)
        os.write(fd, f"{name} {delay:.3f}\n".encode())
        os.close(fd)
        threading.Timer(delay, os._exit, args=(1,)).start()


class KillPoison(WorkerPlugin):
    """``os._exit`` the worker whenever a task that writes the poison variant starts."""

    def __init__(self, poison: str, ledger: str) -> None:
        self.poison = poison
        self.ledger = ledger

    def setup(self, worker) -> None:
        self.worker = worker

    def transition(self, key, start, finish, **kwargs) -> None:
        if finish != "executing":
            return
        spec = self.worker.state.tasks[key].run_spec
        if self.poison in _members_of(tuple(getattr(spec, "args", ()))):
            with open(Path(self.ledger) / "kills", "a") as f:
                f.write(f"{key}\n")
            os._exit(1)


@contextlib.contextmanager
def loopback_cluster(n_workers: int = 2, **config):
    """A LocalCluster of worker processes on 127.0.0.1 and a client to it."""
    import dask
    from distributed import Client, LocalCluster

    with dask.config.set(config), \
            LocalCluster(n_workers=n_workers, threads_per_worker=1, processes=True,
                         host="127.0.0.1", dashboard_address=None) as cluster, \
            Client(cluster) as client:
        yield cluster, client


# ------------------------------------------------------------------ shared study


@pytest.fixture(scope="module")
def study(tmp_path_factory) -> Path:
    """16 variants: 2 geometries (window widths), 2 climates, 2 orientations, 2 τ."""
    return write_tiny_study(tmp_path_factory.mktemp("faults") / "study", widths=(1.0, 1.5))


@pytest.fixture(scope="module")
def reference(study, tmp_path_factory) -> tuple[Path, Path]:
    """An uninterrupted serial run (one worker): (results store, cache folder)."""
    base = tmp_path_factory.mktemp("reference")
    out, cache = base / "results.zarr", base / "cache"
    summary = run_study(study, out, workers=1, cache_dir=cache, show_progress=False)
    assert summary.ok and summary.written == N_VARIANTS
    assert summary.coefficient_sets_computed == 2
    return out, cache


def done_flags(store: Path) -> np.ndarray:
    return np.asarray(zarr.open_group(str(store), mode="r")["done"][:], dtype=bool)


# ------------------------------------------------------------------ item 1


@pytest.mark.slow
def test_workers_killed_mid_sweep_give_the_serial_result(study, reference, tmp_path):
    """Every coefficient and series task kills its worker (``os._exit``) once, at a
    random delay after it starts. Asserts: faults were injected (one per task) and
    worker processes really changed; the run reports success with all 16 variants
    written and none failed; the store equals the serial run's bit for bit."""
    ledger = tmp_path / "ledger"
    ledger.mkdir()
    with loopback_cluster(2, **{"distributed.scheduler.allowed-failures": 10}) as (cluster, client):
        before = set(client.run(os.getpid).values())
        client.register_plugin(KillOnceAtRandom(str(ledger), seed=7, max_delay=0.6))
        summary = run_study(study, tmp_path / "results.zarr", scheduler=cluster.scheduler_address,
                            cache_dir=tmp_path / "cache", show_progress=False)
        time.sleep(1.0)  # let a last pending kill timer (at most 0.6 s) fire
        after: set[int] = set()
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline and len(after) < 2:
            with contextlib.suppress(Exception):  # a worker may be restarting
                after = set(client.run(os.getpid).values())
            time.sleep(0.2)
    faults = len(list(ledger.iterdir()))
    print(f"faults injected: {faults}; worker pids before {sorted(before)} after {sorted(after)}")
    assert faults == 6  # 2 coefficient tasks + 4 series tasks, each killed once
    assert after != before
    assert summary.ok, summary.failed
    assert summary.written == N_VARIANTS and summary.skipped == 0
    assert done_flags(tmp_path / "results.zarr").all()
    assert_same_results(tmp_path / "results.zarr", reference[0])


# ------------------------------------------------------------------ item 2


@pytest.mark.slow
def test_poison_variant_fails_alone(study, reference, tmp_path):
    """One variant's task kills its worker every time it starts. Asserts: the run
    returns (no hang) within its deadline; exactly that variant is reported failed,
    by its id; every other variant is done and equals the serial run."""
    from luxsweep.sweep.config import load_study
    from luxsweep.sweep.expand import expand

    variants = expand(load_study(study))
    poison = variants[5].variant_id
    ledger = tmp_path / "ledger"
    ledger.mkdir()
    t0 = time.monotonic()
    with loopback_cluster(2) as (cluster, client):  # Dask default: 3 allowed failures
        client.register_plugin(KillPoison(poison, str(ledger)))
        summary = run_study(study, tmp_path / "results.zarr", scheduler=cluster.scheduler_address,
                            cache_dir=tmp_path / "cache", show_progress=False)
    seconds = time.monotonic() - t0
    kills = (ledger / "kills").read_text().split() if (ledger / "kills").exists() else []
    failed = {vid for ids in summary.failed.values() for vid in ids}
    print(f"poison {poison}: {len(kills)} worker kills, {seconds:.1f} s, failed {sorted(failed)}")
    assert kills, "the poison task never ran"
    assert seconds < 300
    assert failed == {poison}, f"failed {sorted(failed)}, expected only the poison {poison}"
    done = done_flags(tmp_path / "results.zarr")
    # the store order is the plan's (each task a contiguous range), not expand's
    ids = [str(v) for v in zarr.open_group(str(tmp_path / "results.zarr"),
                                           mode="r")["variant_id"][:]]
    assert not done[ids.index(poison)]
    assert done.sum() == N_VARIANTS - 1
    got = zarr.open_group(str(tmp_path / "results.zarr"), mode="r")
    want = zarr.open_group(str(reference[0]), mode="r")
    keep = np.asarray(ids) != poison
    for name in ("daylight_autonomy", "udi_low", "sda", "ase", "daylight_factor"):
        np.testing.assert_array_equal(got[name][...][keep], want[name][...][keep], err_msg=name)


# ------------------------------------------------------------------ item 3


def _chunk_files(store: Path, index: int) -> dict[str, tuple[int, bytes]]:
    """(mtime, bytes) of every chunk file holding variant ``index``: chunk ``k = index //
    (variants per chunk)`` of each array on ``variant``, 'c.<k>' and 'c.<k>.<...>' (the
    store's "." key separator) or 'c/<k>...' (the "/" one)."""
    out = {}
    group = zarr.open_group(str(store), mode="r")
    for arr in store.iterdir():
        if not arr.is_dir() or arr.name not in group:
            continue
        meta = group[arr.name].metadata
        if not meta.dimension_names or meta.dimension_names[0] != "variant":
            continue
        k = index // group[arr.name].chunks[0]
        chunk_root = arr / "c" / str(k)
        paths = [chunk_root] if chunk_root.is_file() else list(chunk_root.rglob("*"))
        paths += [p for p in arr.glob(f"c.{k}*")
                  if p.name == f"c.{k}" or p.name.startswith(f"c.{k}.")]
        for p in paths:
            if p.is_file():
                out[str(p.relative_to(store))] = (p.stat().st_mtime_ns, p.read_bytes())
    return out


def _read_done(store: Path) -> np.ndarray | None:
    try:
        return done_flags(store)
    except Exception:  # metadata not written yet, or a chunk being written
        return None


def _n_done(store: Path) -> int:
    done = _read_done(store) if (store / "zarr.json").exists() else None
    return -1 if done is None else int(done.sum())


# Kill points, each a condition on the results store polled while the run goes on.
KILL_POINTS = {
    "store being created": lambda store: any(
        p.name.startswith(store.name) for p in store.parent.iterdir()),
    "first variants done": lambda store: _n_done(store) >= 1,
    "most variants done": lambda store: _n_done(store) >= N_VARIANTS // 2,
}


@pytest.mark.slow
@pytest.mark.parametrize("point", list(KILL_POINTS))
def test_whole_run_killed_then_resumed(study, reference, tmp_path, point):
    """``luxsweep run`` (client and its local cluster, one process group) is
    SIGKILLed at a point found by polling its store (while the client creates the
    store's metadata; after the first variants are done; after half of them are
    done), then run again in this process. Asserts: the
    kill left no process of the group alive; the second run skips exactly the
    variants done at the kill, computes only the others and the coefficient sets
    missing from the cache; chunk files of finished variants are not rewritten;
    the final store equals the uninterrupted serial run's; no temporary entry is
    left in the cache or beside the store."""
    out, cache = tmp_path / "results.zarr", tmp_path / "cache"
    proc = luxsweep_process("run", study, "--out", out, "--cache", cache, "--workers", "1",
                            new_session=True)
    condition = KILL_POINTS[point]
    deadline = time.monotonic() + 240
    while proc.poll() is None and time.monotonic() < deadline and not condition(out):
        time.sleep(0.005)
    assert proc.poll() is None, f"the run ended before '{point}':\n{proc.stderr.read()}"
    group = [p for p in psutil.process_iter() if _pgid(p.pid) == proc.pid]
    os.killpg(proc.pid, signal.SIGKILL)
    proc.communicate(timeout=30)
    _, alive = psutil.wait_procs(group, timeout=10)
    assert not alive, f"processes survived the kill: {alive}"

    done = _read_done(out)  # None: killed before the `done` array existed
    done = np.zeros(N_VARIANTS, dtype=bool) if done is None else done
    finished = {int(i): _chunk_files(out, int(i)) for i in np.flatnonzero(done)}
    # every finished variant has its chunk files (so the rewrite check below checks files)
    assert all(len(files) >= 5 for files in finished.values()), finished.keys()
    cached = CoefficientCache(cache).keys()
    summary = run_study(study, out, workers=2, cache_dir=cache, show_progress=False)
    print(f"{point}: {int(done.sum())} done at the kill, {len(cached)} coefficient sets cached; "
          f"rerun skipped {summary.skipped}, computed {summary.written}, "
          f"coefficient sets computed {summary.coefficient_sets_computed}")
    assert summary.ok, summary.failed
    assert summary.skipped == int(done.sum())
    assert summary.written == N_VARIANTS - int(done.sum())
    assert summary.coefficient_sets_computed == 2 - len(cached)
    for i, files in finished.items():
        assert _chunk_files(out, i) == files, f"variant {i} was rewritten although done"
    assert done_flags(out).all()
    assert_same_results(out, reference[0])
    leftovers = [p.name for p in cache.iterdir() if p.name.startswith(".")]
    assert leftovers == [], f"temporary cache entries left: {leftovers}"
    beside = sorted(p.name for p in tmp_path.iterdir())
    assert beside == ["cache", "results.zarr"], f"temporary files beside the store: {beside}"


def _pgid(pid: int) -> int | None:
    try:
        return os.getpgid(pid)
    except OSError:
        return None


# ------------------------------------------------------------------ item 7


@pytest.mark.slow
def test_duplicate_task_execution_leaves_store_bytes_unchanged(study, reference, tmp_path):
    """Every series task of a finished store is executed again on Dask worker
    processes, first as two concurrent copies (as Dask may do when a worker is
    wrongly presumed dead and its task rescheduled), then once more alone.
    Asserts the store's files are byte-identical before and after."""
    from luxsweep.sweep.run import prepare, series_task

    out = tmp_path / "results.zarr"
    shutil.copytree(reference[0], out)
    before = store_files(out)
    plan, results, cache, _ = prepare(study, out, reference[1])
    assert len(plan.tasks) == 4
    with loopback_cluster(2) as (_, client):
        for task in plan.tasks:
            twins = [client.submit(series_task, task, list(task.members), str(results),
                                   str(cache.root), pure=False) for _ in range(2)]
            assert [f.result()["variants"] for f in twins] == [len(task.members)] * 2
        assert store_files(out) == before
        again = [client.submit(series_task, task, list(task.members), str(results),
                               str(cache.root), pure=False) for task in plan.tasks]
        client.gather(again)
    assert store_files(out) == before


# ------------------------------------------------------------------ item 8



@pytest.mark.slow
def test_all_zero_variants_count_as_done_on_resume(tmp_path):
    """A sealed room (no daylight reaches it) gives all-zero illuminance results.
    Asserts: the results are zero (daylight factor, daylight autonomy, sDA) and
    the variants are done; a second run skips them all and computes nothing; and,
    the other way round, a variant whose chunks exist but whose ``done`` flag is
    cleared is computed again (completion is the engine's record, not chunk
    existence)."""
    folder = tmp_path / "sealed"
    write_tiny_study(folder)  # for the climate files
    (folder / "room.obj").write_text(SEALED_ROOM)
    study = folder / "sealed.yaml"
    study.write_text(sealed_room_study("sealed-store-room", "{orientation: [90, 180, 270]}"))
    out, cache = tmp_path / "results.zarr", tmp_path / "cache"
    first = run_study(study, out, workers=1, cache_dir=cache, show_progress=False)
    assert first.ok and first.written == 3
    group = zarr.open_group(str(out), mode="r")
    for name in ("daylight_factor", "daylight_autonomy"):
        values = group[name][...]
        assert np.all(values[:, : int(group["n_sensors"][0])] == 0.0), name
    assert np.all(group["sda"][...] == 0.0)
    assert done_flags(out).all()

    second = run_study(study, out, workers=1, cache_dir=cache, show_progress=False)
    assert second.ok
    assert (second.skipped, second.written, second.coefficient_sets_computed) == (3, 0, 0)

    zarr.open_group(str(out), mode="r+")["done"][1] = False
    third = run_study(study, out, workers=1, cache_dir=cache, show_progress=False)
    assert (third.skipped, third.written) == (2, 1)
    assert done_flags(out).all()
