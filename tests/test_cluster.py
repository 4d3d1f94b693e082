"""Joining a cluster, TLS, progress in a log and Ctrl-C, on real ``dask scheduler`` and
``dask worker`` processes bound to loopback (and the CLI as a child process).

Certificates come from ``distributed.security.Security.temporary()`` (one
self-signed key and certificate for every role), written to PEM files as the
``dask`` command line and ``luxsweep run --tls-*`` expect them.
"""

from __future__ import annotations

import io
import json
import os
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
from conftest import luxsweep_process, run_luxsweep, write_tiny_study

from luxsweep.sweep.cluster import TlsFiles, check_target, scheduler_address
from luxsweep.sweep.errors import SchedulerError
from luxsweep.sweep.progress import Progress

DASK = Path(sys.executable).with_name("dask")


def _tls_files(folder: Path) -> dict[str, Path]:
    from distributed.security import Security

    sec = Security.temporary()
    folder.mkdir(parents=True, exist_ok=True)
    files = {"ca": folder / "ca.pem", "cert": folder / "cert.pem", "key": folder / "key.pem"}
    files["ca"].write_text(sec.tls_ca_file)
    files["cert"].write_text(sec.tls_client_cert)
    files["key"].write_text(sec.tls_client_key)
    return files


@contextmanager
def dask_cluster(folder: Path, tls: dict[str, Path] | None = None,
                 dashboard: bool = False) -> Iterator[Path]:
    """``dask scheduler`` and one ``dask worker --nthreads 1`` as processes on loopback;
    yields the scheduler file once the worker has joined."""
    sched_file = folder / "scheduler.json"
    sec: list[str] = []
    if tls:
        sec = ["--tls-ca-file", str(tls["ca"]), "--tls-cert", str(tls["cert"]),
               "--tls-key", str(tls["key"])]
    env = {**os.environ, "DASK_DISTRIBUTED__WORKER__DAEMON": "True"}
    scheduler = subprocess.Popen(
        [str(DASK), "scheduler", "--scheduler-file", str(sched_file), "--host", "127.0.0.1",
         "--port", "0", *(["--dashboard-address", "127.0.0.1:0"] if dashboard else
                          ["--no-dashboard"]),
         *(["--protocol", "tls"] if tls else []), *sec],
        stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env, start_new_session=True)
    procs = [scheduler]
    try:
        deadline = time.monotonic() + 60
        while not sched_file.is_file() and time.monotonic() < deadline:
            time.sleep(0.1)
        assert sched_file.is_file(), "the scheduler did not start"
        worker = subprocess.Popen(
            [str(DASK), "worker", "--scheduler-file", str(sched_file), "--nthreads", "1",
             "--nworkers", "1", "--host", "127.0.0.1", "--no-dashboard", *sec],
            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True, env=env,
            start_new_session=True)
        procs.append(worker)
        lines: list[str] = []
        threading.Thread(target=lambda: lines.extend(iter(worker.stderr.readline, "")),
                         daemon=True).start()
        while time.monotonic() < deadline and not any("Registered to" in x for x in lines):
            assert worker.poll() is None, "".join(lines)
            time.sleep(0.1)
        assert any("Registered to" in x for x in lines), "the worker did not join"
        yield sched_file
    finally:
        for proc in reversed(procs):
            with_group = proc.pid
            try:
                os.killpg(with_group, signal.SIGTERM)
            except ProcessLookupError:
                pass
            try:
                proc.wait(timeout=20)
            except subprocess.TimeoutExpired:
                os.killpg(with_group, signal.SIGKILL)
                proc.wait(timeout=10)


def _done(store: Path) -> np.ndarray:
    return np.asarray(zarr.open_group(str(store), mode="r")["done"][:], dtype=bool)


# ------------------------------------------------------------------ without a cluster


def test_scheduler_text_is_read_as_a_file_or_an_address(tmp_path):
    """A path-like name is a scheduler file (missing: said so, not "missing port");
    a file's address is returned with the file named as its source; text that is
    neither is refused in one sentence."""
    with pytest.raises(SchedulerError, match=r"scheduler file .* does not exist"):
        scheduler_address(str(tmp_path / "sched.json"))
    with pytest.raises(SchedulerError, match="does not exist"):
        scheduler_address("sched.json")
    good = tmp_path / "good.json"
    good.write_text(json.dumps({"address": "tls://127.0.0.1:8786", "type": "Scheduler"}))
    assert scheduler_address(str(good)) == ("tls://127.0.0.1:8786", str(good))
    bad = tmp_path / "bad.json"
    bad.write_text("not json")
    with pytest.raises(SchedulerError, match="not the JSON file"):
        scheduler_address(str(bad))
    bad.write_text(json.dumps({"type": "Scheduler"}))
    with pytest.raises(SchedulerError, match="holds no scheduler address"):
        scheduler_address(str(bad))
    assert scheduler_address("tcp://10.0.0.2:8786") == ("tcp://10.0.0.2:8786", "address")
    assert scheduler_address("head-node:8786")[0] == "head-node:8786"
    for text in ("head-node", "http://head-node:8786", "tcp://head-node:port"):
        with pytest.raises(SchedulerError, match="neither a scheduler file nor an address"):
            scheduler_address(text)


def test_tls_settings_are_checked_before_any_work(tmp_path):
    """TLS files that do not exist, a key without its certificate, TLS files for a
    plain address, and a tls:// address with no CA at all are each refused."""
    files = _tls_files(tmp_path)
    with pytest.raises(SchedulerError, match=r"CA file .* does not exist"):
        check_target("tls://127.0.0.1:8786", TlsFiles(str(tmp_path / "none.pem")))
    with pytest.raises(SchedulerError, match="without its certificate"):
        check_target("tls://127.0.0.1:8786", TlsFiles(str(files["ca"]), None, str(files["key"])))
    with pytest.raises(SchedulerError, match="not a tls:// address"):
        check_target("tcp://127.0.0.1:8786", TlsFiles(str(files["ca"])))
    with pytest.raises(SchedulerError, match="speaks TLS"):
        check_target("tls://127.0.0.1:8786", None)
    check_target("tls://127.0.0.1:8786", TlsFiles(*(str(files[k]) for k in ("ca", "cert", "key"))))


def test_plain_progress_lines_count_and_estimate():
    """The plain line: done/total, percentage, rate and time left from the rate
    (here 3 variants in about 1 s: 9 left at about 3/s is about 3 s); a line at
    each interval while nothing finishes, and a last line at the end."""
    stream = io.StringIO()
    with Progress(2, 12, stream=stream, every=0.2, terminal=False) as progress:
        time.sleep(0.5)
        progress.set_done()
        progress._t0 = time.perf_counter() - 1.0  # a known elapsed time for the estimate
        progress.variants_done(3)
        line = progress.line()
    lines = stream.getvalue().splitlines()
    assert line.startswith("progress: coefficient sets 1/2, variants 3/12 (25 %), ")
    rate = float(line.split(", ")[2].split()[0])
    assert 2.5 < rate <= 3.0
    assert "3 s left" in line or "4 s left" in line, line
    assert len(lines) >= 3  # first line, at least one paced line, the last line
    assert "time left not known yet" in lines[0]
    assert lines[-1].startswith("progress: coefficient sets 1/2, variants 3/12")


# ------------------------------------------------------------------ connection errors


def test_missing_scheduler_file_is_exit_2_and_leaves_no_store(tmp_path):
    study = write_tiny_study(tmp_path / "study")
    res = run_luxsweep("run", study, "--out", tmp_path / "r.zarr", "--cache", tmp_path / "c",
                       "--scheduler", tmp_path / "nowhere" / "sched.json",
                       "--connect-timeout", "1")
    assert res.code == 2, res.text
    assert "scheduler file" in res.err and "does not exist" in res.err
    assert "Error:" not in res.err and "Traceback" not in res.err
    assert not (tmp_path / "r.zarr").exists() and not (tmp_path / "c").exists()


def test_unreachable_scheduler_is_exit_2_within_the_time_out(tmp_path):
    """A loopback port nobody listens on, and a scheduler file naming a remote
    plain-TCP address (TEST-NET-1, RFC 5737: never routed): exit 2 with a plain
    sentence, the plain-TCP warning also for the file's address, no store."""
    import socket

    study = write_tiny_study(tmp_path / "study")
    with socket.socket() as s:  # a free port, closed again
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    sched = tmp_path / "sched.json"
    sched.write_text(json.dumps({"address": "tcp://192.0.2.10:8786"}))
    for target in (f"tcp://127.0.0.1:{port}", sched):
        proc = luxsweep_process("run", study, "--out", tmp_path / "r.zarr", "--cache",
                                tmp_path / "c", "--scheduler", target, "--connect-timeout", "2")
        _, err = proc.communicate(timeout=120)
        assert proc.returncode == 2, err
        assert "could not reach the scheduler" in err and "within 2 s" in err, err
        assert "OSError" not in err and "Traceback" not in err
        assert not (tmp_path / "r.zarr").exists()
        if target == sched:
            assert "plain TCP" in err and str(sched) in err, err


def test_connect_time_out_is_kept(tmp_path):
    """The wait for an address that never answers is the time-out given (the study
    is validated first; the time from the validation's end is measured)."""
    from luxsweep.sweep.cluster import dask_client

    t0 = time.monotonic()
    with pytest.raises(SchedulerError, match=r"within 1\.5 s"), \
            dask_client(None, "tcp://192.0.2.10:8786", connect_timeout=1.5):
        pass
    waited = time.monotonic() - t0
    assert 1.4 < waited < 6.0, waited


# ------------------------------------------------------------------ real clusters


@pytest.mark.slow
def test_tls_cluster_runs_and_logs_progress(tmp_path):
    """A TLS scheduler and worker (processes): ``run --scheduler FILE --tls-*`` with
    stderr redirected completes every variant, prints paced plain progress lines
    and no plain-TCP warning; without the TLS options it stops with exit 2 and
    no store; certificates from another CA fail the handshake with a plain sentence."""
    from luxsweep.sweep.cluster import dask_client

    files = _tls_files(tmp_path / "tls")
    other = _tls_files(tmp_path / "other")
    study = write_tiny_study(tmp_path / "study", orientations=(180.0,), transmittances=(0.6,))
    with dask_cluster(tmp_path, files) as sched:
        assert json.loads(sched.read_text())["address"].startswith("tls://127.0.0.1:")
        with pytest.raises(SchedulerError, match=r"TLS handshake .* failed"), \
                dask_client(None, str(sched), connect_timeout=5,
                            tls=TlsFiles(*(str(other[k]) for k in ("ca", "cert", "key")))):
            pass
        res = run_luxsweep("run", study, "--out", tmp_path / "plain.zarr", "--cache",
                           tmp_path / "cache", "--scheduler", sched, "--connect-timeout", "2")
        assert res.code == 2 and "--tls-ca-file" in res.err, res.text
        assert not (tmp_path / "plain.zarr").exists()
        res = run_luxsweep("run", study, "--out", tmp_path / "r.zarr", "--cache",
                           tmp_path / "cache", "--scheduler", sched, "--tls-ca-file",
                           files["ca"], "--tls-cert", files["cert"], "--tls-key", files["key"],
                           "--progress-every", "0.5", timeout=180)
    print(res.err)
    assert res.code == 0, res.text
    assert _done(tmp_path / "r.zarr").all()
    lines = [x for x in res.err.splitlines() if x.startswith("progress: ")]
    assert len(lines) >= 2, res.err
    assert lines[-1].startswith("progress: coefficient sets 1/1, variants 2/2 (100 %)")
    assert "plain TCP" not in res.err
    assert "dashboard:" not in res.err  # the scheduler ran with --no-dashboard


@pytest.mark.slow
def test_ctrl_c_prints_one_line_and_a_rerun_resumes(tmp_path):
    """SIGINT to the CLI's whole process group (as Ctrl-C in a terminal sends it,
    workers of the local cluster included) once work is under way: exit 130, one
    line and no traceback from any process; the same command again completes."""
    # eight coefficient sets: the run lasts several seconds, so the interrupt lands
    # while work is under way however fast the machine (a run of one set ended
    # within the second the test waited; one of four, within 3 s)
    study = write_tiny_study(tmp_path / "study",
                             widths=(1.0, 1.2, 1.4, 1.6, 1.8, 2.0, 2.2, 2.4))
    argv = ("run", study, "--out", tmp_path / "r.zarr", "--cache", tmp_path / "cache",
            "--workers", "2", "--progress-every", "0.5")
    proc = luxsweep_process(*argv, new_session=True)
    lines: list[str] = []
    reader = threading.Thread(target=lambda: lines.extend(iter(proc.stderr.readline, "")),
                              daemon=True)
    reader.start()
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline and not any(x.startswith("progress:") for x in lines):
        assert proc.poll() is None, "".join(lines)
        time.sleep(0.05)
    time.sleep(1.0)
    assert proc.poll() is None, "the run ended before the interrupt: " + "".join(lines)
    os.killpg(proc.pid, signal.SIGINT)
    proc.wait(timeout=60)
    reader.join(timeout=10)
    err = "".join(lines)
    print(err)
    assert proc.returncode == 130, err
    assert "Traceback" not in err and "KeyboardInterrupt" not in err, err
    rest = [x for x in err.splitlines() if not x.startswith(("progress:", "warning:", "INFO:"))]
    assert rest == ["interrupted; run the same command again to resume"], rest
    again = run_luxsweep(*argv, timeout=180)
    assert again.code == 0, again.text
    assert _done(tmp_path / "r.zarr").all()


@pytest.mark.slow
def test_dashboard_link_is_printed_when_the_scheduler_serves_one(tmp_path):
    """With bokeh (the ``dashboard`` extra) the local cluster's scheduler and a
    ``dask scheduler`` process serve the dashboard: the link is found, and it
    answers over HTTP."""
    pytest.importorskip("bokeh")
    import re
    import urllib.request

    from luxsweep.sweep.cluster import dashboard_link, dask_client

    with dask_client(1, None) as client:
        link = dashboard_link(client, local=True)
        assert link and re.match(r"http://127\.0\.0\.1:\d+/status", link), link
        with urllib.request.urlopen(link, timeout=30) as page:
            assert page.status == 200
    with dask_cluster(tmp_path, dashboard=True) as sched, \
            dask_client(None, str(sched), connect_timeout=10) as client:
        link = dashboard_link(client, local=False)
        assert link and re.match(r"http://127\.0\.0\.1:\d+/status", link), link


def test_paths_go_to_workers_as_given(tmp_path):
    """A study folder, results store and cache reached through a symbolic link keep
    the link's name (absolute, not resolved): a share mounted under that name on
    the workers is found there."""
    from luxsweep.sweep.run import prepare

    real = tmp_path / "real"
    write_tiny_study(real / "study")
    link = tmp_path / "share"
    link.symlink_to(real, target_is_directory=True)
    plan, results, cache, done = prepare(link / "study" / "study.yaml", link / "r.zarr",
                                         link / "cache")
    assert done is None
    assert results == link / "r.zarr" and cache.root == link / "cache"
    assert plan.loaded.path == link / "study" / "study.yaml"
    for path in plan.loaded.study.climates.values():
        assert str(path).startswith(str(link / "study")), path
    assert all(str(t.climate_file).startswith(str(link)) for t in plan.tasks)


def test_local_workers_keep_glibcs_malloc_tuning_and_one_blas_thread():
    # Dask's nanny sets MALLOC_TRIM_THRESHOLD_ by default, which fixes glibc's mmap
    # threshold and made every kernel 1.7-2x slower on a worker (benchmarks/bench_split.py);
    # the local cluster leaves it out and keeps the one-BLAS-thread settings
    from luxsweep.sweep.cluster import dask_client

    def env():
        return {k: os.environ.get(k) for k in ("MALLOC_TRIM_THRESHOLD_", "OMP_NUM_THREADS",
                                                "OPENBLAS_NUM_THREADS")}

    with dask_client(1, None) as client:
        (seen,) = client.run(env).values()
    assert seen == {"MALLOC_TRIM_THRESHOLD_": None, "OMP_NUM_THREADS": "1",
                    "OPENBLAS_NUM_THREADS": "1"}
