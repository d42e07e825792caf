"""The evaluation side: spec, runner, ledger, scores, comparisons, sensitivity and the report.

Public names are loaded on first use (``harness.run``, ``harness.evaluate``, …) so that the
command line starts without importing the numerical stack.
"""

from __future__ import annotations

import importlib

_PUBLIC = {
    "load_spec": "harness.spec",
    "Spec": "harness.spec",
    "make_plan": "harness.runner",
    "run": "harness.runner",
    "read_ledger": "harness.ledger",
    "Ledger": "harness.ledger",
    "evaluate": "harness.evaluate",
    "Evaluation": "harness.evaluate",
    "sensitivity": "harness.sensitivity",
    "Sensitivity": "harness.sensitivity",
    "make_report": "harness.reporting",
    "check_model": "harness.testing",
    "SpecError": "harness.errors",
    "RunError": "harness.errors",
}

__all__ = sorted(_PUBLIC)


def __getattr__(name: str):
    if name in _PUBLIC:
        return getattr(importlib.import_module(_PUBLIC[name]), name)
    raise AttributeError(f"module 'harness' has no attribute {name!r}")
