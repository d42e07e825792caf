"""The on-disk store: atomic appends under SIGKILL, idempotent re-ingest, refused rewrites,
supersede with audit, the writer's lock, verification.

References: the write-to-temporary / fsync / rename discipline for crash-safe replacement of a
file is common practice on POSIX file systems (``rename`` replaces its target atomically:
POSIX.1-2017, ``rename()``); ``flock`` locks belong to an open file description and are released
when it is closed, also when the process dies (Linux ``flock(2)`` manual page). The reference
states below are computed independently: "old" is the log read before the append, "new" the log
of an identical copy of the store after an uninterrupted append.
"""

from __future__ import annotations

import hashlib
import json
import shutil
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from vintages import (
    InputError,
    ReleaseConflictError,
    StoreCorruptError,
    StoreLockedError,
    StoreNotFoundError,
    VintageStore,
)
from vintages.periods import format_periods

HELPER = Path(__file__).with_name("crash_helper.py")
ROOT = Path(__file__).resolve().parents[2]


def snapshot(root: Path) -> dict[str, str]:
    """SHA-256 of every file under ``root`` (relative path -> digest)."""
    return {str(p.relative_to(root)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(root.rglob("*")) if p.is_file()}


def releases(n_periods: int, n_releases: int, *, seed: int, variables=("gdp",), first_year: int = 2000,
             lag_days: int = 30) -> pd.DataFrame:
    """Simulated quarterly releases: each period published ``n_releases`` times, 30 days apart."""
    rng = np.random.default_rng(seed)
    o = np.arange(n_periods) + (first_year - 1970) * 4
    ends = ((o + 1) * 3).astype("datetime64[M]").astype("datetime64[D]") - np.timedelta64(1, "D")
    v = np.repeat(np.asarray(variables, dtype=object), n_periods * n_releases)
    oo = np.tile(np.repeat(o, n_releases), len(variables))
    rel = np.tile(np.repeat(ends, n_releases) + lag_days + 30 * np.tile(np.arange(n_releases), n_periods),
                  len(variables))
    return pd.DataFrame({"variable": v, "period": format_periods(oo, "Q"),
                         "release": rel.astype("datetime64[s]"), "value": rng.normal(size=len(v)).round(6)})


@pytest.fixture
def store(tmp_path) -> VintageStore:
    st = VintageStore.init(tmp_path / "store")
    st.append(releases(8, 3, seed=1), {"gdp": {"units": "index", "description": "Veldmark real output"}},
              source="seed")
    return st


# ---------------------------------------------------------------- init and open


def test_init_creates_an_empty_store(tmp_path):
    """init writes the manifest, the log folder and the lock file; the store opens and is empty."""
    st = VintageStore.init(tmp_path / "s")
    assert sorted(snapshot(st.path)) == [".lock", "manifest.json"]
    assert (st.path / "log").is_dir()
    assert st.read_log().empty and st.verify() == [] and st.manifest()["batches"] == []
    assert VintageStore(tmp_path / "s").checksum() == st.checksum()


def test_init_refuses_existing_or_nonempty(tmp_path):
    """init refuses an existing store (unless exist_ok) and a non-empty directory."""
    VintageStore.init(tmp_path / "s")
    with pytest.raises(FileExistsError, match="already exists"):
        VintageStore.init(tmp_path / "s")
    assert VintageStore.init(tmp_path / "s", exist_ok=True).path == tmp_path / "s"
    (tmp_path / "busy").mkdir()
    (tmp_path / "busy" / "x.txt").write_text("x")
    with pytest.raises(FileExistsError, match="not empty"):
        VintageStore.init(tmp_path / "busy")


def test_open_refuses_a_non_store(tmp_path):
    """Opening a directory without a manifest raises StoreNotFoundError (a FileNotFoundError)."""
    with pytest.raises(StoreNotFoundError, match="not a vintage store") as info:
        VintageStore(tmp_path)
    assert isinstance(info.value, FileNotFoundError)


def test_unreadable_manifest_is_corruption(store):
    """A manifest that is not JSON, or of another format, raises StoreCorruptError."""
    (store.path / "manifest.json").write_text("{not json")
    with pytest.raises(StoreCorruptError, match="unreadable manifest"):
        store.read_log()
    (store.path / "manifest.json").write_text(json.dumps({"format": "other/9"}))
    with pytest.raises(StoreCorruptError, match="expected 'vintage-store/2'"):
        store.manifest()


# ---------------------------------------------------------------- round trip and metadata


def test_read_log_returns_what_was_written(tmp_path):
    """The log read back holds exactly the rows appended (types normalised), in batch order."""
    st = VintageStore.init(tmp_path / "s")
    a, b = releases(5, 2, seed=2), releases(5, 2, seed=3, variables=("exports",))
    st.append(a)
    st.append(b)
    log = st.read_log()
    want = pd.concat([a.assign(batch=1), b.assign(batch=2)], ignore_index=True)
    assert list(log.columns) == ["variable", "period", "release", "value", "batch"]
    for c in ("variable", "period"):
        assert log[c].tolist() == want[c].tolist()
    np.testing.assert_array_equal(log["release"].to_numpy(), want["release"].to_numpy())
    np.testing.assert_array_equal(log["value"].to_numpy(), want["value"].to_numpy())
    np.testing.assert_array_equal(log["batch"].to_numpy(), want["batch"].to_numpy())


def test_new_variable_metadata_and_info(store):
    """Metadata of a new variable is kept; info() counts agree with a pandas groupby of the log."""
    assert store.variables["gdp"] == {"freq": "Q", "units": "index", "description": "Veldmark real output"}
    store.append(releases(4, 2, seed=5, variables=("exports",)))
    info = store.info().set_index("variable")
    log = store.read_log(with_superseded=False)
    ref = log.groupby("variable").agg(periods=("period", "nunique"), releases=("release", "nunique"),
                                      first_release=("release", "min"), last_release=("release", "max"))
    for name in ("exports", "gdp"):
        assert info.loc[name, "periods"] == ref.loc[name, "periods"]
        assert info.loc[name, "releases"] == ref.loc[name, "releases"]
        assert info.loc[name, "first_release"] == ref.loc[name, "first_release"].date()
        assert info.loc[name, "last_release"] == ref.loc[name, "last_release"].date()
    assert info.loc["gdp", "first_period"] == "2000Q1" and info.loc["gdp", "last_period"] == "2001Q4"


def test_frequency_given_for_known_variable_must_match(store):
    """Declaring freq 'M' for the quarterly 'gdp' is refused and leaves the store untouched."""
    before = snapshot(store.path)
    with pytest.raises(InputError, match="contradictory frequencies"):
        store.append(releases(1, 1, seed=0, first_year=2010), {"gdp": {"freq": "M"}})
    assert snapshot(store.path) == before


# ---------------------------------------------------------------- idempotence, conflicts, supersede


def test_reingest_identical_data_is_a_noop(store):
    """Appending the same releases again writes nothing: every file is byte-identical."""
    before, checksum = snapshot(store.path), store.checksum()
    res = store.append(releases(8, 3, seed=1))
    assert (res.written, res.unchanged, res.superseded, res.batch_file) == (0, 24, 0, None)
    assert "nothing new" in res.summary()
    assert snapshot(store.path) == before and store.checksum() == checksum


def test_partly_new_batch_writes_only_new_rows(store):
    """A batch overlapping the store writes only the rows not yet there."""
    both = pd.concat([releases(8, 3, seed=1), releases(2, 1, seed=9, first_year=2010)], ignore_index=True)
    res = store.append(both)
    assert (res.written, res.unchanged) == (2, 24)
    assert len(store.read_log()) == 26


def test_conflicting_rewrite_is_refused(store):
    """Changing a published value for the same (variable, period, release) raises ReleaseConflictError."""
    before = snapshot(store.path)
    bad = releases(8, 3, seed=1)
    old = float(bad.loc[4, "value"])
    bad.loc[4, "value"] = old + 1.0
    with pytest.raises(ReleaseConflictError) as info:
        store.append(bad, source="fix.csv")
    msg = str(info.value)
    assert msg.startswith("fix.csv: 1 value(s) would change")
    assert f"{bad.loc[4, 'variable']} {bad.loc[4, 'period']} released {bad.loc[4, 'release'].date()}" in msg
    assert f"stored {old!r}, new {old + 1.0!r}" in msg
    assert isinstance(info.value, ValueError)
    assert snapshot(store.path) == before


def test_other_variable_same_cell_is_no_conflict(store):
    """The same (period, release) of another variable never conflicts with 'gdp'."""
    other = releases(8, 3, seed=4, variables=("exports",))
    res = store.append(other)
    assert res.written == len(other) and res.superseded == 0


def test_supersede_keeps_old_value_and_audit(store):
    """supersede replaces the value in force, keeps the old one in the raw log and records an audit."""
    fix = releases(8, 3, seed=1).iloc[[4]].copy()
    old = float(fix["value"].iloc[0])
    fix["value"] = old + 0.5
    res = store.append(fix, supersede=True, source="benchmark.csv", reason="typo in the bulletin")
    assert (res.written, res.superseded) == (1, 1) and "superseded" in res.summary()
    m = store.manifest()
    assert m["batches"][-1]["supersede"] is True
    (rec,) = m["audit"]
    cell = fix.iloc[0]
    assert rec == {"batch": 2, "time": rec["time"], "variable": cell["variable"], "period": cell["period"],
                   "release": str(cell["release"].date()), "old": old, "new": old + 0.5,
                   "reason": "typo in the bulletin"}
    raw = store.read_log()
    hit = raw[(raw["period"] == cell["period"]) & (raw["release"] == cell["release"])]
    assert hit["value"].tolist() == [old, old + 0.5] and hit["batch"].tolist() == [1, 2]
    in_force = store.read_log(with_superseded=False)
    assert in_force.loc[(in_force["period"] == cell["period"]) & (in_force["release"] == cell["release"]),
                        "value"].tolist() == [old + 0.5]
    v = store.cube().asof(cell["release"])["gdp"]
    assert v.loc[pd.Period(cell["period"], "Q")] == old + 0.5


def test_supersede_is_idempotent_too(store):
    """Re-sending a superseding value that is already in force is a no-op."""
    fix = releases(8, 3, seed=1).iloc[[4]].copy()
    fix["value"] += 0.5
    store.append(fix, supersede=True)
    before = snapshot(store.path)
    assert store.append(fix, supersede=True).batch_file is None
    assert snapshot(store.path) == before


# ---------------------------------------------------------------- verification


def test_verify_finds_tampering_and_ignores_orphans(store):
    """verify() reports a changed or missing batch file, but not unlisted (orphan) files."""
    (store.path / "log" / "000002-deadbeef0000.parquet").write_bytes(b"left by a crash")
    (store.path / ".tmp-abc").write_bytes(b"half a manifest")
    assert store.verify() == []
    assert store.orphans() == [".tmp-abc", "log/000002-deadbeef0000.parquet"]
    assert len(store.read_log()) == 24  # orphans are not read
    f = store.path / store.manifest()["batches"][0]["file"]
    data = bytearray(f.read_bytes())
    data[len(data) // 2] ^= 0xFF
    f.write_bytes(bytes(data))
    rel = str(f.relative_to(store.path))
    assert store.verify() == [f"{rel}: checksum mismatch (the file changed after it was committed)"]
    with pytest.raises(StoreCorruptError, match=f"{rel}: checksum mismatch"):
        store.read_log()
    f.unlink()
    assert store.verify() == [f"{rel}: listed in the manifest but missing"]


@pytest.mark.parametrize("trick", ["../../etc/passwd", "log/../../../etc/passwd", "/etc/passwd",
                                   "log/000001-0123456789ab.parquet/../../x"])
def test_path_tricks_in_manifest_are_refused_on_every_read(store, trick):
    """A manifest entry pointing outside log/ is reported by verify and refused by every read.

    The manifest is re-sealed (checksum and chain recomputed, as a tool might) so that only
    the path check stands between the entry and the read.
    """
    from vintages.store import _dump, _seal

    m = store.manifest()
    m["batches"][0]["file"] = trick
    (store.path / "manifest.json").write_bytes(_dump(_seal(m, "2020-01-01T00:00:00+00:00")))
    assert any(p.startswith(f"{trick!r}: not a batch file name under log/") for p in store.verify())
    for read in (store.read_log, store.cube, store.info, store.checksum):
        with pytest.raises(StoreCorruptError, match="not a batch file name under log/"):
            read()


def test_checksum_follows_committed_state(store):
    """The checksum is stable across re-opening and changes with each committed batch."""
    c1 = store.checksum()
    assert VintageStore(store.path).checksum() == c1
    store.append(releases(1, 1, seed=3, first_year=2012))
    assert store.checksum() != c1
    assert store.cube().checksum == store.checksum()


# ---------------------------------------------------------------- the lock


def test_lock_held_by_thread_refuses_writer_not_reader(store):
    """While a thread holds the lock, append raises StoreLockedError and readers still read."""
    held, release = threading.Event(), threading.Event()

    def holder():
        with store._lock():
            held.set()
            release.wait()

    t = threading.Thread(target=holder)
    t.start()
    try:
        assert held.wait(30)
        before = snapshot(store.path)
        with pytest.raises(StoreLockedError, match="another writer holds the store's lock"):
            VintageStore(store.path).append(releases(1, 1, seed=3, first_year=2012))
        assert len(store.read_log()) == 24 and store.verify() == []
        assert store.cube().asof("2030-01-01")["gdp"].size == 8
        assert snapshot(store.path) == before
    finally:
        release.set()
        t.join()
    assert store.append(releases(1, 1, seed=3, first_year=2012)).written == 1  # free again


def test_lock_held_by_process_refuses_writer_not_reader(store):
    """While another process holds the lock, append raises StoreLockedError; a reader still reads."""
    proc = subprocess.Popen([sys.executable, str(HELPER), "hold", str(store.path)], cwd=ROOT,
                            stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    try:
        assert proc.stdout.readline().strip() == "locked"
        with pytest.raises(StoreLockedError):
            store.append(releases(1, 1, seed=3, first_year=2012))
        with pytest.raises(StoreLockedError):
            store.set_metadata("gdp", units="percent")
        assert len(store.read_log()) == 24 and store.info().shape[0] == 1
    finally:
        proc.stdin.close()
        proc.wait(timeout=60)
    assert store.append(releases(1, 1, seed=3, first_year=2012)).written == 1


# ---------------------------------------------------------------- crashes


def test_crash_hook_points_in_order(store):
    """append calls the crash hook at before-batch, before-manifest and after-manifest, in that order."""
    seen = []
    store.append(releases(1, 1, seed=3, first_year=2012), _crash_hook=seen.append)
    assert seen == ["before-batch", "before-manifest", "after-manifest"]


def _first_batch(n_vars: int) -> pd.DataFrame:
    return releases(120, 10, seed=10, first_year=1985, variables=[f"a{k:02d}" for k in range(n_vars)])


def _prepare_crash(tmp_path: Path, n_vars: int):
    """A store with one batch, a second batch on disk, and the reference old and new logs."""
    st = VintageStore.init(tmp_path / "store")
    st.append(_first_batch(n_vars), source="first")
    # new variables, plus new releases (other days) of the variables already there
    batch = pd.concat([releases(120, 10, seed=11, first_year=1985, variables=[f"b{k:02d}" for k in range(n_vars)]),
                       releases(120, 1, seed=12, first_year=1985, lag_days=20,
                                variables=[f"a{k:02d}" for k in range(n_vars)])],
                      ignore_index=True)
    path = tmp_path / "batch.parquet"
    batch.to_parquet(path)
    old = st.read_log()
    twin = VintageStore(shutil.copytree(st.path, tmp_path / "twin"))
    t0 = time.perf_counter()
    twin.append(batch, source="crash-test")
    seconds = time.perf_counter() - t0
    return st, path, old, twin.read_log(), seconds


def _state(st: VintageStore, old: pd.DataFrame, new: pd.DataFrame) -> str:
    """'old' or 'new' if the store's log equals one of them exactly; fails otherwise."""
    st = VintageStore(st.path)  # re-open from disk
    assert st.verify() == []
    log = st.read_log()
    for name, ref in (("old", old), ("new", new)):
        if len(log) == len(ref) and log.equals(ref):
            return name
    raise AssertionError(f"log has {len(log)} rows, neither the old ({len(old)}) nor the new ({len(new)}) state")


@pytest.mark.parametrize("point,expected", [("before-batch", "old"), ("before-manifest", "old"),
                                            ("after-manifest", "new")])
def test_sigkill_at_each_step_leaves_old_or_new(tmp_path, point, expected):
    """A writer killed by SIGKILL at each step leaves a sound store in exactly the old or new state."""
    st, path, old, new, _ = _prepare_crash(tmp_path, 2)
    proc = subprocess.run([sys.executable, str(HELPER), "append", str(st.path), str(path), point],
                          cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert proc.returncode == -signal.SIGKILL, proc.stderr
    assert _state(st, old, new) == expected
    if point == "before-manifest":
        assert len(st.orphans()) == 1 and st.orphans()[0].startswith("log/000002-")
    # the kernel released the dead writer's lock; re-running the append completes it
    VintageStore(st.path).append(pd.read_parquet(path), source="crash-test")
    assert _state(st, old, new) == "new"


def test_sigkill_at_random_times_leaves_old_or_new(tmp_path):
    """Killing a large append at random moments (fixed seed) never leaves a half-written state."""
    st, path, old, new, seconds = _prepare_crash(tmp_path, 100)
    rng = np.random.default_rng(20240601)
    outcomes = []
    for delay in rng.uniform(0.0, 1.5 * seconds, size=4):
        proc = subprocess.Popen([sys.executable, str(HELPER), "append", str(st.path), str(path), "none"],
                                cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        assert proc.stdout.readline().strip() == "ready"
        time.sleep(delay)
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=120)
        outcomes.append(_state(st, old, new))
        if outcomes[-1] == "new":  # start the next round from the old state again
            shutil.rmtree(st.path)
            st = VintageStore.init(tmp_path / "store")
            st.append(_first_batch(100), source="first")
            assert _state(st, old, new) == "old"
