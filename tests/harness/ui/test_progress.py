"""The progress display: task bar and stages, on a terminal and in logs, and silent when asked."""

from __future__ import annotations

import io

import pytest

from harness.ui import Display, Progress


class _Clock:
    """A clock the test advances by hand (no sleeping, no timing flakiness)."""

    def __init__(self):
        self.t = 100.0

    def __call__(self) -> float:
        return self.t


def test_the_runner_uses_this_bar():
    """One progress mechanism: the run's bar is this class (start, update(ok), close)."""
    from harness.backtest import runner

    assert runner.Progress is Progress
    for meth in ("start", "update", "close"):
        assert callable(getattr(Progress(3, 0, enabled=False), meth))


def test_failed_tasks_are_counted_apart_from_computed_ones():
    """Of ten tasks, two cached and one failing, the bar reports seven computed, two cached, one failed."""
    p = Progress(10, 2, enabled=False)
    p.start()
    for ok in [True] * 3 + [False] + [True] * 4:
        p.update(ok)
    p.close()
    assert (p.done, p.computed, p.cached, p.failed) == (10, 7, 2, 1)
    assert p.summary().startswith("10 tasks: 7 computed, 2 from cache, 1 failed in ")


def test_log_lines_off_a_terminal_one_per_tenth():
    """Off a terminal the bar writes a plain line at the start, at each tenth of the tasks and at the end."""
    clock = _Clock()
    err = io.StringIO()
    p = Progress(20, 0, stream=err, tty=False, clock=clock)
    p.start()
    for _ in range(20):
        clock.t += 0.5
        p.update(True)
    p.close()
    lines = err.getvalue().splitlines()
    assert lines[0].startswith("0/20 tasks | computed 0 | cached 0 | failed 0")
    assert lines[-1].startswith("20/20 tasks | computed 20 | cached 0 | failed 0 | elapsed 10s")
    assert len(lines) == 11  # the start, then one per tenth (2 tasks each)
    assert "\r" not in err.getvalue() and "\x1b[" not in err.getvalue()


def test_eta_follows_the_computed_pace():
    """Five of ten tasks in 10 s leave an estimate of 10 s (pace of the computed tasks; cached ones are free)."""
    clock = _Clock()
    p = Progress(12, 2, enabled=False, clock=clock)
    p.start()
    for _ in range(5):
        clock.t += 2.0
        p.update(True)
    assert "eta 10s" in p.line()


def test_terminal_bar_draws_with_rich():
    """On a terminal the bar is drawn by rich (escape sequences) and shows the cached and failed counts."""
    err = io.StringIO()
    p = Progress(4, 1, stream=err, tty=True)
    p.start()
    p.update(False)
    p.update(True)
    p.update(True)
    p.close()
    out = err.getvalue()
    assert "\x1b[" in out and "4/4" in out and "cached 1" in out and "failed 1" in out


def test_disabled_and_quiet_print_nothing():
    """enabled=False and a quiet display print nothing at all, on a terminal or not."""
    for tty in (True, False):
        err, out = io.StringIO(), io.StringIO()
        p = Progress(3, stream=err, enabled=False, tty=tty)
        p.start()
        p.update(True)
        p.close()
        d = Display(quiet=True, stream=err, out=out, tty=tty)
        with d.stage("scoring"):
            d.log("a line")
            d.echo("a result")
        bar = d.tasks(2)
        bar.start()
        bar.update(True)
        bar.close()
        assert err.getvalue() == "" and out.getvalue() == ""


def test_stages_in_logs_and_on_a_terminal():
    """In logs a stage is one line when it starts; on a terminal it ends with its time; a failure is shown and raised."""
    clock = _Clock()
    err = io.StringIO()
    d = Display(stream=err, tty=False, clock=clock)
    with d.stage("scoring under 'first'"):
        clock.t += 2.5
    d.labelled("revised-data rerun")("run demo: 10 tasks")
    with pytest.raises(ZeroDivisionError), d.stage("deciding"):
        clock.t += 1.0
        1 / 0  # noqa: B018
    assert err.getvalue().splitlines() == ["scoring under 'first' …", "revised-data rerun: run demo: 10 tasks",
                                           "deciding …", "✗ deciding: stopped after 1.0s"]
    assert d.timings() == {"scoring under 'first'": 2.5, "deciding": 1.0}
    err = io.StringIO()
    d = Display(stream=err, tty=True, clock=clock)
    with d.stage("writing the pack"):
        clock.t += 0.25
    assert "✓ writing the pack (0.2s)" in err.getvalue() or "✓ writing the pack (0.3s)" in err.getvalue()


def test_run_summary_counts_failures_apart():
    """Six tasks, one failing now and one failed before (from the cache), read 4 computed, 0 from cache, 2 failed."""
    from pathlib import Path
    from types import SimpleNamespace

    from harness.ui import run_summary

    tasks = ([{"status": "ok", "cached": False}] * 4 + [{"status": "failed", "cached": False},
                                                         {"status": "failed", "cached": True}])
    res = SimpleNamespace(total=6, computed=5, cached=1, failed=[{}, {}], timings={"total": 3.0},
                          run_dir=Path("run"), manifest=SimpleNamespace(tasks=tuple(tasks)))
    assert run_summary(res) == "6 tasks: 4 computed, 0 from cache, 2 failed in 3.0s; ledger in run"
