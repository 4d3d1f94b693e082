"""The coefficient cache: atomic publish, checksums, concurrent writers, cleanup."""

from __future__ import annotations

import json
import multiprocessing
import os
import pickle
import time
import warnings

import numpy as np
import pytest

from luxsweep.sweep.cache import CoefficientCache


def arrays(seed: int = 0) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(seed)
    return {"sky_direct": rng.random((1, 20, 146), dtype=np.float32),
            "sensors": rng.random((20, 6))}


def test_publish_then_load_round_trip(tmp_path):
    cache = CoefficientCache(tmp_path / "cache")
    data = arrays()
    folder = cache.save_arrays("k1", data, {"note": "x"})
    assert folder == cache.root / "k1"
    assert cache.contains("k1") and cache.keys() == ["k1"]
    assert not [p for p in cache.root.iterdir() if p.name.startswith(".")]  # no temporaries
    loaded, meta = cache.load_arrays("k1")
    assert meta == {"note": "x"}
    for name in data:
        assert np.array_equal(loaded[name], data[name]) and loaded[name].dtype == data[name].dtype


def test_manifest_is_written_last_with_checksums(tmp_path):
    cache = CoefficientCache(tmp_path)
    cache.save_arrays("k", arrays(), {})
    manifest = json.loads((tmp_path / "k" / "manifest.json").read_text())
    files = sorted((tmp_path / "k" / "arrays").iterdir())
    assert sorted(manifest["files"]) == sorted(p.stem for p in files)
    assert max(p.stat().st_mtime_ns for p in files) <= (
        tmp_path / "k" / "manifest.json").stat().st_mtime_ns


def test_checksum_mismatch_is_a_miss_with_warning_and_is_replaced(tmp_path):
    cache = CoefficientCache(tmp_path)
    cache.save_arrays("k", arrays(), {})
    target = tmp_path / "k" / "arrays" / "sky_direct.npy"
    raw = bytearray(target.read_bytes())
    raw[-1] ^= 0xFF  # flip bits in the data
    target.write_bytes(bytes(raw))
    with pytest.warns(UserWarning, match="checksum"):
        assert cache.load_arrays("k") is None
    assert not cache.contains("k")  # the damaged entry is gone
    cache.save_arrays("k", arrays(), {})
    assert cache.load_arrays("k") is not None


def test_incomplete_entry_without_manifest_is_a_miss(tmp_path):
    cache = CoefficientCache(tmp_path)
    (tmp_path / "k" / "arrays").mkdir(parents=True)
    (tmp_path / "k" / "arrays" / "sky_direct.npy").write_bytes(b"partial")
    assert not cache.contains("k")
    with pytest.warns(UserWarning, match="no manifest"):
        assert cache.load_arrays("k") is None
    cache.save_arrays("k", arrays(), {})
    assert cache.load_arrays("k") is not None


def test_publish_over_damaged_entry_replaces_it(tmp_path):
    cache = CoefficientCache(tmp_path)
    cache.save_arrays("k", arrays(1), {})
    (tmp_path / "k" / "arrays" / "sky_direct.npy").write_bytes(b"garbage")
    with pytest.warns(UserWarning, match="replacing damaged"):
        cache.save_arrays("k", arrays(2), {})
    loaded, _ = cache.load_arrays("k")
    assert np.array_equal(loaded["sky_direct"], arrays(2)["sky_direct"])


def test_second_writer_keeps_the_existing_good_entry(tmp_path):
    cache = CoefficientCache(tmp_path)
    cache.save_arrays("k", arrays(1), {"writer": 1})
    cache.save_arrays("k", arrays(2), {"writer": 2})
    _, meta = cache.load_arrays("k")
    assert meta == {"writer": 1}
    assert [p.name for p in tmp_path.iterdir()] == ["k"]


def _writer(root: str, seed: int, start: float) -> None:
    while time.time() < start:
        time.sleep(0.001)
    CoefficientCache(root).save_arrays("shared", arrays(seed), {"writer": seed})


def test_concurrent_writers_leave_exactly_one_good_entry(tmp_path):
    ctx = multiprocessing.get_context("spawn")
    start = time.time() + 2.0
    procs = [ctx.Process(target=_writer, args=(str(tmp_path), s, start)) for s in range(4)]
    for p in procs:
        p.start()
    for p in procs:
        p.join(60)
        assert p.exitcode == 0
    assert [p.name for p in tmp_path.iterdir()] == ["shared"]
    cache = CoefficientCache(tmp_path)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # a good entry: no warning
        loaded, meta = cache.load_arrays("shared")
    assert np.array_equal(loaded["sky_direct"], arrays(meta["writer"])["sky_direct"])


def test_clean_temporary_removes_old_leftovers_only(tmp_path):
    cache = CoefficientCache(tmp_path)
    old = tmp_path / ".tmp-k-dead"
    new = tmp_path / ".tmp-k-live"
    old.mkdir()
    new.mkdir()
    past = time.time() - 7200
    os.utime(old, (past, past))
    assert cache.clean_temporary(older_than=3600) == 1
    assert not old.exists() and new.exists()


def test_cache_pickles_by_path(tmp_path):
    cache = CoefficientCache(tmp_path)
    again = pickle.loads(pickle.dumps(cache))
    assert again.root == cache.root


def test_bad_key_is_refused(tmp_path):
    with pytest.raises(ValueError):
        CoefficientCache(tmp_path).entry("../escape")


def test_real_coefficient_set_round_trip(tmp_path):
    """A CoefficientSet from the kernels survives the cache bit for bit."""
    from conftest import TINY_COMPUTE

    from luxsweep.kernels.coefficients import Settings, compute_coefficients
    from luxsweep.kernels.geometry import parametric_room, sensor_grid

    geometry = parametric_room(
        3.0, 3.0, 2.7, [dict(wall="front", width=1.5, sill=0.9, head=2.1, offset=0.0,
                             glazing="main")],
        dict(floor=0.2, walls=0.5, ceiling=0.7), {"main": 2})
    sensors = sensor_grid(3.0, 3.0, 0.8, 1.0, 0.5)
    coeffs = compute_coefficients(geometry, sensors, Settings(**TINY_COMPUTE))
    cache = CoefficientCache(tmp_path)
    cache.save(coeffs)
    back = cache.load(coeffs.key)
    assert back.key == coeffs.key and back.glazing_sets == coeffs.glazing_sets
    for name, array in coeffs.to_arrays().items():
        assert np.array_equal(getattr(back, name), array)


def test_absent_entry_is_a_quiet_miss_and_discard_removes_whole_entries(tmp_path):
    """An absent key is a miss without any warning (a reader polling a key that is
    being published must not treat it as damaged); ``discard`` removes an entry
    in one rename, leaving no trash behind."""
    cache = CoefficientCache(tmp_path)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        assert cache.load_arrays("k") is None
        cache.discard("k")  # absent: nothing to do
    cache.save_arrays("k", arrays(), {})
    cache.discard("k")
    assert not cache.contains("k") and sorted(p.name for p in tmp_path.iterdir()) == []
