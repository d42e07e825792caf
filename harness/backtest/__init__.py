"""The backtest: plan (origins, information sets, task keys), dispatch, worker, ledger, run manifest."""

from __future__ import annotations

from harness.backtest.ledger import Ledger, read_ledger
from harness.backtest.plan import Plan, Task, make_plan, seed_key, task_key
from harness.backtest.runner import BACKENDS, RunResult, run

__all__ = ["BACKENDS", "Ledger", "Plan", "RunResult", "Task", "make_plan", "read_ledger", "run",
           "seed_key", "task_key"]
