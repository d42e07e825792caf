"""Writing an evaluation's tables: per-forecast scores and every table as CSV (and Parquet)."""

from __future__ import annotations

import json
from pathlib import Path
from typing import TYPE_CHECKING

import pandas as pd

if TYPE_CHECKING:
    from harness.evaluation.evaluator import Evaluation


def write_forecasts(ev: Evaluation, path: str | Path) -> Path:
    """Write the per-forecast scores (sub-periods joined by ';'), atomically: CSV, or Parquet by suffix."""
    from harness.csvsafe import write_csv
    from vintages import atomic_write_bytes

    path = Path(path)
    f = ev.forecasts.assign(subperiods=ev.forecasts["subperiods"].map(";".join))
    if path.suffix.lower() in (".parquet", ".pq"):
        atomic_write_bytes(path, f.to_parquet(index=False))
        return path
    return write_csv(f, path)


def _plain(frame: pd.DataFrame) -> pd.DataFrame:
    """Categoricals as text (Parquet keeps every other dtype)."""
    out = frame.copy()
    for c in out.columns:
        if isinstance(out[c].dtype, pd.CategoricalDtype):
            out[c] = out[c].astype(str)
    return out


def save(ev: Evaluation, path: str | Path) -> Path:
    """Write the evaluation's tables under ``path`` (a directory): CSV for people, Parquet typed."""
    from harness.csvsafe import write_csv
    from vintages import atomic_write_bytes

    path = Path(path)
    path.mkdir(parents=True, exist_ok=True)
    write_forecasts(ev, path / "forecast_scores.csv")
    write_forecasts(ev, path / "forecast_scores.parquet")
    for name in ("table", "relative", "tests", "mcs", "calibration", "fluctuation"):
        frame = getattr(ev, name)
        write_csv(frame, path / f"{name}.csv")
        atomic_write_bytes(path / f"{name}.parquet", _plain(frame).to_parquet(index=False))
    atomic_write_bytes(path / "evaluation.json",
                       (json.dumps({"truth": ev.truth, "benchmark": ev.benchmark, "chronology": ev.chronology_source,
                                    "subperiods": ev.subperiod_names}, indent=1) + "\n").encode())
    return path
