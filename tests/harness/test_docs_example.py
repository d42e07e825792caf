"""The notebook example and the README's "Use from Python" section run, and their numbers hold.

The example (``docs/notebook_example.py``) is run once into a temporary folder; its results
are then checked against references outside the project: the invented economy's simulated
release log (before it went into the store), the energy form of the CRPS written out here and
the scoringrules library.
"""

from __future__ import annotations

import contextlib
import io
import os
import re
import runpy
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

ROOT = Path(__file__).resolve().parents[2]
EXAMPLE = ROOT / "docs" / "notebook_example.py"
README = ROOT / "README.md"

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def example(tmp_path_factory):
    """Run the example once; return its namespace and what it printed."""
    out = tmp_path_factory.mktemp("example")
    mp = pytest.MonkeyPatch()
    mp.setenv("VELDMARK_EXAMPLE_DIR", str(out))
    buf = io.StringIO()
    try:
        with contextlib.redirect_stdout(buf):
            ns = runpy.run_path(str(EXAMPLE), run_name="__main__")
    finally:
        mp.undo()
    ns["printed"] = buf.getvalue()
    return ns


@pytest.fixture(scope="module")
def releases():
    """The simulated release log of the invented economy, as generated (not read from the store)."""
    from vintages import simulate_demo

    rel = simulate_demo().releases
    return rel.assign(release=rel["release"].astype("datetime64[s]"))


def _asof(rel: pd.DataFrame, variable: str, day) -> pd.Series:
    """Value per period of the latest release on or before ``day`` (a real-time vintage)."""
    day = pd.Timestamp(day)
    sub = rel[(rel["variable"] == variable) & (rel["release"] <= day)]
    return sub.sort_values("release", kind="stable").groupby("period").tail(1).set_index("period")["value"]


def _gdp_truth(rel: pd.DataFrame, period: pd.Period, rule: str) -> float:
    """Annualised growth 400·Δlog of gdp for ``period`` inside the truth's own vintage."""
    g = rel[rel["variable"] == "gdp"]
    if rule == "first":
        published = g.loc[g["period"] == str(period), "release"]
        if published.empty:
            return np.nan
        day = published.min()  # the vintage that first published the period
    else:  # latest
        day = g["release"].max()
    levels = _asof(rel, "gdp", day)
    if str(period) not in levels.index:
        return np.nan  # the period is not in that vintage yet
    return 400 * (np.log(levels[str(period)]) - np.log(levels[str(period - 1)]))


def _crps_energy(y: float, x: np.ndarray) -> float:
    """E|X - y| - E|X - X'| / 2 over the ensemble's empirical distribution.

    Gneiting, T. and Raftery, A. E. (2007), Strictly proper scoring rules, prediction, and
    estimation, JASA 102(477), eq. 21, with F the empirical distribution of the draws.
    """
    x = np.asarray(x, dtype=np.float64)
    return float(np.mean(np.abs(x - y)) - 0.5 * np.mean(np.abs(x[:, None] - x[None, :])))


def test_draws_have_named_dims_and_tables_are_typed(example):
    """The draws are a 5-dim DataArray and the tidy tables hold numbers and booleans, not text."""
    # common practice: tidy tables keep one typed value per cell (Wickham 2014, J. Stat. Softw. 59(10))
    draws = example["draws"]
    assert draws.dims == ("model", "origin", "variable", "horizon", "draw")
    assert draws.sizes["draw"] == 200 and draws.sizes["horizon"] == 3
    assert np.isfinite(draws.values).all()
    ev = example["evals"]["first"]
    assert ev.mcs["in_mcs"].dtype == np.bool_
    assert ev.mcs["pvalue"].dtype == np.float64
    dm = ev.tests[ev.tests["test"] == "dm"]
    assert len(dm) and dm["pvalue"].dtype == np.float64 and dm["pvalue"].between(0, 1).all()
    for col in ("crps", "log_score_diff", "se_mean"):
        assert example["relative"][col].dtype == np.float64, col
    assert ev.forecasts["scored"].dtype == np.bool_ and ev.forecasts["truth"].dtype == np.float64


def test_asof_value_equals_the_published_release(example, releases):
    """What the example shows as known on its as-of day is the latest release on or before it."""
    # definition of a real-time vintage: Croushore, D. and Stark, T. (2001), A real-time data set
    # for macroeconomists, J. Econometrics 105(1), 111-130
    day = pd.Timestamp(example["ASOF_DAY"])
    edge = example["edge"].set_index("variable")
    for variable, row in edge.iterrows():
        expected = _asof(releases, variable, day)
        last = max(expected.index, key=lambda p: pd.Period(p))
        assert row["period"] == last, variable
        assert row["value"] == expected[last], variable
        # the release date shown published exactly that value, on or before the day
        src = releases[(releases["variable"] == variable) & (releases["period"] == last)
                       & (releases["release"] == pd.Timestamp(row["release"]))]
        assert pd.Timestamp(row["release"]) <= day and len(src) == 1
        assert src["value"].iloc[0] == row["value"]
    gdp = edge.loc["gdp"]
    assert f"gdp {gdp['period']}: {gdp['value']} (released {pd.Timestamp(gdp['release']):%Y-%m-%d})" \
        in example["printed"]


def test_ragged_edge_shows_nothing_released_after_the_origin(example, releases):
    """Each series in an information set ends at its last period published by the origin."""
    # the real-time rule (Croushore and Stark 2001): only values released by the origin are known
    for info in example["infosets"]:
        origin = pd.Timestamp(info.origin)
        for v in info.variables:
            known = _asof(releases, v, origin)
            last = max(known.index, key=lambda p: pd.Period(p))
            assert str(info.native_last[v]) == last, (origin, v)
            assert pd.Timestamp(info.source_release[v]) <= origin, (origin, v)
    table = example["ragged"]
    assert table["partial"].dtype == np.bool_ and table["released"].le(table["origin"]).all()


@pytest.mark.parametrize("truth", ["first", "latest"])
def test_mean_crps_cell_recomputed_from_the_ledger(example, releases, truth):
    """One cell of the score table equals the mean energy-form CRPS of the ledger's draws."""
    import scoringrules as sr

    model, variable, h = "ar", "gdp", 1
    ev = example["evals"][truth]
    draws = example["draws"].sel(model=model, variable=variable, horizon=h)
    ys, scores = [], []
    for origin in draws["origin"].values:
        target = pd.Timestamp(origin).to_period("Q") + h  # horizon h: the origin's quarter + h
        y = _gdp_truth(releases, target, truth)
        if not np.isfinite(y):
            continue  # not yet published: not scored
        # the ledger keeps float32 draws and the evaluation scores float32-rounded truths
        y32 = float(np.float32(y))
        x = draws.sel(origin=origin).values
        ys.append(y)
        scores.append(_crps_energy(y32, x))
        assert sr.crps_ensemble(y32, x.astype(np.float64), estimator="nrg", backend="numpy") \
            == pytest.approx(scores[-1], rel=1e-9)
    cell = ev.table.query("model == @model and variable == @variable and horizon == @h and subperiod == 'full'")
    assert len(cell) == 1
    assert int(cell["n"].iloc[0]) == len(scores)
    assert cell["crps"].iloc[0] == pytest.approx(np.mean(scores), rel=1e-6)
    # the per-forecast truths the example scored against are the independently computed ones
    fc = ev.forecasts.query("model == @model and variable == @variable and horizon == @h and scored")
    np.testing.assert_allclose(fc["truth"].to_numpy(), ys, rtol=1e-12)


def test_report_chart_and_caution_written(example):
    """The chart is a PNG file and the report exists and carries the usual caution."""
    # PNG signature: W3C Portable Network Graphics Specification (2003), section 5.2
    assert example["chart"].read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    html = example["report"].read_text(encoding="utf-8").lower()
    assert "no guarantee" in html
    assert str(example["report"].resolve()) in example["printed"]


def _section() -> str:
    """The README's "Use from Python" section (up to the next section)."""
    text = README.read_text(encoding="utf-8")
    start = text.index("## Use from Python")
    return text[start:text.index("\n## ", start + 1)]


def _python_blocks(markdown: str) -> list[str]:
    return re.findall(r"^```python\n(.*?)^```", markdown, flags=re.S | re.M)


def test_readme_section_code_runs(tmp_path):
    """The code of the README's "Use from Python" section runs as written in an empty folder."""
    text = _section()
    assert len(text.splitlines()) <= 40
    assert "docs/notebook_example.py" in text
    blocks = _python_blocks(text)
    assert len(blocks) >= 1
    script = tmp_path / "section.py"
    script.write_text("\n".join(blocks))
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    env.pop("HARNESS_CACHE", None)
    proc = subprocess.run([sys.executable, str(script)], cwd=tmp_path, env=env, capture_output=True,
                          text=True, timeout=600)
    assert proc.returncode == 0, proc.stderr[-3000:]
    report = Path(proc.stdout.strip().splitlines()[-1])
    assert (tmp_path / report).is_file() if not report.is_absolute() else report.is_file()
    assert (tmp_path / "veldmark" / "nowcast.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    # the demo's spec passes its own sampler diagnostics (ESS and split R-hat thresholds of
    # harness.models.mcmc; Vehtari et al. 2021): the run records no warning
    import json

    manifests = list((tmp_path / "veldmark").rglob("run.json"))
    assert manifests and all(json.loads(m.read_text())["diagnostic_warnings"] == [] for m in manifests)


def test_import_check_command_names_this_project():
    """The environment check the section prints imports harness and vintages from this checkout."""
    text = _section()
    cmd = re.search(r'python -c "(import harness, vintages; [^"]+)"', text)
    assert cmd, "the section shows the import check"
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    proc = subprocess.run([sys.executable, "-c", cmd.group(1)], env=env, capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    assert Path(proc.stdout.split()[0]).resolve() == (ROOT / "harness" / "__init__.py").resolve()
