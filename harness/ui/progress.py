"""Stages and a task bar: ``rich`` on a terminal, one plain line per stage or tenth of the tasks elsewhere.

Everything goes to standard error, so a command's own output (tables, paths) stays clean on
standard output; ``quiet`` silences all of it (errors are printed by the command layer).

:class:`Progress` has the runner's interface — ``Progress(total, cached, enabled=...)`` with
``start()``, ``update(ok)`` and ``close()`` — and counts failed tasks apart from computed ones:
a failed task is neither computed nor cached.
"""

from __future__ import annotations

import sys
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from typing import IO

__all__ = ["Display", "Progress", "format_seconds", "run_summary"]


def format_seconds(s: float) -> str:
    """``0.4s``, ``12s``, ``3m05s``: short elapsed times (tenths below ten seconds)."""
    if s < 10:
        return f"{s:.1f}s"
    s = int(round(s))
    return f"{s // 60}m{s % 60:02d}s" if s >= 60 else f"{s}s"


def _is_tty(stream) -> bool:
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):  # closed or file-like without isatty
        return False


def _console(stream):
    from rich.console import Console

    # highlight=False: numbers in messages keep the terminal's colour (no random highlighting)
    return Console(file=stream, force_terminal=True, highlight=False, soft_wrap=True)


class Progress:
    """A task bar: done (computed + cached + failed) of ``total``, with an ETA from the computed pace.

    Parameters
    ----------
    total : int
        Tasks in all.
    cached : int
        Tasks already done before the bar starts (read from the cache).
    stream : file, optional
        Default standard error.
    enabled : bool
        False: count silently (``summary`` still works).
    label : str
        What is counted (``"tasks"``, ``"sections"``).
    description : str, optional
        Text before the bar on a terminal (default ``label``).
    tty : bool, optional
        Force the terminal (True) or the log-line (False) form; default: ask the stream.

    Examples
    --------
    >>> import io
    >>> p = Progress(4, 1, stream=io.StringIO(), tty=False)
    >>> p.start(); p.update(True); p.update(False); p.update(True); p.close()
    >>> p.computed, p.failed, p.cached
    (2, 1, 1)
    """

    def __init__(self, total: int, cached: int = 0, *, stream: IO[str] | None = None, enabled: bool = True,
                 label: str = "tasks", description: str | None = None, tty: bool | None = None,
                 clock: Callable[[], float] = time.perf_counter):
        self.total, self.cached = int(total), int(cached)
        self.done, self.failed = self.cached, 0
        self.stream = stream if stream is not None else sys.stderr
        self.enabled = bool(enabled)
        self.tty = _is_tty(self.stream) if tty is None else bool(tty)
        self.label = label
        self.description = description or label
        self._clock = clock
        self.t0 = clock()
        self._last_log = self.t0
        self._last_tenth = -1
        self._rich = None
        self._task = None
        self._closed = False

    # ------------------------------------------------------------------ counts
    @property
    def computed(self) -> int:
        """Tasks computed here and successful (failed ones are counted apart)."""
        return self.done - self.cached - self.failed

    @property
    def elapsed(self) -> float:
        return self._clock() - self.t0

    def _eta(self) -> str:
        worked = self.done - self.cached
        left = self.total - self.done
        if worked <= 0 or left <= 0:
            return "--"
        return format_seconds(self.elapsed / worked * left)

    def line(self) -> str:
        """The plain-text state: ``12/336 tasks | computed 11 | cached 0 | failed 1 | elapsed 3.0s | eta 1m20s``."""
        return (f"{self.done}/{self.total} {self.label} | computed {self.computed} | cached {self.cached} | "
                f"failed {self.failed} | elapsed {format_seconds(self.elapsed)} | eta {self._eta()}")

    def summary(self) -> str:
        """One line for the end: computed, from cache and failed counted apart."""
        return (f"{self.total} {self.label}: {self.computed} computed, {self.cached} from cache, "
                f"{self.failed} failed in {format_seconds(self.elapsed)}")

    # ------------------------------------------------------------------ the runner's interface
    def start(self) -> None:
        self.t0 = self._last_log = self._clock()
        if not self.enabled:
            return
        if self.tty:
            from rich.progress import (
                BarColumn,
                MofNCompleteColumn,
                TextColumn,
                TimeElapsedColumn,
                TimeRemainingColumn,
            )
            from rich.progress import Progress as RichProgress

            self._rich = RichProgress(TextColumn("{task.description}"), BarColumn(), MofNCompleteColumn(),
                                      TextColumn("{task.fields[counts]}"), TimeElapsedColumn(),
                                      TextColumn("eta"), TimeRemainingColumn(),
                                      console=_console(self.stream), transient=False, redirect_stdout=False,
                                      redirect_stderr=False)
            self._rich.start()
            self._task = self._rich.add_task(self.description, total=max(self.total, 1), completed=self.done,
                                             counts=self._counts())
        else:
            self._log(force=True)

    def _counts(self) -> str:
        return f"{self.label} | cached {self.cached} | failed {self.failed}"

    def update(self, ok: bool = True) -> None:
        """One more task done (``ok`` False: it failed)."""
        self.done += 1
        self.failed += 0 if ok else 1
        if not self.enabled:
            return
        if self._rich is not None:
            self._rich.update(self._task, completed=self.done, counts=self._counts())
        elif not self.tty:
            self._log()

    def _log(self, force: bool = False) -> None:
        tenth = 10 * self.done // max(self.total, 1)
        now = self._clock()
        if force or tenth != self._last_tenth or now - self._last_log > 15 or self.done == self.total:
            self._last_tenth, self._last_log = tenth, now
            self.stream.write(self.line() + "\n")
            self.stream.flush()

    def close(self) -> None:
        if self._closed:
            return
        self._closed = True
        if self._rich is not None:
            self._rich.stop()
            self._rich = None

    def __enter__(self) -> Progress:
        self.start()
        return self

    def __exit__(self, *exc) -> None:
        self.close()


@dataclass
class Stage:
    """A running stage: its text (``note`` changes what is shown) and, once done, its duration."""

    text: str
    started: float
    seconds: float | None = None
    notes: list[str] = field(default_factory=list)
    _status: object = None

    def note(self, text: str) -> None:
        """Say what the stage is doing now (the spinner's text; a log line elsewhere)."""
        self.notes.append(text)
        if self._status is not None:
            self._status.update(f"{self.text}: {text}")


class Display:
    """Stages of a command, log lines and the command's own output, with one ``quiet`` switch.

    Parameters
    ----------
    quiet : bool
        Print nothing (stages, logs and output); errors are the command layer's.
    stream : file, optional
        Where stages and logs go (default standard error).
    out : file, optional
        Where the command's output goes (default standard output).
    tty : bool, optional
        Force the terminal form (spinners, bars) or the log-line form; default: ask ``stream``.

    Examples
    --------
    >>> import io
    >>> err = io.StringIO()
    >>> d = Display(stream=err, tty=False)
    >>> with d.stage("scoring"):
    ...     pass
    >>> err.getvalue().splitlines()[0]
    'scoring …'
    """

    def __init__(self, *, quiet: bool = False, stream: IO[str] | None = None, out: IO[str] | None = None,
                 tty: bool | None = None, clock: Callable[[], float] = time.perf_counter):
        self.quiet = bool(quiet)
        self.stream = stream if stream is not None else sys.stderr
        self.out = out if out is not None else sys.stdout
        self.tty = _is_tty(self.stream) if tty is None else bool(tty)
        self._clock = clock
        self.stages: list[Stage] = []
        self._console = None

    def _rich(self):
        if self._console is None:
            self._console = _console(self.stream)
        return self._console

    def _line(self, text: str) -> None:
        self.stream.write(text + "\n")
        self.stream.flush()

    @contextmanager
    def stage(self, text: str, *, live: bool = True) -> Iterator[Stage]:
        """Show ``text`` while the block runs.

        On a terminal: a spinner, then ``✓ text (1.2s)``. Elsewhere: one line, ``text …``, when
        the stage starts. ``live=False`` prints the heading line only, also on a terminal (for a
        block that draws its own bar, such as the runner). A failure is shown and re-raised.
        """
        st = Stage(text, self._clock())
        self.stages.append(st)
        status = None
        if not self.quiet:
            if self.tty and live:
                status = self._rich().status(text, spinner="dots")
                status.start()
                st._status = status
            else:
                self._line(f"{text} …")
        try:
            yield st
        except BaseException:
            st.seconds = self._clock() - st.started
            if status is not None:
                status.stop()
            if not self.quiet:
                self._line(f"✗ {text}: stopped after {format_seconds(st.seconds)}")
            raise
        st.seconds = self._clock() - st.started
        if status is not None:
            status.stop()
        if not self.quiet and self.tty:
            # on a terminal the spinner gives way to a line with the time taken; in logs the
            # stage's one line was written when it started
            self._line(f"✓ {text} ({format_seconds(st.seconds)})")

    def tasks(self, total: int, cached: int = 0, *, label: str = "tasks", description: str | None = None
              ) -> Progress:
        """A task bar on this display's stream (silent when quiet)."""
        return Progress(total, cached, stream=self.stream, enabled=not self.quiet, label=label,
                        description=description, tty=self.tty, clock=self._clock)

    def log(self, message: str) -> None:
        """A line on the stage stream (usable as the runner's ``log``)."""
        if not self.quiet:
            self._line(str(message))

    def labelled(self, prefix: str) -> Callable[[str], None]:
        """A ``log`` function that starts every line with ``prefix: ``."""
        return lambda message: self.log(f"{prefix}: {message}")

    def echo(self, text: str = "") -> None:
        """The command's own output (standard output; silent when quiet)."""
        if not self.quiet:
            self.out.write(str(text) + "\n")
            self.out.flush()

    def timings(self) -> dict[str, float]:
        """Seconds per finished stage, in order."""
        return {s.text: float(s.seconds) for s in self.stages if s.seconds is not None}


def run_summary(result) -> str:
    """A run's counts with failed tasks apart from computed ones (a failed task is neither computed nor cached).

    ``result`` is the runner's :class:`~harness.backtest.runner.RunResult`; its manifest lists
    every task with its status and whether it came from the cache.
    """
    tasks = getattr(getattr(result, "manifest", None), "tasks", ()) or ()
    failed_new = sum(1 for t in tasks if t.get("status") != "ok" and not t.get("cached"))
    failed_old = sum(1 for t in tasks if t.get("status") != "ok" and t.get("cached"))
    failed = len(getattr(result, "failed", ()) or ())
    return (f"{result.total} tasks: {result.computed - failed_new} computed, {result.cached - failed_old} from "
            f"cache, {failed} failed in {format_seconds(result.timings.get('total', 0.0))}; ledger in "
            f"{result.run_dir}")
