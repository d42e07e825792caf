"""The evaluation side: spec → plan → tasks → ledger → scores → tests → verdicts → report.

The notebook-facing functions are importable from here; they load on first use, so the command
line starts without the numerical stack. No public name equals a submodule's name, so
``harness.evaluate`` is the function on every access.

=====================  ==========================================================
``load_spec``          read and validate a backtest spec (TOML) → :class:`Spec`
``make_plan``          resolve a spec: origins, information sets, task keys
``run``                refit every model at every origin (parallel, cached) → :class:`RunResult`
``read_ledger``        a run's stored forecasts → :class:`Ledger` (xarray draws)
``evaluate``           score a run under a truth, sub-periods, tests → :class:`Evaluation`
``sensitivity``        truths side by side, real-time vs revised data → :class:`Sensitivity`
``make_report``        write the review report of a run
``check_model``        the model conformance suite
``score_all``          every registered score of ensemble forecasts
``crps_ensemble``      the ensemble CRPS
``diebold_mariano``    the Diebold–Mariano test
``model_confidence_set``  the model confidence set
=====================  ==========================================================
"""

from __future__ import annotations

import importlib

_PUBLIC = {
    # spec and run
    "load_spec": "harness.spec",
    "Spec": "harness.spec",
    "make_plan": "harness.backtest",
    "run": "harness.backtest",
    "RunResult": "harness.backtest",
    "read_ledger": "harness.backtest",
    "Ledger": "harness.backtest",
    # scoring and tests
    "evaluate": "harness.evaluation",
    "Evaluation": "harness.evaluation",
    "sensitivity": "harness.evaluation.sensitivity",
    "Sensitivity": "harness.evaluation.sensitivity",
    "score_all": "harness.scores",
    "crps_ensemble": "harness.scores",
    "diebold_mariano": "harness.compare",
    "model_confidence_set": "harness.compare",
    # report
    "make_report": "harness.report.make",
    # models
    "check_model": "harness.testing",
    "available_models": "harness.models",
    "BaseModel": "harness.models",
    # errors
    "HarnessError": "harness.errors",
    "SpecError": "harness.errors",
    "RunError": "harness.errors",
}

__all__ = sorted(_PUBLIC)


def __getattr__(name: str):
    module = _PUBLIC.get(name)
    if module is None:
        raise AttributeError(f"module 'harness' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
