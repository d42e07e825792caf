"""The news command on a run: contributions add up to the change of the model's point forecast."""

from __future__ import annotations

import numpy as np
import pytest
from typer.testing import CliRunner

from harness.backtest import run
from harness.cli import app
from harness.evaluation.news import news_for_run
from harness.spec import load_spec
from tests.harness.conftest import write_spec


@pytest.fixture(scope="module")
def news_run(tmp_path_factory, small_store):
    d = tmp_path_factory.mktemp("news")
    p = write_spec(d, small_store, d / "run", '[models.bvar]\ntype = "bvar"\nlags = 2\n[models.dfm]\ntype = "dfm"\n')
    p.write_text(p.read_text().replace('variables = ["gdp", "cpi"]', 'variables = ["gdp"]'))
    spec = load_spec(p)
    run(spec, jobs=1, progress=False)
    return spec


@pytest.mark.parametrize("model", ["bvar", "dfm"])
def test_news_adds_up_between_the_last_two_origins(news_run, model):
    """news + revisions + re-estimation + remainder = the forecast change (Bańbura & Modugno 2014, eq. for the news)."""
    f = news_for_run(news_run.out, model=model, horizon=0)
    parts = f[f["kind"].astype(str) != "total"]["contribution"].sum()
    total = float(f[f["kind"].astype(str) == "total"]["contribution"].iloc[0])
    assert parts == pytest.approx(total, abs=1e-9)
    assert total == pytest.approx(f.attrs["forecast_new"] - f.attrs["forecast_old"], abs=1e-9)
    assert np.isfinite(f["contribution"]).all()


def test_news_command_prints_the_table_and_refuses_bad_models(news_run):
    """``vintage-harness news RUN`` prints contributions by variable; a model without a decomposition exits 2."""
    runner = CliRunner()
    res = runner.invoke(app, ["news", str(news_run.out)])
    assert res.exit_code == 0 and "total" in res.output and "reestimation" in res.output
    bad = runner.invoke(app, ["news", str(news_run.out), "--model", "ar"])
    assert bad.exit_code == 2 and "no news decomposition" in bad.output
