"""Scoring a run again reads the evaluation back: same tables, invalidated by anything that changes them."""

from __future__ import annotations

import shutil

import numpy as np
import pandas as pd
import pytest

from harness.backtest import run
from harness.evaluation import evaluate
from harness.spec import load_spec
from tests.harness.conftest import write_spec
from vintages import VintageStore


def _same(a: pd.DataFrame, b: pd.DataFrame) -> None:
    a, b = a.reset_index(drop=True), b.reset_index(drop=True)
    for c in a.columns:
        if str(a[c].dtype).startswith("datetime64"):
            a[c], b[c] = a[c].astype("datetime64[ns]"), b[c].astype("datetime64[ns]")
    pd.testing.assert_frame_equal(a, b, check_dtype=False, check_categorical=False)


@pytest.fixture
def evaluated(tmp_path, small_store):
    store = tmp_path / "store"
    shutil.copytree(small_store, store)
    spec = load_spec(write_spec(tmp_path, store, tmp_path / "run"))
    run(spec, jobs=1, progress=False)
    return spec, evaluate(spec.out, "first")


def test_cached_evaluation_equals_a_fresh_one(evaluated):
    """Every table read back from the cache equals the one computed without it."""
    spec, cached = evaluated
    hit = evaluate(spec.out, "first")
    fresh = evaluate(spec.out, "first", cache=False)
    for name in ("table", "relative", "tests", "mcs", "calibration", "fluctuation"):
        _same(getattr(hit, name), getattr(fresh, name))
    _same(hit.forecasts.drop(columns="subperiods"), fresh.forecasts.drop(columns="subperiods"))
    assert list(hit.forecasts["subperiods"]) == list(fresh.forecasts["subperiods"])
    assert hit.regimes.equals(fresh.regimes) and hit.subperiod_names == fresh.subperiod_names


def test_a_new_release_or_another_benchmark_is_not_served_from_the_cache(evaluated):
    """A release appended to the store changes the key (truths may move); so does --benchmark."""
    spec, first = evaluated
    other = evaluate(spec.out, "first", benchmark="ar")
    assert other.benchmark == "ar" and not np.allclose(other.relative["crps"], first.relative["crps"],
                                                       equal_nan=True)
    st = VintageStore(spec.store)
    log = st.read_log()
    last = log[log["variable"] == "gdp"].iloc[-1]
    st.append(pd.DataFrame({"variable": ["gdp"], "period": [last["period"]],
                            "release": [pd.Timestamp(last["release"]) + pd.Timedelta(days=400)],
                            "value": [float(last["value"]) * 1.05]}), allow_future=True)
    latest = evaluate(spec.out, "latest")
    fresh = evaluate(spec.out, "latest", cache=False)
    _same(latest.forecasts.drop(columns="subperiods"), fresh.forecasts.drop(columns="subperiods"))


def test_an_entry_without_its_meta_file_is_not_read(evaluated):
    """An interrupted write (no meta.json yet) is recomputed, never half-read."""
    spec, _ = evaluated
    entries = list((spec.out / ".evaluations").iterdir())
    assert entries
    for e in entries:
        (e / "meta.json").unlink()
    again = evaluate(spec.out, "first")
    assert len(again.table) and all((e / "meta.json").is_file() for e in entries)


def test_a_cached_evaluation_keeps_its_column_types(evaluated):
    """A cache hit returns the same dtypes as a fresh evaluation (datetime units included)."""
    spec, _ = evaluated
    hit = evaluate(spec.out, "first")
    fresh = evaluate(spec.out, "first", cache=False)
    for name in ("forecasts", "table", "tests", "mcs", "calibration"):
        a, b = getattr(hit, name), getattr(fresh, name)
        dt = {c: str(b[c].dtype) for c in b.columns if str(b[c].dtype).startswith("datetime64")}
        assert {c: str(a[c].dtype) for c in dt} == dt, name


def test_the_verdicts_band_tests_are_kept_beside_the_evaluation(evaluated, monkeypatch):
    """A second decide() on a cached evaluation reads its band tests back (no test is rerun) and
    gives the same decision table; a different seed is computed afresh."""
    import importlib

    decide_mod = importlib.import_module("harness.verdicts.decide")

    spec, _ = evaluated
    ev = evaluate(spec.out, "first")
    assert ev.cache_key
    first = decide_mod.decide(ev)
    calls = []
    real = decide_mod._band_tests
    monkeypatch.setattr(decide_mod, "_band_tests", lambda *a, **k: calls.append(1) or real(*a, **k))
    again = decide_mod.decide(evaluate(spec.out, "first"))
    assert calls == []
    _same(first.table.drop(columns="reasons"), again.table.drop(columns="reasons"))
    assert list(first.table["reasons"]) == list(again.table["reasons"])
    decide_mod.decide(ev, seed=999)
    assert calls == [1]


def test_the_cache_keeps_the_most_recently_used_entries(evaluated, monkeypatch):
    """Beyond KEEP entries the least recently used is removed; reading an entry keeps it."""
    import os
    import time

    from harness.evaluation import cache as ecache

    spec, _ = evaluated
    monkeypatch.setattr(ecache, "KEEP", 2)
    root = spec.out / ".evaluations"
    evaluate(spec.out, "latest")
    first = {d.name for d in root.iterdir()}
    assert len(first) == 2
    old = time.time() - 100
    for d in root.iterdir():  # age both, then use 'first' again: it becomes the most recent
        os.utime(d / "meta.json", (old, old))
    evaluate(spec.out, "first")
    evaluate(spec.out, "first", benchmark="ar")  # a third entry: the least recent ('latest') goes
    left = {d.name for d in root.iterdir()}
    assert len(left) == 2
    kept = evaluate(spec.out, "first")
    assert kept.cache_key in left
