"""Scores of ensemble forecasts: the rules, the fused pass, the registry and the score tables.

Every score is declared once in :mod:`harness.scores.registry` (label, unit, orientation, how
it is set against the benchmark, tests, roles, source); :func:`score_all` computes every
declared score in one pass; :mod:`harness.scores.frames` aggregates them into cell means and
ratios to a benchmark.
"""

from __future__ import annotations

from harness.scores.crps import (
    crps_ensemble,
    crps_pairs_reference,
    crps_sorted,
    threshold_weighted_crps,
    weighted_crps_quantile,
)
from harness.scores.density import log_score, pit, silverman_bandwidth
from harness.scores.frames import (
    aggregate,
    best_per_column,
    common_sample,
    relative_to,
    tidy_scores,
)
from harness.scores.fused import score_all
from harness.scores.kernels import (
    DEFAULT_COVERAGE_LEVELS,
    DEFAULT_DENSITY_FLOOR,
    DEFAULT_QUANTILE_LEVELS,
    QUANTILE_METHODS,
    QUANTILE_WEIGHTS,
    TAIL_SIDES,
    TIES,
    TW_WEIGHTS,
)
from harness.scores.point import point_errors
from harness.scores.quantiles import (
    coverage,
    ensemble_quantiles,
    interval_score,
    pinball_loss,
    quantile_score,
)
from harness.scores.registry import (
    DEFAULT_INTERVAL_LEVELS,
    Column,
    Score,
    ScoreConfig,
    columns,
    is_score_column,
    register_score,
    resolve,
    score_names,
    scores,
)
from harness.scores.subperiods import FULL, assign_subperiods

__all__ = [
    "DEFAULT_COVERAGE_LEVELS",
    "DEFAULT_DENSITY_FLOOR",
    "DEFAULT_INTERVAL_LEVELS",
    "DEFAULT_QUANTILE_LEVELS",
    "FULL",
    "QUANTILE_METHODS",
    "QUANTILE_WEIGHTS",
    "TAIL_SIDES",
    "TIES",
    "TW_WEIGHTS",
    "Column",
    "Score",
    "ScoreConfig",
    "aggregate",
    "assign_subperiods",
    "best_per_column",
    "columns",
    "common_sample",
    "coverage",
    "crps_ensemble",
    "crps_pairs_reference",
    "crps_sorted",
    "ensemble_quantiles",
    "interval_score",
    "is_score_column",
    "log_score",
    "pinball_loss",
    "pit",
    "point_errors",
    "quantile_score",
    "register_score",
    "relative_to",
    "resolve",
    "score_all",
    "score_names",
    "scores",
    "silverman_bandwidth",
    "threshold_weighted_crps",
    "tidy_scores",
    "weighted_crps_quantile",
]
