"""Glue for ``harness report``: evaluate a run, gather sensitivity and history, write the report."""

from __future__ import annotations

from pathlib import Path

import pandas as pd


def load_sensitivity(path: str | Path):
    """Read the CSV tables that :meth:`Sensitivity.save` wrote (None when absent)."""
    from harness.evaluation.sensitivity import Sensitivity

    path = Path(path)
    if not (path / "sensitivity_truths.csv").is_file():
        return None

    def rd(name):
        p = path / name
        try:
            return pd.read_csv(p) if p.is_file() else pd.DataFrame()
        except pd.errors.EmptyDataError:
            return pd.DataFrame()

    tt = rd("sensitivity_truths.csv")
    truths = tuple(pd.unique(tt["truth"])) if len(tt) else ()
    return Sensitivity(tt, rd("sensitivity_rankings.csv"), rd("sensitivity_data.csv"), rd("revision_exposure.csv"),
                       rd("sensitivity_verdicts.csv"), truths, None)


def make_report(run_dir, *, out=None, since=None, truth=None, sensitivity=None, evaluation=None, echo=print,
                benchmark: str | None = None) -> dict:
    """Evaluate ``run_dir`` and write its review report; return the written paths.

    ``benchmark`` chooses the incumbent the decision page sets every model against (default the
    spec's); no refit is needed.
    """
    from harness.backtest.ledger import read_ledger
    from harness.evaluation import evaluate
    from harness.report import build_report

    run_dir = Path(run_dir)
    ledger = read_ledger(run_dir)
    ev = evaluation or evaluate(ledger, truth, benchmark=benchmark)
    if sensitivity is None:
        sensitivity = load_sensitivity(run_dir / "sensitivity")
    # fan charts need the outcomes under the first and latest truths: reuse what the
    # sensitivity check already scored
    known = dict(getattr(sensitivity, "evaluations", None) or {}, **{ev.truth: ev})
    fan = {t: known[t] if t in known else evaluate(ledger, t, tests=False, benchmark=ev.benchmark)
           for t in ("first", "latest")}
    earlier = evaluate(Path(since), ev.truth, benchmark=ev.benchmark) if since else None
    out = Path(out) if out else run_dir / "report"
    paths = build_report(ev, out, sensitivity=sensitivity, ledger=ledger, fan_truths=fan, since=earlier)
    paths.setdefault("html", out / "report.html")
    return paths
