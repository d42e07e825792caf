"""Table commands in every format: score, sensitivity, report and the vintage store's info, asof and revisions."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from harness.backtest import run
from harness.cli import app
from harness.evaluation import evaluate
from harness.report.textout import render, resolve_format
from harness.spec import load_spec
from tests.harness.conftest import write_spec

runner = CliRunner()


@pytest.fixture(scope="module")
def small_run(tmp_path_factory, small_store):
    """A small run of the invented two-variable store (rw and ar, four horizons)."""
    d = tmp_path_factory.mktemp("tables")
    spec = load_spec(write_spec(d, small_store, d / "run"))
    run(spec, jobs=1, progress=False)
    return spec, d


def _invoke(*args):
    return runner.invoke(app, [str(a) for a in args])


def test_score_prints_the_decision_view_and_one_table_per_target(small_run):
    """By default score shows the decision table, then one score table per target, marks apart from numbers."""
    spec, _ = small_run
    res = _invoke("score", spec.out, "-q")
    assert res.exit_code == 0, res.output
    out = res.stdout
    assert out.index("Decision table") < out.index("gdp: CRPS ratio to rw") < out.index("cpi: CRPS ratio to rw")
    assert len(re.findall(r"^(gdp|cpi): CRPS ratio to rw, every horizon \(full sample\)$", out, flags=re.M)) == 2
    assert not re.search(r"\d[↓↑]", out)  # a number and its mark are never glued together
    assert "Past performance on a chosen sample is no guarantee" in out
    table_lines = [ln for ln in out.splitlines() if re.match(r"h = -?\d", ln)]
    assert table_lines and max(map(len, table_lines)) <= 100  # ready to paste into a terminal or an e-mail


def test_score_matrix_prints_every_pair_and_the_model_confidence_set(small_run, tmp_path):
    """--table matrix: every model against every other per horizon (the p-values of the pairwise
    frame) and the model confidence set; as CSV the typed pairs."""
    from harness.report.matrix import pairwise_frame

    spec, _ = small_run
    res = _invoke("score", spec.out, "--table", "matrix", "-q")
    assert res.exit_code == 0, res.output
    assert "every model against every other" in res.stdout and "confidence set" in res.stdout.lower()
    res = _invoke("score", spec.out, "--table", "matrix", "--out", tmp_path / "m.parquet", "-q")
    assert res.exit_code == 0, res.output
    got = pd.read_parquet(tmp_path / "m.parquet")
    want = pairwise_frame(evaluate(spec.out, None))
    merged = got.dropna(subset=["pvalue"]).merge(want, on=["variable", "horizon", "model", "versus"])
    assert len(merged) and np.allclose(merged["pvalue_x"], merged["pvalue_y"], rtol=1e-12)
    small = got[got["note"] == "n too small"]
    assert small["pvalue"].isna().all() and (small["mark"].fillna("") == "").all()


def test_score_csv_is_the_relative_table_typed(small_run):
    """score --format csv holds the CRPS ratios of the evaluation as numbers, with p and n, one row per cell."""
    spec, _ = small_run
    res = _invoke("score", spec.out, "-q", "--format", "csv")
    assert res.exit_code == 0, res.output
    from io import StringIO

    t = pd.read_csv(StringIO(res.stdout))
    ev = evaluate(spec.out)
    rel = ev.relative[ev.relative["subperiod"] == "full"].set_index(["model", "variable", "horizon"])
    assert len(t) == len(rel)
    assert t["value"].dtype == np.float64 and t["best"].dtype == bool
    for r in t.itertuples(index=False):
        assert r.value == pytest.approx(rel.loc[(r.model, r.variable, r.horizon), "crps"], rel=1e-12, nan_ok=True)
        assert r.n == rel.loc[(r.model, r.variable, r.horizon), "n"]


def test_score_formats_and_files(small_run, tmp_path):
    """md and tex render the same tables; --out infers the format; parquet goes to a file only (exit 2 otherwise)."""
    spec, _ = small_run
    md = _invoke("score", spec.out, "-q", "--format", "md", "--table", "scores")
    assert md.exit_code == 0 and re.search(r"^\| model \|", md.stdout, flags=re.M) is None  # transposed? no: md keeps rows
    assert re.search(r"^\| variable \| subperiod \| score \| model \|", md.stdout, flags=re.M)
    tex = tmp_path / "scores.tex"
    assert _invoke("score", spec.out, "-q", "--out", tex).exit_code == 0
    assert "\\begin{tabular}" in tex.read_text()
    bad = _invoke("score", spec.out, "--format", "parquet")
    assert bad.exit_code == 2 and "parquet is written to a file only" in bad.output
    pq = tmp_path / "scores.parquet"
    assert _invoke("score", spec.out, "-q", "--out", pq).exit_code == 0
    csv = _invoke("score", spec.out, "-q", "--format", "csv").stdout
    from io import StringIO

    a, b = pd.read_parquet(pq), pd.read_csv(StringIO(csv))
    np.testing.assert_allclose(a["value"].to_numpy(dtype=float), b["value"].to_numpy(dtype=float), rtol=1e-12)
    dec = _invoke("score", spec.out, "-q", "--table", "decision", "--format", "csv")
    d = pd.read_csv(StringIO(dec.stdout))
    assert {"variable", "band", "model", "ratio", "pvalue", "in_best_set", "verdict", "reasons"} <= set(d.columns)
    assert _invoke("score", spec.out, "--subperiod", "nowhere").exit_code == 2


def test_report_is_quiet_with_q_and_writes_both_pages_in_the_run(small_run):
    """report -q prints nothing and writes the pack and the appendix to RUN/report."""
    spec, _ = small_run
    res = _invoke("report", spec.out, "-q")
    assert res.exit_code == 0 and res.output == ""
    assert (spec.out / "report" / "report.html").is_file() and (spec.out / "report" / "appendix.html").is_file()
    loud = _invoke("report", spec.out)
    assert loud.exit_code == 0
    # every stage is named on standard error; the paths go to standard output
    for stage in ("reading the run", "scoring under the truth", "reading the store", "deciding",
                  "writing the pack and the appendix"):
        assert stage in loud.stderr, stage
    assert f"report: {spec.out / 'report' / 'report.html'}" in loud.stdout


def test_sensitivity_prints_the_truths_side_by_side(small_run, tmp_path):
    """sensitivity prints the table of CRPS ratios under each truth before its statements, and writes it on request."""
    spec, d = small_run
    res = _invoke("sensitivity", d / "spec.toml", "--no-data-check", "-j", "1")
    assert res.exit_code == 0, res.output
    out = res.stdout
    assert out.index("CRPS ratio to rw under each truth") < out.index("- ar: beats rw under every truth")
    assert re.search(r"^model\s+first\s+latest$", out, flags=re.M)
    assert "real-time run: run" in res.stderr  # the run's own line, labelled
    f = tmp_path / "truths.csv"
    assert _invoke("sensitivity", d / "spec.toml", "--no-data-check", "-j", "1", "-q", "--out", f).exit_code == 0
    t = pd.read_csv(f)
    assert {"variable", "band", "model", "n", "first", "latest"} <= set(t.columns)


def test_vintages_asof_summary_by_default_every_value_with_all(small_store):
    """asof prints one line per variable by default, every value with --all; CSV always holds every value."""
    from vintages import VintageStore

    known = VintageStore(small_store).cube().asof("2012-06-01").to_frame()
    summary = _invoke("vintages", "asof", small_store, "2012-06-01")
    assert summary.exit_code == 0
    lines = [ln for ln in summary.stdout.splitlines() if ln.startswith(("gdp", "cpi"))]
    assert len(lines) == 2 and "ragged edge" in summary.stdout
    full = _invoke("vintages", "asof", small_store, "2012-06-01", "--all")
    assert len([ln for ln in full.stdout.splitlines() if ln.startswith(("gdp ", "cpi "))]) == len(known)
    csv = _invoke("vintages", "asof", small_store, "2012-06-01", "--format", "csv")
    assert len(csv.stdout.splitlines()) == len(known) + 1


def test_vintages_revisions_reading_and_rounding(small_store):
    """revisions prints rounded statistics and one reading per variable; CSV keeps full precision."""
    from io import StringIO

    from harness.report.readings import revision_reading
    from vintages import VintageStore, revisions_table

    res = _invoke("vintages", "revisions", small_store, "gdp", "cpi")
    assert res.exit_code == 0, res.output
    tab = pd.concat([revisions_table(VintageStore(small_store).cube(), v) for v in ("gdp", "cpi")])
    for r in tab.to_dict("records"):
        assert revision_reading(r) in res.stdout
    assert not re.search(r"\d\.\d{6,}", res.stdout)  # rounded for reading
    csv = pd.read_csv(StringIO(_invoke("vintages", "revisions", small_store, "gdp", "--format", "csv").stdout))
    assert csv["std"].iloc[0] == pytest.approx(float(tab["std"].iloc[0]), rel=1e-12)


def test_vintages_info_in_every_format(small_store, tmp_path):
    """info renders as text, Markdown, LaTeX, CSV and Parquet (a file), with the same rows."""
    from vintages import VintageStore

    info = VintageStore(small_store).info()
    for fmt, check in (("md", lambda s: s.count("\n| ") >= len(info)), ("tex", lambda s: "\\toprule" in s),
                       ("csv", lambda s: len(s.splitlines()) == len(info) + 1)):
        res = _invoke("vintages", "info", small_store, "--format", fmt)
        assert res.exit_code == 0 and check(res.stdout), fmt
    f = tmp_path / "info.parquet"
    assert _invoke("vintages", "info", small_store, "--out", f).exit_code == 0
    assert list(pd.read_parquet(f)["variable"]) == list(info["variable"])


def test_format_rules():
    """An unknown format lists the valid ones; 'table' is the earlier name of text; the suffix decides when none is given."""
    from pathlib import Path

    assert resolve_format(None, Path("x.md")) == "md" and resolve_format("table", None) == "text"
    with pytest.raises(ValueError, match="expected one of csv, md, parquet, tex, text"):
        resolve_format("xls", None)
    assert render([], "text").strip().startswith("Past performance")
