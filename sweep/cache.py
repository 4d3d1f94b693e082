"""Content-addressed cache of coefficient sets, shared by every worker.

Layout of a cache folder::

    <root>/<key>/arrays/<name>.npy     one file per array
    <root>/<key>/manifest.json         sha256, shape and dtype per file + metadata

An entry is written under a temporary name ``<root>/.tmp-<key>-<random>/`` in the
same folder, its manifest last (after every array is flushed to disk), and is
then published with one atomic ``os.rename``. A reader therefore sees either no
entry or a whole one. An entry that has no manifest, or whose files fail their
checksums, is a miss: a warning is issued, the entry is removed and the caller
recomputes. When two workers compute the same key, the second rename fails
because the first entry exists; the second writer then keeps the existing good
entry and deletes its own copy, so exactly one entry remains. Temporary folders
left by killed writers are removed by :meth:`CoefficientCache.clean_temporary`
(the run client calls it at start for folders older than an hour).

Only local paths (including shared network file systems) are supported; an
fsspec URL is not.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import time
import uuid
import warnings
from pathlib import Path
from typing import Any

import numpy as np

from luxsweep.sweep.errors import CacheIntegrityError

__all__ = [
    "CoefficientCache",
    "default_cache",
]

_TMP = ".tmp-"
_TRASH = ".trash-"


def _sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def _fsync_dir(path: Path) -> None:
    try:
        fd = os.open(path, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


class CoefficientCache:
    """A folder of coefficient entries keyed by :func:`kernels.coefficients.coefficient_key`.

    Parameters
    ----------
    root : str or Path
        Cache folder (created when missing). Every worker must reach it.

    Notes
    -----
    The object holds only the path, so it pickles cheaply to Dask workers.
    """

    def __init__(self, root: str | Path) -> None:
        # absolute, symlinks kept: workers find the cache under the name given
        self.root = Path(os.path.abspath(Path(root).expanduser()))

    def __repr__(self) -> str:
        return f"CoefficientCache({str(self.root)!r})"

    def __reduce__(self) -> tuple[Any, ...]:
        return (CoefficientCache, (str(self.root),))

    # -- queries ----------------------------------------------------------------
    def entry(self, key: str) -> Path:
        if not key or "/" in key or key.startswith("."):
            raise ValueError(f"not a cache key: {key!r}")
        return self.root / key

    def contains(self, key: str) -> bool:
        """Whether a published entry exists (cheap: checks the manifest only)."""
        return (self.entry(key) / "manifest.json").is_file()

    def keys(self) -> list[str]:
        if not self.root.is_dir():
            return []
        return sorted(p.name for p in self.root.iterdir()
                      if not p.name.startswith(".") and (p / "manifest.json").is_file())

    # -- reading ----------------------------------------------------------------
    def verify(self, key: str) -> dict[str, Any]:
        """Return the manifest of entry ``key`` after checking every file's checksum.

        Raises
        ------
        CacheIntegrityError
            When the entry is missing its manifest or a file, or a checksum differs.
        """
        folder = self.entry(key)
        manifest_path = folder / "manifest.json"
        try:
            manifest = json.loads(manifest_path.read_text())
        except (OSError, ValueError) as exc:
            raise CacheIntegrityError(
                f"cache entry {folder}: no readable manifest ({exc})"
            ) from exc
        if not isinstance(manifest, dict) or not isinstance(manifest.get("files"), dict):
            raise CacheIntegrityError(f"cache entry {folder}: the manifest lists no files")
        if manifest.get("key") != key:
            raise CacheIntegrityError(f"cache entry {folder}: manifest is for key "
                                      f"{manifest.get('key')!r}")
        for name, info in manifest["files"].items():
            path = folder / "arrays" / f"{name}.npy"
            try:
                good = isinstance(info, dict) and _sha256(path) == info.get("sha256")
            except OSError as exc:  # missing, or removed meanwhile by another process
                raise CacheIntegrityError(
                    f"cache entry {folder}: file {path.name} is missing or unreadable ({exc})"
                ) from exc
            if not good:
                raise CacheIntegrityError(f"cache entry {folder}: {path.name} fails its checksum")
        return manifest

    def load_arrays(self, key: str) -> tuple[dict[str, np.ndarray], dict[str, Any]] | None:
        """The arrays and metadata of entry ``key``, or ``None`` on a miss.

        A damaged entry is a miss: it is reported with a :class:`UserWarning`
        and removed, so the caller recomputes and publishes a good one.
        """
        folder = self.entry(key)
        # existence first: an entry published between two checks must not look damaged
        if not folder.exists():
            return None
        if not (folder / "manifest.json").is_file():
            self._discard(key, "it has no manifest (an interrupted writer?)")
            return None
        try:
            manifest = self.verify(key)
            arrays = {name: np.load(folder / "arrays" / f"{name}.npy", allow_pickle=False)
                      for name in manifest["files"]}
        except (CacheIntegrityError, OSError, ValueError) as exc:
            self._discard(key, str(exc))
            return None
        return arrays, manifest["metadata"]

    def discard(self, key: str) -> None:
        """Remove entry ``key`` (no-op when absent); readers see it whole or not at all."""
        folder = self.entry(key)
        if folder.exists():
            self._remove_entry(folder)

    def _discard(self, key: str, reason: str) -> None:
        warnings.warn(f"coefficient cache: ignoring and replacing entry {key}: {reason}",
                      UserWarning, stacklevel=3)
        self._remove_entry(self.entry(key))

    def _remove_entry(self, folder: Path) -> None:
        trash = folder.parent / f"{_TRASH}{folder.name}-{uuid.uuid4().hex[:8]}"
        try:
            os.rename(folder, trash)
        except OSError:
            return
        shutil.rmtree(trash, ignore_errors=True)

    # -- writing ----------------------------------------------------------------
    def save_arrays(
        self, key: str, arrays: dict[str, np.ndarray], metadata: dict[str, Any]
    ) -> Path:
        """Publish an entry atomically; returns its folder.

        If a good entry for ``key`` already exists (another worker won the race),
        it is kept and this copy is deleted. A damaged existing entry is replaced.
        """
        self.root.mkdir(parents=True, exist_ok=True)
        final = self.entry(key)
        tmp = self.root / f"{_TMP}{key}-{uuid.uuid4().hex[:12]}"
        (tmp / "arrays").mkdir(parents=True)
        try:
            files = {}
            for name, array in arrays.items():
                if not name.isidentifier():
                    raise ValueError(f"array name {name!r} is not a plain identifier")
                path = tmp / "arrays" / f"{name}.npy"
                with open(path, "wb") as f:
                    np.save(f, np.ascontiguousarray(array), allow_pickle=False)
                    f.flush()
                    os.fsync(f.fileno())
                files[name] = {"sha256": _sha256(path), "shape": list(np.shape(array)),
                               "dtype": str(np.asarray(array).dtype)}
            manifest = {"key": key, "files": files, "metadata": metadata,
                        "created": time.time(), "format": 1}
            with open(tmp / "manifest.json", "w") as f:
                json.dump(manifest, f, indent=1, sort_keys=True)
                f.flush()
                os.fsync(f.fileno())
            _fsync_dir(tmp)
            self._publish(tmp, final, key)
        finally:
            if tmp.exists():
                shutil.rmtree(tmp, ignore_errors=True)
        return final

    def _publish(self, tmp: Path, final: Path, key: str) -> None:
        for _ in range(3):
            try:
                os.rename(tmp, final)
                _fsync_dir(self.root)
                return
            except OSError:
                if not final.exists():
                    continue
            try:
                self.verify(key)
                return  # a good entry is there: keep it, ours is deleted by the caller
            except CacheIntegrityError as exc:
                warnings.warn(f"coefficient cache: replacing damaged entry {key}: {exc}",
                              UserWarning, stacklevel=3)
                self._remove_entry(final)
        raise OSError(f"coefficient cache: could not publish entry {final}")

    # -- coefficient sets ---------------------------------------------------------
    def load(self, key: str) -> Any | None:
        """The :class:`kernels.coefficients.CoefficientSet` of ``key``, or ``None`` on a miss."""
        from luxsweep.kernels.coefficients import CoefficientSet

        found = self.load_arrays(key)
        if found is None:
            return None
        arrays, metadata = found
        return CoefficientSet.from_parts(arrays, metadata)

    def save(self, coefficients: Any) -> Path:
        """Publish a :class:`kernels.coefficients.CoefficientSet` under its own key."""
        return self.save_arrays(coefficients.key, coefficients.to_arrays(), coefficients.metadata())

    # -- housekeeping -------------------------------------------------------------
    def clean_temporary(self, older_than: float = 3600.0) -> int:
        """Remove temporary and trash folders older than ``older_than`` [s]; returns the count."""
        if not self.root.is_dir():
            return 0
        now = time.time()
        removed = 0
        for path in self.root.iterdir():
            if not path.name.startswith((_TMP, _TRASH)):
                continue
            try:
                age = now - path.stat().st_mtime
            except OSError:
                continue
            if age >= older_than:
                shutil.rmtree(path, ignore_errors=True)
                removed += 1
        return removed


def default_cache(loaded: Any) -> Path:
    """``$LUXSWEEP_CACHE`` or ``<study folder>/.luxsweep-cache`` of a loaded study.

    Here rather than in :mod:`sweep.run` so that ``luxsweep plan`` finds it without
    importing the run's Dask and Zarr stack.
    """
    env = os.environ.get("LUXSWEEP_CACHE")
    return Path(env).expanduser() if env else loaded.folder / ".luxsweep-cache"
