"""``vintage-harness run | score | report | sensitivity | demo``: the backtest workflow commands."""

from __future__ import annotations

from enum import Enum
from pathlib import Path
from typing import Annotated

import typer

from harness.cli._common import TASKS_FAILED, friendly, output_format


class Backend(str, Enum):
    loky = "loky"
    dask = "dask"
    threading = "threading"
    sequential = "sequential"


def _score_choices() -> str:
    # read from the score registry (imports nothing numerical)
    from harness.scores.registry import columns

    return ", ".join(c.name for c in columns() if c.is_loss)


_SCORE_CHOICES = _score_choices()

SpecArg = Annotated[Path, typer.Argument(help="The backtest spec (TOML).")]
RunArg = Annotated[Path, typer.Argument(help="A run directory written by 'vintage-harness run'.")]


_BACKEND_HELP = ("joblib backend: loky (local processes, the default), dask (a dask.distributed cluster), "
                 "threading or sequential (one process, for debugging).")
_FORMAT_HELP = ("Output format: text (aligned, ready to paste), md, tex, csv or parquet (to a file only). "
                "Default: from the --out suffix, else text.")


_fmt = output_format

def _display(quiet: bool):
    from harness.ui import Display

    return Display(quiet=quiet)


@friendly
def run_cmd(
    spec: SpecArg,
    jobs: Annotated[int | None, typer.Option("--jobs", "-j", min=1, help="Parallel workers (default: all cores).")] = None,
    backend: Annotated[Backend, typer.Option(metavar="BACKEND", show_choices=False, help=_BACKEND_HELP)] = Backend.loky,
    scheduler: Annotated[str | None, typer.Option(help="Address of a dask scheduler (tcp://host:8786); "
                                                  "without it --backend dask starts a local cluster.")] = None,
    out: Annotated[Path | None, typer.Option(help="Run directory (overrides the spec's \\[run] out).")] = None,
    explain: Annotated[bool, typer.Option("--explain", help="Print the resolved plan and stop.")] = False,
    retry_failed: Annotated[bool, typer.Option("--retry-failed", help="Recompute tasks that failed before.")] = False,
    quiet: Annotated[bool, typer.Option("--quiet", "-q", help="No progress output.")] = False,
) -> None:
    """Refit every model at every origin of SPEC (cached, resumable) and write the ledger."""
    from harness.backtest import make_plan, run
    from harness.spec import load_spec

    s = load_spec(spec, out=out)
    plan = make_plan(s)
    if explain:
        typer.echo(plan.explain())
        return
    res = run(s, jobs=jobs, backend=backend.value, scheduler=scheduler, retry_failed=retry_failed,
              progress=not quiet, plan=plan)
    typer.echo(res.summary())
    if res.failed:
        raise typer.Exit(code=TASKS_FAILED)


@friendly
def demo_cmd(
    out: Annotated[Path, typer.Option(help="Output directory.")] = Path("reports/demo"),
    data_only: Annotated[bool, typer.Option("--data-only", help="Only write the demo store, chronology and spec.")] = False,
    small: Annotated[bool, typer.Option("--small", help="A reduced run (fewer origins and draws) for a quick look.")] = False,
    jobs: Annotated[int | None, typer.Option("--jobs", "-j", min=1, help="Parallel workers (default: all cores).")] = None,
    quiet: Annotated[bool, typer.Option("--quiet", "-q", help="Print nothing but errors.")] = False,
) -> None:
    """The invented Veldmark economy end to end: store → spec → run → scores → sensitivity → report."""
    from harness.demo import run_demo

    run_demo(out, data_only=data_only, small=small, jobs=jobs, echo=typer.echo, display=_display(quiet))


class TableChoice(str, Enum):
    all = "all"
    decision = "decision"
    scores = "scores"
    matrix = "matrix"


@friendly
def score_cmd(
    run_dir: RunArg,
    truth: Annotated[str | None, typer.Option(help="Truth to score against: first, release:K, lag:NNND, latest, "
                                              "asof:YYYY-MM-DD (default: the spec's).")] = None,
    score: Annotated[str, typer.Option(help="Score of the tables: " + _SCORE_CHOICES + ".")] = "crps",
    benchmark: Annotated[str | None, typer.Option(help="The incumbent every model is set against (a model of the "
                                                  "run; default the spec's). No refit.")] = None,
    subperiod: Annotated[list[str] | None, typer.Option(help="Sub-period of the score tables (repeatable): full, "
                                                        "recession, expansion or a name of \\[scoring.subperiods]; "
                                                        "default full.")] = None,
    table: Annotated[TableChoice, typer.Option(help="What to show: all (the decision view and one score table per "
                                               "target), decision, scores, or matrix (every model against every "
                                               "other, per horizon, and the model confidence set). CSV and Parquet "
                                               "hold one table: scores unless --table decision or matrix.")] = TableChoice.all,
    fmt: Annotated[str | None, typer.Option("--format", help=_FORMAT_HELP)] = None,
    out: Annotated[Path | None, typer.Option(help="Write the tables to this file instead of the terminal.")] = None,
    save_scores: Annotated[Path | None, typer.Option("--save-scores", help="Also write every per-forecast score "
                                                     "and the evaluation's tables (CSV) to this directory.")] = None,
    quiet: Annotated[bool, typer.Option("--quiet", "-q", help="No progress on standard error.")] = False,
) -> None:
    """Score a run against a truth (no refitting): the decision view, then one score table per target."""
    from harness.cli._common import USAGE_ERROR, fail
    from harness.scores.registry import resolve

    col = resolve(score)
    if col is None or not col.is_loss:
        fail(f"unknown score {score!r}; expected one of {_SCORE_CHOICES}", code=USAGE_ERROR)
    f = _fmt(fmt, out)
    ui = _display(quiet)
    if truth is not None:
        from vintages import parse_truth

        parse_truth(truth)  # a bad rule is refused before any work (and before any progress line)

    from harness.evaluation import evaluate, save
    from harness.report.terminal import decision_table, score_header, score_tables
    from harness.report.textout import Lines, emit

    with ui.stage(f"scoring {run_dir} (scores and tests)"):
        ev = evaluate(run_dir, truth, benchmark=benchmark)
    subs = subperiod or ["full"]
    unknown = sorted(set(subs) - set(ev.subperiod_names))
    if unknown:
        fail(f"unknown sub-period(s) {unknown}; expected one of {sorted(ev.subperiod_names)}", code=USAGE_ERROR)
    tables = []
    if table in (TableChoice.all, TableChoice.decision) and not (f in ("csv", "parquet") and table is TableChoice.all):
        from harness.verdicts import decide

        with ui.stage("deciding: band tests, best set, calibration"):
            from harness.report.make import load_sensitivity
            from harness.report.sections import _variables

            # the truths side by side, when 'vintage-harness sensitivity' has written them for this run
            sens = load_sensitivity(Path(run_dir) / "sensitivity")
            tables.append(decision_table(decide(ev, sensitivity=sens), variables=_variables(ev)))
    if table in (TableChoice.all, TableChoice.scores):
        if f not in ("csv", "parquet"):
            tables.append(Lines(score_header(ev, score)))
        tables += score_tables(ev, score, subs)
    if table is TableChoice.matrix:
        from harness.report.builders import mcs_table
        from harness.report.matrix import pairwise_tables
        from harness.report.sections import _variables

        with ui.stage("pairwise tests among all models"):
            tables += pairwise_tables(ev, score=score, variables=_variables(ev))
        if f not in ("csv", "parquet"):
            tables.append(mcs_table(ev, _variables(ev)))
    lines = []
    if f in ("text", "md"):
        lines = [f"sub-periods: recession/expansion from {ev.chronology_source}"]
        if "Harding" in ev.chronology_source and len(ev.turning_points):
            lines.append("dated turning points (peak → trough): " + "; ".join(
                f"{r['peak'] if r['peak'] == r['peak'] else '…'} → {r['trough'] if r['trough'] == r['trough'] else '(open)'}"
                for _, r in ev.turning_points.iterrows()))
        if len(ev.missing):
            lines.append(f"{len(ev.missing)} target periods have no truth yet under '{ev.truth}' (not scored).")
        if table is TableChoice.all:
            lines.append("every model against every other, and the model confidence set: --table matrix")
    _, written = emit(tables, f, out, extra_lines=lines)
    if written is not None:
        ui.log(f"wrote {written}")
    if save_scores is not None:
        with ui.stage(f"writing every per-forecast score and table to {save_scores}"):
            save(ev, save_scores)


@friendly
def sensitivity_cmd(
    spec: SpecArg,
    truth: Annotated[list[str] | None, typer.Option(help="Truths to compare (repeatable); default: the spec's "
                                                    "\\[scoring] truths.")] = None,
    jobs: Annotated[int | None, typer.Option("--jobs", "-j", min=1, help="Parallel workers.")] = None,
    backend: Annotated[Backend, typer.Option(metavar="BACKEND", show_choices=False, help=_BACKEND_HELP)] = Backend.loky,
    tables_dir: Annotated[Path | None, typer.Option("--tables-dir", help="Directory for the CSV tables (default: "
                                                    "RUN/sensitivity, where 'vintage-harness report' reads them).")] = None,
    no_data: Annotated[bool, typer.Option("--no-data-check", help="Skip the pseudo-real-time rerun.")] = False,
    benchmark: Annotated[str | None, typer.Option(help="The incumbent every model is set against (default the "
                                                  "spec's). No refit.")] = None,
    fmt: Annotated[str | None, typer.Option("--format", help=_FORMAT_HELP)] = None,
    out: Annotated[Path | None, typer.Option(help="Write the truths-side-by-side table to this file.")] = None,
    quiet: Annotated[bool, typer.Option("--quiet", "-q", help="Print nothing but errors.")] = False,
) -> None:
    """How much does the verdict depend on data revisions? Truths side by side, real-time vs revised data."""
    from harness.backtest import run
    from harness.evaluation.sensitivity import sensitivity
    from harness.report.terminal import sensitivity_lines
    from harness.report.textout import emit
    from harness.report.truths import truths_table
    from harness.spec import load_spec

    f = _fmt(fmt, out)
    ui = _display(quiet)
    s = load_spec(spec)
    with ui.stage("real-time run (the backtest itself; cached tasks are not refit)", live=False):
        res = run(s, jobs=jobs, backend=backend.value, progress=not quiet, log=ui.labelled("real-time run"))
    from harness.ui import run_summary

    ui.log(run_summary(res))
    truths = tuple(truth or s.scoring.truths or ())
    data = not no_data and s.mode == "real-time"
    text = (f"scoring under {len(truths) if truths else 'the default'} truths"
            + (", then the revised-data rerun (pseudo-real-time information sets)" if data else ""))
    with ui.stage(text, live=False):
        sens = sensitivity(s, truths=truths or None, run_dir=res.run_dir, jobs=jobs, backend=backend.value,
                           progress=not quiet, data=data, benchmark=benchmark,
                           log=ui.labelled("revised-data rerun"))
    dest = sens.save(tables_dir or (s.out / "sensitivity"))
    bench = benchmark or res.manifest.benchmark
    if not quiet or out is not None:
        emit([truths_table(sens, bench, variables=list(s.targets.variables))], f, out, extra_lines=sensitivity_lines(sens) if f in ("text", "md") else ())
    ui.log(f"tables written to {dest}")


@friendly
def report_cmd(
    run_dir: RunArg,
    out: Annotated[Path | None, typer.Option(help="Output directory (default: RUN/report).")] = None,
    since: Annotated[Path | None, typer.Option(help="An earlier run directory: add 'what changed since the last review'.")] = None,
    truth: Annotated[str | None, typer.Option(help="Truth for the tables (default: the spec's).")] = None,
    benchmark: Annotated[str | None, typer.Option(help="The incumbent of the decision page (a model of the run; "
                                                  "default the spec's). No refit.")] = None,
    quiet: Annotated[bool, typer.Option("--quiet", "-q", help="Print nothing but errors.")] = False,
) -> None:
    """Write the meeting pack (report.html) and its appendix (plus Markdown, LaTeX and CSV tables)."""
    from harness.report.make import make_report

    ui = _display(quiet)
    paths = make_report(run_dir, out=out, since=since, truth=truth, benchmark=benchmark, display=ui)
    ui.echo(f"report: {paths['html']}")
    ui.echo(f"appendix: {paths['appendix']}")


@friendly
def news_cmd(
    run_dir: RunArg,
    model: Annotated[str | None, typer.Option(help="A model of the run of type dfm or bvar (default the first).")] = None,
    target: Annotated[str | None, typer.Option(help="Target variable (default the first).")] = None,
    horizon: Annotated[int, typer.Option(help="Horizon relative to the later origin's quarter (0 = nowcast).")] = 0,
    origins: Annotated[tuple[str, str] | None, typer.Option(help="Two origins of the run, earlier first "
                                                          "(default the last two).")] = None,
    fmt: Annotated[str | None, typer.Option("--format", help=_FORMAT_HELP)] = None,
    out: Annotated[Path | None, typer.Option(help="Write the table to this file instead of the terminal.")] = None,
) -> None:
    """Which release moved the forecast: split its change between two origins into news, revisions and re-estimation."""
    f = _fmt(fmt, out)
    from harness.evaluation.news import news_for_run
    from harness.models.news import news_table
    from harness.report.textout import emit, frame_table

    frame = news_for_run(run_dir, model=model, target=target, horizon=horizon,
                         origins=tuple(origins) if origins else None)
    if f == "text":  # the readable decomposition: contributions by variable, then the total
        text = news_table(frame) + "\n"
        if out is None:
            typer.echo(text, nl=False)
        else:
            from vintages import atomic_write_bytes

            atomic_write_bytes(out, text.encode("utf-8"))
        return
    a = frame.attrs
    emit([frame_table(frame.reset_index(drop=True), f"News decomposition: {a.get('model', '')}, "
                      f"{a.get('target', '')}, {a.get('origin_old', '')} to {a.get('origin_new', '')}")], f, out)


def register(app: typer.Typer) -> None:
    """Attach the workflow commands to the top-level app."""
    app.command("run")(run_cmd)
    app.command("score")(score_cmd)
    app.command("sensitivity")(sensitivity_cmd)
    app.command("report")(report_cmd)
    app.command("demo")(demo_cmd)
    app.command("news")(news_cmd)
