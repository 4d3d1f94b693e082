"""``luxsweep demo``: the bundled demo study, end to end.

Copies ``configs/demo.yaml`` (package data) and the two real TMY3 years bundled
with pvlib (``723170TYA.CSV``, ``703165TY.csv``) into the output folder, runs the
study on a local cluster, then prints the ranking (writing ``ranking.csv``) and
writes ``report.html`` when those commands are available. The project in the
demo study is invented; the weather is real.
"""

from __future__ import annotations

import hashlib
import importlib.resources
import shutil
import time
from pathlib import Path

import pvlib

from luxsweep.sweep.errors import UserInputError

__all__ = [
    "DEMO_CLIMATES",
    "demo_text",
    "run_demo",
    "write_demo",
]

DEMO_CLIMATES = ("723170TYA.CSV", "703165TY.csv")
WRITTEN_RECORD = ".luxsweep-demo-study.sha256"
"""Beside the demo study: the hash of the text luxsweep last wrote there, so a rerun
can tell a study the user edited (kept) from an earlier version's demo (replaced)."""


def demo_text() -> str:
    """The demo study file's text (package data of ``luxsweep.configs``)."""
    demo = importlib.resources.files("luxsweep.configs").joinpath("demo.yaml")
    return demo.read_text(encoding="utf-8")


def write_demo(out: str | Path) -> Path:
    """Write the demo study and its climates into ``out``; return the study file."""
    folder = Path(out).expanduser().resolve()
    if folder.exists() and not folder.is_dir():
        raise UserInputError(f"--out {out}: exists and is not a folder; choose another path")
    (folder / "climates").mkdir(parents=True, exist_ok=True)
    data = Path(pvlib.__file__).parent / "data"
    for name in DEMO_CLIMATES:
        target = folder / "climates" / name
        if not target.exists():
            shutil.copyfile(data / name, target)
    study = folder / "study.yaml"
    text = demo_text()
    record = folder / WRITTEN_RECORD
    if study.exists():
        current = study.read_text(encoding="utf-8")
        if current == text:
            return study
        ours = record.exists() and record.read_text().strip() == _sha256(current)
        if not ours:  # the user edited it: never overwrite their work
            print(f"{study} differs from the bundled demo study (edited?); running it as "
                  "it is. Delete it, or give another --out, to run the bundled demo.")
            return study
        print(f"{study} is an earlier version's demo study; replaced by this version's")
    study.write_text(text, encoding="utf-8")
    record.write_text(_sha256(text) + "\n")
    return study


def _sha256(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def run_demo(out: str | Path = "luxsweep-demo", *, workers: int | None = None) -> int:
    """Run the demo; returns the exit status."""
    from luxsweep.sweep.cli import _optional_command
    from luxsweep.sweep.run import format_summary, run_study, terminate_as_interrupt

    study = write_demo(out)
    print(f"demo study written to {study}")
    t0 = time.perf_counter()
    with terminate_as_interrupt():
        summary = run_study(study, None, workers=workers)
    print(format_summary(summary))
    if summary.written:  # a rerun that finds every variant done computes none
        print(f"{summary.written / max(time.perf_counter() - t0, 1e-9):.2f} variants per second "
              "(including validation and cluster start)")
    status = 0 if summary.ok else 1
    rank = _optional_command("rank", "rank_command")
    if rank is not None:
        status = max(status, int(rank(str(summary.results), 10, str(study.parent / "ranking.csv"))))
    report = _optional_command("report", "report_command")
    if report is not None:
        status = max(status, int(report(str(summary.results), str(study.parent / "report.html"))))
    return status
