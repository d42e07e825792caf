"""The backtest: plan (origins, information sets, task keys), dispatch, worker, ledger, run manifest.

Names load on first use, so importing one module of this package (the ledger reader for
scoring, the cache for ``vintage-harness cache``) does not import the others (models, joblib).
"""

from __future__ import annotations

import importlib

_PUBLIC = {
    "BACKENDS": "harness.backtest.runner",
    "RunResult": "harness.backtest.runner",
    "run": "harness.backtest.runner",
    "Ledger": "harness.backtest.ledger",
    "read_ledger": "harness.backtest.ledger",
    "Plan": "harness.backtest.plan",
    "Task": "harness.backtest.plan",
    "make_plan": "harness.backtest.plan",
    "seed_key": "harness.backtest.plan",
    "task_key": "harness.backtest.plan",
    "TaskCache": "harness.backtest.cache",
    "diagnostic_warnings": "harness.backtest.diagnostics",
    "register_diagnostic_check": "harness.backtest.diagnostics",
}

__all__ = sorted(_PUBLIC)


def __getattr__(name: str):
    module = _PUBLIC.get(name)
    if module is None:
        raise AttributeError(f"module 'harness.backtest' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
