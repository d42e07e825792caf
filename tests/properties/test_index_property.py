"""The release index against brute force on random release logs (hypothesis, derandomised).

The brute force is the definition of a real-time vintage (Croushore and Stark, 2001, "A
real-time data set for macroeconomists", Journal of Econometrics 105(1), 111-130: the data "as
they existed" at a date): keep the releases dated on or before the day, take the latest per
(variable, period). The k-th estimate is the k-th release of a cell and the lag-L estimate
the one in force L days after the period's last day (the project's glossary, common practice).

The logs stress what the dense layout never had to face: many release days per variable,
whole-history benchmark revisions (one release republishing every past period), periods before
1970 (negative ordinals, release days before 1970-01-01), and several variables of each
frequency on their own days.
"""

from __future__ import annotations

import pickle
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from vintages import Cube, VintageStore, release_calendar
from vintages.errors import StoreCorruptError
from vintages.periods import format_periods, parse_periods, period_end

LAWS = settings(max_examples=60, deadline=None, derandomize=True,
                suppress_health_check=[HealthCheck.too_slow])


@st.composite
def release_logs(draw):
    """Variables of both frequencies, each with up to 30 release days, some of them benchmarks."""
    n_q, n_m = draw(st.integers(0, 2)), draw(st.integers(0, 3))
    if n_q + n_m == 0:
        n_m = 1
    names = [f"q{i}" for i in range(n_q)] + [f"m{i}" for i in range(n_m)]
    meta = {n: {"freq": "Q" if n[0] == "q" else "M"} for n in names}
    year0 = draw(st.integers(1955, 1972))  # often across 1970: negative ordinals and days
    # values in bulk from a drawn seed; a third from a small set, so unchanged re-publications
    # and ties are common
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    rows = []
    for n in names:
        f = meta[n]["freq"]
        base = pd.Period(f"{year0}Q1" if f == "Q" else f"{year0}-01", f).ordinal
        span = 12 if f == "Q" else 30
        ends = period_end(base + np.arange(span), f)
        n_rel = draw(st.integers(0, 30))
        offsets = sorted(set(draw(st.lists(st.integers(1, 2500), min_size=n_rel, max_size=n_rel))))
        for off in offsets:
            day = ends[0] + np.timedelta64(off, "D")
            known = int(np.searchsorted(ends, day, side="left"))  # periods ended by that day
            if known == 0:
                continue
            if draw(st.integers(0, 5)) == 0:  # a benchmark revision: the whole history again
                lo, hi = 0, known - 1
            else:
                hi = draw(st.integers(0, known - 1))
                lo = draw(st.integers(max(0, hi - 4), hi))
            x = np.where(rng.random(hi - lo + 1) < 0.3, rng.choice([0.0, 1.0, -2.5], hi - lo + 1),
                         rng.normal(0.0, 1e3, hi - lo + 1))
            labels = format_periods(base + np.arange(lo, hi + 1), f)
            rows += [(n, p, day, v) for p, v in zip(labels, x, strict=True)]
    log = pd.DataFrame(rows, columns=["variable", "period", "release", "value"])
    log["release"] = pd.to_datetime(log["release"]).astype("datetime64[s]")
    return log, meta


def _dates(data, log, n=6) -> np.ndarray:
    """Probe days: release days and their neighbours, and random days over the log's span."""
    if not len(log):
        return np.array(["1969-12-31"], dtype="datetime64[D]")
    rel = np.unique(log["release"].to_numpy().astype("datetime64[D]"))
    near = data.draw(st.lists(st.tuples(st.sampled_from(list(rel)), st.sampled_from([-1, 0, 1])),
                              min_size=1, max_size=n))
    span = int((rel[-1] - rel[0]).astype(int)) + 20
    rand = data.draw(st.lists(st.integers(-10, span), min_size=1, max_size=n))
    out = [d + np.timedelta64(k, "D") for d, k in near]
    out += [rel[0] + np.timedelta64(k, "D") for k in rand]
    return np.array(out, dtype="datetime64[D]")


class Brute:
    """The definitions, written plainly: each cell's releases as a list sorted by day."""

    def __init__(self, log: pd.DataFrame, fc):
        self.fc = fc
        self.cells: dict[tuple[int, int], list[tuple[np.datetime64, float]]] = {}
        sub = log[log["variable"].isin(fc.variables)]
        rows = np.searchsorted(fc.variables, sub["variable"].to_numpy(dtype=str))
        cols = parse_periods(sub["period"].to_numpy())[0] - (fc.periods[0] if len(sub) else 0)
        days = sub["release"].to_numpy().astype("datetime64[D]")
        for i, j, r, x in zip(rows.tolist(), cols.tolist(), days, sub["value"].tolist(),
                              strict=True):
            self.cells.setdefault((i, j), []).append((r, x))
        for entries in self.cells.values():
            entries.sort(key=lambda e: e[0])

    def _grid(self, pick) -> tuple[np.ndarray, np.ndarray]:
        vals = np.full((len(self.fc.variables), len(self.fc.periods)), np.nan)
        rel = np.full(vals.shape, np.datetime64("NaT"), dtype="datetime64[D]")
        for (i, j), entries in self.cells.items():
            e = pick(i, j, entries)
            if e is not None:
                rel[i, j], vals[i, j] = e
        return vals, rel

    def known(self, d) -> tuple[np.ndarray, np.ndarray]:
        """What was known on d: per cell, the last release dated on or before d."""
        return self._grid(lambda i, j, es: ([e for e in es if e[0] <= d] or [None])[-1])

    def kth(self, k: int) -> tuple[np.ndarray, np.ndarray]:
        """Per cell, its k-th release (none when fewer)."""
        return self._grid(lambda i, j, es: es[k - 1] if len(es) >= k else None)

    def at(self, when: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Per cell (i, j), what was known on its own day when[i, j]."""
        return self._grid(lambda i, j, es: ([e for e in es if e[0] <= when[i, j]] or [None])[-1])


@LAWS
@given(store=release_logs(), data=st.data())
def test_both_asof_paths_equal_brute_force(store, data):
    """The grid and the combined-key as-of paths equal the brute-force filter on every probe day."""
    log, meta = store
    cube = Cube.from_log(log, meta)
    dates = _dates(data, log)
    for fc in cube.indexes.values():
        brute = Brute(log, fc)
        rows = data.draw(st.permutations(range(len(fc.variables))))  # any order of variables
        grids = {path: fc.asof_values(dates, rows, path=path) for path in ("grid", "keys", "auto")}
        for k, d in enumerate(dates):
            want_v, want_r = brute.known(d)
            for vals, rel in grids.values():
                np.testing.assert_array_equal(vals[k], want_v[rows])
                np.testing.assert_array_equal(rel[k], want_r[rows])
        # one day per cell (the lagged path): each cell asked on its own random probe day
        cells = fc._cells(None)
        pick = data.draw(st.lists(st.integers(0, len(dates) - 1), min_size=cells.size,
                                  max_size=cells.size))
        when = dates[np.asarray(pick, dtype=np.int64)].reshape(cells.shape)
        got_v, got_r = fc.gather(fc.asof_cells(cells, when))
        want_v, want_r = brute.at(when)
        np.testing.assert_array_equal(got_v, want_v)
        np.testing.assert_array_equal(got_r, want_r)


@LAWS
@given(store=release_logs(), k=st.integers(1, 4), lag=st.integers(0, 900))
def test_estimates_and_lagged_equal_brute_force(store, k, lag):
    """estimate(k), latest() and lagged(L) equal the k-th, the last and the as-of-L-days releases."""
    log, meta = store
    cube = Cube.from_log(log, meta)
    for f, fc in cube.indexes.items():
        brute = Brute(log, fc)
        want_v, want_r = brute.kth(k)
        da = cube.estimate(k, f)
        np.testing.assert_array_equal(da.values, want_v)
        np.testing.assert_array_equal(da["release_date"].values.astype("datetime64[D]"), want_r)
        lv, lr = brute.known(np.datetime64("2200-01-01"))
        np.testing.assert_array_equal(cube.latest(f).values, lv)
        np.testing.assert_array_equal(cube.latest(f)["release_date"].values, lr)
        ends = period_end(fc.periods, f) + np.timedelta64(lag, "D")
        when = np.broadcast_to(ends, (len(fc.variables), len(ends)))
        da = cube.lagged(lag, f)
        want_v, want_r = brute.at(when)
        np.testing.assert_array_equal(da.values, want_v)
        np.testing.assert_array_equal(da["release_date"].values, want_r)


@LAWS
@given(store=release_logs())
def test_release_views_equal_brute_force(store):
    """release_dates, release_calendar and to_dataarray equal the log's own groupings."""
    log, meta = store
    cube = Cube.from_log(log, meta)
    day = log["release"].to_numpy().astype("datetime64[D]")
    for v in meta:
        np.testing.assert_array_equal(cube.release_dates(v), np.unique(day[log["variable"] == v]))
    cal = release_calendar(cube)
    ref = (log.assign(o=parse_periods(log["period"].to_numpy())[0])
           .groupby(["variable", "release"]).agg(n=("o", "size"), lo=("o", "min"), hi=("o", "max"))
           .reset_index())
    assert int(cal["n_values"].sum()) == len(log)
    got = cal.sort_values(["variable", "release"]).reset_index(drop=True)
    ref = ref.sort_values(["variable", "release"]).reset_index(drop=True)
    assert got["variable"].tolist() == ref["variable"].tolist()
    np.testing.assert_array_equal(got["release"].to_numpy().astype("datetime64[D]"),
                                  ref["release"].to_numpy().astype("datetime64[D]"))
    assert got["n_values"].tolist() == ref["n"].tolist()
    for col, o in (("first_period", "lo"), ("last_period", "hi")):
        labels = [format_periods([x], meta[v]["freq"])[0]
                  for v, x in zip(ref["variable"], ref[o], strict=True)]
        assert got[col].tolist() == labels
    for f, fc in cube.indexes.items():
        da = cube.to_dataarray(f)
        sub = log[log["variable"].isin(fc.variables)]
        assert int(da.notnull().sum()) == len(sub)
        i = da.indexes["variable"].get_indexer(sub["variable"])
        j = da.indexes["period"].get_indexer(pd.PeriodIndex(sub["period"], freq=f))
        k = da.indexes["release"].get_indexer(sub["release"].astype("datetime64[ns]"))
        assert (i >= 0).all() and (j >= 0).all() and (k >= 0).all()
        np.testing.assert_array_equal(da.values[i, j, k], sub["value"].to_numpy())


@LAWS
@given(store=release_logs(), data=st.data())
def test_pickle_and_npz_round_trips_give_the_same_index(store, data):
    """A pickled or saved-and-loaded cube gives the same as-of on every probe day (and equal arrays)."""
    log, meta = store
    cube = Cube.from_log(log, meta, checksum="abc")
    with tempfile.TemporaryDirectory() as tmp:
        loaded = Cube.load(cube.save(Path(tmp) / "cube.npz"))
    for other in (pickle.loads(pickle.dumps(cube)), loaded):
        assert other.meta == cube.meta and other.checksum == "abc"
        assert sorted(other.indexes) == sorted(cube.indexes)
        for f, fc in cube.indexes.items():
            oc = other.indexes[f]
            for name in ("variables", "periods", "cell", "day", "value", "starts", "releases"):
                np.testing.assert_array_equal(getattr(oc, name), getattr(fc, name))
        for d in _dates(data, log, n=2):
            pd.testing.assert_frame_equal(other.asof(d).to_frame(), cube.asof(d).to_frame())


@settings(max_examples=30, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.too_slow])
@given(store=release_logs(), data=st.data())
def test_store_round_trip_keeps_the_index(store, data):
    """A store written with (often pre-1970) releases reads back into the index built from the log."""
    log, meta = store
    with tempfile.TemporaryDirectory() as tmp:
        vs = VintageStore.init(Path(tmp) / "s")
        if len(log):
            vs.append(log, meta)
        if not vs.variables:
            return
        read = vs.cube()
    direct = Cube.from_log(log, {k: meta[k] for k in read.meta})
    for f, fc in direct.indexes.items():
        for name in ("variables", "periods", "cell", "day", "value"):
            np.testing.assert_array_equal(getattr(read.indexes[f], name), getattr(fc, name))
    for d in _dates(data, log, n=3):
        pd.testing.assert_frame_equal(read.asof(d).to_frame(), direct.asof(d).to_frame())


def test_load_refuses_a_file_that_is_not_an_index(tmp_path):
    """Cube.load of a foreign or tampered file raises StoreCorruptError naming the file."""
    bad = tmp_path / "x.npz"
    bad.write_bytes(b"not a zip")
    with pytest.raises(StoreCorruptError, match="x.npz: not a saved release index"):
        Cube.load(bad)
    log = pd.DataFrame({"variable": ["a", "a"], "period": ["1960-01", "1960-02"],
                        "release": pd.to_datetime(["1960-03-01", "1960-03-01"]),
                        "value": [1.0, 2.0]})
    path = Cube.from_log(log, {"a": {"freq": "M"}}).save(tmp_path / "ok.npz")
    with np.load(path) as z:
        arrays = dict(z)
    arrays["M.cell"] = arrays["M.cell"][::-1].copy()  # out of order
    np.savez(tmp_path / "tampered.npz", **arrays)
    with pytest.raises(StoreCorruptError, match="tampered.npz: the M index arrays are inconsistent"):
        Cube.load(tmp_path / "tampered.npz")
