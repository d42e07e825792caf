"""What a long command shows while it works: named stages and a task bar.

Public front: :class:`Display` (stages, log lines, the command's own output, ``quiet``) and
:class:`Progress` (a task bar; a drop-in for the runner's ``Progress(total, cached, enabled=...)``
with ``start``/``update(ok)``/``close``). On a terminal both draw with ``rich``; elsewhere (CI,
log files, pipes) each stage and each tenth of the tasks is one plain line.
"""

from __future__ import annotations

from harness.ui.progress import Display, Progress, format_seconds, run_summary

__all__ = ["Display", "Progress", "format_seconds", "run_summary"]
