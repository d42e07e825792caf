"""The test registry's rules and the cells they run over (harness.compare.registry, harness.evaluation.cells).

Sources: the rules' own sources as declared (Cochran 1954, Biometrics 10(4), 417-451, for the
expected-count rule; the fixed-m frequency rule of harness.compare.dm); the DM statistic of
harness.compare.diebold_mariano (checked against published formulas in test_compare_dm.py) as
the reference for what a cell must contain.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from harness import compare as cp
from harness.compare.registry import comparison_tests, get_test, screen
from harness.evaluation import cells

RECESSION = [f"{y}Q{q}" for y in (2009, 2010) for q in (1, 2, 3, 4)] + [f"2017Q{q}" for q in (1, 2, 3, 4)]


def make_fc(n_origins=60, horizons=(0, 3), models=("rw", "ar", "bvar"), seed=0) -> pd.DataFrame:
    """A small per-forecast frame: quarterly origins from 2005Q1, one target per origin and horizon,
    a recession sub-period made of two runs (2009-10 and 2017), losses with a model effect."""
    rng = np.random.default_rng(seed)
    origins = pd.period_range("2005Q1", periods=n_origins, freq="Q")
    rows = []
    for h in horizons:
        common = rng.standard_normal(n_origins)
        for k, m in enumerate(models):
            tp = [str(o + h) for o in origins]
            loss = np.exp(0.5 * common + 0.4 * rng.standard_normal(n_origins)) * (1 + 0.1 * k)
            pit = rng.random(n_origins)
            for i, o in enumerate(origins):
                subs = ["full"] + (["recession"] if tp[i] in RECESSION else [])
                rows.append(dict(model=m, variable="gdp", horizon=h, origin=o.start_time + pd.Timedelta(days=45),
                                 target_period=tp[i], subperiods=subs, crps=loss[i], pit=pit[i],
                                 cover_70=float(0.15 <= pit[i] <= 0.85)))
    return pd.DataFrame(rows)


# --------------------------------------------------------------------------- rules


def test_every_test_declares_a_real_rule_with_its_source():
    """Each registered test has a rule in words, a source, and a minimum of at least 4 at h = 1."""
    for t in comparison_tests():
        assert t.min_rule and t.min_source and t.reference
        assert t.min_n(1, {**t.params, "level": 0.7}) >= 4, t.name


def test_dm_rule_is_the_fixed_m_frequency_rule_and_grows_with_h():
    """dm's minimum follows fixed_m_min_n (8, 13, 29, 38 for h = 1..4) and 10 h for the other methods."""
    dm = get_test("dm")
    assert [dm.min_n(h, dm.params) for h in (1, 2, 3, 4)] == [8, 13, 29, 38]
    for h in range(1, 13):  # the rule holds at the minimum and at every larger T checked
        for t in range(dm.min_n(h, dm.params), 400):
            m = cp.dm.default_bandwidth("fixed_m", t)
            assert 2 * math.pi * m * h <= 2 * t
    assert dm.min_n(4, {**dm.params, "method": "hln"}) == 40


def test_coverage_rules_follow_cochran_expected_counts():
    """Kupiec n >= 5/min(c, 1-c) (c = 0.9: 50); Christoffersen n >= 1 + 5/min(c, 1-c)^2 (c = 0.5: 21)."""
    assert get_test("kupiec").min_n(1, {"level": 0.9}) == 50
    assert get_test("kupiec").min_n(1, {"level": 0.5}) == 10
    assert get_test("christoffersen").min_n(1, {"level": 0.5}) == 21
    assert get_test("christoffersen").min_n(1, {"level": 0.9}) == 501
    ct = get_test("coverage_t")
    assert ct.min_n(4, {**ct.params, "level": 0.5}) == 40 and ct.min_n(1, {**ct.params, "level": 0.9}) == 50


def test_screen_gives_the_reason_instead_of_a_pvalue():
    """Below the rule: NaN and 'n too small (n = 6 < 8: ...)'; independence tests at h > 1: NaN and why."""
    dm = get_test("dm")
    r = screen(dm, 6, 1, dm.params)
    assert np.isnan(r.pvalue) and r.note.startswith("n too small (n = 6 < 8: fixed_m") and not r.usable
    assert screen(dm, 8, 1, dm.params) is None
    b = screen(get_test("berkowitz"), 500, 2, {})
    assert np.isnan(b.pvalue) and b.note == "Berkowitz assumes independence; h > 1"
    k = screen(get_test("kupiec"), 500, 3, {"level": 0.7})
    assert "assumes independence" in k.note
    assert screen(get_test("knuppel"), 500, 3, get_test("knuppel").params) is None


def test_settings_refuse_unknown_values_listing_the_valid_ones():
    """A bad method names the valid ones; a string for a number is refused."""
    dm = get_test("dm")
    assert dm.settings({"method": "hln"})["method"] == "hln"
    with pytest.raises(ValueError, match=r"\['dm', 'fixed_b', 'fixed_m', 'hln'\]"):
        dm.settings({"method": "newey"})
    with pytest.raises(ValueError, match="must be a number"):
        get_test("mcs").settings({"n_boot": "many"})


# --------------------------------------------------------------------------- cells


def test_pairwise_tests_have_uniform_columns_and_notes_for_small_cells():
    """Rows carry TEST_COLUMNS; the 12-quarter recession cell at h = 3 (4 steps, rule 38) is NaN with a note."""
    fc = make_fc()
    out = cells.pairwise_tests(fc, "rw", seed=1)
    assert list(out.columns) == list(cells.TEST_COLUMNS)
    small = out[(out["subperiod"] == "recession") & (out["horizon"] == 3)]
    assert len(small) == 2 and small["pvalue"].isna().all()
    assert small["note"].str.startswith("n too small (n = 12 < 38").all()
    full = out[(out["subperiod"] == "full") & (out["horizon"] == 0)]
    assert full["pvalue"].between(0, 1).all() and (full["method"] == "fixed_m").all()


def test_recession_cell_uses_target_period_positions():
    """The recession sample (2009-10 and 2017) is tested with the target ordinals as positions:
    its statistic equals diebold_mariano with those positions, not the joined series'."""
    fc = make_fc()
    out = cells.pairwise_tests(fc, "rw", seed=1, settings={"dm": {"method": "dm"}})
    row = out[(out["subperiod"] == "recession") & (out["horizon"] == 0) & (out["model"] == "bvar")]
    g = fc[(fc["horizon"] == 0)].sort_values("origin")
    rec = g[g["subperiods"].map(lambda s: "recession" in s)]
    a = rec[rec["model"] == "bvar"]["crps"].to_numpy()
    b = rec[rec["model"] == "rw"]["crps"].to_numpy()
    pos = pd.PeriodIndex(rec[rec["model"] == "rw"]["target_period"], freq="Q").asi8
    assert np.diff(pos).max() > 20  # the gap from 2010Q4 to 2017Q1
    gap_aware = cp.diebold_mariano(a, b, 1, method="dm", positions=pos)
    assert float(row["statistic"].iloc[0]) == pytest.approx(gap_aware.stat, rel=1e-12)
    # at h = 1 there are no lags: positions matter from h = 2 on, so check the 4-step version too
    a4 = cp.diebold_mariano(a, b, 4, method="dm", positions=pos)
    assert a4.stat != pytest.approx(cp.diebold_mariano(a, b, 4, method="dm").stat, rel=1e-9)


def test_target_positions_fall_back_to_ranks_when_targets_repeat():
    """Several origins per target period (monthly origins, quarterly targets) give ranks 0..n-1."""
    np.testing.assert_array_equal(cells.target_positions(["2010Q1", "2010Q3", "2011Q1"]),
                                  pd.PeriodIndex(["2010Q1", "2010Q3", "2011Q1"], freq="Q").asi8)
    np.testing.assert_array_equal(cells.target_positions(["2010Q1", "2010Q1", "2010Q2"]), [0, 1, 2])


def test_pairwise_matrix_holds_every_ordered_pair_and_every_benchmark_view():
    """The matrix has k(k-1) rows per cell, antisymmetric statistics, and ``against`` reproduces
    pairwise_tests for each benchmark without retesting."""
    fc = make_fc(horizons=(0,))
    mat = cells.pairwise_matrix(fc, seed=1)
    assert list(mat.columns) == list(cells.MATRIX_COLUMNS)
    per_cell = mat.groupby(["variable", "horizon", "subperiod", "score"]).size()
    assert (per_cell == 6).all()
    ab = mat.set_index(["model", "versus", "subperiod"])
    for (m, v, s), r in ab.iterrows():
        back = ab.loc[(v, m, s)]
        assert r["statistic"] == pytest.approx(-back["statistic"], rel=1e-12)
        assert r["pvalue"] == pytest.approx(back["pvalue"], rel=1e-12)
        assert r["mean_diff"] == pytest.approx(-back["mean_diff"], rel=1e-12)
    for bench in ("rw", "ar", "bvar"):
        direct = cells.pairwise_tests(fc, bench, seed=1)
        view = cells.against(mat, bench)
        pd.testing.assert_frame_equal(view.sort_values(["model", "subperiod"]).reset_index(drop=True),
                                      direct.sort_values(["model", "subperiod"]).reset_index(drop=True))
    with pytest.raises(ValueError, match=r"models are \['ar', 'bvar', 'rw'\]"):
        cells.against(mat, "nope")


def test_calibration_results_apply_the_rules_per_horizon():
    """At 4 steps Berkowitz and Kupiec say they assume independence; Knüppel and the hit-rate t-test run;
    the wide frame keeps the report's columns and adds knuppel_p and the coverage t-test (80 origins:
    the t-test at c = 0.7 and 4 steps needs 5 * 4 / 0.3 = 67)."""
    fc = make_fc(n_origins=80)
    long = cells.calibration_results(fc, seed=3)
    assert list(long.columns)[:12] == list(cells.TEST_COLUMNS)
    h3 = long[long["horizon"] == 3].set_index(["model", "test"])
    assert h3.loc[("ar", "berkowitz"), "note"] == "Berkowitz assumes independence; h > 1"
    assert "assumes independence" in h3.loc[("ar", "kupiec"), "note"]
    assert 0 <= h3.loc[("ar", "knuppel"), "pvalue"] <= 1
    assert 0 <= h3.loc[("ar", "coverage_t"), "pvalue"] <= 1
    h0 = long[long["horizon"] == 0].set_index(["model", "test"])
    assert 0 <= h0.loc[("ar", "berkowitz"), "pvalue"] <= 1
    wide = cells.calibration_tests(fc, seed=3)
    for c in ("berkowitz_p", "rs_p", "rs_cvm_p", "knuppel_p", "cover_70_kupiec_p", "cover_70_coverage_t_p",
              "cover_70_rate", *(f"pit_bin_{k}" for k in range(1, 11))):
        assert c in wide, c
    # typed counts that add up to the PIT values of each cell
    bins = wide[[f"pit_bin_{k}" for k in range(1, 11)]]
    assert all(str(t).startswith("int") for t in bins.dtypes) and (bins.sum(axis=1) == wide["n"]).all()
    assert wide.loc[wide["horizon"] == 3, "berkowitz_p"].isna().all()


def test_set_tests_can_list_too_small_cells_with_their_note():
    """MCS cells below max(20, 10 b) are left out by default and listed with a note on request."""
    fc = make_fc(n_origins=25, horizons=(0, 3))
    default = cells.set_tests(fc, seed=1, settings={"mcs": {"n_boot": 200}})
    assert set(default["horizon"]) == {0}  # h = 3: 4 steps, b = 4, needs 40
    listed = cells.set_tests(fc, seed=1, settings={"mcs": {"n_boot": 200}}, include_too_small=True)
    small = listed[listed["horizon"] == 3]
    assert len(small) == 3 and small["pvalue"].isna().all() and not small["in_mcs"].any()
    assert small["note"].str.startswith("n too small (n = 25 < 40").all()
