"""Exceptions of the backtest stage; each subclasses :class:`harness.errors.RunError` (a RuntimeError)."""

from __future__ import annotations

from harness.errors import RunError


class CacheBusyError(RunError):
    """The task cache (or a run directory) is in use by a run; ``vintage-harness cache clean`` waits for none."""


class RunLockedError(RunError):
    """Another run is writing the same run directory."""


class RunInterrupted(KeyboardInterrupt):
    """The driver received SIGTERM or SIGINT: workers were shut down, finished tasks are kept.

    A :class:`KeyboardInterrupt`, so that code catching interrupts treats both signals alike;
    ``signum`` is the signal received.
    """

    def __init__(self, signum: int):
        super().__init__(f"interrupted by signal {signum}")
        self.signum = signum
