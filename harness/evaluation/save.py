"""Writing an evaluation's tables: per-forecast scores and every table as CSV (and Parquet)."""

from __future__ import annotations

import json
from pathlib import Path
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from harness.evaluation.evaluator import Evaluation


def write_forecasts(ev: Evaluation, path: str | Path) -> Path:
    """Write the per-forecast scores as CSV (sub-periods joined by ';'), atomically."""
    path = Path(path)
    f = ev.forecasts.assign(subperiods=ev.forecasts["subperiods"].map(";".join))
    tmp = path.with_name(path.name + ".tmp")
    f.to_csv(tmp, index=False)
    tmp.replace(path)
    return path


def save(ev: Evaluation, path: str | Path) -> Path:
    """Write the evaluation's tables as CSV files under ``path`` (a directory)."""
    path = Path(path)
    path.mkdir(parents=True, exist_ok=True)
    write_forecasts(ev, path / "forecast_scores.csv")
    for name in ("table", "relative", "tests", "mcs", "calibration", "fluctuation"):
        getattr(ev, name).to_csv(path / f"{name}.csv", index=False)
    (path / "evaluation.json").write_text(json.dumps({"truth": ev.truth, "benchmark": ev.benchmark,
                                                      "chronology": ev.chronology_source,
                                                      "subperiods": ev.subperiod_names}, indent=1) + "\n")
    return path
