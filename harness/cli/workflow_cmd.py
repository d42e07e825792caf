"""``harness run | score | report | sensitivity | demo``: the backtest workflow commands."""

from __future__ import annotations

from enum import Enum
from pathlib import Path
from typing import Annotated

import typer

from harness.cli._common import fail, friendly


class Backend(str, Enum):
    loky = "loky"
    dask = "dask"
    threading = "threading"
    sequential = "sequential"


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
    from harness.runner import make_plan, run
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


def register(app: typer.Typer) -> None:
    """Attach the workflow commands to the top-level app."""
    app.command("run")(run_cmd)
    app.command("demo")(demo_cmd)
