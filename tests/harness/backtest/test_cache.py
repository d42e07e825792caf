"""The shared task cache: where it is, reuse across run directories, the plan cache, and cleaning."""

from __future__ import annotations

import os
import shutil
import threading

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from harness.backtest import make_plan, read_ledger, run
from harness.backtest.cache import TaskCache
from harness.backtest.errors import CacheBusyError, RunLockedError
from harness.cli import app
from harness.spec import load_spec
from tests.harness.conftest import write_spec
from vintages.store import VintageStore


def _spec(tmp_path, store, name="run", extra=""):
    d = tmp_path / name
    d.mkdir(parents=True, exist_ok=True)
    return load_spec(write_spec(d, store, d / "out", extra))


def test_cache_location_spec_then_environment_then_beside_the_store(tmp_path, small_store, monkeypatch):
    """[run] cache wins, then HARNESS_CACHE, then .harness-cache beside (never inside) the store."""
    monkeypatch.delenv("HARNESS_CACHE")
    s = _spec(tmp_path, small_store)
    assert s.cache_dir == small_store.parent / ".harness-cache"
    assert small_store not in s.cache_dir.parents
    monkeypatch.setenv("HARNESS_CACHE", str(tmp_path / "env"))
    assert s.cache_dir == (tmp_path / "env").resolve()
    assert s.with_run(cache=tmp_path / "spec-cache").cache_dir == tmp_path / "spec-cache"


def test_cache_inside_the_store_is_refused(tmp_path, small_store):
    """A [run] cache inside the store is a spec error naming the key."""
    from harness.errors import SpecError

    store = tmp_path / "store"
    shutil.copytree(small_store, store)
    d = tmp_path / "s"
    d.mkdir()
    p = write_spec(d, store, d / "out")
    p.write_text(p.read_text().replace("[run]\n", f'[run]\ncache = "{store / "c"}"\n'))
    with pytest.raises(SpecError, match=r"\[run\] cache"):
        load_spec(p)


def test_new_run_directory_reuses_every_finished_task(tmp_path, small_store):
    """A second run directory of the same spec computes nothing and holds the same draws."""
    s = _spec(tmp_path, small_store)
    first = run(s, jobs=1, progress=False)
    other = run(s.with_run(out=tmp_path / "elsewhere"), jobs=1, progress=False)
    assert first.computed == first.total and other.computed == 0
    assert read_ledger(other.run_dir).draws.values.tobytes() == read_ledger(first.run_dir).draws.values.tobytes()
    regs = {rec["run_dir"] for _, rec in TaskCache(s.cache_dir).registrations()}
    assert regs == {str(first.run_dir.resolve()), str(other.run_dir.resolve())}


def test_plan_cache_reuses_information_sets_until_the_store_changes(tmp_path, small_store):
    """The second plan comes from the plan cache with the same keys; a new release or another policy rebuilds it."""
    store = tmp_path / "store"
    shutil.copytree(small_store, store)
    s = _spec(tmp_path, store)
    fresh = make_plan(s)
    again = make_plan(s)
    assert fresh.reused == "" and again.reused == "plan"
    assert [t.key for t in again.tasks] == [t.key for t in fresh.tasks]
    for a, b in zip(fresh.infos, again.infos, strict=True):
        assert a.data_hash() == b.data_hash()
        assert a.panel.equals(b.panel)
    # another ragged-edge policy: the same store state, so the release index is reused
    other = make_plan(s.with_run(policy="balance"))
    assert other.reused == "cube"
    # a new release: the sets of the origins before it are reused, the last one is rebuilt
    last = pd.Timestamp(fresh.origins[-1])
    VintageStore(store).append(pd.DataFrame({"variable": ["cpi"], "period": [str(pd.Period(last, "M") - 2)],
                                             "release": [last - pd.Timedelta(days=3)], "value": [150.0]}),
                               source="revision.csv")
    changed = make_plan(s)
    assert changed.reused == "incremental"
    assert changed.tasks[-1].key != fresh.tasks[-1].key and changed.tasks[0].key == fresh.tasks[0].key


def test_plan_cache_skips_a_file_others_could_have_written(tmp_path, small_store):
    """A plan whose directory is open to other users is not unpickled: the plan is rebuilt."""
    s = _spec(tmp_path, small_store)
    make_plan(s)
    plans = TaskCache(s.cache_dir).plan_dir()
    os.chmod(plans, 0o777)
    try:
        assert make_plan(s).reused == "cube"
    finally:
        os.chmod(plans, 0o700)
    assert make_plan(s).reused == "plan"


def test_clean_removes_only_what_no_run_uses(tmp_path, small_store):
    """clean drops a deleted run's registration and its entries, keeps a live run's, removes temporary files."""
    extra = '[models.drift]\ntype = "nochange"\n'
    keep = run(_spec(tmp_path, small_store, "keep"), jobs=1, progress=False)
    gone = run(_spec(tmp_path, small_store, "gone", extra), jobs=1, progress=False)
    cache = TaskCache(keep.manifest.cache)
    only_gone = {t["key"] for t in gone.manifest.tasks} - {t["key"] for t in keep.manifest.tasks}
    assert only_gone
    shutil.rmtree(gone.run_dir)
    # files a killed writer leaves: temporary names in the cache and in a run directory,
    # and a ledger file no manifest names
    junk = [cache.root / "tasks" / "ab" / ".tmp-0123456789abcdef", cache.root / ".tmp-fedcba9876543210",
            keep.run_dir / ".tmp-00aa00aa00aa00aa", keep.run_dir / "ledger-ffffffffffffffff.parquet",
            # the in-run task cache of earlier versions
            keep.run_dir / "tasks" / ("0123abcd" * 4 + ".parquet")]
    for f in junk:
        f.parent.mkdir(parents=True, exist_ok=True)
        f.write_bytes(b"partial")
    dry = cache.clean()
    assert not dry.removed and all(f.exists() for f in junk)
    res = cache.clean(apply=True)
    assert str(gone.run_dir.resolve()) in res.stale_runs
    assert not any(f.exists() for f in junk)
    assert (keep.run_dir / "spec.toml").is_file() and (keep.run_dir / "run.json").is_file()
    assert not any(cache.has(k) for k in only_gone)
    assert all(cache.has(t["key"]) for t in keep.manifest.tasks)
    assert (keep.run_dir / keep.manifest.ledger).is_file()
    again = run(_spec(tmp_path, small_store, "keep"), jobs=1, progress=False)
    assert again.computed == 0 and read_ledger(again.run_dir).draws.shape[0] == 2


def test_clean_keeps_a_live_runs_pools_and_drops_a_deleted_runs(tmp_path, small_store):
    """A pool's per-origin tasks and weights are the run's entries: 'clean' keeps them while the run
    directory exists (a rerun reads every pool back) and removes them once it is gone."""
    pool = '[pools.eq]\nscheme = "equal"\nmembers = ["rw", "ar"]\n'
    keep = run(_spec(tmp_path, small_store, "keep", pool), jobs=1, progress=False)
    gone = run(_spec(tmp_path, small_store, "gone", pool.replace('"ar"]', '"ar"]\nwindow = 4\n')
                     .replace('"equal"', '"inverse_score"') + "min_scored = 2\n"), jobs=1, progress=False)
    cache = TaskCache(keep.manifest.cache)
    pool_tasks = [t["key"] for t in keep.manifest.tasks if t["model"] == "eq"]
    assert pool_tasks and all(cache.has(k) for k in pool_tasks)
    assert not [rel for rel, _ in cache.clean().removable if not rel.startswith("runs")]
    weights = sorted((cache.root / "pools").glob("*.json"))
    assert len(weights) == 2
    shutil.rmtree(gone.run_dir)
    res = cache.clean(apply=True)
    assert sum(rel.startswith("pools") for rel in res.removed) == 2  # the gone pool's weights and meta
    assert all(cache.has(k) for k in pool_tasks) and len(list((cache.root / "pools").glob("*.json"))) == 1
    again = run(_spec(tmp_path, small_store, "keep", pool), jobs=1, progress=False)
    assert again.computed == 0


def test_clean_waits_for_no_run(tmp_path, small_store):
    """While a run holds the cache's shared lock, clean refuses at once (and the CLI exits 3)."""
    s = _spec(tmp_path, small_store)
    run(s, jobs=1, progress=False)
    cache = TaskCache(s.cache_dir)
    with cache.using():
        with pytest.raises(CacheBusyError, match="a run is using this cache"):
            cache.clean(apply=True)
        out = CliRunner().invoke(app, ["cache", "clean", "--cache", str(cache.root), "--apply"])
        assert out.exit_code == 3, out.output
    assert "0 gone" in cache.clean().summary()


def test_a_second_run_on_the_same_directory_is_refused(tmp_path, small_store):
    """A run directory another run is writing is refused at once, naming its lock."""
    from harness.backtest.cache import run_dir_lock

    s = _spec(tmp_path, small_store)
    s.out.mkdir(parents=True)
    started = threading.Event()
    release = threading.Event()

    def hold():
        with run_dir_lock(s.out):
            started.set()
            release.wait(30)

    t = threading.Thread(target=hold)
    t.start()
    started.wait(10)
    try:
        with pytest.raises(RunLockedError, match=r"\.lock"):
            run(s, jobs=1, progress=False)
    finally:
        release.set()
        t.join()


def test_cache_commands(tmp_path, small_store):
    """'vintage-harness cache info' lists entries and the runs using them; 'clean' without --apply removes nothing."""
    s = _spec(tmp_path, small_store)
    res = run(s, jobs=1, progress=False)
    r = CliRunner().invoke(app, ["cache", "info", "--spec", str(s.path)])
    assert r.exit_code == 0, r.output
    assert f"{res.total} task results" in r.output and str(res.run_dir.resolve()) in r.output
    shutil.rmtree(res.run_dir)
    r = CliRunner().invoke(app, ["cache", "clean", "--spec", str(s.path)])
    assert r.exit_code == 0 and "would remove" in r.output and "dry run" in r.output
    assert TaskCache(s.cache_dir).info()["tasks"] == res.total
    r = CliRunner().invoke(app, ["cache", "clean", "--spec", str(s.path), "--apply"])
    assert r.exit_code == 0 and "removed" in r.output
    assert TaskCache(s.cache_dir).info()["tasks"] == 0
    r = CliRunner().invoke(app, ["cache", "clean"], env={"HARNESS_CACHE": ""})
    assert r.exit_code == 2 and "name the cache" in r.output


def test_registration_precedes_lookup(tmp_path, small_store):
    """A run registers every key of its plan (done or not) in the cache before it computes."""
    s = _spec(tmp_path, small_store)
    plan = make_plan(s)
    seen = {}

    def spy():
        (path, rec), = TaskCache(s.cache_dir).registrations()
        seen["keys"] = set(rec["keys"])
        seen["done"] = sum(TaskCache(s.cache_dir).has(t.key) for t in plan.tasks)

    from harness.backtest import runner

    runner.CHECKPOINTS["registered"] = spy
    try:
        run(s, jobs=1, progress=False)
    finally:
        runner.CHECKPOINTS.clear()
    assert seen["keys"] == {t.key for t in plan.tasks} and seen["done"] == 0
    assert np.isfinite(read_ledger(s.out).draws.values).all()


def test_new_run_directory_links_or_reuses_another_runs_ledger(tmp_path, small_store, monkeypatch):
    """A run whose tasks another run directory's ledger holds links that file; a superset reads only its new tasks."""
    a = run(_spec(tmp_path, small_store, "a"), jobs=1, progress=False)
    same = run(_spec(tmp_path, small_store, "a").with_run(out=tmp_path / "same"), jobs=1, progress=False)
    assert same.manifest.ledger == a.manifest.ledger
    assert os.path.samefile(same.run_dir / same.manifest.ledger, a.run_dir / a.manifest.ledger)
    reads = []
    original = TaskCache.read_task

    def counting(self, key):
        reads.append(key)
        return original(self, key)

    monkeypatch.setattr(TaskCache, "read_task", counting)
    extra = '[models.drift]\ntype = "nochange"\n'
    b = run(_spec(tmp_path, small_store, "b", extra), jobs=1, progress=False)
    drift = {t["key"] for t in b.manifest.tasks if t["model"] == "drift"}
    assert set(reads) == drift  # the rw and ar rows came from a's ledger
    la, lb = read_ledger(a.run_dir), read_ledger(b.run_dir)
    assert lb.draws.sel(model=["rw", "ar"]).values.tobytes() == la.draws.values.tobytes()
    cols = ["model", "origin", "variable", "last_observed", "source_release", "key"]
    pb = lb.provenance[lb.provenance["model"] != "drift"].sort_values(["key", "variable"]).reset_index(drop=True)
    pa_ = la.provenance.sort_values(["key", "variable"]).reset_index(drop=True)
    assert pb[cols].astype(str).equals(pa_[cols].astype(str))
    joint = lb.joint_draws(models=["drift"]).values
    assert np.array_equal(np.sort(joint, axis=-1), lb.draws.sel(model=["drift"]).values)


@pytest.mark.parametrize("change", ["append", "supersede"])
def test_incremental_plan_equals_a_full_rebuild(tmp_path, small_store, change):
    """After a new release or a corrected old one, reused-plus-rebuilt information sets equal a rebuild from scratch.

    The origins before the first changed release day keep their sets (no look-ahead: nothing
    released later was in them); the others are rebuilt.
    """
    store = tmp_path / "store"
    shutil.copytree(small_store, store)
    s = _spec(tmp_path, store)
    before = make_plan(s)
    st = VintageStore(store)
    if change == "append":
        day = pd.Timestamp(before.origins[-3]) - pd.Timedelta(days=2)
        rows = pd.DataFrame({"variable": ["gdp"], "period": [str(pd.Period(day, "Q") - 1)], "release": [day],
                             "value": [123.0]})
        st.append(rows, source="new.csv")
    else:
        log = st.read_log(with_superseded=False)
        old = log[(log["variable"] == "cpi") & (log["release"] < pd.Timestamp(before.origins[len(before.origins) // 2]))]
        row = old.iloc[-1]
        day = pd.Timestamp(row["release"])
        st.append(pd.DataFrame({"variable": ["cpi"], "period": [row["period"]], "release": [day],
                                "value": [float(row["value"]) * 1.01]}), supersede=True, reason="correction",
                  source="fix.csv")
    inc = make_plan(s)
    full = make_plan(s.with_run(cache=tmp_path / "fresh"))
    assert inc.reused == "incremental" and full.reused == ""
    assert [t.key for t in inc.tasks] == [t.key for t in full.tasks]
    for a, b in zip(inc.infos, full.infos, strict=True):
        assert a.data_hash() == b.data_hash() and a.panel.equals(b.panel)
        assert a.source_release == b.source_release
    cut = np.datetime64(day.date(), "D")
    before_keys = {(t.model, t.origin): t.key for t in before.tasks}
    for t in inc.tasks:
        if t.origin < cut:  # known before the change: the same task, served from the cache
            assert t.key == before_keys[(t.model, t.origin)]
    assert any(t.key != before_keys[(t.model, t.origin)] for t in inc.tasks if t.origin >= cut)


def test_pseudo_real_time_plans_are_rebuilt_after_a_change(tmp_path, small_store):
    """Pseudo-real-time information sets read the latest vintage: after a new release none is reused."""
    store = tmp_path / "store"
    shutil.copytree(small_store, store)
    s = _spec(tmp_path, store).with_run(mode="pseudo")
    first = make_plan(s)
    last = pd.Timestamp(first.origins[-1])
    VintageStore(store).append(pd.DataFrame({"variable": ["gdp"], "period": [str(pd.Period(last, "Q") - 3)],
                                             "release": [last - pd.Timedelta(days=1)], "value": [99.0]}),
                               source="late.csv")
    assert make_plan(s).reused in ("", "cube")


def test_clean_keeps_a_cache_kept_inside_its_run_directory(tmp_path, small_store):
    """A run whose [run] cache is RUN/tasks (the earlier default) keeps its entries through a clean."""
    s = _spec(tmp_path, small_store)
    s = s.with_run(cache=s.out / "tasks")
    first = run(s, jobs=1, progress=False)
    res = TaskCache(s.cache_dir).clean(apply=True)
    assert not res.removed
    assert run(s, jobs=1, progress=False).computed == 0 and first.computed == first.total


def test_release_index_comes_from_the_cube_cache(tmp_path, small_store):
    """release_index gives the store's cube (same as-of view) and keeps it in the cache for the next call."""
    from harness.backtest.plan import cube_digest, release_index

    cache = TaskCache(tmp_path / "c")
    cube = release_index(small_store, ["gdp", "cpi"], cache.root)
    st = VintageStore(small_store)
    assert cache.cube_path(cube_digest(st.checksum(), ["gdp", "cpi"])).is_file()
    again = release_index(small_store, ["cpi", "gdp"], cache.root)
    ref = st.cube(variables=["gdp", "cpi"])
    day = pd.Timestamp("2012-05-01")
    a, b, c = cube.asof(day).to_frame(), again.asof(day).to_frame(), ref.asof(day).to_frame()
    pd.testing.assert_frame_equal(a, c)
    pd.testing.assert_frame_equal(b, c)
