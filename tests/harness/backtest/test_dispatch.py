"""Dispatch: small loky runs stay inline in the driver, large ones start the pool; where a task ran changes nothing."""

from __future__ import annotations

import os

import pytest

from harness.backtest import read_ledger, run
from harness.backtest.dispatch import _pool_pays
from harness.spec import load_spec
from tests.harness.conftest import write_spec

EXTRA = '[models.pid]\ntype = "tests.harness.backtest.models:PidModel"\n'


@pytest.mark.parametrize("remaining, jobs, start, pays", [
    (10.0, 2, 1.5, True),    # 1.5 + 5 < 10
    (3.0, 2, 1.5, False),    # 1.5 + 1.5 = 3: no gain
    (2.9, 4, 1.5, True),     # 1.5 + 0.725 < 2.9
    (100.0, 1, 1.5, False),  # one job: never a pool
])
def test_pool_pays_when_parallel_time_plus_start_beats_inline(remaining, jobs, start, pays):
    """The pool is started only when start + remaining / jobs < remaining (arithmetic of the rule)."""
    assert _pool_pays(remaining, jobs, start) is pays


def _pids(run_dir) -> set[int]:
    d = read_ledger(run_dir).diagnostics
    return {int(v) for v in d[d["name"] == "pid"]["value"]}


def test_small_run_stays_inline_and_forced_pool_uses_workers(tmp_path, small_store):
    """A run of quick tasks runs them all in the driver; with inline_seconds=0 they run in workers; draws agree."""
    inline = run(load_spec(write_spec(tmp_path, small_store, tmp_path / "a", EXTRA)).with_run(cache=tmp_path / "ca"),
                 jobs=2, progress=False)
    pooled = run(load_spec(write_spec(tmp_path, small_store, tmp_path / "b", EXTRA)).with_run(cache=tmp_path / "cb"),
                 jobs=2, progress=False, inline_seconds=0)
    assert _pids(inline.run_dir) == {os.getpid()}
    assert os.getpid() not in _pids(pooled.run_dir) and len(_pids(pooled.run_dir)) >= 1
    assert inline.computed == pooled.computed == inline.total
    assert read_ledger(inline.run_dir).draws.values.tobytes() == read_ledger(pooled.run_dir).draws.values.tobytes()
