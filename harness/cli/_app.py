"""The ``harness`` command: command groups joined with ``add_typer``.

Start-up is kept short: help is plain text (``rich_markup_mode=None``: typer's rich formatter
imports rich's Markdown stack, about 0.1 s, for help that uses no markup), and every numerical
library is imported inside the commands that use it (``tests/architecture/test_import_time.py``
checks each command).
"""

from __future__ import annotations

import typer

from harness.cli import cache_cmd, ledger_cmd, vintages_cmd, workflow_cmd

app = typer.Typer(
    name="vintage-harness",
    help="Real-time vintage backtesting: keep every release, rebuild what was known at each "
    "forecast origin, refit models in parallel, score, and report for the model review.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
)
# the sub-application keeps its own markup mode: plain help there too (no rich import)
vintages_cmd.app.rich_markup_mode = None
app.add_typer(vintages_cmd.app, name="vintages", help="The vintage store: ingest, inspect, as-of views, revisions.")
app.add_typer(cache_cmd.app, name="cache", help="The task cache shared by runs: where it is, what it holds, "
              "cleaning it.")
app.add_typer(ledger_cmd.app, name="ledger", help="A run's stored forecasts: tidy exports of quantiles.")
workflow_cmd.register(app)


def main() -> None:
    """Entry point of the ``vintage-harness`` console script."""
    from harness.backtest.process import defer_dask_probe_on_import

    defer_dask_probe_on_import()  # this process builds no dask array: skip xarray's dask import
    app(prog_name="vintage-harness")


if __name__ == "__main__":
    main()
