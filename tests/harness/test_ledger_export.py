"""``vintage-harness ledger export``: the ledger as a tidy table of quantiles per forecast.

Quantiles are checked against pandas' ``Series.quantile`` (linear interpolation, Hyndman and
Fan 1996, definition 7), computed independently per cell from the ledger's draws.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from harness.backtest import read_ledger, run
from harness.cli import app
from harness.spec import load_spec
from tests.harness.conftest import write_spec


@pytest.fixture(scope="module")
def ran(tmp_path_factory, small_store):
    d = tmp_path_factory.mktemp("ledger-export")
    spec = load_spec(write_spec(d, small_store, d / "run"))
    run(spec, jobs=1, progress=False)
    return spec.out


def test_parquet_export_is_tidy_and_matches_pandas_quantiles(ran, tmp_path):
    out = tmp_path / "q.parquet"
    res = CliRunner().invoke(app, ["ledger", "export", str(ran), "--out", str(out), "--quantiles", "0.1,0.5,0.9"])
    assert res.exit_code == 0, res.output
    t = pd.read_parquet(out)
    assert list(t.columns) == ["model", "origin", "variable", "horizon", "target_period", "quantile", "value",
                               "mean", "sd"]
    assert t["horizon"].dtype == np.int64 and t["quantile"].dtype == np.float64
    assert pd.api.types.is_datetime64_any_dtype(t["origin"])
    led = read_ledger(ran)
    ok = led.frame()["ok"]
    assert len(t) == 3 * int(ok.sum())
    # one cell, recomputed from the draws with pandas
    row = t.iloc[4]
    draws = led.draws.sel(model=row["model"], origin=row["origin"], variable=row["variable"],
                          horizon=row["horizon"]).values.astype(np.float64)
    assert row["value"] == pytest.approx(pd.Series(draws).quantile(row["quantile"]), rel=1e-12)
    assert row["mean"] == pytest.approx(draws.mean(), rel=1e-12)
    assert row["sd"] == pytest.approx(pd.Series(draws).std(), rel=1e-12)


def test_csv_export_and_model_filter(ran, tmp_path):
    out = tmp_path / "q.csv"
    res = CliRunner().invoke(app, ["ledger", "export", str(ran), "--out", str(out), "--models", "ar"])
    assert res.exit_code == 0, res.output
    t = pd.read_csv(out)
    assert set(t["model"]) == {"ar"} and sorted(t["quantile"].unique()) == [0.05, 0.1, 0.25, 0.5, 0.75, 0.9, 0.95]


@pytest.mark.parametrize("args, needle", [
    (["--quantiles", "0.5,1.2"], "strictly between 0 and 1"),
    (["--quantiles", "half"], "not a comma-separated list"),
    (["--models", "nosuch"], "not in the run"),
])
def test_bad_options_are_usage_errors_and_write_nothing(ran, tmp_path, args, needle):
    out = tmp_path / "q.parquet"
    res = CliRunner().invoke(app, ["ledger", "export", str(ran), "--out", str(out), *args])
    assert res.exit_code == 2 and needle in res.output and not out.exists()


def test_bad_suffix_and_missing_run(tmp_path):
    res = CliRunner().invoke(app, ["ledger", "export", str(tmp_path), "--out", str(tmp_path / "q.xlsx")])
    assert res.exit_code == 2 and ".parquet or .csv" in res.output
    res = CliRunner().invoke(app, ["ledger", "export", str(tmp_path / "none"), "--out", str(tmp_path / "q.csv")])
    assert res.exit_code == 1 and res.output.startswith("error:")
