"""The ``harness`` command: command groups joined with ``add_typer``."""

from __future__ import annotations

import typer

from harness.cli import vintages_cmd, workflow_cmd

app = typer.Typer(
    name="harness",
    help="Real-time vintage backtesting: keep every release, rebuild what was known at each "
    "forecast origin, refit models in parallel, score, and report for the model review.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)
app.add_typer(vintages_cmd.app, name="vintages", help="The vintage store: ingest, inspect, as-of views, revisions.")
workflow_cmd.register(app)


def main() -> None:
    """Entry point of the ``harness`` console script."""
    app()


if __name__ == "__main__":
    main()
