"""Progress of a run: a bar on a terminal, plain log lines elsewhere (CI, files)."""

from __future__ import annotations

import sys
import time


def _fmt_secs(s: float) -> str:
    s = int(round(s))
    return f"{s // 60}m{s % 60:02d}s" if s >= 60 else f"{s}s"


class Progress:
    """Counts tasks done, cache hits and failures, with an ETA from the computed tasks' pace."""

    def __init__(self, total: int, cached: int = 0, *, stream=None, enabled: bool = True, label: str = "tasks"):
        self.total, self.cached, self.done, self.failed = total, cached, cached, 0
        self.stream = stream or sys.stderr
        self.enabled = enabled
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)())
        self.t0 = time.perf_counter()
        self.label = label
        self._last_log = 0.0
        self._last_pct = -1

    def _eta(self) -> str:
        computed = self.done - self.cached
        left = self.total - self.done
        if computed <= 0 or left <= 0:
            return "--"
        return _fmt_secs((time.perf_counter() - self.t0) / computed * left)

    def line(self) -> str:
        return (f"{self.done}/{self.total} {self.label} | cached {self.cached} | failed {self.failed} | "
                f"elapsed {_fmt_secs(time.perf_counter() - self.t0)} | eta {self._eta()}")

    def start(self) -> None:
        if self.enabled:
            self._emit(force=True)

    def update(self, ok: bool) -> None:
        self.done += 1
        self.failed += 0 if ok else 1
        if self.enabled:
            self._emit()

    def _emit(self, force: bool = False) -> None:
        if self.tty:
            width = 28
            filled = int(width * self.done / max(self.total, 1))
            self.stream.write(f"\r[{'#' * filled}{'.' * (width - filled)}] {self.line()}  ")
            self.stream.flush()
            return
        pct = int(100 * self.done / max(self.total, 1)) // 10
        now = time.perf_counter()
        if force or pct != self._last_pct or now - self._last_log > 15 or self.done == self.total:
            self._last_pct, self._last_log = pct, now
            self.stream.write(self.line() + "\n")
            self.stream.flush()

    def close(self) -> None:
        if self.enabled and self.tty:
            self.stream.write("\n")
            self.stream.flush()
