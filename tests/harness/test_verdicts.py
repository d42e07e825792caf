"""Every claim of the decision table is read back from the evaluation's tables (nothing invented)."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest

from harness.backtest import run
from harness.compare.registry import cell_seed, comparison_tests, screen
from harness.evaluation import evaluate, steps_ahead
from harness.evaluation.sensitivity import truth_sensitivity
from harness.spec import load_spec
from harness.verdicts import BETTER, WORDS, WORSE, decide, horizon_bands, statements
from tests.harness.conftest import write_spec

EXTRA = '[models.bvar]\ntype = "bvar"\nlags = 2\n[pools.eq]\nscheme = "equal"\n'


@pytest.fixture(scope="module")
def decided(tmp_path_factory, small_store):
    d = tmp_path_factory.mktemp("verdicts")
    spec = load_spec(write_spec(d, small_store, d / "run", EXTRA))
    run(spec, jobs=1, progress=False)
    ev = evaluate(spec.out, "first")
    table, rankings, evs = truth_sensitivity(spec.out, ("first", "latest"))

    class _Sens:  # only the truths table is read
        truth_table = table

    return ev, _Sens(), decide(ev, sensitivity=_Sens())


def _band_losses_by_hand(ev, var, band, score="crps"):
    f = ev.forecasts
    f = f[(f["variable"] == var) & f["horizon"].isin(band.horizons)]
    f = f[f["subperiods"].map(lambda s: "full" in s)]
    per = f.groupby(["model", "origin"])[score].agg(["mean", "count"]).reset_index()
    per = per[per["count"] == len(band.horizons)].pivot(index="origin", columns="model", values="mean")
    return per.dropna()


def test_every_claim_is_derived_from_the_tables(decided):
    """Ratios from the cell table, tests and best sets recomputed from the per-forecast scores, calibration
    from the calibration table, truths from the sensitivity table."""
    ev, sens, v = decided
    bands = {b.label: b for b in horizon_bands(pd.unique(ev.forecasts["horizon"]))}
    pair = comparison_tests("pairwise")[0]
    params = pair.settings({})
    assert len(v.table) > 0
    for r in v.table.itertuples():
        band = bands[r.band]
        t = ev.table[(ev.table["variable"] == r.variable) & (ev.table["subperiod"] == "full")
                     & ev.table["horizon"].isin(band.horizons)].set_index(["model", "horizon"])
        num = sum(t.loc[(r.model, h), "n"] * t.loc[(r.model, h), "crps"] for h in band.horizons)
        den = sum(t.loc[(ev.benchmark, h), "n"] * t.loc[(ev.benchmark, h), "crps"] for h in band.horizons)
        assert r.ratio == pytest.approx(num / den, rel=1e-12)
        wide = _band_losses_by_hand(ev, r.variable, band)
        a, b = wide[r.model].to_numpy(), wide[ev.benchmark].to_numpy()
        steps = steps_ahead(band.max_h)  # quarterly origins: one origin per target period
        res = screen(pair, len(a), steps, params) or pair.run(a, b, h=steps, seed=0, params=params)
        assert r.n == res.n and (r.pvalue == pytest.approx(res.pvalue, rel=1e-10) or
                                 (np.isnan(r.pvalue) and np.isnan(res.pvalue)))
        cal = ev.calibration[(ev.calibration["model"] == r.model) & (ev.calibration["variable"] == r.variable)
                             & ev.calibration["horizon"].isin(band.horizons)]
        cols = [c for c in cal.columns if c.endswith("_p") and not c.startswith("cover_") and c != "rs_cvm_p"]
        ps = cal[cols].to_numpy(dtype=float).ravel()
        ps = ps[np.isfinite(ps)]
        want = "untested" if not len(ps) else ("fails" if ps.min() < 0.05 / len(ps) else "passes")
        assert r.calibration == want
        tt = sens.truth_table[(sens.truth_table["variable"] == r.variable)
                              & sens.truth_table["horizon"].isin(band.horizons)]
        ratios = []
        for _, g in tt.groupby("truth"):
            g = g.set_index(["model", "horizon"])
            n_ = [g.loc[(r.model, h), "n"] for h in band.horizons if (r.model, h) in g.index]
            ratios.append(sum(nn * g.loc[(r.model, h), "score"] for nn, h in zip(n_, band.horizons, strict=False))
                          / sum(nn * g.loc[(ev.benchmark, h), "score"] for nn, h in zip(n_, band.horizons, strict=False)))
        assert r.beats_every_truth == all(x < 1 for x in ratios)
        # the verdict word follows its documented rule
        assert r.verdict in WORDS
        if r.verdict == BETTER:
            assert r.pvalue < v.alpha and r.ratio < 1 and r.in_best_set is not False and r.calibration != "fails"
        if r.verdict == WORSE:
            assert r.pvalue < v.alpha and r.ratio > 1
        if not np.isfinite(r.pvalue):
            assert r.verdict not in (BETTER, WORSE) and "n too small" in r.reasons


def test_best_sets_recomputed_with_the_same_seed(decided):
    """Band best sets equal the model confidence set run by hand on the band-average losses (same seed)."""
    ev, _, v = decided
    mcs = comparison_tests("set")[0]
    params = mcs.settings({})
    bands = {b.label: b for b in horizon_bands(pd.unique(ev.forecasts["horizon"]))}
    for (var, band), g in v.band_sets.groupby(["variable", "band"]):
        wide = _band_losses_by_hand(ev, var, bands[band])[list(g["model"])]
        seed = cell_seed(int(ev.manifest.seed), "mcs", (var, band, "crps"))
        res = mcs.run(wide, list(wide.columns), h=steps_ahead(bands[band].max_h), seed=seed, params=params)
        assert [x.extra["in_set"] for x in res] == list(g["in_set"])


def test_statements_repeat_the_table(decided):
    """Each statement's clauses name rows whose verdict, ratio and p-value they print."""
    ev, _, v = decided
    for s in statements(v):
        for m, var, band in s.rows:
            row = v.row(m, var, band)
            if row["verdict"] in (BETTER, WORSE):
                assert f"{m} is {row['verdict']} than {v.benchmark}" in s.text
                p = "p < 0.001" if row["pvalue"] < 0.001 else f"p = {row['pvalue']:.3f}"
                assert f"{band} (ratio {row['ratio']:.2f}, {p})" in s.text
        for m in re.findall(r"(\w+) is (?:better|worse) than", s.text):
            assert m in set(v.table["model"])


def test_no_mark_below_the_minimum_sample(decided):
    """Cells whose test says 'n too small' carry no p-value, so no significance mark anywhere."""
    from harness.report.colours import significance

    ev, _, _ = decided
    small = ev.tests[ev.tests["note"].astype(str).str.startswith("n too small")]
    assert small["pvalue"].isna().all()
    assert all(significance(p, -1.0) == "" for p in small["pvalue"])


def test_monthly_origins_count_the_overlap_in_origin_steps():
    """Three monthly origins per target quarter: an h-step forecast spans 3(h+1) origins (common practice)."""
    from harness.evaluation.cells import dependence_steps, origins_per_target

    tp = ["2020Q1", "2020Q1", "2020Q1", "2020Q2", "2020Q2", "2020Q2", "2020Q3"]
    assert origins_per_target(tp) == 3 and dependence_steps(0, tp) == 3 and dependence_steps(1, tp) == 6
    assert dependence_steps(2, ["2020Q1", "2020Q2", "2020Q3"]) == 3
