"""A cluster whose workers do not see the client's disk as it does, on real ``dask
scheduler`` and ``dask worker`` processes bound to loopback.

A worker that "sees another file at the same path" is a worker started in a
private mount namespace (``unshare -m``) with another file or folder bind-mounted
over the client's path: the same absolute name, other bytes, as with another
mount or a stale copy on a real cluster. These tests need root (or unprivileged
user namespaces) for that and are skipped where ``unshare -m`` cannot mount.
"""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import numpy as np
import pytest
import zarr
from conftest import assert_same_results, run_luxsweep, write_tiny_study

DASK = Path(sys.executable).with_name("dask")


def _can_bind_mount() -> bool:
    if shutil.which("unshare") is None:
        return False
    probe = subprocess.run(["unshare", "-m", "sh", "-c", "mount --bind / /mnt"],
                           capture_output=True)
    return probe.returncode == 0


needs_mounts = pytest.mark.skipif(not _can_bind_mount(),
                                  reason="unshare -m with bind mounts is not available")


def _stop(proc: subprocess.Popen) -> None:
    try:
        os.killpg(proc.pid, signal.SIGTERM)
    except ProcessLookupError:
        return
    try:
        proc.wait(timeout=20)
    except subprocess.TimeoutExpired:
        os.killpg(proc.pid, signal.SIGKILL)
        proc.wait(timeout=10)


@contextmanager
def cluster(folder: Path, workers: list[list[tuple[Path, Path]]]) -> Iterator[Path]:
    """``dask scheduler`` and one ``dask worker --nthreads 1`` per entry of ``workers``,
    each in a private mount namespace with its (source, target) bind mounts (none:
    it sees the client's files); yields the scheduler file once all have joined."""
    folder.mkdir(parents=True, exist_ok=True)
    sched_file = folder / "scheduler.json"
    env = {**os.environ, "DASK_DISTRIBUTED__WORKER__DAEMON": "True"}
    procs = [subprocess.Popen(
        [str(DASK), "scheduler", "--scheduler-file", str(sched_file), "--host", "127.0.0.1",
         "--port", "0", "--no-dashboard"],
        stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env, start_new_session=True)]
    try:
        deadline = time.monotonic() + 90
        while not sched_file.is_file() and time.monotonic() < deadline:
            time.sleep(0.1)
        assert sched_file.is_file(), "the scheduler did not start"
        logs: list[list[str]] = []
        for mounts in workers:
            script = "".join(f'mount --bind "{src}" "{dst}" && ' for src, dst in mounts)
            worker = subprocess.Popen(
                ["unshare", "-m", "sh", "-c", script + 'exec "$@"', "sh", str(DASK), "worker",
                 "--scheduler-file", str(sched_file), "--nthreads", "1", "--nworkers", "1",
                 "--host", "127.0.0.1", "--no-dashboard"],
                stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True, env=env,
                start_new_session=True)
            procs.append(worker)
            lines: list[str] = []
            logs.append(lines)
            threading.Thread(target=lambda w=worker, out=lines: out.extend(
                iter(w.stderr.readline, "")), daemon=True).start()
        for proc, lines in zip(procs[1:], logs, strict=True):
            while time.monotonic() < deadline and not any("Registered to" in x for x in lines):
                assert proc.poll() is None, "".join(lines)
                time.sleep(0.1)
            assert any("Registered to" in x for x in lines), "a worker did not join"
        yield sched_file
    finally:
        for proc in reversed(procs):
            _stop(proc)


def _workers_by_hash(sched: Path, path: Path) -> dict[str, str]:
    """sha256 of ``path`` as each worker reads it, by worker address."""
    from distributed import Client

    from luxsweep.sweep.expand import file_sha256

    with Client(scheduler_file=str(sched), timeout="20s") as client:
        return client.run(file_sha256, str(path))


@needs_mounts
@pytest.mark.slow
def test_a_worker_seeing_another_weather_file_stops_the_run(tmp_path):
    """Two workers, one of which sees another weather file at the client's path:
    ``run`` stops before submitting anything with exit 2 and one message naming the
    file and that worker (and not the good one), and leaves no store; a series task
    sent to that worker anyway (as a task placed after the check would be) raises
    InputMismatchError naming the file and the worker, having written nothing."""
    from distributed import Client

    from luxsweep.sweep.errors import InputMismatchError
    from luxsweep.sweep.expand import file_sha256
    from luxsweep.sweep.run import prepare, series_task

    study = write_tiny_study(tmp_path / "study", orientations=(180.0,), climates=("coastal",),
                             transmittances=(0.6,))
    target = tmp_path / "study" / "climates" / "coastal.csv"
    other = tmp_path / "elsewhere.csv"
    text = target.read_text()
    other.write_text(text.replace("\n", "\r\n", 40))  # same data, other bytes (a stale copy)
    assert file_sha256(other) != file_sha256(target)
    with cluster(tmp_path / "c", [[], [(other, target)]]) as sched:
        hashes = _workers_by_hash(sched, target)
        bad = [a for a, h in hashes.items() if h != file_sha256(target)]
        good = [a for a in hashes if a not in bad]
        assert len(bad) == 1 and len(good) == 1, hashes
        res = run_luxsweep("run", study, "--out", tmp_path / "r.zarr", "--cache",
                           tmp_path / "cache", "--scheduler", sched, timeout=180)
        print(res.err)
        assert res.code == 2, res.text
        assert "pre-flight" in res.err and bad[0] in res.err and str(target) in res.err, res.err
        assert good[0] not in res.err, res.err
        assert "Traceback" not in res.err
        assert not (tmp_path / "r.zarr").exists()

        plan, results, cache, _ = prepare(study, tmp_path / "direct.zarr", tmp_path / "cache")
        (task,) = plan.tasks
        with Client(scheduler_file=str(sched), timeout="20s") as client:
            fut = client.submit(series_task, task, list(task.members), str(results),
                                str(cache.root), None, plan.jobs[task.key],
                                workers=bad, pure=False)
            with pytest.raises(InputMismatchError) as caught:
                fut.result(timeout=120)
        assert bad[0] in str(caught.value) and str(target) in str(caught.value)
        assert not results.exists()


@needs_mounts
@pytest.mark.slow
def test_workers_with_their_own_cache_give_the_local_results(tmp_path):
    """No shared cache folder: two workers each see an empty folder of their own at
    the cache path. Sets computed in the run reach the worker that lacks them
    through Dask (none is computed twice), and results are bit-identical to a
    local run. Then a worker whose cache lacks sets the client found cached
    computes them itself (counted as such) with the same results again."""
    study = write_tiny_study(tmp_path / "study", orientations=(90.0, 180.0),
                             climates=("coastal",), transmittances=(0.6,), widths=(1.0, 1.5))
    res = run_luxsweep("run", study, "--out", tmp_path / "local.zarr", "--cache",
                       tmp_path / "local-cache", "--workers", "1", timeout=300)
    assert res.code == 0, res.text
    cache = tmp_path / "cache"
    own = [tmp_path / "own-a", tmp_path / "own-b"]
    for folder in (cache, *own):
        folder.mkdir()
    with cluster(tmp_path / "c1", [[(own[0], cache)], [(own[1], cache)]]) as sched:
        res = run_luxsweep("run", study, "--out", tmp_path / "r.zarr", "--cache", cache,
                           "--scheduler", sched, timeout=300)
    print(res.out, res.err)
    assert res.code == 0, res.text
    assert "coefficient sets computed: 2;" in res.out, res.out
    assert "keep their own cache folder" in res.err, res.err
    assert not any(p.name for p in cache.iterdir() if not p.name.startswith("."))
    kept = sorted(p.name for folder in own for p in folder.iterdir()
                  if not p.name.startswith("."))
    assert len(kept) == 2, kept  # each set computed once, on one worker
    assert np.asarray(zarr.open_group(str(tmp_path / "r.zarr"), mode="r")["done"][:]).all()
    assert_same_results(tmp_path / "r.zarr", tmp_path / "local.zarr")

    # the client's cache holds both sets; a worker whose own folder is empty
    (tmp_path / "own-c").mkdir()
    with cluster(tmp_path / "c2", [[(tmp_path / "own-c", tmp_path / "local-cache")]]) as sched:
        res = run_luxsweep("run", study, "--out", tmp_path / "again.zarr", "--cache",
                           tmp_path / "local-cache", "--scheduler", sched, timeout=300)
    assert res.code == 0, res.text
    assert "coefficient sets computed: 0 (and 2 again on workers whose cache lacked them)" \
        in res.out, res.out
    assert_same_results(tmp_path / "again.zarr", tmp_path / "local.zarr")


def test_worker_check_lists_every_problem(tmp_path):
    """The pre-flight check run in this process (as ``client.run`` runs it on a
    worker): a weather file with other bytes and other versions — each named in one
    list of problems; a missing weather file and a store folder that is not the
    client's are notes (their data then travels through Dask); the client's own
    folders and files pass and the shared cache is recognised by its probe."""
    from luxsweep.kernels import KERNEL_VERSION
    from luxsweep.sweep import __version__
    from luxsweep.sweep.expand import file_sha256
    from luxsweep.sweep.preflight import worker_check

    good = tmp_path / "a.csv"
    good.write_text("one\n")
    cache, store = tmp_path / "cache", tmp_path / "store"
    cache.mkdir()
    store.mkdir()
    (cache / "probe").write_text("token")
    (store / "probe").write_text("token")
    needs = {"inputs": {str(good): file_sha256(good)}, "cache": str(cache),
             "store_folder": str(store), "token": "token", "version": __version__,
             "kernel_version": KERNEL_VERSION, "cache_probe": "probe", "store_probe": "probe"}
    assert worker_check(needs) == {"problems": [], "shared_cache": True, "own_cache": False,
                                   "inputs": True, "shared_store": True, "notes": []}

    bad = {**needs, "inputs": {str(good): "0" * 64, str(tmp_path / "gone.csv"): "1" * 64},
           "version": "0.0.0", "kernel_version": "other", "token": "client's"}
    answer = worker_check(bad)
    assert answer["shared_cache"] is False
    text = "\n".join(answer["problems"])
    assert len(answer["problems"]) == 3, text
    assert f"{good} is not the client's file" in text
    assert "luxsweep" in text and "0.0.0" in text and "kernel version" in text
    # what the client can send through Dask or keep itself is a note, not a problem
    notes = "\n".join(answer["notes"])
    assert not answer["inputs"] and not answer["shared_store"]
    assert f"{tmp_path / 'gone.csv'} cannot be read" in notes
    assert f"store's folder {store} is not the client's" in notes


def test_series_task_refuses_a_weather_file_changed_after_planning(tmp_path):
    """The weather file is edited after ``plan`` and before the series task reads it:
    the task raises InputMismatchError naming the file (here, outside a worker, "the
    client") and writes nothing."""
    from luxsweep.sweep.errors import InputMismatchError
    from luxsweep.sweep.run import prepare, series_task

    study = write_tiny_study(tmp_path / "study", orientations=(180.0,), climates=("coastal",),
                             transmittances=(0.6,))
    plan, results, cache, _ = prepare(study, tmp_path / "r.zarr", tmp_path / "cache")
    (task,) = plan.tasks
    path = Path(task.climate_file)
    original = path.read_bytes()
    path.write_bytes(original.replace(b"\n", b"\r\n", 5))
    with pytest.raises(InputMismatchError, match="is not the client's file") as caught:
        series_task(task, list(task.members), str(results), str(cache.root), None,
                    plan.jobs[task.key])
    assert str(path) in str(caught.value) and "the client" in str(caught.value)
    assert not results.exists() and not cache.root.exists()


@pytest.mark.slow
def test_a_run_stops_when_a_weather_file_changes_after_the_check(tmp_path, monkeypatch):
    """The file is edited after the pre-flight check passed (a hook around the real
    check), before the series tasks read it: the run raises InputMismatchError
    naming the file and the worker, and no variant is marked done."""
    from luxsweep.sweep import run as run_module
    from luxsweep.sweep.errors import InputMismatchError

    study = write_tiny_study(tmp_path / "study", orientations=(90.0, 180.0),
                             climates=("coastal",), transmittances=(0.6,))
    path = tmp_path / "study" / "climates" / "coastal.csv"
    real = run_module.preflight

    def check_then_edit(*args, **kwargs):
        answer = real(*args, **kwargs)
        path.write_bytes(path.read_bytes().replace(b"\n", b"\r\n", 5))
        return answer

    monkeypatch.setattr(run_module, "preflight", check_then_edit)
    with pytest.raises(InputMismatchError, match="is not the client's file") as caught:
        run_module.run_study(study, tmp_path / "r.zarr", workers=1,
                             cache_dir=tmp_path / "cache", show_progress=False)
    assert str(path) in str(caught.value) and "tcp://127.0.0.1:" in str(caught.value)
    assert not np.asarray(zarr.open_group(str(tmp_path / "r.zarr"), mode="r")["done"][:]).any()
