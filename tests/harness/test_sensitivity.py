"""Revision sensitivity: truths side by side, real-time versus pseudo-real-time data, ranking swaps."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from harness.backtest.ledger import read_ledger
from harness.evaluation.sensitivity import ranking_swaps, sensitivity, truth_sensitivity
from harness.spec import load_spec
from vintages.store import VintageStore

SPEC = """\
[run]
store = "{store}"
out = "{out}"
seed = 5
draws = 200
freq = "Q"

[origins]
rule = "quarterly"
day = 15
month_of_quarter = 2
start = "2008-01-01"
end = "2015-06-30"

[variables.gdp]
transform = "dlog_ann"

[targets]
variables = ["gdp"]
horizons = {{ min = 0, max = 2 }}

[models.rw]
type = "nochange"
[models.ar]
type = "ar"
max_lags = 2

[scoring]
benchmark = "rw"
truths = ["first", "release:2", "lag:365D", "latest"]
"""


def _store(path, *, bias_pp: float, n_quarters: int = 64, seed: int = 3) -> VintageStore:
    """Quarterly gdp levels published 30, 60, 90 days after each quarter, each release a full vintage.

    The first estimate of each quarter's growth is the true growth minus ``bias_pp`` (annualised
    percentage points); the second and later estimates are the truth. ``bias_pp = 0``: no revisions.
    """
    rng = np.random.default_rng(seed)
    q = pd.period_range("2000Q1", periods=n_quarters, freq="Q")
    growth = 2.0 + rng.normal(0, 1.0, n_quarters)  # annualised %
    level = 100 * np.exp(np.cumsum(growth) / 400)
    rows = []
    for i, p in enumerate(q):
        for k, lag in enumerate((30, 60, 90)):
            rel = p.end_time.normalize() + pd.Timedelta(days=lag)
            vint = level[: i + 1].copy()
            if k == 0:  # only the newest quarter is still a first estimate
                vint[i] = level[i] * np.exp(-bias_pp / 400)  # growth into quarter i understated by bias_pp
            rows += [("gdp", str(q[j]), rel, float(vint[j])) for j in range(i + 1)]
    df = pd.DataFrame(rows, columns=["variable", "period", "release", "value"])
    store = VintageStore.init(path)
    store.append(df, {"gdp": {"freq": "Q"}}, source="constructed")
    return store


def _spec(tmp_path, bias):
    _store(tmp_path / "store", bias_pp=bias)
    p = tmp_path / "spec.toml"
    p.write_text(SPEC.format(store=tmp_path / "store", out=tmp_path / "run"))
    return load_spec(p)


def test_without_revisions_all_truths_and_data_modes_agree(tmp_path):
    """With no revisions, pseudo-real-time ledgers equal real-time ones (all from cache) and every truth scores alike."""
    spec = _spec(tmp_path, 0.0)
    res = sensitivity(spec, jobs=1)
    rt = read_ledger(spec.out)
    ps = read_ledger(res.pseudo_run)
    assert rt.draws.values.tobytes() == ps.draws.values.tobytes()
    assert ps.manifest.counts["computed"] == 0  # same information sets, same keys: the cache answers
    # per forecast, every truth gives the same score wherever it is published (lag:365D is not yet
    # published for the last year of targets, so its cell means rest on fewer forecasts)
    _, _, evs = truth_sensitivity(spec.out, spec.scoring.truths)
    key = ["model", "origin", "variable", "horizon"]
    base = evs["first"].forecasts.set_index(key)["crps"]
    for t, ev in evs.items():
        other = ev.forecasts.set_index(key)["crps"].dropna()
        assert len(other) > 0.7 * len(base)
        assert np.array_equal(other.to_numpy(), base.reindex(other.index).to_numpy()), t
    assert (res.data_table["difference"].abs() < 1e-12).all()
    assert res.rankings["n_swaps"].sum() == 0
    assert res.verdicts["ranking_stable"].all()
    assert (res.exposure["mean_abs_revision"].fillna(0) == 0).all()


def test_known_revision_bias_shows_sign_and_size(tmp_path):
    """First releases 2 pp too low: exposure shows a +2 pp mean revision and real-time no-change forecasts score worse."""
    bias = 2.0
    spec = _spec(tmp_path, bias)
    res = sensitivity(spec, jobs=1)
    ex = res.exposure[(res.exposure["to_truth"] == "latest")]
    # the revision first -> latest of each target's growth is exactly the bias (constructed)
    assert np.allclose(ex["mean_revision"], bias, atol=0.05)
    d = res.data_table[res.data_table["model"] == "rw"].set_index("horizon")
    # the check scores against the first truth (truths[0]). A no-change forecast copies the last
    # observed growth: in real time a first release, g - bias, like the first-release truth g' - bias,
    # so its error is g - g'; with revised inputs it forecasts g, off by g - g' + bias. Real time
    # must therefore score better (negative difference), by an amount that grows with the bias.
    assert (d["difference"] < 0).all()
    assert (d["pvalue"] < 0.05).all()
    # size: the pseudo forecasts are off by about the bias; CRPS of a shifted forecast grows by
    # at most the shift (CRPS is 1-Lipschitz in the location, common practice)
    assert (d["difference"].abs() < bias + 1e-9).all() and (d["difference"].abs() > 0.2).all()


def test_ranking_swaps_on_a_constructed_table():
    """Swapped pairs and Spearman's rho are detected on a hand-made score table."""
    scores = pd.DataFrame({
        "truth": ["first"] * 3 + ["latest"] * 3,
        "model": ["a", "b", "c"] * 2,
        "value": [1.0, 2.0, 3.0, 2.5, 2.0, 3.0],
    })
    r = ranking_swaps(scores).iloc[0]
    assert r["truth"] == "latest" and r["swaps"] == "a>b" and r["n_swaps"] == 1
    # ranks (1, 2, 3) vs (2, 1, 3): Spearman rho = 1 - 6*sum(d^2)/(n(n^2-1)) = 1 - 6*2/24 = 0.5
    # (Spearman 1904)
    assert r["spearman"] == pytest.approx(0.5)
    same = ranking_swaps(scores.assign(value=[1.0, 2.0, 3.0, 1.5, 2.5, 3.5])).iloc[0]
    assert same["n_swaps"] == 0 and same["spearman"] == pytest.approx(1.0)


def test_saved_tables_read_back_from_parquet_and_from_csv_only_folders(tmp_path):
    """Sensitivity.load reads the typed Parquet files, and the CSVs of folders that earlier
    versions wrote without them; both give the truths table that was saved (common practice:
    a round trip through the writer's own formats)."""
    import shutil

    import pandas as pd

    from harness.evaluation.sensitivity import Sensitivity

    tt = pd.DataFrame({"truth": ["first", "latest"], "model": ["ar", "ar"], "variable": ["gdp", "gdp"],
                       "horizon": [0, 0], "n": [10, 10], "score": [0.5, 0.6], "ratio": [0.9, 1.1]})
    empty = pd.DataFrame()
    Sensitivity(tt, empty, empty, empty, empty, ("first", "latest"), None).save(tmp_path / "s")
    typed = Sensitivity.load(tmp_path / "s")
    shutil.copytree(tmp_path / "s", tmp_path / "old")
    for p in (tmp_path / "old").glob("*.parquet"):
        p.unlink()
    old = Sensitivity.load(tmp_path / "old")
    for got in (typed, old):
        pd.testing.assert_frame_equal(got.truth_table.reset_index(drop=True), tt, check_dtype=False)
        assert got.truths == ("first", "latest")
    assert Sensitivity.load(tmp_path / "none") is None
