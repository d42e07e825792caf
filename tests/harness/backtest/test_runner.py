"""The runner: determinism across backends and inline runs, resume after a kill, incremental reruns, failure isolation."""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from harness.backtest import make_plan, run
from harness.backtest.ledger import read_ledger
from harness.cli import app
from harness.spec import load_spec
from tests.harness.conftest import write_spec
from vintages.store import VintageStore

ROOT = Path(__file__).resolve().parents[3]


def _spec(tmp_path, store, name="run", extra="", cache=None):
    d = tmp_path / name
    d.mkdir(parents=True, exist_ok=True)
    s = load_spec(write_spec(d, store, d / "out", extra))
    return s.with_run(cache=cache) if cache is not None else s


def _draws(run_dir):
    return read_ledger(run_dir).draws.values


def test_ledgers_bit_identical_across_workers_and_backends(tmp_path, small_store):
    """--jobs 1, --jobs 2 (loky pool, and inline), a 2-worker dask LocalCluster give bit-identical draws."""
    pytest.importorskip("distributed")
    runs = [run(_spec(tmp_path, small_store, "a", cache=tmp_path / "ca"), jobs=1, progress=False),
            run(_spec(tmp_path, small_store, "b", cache=tmp_path / "cb"), jobs=2, progress=False,
                inline_seconds=0),
            run(_spec(tmp_path, small_store, "c", cache=tmp_path / "cc"), jobs=2, backend="dask",
                progress=False),
            run(_spec(tmp_path, small_store, "d", cache=tmp_path / "cd"), jobs=2, progress=False)]
    assert all(r.ok and r.computed == r.total for r in runs)
    draws = [_draws(r.run_dir) for r in runs]
    assert np.isfinite(draws[0]).all()
    assert all(d.tobytes() == draws[0].tobytes() for d in draws[1:])
    # the joint paths (task cache, draw order) agree too, and sort to the ledger's draws
    joints = [read_ledger(r.run_dir).joint_draws().values for r in runs]
    assert all(j.tobytes() == joints[0].tobytes() for j in joints[1:])
    assert np.array_equal(np.sort(joints[0], axis=-1), draws[0])


def test_rerun_uses_cache_only(tmp_path, small_store):
    """A second run of the same spec computes nothing and reproduces the ledger."""
    s = _spec(tmp_path, small_store)
    first = run(s, jobs=1, progress=False)
    again = run(s, jobs=1, progress=False)
    assert first.computed == first.total and again.computed == 0 and again.cached == again.total
    assert _draws(first.run_dir).tobytes() == _draws(again.run_dir).tobytes()


def test_resume_after_sigkill_matches_uninterrupted_run(tmp_path, small_store):
    """A run killed with SIGKILL midway resumes from its completed tasks; the ledger equals an uninterrupted run."""
    extra = '[models.slow]\ntype = "tests.harness.user_models:SlowModel"\nseconds = 0.25\n'
    s = _spec(tmp_path, small_store, "killed", extra)
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    proc = subprocess.Popen([sys.executable, "-m", "harness.cli._app", "run", str(s.path), "--jobs", "1", "-q"],
                            cwd=ROOT, env=env, stdout=subprocess.PIPE, stderr=subprocess.STDOUT)
    cache = s.cache_dir
    deadline = time.time() + 120
    while time.time() < deadline:
        done = len(list(cache.glob("tasks/*/*.parquet"))) if cache.is_dir() else 0
        if done >= 10 or proc.poll() is not None:
            break
        time.sleep(0.05)
    assert proc.poll() is None, "the run finished before it could be interrupted"
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    before = {p.name for p in cache.glob("tasks/*/*.parquet")}
    assert 10 <= len(before) < len(make_plan(s).tasks)
    lines = []
    resumed = run(s, jobs=1, progress=False, log=lines.append)
    assert resumed.cached == len(before) and resumed.computed == resumed.total - len(before)
    assert f"{len(before)} from cache" in lines[0]
    clean = run(_spec(tmp_path, small_store, "clean", extra, cache=tmp_path / "other"), jobs=1, progress=False)
    assert clean.computed == clean.total
    assert _draws(resumed.run_dir).tobytes() == _draws(clean.run_dir).tobytes()


def test_new_release_refits_only_affected_origins(tmp_path, small_store):
    """After ingesting one revision dated before the last origin, only the origins after it are refit."""
    store = tmp_path / "store"
    shutil.copytree(small_store, store)
    s = _spec(tmp_path, store)
    run(s, jobs=1, progress=False)
    plan = make_plan(s)
    last = plan.origins[-1]
    rel = pd.Timestamp(last) - pd.Timedelta(days=10)
    new = pd.DataFrame({"variable": ["cpi"], "period": [str(pd.Period(rel, "M") - 2)],
                        "release": [rel], "value": [123.456]})
    VintageStore(store).append(new, source="revision.csv")
    again = run(s, jobs=1, progress=False)
    affected = int((plan.origins >= np.datetime64(rel.date(), "D")).sum())
    assert affected >= 1
    assert again.computed == affected * len(s.models)
    assert again.cached == again.total - again.computed


def test_failing_user_model_is_isolated_and_retried(tmp_path, small_store):
    """A user model that raises is recorded with its traceback; the run continues; --retry-failed reruns only those."""
    extra = ('[models.bad]\ntype = "tests.harness.user_models:FailingModel"\n'
             '[models.nan]\ntype = "tests.harness.user_models:NaNModel"\n')
    s = _spec(tmp_path, small_store, "fail", extra)
    res = run(s, jobs=2, progress=False)
    n_orig = len(make_plan(s).origins)
    fails = [f for f in res.failed if f["model"] == "bad"]
    nans = [f for f in res.failed if f["model"] == "nan"]
    assert len(nans) == n_orig and all("NaN" in f["error"] for f in nans)
    assert 0 < len(fails) < n_orig and all("deliberate failure" in f["traceback"] for f in fails)
    led = read_ledger(res.run_dir)
    ok_models = led.draws.sel(model=["rw", "ar"]).values
    assert np.isfinite(ok_models).all()
    assert len(led.failures) == len(res.failed)
    retry = run(s, jobs=1, progress=False, retry_failed=True)
    assert retry.computed == len(res.failed)
    # the CLI ends a run with failures with exit code 4 (README, "Exit codes") and a summary
    out = CliRunner().invoke(app, ["run", str(s.path), "-q"])
    assert out.exit_code == 4
    assert "failed" in out.output and "--retry-failed" in out.output


def test_explain_prints_plan_without_running(tmp_path, small_store):
    """--explain prints origins, models and task counts and computes nothing."""
    s = _spec(tmp_path, small_store)
    out = CliRunner().invoke(app, ["run", str(s.path), "--explain"])
    assert out.exit_code == 0, out.output
    assert "tasks" in out.output and "rw = nochange" in out.output
    assert not (s.out / "run.json").exists() and not list(s.out.glob("ledger-*.parquet"))
