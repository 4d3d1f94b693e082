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
- the results store's folder: reachable, writable and the client's own (results
  written to another disk would be lost);
- the luxsweep version and the coefficient kernel version: the client's.

Every problem of every worker is reported in one :class:`~sweep.errors.PreflightError`
(exit status 2). Meshes and sensor points need no check on workers: they travel
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


def worker_check(needs: dict[str, Any]) -> dict[str, Any]:
    """Run on a worker (``client.run``): ``{"problems": [...], "shared_cache": bool}``.

    ``needs`` holds ``inputs`` (path -> sha256), ``cache`` and ``store_folder``
    (folders) with the client's probe file names and tokens, ``version`` and
    ``kernel_version``.
    """
    from luxsweep import kernels
    from luxsweep.sweep import __version__

    problems: list[str] = []
    if __version__ != needs["version"]:
        problems.append(f"luxsweep {__version__} is installed, the client runs "
                        f"{needs['version']}")
    if kernels.KERNEL_VERSION != needs["kernel_version"]:
        problems.append(f"the coefficient kernel version is {kernels.KERNEL_VERSION}, the "
                        f"client's is {needs['kernel_version']}")
    for path, expected in needs["inputs"].items():
        problem = _file_problem(path, expected, "weather file")[1]
        if problem:
            problems.append(problem)
    cache = Path(needs["cache"])
    try:
        cache.mkdir(parents=True, exist_ok=True)
        why = _writable(cache)
    except OSError as exc:
        why = exc.strerror or str(exc)
    if why:
        problems.append(f"the coefficient cache folder {cache} cannot be written ({why})")
    shared_cache = _token(cache / needs["cache_probe"]) == needs["token"]
    store = Path(needs["store_folder"])
    if not store.is_dir():
        problems.append(f"the results store's folder {store} does not exist here")
    elif _token(store / needs["store_probe"]) != needs["token"]:
        problems.append(f"the results store's folder {store} is not the client's (another "
                        "disk at the same path): results written here would be lost; share "
                        "that folder with every worker")
    elif why := _writable(store):
        problems.append(f"the results store's folder {store} cannot be written ({why})")
    return {"problems": problems, "shared_cache": shared_cache}


def _token(path: Path) -> str | None:
    try:
        return path.read_text()
    except OSError:
        return None


def preflight(client: Any, inputs: dict[str, str], cache_root: Path,
              results: Path, kernel_version: str | None = None) -> dict[str, bool]:
    """Check every worker before submitting work; which workers share the client's cache.

    Parameters
    ----------
    client : distributed.Client
    inputs : dict
        Weather file path (as sent to workers) -> sha256 computed by the client.
    cache_root, results : Path
        The coefficient cache folder (created by the client) and the results store.

    Raises
    ------
    PreflightError
        One message: each failing worker's address and its problems.
    """
    from luxsweep import kernels
    from luxsweep.sweep import __version__

    token = uuid.uuid4().hex
    store_folder = results.parent
    probes = {"cache_probe": f"{PROBE}{token[:16]}", "store_probe": f"{PROBE}{token[:16]}"}
    store_folder.mkdir(parents=True, exist_ok=True)
    written = [cache_root / probes["cache_probe"], store_folder / probes["store_probe"]]
    for path in written:
        path.write_text(token)
    needs = {"inputs": inputs, "cache": str(cache_root), "store_folder": str(store_folder),
             "token": token, "version": __version__,
             "kernel_version": kernel_version or kernels.KERNEL_VERSION, **probes}
    try:
        answers = client.run(worker_check, needs, on_error="return")
    finally:
        for path in written:
            with contextlib.suppress(OSError):
                path.unlink()
    failing: list[str] = []
    shared: dict[str, bool] = {}
    for address, answer in sorted(answers.items()):
        if isinstance(answer, BaseException):
            failing.append(f"{address}: the check could not run there ({type(answer).__name__}:"
                           f" {answer}); is luxsweep installed on that worker?")
            continue
        shared[address] = answer["shared_cache"]
        if answer["problems"]:
            failing.append(f"{address}: " + "; ".join(answer["problems"]))
    if failing:
        raise PreflightError("the pre-flight check of the workers failed, nothing was "
                             "submitted:\n  " + "\n  ".join(failing))
    if not answers:
        raise PreflightError("the cluster has no workers; start at least one 'dask worker'")
    own = [a for a, s in shared.items() if not s]
    if own:
        log.info("coefficient cache: workers %s keep their own cache folder (no shared disk "
                 "with the client); sets computed in this run reach them through Dask, and "
                 "cached sets they lack are computed again there", ", ".join(own))
    return shared


__all__ = ["PROBE", "file_version", "preflight", "verify_file", "worker_check", "worker_name"]
