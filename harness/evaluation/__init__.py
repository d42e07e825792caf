"""Scoring a run without refitting: truths, scores, sub-periods, tests, and revision sensitivity."""

from __future__ import annotations

from harness.evaluation.cells import steps_ahead
from harness.evaluation.evaluator import Evaluation, evaluate, regimes_for
from harness.evaluation.save import save, write_forecasts

__all__ = ["Evaluation", "evaluate", "regimes_for", "save", "steps_ahead", "write_forecasts"]
