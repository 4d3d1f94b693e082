"""Where a run computes: the local cluster, or a joined one (address, scheduler file, TLS).

``luxsweep run`` connects *before* it creates the results store, so a scheduler
that cannot be reached leaves nothing behind. Every way a connection can fail
(a missing or unreadable scheduler file, an address that is not one, a time-out,
missing or unreadable TLS files) is a :class:`~sweep.errors.SchedulerError`: one
plain sentence and exit status 2 on the command line.

The default cluster is a ``distributed.LocalCluster`` of single-threaded worker
processes bound to 127.0.0.1. A joined cluster is given as an address
(``tcp://host:port``, ``tls://host:port`` or a bare ``host:port``, which Dask
reads as TCP) or as a scheduler file (the JSON file ``dask scheduler
--scheduler-file`` writes). A plain-TCP link to a host other than loopback is
warned about whichever way the address was given. A ``tls://`` scheduler is
joined with the CA, certificate and key of :class:`TlsFiles` (or Dask's own
``distributed.comm.tls`` configuration when none are given).
"""

from __future__ import annotations

import contextlib
import importlib.util
import ipaddress
import json
import logging
import os
import signal
import time
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any
from urllib.parse import urlparse

from luxsweep.sweep.errors import SchedulerError

log = logging.getLogger("luxsweep")

ALLOWED_FAILURES = 2
"""Worker deaths a task may cause before it fails, on the run's own LocalCluster.

A task whose worker dies three times (e.g. out of memory) is almost surely the
cause rather than a bystander; failing it sooner than Dask's default (3 allowed,
4 deaths) keeps a poison variant from costing many worker restarts. A failed
series task is retried member by member (see :class:`sweep.run.Collector`), so a
bystander gets a second chance there. A joined cluster keeps its own setting.
"""

CONNECT_TIMEOUT = 10.0
"""Default wait for a joined scheduler to answer [s]."""


@dataclass(frozen=True)
class TlsFiles:
    """The client's side of a TLS link: CA certificate, and certificate and key (PEM).

    ``cert`` may hold the key too (then ``key`` is None). Dask's schedulers
    usually ask clients for a certificate signed by the same CA.
    """

    ca_file: str
    cert: str | None = None
    key: str | None = None

    def check(self) -> None:
        """Every file named exists and is readable (else :class:`SchedulerError`)."""
        if self.key and not self.cert:
            raise SchedulerError("a TLS key was given without its certificate; give "
                                 "--tls-cert too")
        for what, name in (("CA file", self.ca_file), ("certificate", self.cert),
                           ("key", self.key)):
            if name is None:
                continue
            if not os.path.isfile(name):
                raise SchedulerError(f"the TLS {what} {name} does not exist")
            if not os.access(name, os.R_OK):
                raise SchedulerError(f"the TLS {what} {name} cannot be read")

    def security(self) -> Any:
        """The matching ``distributed.security.Security`` (encryption required)."""
        from distributed.security import Security

        return Security(tls_ca_file=self.ca_file, tls_client_cert=self.cert,
                        tls_client_key=self.key, require_encryption=True)


def is_loopback(address: str) -> bool:
    """Whether the host of ``address`` is ``localhost`` or a loopback IP."""
    host = urlparse(address if "://" in address else f"tcp://{address}").hostname or ""
    if host == "localhost":
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return False


def is_plain_link(address: str) -> bool:
    """Whether ``address`` joins a remote scheduler unencrypted and unauthenticated.

    True for ``tcp://`` and ``ws://`` addresses and for bare ``host:port`` (Dask's
    default scheme is TCP) whose host is not loopback.
    """
    scheme = address.split("://", 1)[0].lower() if "://" in address else ""
    return scheme in ("", "tcp", "ws") and not is_loopback(address)


SCHEMES = ("tcp", "tls", "ws", "wss", "inproc", "ucx")


def _parse_address(text: str) -> str | None:
    """``text`` when it reads as a scheduler address ``[scheme://]host:port``, else None."""
    scheme, _, rest = text.rpartition("://")
    if scheme and scheme.lower() not in SCHEMES:
        return None
    try:
        parsed = urlparse(f"tcp://{rest}")
        port = parsed.port
    except ValueError:
        return None
    if not parsed.hostname or port is None or parsed.path not in ("", "/"):
        return None
    return text


def scheduler_address(scheduler: str, wait: float = 0.0) -> tuple[str, str]:
    """The address to join and where it came from (``"address"`` or the file's path).

    ``scheduler`` is a scheduler file when a file of that name exists or when it
    looks like a path (holds a path separator or ends in ``.json``) — then a
    missing file is reported as such rather than as a malformed address. A
    missing file is waited for up to ``wait`` seconds (a batch job may start the
    scheduler and the run together).

    Raises
    ------
    SchedulerError
        A missing, unreadable or malformed scheduler file; text that is neither a
        file nor an address.
    """
    path = Path(scheduler).expanduser()
    looks_like_file = (os.sep in scheduler or scheduler.endswith(".json")) \
        and "://" not in scheduler
    if path.is_file() or looks_like_file:
        deadline = time.monotonic() + wait
        while not path.is_file() and time.monotonic() < deadline:
            time.sleep(0.2)
        if not path.is_file():
            waited = f" after {wait:g} s" if wait else ""
            raise SchedulerError(f"the scheduler file {scheduler} does not exist{waited} (a "
                                 "running 'dask scheduler --scheduler-file FILE' writes it)")
        try:
            info = json.loads(path.read_text(encoding="utf-8"))
        except OSError as exc:
            raise SchedulerError(f"the scheduler file {scheduler} cannot be read "
                                 f"({exc.strerror or exc})") from exc
        except ValueError as exc:
            raise SchedulerError(f"the scheduler file {scheduler} is not the JSON file a "
                                 "Dask scheduler writes") from exc
        address = info.get("address") if isinstance(info, dict) else None
        if not isinstance(address, str) or _parse_address(address) is None:
            raise SchedulerError(f"the scheduler file {scheduler} holds no scheduler "
                                 "address")
        return address, str(path)
    if _parse_address(scheduler) is None:
        raise SchedulerError(f"--scheduler {scheduler}: neither a scheduler file nor an address "
                             "such as tcp://host:8786 or tls://host:8786")
    return scheduler, "address"


def check_target(scheduler: str | None, tls: TlsFiles | None) -> None:
    """Check ``--scheduler`` and the TLS files without connecting (fail before any work).

    A scheduler file that does not exist yet passes: :func:`dask_client` waits
    for it up to its time-out.
    """
    if tls is not None:
        tls.check()
    if not scheduler:
        return
    path = Path(scheduler).expanduser()
    if not path.is_file() and (os.sep in scheduler or scheduler.endswith(".json")) \
            and "://" not in scheduler:
        return
    address, _ = scheduler_address(scheduler)
    _security(address, tls)


def _security(address: str, tls: TlsFiles | None) -> Any:
    """Security settings for ``address`` (None: Dask's configuration as it stands)."""
    import dask

    tls_address = address.lower().startswith(("tls://", "wss://"))
    if tls is not None:
        if not tls_address:
            raise SchedulerError(f"TLS files were given but the scheduler address {address} "
                                 "is not a tls:// address")
        tls.check()
        return tls.security()
    if tls_address:
        if not dask.config.get("distributed.comm.tls.ca-file", None):
            raise SchedulerError(f"the scheduler {address} speaks TLS: give its CA file with "
                                 "--tls-ca-file (and usually --tls-cert and --tls-key)")
        from distributed.security import Security

        return Security(require_encryption=True)  # from Dask's configuration
    return None


def dashboard_link(client: Any, local: bool) -> str | None:
    """The scheduler's dashboard address when its page answers, else None.

    A scheduler always runs an HTTP server (health and metrics pages) but serves
    the dashboard only with bokeh installed there (otherwise its page is an
    install hint) and without ``--no-dashboard``; the page itself is asked for
    (3 s at most), so a link is printed only when it works from here.
    """
    import urllib.request

    if local and importlib.util.find_spec("bokeh") is None:
        return None
    try:
        if "dashboard" not in client.scheduler_info().get("services", {}):
            return None
        link = client.dashboard_link
        with urllib.request.urlopen(link, timeout=3) as page:
            # without bokeh the scheduler answers with an install hint instead
            served = page.status == 200 and b"for the dashboard" not in page.read(4096)
        return link if served else None
    except Exception:  # the link is a courtesy: never fail a run over it
        return None


@contextlib.contextmanager
def _children_ignore_sigint() -> Iterator[None]:
    """Start child processes with SIGINT ignored (they inherit it across exec).

    Ctrl-C in a terminal reaches every process of the foreground group: the
    local cluster's worker processes would each print a traceback. The client
    process alone handles it and shuts the cluster down.
    """
    try:
        previous = signal.signal(signal.SIGINT, signal.SIG_IGN)
    except ValueError:  # not the main thread
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)


def dask_setup(worker: Any) -> None:
    """Worker preload of the local cluster: ignore SIGINT (see :func:`_children_ignore_sigint`).

    Covers worker processes a nanny starts again later (after a worker died),
    when the client process no longer ignores SIGINT.
    """
    with contextlib.suppress(ValueError):  # not the main thread: nothing to do
        signal.signal(signal.SIGINT, signal.SIG_IGN)


def worker_environment() -> dict[str, Any]:
    """Environment of the local cluster's worker processes (set before they start).

    Dask's default (``distributed.nanny.pre-spawn-environ``) without
    ``MALLOC_TRIM_THRESHOLD_``: one BLAS thread per worker slot, glibc's own
    adaptive malloc thresholds (see :func:`dask_client`).
    """
    import dask

    default = dask.config.get("distributed.nanny.pre-spawn-environ", {}) or {}
    return {k: v for k, v in default.items() if k != "MALLOC_TRIM_THRESHOLD_"}


@contextlib.contextmanager
def dask_client(workers: int | None, scheduler: str | None, *,
                connect_timeout: float = CONNECT_TIMEOUT,
                tls: TlsFiles | None = None) -> Iterator[Any]:
    """A Client on a loopback LocalCluster, or on the cluster at ``scheduler``.

    Parameters
    ----------
    workers : int or None
        Worker processes of the local cluster (default: number of cores).
    scheduler : str or None
        Address or scheduler file of a cluster to join instead.
    connect_timeout : float
        How long to wait for a joined scheduler [s].
    tls : TlsFiles or None
        Client certificates for a ``tls://`` scheduler.

    Raises
    ------
    SchedulerError
        The scheduler cannot be found or reached (see :func:`scheduler_address`).
    """
    import dask
    from distributed import Client, LocalCluster

    if scheduler:
        address, source = scheduler_address(scheduler, wait=connect_timeout)
        security = _security(address, tls)
        if is_plain_link(address):
            origin = "" if source == "address" else f" (from the scheduler file {source})"
            log.warning("the link to %s%s is plain TCP: it is neither authenticated nor "
                        "encrypted. Prefer a tls:// address with certificates (--tls-ca-file, "
                        "--tls-cert, --tls-key) or an SSH tunnel to a loopback port.",
                        address, origin)
        try:
            client = Client(address, timeout=f"{connect_timeout}s", security=security)
        except (OSError, TimeoutError) as exc:
            text = str(exc).lower()
            if "ssl" in text or "certificate" in text:
                raise SchedulerError(f"the TLS handshake with the scheduler at {address} "
                                     "failed: check the CA file and the client certificate "
                                     "and key") from exc
            raise SchedulerError(f"could not reach the scheduler at {address} within "
                                 f"{connect_timeout:g} s. Check that the scheduler is running "
                                 "and the address is right (--connect-timeout sets the "
                                 "wait).") from exc
        with client:
            yield client
        return
    n = workers or os.cpu_count() or 1
    # loopback only, on a free port (the HTTP endpoints serve the dashboard when
    # bokeh is installed, and health/metrics pages otherwise); a task that kills
    # its worker ALLOWED_FAILURES + 1 times fails (Dask's default is 3); and a
    # worker that is being restarted by its nanny when the lost-worker check
    # fires (15 s by default) must not have its nanny closed for good, which
    # a task killing fresh workers in a row could otherwise do to every worker.
    # The workers keep glibc's own malloc tuning: Dask's nanny sets
    # MALLOC_TRIM_THRESHOLD_ (64 KiB) by default, which also fixes the mmap
    # threshold, so every large temporary array is mapped and faulted in afresh;
    # that made the coefficient and series kernels 1.7-2x slower on a worker than
    # in a plain process (benchmarks/bench_split.py; worker_environment)
    settings = {"distributed.scheduler.allowed-failures": ALLOWED_FAILURES,
                "distributed.deploy.lost-worker-timeout": "1h",
                "distributed.nanny.pre-spawn-environ": worker_environment()}
    with dask.config.set(settings):
        with _children_ignore_sigint():
            cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                                   host="127.0.0.1", dashboard_address="127.0.0.1:0",
                                   silence_logs=logging.CRITICAL,
                                   preload=["luxsweep.sweep.cluster"])
        with cluster, Client(cluster) as client:
            yield client


__all__ = [
    "ALLOWED_FAILURES", "CONNECT_TIMEOUT", "TlsFiles", "check_target", "dashboard_link",
    "dask_client", "dask_setup", "is_loopback", "is_plain_link", "scheduler_address",
    "worker_environment",
]
