"""``vintage-harness vintages`` commands on the cases the review found: exit codes 0/1/2/3, one-line
errors, all-or-nothing multi-file ingest, verify, cleanup, describe, atomic export.

Exit codes follow the common Unix convention (0 success, 1 failure of the operation, 2 misuse
of the command, as ``grep(1)`` and ``diff(1)`` document; common practice); 3 is this project's
"the store is locked, retry". Revision statistics are not recomputed here: the check is that the
transform hint is the default, i.e. the table without ``--transform`` equals the table with the
hinted transformation (the statistics themselves are tested in ``test_revisions.py``).
"""

from __future__ import annotations

import hashlib
import shutil
import threading
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from harness.cli import app
from vintages import VintageStore

runner = CliRunner()
DATA = Path(__file__).with_name("data")
FW_2024 = "\uff12\uff10\uff12\uff14"


def snapshot(root: Path) -> dict[str, str]:
    """SHA-256 of every file under ``root`` (relative path -> digest)."""
    return {str(p.relative_to(root)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(root.rglob("*")) if p.is_file()}


def run(*args):
    return runner.invoke(app, ["vintages", *map(str, args)])


def errors(res) -> list[str]:
    return [ln for ln in res.stderr.splitlines() if ln.startswith("error:")]


@pytest.fixture
def store(tmp_path) -> Path:
    s = tmp_path / "store"
    assert run("init", s).exit_code == 0
    f = tmp_path / "seed.csv"
    f.write_text("variable,period,release,value\ngdp,1995Q3,1995-10-30,1.0\ngdp,1995Q4,1996-01-30,1.5\n"
                 "gdp,2024Q2,2024-08-15,1.25\n")
    res = run("ingest", s, f, "--units", "index")
    assert res.exit_code == 0, res.output
    return s


def write(tmp_path: Path, name: str, text: str) -> Path:
    p = tmp_path / name
    p.write_text(text)
    return p


def test_full_width_period_is_refused_and_nothing_shows_as_1969(store, tmp_path):
    """The review's row (full-width 2024Q3) exits 1 with one line naming file, line and field; asof is unchanged."""
    before = snapshot(store)
    f = write(tmp_path, "fw.csv", f"variable,period,release,value\ngdp,{FW_2024}Q3,2024-11-15,1.5\n")
    res = run("ingest", store, f)
    assert res.exit_code == 1
    (err,) = errors(res)
    assert err.startswith(f"error: {f}, line 2, field 'period': cannot parse period") and "ASCII" in err
    assert snapshot(store) == before
    asof = run("asof", store, "2024-12-01", "--format", "csv")
    assert asof.exit_code == 0
    assert asof.stdout.splitlines() == ["variable,period,value", "gdp,1995Q3,1.0", "gdp,1995Q4,1.5",
                                        "gdp,2024Q2,1.25"]


def test_multi_file_ingest_is_all_or_nothing_on_a_value_conflict(store, tmp_path):
    """ingest a.csv b.csv where b changes a value of a: exit 1 naming b, and a is not committed either."""
    before = snapshot(store)
    a = write(tmp_path, "a.csv", "variable,period,release,value\ngdp,2024Q3,2024-11-15,1.5\n")
    b = write(tmp_path, "b.csv", "variable,period,release,value\ngdp,2024Q3,2024-11-15,1.75\n")
    res = run("ingest", store, a, b)
    assert res.exit_code == 1
    (err,) = errors(res)
    assert err.startswith(f"error: {b}: 1 value(s) would change") and f"in {a}, earlier in this ingest" in err
    assert snapshot(store) == before


def test_multi_file_ingest_is_all_or_nothing_on_frequency(store, tmp_path):
    """A new variable quarterly in a.csv and monthly in b.csv: exit 1 naming b; the store is byte-identical."""
    before = snapshot(store)
    a = write(tmp_path, "a.csv", "variable,period,release,value\nexports,2024Q2,2024-08-15,5.0\n")
    b = write(tmp_path, "b.csv", "variable,period,release,value\nexports,2024-07,2024-08-15,5.0\n")
    res = run("ingest", store, a, b, "--units", "bn")
    assert res.exit_code == 1
    (err,) = errors(res)
    assert err.startswith(f"error: {b}, line 2, field 'period': period '2024-07' is monthly")
    assert snapshot(store) == before
    ok = run("ingest", store, a, write(tmp_path, "c.csv", "variable,period,release,value\n"
                                                          "exports,2024Q3,2024-11-15,5.5\n"), "--units", "bn")
    assert ok.exit_code == 0 and len(VintageStore(store).manifest()["batches"]) == 3


def test_new_variable_without_units_warns_on_stderr(store, tmp_path):
    """Ingesting a new variable without --units succeeds (exit 0) with a warning on stderr naming describe."""
    f = write(tmp_path, "x.csv", "variable,period,release,value\nexports,2024Q2,2024-08-15,5.0\n")
    res = run("ingest", store, f)
    assert res.exit_code == 0
    assert "warning:" in res.stderr and "'exports' has no units" in res.stderr and "describe" in res.stderr
    assert "1 values written" in res.stdout


def test_conflicting_units_on_ingest_point_to_describe(store, tmp_path):
    """A later ingest giving other --units for a known variable exits 1 saying to use describe; store untouched."""
    before = snapshot(store)
    f = write(tmp_path, "n.csv", "variable,period,release,value\ngdp,2024Q3,2024-11-15,1.5\n")
    res = run("ingest", store, f, "--units", "percent")
    assert res.exit_code == 1
    (err,) = errors(res)
    assert "has units 'index'" in err and "'percent'" in err and "describe" in err
    assert snapshot(store) == before


def test_describe_records_and_revisions_use_the_hint(store, tmp_path):
    """describe changes units and the transform hint (audited); revisions then default to the hinted transform."""
    rng = np.random.default_rng(7)
    periods = pd.period_range("2010Q1", periods=40, freq="Q")
    rows = []
    for k, p in enumerate(periods):
        end = p.end_time.normalize()
        level = 100 + k + rng.normal()
        for j in range(3):
            rows.append(("inv", str(p), str((end + pd.Timedelta(days=30 + 30 * j)).date()),
                         round(level + rng.normal(scale=0.3), 3)))
    f = tmp_path / "inv.csv"
    pd.DataFrame(rows, columns=["variable", "period", "release", "value"]).to_csv(f, index=False)
    assert run("ingest", store, f, "--units", "index").exit_code == 0
    res = run("describe", store, "inv", "--units", "index 2010=100", "--transform-hint", "diff", "--reason", "rebase")
    assert res.exit_code == 0 and res.stdout.splitlines() == ["inv: units 'index' -> 'index 2010=100'",
                                                               "inv: transform_hint '' -> 'diff'"]
    audit = VintageStore(store).manifest()["metadata_audit"]
    assert [(a["field"], a["old"], a["new"], a["reason"]) for a in audit] == [
        ("units", "index", "index 2010=100", "rebase"), ("transform_hint", "", "diff", "rebase")]
    default = run("revisions", store, "inv", "--format", "csv")
    hinted = run("revisions", store, "inv", "--format", "csv", "--transform", "diff")
    level = run("revisions", store, "inv", "--format", "csv", "--transform", "level")
    assert default.exit_code == hinted.exit_code == level.exit_code == 0
    assert default.stdout == hinted.stdout != level.stdout


@pytest.mark.parametrize("args,code,needle", [
    ([], 2, "nothing to change"),
    (["--transform-hint", "logdiff"], 2, "unknown --transform-hint 'logdiff'"),
])
def test_describe_usage_errors(store, args, code, needle):
    """describe without a change or with an unknown hint is a usage error (exit 2); nothing is written."""
    before = snapshot(store)
    res = run("describe", store, "gdp", *args)
    assert res.exit_code == code and needle in res.stderr
    assert snapshot(store) == before


def test_describe_unknown_variable_is_a_usage_error(store):
    """describe of a variable the store lacks exits 2 (an unknown name) listing the known ones."""
    res = run("describe", store, "nope", "--units", "x")
    assert res.exit_code == 2 and "unknown variable 'nope'; known: ['gdp']" in res.stderr


def test_verify_exit_codes(store):
    """verify exits 0 on a sound store (orphans only noted), 1 with one line per problem after a byte flip."""
    res = run("verify", store)
    assert res.exit_code == 0 and "is sound" in res.stdout
    (store / "log" / ".tmp-abcd").write_bytes(b"left by a kill")
    res = run("verify", store)
    assert res.exit_code == 0 and "log/.tmp-abcd" in res.stderr
    f = next((store / "log").glob("0*.parquet"))
    data = bytearray(f.read_bytes())
    data[40] ^= 0x01
    f.write_bytes(bytes(data))
    res = run("verify", store)
    assert res.exit_code == 1
    assert f"problem: log/{f.name}: checksum mismatch" in res.stderr and "1 problem(s) found" in res.stderr
    for cmd in (["info", store], ["asof", store, "2024-12-01"], ["export", store, store.parent / "x.csv"]):
        res = run(*cmd)
        assert res.exit_code == 1 and len(errors(res)) == 1 and f.name in errors(res)[0]


def test_cleanup_dry_run_then_apply(store):
    """cleanup lists leftovers (dry run, exit 0), removes them with --apply, and never touches listed files."""
    listed = {k: v for k, v in snapshot(store).items() if k.startswith("log/")}
    (store / ".tmp-0001").write_bytes(b"half a manifest")
    (store / "log" / "000009-0123456789ab.parquet").write_bytes(b"unlisted")
    res = run("cleanup", store)
    assert res.exit_code == 0 and "would remove .tmp-0001" in res.stdout and "dry run" in res.stdout
    assert (store / ".tmp-0001").exists()
    res = run("cleanup", store, "--apply")
    assert res.exit_code == 0 and "removed log/000009-0123456789ab.parquet" in res.stdout
    assert VintageStore(store).orphans() == []
    assert {k: v for k, v in snapshot(store).items() if k.startswith("log/")} == listed


@pytest.mark.parametrize("cmd", [["cleanup", "--apply"], ["describe", "gdp", "--units", "pct"], ["ingest"]])
def test_locked_store_exits_3(store, tmp_path, cmd):
    """While another writer holds the lock, writing commands exit 3 ('retry') and change nothing."""
    f = write(tmp_path, "n.csv", "variable,period,release,value\ngdp,2024Q3,2024-11-15,1.5\n")
    args = [cmd[0], store, *cmd[1:]] + ([f] if cmd[0] == "ingest" else [])
    held, release = threading.Event(), threading.Event()
    st = VintageStore(store)

    def holder():
        with st._lock():
            held.set()
            release.wait()

    t = threading.Thread(target=holder)
    t.start()
    try:
        assert held.wait(30)
        before = snapshot(store)
        res = run(*args)
        assert res.exit_code == 3 and "another writer holds the store's lock" in res.stderr
        assert snapshot(store) == before
        assert run("info", store).exit_code == 0  # readers never wait for the lock
    finally:
        release.set()
        t.join()
    assert run(*args).exit_code == 0


def test_export_to_a_directory_fails_cleanly(store, tmp_path):
    """export onto a directory exits 1 naming it and leaves no temporary or partial file behind."""
    out = tmp_path / "outdir"
    out.mkdir()
    before = sorted(p.name for p in tmp_path.iterdir())
    res = run("export", store, out)
    assert res.exit_code == 1 and f"{out}: is a directory" in errors(res)[0]
    assert sorted(p.name for p in tmp_path.iterdir()) == before and list(out.iterdir()) == []
    res = run("export", store, tmp_path / "all.parquet", "--format", "parquet")
    assert res.exit_code == 0 and len(pd.read_parquet(tmp_path / "all.parquet")) == 3


def test_allow_future_flag(store, tmp_path):
    """A release dated years ahead exits 1 naming --allow-future, and is accepted with the flag."""
    f = write(tmp_path, "cal.csv", "variable,period,release,value\ngdp,2024Q3,2199-01-15,1.5\n")
    res = run("ingest", store, f)
    assert res.exit_code == 1 and "--allow-future" in errors(res)[0] and "field 'release'" in errors(res)[0]
    assert run("ingest", store, f, "--allow-future").exit_code == 0


def test_info_notes_an_old_format(tmp_path):
    """info on a store written by the previous version exits 0 and notes the format and the upgrade."""
    s = shutil.copytree(DATA / "store_v1", tmp_path / "v1")
    res = run("info", s)
    assert res.exit_code == 0 and "1959Q1" in res.stdout
    assert "note: store format 'vintage-store/1'" in res.stderr
    res = run("verify", s)
    assert res.exit_code == 0 and "manifest checksum and batch chain absent" in res.stdout
