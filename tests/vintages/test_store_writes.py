"""Writing the store: several batches all-or-nothing, metadata changes with audit, atomic files
created with the umask, errors that name the file, cleanup of what kills leave, kills around the
multi-batch commit.

References: the write-to-temporary / fsync / rename discipline is common practice on POSIX file
systems (``rename`` replaces its target atomically: POSIX.1-2017, ``rename()``); a new file's
permission bits are the requested mode with the umask's bits cleared (POSIX.1-2017, ``open()``
and ``umask()``), so mode ``0o666`` under umask ``0o022`` gives ``0o644``; ``ENOSPC`` and
``EACCES`` are the POSIX error numbers for a full device and a denied permission. The
reference "old" and "new" states of the kill tests are computed independently: the log read
before the append, and the log of an identical copy after an uninterrupted append.
"""

from __future__ import annotations

import errno
import hashlib
import os
import shutil
import signal
import stat
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from vintages import (
    FileAccessError,
    InputError,
    MetadataConflictError,
    ReleaseConflictError,
    StoreLockedError,
    VintageStore,
)
from vintages.periods import format_periods

HELPER = Path(__file__).with_name("crash_helper.py")
ROOT = Path(__file__).resolve().parents[2]


def snapshot(root: Path) -> dict[str, str]:
    """SHA-256 of every file under ``root`` (relative path -> digest)."""
    return {str(p.relative_to(root)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(root.rglob("*")) if p.is_file()}


def rows(variable: str, periods: list[str], releases: list[str], values: list[float]) -> pd.DataFrame:
    return pd.DataFrame({"variable": variable, "period": periods, "release": pd.to_datetime(releases),
                         "value": values})


@pytest.fixture
def store(tmp_path) -> VintageStore:
    st = VintageStore.init(tmp_path / "store")
    st.append(rows("gdp", ["2020Q1", "2020Q2"], ["2020-04-30", "2020-07-30"], [100.0, 99.0]),
              {"gdp": {"units": "index", "description": "Veldmark real output"}}, source="seed.csv")
    return st


# ---------------------------------------------------------------- append_many


def test_append_many_commits_all_batches_once(store):
    """Two valid batches become two batch files listed by one manifest write; results come per batch."""
    a = rows("gdp", ["2020Q3"], ["2020-10-30"], [101.0])
    b = rows("cpi", ["2020-09"], ["2020-10-15"], [1.5])
    seen = []
    res = store.append_many([(a, None, "a.csv"), (b, {"cpi": {"units": "% y/y"}}, "b.csv")], _crash_hook=seen.append)
    assert [r.written for r in res] == [1, 1] and [r.source for r in res] == ["a.csv", "b.csv"]
    assert seen == ["before-batch", "between-batches", "before-manifest", "after-manifest"]
    m = store.manifest()
    assert [b["source"] for b in m["batches"]] == ["seed.csv", "a.csv", "b.csv"]
    assert m["variables"]["cpi"] == {"freq": "M", "units": "% y/y", "description": ""}


def test_later_file_changing_an_earlier_one_refuses_both(store):
    """b changing a value a introduces (same variable, period, release) is refused; the store is byte-identical."""
    before = snapshot(store.path)
    a = rows("gdp", ["2020Q3"], ["2020-10-30"], [101.0])
    b = rows("gdp", ["2020Q3"], ["2020-10-30"], [101.5])
    with pytest.raises(ReleaseConflictError, match=r"^b\.csv: 1 value\(s\) would change .*101\.0 in a\.csv, earlier "
                                                   r"in this ingest, new 101\.5"):
        store.append_many([(a, None, "a.csv"), (b, None, "b.csv")])
    assert snapshot(store.path) == before


def test_new_variable_with_two_frequencies_across_files_is_refused(store):
    """A new variable quarterly in one file and monthly in the next is refused at the second file; nothing written."""
    before = snapshot(store.path)
    a = rows("exports", ["2020Q3"], ["2020-10-30"], [5.0])
    b = rows("exports", ["2020-09"], ["2020-10-30"], [5.0])
    with pytest.raises(InputError) as info:
        store.append_many([(a, None, "a.csv"), (b, None, "b.csv")])
    assert str(info.value).startswith("b.csv, line 1, field 'period': period '2020-09' is monthly but variable "
                                      "'exports' is quarterly (as in a.csv, earlier in this ingest)")
    assert snapshot(store.path) == before


def test_supersede_across_files_keeps_audit_of_the_earlier_value(store):
    """With supersede, a later file's value for a cell wins and the audit names the earlier value."""
    a = rows("gdp", ["2020Q3"], ["2020-10-30"], [101.0])
    b = rows("gdp", ["2020Q3"], ["2020-10-30"], [101.5])
    res = store.append_many([(a, None, "a.csv"), (b, None, "b.csv")], supersede=True, reason="fix")
    assert [r.superseded for r in res] == [0, 1]
    (rec,) = store.manifest()["audit"]
    assert (rec["old"], rec["new"], rec["batch"]) == (101.0, 101.5, 3)
    assert store.cube().asof("2021-01-01")["gdp"].loc[pd.Period("2020Q3", "Q")] == 101.5


def test_identical_files_write_once(store):
    """The same rows in two files are written once (the second batch finds them present)."""
    a = rows("gdp", ["2020Q3"], ["2020-10-30"], [101.0])
    res = store.append_many([(a, None, "a.csv"), (a.copy(), None, "a2.csv")])
    assert [(r.written, r.unchanged, r.batch_file is None) for r in res] == [(1, 0, False), (0, 1, True)]


def test_nothing_new_in_any_file_writes_nothing(store):
    """When no batch holds anything new, every file of the store stays byte-identical."""
    before = snapshot(store.path)
    seed = rows("gdp", ["2020Q1", "2020Q2"], ["2020-04-30", "2020-07-30"], [100.0, 99.0])
    assert all(r.batch_file is None for r in store.append_many([seed, seed.iloc[:1]]))
    assert snapshot(store.path) == before


# ---------------------------------------------------------------- metadata


def test_new_variable_without_units_warns(store):
    """A new variable without units is stored and the result carries a warning that names describe."""
    res = store.append(rows("exports", ["2020Q3"], ["2020-10-30"], [5.0]), source="x.csv")
    assert res.written == 1 and len(res.warnings) == 1
    assert "'exports' has no units" in res.warnings[0] and "describe" in res.warnings[0]
    assert store.append(rows("imports", ["2020Q3"], ["2020-10-30"], [5.0]),
                        {"imports": {"units": "bn"}}).warnings == ()


@pytest.mark.parametrize("field,value", [("units", "percent"), ("description", "something else"), ("units", "")])
def test_conflicting_metadata_on_ingest_is_refused(store, field, value):
    """Units or a description differing from the recorded ones are refused (use describe); store untouched."""
    before = snapshot(store.path)
    with pytest.raises(MetadataConflictError, match=rf"variable 'gdp' has {field} .* use|describe") as info:
        store.append(rows("gdp", ["2020Q3"], ["2020-10-30"], [101.0]), {"gdp": {field: value}}, source="n.csv")
    assert "describe" in str(info.value) and isinstance(info.value, ValueError)
    assert snapshot(store.path) == before
    same = store.append(rows("gdp", ["2020Q3"], ["2020-10-30"], [101.0]), {"gdp": {"units": "index"}})
    assert same.written == 1  # the recorded value itself is no conflict


def test_describe_changes_metadata_with_audit(store):
    """describe records old value, new value, time and reason for each changed field; the rest is kept."""
    digest = store.checksum()
    recs = store.describe("gdp", units="index 2015=100", transform_hint="dlog_ann", reason="rebased")
    assert [(r["field"], r["old"], r["new"], r["reason"]) for r in recs] == [
        ("units", "index", "index 2015=100", "rebased"), ("transform_hint", "", "dlog_ann", "rebased")]
    m = store.manifest()
    assert m["variables"]["gdp"] == {"freq": "Q", "units": "index 2015=100", "description": "Veldmark real output",
                                     "transform_hint": "dlog_ann"}
    assert m["metadata_audit"] == recs and store.checksum() != digest
    before = snapshot(store.path)
    assert store.describe("gdp", units="index 2015=100") == []  # no change, no write
    assert snapshot(store.path) == before
    store.describe("gdp", transform_hint="")
    assert "transform_hint" not in store.variables["gdp"]


def test_describe_refuses_unknown_variable_and_hint(store):
    """describe refuses a variable the store lacks and a transform hint that is not a transformation."""
    before = snapshot(store.path)
    with pytest.raises(KeyError, match="unknown variable 'nope'"):
        store.describe("nope", units="x")
    with pytest.raises(ValueError, match="unknown transform hint 'logdiff'"):
        store.describe("gdp", transform_hint="logdiff")
    assert snapshot(store.path) == before


# ---------------------------------------------------------------- files: modes, errors, temporaries


@pytest.mark.parametrize("umask", [0o022, 0o002, 0o077])
def test_files_honour_the_umask(tmp_path, umask):
    """Every file the store writes gets mode 0o666 & ~umask and log/ 0o777 & ~umask (POSIX open/umask)."""
    old = os.umask(umask)
    try:
        st = VintageStore.init(tmp_path / "s")
        st.append(rows("gdp", ["2020Q1"], ["2020-04-30"], [1.0]), {"gdp": {"units": "index"}})
        st.describe("gdp", description="Veldmark real output")
        st.export(tmp_path / "out.csv")
    finally:
        os.umask(old)
    files = [p for p in st.path.rglob("*") if p.is_file()] + [tmp_path / "out.csv"]
    assert len(files) == 4
    for f in files:
        assert stat.S_IMODE(f.stat().st_mode) == 0o666 & ~umask, f
    assert stat.S_IMODE((st.path / "log").stat().st_mode) == 0o777 & ~umask


def _failing(monkeypatch, err: int, when):
    """Make os.fsync fail with ``err`` for files ``when(path)`` selects (as a full disk would)."""
    real = os.fsync

    def fsync(fd):
        if when(os.readlink(f"/proc/self/fd/{fd}")):
            raise OSError(err, os.strerror(err))
        return real(fd)

    monkeypatch.setattr(os, "fsync", fsync)


def test_full_disk_on_a_batch_file_names_it_and_changes_nothing(store, monkeypatch):
    """ENOSPC while writing a batch file raises FileAccessError naming that file; no file added or changed."""
    before = snapshot(store.path)
    _failing(monkeypatch, errno.ENOSPC, lambda p: "/log/.tmp-" in p)
    with pytest.raises(FileAccessError) as info:
        store.append(rows("gdp", ["2020Q3"], ["2020-10-30"], [101.0]))
    msg = str(info.value)
    assert msg.startswith(str(store.path / "log" / "000002-")) and "No space left on device" in msg
    assert info.value.errno == errno.ENOSPC and isinstance(info.value, OSError)
    monkeypatch.undo()
    assert snapshot(store.path) == before and store.orphans() == []


def test_full_disk_on_the_manifest_keeps_the_old_state(store, monkeypatch):
    """ENOSPC on the manifest names manifest.json; the store stays in the old state (one orphan batch file)."""
    log = store.read_log()
    _failing(monkeypatch, errno.ENOSPC, lambda p: p.startswith(str(store.path) + "/.tmp-"))
    with pytest.raises(FileAccessError, match=f"^{store.path / 'manifest.json'}: cannot write"):
        store.append(rows("gdp", ["2020Q3"], ["2020-10-30"], [101.0]))
    monkeypatch.undo()
    pd.testing.assert_frame_equal(store.read_log(), log)
    assert store.verify() == [] and [o[:11] for o in store.orphans()] == ["log/000002-"]


def test_permission_denied_names_the_file(store, monkeypatch):
    """EACCES creating a temporary file raises FileAccessError naming the file meant, not the temporary."""
    real = os.open

    def deny(path, flags, *a, **kw):
        if os.path.basename(path).startswith(".tmp-"):
            raise PermissionError(errno.EACCES, os.strerror(errno.EACCES), str(path))
        return real(path, flags, *a, **kw)

    monkeypatch.setattr(os, "open", deny)
    with pytest.raises(FileAccessError, match=rf"^{store.path / 'manifest.json'}: cannot write \(Permission denied\)"):
        store.describe("gdp", units="pct")


@pytest.mark.skipif(os.geteuid() == 0, reason="root ignores permission bits; the monkeypatched test covers it")
def test_read_only_store_refuses_writes_with_the_file_named(store):
    """In a store the user may not write, an append names the lock file and changes nothing."""
    before = snapshot(store.path)
    for p in [store.path / ".lock", store.path / "log", store.path]:
        p.chmod(0o555 if p.is_dir() else 0o444)
    try:
        with pytest.raises(FileAccessError, match=r"\.lock: cannot open the writer's lock"):
            store.append(rows("gdp", ["2020Q3"], ["2020-10-30"], [101.0]))
        assert len(store.read_log()) == 2  # readers still read
    finally:
        for p in [store.path, store.path / "log", store.path / ".lock"]:
            p.chmod(0o755 if p.is_dir() else 0o644)
    assert snapshot(store.path) == before


def test_export_to_a_directory_leaves_nothing_behind(store, tmp_path):
    """Exporting onto a directory is refused naming it; no temporary or partial file is left anywhere."""
    target = tmp_path / "outdir"
    target.mkdir()
    before = sorted(p.name for p in tmp_path.iterdir())
    with pytest.raises(FileAccessError, match=f"^{target}: is a directory"):
        store.export(target)
    assert sorted(p.name for p in tmp_path.iterdir()) == before and list(target.iterdir()) == []


def test_export_failure_keeps_the_previous_file(store, tmp_path, monkeypatch):
    """A full disk during export keeps the earlier export intact and removes the temporary file."""
    out = tmp_path / "all.csv"
    assert store.export(out) == 2
    good = out.read_bytes()
    _failing(monkeypatch, errno.ENOSPC, lambda p: "/.tmp-" in p)
    with pytest.raises(FileAccessError, match=f"^{out}: cannot write"):
        store.export(out, fmt="parquet")
    monkeypatch.undo()
    assert out.read_bytes() == good and not [p for p in tmp_path.iterdir() if p.name.startswith(".tmp-")]
    assert pd.read_csv(out)["value"].tolist() == [100.0, 99.0]


# ---------------------------------------------------------------- cleanup


def test_cleanup_lists_then_removes_only_leftovers(store):
    """cleanup is a dry run by default; with apply it removes temporaries and unlisted batch files only."""
    listed = {k: v for k, v in snapshot(store.path).items() if k.startswith("log/")}
    (store.path / "log" / "000002-0123456789ab.parquet").write_bytes(b"left by a kill")
    (store.path / "log" / ".tmp-1a2b").write_bytes(b"half a batch")
    (store.path / ".tmp-3c4d").write_bytes(b"half a manifest")
    (store.path / "NOTES.txt").write_text("the team's notes")
    dry = store.cleanup()
    assert dry.removable == (".tmp-3c4d", "log/.tmp-1a2b", "log/000002-0123456789ab.parquet")
    assert dry.removed == () and dry.kept == ("NOTES.txt",) and "dry run" in dry.summary()
    assert len(store.orphans()) == 4
    done = store.cleanup(apply=True)
    assert done.removed == dry.removable
    assert store.orphans() == ["NOTES.txt"] and store.verify() == []
    assert {k: v for k, v in snapshot(store.path).items() if k.startswith("log/")} == listed


def test_cleanup_takes_the_writers_lock(store):
    """While another writer holds the lock, cleanup raises StoreLockedError and removes nothing."""
    (store.path / ".tmp-3c4d").write_bytes(b"x")
    held, release = threading.Event(), threading.Event()

    def holder():
        with store._lock():
            held.set()
            release.wait()

    t = threading.Thread(target=holder)
    t.start()
    try:
        assert held.wait(30)
        with pytest.raises(StoreLockedError):
            store.cleanup(apply=True)
        with pytest.raises(StoreLockedError):
            store.describe("gdp", units="pct")
    finally:
        release.set()
        t.join()
    assert (store.path / ".tmp-3c4d").exists()


# ---------------------------------------------------------------- kills around the multi-batch commit


def _releases(n_vars: int, prefix: str, seed: int, lag: int = 30) -> pd.DataFrame:
    """Quarterly releases 1985-2014 of ``n_vars`` variables, ten releases per period."""
    rng = np.random.default_rng(seed)
    o = np.arange(120) + (1985 - 1970) * 4
    ends = ((o + 1) * 3).astype("datetime64[M]").astype("datetime64[D]") - np.timedelta64(1, "D")
    names = np.repeat([f"{prefix}{k:02d}" for k in range(n_vars)], 120 * 10)
    per = np.tile(np.repeat(o, 10), n_vars)
    rel = np.tile(np.repeat(ends, 10) + lag + 30 * np.tile(np.arange(10), 120), n_vars)
    return pd.DataFrame({"variable": names, "period": format_periods(per, "Q"),
                         "release": rel.astype("datetime64[s]"), "value": rng.normal(size=len(names)).round(6)})


def _prepare(tmp_path: Path, n_vars: int):
    """A store with one batch, three batch files to append together, and the old and new logs."""
    st = VintageStore.init(tmp_path / "store")
    st.append(_releases(n_vars, "a", 1), source="first")
    paths = []
    for k, df in enumerate([_releases(n_vars, "b", 2), _releases(n_vars, "a", 3, lag=20),
                            _releases(n_vars, "c", 4)], start=1):
        paths.append(tmp_path / f"b{k}.parquet")
        df.to_parquet(paths[-1])
    old = st.read_log()
    twin = VintageStore(shutil.copytree(st.path, tmp_path / "twin"))
    t0 = time.perf_counter()
    twin.append_many([(pd.read_parquet(p), None, f"crash-test-{k}") for k, p in enumerate(paths, start=1)])
    return st, paths, old, twin.read_log(), time.perf_counter() - t0


def _state(st: VintageStore, old: pd.DataFrame, new: pd.DataFrame) -> str:
    """'old' or 'new' if the store's log equals one of them exactly (and verifies); fails otherwise."""
    st = VintageStore(st.path)
    assert st.verify() == []
    log = st.read_log()
    for name, ref in (("old", old), ("new", new)):
        if len(log) == len(ref) and log.equals(ref):
            return name
    raise AssertionError(f"log has {len(log)} rows, neither the old ({len(old)}) nor the new ({len(new)}) state")


@pytest.mark.parametrize("point,expected,orphans", [("before-batch", "old", 0), ("between-batches", "old", 1),
                                                    ("before-manifest", "old", 3), ("after-manifest", "new", 0)])
def test_sigkill_around_the_multi_batch_commit(tmp_path, point, expected, orphans):
    """SIGKILL at each point of a three-batch append leaves exactly the old or the new state; cleanup then
    removes the unlisted files and a retry completes the append."""
    st, paths, old, new, _ = _prepare(tmp_path, 2)
    proc = subprocess.run([sys.executable, str(HELPER), "append_many", str(st.path), point, *map(str, paths)],
                          cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert proc.returncode == -signal.SIGKILL, proc.stderr
    assert _state(st, old, new) == expected
    assert len([o for o in st.orphans() if not o.startswith(".tmp-") and "/.tmp-" not in o]) == orphans
    st.cleanup(apply=True)
    assert st.orphans() == [] and _state(st, old, new) == expected
    VintageStore(st.path).append_many([(pd.read_parquet(p), None, f"crash-test-{k}")
                                       for k, p in enumerate(paths, start=1)])
    assert _state(st, old, new) == "new"


@pytest.mark.slow
def test_sigkill_at_random_times_of_a_multi_batch_append(tmp_path):
    """Killing a large three-batch append at random moments (fixed seed) never leaves a half-written state."""
    st, paths, old, new, seconds = _prepare(tmp_path, 40)
    rng = np.random.default_rng(20240602)
    outcomes = []
    for delay in rng.uniform(0.0, 1.3 * seconds, size=3):
        proc = subprocess.Popen([sys.executable, str(HELPER), "append_many", str(st.path), "none", *map(str, paths)],
                                cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        assert proc.stdout.readline().strip() == "ready"
        time.sleep(delay)
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=120)
        outcomes.append(_state(st, old, new))
        if outcomes[-1] == "new":  # start the next round from the old state again
            shutil.rmtree(st.path)
            st = VintageStore.init(tmp_path / "store")
            st.append(_releases(40, "a", 1), source="first")
            assert _state(st, old, new) == "old"
        else:
            st.cleanup(apply=True)


@pytest.mark.parametrize("point,units", [("before-manifest", ""), ("after-manifest", "killed-units")])
def test_sigkill_around_describe(tmp_path, point, units):
    """A describe killed before or after its manifest write leaves the old or the new metadata, store sound."""
    st = VintageStore.init(tmp_path / "store")
    st.append(rows("a00", ["2020Q1"], ["2020-04-30"], [1.0]))
    proc = subprocess.run([sys.executable, str(HELPER), "describe", str(st.path), point],
                          cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert proc.returncode == -signal.SIGKILL, proc.stderr
    assert st.verify() == [] and st.variables["a00"]["units"] == units
