"""Integrity of the store: checksums on every read, the manifest's own checksum and batch chain,
byte flips, paths, stores written by the previous version (format 1).

References: SHA-256 (NIST FIPS 180-4, 2015) through Python's ``hashlib``; JSON (IETF RFC 8259,
2017, section 2: insignificant whitespace is space, tab, line feed and carriage return), so a
flip that turns one of those into another changes nothing parsed, which the byte-flip tests
check with ``json.loads`` (the standard library's parser) rather than assume. The format-1
stores under ``tests/vintages/data`` were written by the previous version's code
(``make_v1_stores.py`` says how); their expected contents are typed here from that script.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from vintages import StoreCorruptError, VintageStore
from vintages import store as store_mod
from vintages.store import _dump, _seal, clear_verified_cache, entry_hash, manifest_digest

DATA = Path(__file__).with_name("data")


def snapshot(root: Path) -> dict[str, str]:
    """SHA-256 of every file under ``root`` (relative path -> digest)."""
    return {str(p.relative_to(root)): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(root.rglob("*")) if p.is_file()}


def small_store(root: Path) -> VintageStore:
    """Two small batches of quarterly 'gdp' from 1959 (periods and releases before 1970)."""
    st = VintageStore.init(root)
    a = pd.DataFrame({"variable": "gdp", "period": ["1959Q1", "1959Q2", "1959Q1"],
                      "release": pd.to_datetime(["1959-05-15", "1959-08-14", "1959-08-14"]),
                      "value": [100.0, 101.25, 100.5]})
    b = pd.DataFrame({"variable": "gdp", "period": ["1959Q2", "1959Q3"],
                      "release": pd.to_datetime(["1959-11-13", "1959-11-13"]), "value": [101.5, 102.0]})
    st.append(a, {"gdp": {"units": "index", "description": "Veldmark real output"}}, source="a.csv")
    st.append(b, source="b.csv")
    return st


def flips(path: Path, patterns: tuple[int, ...]):
    """Yield after flipping each byte of ``path`` with each pattern in place (``os.pwrite``), restoring it
    after; in place because truncating and rewriting the file thousands of times is slow on some disks."""
    good = path.read_bytes()
    fd = os.open(path, os.O_RDWR)
    try:
        for pattern in patterns:
            for i in range(len(good)):
                os.pwrite(fd, bytes([good[i] ^ pattern]), i)
                yield i, pattern
                os.pwrite(fd, good[i:i + 1], i)
    finally:
        os.close(fd)
    assert path.read_bytes() == good


def write_manifest(st: VintageStore, m: dict, *, reseal: bool) -> None:
    """Write ``m`` as the manifest; ``reseal`` recomputes chain and checksum (as a tool might)."""
    data = _dump(_seal(m, "2020-01-01T00:00:00+00:00")) if reseal else _dump(m)
    (st.path / "manifest.json").write_bytes(data)


# ---------------------------------------------------------------- checksums on read


def test_pre_1970_store_reads_back(tmp_path):
    """Periods and releases from 1959 round-trip through the store and the as-of view."""
    st = small_store(tmp_path / "s")
    v = st.cube().asof("1959-09-01")["gdp"]
    assert dict(zip(v.index.astype(str), v.to_numpy(), strict=True)) == {"1959Q1": 100.5, "1959Q2": 101.25}
    info = st.info().set_index("variable")
    assert info.loc["gdp", "first_period"] == "1959Q1" and str(info.loc["gdp", "first_release"]) == "1959-05-15"


def test_every_byte_flip_of_a_batch_file_is_detected_on_read(tmp_path):
    """Flipping any single byte of a batch file (XOR 0xFF or 0x01) makes a read stop with StoreCorruptError naming it."""
    st = small_store(tmp_path / "s")
    rel = st.manifest()["batches"][0]["file"]
    f = st.path / rel
    size = f.stat().st_size
    detected = 0
    for _ in flips(f, (0xFF, 0x01)):
        clear_verified_cache()
        try:
            st.read_log()
        except StoreCorruptError as exc:
            assert str(exc).startswith(f"{f}: checksum mismatch") and "\n" not in str(exc)
            detected += 1
    assert detected == 2 * size  # every flip of every byte
    assert st.verify() == [] and len(st.read_log()) == 5


@pytest.mark.parametrize("read", ["read_log", "cube", "info", "export"])
def test_each_read_path_verifies_checksums(tmp_path, read):
    """read_log, cube, info and export all refuse a batch file whose bytes changed (one flip in the middle)."""
    st = small_store(tmp_path / "s")
    f = st.path / st.manifest()["batches"][1]["file"]
    data = bytearray(f.read_bytes())
    data[len(data) // 2] ^= 0x01
    f.write_bytes(bytes(data))
    call = {"read_log": st.read_log, "cube": st.cube, "info": st.info,
            "export": lambda: st.export(tmp_path / "out.csv")}[read]
    with pytest.raises(StoreCorruptError, match="checksum mismatch"):
        call()
    assert not (tmp_path / "out.csv").exists()


def test_verified_files_are_remembered_and_a_later_change_is_still_caught(tmp_path):
    """A file verified once (and older than a second) is not hashed again; changing it later is still detected.

    The change keeps the size and puts the modification time back (``os.utime``); the inode
    change time moves anyway (POSIX: ``st_ctime`` is set by the system on every change).
    """
    st = small_store(tmp_path / "s")
    time.sleep(1.1)  # files younger than a second are never remembered (coarse file times)
    clear_verified_cache()
    calls = []
    real = hashlib.sha256

    def counting(data=b"", *args, **kw):
        if bytes(data[:4]) == b"PAR1":  # a Parquet batch file (the manifest's own hashes are not counted)
            calls.append(len(data))
        return real(data, *args, **kw)

    st.read_log()
    assert len(store_mod._VERIFIED) == 2
    try:
        store_mod.hashlib.sha256 = counting
        st.read_log()
        assert calls == []  # remembered: no hashing on the second read
        f = st.path / st.manifest()["batches"][0]["file"]
        before = f.stat()
        data = bytearray(f.read_bytes())
        data[100] ^= 0x01
        f.write_bytes(bytes(data))
        os.utime(f, ns=(before.st_atime_ns, before.st_mtime_ns))
        assert f.stat().st_size == before.st_size and f.stat().st_mtime_ns == before.st_mtime_ns
        with pytest.raises(StoreCorruptError, match="checksum mismatch"):
            st.read_log()
    finally:
        store_mod.hashlib.sha256 = real


def test_fresh_files_are_not_remembered(tmp_path):
    """A file written less than a second before it was read is hashed on every read (the racy case)."""
    st = small_store(tmp_path / "s")
    clear_verified_cache()
    st.read_log()
    assert store_mod._VERIFIED == {}
    f = st.path / st.manifest()["batches"][0]["file"]
    data = bytearray(f.read_bytes())
    data[-20] ^= 0x01
    f.write_bytes(bytes(data))
    with pytest.raises(StoreCorruptError):
        st.read_log()


def test_verify_rehashes_whatever_was_remembered(tmp_path, monkeypatch):
    """verify() hashes every file again even when the read cache says it was verified."""
    st = small_store(tmp_path / "s")
    b = st.manifest()["batches"][0]
    f = st.path / b["file"]
    data = bytearray(f.read_bytes())
    data[50] ^= 0x01
    f.write_bytes(bytes(data))
    s = f.stat()
    key = (str(f), s.st_dev, s.st_ino, s.st_size, s.st_mtime_ns, s.st_ctime_ns)
    monkeypatch.setitem(store_mod._VERIFIED, key, b["sha256"])  # a (wrongly) remembered verification
    assert st.verify() == [f"{b['file']}: checksum mismatch (the file changed after it was committed)"]


def test_symlink_or_directory_in_place_of_a_batch_file_is_refused(tmp_path):
    """A listed name that is a symbolic link (even to the right bytes) or a directory is refused, not followed."""
    st = small_store(tmp_path / "s")
    rel = st.manifest()["batches"][0]["file"]
    f = st.path / rel
    moved = tmp_path / "elsewhere.parquet"
    shutil.move(f, moved)
    f.symlink_to(moved)
    with pytest.raises(StoreCorruptError, match="symbolic link"):
        st.read_log()
    assert any("symbolic link" in p for p in st.verify())
    f.unlink()
    f.mkdir()
    with pytest.raises(StoreCorruptError, match="not a regular file"):
        st.read_log()


# ---------------------------------------------------------------- the manifest


def test_every_byte_flip_of_the_manifest_is_detected_or_harmless(tmp_path):
    """Every single-byte flip of the manifest (four patterns per byte) is refused on read, or parses to
    exactly the same manifest (RFC 8259 whitespace swaps) and then reads the same log."""
    st = small_store(tmp_path / "s")
    f = st.path / "manifest.json"
    size = f.stat().st_size
    parsed = json.loads(f.read_bytes())
    log = st.read_log()
    detected = harmless = 0
    # 0xFF: high bit set (invalid UTF-8); 0x01: low bit (digits, letters); 0x20: letter case;
    # 0x2A: space <-> line feed (JSON whitespace to JSON whitespace).
    for _ in flips(f, (0xFF, 0x01, 0x20, 0x2A)):
        try:
            m = st.manifest()
        except StoreCorruptError as exc:
            assert str(exc).startswith(f"{f}: ") and "\n" not in str(exc)
            detected += 1
            continue
        assert m == parsed  # not refused: then provably the same manifest
        pd.testing.assert_frame_equal(st.read_log(), log)
        harmless += 1
    assert detected + harmless == 4 * size
    assert detected > 0.9 * 4 * size and harmless > 0  # the whitespace swaps are the harmless ones


def test_editing_a_frequency_is_refused(tmp_path):
    """Changing gdp's freq from Q to M in the manifest is refused on read (checksum), and even with the
    checksum recomputed (the quarterly labels no longer fit)."""
    st = small_store(tmp_path / "s")
    m = st.manifest()
    m["variables"]["gdp"]["freq"] = "M"
    write_manifest(st, m, reseal=False)
    for read in (st.manifest, st.info, st.read_log, st.cube):
        with pytest.raises(StoreCorruptError, match="manifest checksum mismatch"):
            read()
    assert st.verify()[0] == "manifest checksum mismatch: the manifest was changed after it was written"
    write_manifest(st, m, reseal=True)
    with pytest.raises(StoreCorruptError, match="period '1959Q1' of 'gdp' is not a valid monthly label"):
        st.cube()
    assert any("not valid for frequency 'M'" in p for p in st.verify())


def test_deleting_the_last_batch_entry_is_refused(tmp_path):
    """Removing the last batch entry is refused (checksum; with only the checksum recomputed, the chain head);
    a full re-seal changes the store checksum recorded by runs and leaves the file as an orphan."""
    st = small_store(tmp_path / "s")
    digest = st.checksum()
    m = st.manifest()
    dropped = m["batches"].pop()
    write_manifest(st, m, reseal=False)
    with pytest.raises(StoreCorruptError, match="manifest checksum mismatch"):
        st.read_log()
    m["manifest_sha256"] = manifest_digest(m)  # a tool that fixes only the checksum
    (st.path / "manifest.json").write_bytes(_dump(m))
    with pytest.raises(StoreCorruptError, match="batch chain head mismatch"):
        st.read_log()
    write_manifest(st, m, reseal=True)
    assert st.checksum() != digest
    assert st.orphans() == [dropped["file"]]


def test_swapping_batch_order_is_refused(tmp_path):
    """Swapping two batch entries is refused: checksum, and with the checksum recomputed, numbers and chain."""
    st = small_store(tmp_path / "s")
    m = st.manifest()
    m["batches"].reverse()
    write_manifest(st, m, reseal=False)
    with pytest.raises(StoreCorruptError, match="manifest checksum mismatch"):
        st.info()
    m["manifest_sha256"] = manifest_digest(m)
    (st.path / "manifest.json").write_bytes(_dump(m))
    problems = st.verify()
    assert any("batch number 2, expected 1" in p for p in problems)
    assert any("batch chain broken" in p for p in problems)
    with pytest.raises(StoreCorruptError):
        st.read_log()


def test_chain_links_each_entry_to_the_previous(tmp_path):
    """Each batch entry's prev is the hash of the entry before it and head the hash of the last."""
    st = small_store(tmp_path / "s")
    m = st.manifest()
    b1, b2 = m["batches"]
    assert b1["prev"] == "" and b2["prev"] == entry_hash(b1) and m["head"] == entry_hash(b2)
    assert m["manifest_sha256"] == manifest_digest(m) and m["format"] == "vintage-store/2"


@pytest.mark.parametrize("text", [b"\xff\xfe{}", b"[1, 2]", b'{"format": "vintage-store/2"', b"[" * 100000])
def test_unreadable_manifests_give_one_line(tmp_path, text):
    """Undecodable, non-object, truncated or absurdly nested manifests raise StoreCorruptError in one line."""
    st = small_store(tmp_path / "s")
    (st.path / "manifest.json").write_bytes(text)
    with pytest.raises(StoreCorruptError) as info:
        st.read_log()
    assert "\n" not in str(info.value) and str(info.value).startswith(str(st.path / "manifest.json"))


# ---------------------------------------------------------------- format 1 (previous version)


@pytest.fixture
def v1(tmp_path) -> VintageStore:
    return VintageStore(shutil.copytree(DATA / "store_v1", tmp_path / "v1"))


def test_format_1_store_opens_with_a_note_and_reads_its_data(v1):
    """A store written by the previous version reads (1959 periods, a supersede), with a note on its format."""
    assert v1.manifest()["format"] == "vintage-store/1"
    assert "vintage-store/1" in v1.format_note() and "upgrades it" in v1.format_note()
    assert v1.verify() == []
    log = v1.read_log(with_superseded=False)
    log = log[log["variable"] == "gdp"]
    gdp = log.set_index(["period", log["release"].dt.strftime("%Y-%m-%d")])["value"]
    # typed from make_v1_stores.py: 1959Q2 of 1959-08-14 was superseded 101.25 -> 101.5
    assert gdp.to_dict() == {("1959Q1", "1959-05-15"): 100.0, ("1959Q2", "1959-08-14"): 101.5,
                             ("1959Q1", "1959-08-14"): 100.5, ("1959Q3", "1959-11-13"): 102.0}
    cpi = v1.cube().asof("1970-01-31")["cpi"]
    assert dict(zip(cpi.index.astype(str), cpi.to_numpy(), strict=True)) == {"1969-11": 1.5, "1969-12": 1.75}
    assert len(v1.manifest()["audit"]) == 1


def test_format_1_store_is_upgraded_by_the_next_write(v1):
    """The next append rewrites the manifest as format 2 (chain, checksum, 'upgraded'); batch files and the
    store checksum of the old batches are unchanged."""
    files_before = {k: v for k, v in snapshot(v1.path).items() if k.startswith("log/")}
    digest = v1.checksum()
    log_before = v1.read_log()
    v1.describe("gdp", units="index 1959Q1=100")  # same value: no write, still format 1
    assert v1.manifest()["format"] == "vintage-store/1" and v1.checksum() == digest
    new = pd.DataFrame({"variable": ["gdp"], "period": ["1959Q4"], "release": pd.to_datetime(["1960-02-12"]),
                        "value": [103.0]})
    res = v1.append(new, source="q4.csv")
    m = v1.manifest()
    assert m["format"] == "vintage-store/2" and m["upgraded"]["from"] == "vintage-store/1"
    assert [b["prev"] for b in m["batches"][1:]] == [entry_hash(b) for b in m["batches"][:-1]]
    assert {k: v for k, v in snapshot(v1.path).items() if k.startswith("log/") and k != res.batch_file} == files_before
    pd.testing.assert_frame_equal(v1.read_log().iloc[:len(log_before)], log_before)
    assert v1.verify() == []


def test_format_1_batch_files_are_still_checked(v1):
    """In a format-1 store a changed batch file is refused on read like in format 2."""
    f = v1.path / v1.manifest()["batches"][0]["file"]
    data = bytearray(f.read_bytes())
    data[10] ^= 0x01
    f.write_bytes(bytes(data))
    with pytest.raises(StoreCorruptError, match="checksum mismatch"):
        v1.read_log()


def test_downgraded_manifest_is_refused(tmp_path):
    """A format-2 manifest relabelled as format 1 (to skip its checksum) is refused: it still holds format-2 keys."""
    st = small_store(tmp_path / "s")
    m = st.manifest()
    m["format"] = "vintage-store/1"
    m["variables"]["gdp"]["freq"] = "M"
    (st.path / "manifest.json").write_bytes(_dump(m))
    with pytest.raises(StoreCorruptError, match="holds 'vintage-store/2' keys"):
        st.read_log()


def test_misread_labels_of_an_old_store_stop_reads(tmp_path):
    """A label the old reader stored wrongly ('0Q3' from full-width digits) stops every read naming the batch;
    verify lists it; nothing is shown as some other period."""
    st = VintageStore(shutil.copytree(DATA / "store_v1_misread", tmp_path / "bad"))
    assert set(st.read_log.__self__.manifest()["variables"]) == {"gdp"}
    rel = st.manifest()["batches"][0]["file"]
    for read in (st.read_log, st.cube, st.info):
        with pytest.raises(StoreCorruptError, match=f"{rel}: period '0Q3' of 'gdp' is not a valid quarterly label"):
            read()
    assert st.verify() == [f"{rel}: 1 period label(s) of 'gdp' are not valid for frequency 'Q', e.g. '0Q3'"]


def test_upgrade_keeps_store_checksum_of_format_1(v1):
    """The store digest (recorded in run provenance) is computed alike for format 1 and 2 on the same batches."""
    digest = v1.checksum()
    m = v1.manifest()
    sealed = _seal(json.loads(json.dumps(m)), "2020-01-01T00:00:00+00:00")
    assert store_mod._checksum(sealed) == digest
    assert np.all([b["sha256"] for b in sealed["batches"]] == [b["sha256"] for b in m["batches"]])


def test_sha256_matches_a_prefix_and_notices_a_rewrite(tmp_path):
    """The digest prefix is compared with hashlib's SHA-256 (FIPS 180-4) of the bytes; a file
    rewritten with other bytes no longer matches, even after a remembered match."""
    import hashlib
    import os

    from vintages import sha256_matches

    f = tmp_path / "x.parquet"
    f.write_bytes(b"first")
    old = hashlib.sha256(b"first").hexdigest()
    os.utime(f, ns=(10**18, 10**18 - 10**12))  # an old file: its match may be remembered
    assert sha256_matches(f, old[:16]) and sha256_matches(f, old)
    f.write_bytes(b"other")
    assert not sha256_matches(f, old[:16])
    assert sha256_matches(f, hashlib.sha256(b"other").hexdigest()[:16])
