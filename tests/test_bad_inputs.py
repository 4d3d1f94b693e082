"""Every case of the bad-input corpus is refused cleanly before any cluster starts.

The corpus (``tests/bad_inputs/``, see its README) holds one folder per real
mistake in a study file, weather file or geometry. CONTRACT.md §2: bad input is
exit status 2 with one message on stderr naming the file, the place and what to
do, no traceback unless ``--debug``. Issue 7 adds: before any cluster starts,
and with no results store left behind.
"""

from __future__ import annotations

import contextlib
import importlib.util
import re
import shutil
import time
from pathlib import Path

import psutil
import pytest
import yaml
from conftest import (
    TMY3_GREENSBORO,
    TMY3_SAND_POINT,
    CliResult,
    luxsweep_process,
    run_luxsweep,
)

CORPUS = Path(__file__).parent / "bad_inputs"
CASES = sorted(p.name for p in CORPUS.iterdir() if p.is_dir() and p.name[0].isdigit())
VALID = ("_valid", "_valid_mesh", "_valid_sensors", "_valid_spaces")


def _mangle():
    spec = importlib.util.spec_from_file_location("bad_inputs_mangle", CORPUS / "mangle.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


MANGLE = _mangle()


def prepare(name: str, tmp_path: Path) -> tuple[Path, dict]:
    """Copy a case to ``tmp_path``, write its weather files; return (study path, case spec)."""
    target = tmp_path / name
    shutil.copytree(CORPUS / name, target)
    spec = yaml.safe_load((target / "case.yaml").read_text())
    (target / "climates").mkdir(exist_ok=True)
    for label, source in (("coastal", TMY3_GREENSBORO), ("inland", TMY3_SAND_POINT)):
        if f"climates/{label}.csv" not in (spec.get("files") or {}):
            shutil.copyfile(source, target / "climates" / f"{label}.csv")
    MANGLE.build(target, spec.get("files") or {})
    return target / spec.get("study", "study.yaml"), spec


def _contains(message: str, fragment: str) -> bool:
    """Case-insensitive; a fragment starting/ending with a digit must not touch another."""
    pattern = re.escape(fragment.lower())
    if fragment[:1].isdigit():
        pattern = r"(?<!\d)" + pattern
    if fragment[-1:].isdigit():
        pattern += r"(?!\d)"
    return re.search(pattern, message.lower()) is not None


def missing_fragments(message: str, expect: list) -> list:
    """The expected fragments (or groups of alternatives) not found in ``message``."""
    missing = []
    for item in expect:
        options = item if isinstance(item, list) else [item]
        if not any(_contains(message, str(o)) for o in options):
            missing.append(item)
    return missing


def assert_clean_refusal(result, spec: dict, what: str) -> None:
    """Exit 2, all expected fragments on stderr, no traceback anywhere."""
    assert result.code == 2, (
        f"{what}: exit status {result.code}, expected 2 (bad input)\n"
        f"stdout:\n{result.out}\nstderr:\n{result.err}"
    )
    assert "Traceback" not in result.text, f"{what}: traceback shown without --debug:\n{result.err}"
    assert result.err.strip(), f"{what}: no message on stderr (stdout: {result.out!r})"
    missing = missing_fragments(result.err, spec["expect"])
    assert not missing, (
        f"{what}: the message lacks {missing} (mistake: {spec['mistake']})\nstderr:\n{result.err}"
    )
    wrong = [f for f in spec.get("absent", []) if _contains(result.err, str(f))]
    assert not wrong, f"{what}: the message should not say {wrong}\nstderr:\n{result.err}"


def test_corpus_is_large_enough_and_described():
    """The corpus has at least 40 cases, each stating its mistake and what the message
    must name (at least the file)."""
    assert len(CASES) >= 40
    for name in CASES:
        spec = yaml.safe_load((CORPUS / name / "case.yaml").read_text())
        assert spec["mistake"].strip(), name
        assert spec["expect"], f"{name}: no expected message fragments"


@pytest.mark.parametrize("name", VALID)
def test_valid_baselines_pass_check(name, tmp_path, cli):
    """The studies the cases are variations of are valid (exit 0), so each case's
    refusal is caused by its own mistake."""
    study, _ = prepare(name, tmp_path)
    result = cli("check", study)
    assert result.code == 0, f"{name}: {result.err}"


@pytest.mark.parametrize("name", CASES)
def test_bad_input_is_refused_before_any_cluster(
    name, tmp_path, cli, sentinel_scheduler, short_dask_timeouts, monkeypatch
):
    """Asserts for ``check`` and for ``run --scheduler <listening socket>``: exit 2,
    the message names the file and place given in ``case.yaml``, no traceback, no
    connection made to the scheduler address, no results store created, and no
    file created by code hidden in the input."""
    study, spec = prepare(name, tmp_path)
    monkeypatch.chdir(study.parent)  # where a hidden `touch` would write

    if spec.get("check") == "pass":  # the mistake is in the run's options, not the study
        result = cli("check", study)
        assert result.code == 0, f"{name}: luxsweep check: {result.err}"
    else:
        assert_clean_refusal(cli("check", study), spec, f"{name}: luxsweep check")

    out = tmp_path / "results.zarr"
    options = {"out": out, "cache": tmp_path / "cache", **(spec.get("options") or {})}
    result = cli(
        "run", study, "--out", options["out"], "--cache", options["cache"], "--workers", "1",
        "--scheduler", sentinel_scheduler.address,
    )
    assert_clean_refusal(result, spec, f"{name}: luxsweep run")
    assert sentinel_scheduler.connections == [], f"{name}: run connected to a scheduler"
    assert not out.exists(), f"{name}: a results store was created for a refused study"
    for leftover in spec.get("must_not_create", []):
        assert not (study.parent / leftover).exists(), f"{name}: input was executed"


# One case per family, run as a real process with the default local cluster: the
# process must not start worker processes (polled with psutil) and must return
# exit status 2 itself.
PROCESS_CASES = [
    "01-study-unknown-top-level-key",
    "28-yaml-python-object-tag",
    "44-window-wider-than-wall",
    "55-grid-spacing-tiny",
    "62-tmy3-negative-dni",
    "78-mesh-group-without-material",
]


@pytest.mark.parametrize("name", PROCESS_CASES)
def test_bad_input_process_starts_no_workers(name, tmp_path):
    """Asserts, for ``luxsweep run`` as a child process with the default local
    cluster: exit status 2, the expected message, no traceback, and no worker
    process ever appears (a LocalCluster spawns them with multiprocessing)."""
    assert name in CASES
    study, spec = prepare(name, tmp_path)
    out = tmp_path / "results.zarr"
    proc = luxsweep_process("run", study, "--out", out, "--cache", tmp_path / "cache",
                            "--workers", "2", cwd=study.parent)
    watcher = psutil.Process(proc.pid)
    children: dict[int, str] = {}
    deadline = time.monotonic() + 60
    while proc.poll() is None and time.monotonic() < deadline:
        try:
            for child in watcher.children(recursive=True):
                with contextlib.suppress(psutil.Error):
                    children[child.pid] = " ".join(child.cmdline())
        except psutil.NoSuchProcess:
            break
        time.sleep(0.02)
    if proc.poll() is None:
        proc.kill()
    stdout, stderr = proc.communicate()
    assert_clean_refusal(CliResult(proc.returncode, stdout, stderr), spec, f"{name} (process)")
    # Dask's nanny starts workers with multiprocessing (spawn/forkserver); short
    # helper processes (e.g. a library probing with `ldconfig`) are not workers.
    workers = {pid: cmd for pid, cmd in children.items()
               if any(k in cmd for k in ("multiprocessing", "spawn_main", "forkserver", "dask"))}
    assert not workers, f"{name}: worker processes were started: {workers}"
    assert not out.exists()


def test_debug_flag_shows_the_traceback(tmp_path):
    """``--debug`` is the one way to get a traceback for bad input (CONTRACT.md §2);
    asserts a failing exit status and a printed traceback."""
    study, _ = prepare("44-window-wider-than-wall", tmp_path)
    result = run_luxsweep("--debug", "check", study, cwd=study.parent)
    assert result.code != 0, result.err
    assert "Traceback" in result.err
