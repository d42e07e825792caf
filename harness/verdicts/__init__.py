"""The verdict stage: the decision table a model-review meeting reads, derived from the evaluation's tables.

:func:`decide` turns scores, tests, the model confidence set, calibration and the sensitivity
check into one row per candidate × variable × horizon band, with a verdict word and the reasons
as checkable claims; :func:`statements` words it per variable.
"""

from __future__ import annotations

from harness.verdicts.bands import Band, horizon_bands
from harness.verdicts.decide import BETTER, UNPROVEN, WORDS, WORSE, Claim, Verdicts, decide
from harness.verdicts.statements import Statement, statements

__all__ = ["BETTER", "UNPROVEN", "WORDS", "WORSE", "Band", "Claim", "Statement", "Verdicts", "decide",
           "horizon_bands", "statements"]
