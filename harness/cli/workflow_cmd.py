"""``harness run | score | report | sensitivity | demo``: the backtest workflow commands."""

from __future__ import annotations

from enum import Enum
from pathlib import Path
from typing import Annotated

import typer

from harness.cli._common import friendly


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
RunArg = Annotated[Path, typer.Argument(help="A run directory written by 'harness run'.")]


@friendly
def run_cmd(
    spec: SpecArg,
    jobs: Annotated[int | None, typer.Option("--jobs", "-j", min=1, help="Parallel workers (default: all cores).")] = None,
    backend: Annotated[Backend, typer.Option(help="loky (local processes) or dask (a dask.distributed cluster).")] = Backend.loky,
    scheduler: Annotated[str | None, typer.Option(help="Address of a dask scheduler (tcp://host:8786); "
                                                  "without it --backend dask starts a local cluster.")] = None,
    out: Annotated[Path | None, typer.Option(help="Run directory (overrides [run] out).")] = None,
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
        raise typer.Exit(code=1)


@friendly
def demo_cmd(
    out: Annotated[Path, typer.Option(help="Output directory.")] = Path("reports/demo"),
    data_only: Annotated[bool, typer.Option("--data-only", help="Only write the demo store, chronology and spec.")] = False,
    small: Annotated[bool, typer.Option("--small", help="A reduced run (fewer origins and draws) for a quick look.")] = False,
    jobs: Annotated[int | None, typer.Option("--jobs", "-j", min=1, help="Parallel workers (default: all cores).")] = None,
) -> None:
    """The invented Veldmark economy end to end: store → spec → run → scores → sensitivity → report."""
    from harness.demo import run_demo

    run_demo(out, data_only=data_only, small=small, jobs=jobs, echo=typer.echo)


@friendly
def score_cmd(
    run_dir: RunArg,
    truth: Annotated[str | None, typer.Option(help="Truth to score against: first, release:K, lag:NNND, latest, "
                                              "asof:YYYY-MM-DD (default: the spec's).")] = None,
    out: Annotated[Path | None, typer.Option(help="Write the per-forecast scores to this CSV file "
                                             "(tables beside it).")] = None,
    score: Annotated[str, typer.Option(help="Score shown in the terminal tables: " + _SCORE_CHOICES + ".")] = "crps",
    benchmark: Annotated[str | None, typer.Option(help="The incumbent every model is set against (a model of the "
                                                  "run; default the spec's). No refit.")] = None,
) -> None:
    """Score a run against a truth (no refitting) and print relative-score tables with tests."""
    from harness.cli._common import USAGE_ERROR, fail
    from harness.scores.registry import resolve

    col = resolve(score)
    if col is None or not col.is_loss:
        fail(f"unknown score {score!r}; expected one of {_SCORE_CHOICES}", code=USAGE_ERROR)

    from harness.evaluation import evaluate, save, write_forecasts
    from harness.report.terminal import decision_text, relative_text

    ev = evaluate(run_dir, truth, benchmark=benchmark)
    from harness.verdicts import decide

    typer.echo(decision_text(decide(ev)))
    typer.echo(relative_text(ev, score))
    typer.echo(f"sub-periods: recession/expansion from {ev.chronology_source}")
    if "Harding" in ev.chronology_source and len(ev.turning_points):
        typer.echo("dated turning points (peak → trough):")
        for _, r in ev.turning_points.iterrows():
            typer.echo(f"  {r['peak'] if r['peak'] == r['peak'] else '…'} → "
                       f"{r['trough'] if r['trough'] == r['trough'] else '(open)'}")
    if len(ev.missing):
        typer.echo(f"{len(ev.missing)} target periods have no truth yet under '{ev.truth}' (not scored).")
    if out is not None:
        write_forecasts(ev, out)
        save(ev, out.parent / (out.stem + "_tables"))
        typer.echo(f"wrote {out} and tables in {out.parent / (out.stem + '_tables')}")


@friendly
def sensitivity_cmd(
    spec: SpecArg,
    truth: Annotated[list[str] | None, typer.Option(help="Truths to compare (repeatable); default: the spec's "
                                                    "[scoring] truths.")] = None,
    jobs: Annotated[int | None, typer.Option("--jobs", "-j", min=1, help="Parallel workers.")] = None,
    backend: Annotated[Backend, typer.Option(help="joblib backend for the pseudo-real-time rerun.")] = Backend.loky,
    out: Annotated[Path | None, typer.Option(help="Directory for the CSV tables (default: RUN/sensitivity).")] = None,
    no_data: Annotated[bool, typer.Option("--no-data-check", help="Skip the pseudo-real-time rerun.")] = False,
    benchmark: Annotated[str | None, typer.Option(help="The incumbent every model is set against (default the "
                                                  "spec's). No refit.")] = None,
) -> None:
    """How much does the verdict depend on data revisions? Truths side by side, real-time vs revised data."""
    from harness.evaluation.sensitivity import sensitivity
    from harness.spec import load_spec

    s = load_spec(spec)
    res = sensitivity(s, truths=truth or None, jobs=jobs, backend=backend.value, progress=True, data=not no_data,
                      benchmark=benchmark)
    dest = res.save(out or (s.out / "sensitivity"))
    typer.echo(res.summary())
    typer.echo(f"tables written to {dest}")


@friendly
def report_cmd(
    run_dir: RunArg,
    out: Annotated[Path | None, typer.Option(help="Output directory (default: RUN/report).")] = None,
    since: Annotated[Path | None, typer.Option(help="An earlier run directory: add 'what changed since the last review'.")] = None,
    truth: Annotated[str | None, typer.Option(help="Truth for the tables (default: the spec's).")] = None,
    benchmark: Annotated[str | None, typer.Option(help="The incumbent of the decision page (a model of the run; "
                                                  "default the spec's). No refit.")] = None,
) -> None:
    """Write the self-contained HTML review report (plus Markdown, LaTeX and CSV tables)."""
    from harness.report.make import make_report

    paths = make_report(run_dir, out=out, since=since, truth=truth, echo=typer.echo, benchmark=benchmark)
    typer.echo(f"report: {paths['html']}")


@friendly
def news_cmd(
    run_dir: RunArg,
    model: Annotated[str | None, typer.Option(help="A model of the run of type dfm or bvar (default the first).")] = None,
    target: Annotated[str | None, typer.Option(help="Target variable (default the first).")] = None,
    horizon: Annotated[int, typer.Option(help="Horizon relative to the later origin's quarter (0 = nowcast).")] = 0,
    origins: Annotated[tuple[str, str] | None, typer.Option(help="Two origins of the run, earlier first "
                                                          "(default the last two).")] = None,
    fmt: Annotated[str, typer.Option("--format", help="text or csv.")] = "text",
) -> None:
    """Which release moved the forecast: split its change between two origins into news, revisions and re-estimation."""
    from harness.cli._common import USAGE_ERROR, fail

    if fmt not in ("text", "csv"):
        fail(f"unknown format {fmt!r}; expected one of csv, text", code=USAGE_ERROR)
    from harness.evaluation.news import news_for_run
    from harness.models.news import news_table

    frame = news_for_run(run_dir, model=model, target=target, horizon=horizon,
                         origins=tuple(origins) if origins else None)
    if fmt == "csv":
        import sys

        sys.stdout.write(frame.to_csv(index=False))
    else:
        typer.echo(news_table(frame))


def register(app: typer.Typer) -> None:
    """Attach the workflow commands to the top-level app."""
    app.command("run")(run_cmd)
    app.command("score")(score_cmd)
    app.command("sensitivity")(sensitivity_cmd)
    app.command("report")(report_cmd)
    app.command("demo")(demo_cmd)
    app.command("news")(news_cmd)
