"""The as-of laws, checked on random release logs (hypothesis, derandomised for reproducibility).

* ``asof(d)`` equals an obviously-correct brute force: keep the releases dated on or before d,
  take the latest per (variable, period) -- the definition of a real-time vintage in Croushore
  and Stark (2001), "A real-time data set for macroeconomists", Journal of Econometrics 105(1),
  111-130 (the data "as they existed" at a date).
* Appending a release never changes what was known at any earlier date.
* ``asof(d)`` equals the cube built only from the releases on or before d.
* Reading back what was written gives the same cube.
"""

from __future__ import annotations

import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from vintages import Cube, VintageStore
from vintages.periods import format_periods, period_end

VARS = {"m1": "M", "q1": "Q", "q2": "Q"}
META = {k: {"freq": f} for k, f in VARS.items()}
PERIODS = {"Q": (200, 208), "M": (600, 624)}  # 2020Q1..2021Q4, 2020-01..2021-12
DAY0 = np.datetime64("2020-01-01", "D")
LAWS = settings(max_examples=60, deadline=None, derandomize=True,
                suppress_health_check=[HealthCheck.too_slow])


def _row(draw_var, draw_off, draw_lag, draw_val):
    f = VARS[draw_var]
    lo, hi = PERIODS[f]
    o = lo + draw_off % (hi - lo)
    rel = period_end([o], f)[0] + np.timedelta64(draw_lag, "D")
    return draw_var, str(format_periods([o], f)[0]), rel, draw_val


# Values from a small set make re-publications of unchanged values (and ties) common.
_values = st.one_of(st.sampled_from([0.0, 1.0, -2.5, 1e-300]),
                    st.floats(allow_nan=False, allow_infinity=False, width=64))
_rows = st.builds(_row, st.sampled_from(sorted(VARS)), st.integers(0, 23), st.integers(1, 700), _values)


def _frame(rows) -> pd.DataFrame:
    return pd.DataFrame({"variable": [r[0] for r in rows], "period": [r[1] for r in rows],
                         "release": np.array([r[2] for r in rows], dtype="datetime64[D]").astype("datetime64[s]"),
                         "value": np.array([r[3] for r in rows], dtype=np.float64)})


logs = st.lists(_rows, max_size=40, unique_by=lambda r: (r[0], r[1], r[2])).map(_frame)
days = st.integers(-30, 1200).map(lambda k: DAY0 + np.timedelta64(k, "D"))


def probes(data, log: pd.DataFrame, n: int = 8) -> list[np.datetime64]:
    """Random days, and days on and around the log's release dates (where off-by-one bugs live)."""
    out = data.draw(st.lists(days, min_size=1, max_size=n))
    if len(log):
        rel = log["release"].to_numpy().astype("datetime64[D]")
        near = st.tuples(st.sampled_from(list(rel)), st.sampled_from([-1, 0, 0, 1]))
        out += [d + np.timedelta64(k, "D") for d, k in data.draw(st.lists(near, min_size=1, max_size=n))]
    return out


def brute_force(log: pd.DataFrame, d: np.datetime64) -> pd.DataFrame:
    """What was known on d, by definition: filter, sort by release, last per (variable, period)."""
    seen = log[log["release"].to_numpy().astype("datetime64[D]") <= d]
    last = seen.sort_values("release").groupby(["variable", "period"], as_index=False).last()
    return _norm(last)


def _norm(df: pd.DataFrame) -> pd.DataFrame:
    out = pd.DataFrame({"variable": df["variable"].astype(str).to_numpy(),
                        "period": df["period"].astype(str).to_numpy(),
                        "value": df["value"].to_numpy(dtype=float),
                        "release": pd.to_datetime(df["release"]).to_numpy().astype("datetime64[D]")})
    return out.sort_values(["variable", "period", "release"]).reset_index(drop=True)


def known(cube: Cube, d: np.datetime64) -> pd.DataFrame:
    return _norm(cube.asof(d).to_frame())


def _equal(a: pd.DataFrame, b: pd.DataFrame) -> None:
    pd.testing.assert_frame_equal(a, b, check_exact=True, check_dtype=False)


@LAWS
@given(log=logs, data=st.data())
def test_asof_equals_brute_force(log, data):
    """asof(d) equals the brute-force filter 'latest release on or before d per (variable, period)'."""
    dates = probes(data, log)
    cube = Cube.from_log(log, META)
    for d in dates:
        _equal(known(cube, d), brute_force(log, d))
    # the vectorised many-dates path agrees with the one-date path
    for f, fc in cube.indexes.items():
        vals, _ = fc.asof_values(np.asarray(dates, dtype="datetime64[D]"))
        for k, d in enumerate(dates):
            np.testing.assert_array_equal(vals[k], cube.asof(d).arrays[f].values)


@LAWS
@given(log=logs, data=st.data())
def test_asof_equals_cube_of_earlier_releases(log, data):
    """asof(d) equals the as-of of the cube built only from releases dated on or before d."""
    full = Cube.from_log(log, META)
    for d in probes(data, log, n=3):
        early = log[log["release"].to_numpy().astype("datetime64[D]") <= d]
        _equal(known(full, d), known(Cube.from_log(early, META), d))


@LAWS
@given(log=logs, later=st.data())
def test_appending_never_changes_the_past(log, later):
    """After appending new releases, every date before the earliest of them shows what it showed before."""
    pick = later.draw(st.lists(st.booleans(), min_size=len(log), max_size=len(log)))
    mask = np.asarray(pick, dtype=bool)
    first, second = log[~mask], log[mask]
    with tempfile.TemporaryDirectory() as tmp:
        store = VintageStore.init(Path(tmp) / "s")
        if len(first):
            store.append(first)
        before = store.cube() if len(first) else Cube.from_log(first, META)
        if len(second):
            store.append(second)
        after = store.cube()
    horizon = second["release"].min().to_datetime64().astype("datetime64[D]") if len(second) else DAY0 + 2000
    # the day just before the first new release is the sharpest probe
    probe = [d for d in probes(later, first, n=4) if d < horizon] + [horizon - np.timedelta64(1, "D")]
    for d in probe:
        _equal(known(after, d), known(before, d))


@LAWS
@given(log=logs)
def test_read_back_gives_the_same_cube(log):
    """The cube of a store holding a log equals the cube built directly from that log."""
    with tempfile.TemporaryDirectory() as tmp:
        store = VintageStore.init(Path(tmp) / "s")
        if len(log):
            store.append(log, META)
        read = store.cube()
        back = store.read_log()
        direct = Cube.from_log(log, {k: META[k] for k in store.variables})
    assert sorted(read.indexes) == sorted(direct.indexes)
    _equal(_norm(back), _norm(log))
    for f, fc in read.indexes.items():
        ref = direct.indexes[f]
        np.testing.assert_array_equal(fc.variables, ref.variables)
        np.testing.assert_array_equal(fc.periods, ref.periods)
        np.testing.assert_array_equal(fc.releases, ref.releases)
        np.testing.assert_array_equal(fc.cell, ref.cell)
        np.testing.assert_array_equal(fc.day, ref.day)
        np.testing.assert_array_equal(fc.value, ref.value)
