"""One exit-code scheme for every command (README, "Exit codes"; harness.cli._common).

0 success; 1 data or input error; 2 usage or spec error; 3 another writer holds a lock;
4 the run finished with failed tasks. The codes and their meanings are common practice for
command-line tools (sysexits-style separation of usage and data errors); the table is the
project's own.
"""

from __future__ import annotations

import shutil

import pytest
from typer.testing import CliRunner

from harness.backtest import run
from harness.backtest.cache import run_dir_lock
from harness.cli import app
from harness.cli._common import DATA_ERROR, LOCKED_ERROR, TASKS_FAILED, USAGE_ERROR
from harness.spec import load_spec
from tests.harness.conftest import write_spec

FAILING = '[models.failing]\ntype = "tests.harness.user_models:FailingModel"\n'


@pytest.fixture(scope="module")
def done(tmp_path_factory, small_store):
    """A finished small run (rw, ar) and its store."""
    d = tmp_path_factory.mktemp("codes")
    spec = load_spec(write_spec(d, small_store, d / "run"))
    run(spec, jobs=1, progress=False)
    return spec, small_store


def _code(*args) -> tuple[int, str]:
    res = CliRunner().invoke(app, [str(a) for a in args])
    return res.exit_code, res.output


@pytest.mark.parametrize("args, code", [
    # 0: success
    (("score", "{run}"), 0),
    (("vintages", "asof", "{store}", "2014-01-01"), 0),
    # 2: an unknown or malformed option value
    (("score", "{run}", "--truth", "bogus"), USAGE_ERROR),
    (("score", "{run}", "--truth", "asof:2020-13-40"), USAGE_ERROR),
    (("score", "{run}", "--score", "rmse"), USAGE_ERROR),
    (("score", "{run}", "--benchmark", "nosuch"), USAGE_ERROR),
    (("report", "{run}", "--benchmark", "nosuch", "--out", "{tmp}/rep"), USAGE_ERROR),
    (("sensitivity", "{run}", "--truth", "bogus"), USAGE_ERROR),
    (("vintages", "asof", "{store}", "2020-13-01"), USAGE_ERROR),
    (("vintages", "asof", "{store}", "2014-01-01", "--variable", "nosuch"), USAGE_ERROR),
    (("vintages", "revisions", "{store}", "gdp", "--from", "bogus"), USAGE_ERROR),
    (("vintages", "revisions", "{store}", "gdp", "--transform", "bogus"), USAGE_ERROR),
    (("vintages", "revisions", "{store}", "nosuch"), USAGE_ERROR),
    (("ledger", "export", "{run}", "--out", "{tmp}/x.xlsx"), USAGE_ERROR),
    (("score", "{run}", "--out", "{tmp}/x.xlsx"), USAGE_ERROR),
    (("vintages", "export", "{store}", "{tmp}/x.xlsx"), USAGE_ERROR),
    (("vintages", "export", "{store}", "{tmp}/x.csv", "--format", "parquet"), USAGE_ERROR),
    (("vintages", "asof", "{store}", "2014-01-01", "--out", "{tmp}/x.xlsx"), USAGE_ERROR),
    (("vintages", "describe", "{store}", "nosuch", "--units", "x"), USAGE_ERROR),
    (("vintages", "describe", "{store}", "gdp"), USAGE_ERROR),
    (("news", "{run}"), USAGE_ERROR),  # no model of this run has a news decomposition
    (("cache", "info"), USAGE_ERROR),  # which cache? none named
    (("demo", "--jobs", "0"), USAGE_ERROR),
    (("run", "{tmp}/missing.toml"), USAGE_ERROR),
    (("score", "{run}", "--no-such-option"), USAGE_ERROR),
    (("no-such-command",), USAGE_ERROR),
    # 1: data or input: a missing run or store, a file that cannot be read
    (("score", "{tmp}/not-a-run"), DATA_ERROR),
    (("vintages", "info", "{tmp}/not-a-store"), DATA_ERROR),
    (("vintages", "ingest", "{tmp}/not-a-store", "{tmp}/missing.csv"), DATA_ERROR),
    (("vintages", "verify", "{tmp}/not-a-store"), DATA_ERROR),
    (("vintages", "cleanup", "{tmp}/not-a-store"), DATA_ERROR),
    (("ledger", "export", "{tmp}/not-a-run", "--out", "{tmp}/q.parquet"), DATA_ERROR),
    (("report", "{tmp}/not-a-run"), DATA_ERROR),
    (("vintages", "info", "{store}"), 0),
    (("vintages", "verify", "{store}"), 0),
    (("vintages", "export", "{store}", "{tmp}/all.parquet"), 0),
    (("ledger", "export", "{run}", "--out", "{tmp}/q.parquet"), 0),
])
def test_each_command_exits_with_the_documented_code(done, tmp_path, args, code):
    spec, store = done
    args = [a.format(run=spec.out, store=store, tmp=tmp_path) for a in args]
    got, out = _code(*args)
    assert got == code, (args, out)
    if code in (DATA_ERROR, USAGE_ERROR) and not out.startswith("Usage:"):
        # one error line on stderr, the last thing printed (stage lines may precede it);
        # typer's own usage errors have their own form
        lines = out.strip().splitlines()
        assert lines[-1].startswith("error:") and sum(x.startswith("error:") for x in lines) == 1, out


def test_a_bad_file_and_a_bad_spec(tmp_path, small_store):
    """An ingest of a malformed file is a data error (1), naming file, line and field; a spec
    with a bad value is refused by 'run --explain' as a spec error (2), naming file and key."""
    store = tmp_path / "store"
    shutil.copytree(small_store, store)
    bad = tmp_path / "bad.csv"
    bad.write_text("variable,period,release,value\ngdp,2016Q1,2016-05-15,abc\n")
    got, out = _code("vintages", "ingest", store, bad)
    assert got == DATA_ERROR and "bad.csv" in out and "line 2" in out and "value" in out, out
    spec = write_spec(tmp_path, small_store, tmp_path / "run")
    spec.write_text(spec.read_text().replace("draws = 50", "draws = -5"))
    got, out = _code("run", spec, "--explain")
    assert got == USAGE_ERROR and "spec.toml" in out and "draws" in out, out


def test_a_run_with_failed_tasks_exits_4(tmp_path, small_store):
    spec = write_spec(tmp_path, small_store, tmp_path / "run", FAILING)
    got, out = _code("run", spec, "--jobs", "1", "--quiet")
    assert got == TASKS_FAILED, out
    assert "failed" in out


def test_a_locked_run_directory_exits_3(tmp_path, small_store):
    spec = write_spec(tmp_path, small_store, tmp_path / "run")
    (tmp_path / "run").mkdir()
    with run_dir_lock(tmp_path / "run"):
        got, out = _code("run", spec, "--jobs", "1", "--quiet")
    assert got == LOCKED_ERROR, out
    assert "another run" in out


def test_a_locked_store_exits_3(tmp_path, small_store):
    from vintages import VintageStore

    store = tmp_path / "store"
    shutil.copytree(small_store, store)
    csv = tmp_path / "new.csv"
    csv.write_text("variable,period,release,value\ngdp,2016Q1,2016-05-15,101.0\n")
    with VintageStore(store)._lock():
        got, out = _code("vintages", "ingest", store, csv)
    assert got == LOCKED_ERROR, out
    assert "lock" in out
    # nothing was written: the same ingest succeeds once the lock is free
    assert _code("vintages", "ingest", store, csv)[0] == 0
