"""Pools in a run: computed after their members, cached like tasks, scored like models; bad pools refused."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from harness.backtest import read_ledger, run
from harness.errors import SpecError
from harness.evaluation import evaluate
from harness.spec import load_spec
from tests.harness.conftest import write_spec

POOLS = ('[pools.eq]\nscheme = "equal"\n'
         '[pools.opt]\nscheme = "optimal"\nmin_scored = 4\n'
         '[pools.inv]\nscheme = "inverse_score"\nwindow = 8\nmin_scored = 4\nscore = "crps"\n')


def _spec(tmp_path, small_store, extra=POOLS):
    p = write_spec(tmp_path, small_store, tmp_path / "run", extra)
    return p


def test_pools_are_ledger_entries_scored_like_models(tmp_path, small_store):
    """Each pool has draws at every origin, a weights table on the simplex, relative scores and tests."""
    spec = load_spec(_spec(tmp_path, small_store))
    res = run(spec, jobs=1, progress=False)
    assert res.ok, res.summary()
    led = read_ledger(res.run_dir)
    assert led.models == ["rw", "ar", "eq", "opt", "inv"]
    assert np.isfinite(led.draws.sel(model=["eq", "opt", "inv"]).values).all()
    w = pd.read_parquet(res.run_dir / res.manifest.pools)
    sums = w.groupby(["pool", "origin", "variable", "horizon"])["weight"].sum()
    np.testing.assert_allclose(sums.to_numpy(), 1.0, atol=1e-12)
    eq = w[w["pool"] == "eq"]["weight"]
    np.testing.assert_allclose(eq.to_numpy(), 0.5)
    # until min_scored forecasts are published, the learnt pools fall back to equal weights
    first = w[(w["pool"] == "opt") & (w["origin"] == w["origin"].min())]
    assert first["fallback"].all() and np.allclose(first["weight"], 0.5)
    ev = evaluate(res.run_dir, "first")
    assert {"eq", "opt", "inv"} <= set(ev.relative["model"])
    assert {"eq", "opt", "inv"} <= set(ev.tests["model"])
    again = run(spec, jobs=1, progress=False)
    assert again.computed == 0 and again.cached == again.total


@pytest.mark.parametrize("extra,needle", [
    ('[pools.p]\nmembers = ["rw", "bvar"]\n', "not models of this spec"),
    ('[pools.p]\nmembers = ["rw"]\n', "[pools.p] members"),
    ('[pools.p]\nmembers = ["rw", "rw"]\n', "at least two"),
    ('[pools.p]\ntruth = "latest"\n', "not a real-time truth"),
    ('[pools.rw]\nscheme = "equal"\n', "already a model"),
    ('[pools.p]\nscheme = "median"\n', "[pools.p] scheme"),
    ('[pools.p]\nscheme = "equal"\nscore = "crps"\n', "inverse_score"),
    ('[pools.p]\nweights = 3\n', "unknown key 'weights'"),
])
def test_bad_pools_are_refused_when_the_spec_is_read(tmp_path, small_store, extra, needle):
    """A pool naming an unknown model, a pool of one, a non-real-time truth, a clash: one-line spec error."""
    with pytest.raises(SpecError, match=needle.replace("[", r"\[").replace("]", r"\]")):
        load_spec(_spec(tmp_path, small_store, extra))


def test_a_pool_that_never_leaves_its_fallback_is_named_in_the_summary(tmp_path, small_store):
    """A truth that is never published in the sample (lag:20000D) leaves the optimal pool on equal
    weights throughout; the run's summary says so, per pool, beside the records in run.json."""
    extra = '[pools.late]\nscheme = "optimal"\nmin_scored = 4\ntruth = "lag:20000D"\n'
    res = run(load_spec(_spec(tmp_path, small_store, extra)), jobs=1, progress=False)
    assert res.manifest.pool_warnings
    lines = [w for w in res.warnings if w.startswith("late:")]
    assert len(lines) == 1 and f"in {len(res.manifest.pool_warnings)} cell(s)" in lines[0]
    assert "warning: late: fallback used" in res.summary()


def test_a_release_before_the_last_origin_refits_only_the_last_pool_tasks(tmp_path, small_store):
    """A revision released between the last two origins changes the members' information set at
    the last origin only; each pool then recomputes its last origin and reads every earlier one
    from the cache, with draws equal to those of a run from scratch on the new store (the pool
    at an origin depends on nothing published later: the real-time property)."""
    import shutil

    from vintages import VintageStore

    store = tmp_path / "store"
    shutil.copytree(small_store, store)
    spec = load_spec(_spec(tmp_path, store))
    first = run(spec, jobs=1, progress=False)
    origins = sorted(pd.to_datetime(first.manifest.origins))
    day = origins[-1] - pd.Timedelta(days=10)
    VintageStore(store).append(pd.DataFrame({"variable": ["gdp"], "period": ["2014Q1"],
                                             "release": [day.date().isoformat()], "value": [123.0]}),
                               source="revision")
    again = run(spec, jobs=1, progress=False)
    pools = {"eq", "opt", "inv"}
    redone = [t for t in again.manifest.tasks if t["model"] in pools and not t["cached"]]
    assert redone and {t["origin"][:10] for t in redone} == {str(origins[-1].date())}
    assert len(redone) == len(pools)
    fresh = spec.with_run(cache=tmp_path / "fresh-cache", out=tmp_path / "fresh")
    scratch = run(fresh, jobs=1, progress=False)
    a, b = read_ledger(again.run_dir).draws, read_ledger(scratch.run_dir).draws
    np.testing.assert_array_equal(a.sel(model=sorted(pools)).values, b.sel(model=sorted(pools)).values)
