"""What a worker must be able to do before a run submits work, and the check of it.

Inputs a worker reads are verified against the sha256 the client computed
(:func:`verify_file`, once per file version per worker process; a mismatch is an
:class:`~sweep.errors.InputMismatchError` naming the file and the worker). The
pre-flight check (:func:`preflight`) runs :func:`worker_check` once on every
worker (``client.run``) before any task is submitted, on a joined cluster and on
the local one alike (a few milliseconds per worker: the weather files are hashed
once, and the hash is kept for the run's tasks). It checks

- every weather file: readable and matching the client's sha256;
- the coefficient cache folder: can be created and written; whether it is the
  client's own folder (shared disk) or a folder of the worker's own (then sets
  computed during the run reach the other workers through Dask, and a set the
  client found cached is recomputed by a worker that lacks it);
- the results store's folder: reachable, writable and the client's own;
- the luxsweep version and the coefficient kernel version: the client's.

From the answers it decides how the run moves data (:class:`Transport`): a
weather file some worker cannot read travels as bytes inside Dask (read once
by the client); a cache folder some worker cannot write, or a cache at an
fsspec URL some worker does not share (``memory://``), stays with the client
(workers neither read nor write it: sets reach them through Dask, computed sets
come back to the client, which publishes them); a results store's folder that
some worker does not share stays with the client (workers return their
variants' arrays and the client writes them, ``done`` last). ``run
--no-shared-disk`` chooses all three without probing. What cannot be fixed by
moving data is a problem: another file with other bytes at a weather file's
path (a stale copy), other versions. Every problem of every worker is reported
in one :class:`~sweep.errors.PreflightError` (exit status 2). Meshes and sensor
points need no check on workers: they are read by the client and travel
inside the coefficient tasks (``CoefficientJob.geometry`` and ``.sensors``);
cache entries carry per-file checksums (:meth:`sweep.cache.CoefficientCache.verify`).
"""

from __future__ import annotations

import contextlib
import hashlib
import logging
import os
import socket
import threading
import uuid
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from luxsweep.sweep.errors import InputMismatchError, PreflightError

log = logging.getLogger("luxsweep")

PROBE = ".tmp-probe-"
"""Prefix of the probe files the client writes for the workers to find (the cache's
temporary prefix, so a leftover one is cleaned with the cache's other leftovers)."""

_HASHES: dict[tuple, str] = {}
_HASHES_LOCK = threading.Lock()


def worker_name() -> str:
    """The address of the Dask worker running this code, or this host's name."""
    try:
        from distributed import get_worker

        return str(get_worker().address)
    except (ImportError, ValueError):
        return f"the client ({socket.gethostname()})"


def _sha256(path: str) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def file_version(path: str | os.PathLike) -> tuple:
    """(path, size, modification time, inode): changes when the file is replaced or edited."""
    stat = os.stat(path)
    return (os.fspath(path), stat.st_size, stat.st_mtime_ns, stat.st_ino)


def _file_problem(path: str | os.PathLike, expected: str, what: str) -> tuple:
    """(file version, None) when ``path`` holds the bytes the client hashed, else
    (None, what is wrong, without the worker's name)."""
    try:
        version = file_version(path)
        with _HASHES_LOCK:
            found = _HASHES.get(version)
        if found is None:
            found = _sha256(os.fspath(path))
            with _HASHES_LOCK:
                _HASHES[version] = found
    except OSError as exc:
        return None, (f"the {what} {os.fspath(path)} cannot be read "
                      f"({exc.strerror or exc})")
    if found != expected:
        return None, (f"the {what} {os.fspath(path)} is not the client's file (sha256 "
                      f"{found[:12]}… here, {expected[:12]}… on the client): another file at "
                      "the same path (another mount or a stale copy)")
    return version, None


def verify_file(path: str | os.PathLike, expected: str, what: str = "weather file") -> tuple:
    """Check that ``path`` holds the bytes the client hashed; its :func:`file_version`.

    The hash is computed once per file version per process and remembered.

    Raises
    ------
    InputMismatchError
        The file cannot be read here, or its sha256 differs from ``expected``
        (the message names the file and the worker).
    """
    version, problem = _file_problem(path, expected, what)
    if problem:
        raise InputMismatchError(
            f"worker {worker_name()}: {problem}. Every worker must see the client's files "
            "under the same absolute path; the run stopped so that no result comes from "
            "another file")
    return version


def _writable(folder: Path) -> str | None:
    """None when a file can be created and removed in ``folder``, else why not."""
    probe = folder / f"{PROBE}{uuid.uuid4().hex[:12]}-{os.getpid()}"
    try:
        probe.write_bytes(b"")
        probe.unlink()
    except OSError as exc:
        return exc.strerror or str(exc)
    return None


@dataclass(frozen=True)
class Transport:
    """How a run moves its data (decided by :func:`preflight`).

    Attributes
    ----------
    inputs_by_dask : bool
        Weather files travel as bytes inside Dask (read once by the client);
        else every worker reads the client's file by path (checked by sha256).
    client_cache : bool
        The client keeps the coefficient cache: workers get every set through
        Dask and return the sets they compute, which the client publishes.
    client_store : bool
        The client writes the results store: series tasks return their
        variants' arrays.
    shared_cache : dict of str to bool
        Per worker: whether it sees the client's cache folder (when the workers
        use the cache themselves; a worker with a folder of its own keeps its sets
        there).
    notes : list of str
        Why data moves through Dask (one line per worker and thing).
    """

    inputs_by_dask: bool = False
    client_cache: bool = False
    client_store: bool = False
    shared_cache: dict[str, bool] = field(default_factory=dict)
    notes: tuple[str, ...] = ()

    @property
    def hold_sets(self) -> bool:
        """Whether the run must hold every set in the workers' memory until its
        last series task is gathered (some worker cannot read the client's cache)."""
        return self.client_cache or not all(self.shared_cache.values())

    @property
    def no_shared_disk(self) -> bool:
        """Whether anything at all travels through Dask instead of a shared disk."""
        return self.inputs_by_dask or self.client_cache or self.client_store


def _is_url(location: str) -> bool:
    return "://" in location and not location.startswith("file://")


def _local(location: str) -> str:
    return location[len("file://"):] if location.startswith("file://") else location


def _read_token(location: str, name: str) -> str | None:
    """The probe file ``name`` in ``location`` (a folder or an fsspec URL), or None."""
    try:
        if _is_url(location):
            import fsspec

            fs, path = fsspec.core.url_to_fs(location)
            return fs.cat_file(f"{path.rstrip('/')}/{name}").decode()
        return (Path(_local(location)) / name).read_text()
    except (OSError, ValueError, ImportError):
        return None


def _write_token(location: str, name: str, token: str) -> None:
    if _is_url(location):
        import fsspec

        fs, path = fsspec.core.url_to_fs(location)
        fs.pipe_file(f"{path.rstrip('/')}/{name}", token.encode())
    else:
        (Path(_local(location)) / name).write_text(token)


def _remove_token(location: str, name: str) -> None:
    with contextlib.suppress(OSError, ValueError, ImportError):
        if _is_url(location):
            import fsspec

            fs, path = fsspec.core.url_to_fs(location)
            fs.rm(f"{path.rstrip('/')}/{name}")
        else:
            (Path(_local(location)) / name).unlink()


def worker_check(needs: dict[str, Any]) -> dict[str, Any]:
    """Run on a worker (``client.run``): what fails here and what this worker reaches.

    ``needs`` holds ``inputs`` (path -> sha256), ``cache`` (a folder or an fsspec
    URL) and ``store_folder`` with the client's probe file names and tokens,
    ``version`` and ``kernel_version``; with ``no_shared_disk`` only the versions
    are checked.

    Returns
    -------
    dict
        ``problems`` (what moving data through Dask cannot fix: versions, a weather
        file with other bytes), ``shared_cache`` (this worker sees the client's
        cache), ``own_cache`` (it can keep a cache folder of its own at that path),
        ``inputs`` (it reads every weather file), ``shared_store`` (it sees and can
        write the client's store folder) and ``notes`` (why not, one line each).
    """
    from luxsweep import kernels
    from luxsweep.sweep import __version__

    problems: list[str] = []
    notes: list[str] = []
    if __version__ != needs["version"]:
        problems.append(f"luxsweep {__version__} is installed, the client runs "
                        f"{needs['version']}")
    if kernels.KERNEL_VERSION != needs["kernel_version"]:
        problems.append(f"the coefficient kernel version is {kernels.KERNEL_VERSION}, the "
                        f"client's is {needs['kernel_version']}")
    if needs.get("no_shared_disk"):
        return {"problems": problems, "shared_cache": False, "own_cache": False,
                "inputs": False, "shared_store": False, "notes": notes}
    inputs = True
    for path, expected in needs["inputs"].items():
        try:
            with open(path, "rb"):
                pass
        except OSError as exc:
            inputs = False
            notes.append(f"the weather file {path} cannot be read here "
                         f"({exc.strerror or exc})")
            continue
        problem = _file_problem(path, expected, "weather file")[1]
        if problem:
            problems.append(problem)
    location = needs["cache"]
    shared_cache = _read_token(location, needs["cache_probe"]) == needs["token"]
    own_cache = False
    if not shared_cache and not _is_url(location):
        cache = Path(_local(location))
        try:
            cache.mkdir(parents=True, exist_ok=True)
            why = _writable(cache)
        except OSError as exc:
            why = exc.strerror or str(exc)
        own_cache = why is None
        if why:
            notes.append(f"the coefficient cache folder {cache} cannot be written here ({why})")
    elif not shared_cache:
        notes.append(f"the coefficient cache {location} is not the client's here")
    store = Path(needs["store_folder"])
    shared_store = False
    if not store.is_dir():
        notes.append(f"the results store's folder {store} does not exist here")
    elif _token(store / needs["store_probe"]) != needs["token"]:
        notes.append(f"the results store's folder {store} is not the client's (another "
                     "disk at the same path)")
    elif why := _writable(store):
        notes.append(f"the results store's folder {store} cannot be written here ({why})")
    else:
        shared_store = True
    return {"problems": problems, "shared_cache": shared_cache, "own_cache": own_cache,
            "inputs": inputs, "shared_store": shared_store, "notes": notes}


def _token(path: Path) -> str | None:
    try:
        return path.read_text()
    except OSError:
        return None


def preflight(client: Any, inputs: dict[str, str], cache_root: str | Path,
              results: Path, kernel_version: str | None = None, *,
              no_shared_disk: bool = False) -> Transport:
    """Check every worker before submitting work; decide how data moves (:class:`Transport`).

    Parameters
    ----------
    client : distributed.Client
    inputs : dict
        Weather file path (as sent to workers) -> sha256 computed by the client.
    cache_root : str or Path
        The coefficient cache (a folder the client created, or an fsspec URL).
    results : Path
        The results store.
    no_shared_disk : bool
        Do not probe: inputs, cache and store all stay with the client
        (``run --no-shared-disk``).

    Raises
    ------
    PreflightError
        One message: each failing worker's address and its problems.
    """
    from luxsweep import kernels
    from luxsweep.sweep import __version__

    token = uuid.uuid4().hex
    location = str(cache_root)
    store_folder = results.parent
    probes = {"cache_probe": f"{PROBE}{token[:16]}", "store_probe": f"{PROBE}{token[:16]}"}
    written: list[tuple[str, str]] = []
    store_folder.mkdir(parents=True, exist_ok=True)
    if not no_shared_disk:
        written = [(location, probes["cache_probe"]),
                   (str(store_folder), probes["store_probe"])]
        for where, name in written:
            _write_token(where, name, token)
    needs = {"inputs": inputs, "cache": location, "store_folder": str(store_folder),
             "token": token, "version": __version__, "no_shared_disk": no_shared_disk,
             "kernel_version": kernel_version or kernels.KERNEL_VERSION, **probes}
    try:
        answers = client.run(worker_check, needs, on_error="return")
    finally:
        for where, name in written:
            _remove_token(where, name)
    failing: list[str] = []
    good: dict[str, dict[str, Any]] = {}
    for address, answer in sorted(answers.items()):
        if isinstance(answer, BaseException):
            failing.append(f"{address}: the check could not run there ({type(answer).__name__}:"
                           f" {answer}); is luxsweep installed on that worker?")
            continue
        good[address] = answer
        if answer["problems"]:
            failing.append(f"{address}: " + "; ".join(answer["problems"]))
    if failing:
        raise PreflightError("the pre-flight check of the workers failed, nothing was "
                             "submitted:\n  " + "\n  ".join(failing))
    if not answers:
        raise PreflightError("the cluster has no workers; start at least one 'dask worker'")
    notes = tuple(f"{a}: {n}" for a, ans in good.items() for n in ans["notes"])
    if no_shared_disk:
        transport = Transport(True, True, True, dict.fromkeys(good, False),
                              ("as asked with --no-shared-disk",))
    else:
        transport = Transport(
            inputs_by_dask=not all(a["inputs"] for a in good.values()),
            client_cache=not all(a["shared_cache"] or a["own_cache"] for a in good.values()),
            client_store=not all(a["shared_store"] for a in good.values()),
            shared_cache={a: ans["shared_cache"] for a, ans in good.items()},
            notes=notes)
    if transport.no_shared_disk:
        moved = [what for what, on in (("weather files", transport.inputs_by_dask),
                                       ("coefficient cache", transport.client_cache),
                                       ("results store", transport.client_store)) if on]
        log.info("no shared disk for the %s: %s stay with the client and travel through "
                 "Dask (%s)", ", ".join(moved), "they" if len(moved) > 1 else "it",
                 "; ".join(transport.notes))
    own = [a for a, ans in good.items() if not ans["shared_cache"] and ans["own_cache"]]
    if own and not transport.client_cache:
        log.info("coefficient cache: workers %s keep their own cache folder (no shared disk "
                 "with the client); sets computed in this run reach them through Dask, and "
                 "cached sets they lack are computed again there", ", ".join(own))
    return transport


__all__ = ["PROBE", "Transport", "file_version", "preflight", "verify_file", "worker_check",
           "worker_name"]
