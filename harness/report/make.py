"""Glue for ``vintage-harness report``: evaluate a run, gather sensitivity and history, write the report, show progress."""

from __future__ import annotations

from pathlib import Path


def load_sensitivity(path: str | Path):
    """The sensitivity tables a run keeps in ``path`` (:meth:`Sensitivity.load`), None when absent."""
    from harness.evaluation.sensitivity import Sensitivity

    return Sensitivity.load(path)


def make_report(run_dir, *, out=None, since=None, truth=None, sensitivity=None, evaluation=None, echo=None,
                benchmark: str | None = None, display=None, diagnostics=None, news: bool = True,
                verdicts=None, ledger=None) -> dict:
    """Evaluate ``run_dir`` and write its review report (pack and appendix); return the written paths.

    Parameters
    ----------
    run_dir : path
        A run directory.
    out : path, optional
        Output directory (default ``RUN/report``: one place per run, whoever writes it).
    since : path, optional
        The run directory shown at the last review (adds the change column and "What changed").
    truth, benchmark : str, optional
        The headline truth and the incumbent (default the spec's); no refit.
    sensitivity, evaluation : optional
        Already computed (the demo passes them); otherwise read from ``RUN/sensitivity`` and
        evaluated here.
    display : harness.ui.Display, optional
        Shows each stage (default: a display on standard error; ``Display(quiet=True)`` for none).
    diagnostics : DataFrame, optional
        Model diagnostics ``model, origin, name, value`` (default: the table the manifest names).
    verdicts : harness.verdicts.Verdicts, optional
        Already decided for this evaluation, sensitivity and earlier review (default: decided here).
    ledger : harness.backtest.Ledger, optional
        The run's ledger, when the caller has read it already (default: read here).
    news : bool
        Compute the news decomposition for runs with a dfm or bvar model.

    Returns
    -------
    dict
        The paths :func:`harness.report.build_report` wrote, plus ``"html"`` (the pack) and
        ``"appendix"``; ``"timings"`` holds the seconds of each stage.
    """
    from harness.backtest.ledger import read_ledger
    from harness.evaluation import evaluate
    from harness.report import build_report
    from harness.report.inputs import gather_extras
    from harness.ui import Display

    ui = display or Display(quiet=echo is False)
    run_dir = Path(run_dir)
    if ledger is None:
        with ui.stage(f"reading the run {run_dir}"):
            ledger = read_ledger(run_dir)
    if evaluation is None:
        with ui.stage(f"scoring under the truth '{truth or ledger.manifest.scoring.truth or 'first'}' "
                      "(scores and tests)"):
            ev = evaluate(ledger, truth, benchmark=benchmark)
    else:
        ev = evaluation
    if sensitivity is None:
        sensitivity = load_sensitivity(run_dir / "sensitivity")
    # the charts need the outcomes under the first and latest truths: reuse what the
    # sensitivity check already scored
    known = dict(getattr(sensitivity, "evaluations", None) or {}, **{ev.truth: ev})
    fan = {}
    for t in ("first", "latest"):
        if t in known:
            fan[t] = known[t]
        else:
            with ui.stage(f"outcomes under the truth '{t}' for the charts"):
                fan[t] = evaluate(ledger, t, tests=False, benchmark=ev.benchmark)
    earlier = None
    if since:
        with ui.stage(f"scoring the earlier review {since}"):
            earlier = evaluate(Path(since), ev.truth, benchmark=ev.benchmark)
    with ui.stage("reading the store: history at the latest origin, revision statistics, news") as st:
        extras = gather_extras(run_dir, ledger.manifest, news=news, log=st.note, diagnostics=ledger.diagnostics)
    if verdicts is None:
        with ui.stage("deciding: band tests, best set, calibration, truths"):
            from harness.verdicts import decide

            verdicts = decide(ev, sensitivity=sensitivity, since=earlier)
    out = Path(out) if out else run_dir / "report"
    with ui.stage(f"writing the pack and the appendix to {out}", live=False):
        # a bar on a terminal; in a log the stage's line says enough for a few seconds' work
        bar = ui.tasks(0, label="sections", description="sections") if ui.tty else None
        paths = build_report(ev, out, sensitivity=sensitivity, ledger=ledger, fan_truths=fan, since=earlier,
                             verdicts=verdicts, extras=extras, diagnostics=diagnostics, progress=bar)
    paths["html"] = paths["report.html"]
    paths["appendix"] = paths["appendix.html"]
    paths["timings"] = ui.timings()
    return paths
