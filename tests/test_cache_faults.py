"""The coefficient cache under faults (issue 7, items 4-6).

Modelled on the atomic-write tests of file stores: writers that raise or are
killed half-way, several writers racing on one key while readers poll it, and
entries damaged on disk. Each entry holds arrays whose content identifies the
writer that made them, so a torn entry (files from two writers, or a file cut
short) is detectable beside the cache's own checksums.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import textwrap
import time
import warnings
from pathlib import Path

import numpy as np
import pytest

from luxsweep.sweep.cache import CoefficientCache

REPO = Path(__file__).resolve().parent.parent
KEY = "a3f1" * 16  # a well-formed sha256-like key


def payload(writer: int, n: int = 4096) -> dict[str, np.ndarray]:
    """Arrays tagged with the writer's id: every element of every array encodes it."""
    rng = np.random.default_rng(1000 + writer)
    base = rng.random((n, 8), dtype=np.float32)
    return {
        "sky_direct": base + writer,
        "sky_reflected": base * 0.5 + writer,
        "sun_direct": np.full((n, 3), writer, dtype=np.float32),
        "writer": np.array([writer], dtype=np.int64),
    }


def writer_of(arrays: dict[str, np.ndarray]) -> int:
    """The writer id all arrays agree on; raises AssertionError on a mixed entry."""
    w = int(arrays["writer"][0])
    expected = payload(w, n=arrays["sun_direct"].shape[0])
    for name, arr in expected.items():
        np.testing.assert_array_equal(arrays[name], arr, err_msg=f"{name} not from writer {w}")
    return w


def _python(code: str, *args: str) -> subprocess.Popen[str]:
    env = {**os.environ, "PYTHONPATH": f"{REPO}{os.pathsep}{Path(__file__).parent}"}
    return subprocess.Popen(
        [sys.executable, "-c", textwrap.dedent(code), *args],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env,
    )


# ------------------------------------------------------------------ item 4: writer crashes


class _Explodes:
    """An array-like whose conversion fails: an exception in the middle of a write."""

    def __init__(self, exc: BaseException) -> None:
        self.exc = exc

    def __array__(self, *args, **kwargs):
        raise self.exc


@pytest.mark.parametrize(
    "exc", [RuntimeError("kernel blew up"), OSError(28, "No space left on device")],
    ids=["exception", "disk-full"],
)
def test_exception_mid_write_leaves_no_entry(tmp_path, exc):
    """An exception after some arrays are written: the error propagates, the key is
    absent (not partial), no temporary folder is left, and a later good write of the
    same key publishes normally."""
    cache = CoefficientCache(tmp_path / "cache")
    arrays = payload(1)
    arrays_bad = {"sky_direct": arrays["sky_direct"], "sky_reflected": _Explodes(exc),
                  "sun_direct": arrays["sun_direct"], "writer": arrays["writer"]}
    with pytest.raises(type(exc)):
        cache.save_arrays(KEY, arrays_bad, {"note": "crash"})
    assert not cache.contains(KEY)
    assert not (cache.root / KEY).exists()
    assert sorted(p.name for p in cache.root.iterdir()) == []  # no temporary left
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # an absent key is a plain miss, no warning
        assert cache.load_arrays(KEY) is None
    cache.save_arrays(KEY, arrays, {"note": "good"})
    loaded, meta = cache.load_arrays(KEY)
    assert writer_of(loaded) == 1 and meta == {"note": "good"}


WRITE_SCRIPT = """
import sys, time
import numpy as np
from luxsweep.sweep.cache import CoefficientCache
from test_cache_faults import payload
root, key, writer, n = sys.argv[1], sys.argv[2], int(sys.argv[3]), int(sys.argv[4])
arrays = payload(writer, n)
print("ready", flush=True)
t0 = time.perf_counter()
CoefficientCache(root).save_arrays(key, arrays, {"writer": writer})
print("saved", time.perf_counter() - t0, flush=True)
time.sleep(60)  # stay alive: the test's kill always lands, at this point or earlier
"""


def _tmp_dirs(root: Path) -> list[Path]:
    return [p for p in root.glob(".tmp-*")] if root.exists() else []


# Kill points, each a condition on the cache folder polled while the writer runs.
KILL_POINTS = {
    "temporary folder created": lambda root: bool(_tmp_dirs(root)),
    "first array being written": lambda root: any(
        any((d / "arrays").glob("*.npy")) for d in _tmp_dirs(root)),
    "second array being written": lambda root: any(
        len(list((d / "arrays").glob("*.npy"))) >= 2 for d in _tmp_dirs(root)),
    "all arrays written": lambda root: any(
        len(list((d / "arrays").glob("*.npy"))) >= 4 for d in _tmp_dirs(root)),
    "manifest being written": lambda root: any(
        (d / "manifest.json").exists() for d in _tmp_dirs(root)),
    "entry published": lambda root: (root / KEY).exists(),
}


@pytest.mark.parametrize("point", list(KILL_POINTS))
def test_sigkill_during_write_leaves_key_absent_or_complete(tmp_path, point):
    """A writing process is SIGKILLed at a point of its write found by polling the
    cache folder: afterwards the key is either absent or a complete entry that
    passes its checksums and holds exactly the writer's arrays, reading it raises
    no warning (nothing torn is visible), and ``clean_temporary`` removes the
    killed writer's leftovers. Before publication the key must be absent; once
    published it must be complete."""
    root = tmp_path / "cache"
    proc = _python(WRITE_SCRIPT, str(root), KEY, "2", "600000")
    assert proc.stdout.readline().strip() == "ready"
    condition = KILL_POINTS[point]
    deadline = time.monotonic() + 60
    while not condition(root) and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.0002)
    proc.send_signal(signal.SIGKILL)
    proc.communicate(timeout=30)
    assert proc.returncode == -signal.SIGKILL, proc.stderr.read()
    cache = CoefficientCache(root)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        found = cache.load_arrays(KEY)
    assert not caught, f"kill at '{point}': a torn entry was visible: {caught[0].message}"
    if point == "entry published":
        assert found is not None and writer_of(found[0]) == 2
    elif found is None:
        assert not (root / KEY).exists()
    else:  # killed after the rename, while syncing the folder
        assert writer_of(found[0]) == 2
    cache.clean_temporary(older_than=0)
    assert [p.name for p in root.iterdir() if p.name.startswith(".")] == []


# ------------------------------------------------------------------ item 5: racing writers

ROUNDS = 5  # one key per round: each round is one publication race
SLOT = 1.0  # seconds between rounds

RACE_WRITER = """
import sys, time
from luxsweep.sweep.cache import CoefficientCache
from test_cache_faults import payload
root, keys, writer, start, slot = sys.argv[1], sys.argv[2].split(","), int(sys.argv[3]), \\
    float(sys.argv[4]), float(sys.argv[5])
arrays = payload(writer, 200_000)
cache = CoefficientCache(root)
for i, key in enumerate(keys):  # all writers start key i at the same instant
    while time.time() < start + i * slot:
        time.sleep(0.0005)
    cache.save_arrays(key, arrays, {"writer": writer})
print("ok", flush=True)
"""

RACE_READER = """
import json, sys, time, warnings
from luxsweep.sweep.cache import CoefficientCache
from test_cache_faults import writer_of
root, keys, start, slot = sys.argv[1], sys.argv[2].split(","), float(sys.argv[3]), \\
    float(sys.argv[4])
cache = CoefficientCache(root)
report = {}
for i, key in enumerate(keys):  # poll key i from its race on until published, then a bit more
    rep = report[key] = {"hits": 0, "misses": 0, "seen": [], "errors": []}
    while time.time() < start + i * slot - 0.05:
        time.sleep(0.0005)
    deadline = start + (i + 1) * slot + 5.0
    while time.time() < deadline and rep["hits"] < 5:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                found = cache.load_arrays(key)
                if found is None:
                    rep["misses"] += 1
                else:
                    w = writer_of(found[0])
                    if w not in rep["seen"]:
                        rep["seen"].append(w)
                    rep["hits"] += 1
            except Exception as exc:
                rep["errors"].append(repr(exc))
        rep["errors"].extend(str(w.message) for w in caught)
print(json.dumps(report))
"""


@pytest.mark.slow
def test_racing_writers_and_readers(tmp_path):
    """Four processes publish the same key at the same instant (each with arrays
    tagged by its id) while two processes poll that key in a tight loop until it
    is published and then keep reading it; repeated over five keys (five races).
    Asserts for every key: every writer succeeds; exactly one published entry,
    passing its checksums and holding one writer's arrays only; no temporary
    left; readers never raised, never saw a damaged entry or a warning, never read
    a mixed entry, and only ever saw the winner's entry (a published entry is
    never replaced or removed)."""
    root = tmp_path / "cache"
    keys = [f"{k:x}" * 64 for k in range(10, 10 + ROUNDS)]
    start = time.time() + 3.0  # after every process has started
    joined = ",".join(keys)
    readers = [_python(RACE_READER, str(root), joined, str(start), str(SLOT)) for _ in range(2)]
    writers = [_python(RACE_WRITER, str(root), joined, str(w), str(start), str(SLOT))
               for w in range(1, 5)]
    for w in writers:
        out, err = w.communicate(timeout=120)
        assert w.returncode == 0 and out.strip() == "ok", err
    reports = []
    for r in readers:
        out, err = r.communicate(timeout=180)
        assert r.returncode == 0, err
        reports.append(json.loads(out))
    cache = CoefficientCache(root)
    assert cache.keys() == sorted(keys)
    assert sorted(p.name for p in root.iterdir()) == sorted(keys)  # no temporary, no trash
    for key in keys:
        manifest = cache.verify(key)
        arrays, meta = cache.load_arrays(key)
        winner = writer_of(arrays)
        assert meta == {"writer": winner} and manifest["metadata"] == meta
        for rep in (r[key] for r in reports):
            assert rep["errors"] == [], f"key {key[:8]}: {rep['errors'][:3]}"
            assert rep["hits"] > 0 and rep["seen"] == [winner], rep


# ------------------------------------------------------------------ item 6: damaged entries


def _npy(cache: CoefficientCache, name: str) -> Path:
    return cache.root / KEY / "arrays" / f"{name}.npy"


def _truncate(cache):
    p = _npy(cache, "sky_direct")
    p.write_bytes(p.read_bytes()[: p.stat().st_size // 2])


def _flip_data(cache):
    p = _npy(cache, "sky_reflected")
    b = bytearray(p.read_bytes())
    b[len(b) // 2] ^= 0x01  # one bit: same size, still a valid .npy
    p.write_bytes(bytes(b))


def _flip_header(cache):
    p = _npy(cache, "sun_direct")
    b = bytearray(p.read_bytes())
    i = b.index(b"(")  # shape tuple in the .npy header
    b[i + 1 : i + 2] = b"9"
    p.write_bytes(bytes(b))


def _drop_array(cache):
    _npy(cache, "writer").unlink()


def _drop_manifest(cache):
    (cache.root / KEY / "manifest.json").unlink()


def _truncate_manifest(cache):
    m = cache.root / KEY / "manifest.json"
    m.write_text(m.read_text()[:40])


def _swap_with_other_key(cache):
    other = "b7" * 32
    cache.save_arrays(other, payload(9), {"writer": 9})
    for name in ("sky_direct",):
        _npy(cache, name).write_bytes((cache.root / other / "arrays" / f"{name}.npy").read_bytes())


DAMAGE = {
    "truncated-array": _truncate,
    "bit-flipped-array": _flip_data,
    "mangled-npy-header": _flip_header,
    "missing-array": _drop_array,
    "missing-manifest": _drop_manifest,
    "truncated-manifest": _truncate_manifest,
    "array-from-another-entry": _swap_with_other_key,
}


@pytest.mark.parametrize("damage", sorted(DAMAGE))
def test_damaged_entry_is_a_miss_with_warning_and_replaced(tmp_path, damage):
    """A damaged entry: ``load_arrays`` returns None (never the damaged data) with a
    warning naming the key, the entry is removed, a new write of the key publishes,
    and the next load returns the new arrays with no warning."""
    cache = CoefficientCache(tmp_path / "cache")
    cache.save_arrays(KEY, payload(1), {"writer": 1})
    DAMAGE[damage](cache)
    with pytest.warns(UserWarning, match=KEY):
        assert cache.load_arrays(KEY) is None
    assert not (cache.root / KEY).exists()
    cache.save_arrays(KEY, payload(3), {"writer": 3})
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        arrays, meta = cache.load_arrays(KEY)
    assert writer_of(arrays) == 3 and meta == {"writer": 3}


def test_publishing_over_a_damaged_entry_replaces_it(tmp_path):
    """A writer that finds a damaged entry under its key (a reader has not yet
    noticed) replaces it: afterwards the entry verifies and holds the new arrays."""
    cache = CoefficientCache(tmp_path / "cache")
    cache.save_arrays(KEY, payload(1), {"writer": 1})
    _flip_data(cache)
    with pytest.warns(UserWarning, match=KEY):
        cache.save_arrays(KEY, payload(2), {"writer": 2})
    cache.verify(KEY)
    arrays, _ = cache.load_arrays(KEY)
    assert writer_of(arrays) == 2


def test_good_entry_survives_a_second_writer(tmp_path):
    """A second write of an existing good key keeps the first entry (bytes unchanged)
    and leaves no temporary behind."""
    cache = CoefficientCache(tmp_path / "cache")
    cache.save_arrays(KEY, payload(1), {"writer": 1})
    before = {p.name: p.read_bytes() for p in (cache.root / KEY / "arrays").iterdir()}
    cache.save_arrays(KEY, payload(2), {"writer": 2})
    after = {p.name: p.read_bytes() for p in (cache.root / KEY / "arrays").iterdir()}
    assert before == after
    assert sorted(p.name for p in cache.root.iterdir()) == [KEY]


def test_clean_temporary_removes_only_stale_leftovers(tmp_path):
    """Leftover temporary folders older than the limit are removed; younger ones (a
    live writer's) and published entries are kept."""
    cache = CoefficientCache(tmp_path / "cache")
    cache.save_arrays(KEY, payload(1), {"writer": 1})
    old = cache.root / f".tmp-{KEY}-deadbeef0001"
    young = cache.root / f".tmp-{KEY}-deadbeef0002"
    for d in (old, young):
        (d / "arrays").mkdir(parents=True)
        (d / "arrays" / "sky_direct.npy").write_bytes(b"partial")
    past = time.time() - 7200
    os.utime(old, (past, past))
    assert cache.clean_temporary(older_than=3600) == 1
    assert not old.exists() and young.exists()
    assert cache.load_arrays(KEY) is not None


@pytest.mark.parametrize("key", ["../escape", "..", ".tmp-x", "a/b", ""])
def test_cache_keys_cannot_leave_the_cache_folder(tmp_path, key):
    """A key that is a path (``..``, a slash) or a reserved temporary name is refused."""
    cache = CoefficientCache(tmp_path / "cache")
    with pytest.raises(ValueError):
        cache.save_arrays(key, payload(1), {})
    assert not (tmp_path / "escape").exists()


def test_manifest_records_a_checksum_per_file(tmp_path):
    """The manifest lists every array with a sha256 that matches the file's bytes."""
    import hashlib

    cache = CoefficientCache(tmp_path / "cache")
    cache.save_arrays(KEY, payload(1), {"writer": 1})
    manifest = json.loads((cache.root / KEY / "manifest.json").read_text())
    assert sorted(manifest["files"]) == sorted(payload(1))
    for name, info in manifest["files"].items():
        digest = hashlib.sha256(_npy(cache, name).read_bytes()).hexdigest()
        assert info["sha256"] == digest


# ------------------------------------------------------------------ item 6, end to end


@pytest.mark.slow
def test_engine_recomputes_a_corrupted_entry(tmp_path):
    """A run whose cached coefficient set was damaged on disk (one bit flipped in an
    array file, checksum no longer matching): the engine detects it, warns naming
    the key, recomputes the set instead of failing or using it, and the results
    equal those of the first run; afterwards the entry verifies again."""
    from conftest import assert_same_results, write_tiny_study

    from luxsweep.sweep.run import run_study

    study = write_tiny_study(tmp_path / "study", orientations=(180.0,), climates=("coastal",),
                             transmittances=(0.6,))
    cache_dir = tmp_path / "cache"
    first = run_study(study, tmp_path / "first.zarr", workers=1, cache_dir=cache_dir,
                      show_progress=False)
    assert first.ok and first.coefficient_sets_computed == 1
    cache = CoefficientCache(cache_dir)
    (key,) = cache.keys()
    target = next((cache.root / key / "arrays").glob("sky_direct*.npy"))
    data = bytearray(target.read_bytes())
    data[-5] ^= 0x10
    target.write_bytes(bytes(data))

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        second = run_study(study, tmp_path / "second.zarr", workers=1, cache_dir=cache_dir,
                           show_progress=False)
    messages = [str(w.message) for w in caught]
    assert second.ok, second.failed
    assert second.coefficient_sets_computed == 1
    assert any(key in m for m in messages), messages
    cache.verify(key)
    assert_same_results(tmp_path / "second.zarr", tmp_path / "first.zarr")
