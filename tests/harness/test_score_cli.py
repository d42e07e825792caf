"""``vintage-harness score`` on a run: relative-score tables, tests, sub-periods dated when no chronology is given."""

from __future__ import annotations

import pandas as pd
from typer.testing import CliRunner

from harness.backtest import run
from harness.cli import app
from harness.evaluation import evaluate
from harness.spec import load_spec
from tests.harness.conftest import write_spec


def test_score_prints_tables_and_dates_turning_points(tmp_path, small_store):
    """Without a chronology file, recessions are dated by Harding–Pagan and the dates are printed."""
    spec = load_spec(write_spec(tmp_path, small_store, tmp_path / "run"))
    run(spec, jobs=1, progress=False)
    res = CliRunner().invoke(app, ["score", str(spec.out), "--truth", "latest", "--save-scores",
                                   str(tmp_path / "scores")])
    assert res.exit_code == 0, res.output
    assert "Relative CRPS" in res.output and "truth 'latest'" in res.output
    assert "Harding" in res.output and "dated turning points" in res.output
    scores = pd.read_csv(tmp_path / "scores" / "forecast_scores.csv")
    assert {"crps", "pit", "truth", "subperiods"} <= set(scores.columns)
    # the CSV holds exactly the evaluation's per-forecast CRPS
    ev = evaluate(spec.out, "latest")
    assert len(scores) == len(ev.forecasts)
    assert abs(scores["crps"].sum() - ev.forecasts["crps"].sum()) < 1e-9


def test_score_refuses_an_unknown_truth(tmp_path, small_store):
    """A malformed truth rule is a one-line error with exit code 2 (usage), listing the valid forms."""
    spec = load_spec(write_spec(tmp_path, small_store, tmp_path / "run"))
    run(spec, jobs=1, progress=False)
    res = CliRunner().invoke(app, ["score", str(spec.out), "--truth", "final"])
    assert res.exit_code == 2
    assert res.output.startswith("error:") and "first" in res.output and "latest" in res.output


def test_forecasts_without_a_truth_are_not_counted_as_scored(tmp_path, small_store):
    """A forecast whose truth is not yet published is 'ok' (it exists) but not 'scored'; counts agree."""
    spec = load_spec(write_spec(tmp_path, small_store, tmp_path / "run"))
    run(spec, jobs=1, progress=False)
    ev = evaluate(spec.out, "release:3")
    f = ev.forecasts
    assert (~f["scored"]).any() and f.loc[~f["scored"], "crps"].isna().all()
    cell = f[(f.model == "ar") & (f.variable == "gdp") & (f.horizon == 1)]
    n = ev.table[(ev.table.model == "ar") & (ev.table.variable == "gdp") & (ev.table.horizon == 1)
                 & (ev.table.subperiod == "full")]["n"].iloc[0]
    assert int(cell["scored"].sum()) == n and int(cell["cover_90"].notna().sum()) == n


def test_a_truth_nothing_has_yet_says_so(tmp_path, small_store):
    """``--truth release:99``: one line saying no forecast has that truth yet, not an internal error."""
    spec = load_spec(write_spec(tmp_path, small_store, tmp_path / "run"))
    run(spec, jobs=1, progress=False)
    res = CliRunner().invoke(app, ["score", str(spec.out), "--truth", "release:99"])
    assert res.exit_code != 0 and "no forecast has a truth under 'release:99'" in res.output
    assert "only" in res.output  # the reason of one missing truth, e.g. "only 3 releases ... so far"
