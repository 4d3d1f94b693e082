"""A cluster whose workers share no disk with the client (cloud and container
deployments): inputs travel through Dask, the client keeps the coefficient cache
and writes the results store, and the cache may live at an fsspec URL.

The workers of the cluster test are real ``dask worker`` processes on loopback,
each started in a folder of its own and in a private mount namespace
(``unshare -m``) where an empty read-only folder is mounted over the project
folder that holds the study, its weather files, the cache and the results: at
the client's paths a worker finds nothing and can write nothing, as on a
machine that does not have the client's disk. Those tests need root (or
unprivileged user namespaces) and are skipped where ``unshare -m`` cannot mount.
"""

from __future__ import annotations

import importlib.util
import os
import pickle
import shutil
import signal
import subprocess
import sys
import threading
import time
import uuid
import warnings
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import numpy as np
import pytest
import zarr
from conftest import (
    TMY3_GREENSBORO,
    assert_same_results,
    run_luxsweep,
    write_tiny_study,
)

from luxsweep.kernels import climate as cl

DASK = Path(sys.executable).with_name("dask")

_spec = importlib.util.spec_from_file_location(
    "mangle", Path(__file__).parent / "bad_inputs" / "mangle.py")
mangle = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(mangle)


# --------------------------------------------------------------------------- weather bytes


def _same_climate(a: cl.Climate, b: cl.Climate) -> None:
    assert a.site == b.site and a.interval == b.interval and a.source == b.source
    assert a.time.equals(b.time) and str(a.time.tz) == str(b.time.tz)
    for name in ("ghi", "dni", "dhi", "global_illuminance", "direct_illuminance",
                 "diffuse_illuminance", "dew_point"):
        x, y = getattr(a, name), getattr(b, name)
        assert x.dtype == y.dtype and x.tobytes() == y.tobytes(), name  # bit for bit
    assert sorted(a.valid) == sorted(b.valid)
    for name in a.valid:
        np.testing.assert_array_equal(a.valid[name], b.valid[name], err_msg=name)


@pytest.mark.parametrize("form", ["tmy3", "epw", "epw-latin1"])
def test_parse_climate_gives_read_climate_bit_for_bit(form, tmp_path):
    """The bytes a client sends through Dask parse to the very climate the file gives
    (pvlib's Greensboro TMY3 year, the same as EPW, and an EPW whose header is
    Latin-1, as many EPW city names are)."""
    text = TMY3_GREENSBORO.read_bytes()
    if form == "tmy3":
        path, raw = tmp_path / "site.csv", text
    else:
        epw = mangle.to_epw(text.decode("latin-1"))
        if form == "epw-latin1":
            epw = epw.replace("LOCATION,", "LOCATION,Gr\u00e9ensboro ", 1)
        path, raw = tmp_path / "site.epw", epw.encode("latin-1")
    path.write_bytes(raw)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the file's illuminance columns are in 100 lx
        from_file = cl.read_climate(path)
        from_bytes = cl.parse_climate(raw, str(path))
    _same_climate(from_bytes, from_file)
    if form == "epw-latin1":
        assert "Gréensboro" in from_bytes.site.name


def test_parse_climate_refuses_binary_bytes_naming_the_file():
    """Bytes that are not text are refused like a binary file, naming the file."""
    from luxsweep.kernels.errors import WeatherFileError

    with pytest.raises(WeatherFileError, match="binary") as caught:
        cl.parse_climate(b"\x00\x01" * 100, "climates/coastal.csv")
    assert "coastal.csv" in str(caught.value)


# --------------------------------------------------------------------------- URL cache


def _arrays() -> dict[str, np.ndarray]:
    rng = np.random.default_rng(0)
    return {"sky_direct": rng.random((2, 5, 7), dtype=np.float32),
            "crossed": np.arange(3, dtype=np.int64)}


def _url() -> str:
    return f"memory://luxsweep-test-{uuid.uuid4().hex[:8]}/cache"


def test_url_cache_round_trip_and_pickle():
    """An entry written at a memory:// URL reads back equal (arrays, dtypes, metadata),
    through a pickled copy too (what a Dask task receives)."""
    from luxsweep.sweep.cache import UrlCache, open_cache

    cache = open_cache(_url())
    assert isinstance(cache, UrlCache)
    cache.create()
    assert not cache.contains("k1") and cache.load_arrays("k1") is None
    cache.save_arrays("k1", _arrays(), {"note": "x"})
    assert cache.contains("k1") and cache.keys() == ["k1"]
    for c in (cache, pickle.loads(pickle.dumps(cache))):
        arrays, meta = c.load_arrays("k1")
        assert meta == {"note": "x"}
        for name, value in _arrays().items():
            assert arrays[name].dtype == value.dtype
            np.testing.assert_array_equal(arrays[name], value)


def test_url_cache_publishes_by_its_manifest_and_drops_damaged_entries():
    """Array files without a manifest (a writer killed before publishing) are no
    entry; a file that fails its checksum makes the entry a miss, reported and
    removed; a second writer of a published key keeps the one good entry."""
    import fsspec

    from luxsweep.sweep.cache import open_cache

    url = _url()
    cache = open_cache(url)
    fs, root = fsspec.core.url_to_fs(url)
    fs.pipe_file(f"{root}/k0/arrays/sky_direct-0.npy", b"partial")  # killed writer
    assert not cache.contains("k0") and cache.keys() == []
    assert cache.load_arrays("k0") is None

    cache.save_arrays("k1", _arrays(), {})
    cache.save_arrays("k1", _arrays(), {})  # a second writer of the same key
    assert len(fs.ls(f"{root}/k1/arrays")) == len(_arrays())
    (victim,) = [p for p in fs.ls(f"{root}/k1/arrays", detail=False) if "crossed" in p]
    fs.pipe_file(victim, fs.cat_file(victim)[:-1] + b"\x07")
    with pytest.warns(UserWarning, match="checksum"):
        assert cache.load_arrays("k1") is None
    assert not cache.contains("k1")


def test_file_urls_are_local_folders(tmp_path):
    """A file:// cache is the local folder cache (atomic rename), at that folder."""
    from luxsweep.sweep.cache import CoefficientCache, open_cache

    cache = open_cache(f"file://{tmp_path / 'c'}")
    assert isinstance(cache, CoefficientCache) and cache.root == tmp_path / "c"


def test_worker_check_without_a_shared_disk_names_what_stays_with_the_client(tmp_path):
    """What a worker cannot reach is not a problem but a reason to move data through
    Dask: a missing weather file, a cache folder it cannot write, a store folder
    that is not the client's; another file with other bytes at the weather file's
    path still is a problem (the pre-flight check run in this process)."""
    from luxsweep.kernels import KERNEL_VERSION
    from luxsweep.sweep import __version__
    from luxsweep.sweep.expand import file_sha256
    from luxsweep.sweep.preflight import worker_check

    stale = tmp_path / "stale.csv"
    stale.write_text("other\n")
    blocker = tmp_path / "blocker"
    blocker.write_text("a file where the cache folder's parent should be")
    store = tmp_path / "store"
    store.mkdir()
    needs = {"inputs": {str(tmp_path / "gone.csv"): "1" * 64},
             "cache": str(blocker / "cache"), "store_folder": str(store), "token": "t",
             "version": __version__, "kernel_version": KERNEL_VERSION,
             "cache_probe": "probe", "store_probe": "probe"}
    answer = worker_check(needs)
    assert answer["problems"] == [], answer
    assert not (answer["inputs"] or answer["shared_cache"] or answer["own_cache"]
                or answer["shared_store"])
    notes = "\n".join(answer["notes"])
    assert "gone.csv cannot be read here" in notes and "cannot be written here" in notes
    assert f"{store} does not exist here" in notes or f"{store} is not the client's" in notes

    answer = worker_check({**needs, "inputs": {str(stale): "0" * 64}})
    assert len(answer["problems"]) == 1 and "is not the client's file" in answer["problems"][0]
    assert file_sha256(stale) != "0" * 64


# --------------------------------------------------------------------------- runs


@pytest.fixture(scope="module")
def reference(tmp_path_factory) -> tuple[Path, Path]:
    """A tiny study (2 geometries × 2 orientations, series stored) and its results
    from an ordinary shared-disk run on a local cluster."""
    from luxsweep.sweep.run import run_study

    folder = tmp_path_factory.mktemp("reference")
    study = write_tiny_study(folder / "study", orientations=(90.0, 180.0),
                             climates=("coastal",), transmittances=(0.6,), widths=(1.0, 1.5),
                             extra="store_series: true\n")
    summary = run_study(study, folder / "shared.zarr", workers=1,
                        cache_dir=folder / "cache", show_progress=False)
    assert summary.ok and summary.written == 4
    return study, folder / "shared.zarr"


@pytest.mark.slow
def test_no_shared_disk_on_a_local_cluster_with_a_memory_cache(reference, tmp_path, caplog):
    """``--no-shared-disk`` with the cache at memory://: results bit-identical to the
    shared-disk run; the client's cache holds both sets and a second run finds them
    (none computed)."""
    import logging

    from luxsweep.sweep.cache import open_cache
    from luxsweep.sweep.run import run_study

    study, shared = reference
    url = _url()
    with caplog.at_level(logging.INFO, logger="luxsweep"):
        first = run_study(study, tmp_path / "a.zarr", workers=1, cache_dir=url,
                          show_progress=False, no_shared_disk=True)
    assert "stay with the client" in caplog.text and "--no-shared-disk" in caplog.text
    assert first.ok and first.written == 4 and first.coefficient_sets_computed == 2
    assert len(open_cache(url).keys()) == 2
    assert_same_results(tmp_path / "a.zarr", shared)
    second = run_study(study, tmp_path / "b.zarr", workers=1, cache_dir=url,
                       show_progress=False, no_shared_disk=True)
    assert second.ok and second.coefficient_sets_computed == 0
    assert second.coefficient_sets_recomputed == 0
    assert_same_results(tmp_path / "b.zarr", shared)


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
def blind_cluster(folder: Path, hidden: Path, n_workers: int = 2) -> Iterator[Path]:
    """``dask scheduler`` and ``n_workers`` ``dask worker`` processes, each started in
    a folder of its own (its working and local directory) with an empty read-only
    folder mounted over ``hidden``; yields the scheduler file once all have joined."""
    empty = folder / "empty"
    empty.mkdir(parents=True)
    sched_file = folder / "scheduler.json"
    env = {**os.environ, "DASK_DISTRIBUTED__WORKER__DAEMON": "True"}
    procs = [subprocess.Popen(
        [str(DASK), "scheduler", "--scheduler-file", str(sched_file), "--host", "127.0.0.1",
         "--port", "0", "--no-dashboard"], cwd=folder,
        stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env, start_new_session=True)]
    try:
        deadline = time.monotonic() + 90
        while not sched_file.is_file() and time.monotonic() < deadline:
            time.sleep(0.1)
        assert sched_file.is_file(), "the scheduler did not start"
        logs: list[list[str]] = []
        for k in range(n_workers):
            home = folder / f"worker-{k}"
            home.mkdir()
            script = (f'mount --bind "{empty}" "{hidden}" && '
                      f'mount -o remount,bind,ro "{hidden}" && exec "$@"')
            worker = subprocess.Popen(
                ["unshare", "-m", "sh", "-c", script, "sh", str(DASK), "worker",
                 "--scheduler-file", str(sched_file), "--nthreads", "1", "--nworkers", "1",
                 "--host", "127.0.0.1", "--no-dashboard", "--local-directory", str(home)],
                cwd=home, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True,
                env=env, start_new_session=True)
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


def _what_workers_see(sched: Path, paths: list[str]) -> dict[str, list[bool]]:
    from distributed import Client

    def exists(items: list[str]) -> list[bool]:
        return [os.path.exists(p) for p in items]

    with Client(scheduler_file=str(sched), timeout="20s") as client:
        return client.run(exists, paths)


@needs_mounts
@pytest.mark.slow
def test_workers_that_cannot_see_the_study_folder(reference, tmp_path):
    """Two workers for which the project folder (study, weather file, cache, results)
    does not exist: the run moves the weather file, the coefficient sets and the
    results through Dask, the client publishes the sets in its file:// cache and
    writes the store; results are bit-identical to the shared-disk run. A second
    run finds both sets in the client's cache, and a resumed run redoes exactly
    the variants not marked done."""
    study_source, shared = reference
    project = tmp_path / "project"
    shutil.copytree(study_source.parent, project / "study")
    study = project / "study" / study_source.name
    cache = project / "cache"
    with blind_cluster(tmp_path / "cluster", project) as sched:
        # the project folder is an empty read-only folder for them
        seen = _what_workers_see(sched, [str(project / "study"), str(study),
                                         str(project / "study" / "climates" / "coastal.csv")])
        assert len(seen) == 2 and not any(any(v) for v in seen.values()), seen
        assert study.is_file()  # the client sees it

        res = run_luxsweep("run", study, "--out", project / "r.zarr", "--cache",
                           f"file://{cache}", "--scheduler", sched, timeout=300)
        assert res.code == 0, res.text
        assert "weather files, coefficient cache, results store: they stay with the " \
               "client" in res.err, res.err
        assert "variants: 4 total, 4 computed now" in res.out, res.out
        assert "coefficient sets computed: 2;" in res.out, res.out
        assert len([p for p in cache.iterdir() if not p.name.startswith(".")]) == 2
        assert_same_results(project / "r.zarr", shared)

        res = run_luxsweep("run", study, "--out", project / "again.zarr", "--cache", cache,
                           "--scheduler", sched, timeout=300)
        assert res.code == 0, res.text
        assert "coefficient sets computed: 0;" in res.out, res.out  # the client's cache hit
        assert_same_results(project / "again.zarr", shared)

        done = zarr.open_group(str(project / "r.zarr"), mode="r+")["done"]
        done[1:3] = False  # as if a run had stopped before these were finished
        res = run_luxsweep("run", study, "--out", project / "r.zarr", "--cache", cache,
                           "--scheduler", sched, timeout=300)
        assert res.code == 0, res.text
        assert "variants: 4 total, 2 computed now, 2 already done" in res.out, res.out
        assert_same_results(project / "r.zarr", shared)
    assert not any(p.name.startswith(".tmp-probe-") for p in cache.iterdir())


# --------------------------------------------------------------------------- faults


@pytest.mark.slow
def test_no_shared_disk_survives_killed_workers_and_a_poison_variant(reference, tmp_path):
    """With ``--no-shared-disk``: every coefficient and series task kills its worker
    once (the sets and results the workers were to send back are lost with them,
    and Dask makes them again); the results equal the shared-disk run's. Then a
    poison variant that kills every worker it starts on fails alone, and its
    partner variants, run alone at the end after the sets were released, get the
    set again from the client's cache."""
    from test_faults import KillOnceAtRandom, KillPoison, loopback_cluster

    from luxsweep.sweep.config import load_study
    from luxsweep.sweep.expand import expand
    from luxsweep.sweep.run import run_study

    study, shared = reference
    ledger = tmp_path / "ledger"
    ledger.mkdir()
    url = _url()
    with loopback_cluster(2, **{"distributed.scheduler.allowed-failures": 10}) as (cluster,
                                                                                  client):
        client.register_plugin(KillOnceAtRandom(str(ledger), seed=3, max_delay=0.6))
        summary = run_study(study, tmp_path / "killed.zarr", scheduler=cluster.scheduler_address,
                            cache_dir=url, show_progress=False, no_shared_disk=True)
        time.sleep(1.0)  # let a last pending kill timer (at most 0.6 s) fire
    assert len(list(ledger.iterdir())) == 4  # 2 coefficient + 2 series tasks, killed once
    assert summary.ok and summary.written == 4, summary.failed
    assert_same_results(tmp_path / "killed.zarr", shared)

    poison = expand(load_study(study))[1].variant_id
    (ledger / "poison").mkdir()
    with loopback_cluster(2) as (cluster, client):
        client.register_plugin(KillPoison(poison, str(ledger / "poison")))
        summary = run_study(study, tmp_path / "poison.zarr", scheduler=cluster.scheduler_address,
                            cache_dir=url, show_progress=False, no_shared_disk=True)
    failed = {vid for ids in summary.failed.values() for vid in ids}
    assert failed == {poison}, summary.failed
    assert summary.coefficient_sets_computed == 0 and summary.written == 3
    got = zarr.open_group(str(tmp_path / "poison.zarr"), mode="r")
    want = zarr.open_group(str(shared), mode="r")
    ids = [str(v) for v in got["variant_id"][:]]
    keep = np.asarray(ids) != poison
    assert got["done"][:].sum() == 3 and not got["done"][:][ids.index(poison)]
    for name in ("daylight_autonomy", "sda", "daylight_factor", "illuminance"):
        np.testing.assert_array_equal(got[name][...][keep], want[name][...][keep], err_msg=name)


@pytest.mark.slow
def test_a_split_set_is_published_by_the_client(tmp_path):
    """A set split across the cluster (element stage, parts, assembly) with the cache
    at memory:// and ``--no-shared-disk``: the assembly returns the set, the client
    publishes it, and it equals the set one process computes, bit for bit."""
    from test_split_sets import _fine_grid_study

    from luxsweep.kernels.coefficients import compute_coefficients
    from luxsweep.sweep.cache import open_cache
    from luxsweep.sweep.config import load_study
    from luxsweep.sweep.plan import make_plan
    from luxsweep.sweep.run import run_study, split_ranges

    study = _fine_grid_study(tmp_path)
    (job,) = make_plan(load_study(study), read_climates=False).jobs.values()
    assert len(split_ranges(job)) > 1
    url = _url()
    summary = run_study(study, tmp_path / "r.zarr", workers=2, cache_dir=url,
                        show_progress=False, no_shared_disk=True)
    assert summary.ok and summary.coefficient_sets_computed == 1
    split = open_cache(url).load(job.key)
    whole = compute_coefficients(job.geometry, job.sensors, job.settings)
    for name, value in whole.to_arrays().items():
        np.testing.assert_array_equal(getattr(split, name), value, err_msg=name)
