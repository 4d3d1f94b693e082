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

A cache may also live at an fsspec URL (``memory://``, ``s3://``, ``gcs://``, ...;
:func:`open_cache` chooses): :class:`UrlCache` keeps the same layout and
checksums, but object stores cannot rename a folder, so it publishes an entry by
writing its manifest *last*, in one write, after every array file. Array files
carry their content's sha256 in their name, so two writers of one key never
overwrite each other's files with other bytes, and a manifest always names whole
files. A reader sees no manifest (a miss) or a whole entry; a torn manifest on a
store without atomic writes fails to parse and is a miss. ``file://`` URLs are
plain local folders (:class:`CoefficientCache`, with its atomic rename).
"""

from __future__ import annotations

import hashlib
import json
import os
import re
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
    "UrlCache",
    "default_cache",
    "is_url",
    "local_path",
    "open_cache",
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


class _CoefficientSets:
    """Coefficient sets over a cache's ``load_arrays`` / ``save_arrays`` (both caches)."""

    def load_arrays(self, key: str, mmap: bool = False
                    ) -> tuple[dict[str, np.ndarray], dict[str, Any]] | None:
        raise NotImplementedError

    def save_arrays(self, key: str, arrays: dict[str, np.ndarray],
                    metadata: dict[str, Any]) -> Any:
        raise NotImplementedError

    def load(self, key: str, sensors: tuple[int, int] | None = None) -> Any | None:
        """The :class:`kernels.coefficients.CoefficientSet` of ``key``, or ``None`` on a miss.

        ``sensors`` ``(first, stop)``: only those sensors' rows
        (:meth:`~kernels.coefficients.CoefficientSet.take_sensors`); a local
        cache maps the files and reads just those rows, so a part of a large
        set costs the part's memory (a URL cache reads the whole files).
        """
        from luxsweep.kernels.coefficients import CoefficientSet

        found = self.load_arrays(key, mmap=sensors is not None)
        if found is None:
            return None
        arrays, metadata = found
        whole = CoefficientSet.from_parts(arrays, metadata)
        return whole if sensors is None else whole.take_sensors(slice(*sensors))

    def save(self, coefficients: Any) -> Any:
        """Publish a :class:`kernels.coefficients.CoefficientSet` under its own key
        (the entry's path or URL)."""
        return self.save_arrays(coefficients.key, coefficients.to_arrays(),
                                coefficients.metadata())


class CoefficientCache(_CoefficientSets):
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

    @property
    def location(self) -> str:
        """Where the cache is, as workers are told (a local path here)."""
        return str(self.root)

    def create(self) -> None:
        """Create the cache folder (and its parents) when missing."""
        self.root.mkdir(parents=True, exist_ok=True)

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

    def load_arrays(self, key: str, mmap: bool = False
                    ) -> tuple[dict[str, np.ndarray], dict[str, Any]] | None:
        """The arrays and metadata of entry ``key``, or ``None`` on a miss.

        A damaged entry is a miss: it is reported with a :class:`UserWarning`
        and removed, so the caller recomputes and publishes a good one. With
        ``mmap`` the arrays are read-only maps of the checked files.
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
            arrays = {name: np.load(folder / "arrays" / f"{name}.npy", allow_pickle=False,
                                    mmap_mode="r" if mmap else None)
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


def is_url(location: str | os.PathLike) -> bool:
    """Whether ``location`` is a URL (``scheme://...``) rather than a local path."""
    return "://" in os.fspath(location)


_SCHEME_LIKE = re.compile(r"^[A-Za-z][A-Za-z0-9+.-]+:/(?!/)")


def local_path(location: str | os.PathLike, what: str = "--cache") -> str | None:
    """The local path of ``location``: itself, or the path of a ``file://`` URL; else None.

    Raises
    ------
    CacheLocationError
        ``location`` looks like a URL with one slash too few (``s3:/bucket/x``),
        which would otherwise quietly become a local folder named ``s3:``.
    """
    from luxsweep.sweep.errors import CacheLocationError

    text = os.fspath(location)
    if _SCHEME_LIKE.match(text):
        scheme = text.split(":", 1)[0]
        raise CacheLocationError(
            f"{what} {text}: this looks like a URL with one slash missing after "
            f"'{scheme}:'; write {scheme}://{text.split(':/', 1)[1]} (or ./{text} for a "
            "local folder of that name)")
    if not is_url(text):
        return text
    if text.startswith("file://"):
        return text[len("file://"):]
    return None


def open_cache(location: str | os.PathLike) -> CoefficientCache | UrlCache:
    """The coefficient cache at a local folder, a ``file://`` URL or another fsspec URL.

    Raises
    ------
    CacheLocationError
        An fsspec URL whose scheme no installed fsspec backend serves (e.g.
        ``s3://`` without ``s3fs``), or that fsspec cannot open.
    """
    path = local_path(location, "--cache")
    if path is not None:
        return CoefficientCache(path)
    return UrlCache(os.fspath(location))


class UrlCache(_CoefficientSets):
    """A coefficient cache at an fsspec URL (module doc: manifest-last publishing).

    Parameters
    ----------
    url : str
        ``protocol://path`` of the cache folder; any fsspec filesystem. A
        ``memory://`` cache lives in the memory of the process that opens it, so
        it serves the client's runs in one process (the client keeps it).

    Notes
    -----
    Pickles as its URL; every process opens the filesystem itself.
    """

    def __init__(self, url: str) -> None:
        from luxsweep.sweep.errors import CacheLocationError

        self.url = url.rstrip("/")
        try:
            import fsspec

            self._fs, self._path = fsspec.core.url_to_fs(self.url)
        except (ImportError, ValueError, OSError) as exc:
            raise CacheLocationError(
                f"coefficient cache {url}: fsspec cannot open this URL ({exc}); install the "
                "fsspec backend for its scheme (e.g. s3fs for s3://) or give a local folder "
                "with --cache") from exc
        self._path = self._path.rstrip("/")

    @property
    def root(self) -> str:
        return self.url

    @property
    def location(self) -> str:
        return self.url

    def __repr__(self) -> str:
        return f"UrlCache({self.url!r})"

    def __reduce__(self) -> tuple[Any, ...]:
        return (UrlCache, (self.url,))

    def create(self) -> None:
        """Create the cache folder where the filesystem has folders."""
        self._fs.makedirs(self._path, exist_ok=True)

    def _entry(self, key: str) -> str:
        if not key or "/" in key or key.startswith("."):
            raise ValueError(f"not a cache key: {key!r}")
        return f"{self._path}/{key}"

    def entry(self, key: str) -> str:
        return f"{self.url}/{key}"

    def contains(self, key: str) -> bool:
        return bool(self._fs.exists(f"{self._entry(key)}/manifest.json"))

    def keys(self) -> list[str]:
        try:
            names = [p.rstrip("/").rsplit("/", 1)[-1] for p in self._fs.ls(self._path,
                                                                          detail=False)]
        except FileNotFoundError:
            return []
        return sorted(n for n in names if not n.startswith(".") and self.contains(n))

    def _manifest(self, key: str) -> dict[str, Any]:
        where = self.entry(key)
        try:
            manifest = json.loads(self._fs.cat_file(f"{self._entry(key)}/manifest.json"))
        except (OSError, ValueError) as exc:
            raise CacheIntegrityError(f"cache entry {where}: no readable manifest ({exc})"
                                      ) from exc
        if not isinstance(manifest, dict) or not isinstance(manifest.get("files"), dict):
            raise CacheIntegrityError(f"cache entry {where}: the manifest lists no files")
        if manifest.get("key") != key:
            raise CacheIntegrityError(f"cache entry {where}: manifest is for key "
                                      f"{manifest.get('key')!r}")
        return manifest

    def _read(self, key: str, manifest: dict[str, Any]) -> dict[str, bytes]:
        out = {}
        for name, info in manifest["files"].items():
            path = f"{self._entry(key)}/arrays/{info.get('file', name + '.npy')}"
            try:
                raw = self._fs.cat_file(path)
            except OSError as exc:
                raise CacheIntegrityError(f"cache entry {self.entry(key)}: file {path} is "
                                          f"missing or unreadable ({exc})") from exc
            if hashlib.sha256(raw).hexdigest() != info.get("sha256"):
                raise CacheIntegrityError(f"cache entry {self.entry(key)}: {name} fails its "
                                          "checksum")
            out[name] = raw
        return out

    def verify(self, key: str) -> dict[str, Any]:
        """The manifest of entry ``key`` after checking every file's checksum."""
        manifest = self._manifest(key)
        self._read(key, manifest)
        return manifest

    def load_arrays(self, key: str, mmap: bool = False
                    ) -> tuple[dict[str, np.ndarray], dict[str, Any]] | None:
        """The arrays and metadata of entry ``key``; ``None`` on a miss (a damaged
        entry is reported, removed and a miss). ``mmap`` is ignored: the files are
        read whole."""
        import io

        if not self.contains(key):
            return None
        try:
            manifest = self._manifest(key)
            raw = self._read(key, manifest)
            arrays = {name: np.load(io.BytesIO(b), allow_pickle=False) for name, b in raw.items()}
        except (CacheIntegrityError, OSError, ValueError) as exc:
            warnings.warn(f"coefficient cache: ignoring and replacing entry {key}: {exc}",
                          UserWarning, stacklevel=2)
            self.discard(key)
            return None
        return arrays, manifest["metadata"]

    def discard(self, key: str) -> None:
        """Remove entry ``key`` (its manifest first, so readers see it whole or not at all)."""
        entry = self._entry(key)
        for path in (f"{entry}/manifest.json", entry):
            try:
                self._fs.rm(path, recursive=path == entry)
            except (FileNotFoundError, OSError):
                pass

    def save_arrays(self, key: str, arrays: dict[str, np.ndarray],
                    metadata: dict[str, Any]) -> str:
        """Publish an entry: every array file, then the manifest in one write.

        A good entry already there (another writer won) is kept as it is.
        """
        import io

        entry = self._entry(key)
        if self.contains(key):
            try:
                self.verify(key)
                return self.entry(key)
            except CacheIntegrityError:
                self.discard(key)
        files = {}
        for name, array in arrays.items():
            if not name.isidentifier():
                raise ValueError(f"array name {name!r} is not a plain identifier")
            buffer = io.BytesIO()
            np.save(buffer, np.ascontiguousarray(array), allow_pickle=False)
            raw = buffer.getvalue()
            digest = hashlib.sha256(raw).hexdigest()
            file = f"{name}-{digest[:16]}.npy"
            self._fs.pipe_file(f"{entry}/arrays/{file}", raw)
            files[name] = {"sha256": digest, "file": file, "shape": list(np.shape(array)),
                           "dtype": str(np.asarray(array).dtype)}
        manifest = {"key": key, "files": files, "metadata": metadata, "created": time.time(),
                    "format": 1}
        self._fs.pipe_file(f"{entry}/manifest.json",
                           json.dumps(manifest, indent=1, sort_keys=True).encode())
        return self.entry(key)

    def clean_temporary(self, older_than: float = 3600.0) -> int:
        """Nothing to clean: entries are written in place, published by their manifest."""
        return 0


def default_cache(loaded: Any) -> Path | str:
    """``$LUXSWEEP_CACHE`` (a folder or an fsspec URL) or ``<study folder>/.luxsweep-cache``.

    Here rather than in :mod:`sweep.run` so that ``luxsweep plan`` finds it without
    importing the run's Dask and Zarr stack.
    """
    env = os.environ.get("LUXSWEEP_CACHE")
    if env and is_url(env):
        return env
    return Path(env).expanduser() if env else loaded.folder / ".luxsweep-cache"
