"""Crash safety of run metadata and workers: kills, a full disk, orphaned workers, leftovers cleaned."""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pandas as pd
import psutil
import pytest

from harness.backtest import make_plan, read_ledger, run
from harness.backtest.cache import TaskCache
from harness.spec import load_spec
from tests.harness.conftest import write_spec
from vintages.store import VintageStore

ROOT = Path(__file__).resolve().parents[3]

CHILD = """
import os, resource, signal, sys
from harness.backtest import runner
from harness.spec import load_spec
action, point = sys.argv[2], sys.argv[3]
def kill():
    os.kill(os.getpid(), signal.SIGKILL)
def no_space():
    # the file-size limit makes the next larger write fail with EFBIG, as a full disk would
    signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
    resource.setrlimit(resource.RLIMIT_FSIZE, (2000, 2000))
runner.CHECKPOINTS[point] = {"kill": kill, "no_space": no_space}[action]
try:
    runner.run(load_spec(sys.argv[1]), jobs=1, progress=False)
except Exception as exc:
    print("ERROR", type(exc).__name__, exc)
    sys.exit(1)
"""


def _env():
    return dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))


def _child(spec_path, action, point):
    return subprocess.run([sys.executable, "-c", CHILD, str(spec_path), action, point], cwd=ROOT, env=_env(),
                          capture_output=True, text=True, timeout=300)


@pytest.fixture
def changed(tmp_path, small_store):
    """A finished run, then a new release in its store: the next run writes a different ledger."""
    store = tmp_path / "store"
    shutil.copytree(small_store, store)
    d = tmp_path / "spec"
    d.mkdir()
    spec = load_spec(write_spec(d, store, d / "out"))
    run(spec, jobs=1, progress=False)
    old = {"manifest": (spec.out / "run.json").read_bytes(), "draws": read_ledger(spec.out).draws.values.copy()}
    last = pd.Timestamp(make_plan(spec).origins[-1])
    VintageStore(store).append(pd.DataFrame({"variable": ["cpi"], "period": [str(pd.Period(last, "M") - 2)],
                                             "release": [last - pd.Timedelta(days=5)], "value": [140.0]}),
                               source="revision.csv")
    return spec, old


@pytest.mark.parametrize("point, state", [("after_ledger", "old"), ("after_manifest", "new")])
def test_kill_between_ledger_and_manifest_leaves_one_whole_run(changed, point, state):
    """SIGKILL after the new ledger (or after the new manifest) leaves the old (or new) run whole; clean removes the rest."""
    spec, old = changed
    res = _child(spec.path, "kill", point)
    assert res.returncode == -signal.SIGKILL, res.stdout + res.stderr
    led = read_ledger(spec.out)  # whole: the manifest, its ledger and provenance agree
    same = (spec.out / "run.json").read_bytes() == old["manifest"]
    assert same == (state == "old")
    if state == "old":
        assert led.draws.values.tobytes() == old["draws"].tobytes()
    else:
        assert led.draws.values.tobytes() != old["draws"].tobytes()
        assert np.array_equal(led.draws.values[:, :-1], old["draws"][:, :-1], equal_nan=True)
    # exactly one ledger is not named by run.json: the new one (killed before commit) or the old one
    named = led.manifest.ledger
    stray = [p for p in spec.out.glob("ledger-*.parquet") if p.name != named]
    assert len(stray) == 1
    cleaned = TaskCache(spec.cache_dir).clean(apply=True)
    assert str(stray[0]) in cleaned.removed and not stray[0].exists()
    assert read_ledger(spec.out).draws.values.tobytes() == led.draws.values.tobytes()
    again = run(spec, jobs=1, progress=False)
    assert again.computed == 0  # the killed run's tasks were kept
    assert read_ledger(spec.out).draws.values[:, -1].tobytes() != old["draws"][:, -1].tobytes()


def test_full_disk_while_rewriting_run_json_keeps_the_previous_one(changed):
    """A write of run.json that fails (file-size limit, EFBIG) keeps the previous manifest and names the file."""
    spec, old = changed
    res = _child(spec.path, "no_space", "after_ledger")
    assert res.returncode == 1, res.stdout + res.stderr
    assert f"{spec.out / 'run.json'}: cannot write the run manifest" in res.stdout
    assert (spec.out / "run.json").read_bytes() == old["manifest"]
    assert read_ledger(spec.out).draws.values.tobytes() == old["draws"].tobytes()
    assert not list(spec.out.glob(".tmp-*"))  # the failed write removed its temporary file


def test_full_disk_while_writing_the_ledger_names_it(changed):
    """When the ledger itself cannot be written the error names that file and run.json stays as it was."""
    spec, old = changed
    res = _child(spec.path, "no_space", "registered")
    assert res.returncode == 1, res.stdout + res.stderr
    assert "ledger-" in res.stdout and ".parquet: cannot write" in res.stdout, res.stdout
    assert (spec.out / "run.json").read_bytes() == old["manifest"]
    assert read_ledger(spec.out).draws.values.tobytes() == old["draws"].tobytes()


def _pool_run(tmp_path, small_store):
    """A CLI run whose loky workers block for a minute per task, its driver pid and its workers."""
    d = tmp_path / "pool"
    d.mkdir()
    extra = '[models.sleeper]\ntype = "tests.harness.backtest.models:PoolSleeper"\nseconds = 60.0\ninline = 0.3\n'
    spec = load_spec(write_spec(d, small_store, d / "out", extra))
    proc = subprocess.Popen([sys.executable, "-m", "harness.cli._app", "run", str(spec.path), "--jobs", "2", "-q"],
                            cwd=ROOT, env=_env(), stdout=subprocess.PIPE, stderr=subprocess.STDOUT)
    deadline = time.time() + 120
    workers = []
    while time.time() < deadline and proc.poll() is None:
        try:
            kids = psutil.Process(proc.pid).children(recursive=True)
            workers = [k for k in kids if "LokyProcess" in " ".join(k.cmdline())]
        except psutil.Error:
            workers = []
        if len(workers) >= 2:
            break
        time.sleep(0.1)
    assert proc.poll() is None and len(workers) >= 2, "the run did not start its pool"
    time.sleep(1.5)  # the workers are inside their minute-long tasks now
    return proc, workers


def _gone(procs, timeout: float) -> bool:
    _, alive = psutil.wait_procs(procs, timeout=timeout)
    return not alive


def _eof_within(stream, timeout: float) -> bool:
    done = threading.Event()

    def drain():
        stream.read()  # returns at EOF: when every process holding the pipe has closed it
        done.set()

    threading.Thread(target=drain, daemon=True).start()
    return done.wait(timeout)


@pytest.mark.slow
def test_sigterm_shuts_the_pool_down(tmp_path, small_store):
    """SIGTERM to the driver kills its workers and exits 143 within seconds, not when the minute-long tasks end."""
    proc, workers = _pool_run(tmp_path, small_store)
    proc.send_signal(signal.SIGTERM)
    assert _eof_within(proc.stdout, 20)
    assert proc.wait(timeout=20) == 128 + signal.SIGTERM
    assert _gone(workers, 10)


@pytest.mark.slow
def test_workers_leave_when_the_driver_is_killed(tmp_path, small_store):
    """After SIGKILL of the driver alone its workers exit within seconds and release the caller's pipe."""
    proc, workers = _pool_run(tmp_path, small_store)
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait(timeout=10)
    assert _eof_within(proc.stdout, 20), "a worker still holds the caller's pipe"
    assert _gone(workers, 10)
