"""Exposure: what the engine opens to the network, what it evaluates, where it writes
(issue 7, item 10).

All behavioural: sockets are inspected with psutil, study files carry real
payloads (a Python object tag that would run a command, code in values, an
alias bomb) and the tests look for the payload's side effect, and a full run
is checked to create files only inside its results store and cache.
"""

from __future__ import annotations

import os
import threading
import time
from pathlib import Path

import dask
import psutil
import pytest
import zarr
from conftest import (
    SEALED_ROOM,
    luxsweep_process,
    run_luxsweep,
    sealed_room_study,
    write_tiny_study,
)

from luxsweep.sweep.run import dask_client, run_study

# ------------------------------------------------------------------ the default cluster


def _listening(pid: int) -> list[str]:
    """Local addresses ``ip:port`` on which process ``pid`` listens (TCP)."""
    proc = psutil.Process(pid)
    conns = (getattr(proc, "net_connections", None) or proc.connections)(kind="inet")  # psutil<6
    return [f"{c.laddr.ip}:{c.laddr.port}" for c in conns if c.status == psutil.CONN_LISTEN]


@pytest.mark.slow
def test_default_cluster_listens_on_loopback_only():
    """The engine's default LocalCluster: the scheduler's and every worker's address
    is ``tcp://127.0.0.1:...``, and no process of the cluster (this process, which
    hosts the scheduler, the workers and their nannies) listens on anything but
    127.0.0.1 (no 0.0.0.0, no other interface)."""
    before = set(_listening(os.getpid()))
    with dask_client(2, None) as client:
        info = client.scheduler_info()
        assert info["address"].startswith("tcp://127.0.0.1:")
        assert len(info["workers"]) == 2
        for address, worker in info["workers"].items():
            assert address.startswith("tcp://127.0.0.1:"), address
            assert str(worker.get("nanny", "tcp://127.0.0.1")).startswith("tcp://127.0.0.1")
        worker_pids = set(client.run(os.getpid).values())
        nanny_pids = {psutil.Process(p).ppid() for p in worker_pids}
        sockets = {pid: _listening(pid) for pid in worker_pids | nanny_pids}
        sockets[os.getpid()] = [a for a in _listening(os.getpid()) if a not in before]
    print(f"listening sockets: {sockets}")
    assert sockets[os.getpid()], "the scheduler's socket was not found"
    for pid, addresses in sockets.items():
        for address in addresses:
            assert address.startswith("127.0.0.1:"), f"process {pid} listens on {address}"


# ------------------------------------------------------------------ joining a scheduler


def _stderr_until(proc, needle: str, seconds: float) -> str:
    """Collect the child's stderr until ``needle`` shows up, it exits or time is up."""
    lines: list[str] = []
    reader = threading.Thread(target=lambda: lines.extend(iter(proc.stderr.readline, "")),
                              daemon=True)
    reader.start()
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline and proc.poll() is None:
        if any(needle in line.lower() for line in lines):
            break
        time.sleep(0.05)
    proc.kill()
    proc.wait(timeout=30)
    reader.join(timeout=5)
    return "".join(lines)


@pytest.mark.parametrize(
    "address",
    ["tcp://192.0.2.10:8786", "192.0.2.10:8786", "tcp://dask-head.invalid:8786"],
    ids=["tcp-ip", "bare-ip", "tcp-hostname"],
)
def test_joining_a_remote_plain_tcp_scheduler_warns(tmp_path, address):
    """``--scheduler`` with a non-loopback plain-TCP address (explicit ``tcp://``, a
    bare ``host:port`` — Dask's default scheme is TCP — or a host name) prints a
    warning that the link is unauthenticated and points to TLS, before trying to
    connect. (192.0.2.0/24 is TEST-NET-1, RFC 5737: never routed; .invalid never
    resolves, RFC 2606.)"""
    study = write_tiny_study(tmp_path / "study")
    proc = luxsweep_process("run", study, "--out", tmp_path / "r.zarr", "--cache",
                            tmp_path / "cache", "--scheduler", address)
    err = _stderr_until(proc, "tls", 25).lower()
    assert "authenticated" in err and "tls" in err, f"no warning for {address}:\n{err}"


# ------------------------------------------------------------------ TLS


@pytest.mark.slow
def test_engine_joins_a_tls_cluster(tmp_path, caplog):
    """Smoke test: a LocalCluster secured with Dask's temporary TLS certificates
    (``Security.temporary()``), the engine joining it with the client certificates
    given in Dask's configuration. Asserts the run completes with every variant
    done and that no plain-TCP warning is issued for a TLS address."""
    from distributed import LocalCluster
    from distributed.security import Security

    security = Security.temporary()
    study = write_tiny_study(tmp_path / "study", orientations=(180.0,), transmittances=(0.6,))
    client_tls = {
        "distributed.comm.tls.ca-file": security.tls_ca_file,
        "distributed.comm.tls.client.cert": security.tls_client_cert,
        "distributed.comm.tls.client.key": security.tls_client_key,
        "distributed.comm.require-encryption": True,
    }
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=True, host="127.0.0.1",
                      protocol="tls://", security=security, dashboard_address=None) as cluster:
        assert cluster.scheduler_address.startswith("tls://127.0.0.1:")
        with dask.config.set(client_tls):
            summary = run_study(study, tmp_path / "r.zarr", scheduler=cluster.scheduler_address,
                                cache_dir=tmp_path / "cache", show_progress=False)
    assert summary.ok and summary.written == 2
    assert zarr.open_group(str(tmp_path / "r.zarr"), mode="r")["done"][:].all()
    assert "authenticated" not in caplog.text


# ------------------------------------------------------------------ YAML and evaluation

TAGS = {  # place -> (line replaced, or None to append; the line with the tag)
    "apply-at-top": ("name: tiny-fault-study",
                     'name: !!python/object/apply:os.system ["touch {m}"]'),
    "new-in-room": ("  width: 3.0", '  width: !!python/object/new:os.system ["touch {m}"]'),
    "apply-in-vary": ("  orientation: [90.0, 180.0]",
                      '  orientation: !!python/object/apply:os.system ["touch {m}"]'),
    "name-tag": ("  coastal: climates/coastal.csv", "  coastal: !!python/name:os.system"),
    "subprocess": (None, 'notes: !!python/object/apply:subprocess.check_call [["touch", "{m}"]]'),
}


@pytest.mark.parametrize("where", sorted(TAGS))
def test_python_tags_are_refused(tmp_path, cli, where):
    """A study file with a Python object tag (which an unsafe YAML loader would
    execute) is refused by ``check`` and ``run`` with exit status 2, the message
    names the file and the tag's line, and the command was not run."""
    marker = tmp_path / "tag-was-run"
    study = write_tiny_study(tmp_path / "study")
    old, tagged = TAGS[where]
    tagged = tagged.format(m=marker)
    text = study.read_text()
    if old is None:
        text += tagged + "\n"
    else:
        assert old in text
        text = text.replace(old, tagged, 1)
    study.write_text(text)
    line = next(k for k, ln in enumerate(text.splitlines(), 1) if "!!python" in ln)
    for command in (("check", study), ("run", study, "--cache", tmp_path / "c")):
        result = cli(*command)
        assert result.code == 2, result.err
        assert "study.yaml" in result.err and f"line {line}" in result.err, result.err
        assert "Traceback" not in result.text
    assert not marker.exists()


CODE = "__import__('os').system('touch {m}')"
CODE_PLACES = {
    "room.width": ("  width: 3.0", '  width: "{c}"'),
    "vary value": ("  glazings.main.transmittance: [0.7, 0.4]",
                   '  glazings.main.transmittance: [0.7, "{c}"]'),
    "vary path": ("  glazings.main.transmittance: [0.7, 0.4]",
                  '  glazings.main.transmittance: [0.7, 0.4]\n  "{c}": [1, 2]'),
    "occupancy.start": ('start: "08:00"', "start: \"{c}\""),
    "compute.seed": ('"seed": 0', '"seed": "{c}"'),
    "exclude value": ("vary:\n", 'exclude:\n  - {{orientation: "{c}"}}\nvary:\n'),
    "rank metric": ("vary:\n", 'rank: {{require: [{{metric: "{c}", at_least: 1}}]}}\nvary:\n'),
    "glazing name": ("glazing: main}", 'glazing: "{c}"}}'),
}


@pytest.mark.parametrize("place", sorted(CODE_PLACES))
def test_code_in_values_stays_a_string_and_is_rejected(tmp_path, cli, place):
    """Python code written as a value (or a vary path) is never evaluated: ``check``
    and ``run`` refuse it with exit status 2 naming the file, and the code's side
    effect (creating a file) never happens."""
    marker = tmp_path / "code-was-run"
    study = write_tiny_study(tmp_path / "study")
    old, new = CODE_PLACES[place]
    text = study.read_text()
    assert old in text
    code = CODE.format(m=marker)
    study.write_text(text.replace(old, new.format(c=code), 1))
    for command in (("check", study), ("run", study, "--cache", tmp_path / "c")):
        result = cli(*command)
        assert result.code == 2, f"{place}: exit {result.code}\n{result.err}"
        assert "study.yaml" in result.err and "Traceback" not in result.text
    assert not marker.exists()
    assert not (study.parent / "tiny-fault-study.zarr").exists()


def _alias_bomb(depth: int) -> str:
    """YAML of a few hundred bytes whose aliases expand to 10**(depth+1) strings."""
    lines = ["notes:", "  a0: &a0 [x, x, x, x, x, x, x, x, x, x]"]
    for i in range(1, depth + 1):
        lines.append(f"  a{i}: &a{i} [" + ", ".join([f"*a{i - 1}"] * 10) + "]")
    return "\n".join(lines) + "\n"


@pytest.mark.slow
def test_alias_bomb_is_refused_quickly(tmp_path):
    """A 'billion laughs' style study file (anchors and aliases nesting ten-fold,
    here to a million strings from ~450 bytes; one level more takes ~10 GB) is
    refused without expanding it: exit status 2 within 10 s, with a message
    naming the file and the aliases. (Safe loading stops code execution, not
    alias expansion.)"""
    study = write_tiny_study(tmp_path / "study")
    study.write_text(study.read_text() + _alias_bomb(5))
    result = run_luxsweep("check", study, timeout=120)
    print(f"alias bomb: exit {result.code} after {result.seconds:.1f} s")
    assert result.code == 2, result.err
    assert "study.yaml" in result.err
    assert "alias" in result.err.lower() or "anchor" in result.err.lower(), result.err[:500]
    assert result.seconds < 10


# ------------------------------------------------------------------ where files go


def _tree(root: Path) -> set[str]:
    return {str(p.relative_to(root)) for p in root.rglob("*")}


@pytest.mark.slow
def test_run_writes_only_inside_its_results_and_cache(tmp_path):
    """A full run with the default locations (CONTRACT.md §2): every file created
    under the study's parent folder lies inside ``<study folder>/<name>.zarr`` or
    ``<study folder>/.luxsweep-cache``; nothing is written beside them."""
    study = write_tiny_study(tmp_path / "project" / "study", orientations=(90.0,),
                             transmittances=(0.5,))
    before = _tree(tmp_path)
    result = run_luxsweep("run", study, "--workers", "1", cwd=study.parent, timeout=300)
    assert result.code == 0, result.err
    created = _tree(tmp_path) - before
    allowed = ("project/study/tiny-fault-study.zarr", "project/study/.luxsweep-cache")
    stray = sorted(p for p in created if not p.startswith(allowed))
    assert created and not stray, f"files outside the results store and cache: {stray[:10]}"


@pytest.mark.parametrize("name", ["../outside", "a/../../outside", "/tmp/outside", ".."])
def test_study_name_cannot_place_results_outside(tmp_path, cli, name):
    """A study ``name`` that is a path cannot move the default results store out of
    the study folder: ``run`` refuses it (exit 2, naming the key) and creates
    nothing outside the study folder."""
    study = write_tiny_study(tmp_path / "project" / "study")
    study.write_text(study.read_text().replace("name: tiny-fault-study", f'name: "{name}"'))
    before = _tree(tmp_path)
    result = cli("run", study, "--workers", "1")
    assert result.code == 2, result.err
    assert "name" in result.err
    assert _tree(tmp_path) == before


@pytest.mark.slow
def test_path_like_variant_labels_do_not_become_paths(tmp_path):
    """A sweep over mesh files whose values are relative paths climbing out of the
    study folder (``../elsewhere/room.obj``) gives variant labels holding ``..``
    and ``/``; a full run still creates files only inside its results store and
    cache, and the labels are stored as plain text."""
    project = tmp_path / "project"
    study = write_tiny_study(project / "study")
    (project / "study" / "room.obj").write_text(SEALED_ROOM)
    (project / "elsewhere").mkdir()
    (project / "elsewhere" / "room.obj").write_text(SEALED_ROOM.replace("v 2 1.5 2", "v 2 1.5 2.2"))
    study.write_text(sealed_room_study("label-paths", "{mesh: [room.obj, ../elsewhere/room.obj]}"))
    before = _tree(tmp_path)
    result = run_luxsweep("run", study, "--workers", "1", cwd=study.parent, timeout=300)
    assert result.code == 0, result.err
    labels = [str(v) for v in zarr.open_group(str(study.parent / "label-paths.zarr"),
                                                mode="r")["label"][...]]
    assert any(".." in label and "/" in label for label in labels), labels
    created = _tree(tmp_path) - before
    allowed = ("project/study/label-paths.zarr", "project/study/.luxsweep-cache")
    stray = sorted(p for p in created if not p.startswith(allowed))
    assert not stray, f"files outside the results store and cache: {stray[:10]}"
