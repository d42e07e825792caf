"""Scores of ensemble forecasts: the rules, the fused pass, the registry and the score tables.

Every score is declared once in :mod:`harness.scores.registry` (label, unit, orientation, how
it is set against the benchmark, tests, roles, source); :func:`score_all` computes every
declared score in one pass; :mod:`harness.scores.frames` aggregates them into cell means and
ratios to a benchmark.
"""

from __future__ import annotations

import importlib

_PUBLIC = {
    "Column": "harness.scores.registry",
    "DEFAULT_COVERAGE_LEVELS": "harness.scores.registry",
    "DEFAULT_DENSITY_FLOOR": "harness.scores.registry",
    "DEFAULT_INTERVAL_LEVELS": "harness.scores.registry",
    "DEFAULT_QUANTILE_LEVELS": "harness.scores.registry",
    "FULL": "harness.scores.subperiods",
    "QUANTILE_METHODS": "harness.scores.kernels",
    "QUANTILE_WEIGHTS": "harness.scores.kernels",
    "Score": "harness.scores.registry",
    "ScoreConfig": "harness.scores.registry",
    "TAIL_SIDES": "harness.scores.kernels",
    "TIES": "harness.scores.kernels",
    "TW_WEIGHTS": "harness.scores.kernels",
    "aggregate": "harness.scores.frames",
    "assign_subperiods": "harness.scores.subperiods",
    "best_per_column": "harness.scores.frames",
    "columns": "harness.scores.registry",
    "common_sample": "harness.scores.frames",
    "coverage": "harness.scores.quantiles",
    "crps_ensemble": "harness.scores.crps",
    "crps_pairs_reference": "harness.scores.crps",
    "crps_sorted": "harness.scores.crps",
    "ensemble_quantiles": "harness.scores.quantiles",
    "interval_score": "harness.scores.quantiles",
    "is_score_column": "harness.scores.registry",
    "log_score": "harness.scores.density",
    "pinball_loss": "harness.scores.quantiles",
    "pit": "harness.scores.density",
    "point_errors": "harness.scores.point",
    "quantile_score": "harness.scores.quantiles",
    "register_score": "harness.scores.registry",
    "relative_to": "harness.scores.frames",
    "resolve": "harness.scores.registry",
    "score_all": "harness.scores.fused",
    "score_names": "harness.scores.registry",
    "scores": "harness.scores.registry",
    "silverman_bandwidth": "harness.scores.density",
    "threshold_weighted_crps": "harness.scores.crps",
    "tidy_scores": "harness.scores.frames",
    "weighted_crps_quantile": "harness.scores.crps",
}

__all__ = sorted(_PUBLIC)


def __getattr__(name: str):
    module = _PUBLIC.get(name)
    if module is None:
        raise AttributeError(f"module 'harness.scores' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value
