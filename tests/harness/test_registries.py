"""The registries are the one place per concept: scores, tests and report sections read everywhere alike."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from harness.backtest import run
from harness.cli import app
from harness.compare.registry import TestResult, cell_seed, comparison_tests
from harness.evaluation import evaluate
from harness.report import SECTION_IDS, SECTIONS, build_report
from harness.report.terminal import relative_text
from harness.scores import columns, relative_to, resolve
from harness.spec import load_spec
from tests.harness.conftest import write_spec

runner = CliRunner()


@pytest.fixture(scope="module")
def evaluated(tmp_path_factory, small_store):
    """A small run scored under the first truth, with its report written."""
    d = tmp_path_factory.mktemp("reg")
    spec = load_spec(write_spec(d, small_store, d / "run"))
    run(spec, jobs=1, progress=False)
    ev = evaluate(spec.out, "first")
    paths = build_report(ev, d / "report")
    return ev, paths, spec


def test_interval_score_reaches_every_output(evaluated):
    """interval_50/80 are in --help, the terminal table, the CSV files and the report (one declaration)."""
    ev, paths, spec = evaluated
    helptext = runner.invoke(app, ["score", "--help"], terminal_width=200).output
    assert "interval_50" in helptext and "interval_80" in helptext
    assert {"interval_50", "interval_80"} <= set(ev.relative.columns)
    text = relative_text(ev, "interval_80")
    assert "interval score 80% ratio" in text
    csvs = [p for k, p in paths.items() if k.startswith("tables/interval") and k.endswith(".csv")]
    assert csvs and all(set(pd.read_csv(p)["score"]) <= {"interval_50", "interval_80"} for p in csvs)
    html = paths["report.html"].read_text() + paths["appendix.html"].read_text()
    assert "interval score 80% ratio" in html


def test_same_label_same_number_everywhere(evaluated):
    """se_mean is the RMSE ratio in the relative table, the terminal and the report CSV alike."""
    ev, paths, spec = evaluated
    col = resolve("se_mean")
    assert col.relative_label == "RMSE ratio" and col.score.versus == "sqrt_ratio"
    rel = ev.relative.set_index(["model", "variable", "horizon", "subperiod"])["se_mean"]
    # RMSE ratio = sqrt(MSE_model / MSE_benchmark) (common practice), recomputed from the table
    tab = ev.table.set_index(["model", "variable", "horizon", "subperiod"])["se_mean"]
    key = ("ar", "gdp", 1, "full")
    want = np.sqrt(tab[key] / tab[("rw", "gdp", 1, "full")])
    assert rel[key] == pytest.approx(want, rel=1e-12)
    assert "RMSE ratio" in relative_text(ev, "se_mean")
    assert f"{want:5.2f}" in relative_text(ev, "se_mean")
    t = pd.concat([pd.read_csv(p) for k, p in paths.items()
                   if k.startswith("tables/relative_gdp") and k.endswith(".csv")])
    got = t[(t.model == "ar") & (t.horizon == 1) & (t.subperiod == "full") & (t.score == "se_mean")]["value"]
    assert float(got.iloc[0]) == pytest.approx(want, rel=1e-12)


def test_unknown_score_is_a_usage_error(evaluated):
    """``vintage-harness score --score rmse`` names the valid scores and exits 2."""
    ev, _, spec = evaluated
    res = runner.invoke(app, ["score", str(spec.out), "--score", "rmse"])
    assert res.exit_code == 2 and "interval_50" in res.output and "crps" in res.output


def test_relative_rules_come_from_the_declarations():
    """ratio, sqrt_ratio and difference follow each score's declaration, with no name-specific code."""
    agg = pd.DataFrame({"subperiod": "full", "variable": "v", "horizon": 0, "model": ["b", "m"],
                        "n": [5, 5], "crps": [2.0, 1.0], "se_mean": [4.0, 1.0], "log_score": [1.0, 0.5],
                        "interval_50": [3.0, 1.5]})
    rel = relative_to(agg, "b").set_index("model")
    assert rel.loc["m", "crps"] == 0.5 and rel.loc["m", "se_mean"] == 0.5
    assert rel.loc["m", "log_score_diff"] == -0.5 and rel.loc["m", "interval_50"] == 0.5


def test_every_declared_column_is_computed_and_resolves():
    """Every fused-pass column resolves back to its declaration (names unique, families expanded)."""
    names = [c.name for c in columns()]
    assert len(names) == len(set(names))
    assert all(resolve(n).name == n for n in names)


def test_tests_share_one_result_shape_and_spec_seeds():
    """Every registered test declares a minimum-sample rule; seeds are spawned from the spec's seed."""
    for t in comparison_tests():
        assert t.min_rule and t.reference and t.min_n(1, t.params) >= 1
    assert cell_seed(7, "mcs", ("gdp", 1)) == cell_seed(7, "mcs", ("gdp", 1))
    assert cell_seed(7, "mcs", ("gdp", 1)) != cell_seed(8, "mcs", ("gdp", 1))
    r = TestResult("dm", 1.0, 0.5, 10)
    assert r.usable and not TestResult("dm", np.nan, np.nan, 2, "n too small").usable


def test_sections_are_one_ordered_list(evaluated):
    """The HTML sections, the table of contents and the Markdown headings follow SECTIONS."""
    ev, paths, _ = evaluated
    assert SECTION_IDS == tuple(s.id for s in SECTIONS)
    md = paths["report.md"].read_text()
    titles = [s.title for s in SECTIONS if s.id != "changes"]
    pos = [md.index(f"## {t}") for t in titles]
    assert pos == sorted(pos)
