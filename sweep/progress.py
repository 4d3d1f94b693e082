"""Progress of a run: coefficient sets and variants, task by task.

In a terminal, two bars (coefficient sets computed, variants written) move each
time a task finishes. When stderr is not a terminal (a batch job's log), one
plain line is written at a steady pace, whether or not anything finished since:

    progress: coefficient sets 2/4, variants 40/160 (25 %), 1.25 variants/s,
    1 min 36 s left, 32 s elapsed

(one line in the log),
and a last line when the run ends, so ``tail -f`` on the log shows where a run
stands. The rate counts variants written since the run began (coefficient time
included), so the time left is conservative while coefficient sets are computed.
"""

from __future__ import annotations

import sys
import threading
import time
from typing import Any, TextIO

PLAIN_EVERY = 15.0
"""Default interval between plain progress lines [s]."""


def _duration(seconds: float) -> str:
    """``'1 h 02 min'``, ``'3 min 05 s'`` or ``'42 s'``."""
    s = round(seconds)
    if s >= 3600:
        return f"{s // 3600} h {s % 3600 // 60:02d} min"
    if s >= 60:
        return f"{s // 60} min {s % 60:02d} s"
    return f"{s} s"


class Progress:
    """Counts finished coefficient sets and variants and shows them.

    Parameters
    ----------
    sets : int
        Coefficient sets to compute.
    variants : int
        Variants to write.
    stream : text stream, optional
        Where to show progress (default ``sys.stderr``).
    every : float
        Interval between plain lines when ``stream`` is not a terminal [s].
    terminal : bool, optional
        Force the bar (True) or the plain lines (False); default: whether
        ``stream`` is a terminal.

    Use as a context manager; :meth:`set_done` and :meth:`variants_done` may be
    called from the collecting thread while the plain lines come from a timer
    thread.
    """

    def __init__(self, sets: int, variants: int, *, stream: TextIO | None = None,
                 every: float = PLAIN_EVERY, terminal: bool | None = None) -> None:
        self.sets, self.variants = sets, variants
        self.sets_done = self.variants_written = 0
        self.stream = stream if stream is not None else sys.stderr
        self.every = every
        isatty = getattr(self.stream, "isatty", None)
        self.terminal = bool(isatty and isatty()) if terminal is None else terminal
        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self._bar: Any = None
        self._bar_tasks: dict[str, Any] = {}
        self._t0 = time.perf_counter()

    # -- counting

    def set_done(self) -> None:
        """One coefficient set is in the cache."""
        with self._lock:
            self.sets_done += 1
        if self._bar is not None and "sets" in self._bar_tasks:
            self._bar.update(self._bar_tasks["sets"], advance=1)

    def variants_done(self, n: int) -> None:
        """``n`` more variants are written."""
        with self._lock:
            self.variants_written += n
            rate = self._rate()
        if self._bar is not None:
            self._bar.update(self._bar_tasks["variants"], advance=n, rate=f"{rate:.2f}/s")

    def _rate(self) -> float:
        return self.variants_written / max(time.perf_counter() - self._t0, 1e-9)

    def line(self) -> str:
        """The plain progress line as of now."""
        with self._lock:
            elapsed = time.perf_counter() - self._t0
            written, rate = self.variants_written, self._rate()
            parts = []
            if self.sets:
                parts.append(f"coefficient sets {self.sets_done}/{self.sets}")
            pct = 100.0 * written / self.variants if self.variants else 100.0
            parts.append(f"variants {written}/{self.variants} ({pct:.0f} %)")
            parts.append(f"{rate:.2f} variants/s")
            if written >= self.variants:
                parts.append("done")
            elif written:
                parts.append(f"{_duration((self.variants - written) / rate)} left")
            else:
                parts.append("time left not known yet")
            parts.append(f"{_duration(elapsed)} elapsed")
        return "progress: " + ", ".join(parts)

    # -- showing

    def __enter__(self) -> Progress:
        self._t0 = time.perf_counter()
        if self.terminal:
            self._bar = _bar(self.stream)
            self._bar.__enter__()
            if self.sets:
                self._bar_tasks["sets"] = self._bar.add_task("coefficient sets", total=self.sets,
                                                             rate="")
            self._bar_tasks["variants"] = self._bar.add_task("variants", total=self.variants,
                                                             rate="")
        else:
            self._emit()
            self._thread = threading.Thread(target=self._pace, name="luxsweep-progress",
                                            daemon=True)
            self._thread.start()
        return self

    def __exit__(self, *exc: object) -> None:
        if self._bar is not None:
            self._bar.__exit__(*exc)
            self._bar = None
        if self._thread is not None:
            self._stop.set()
            self._thread.join()
            self._thread = None
            if exc[0] is None:
                self._emit()

    def _pace(self) -> None:
        while not self._stop.wait(self.every):
            self._emit()

    def _emit(self) -> None:
        try:
            print(self.line(), file=self.stream, flush=True)
        except (OSError, ValueError):  # the log went away: progress is not worth failing for
            pass


def _bar(stream: TextIO) -> Any:
    from rich.console import Console
    from rich.progress import (
        BarColumn,
        MofNCompleteColumn,
        TextColumn,
        TimeElapsedColumn,
        TimeRemainingColumn,
    )
    from rich.progress import Progress as RichProgress

    return RichProgress(
        TextColumn("[bold]{task.description:<16}"), BarColumn(), MofNCompleteColumn(),
        TextColumn("{task.fields[rate]}"), TimeElapsedColumn(), TextColumn("left"),
        TimeRemainingColumn(), console=Console(file=stream), transient=False,
    )


__all__ = ["PLAIN_EVERY", "Progress"]
