"""Tables for the terminal (``vintage-harness score``, ``vintage-harness sensitivity``), from the same builders as the report.

The numbers, labels and marks are those of the report's tables (:mod:`harness.report.builders`,
:mod:`harness.report.decision`, :mod:`harness.report.truths`): aligned text with the marks set
apart from the numbers, p and n in the cell, ready to paste; every format of
:mod:`harness.report.textout` renders the same tables.
"""

from __future__ import annotations

from harness.report.builders import key_tables
from harness.report.decision import DecisionTable


def _test_label(ev) -> str:
    from harness.compare.registry import comparison_tests

    pair = comparison_tests("pairwise")[0]
    settings = getattr(getattr(ev.manifest, "scoring", None), "tests", None) or {}
    method = pair.settings(settings.get(pair.name)).get("method")
    return pair.label + (f" ({method})" if method else "")


def score_tables(ev, score: str = "crps", subperiods=("full",)) -> list:
    """One table per target variable (and sub-period): rows models, columns every horizon.

    Raises
    ------
    ValueError
        ``score`` has no relative table (the message lists the scores that have one).
    """
    from harness.scores import resolve

    rcol = resolve(score)
    if rcol is None or rcol.relative_name not in ev.relative:
        names = sorted(c for c in ev.relative.columns if resolve(c) is not None)
        raise ValueError(f"score {score!r} has no relative table; choose one of {names}")
    from harness.report.sections import _variables

    subs = [s for s in (subperiods or ("full",)) if s in set(ev.relative["subperiod"])]
    out = []
    for sp in subs:
        out += key_tables(ev, score=score, subperiod=sp, variables=_variables(ev))
    return out


def score_header(ev, score: str = "crps") -> str:
    """The lines above the score tables: what the number is, against whom, under which truth."""
    from harness.scores import resolve

    rcol = resolve(score)
    better = "< 0" if rcol.score.versus == "difference" else "< 1"
    short = rcol.relative_label.removesuffix(" ratio")
    return (f"Relative {short}: {rcol.relative_label} against the benchmark '{ev.benchmark}' ({better} = better), "
            f"truth '{ev.truth}'. Marks: {_test_label(ev)} against the benchmark: ↓ significantly better, "
            "↑ significantly worse, *** 1 %, ** 5 %, * 10 % (none when n is too small); '<' lowest in its "
            "column; p and n in each cell.")


def relative_text(ev, score: str = "crps", subperiods=("full",)) -> str:
    """Relative-score tables per variable (and sub-period) as aligned text, with their header."""
    return score_header(ev, score) + "\n\n" + "\n".join(t.to_text() for t in score_tables(ev, score, subperiods))


def decision_table(verdicts, *, since: bool = False, variables=None) -> DecisionTable:
    """The decision table of a :class:`harness.verdicts.Verdicts` (``since``: with the change column)."""
    return DecisionTable.from_verdicts(verdicts, since=since, variables=variables)


def decision_text(verdicts, variables=None) -> str:
    """The decision table for the terminal: one line per candidate × variable × band, the reasons below."""
    return decision_table(verdicts, variables=variables).to_text()


def sensitivity_lines(sens) -> list[str]:
    """The sensitivity check's statements, one line per model, then the ranking and exposure lines."""
    return [ln for ln in sens.summary().splitlines()[2:] if ln.strip()]
