"""``vintage-harness ledger …``: a run's stored forecasts as tidy files for other tools.

Exit codes: 0 success; 1 a data or input error (no run, a damaged ledger); 2 a usage error
(bad quantile levels, an output suffix other than ``.parquet`` or ``.csv``).
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from harness.cli._common import USAGE_ERROR, fail, friendly

app = typer.Typer(no_args_is_help=True, add_completion=False, rich_markup_mode=None)

_DEFAULT_LEVELS = "0.05,0.1,0.25,0.5,0.75,0.9,0.95"


def _levels(text: str) -> list[float]:
    """Parse ``0.05,0.5,0.95`` into floats strictly inside (0, 1), or fail with exit 2."""
    try:
        levels = [float(x) for x in text.split(",") if x.strip()]
    except ValueError:
        fail(f"--quantiles: {text!r} is not a comma-separated list of numbers", code=USAGE_ERROR)
    if not levels or not all(0.0 < q < 1.0 for q in levels):
        fail(f"--quantiles: levels must lie strictly between 0 and 1, got {text!r}", code=USAGE_ERROR)
    return levels


@app.command("export")
@friendly
def export_cmd(
    run_dir: Annotated[Path, typer.Argument(help="A run directory (holds run.json).")],
    out: Annotated[Path, typer.Option("--out", "-o", help="The file to write: .parquet or .csv.")],
    quantiles: Annotated[str, typer.Option("--quantiles", help="Comma-separated quantile levels.")]
    = _DEFAULT_LEVELS,
    models: Annotated[str | None, typer.Option("--models", help="Comma-separated models (default: all, "
                                               "pools included).")] = None,
) -> None:
    """Write the ledger as a tidy table: one row per forecast and quantile level.

    Columns: model, origin, variable, horizon, target_period, quantile, value, mean, sd.
    """
    suffix = out.suffix.lower()
    if suffix not in (".parquet", ".csv"):
        fail(f"--out {out}: the suffix must be .parquet or .csv", code=USAGE_ERROR)
    levels = _levels(quantiles)
    from harness.backtest import read_ledger

    ledger = read_ledger(run_dir)
    table = ledger.quantiles(levels)
    if models:
        wanted = [m.strip() for m in models.split(",") if m.strip()]
        unknown = sorted(set(wanted) - set(ledger.models))
        if unknown:
            fail(f"--models: {unknown} not in the run (it has {ledger.models})", code=USAGE_ERROR)
        table = table[table["model"].isin(wanted)].reset_index(drop=True)
    out.parent.mkdir(parents=True, exist_ok=True)
    if suffix == ".parquet":
        from vintages import atomic_write_bytes

        atomic_write_bytes(out, table.to_parquet(index=False))
    else:
        from harness.csvsafe import write_csv

        write_csv(table, out)
    n_forecasts = len(table) // max(len(set(levels)), 1)
    typer.echo(f"wrote {out}: {n_forecasts} forecasts × {len(set(levels))} quantiles ({len(table)} rows)")
