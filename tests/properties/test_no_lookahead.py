"""The cardinal rule as a law: nothing released after the origin is in an information set.

Law: the information set built at origin ``o`` from the full store equals the one built from a
store holding only the releases dated on or before ``o`` (at that store's last release day,
the latest day it covers; no release falls between it and ``o``). This covers the inputs of the
transformations and conversions too: had any of them read a later release, the two would differ.
Provenance agrees: every ``source_release`` and ``input_release`` is on or before the origin.
The law holds for both layouts: the quarterly panel and the native monthly one.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import vintages.rows as rows_mod
from vintages.contract import NATIVE_POLICIES, POLICIES
from vintages.cube import Cube
from vintages.infosets import build_infoset, build_infosets
from vintages.periods import format_periods, period_of_date
from vintages.truths import truth_values

D0 = np.datetime64("2000-01-01", "D")
TRANSFORMS = ("level", "diff", "dlog", "dlog_ann", "yoy")


@st.composite
def stores(draw, native: bool = False):
    """A small random release log: 1-2 quarterly and 0-2 monthly variables, all first released on D0.

    With ``native`` the monthly variables keep their frequency (no conversion in their specs).
    """
    nq = draw(st.integers(1, 2))
    nm = draw(st.integers(0, 2))
    names = [f"q{i}" for i in range(nq)] + [f"m{i}" for i in range(nm)]
    meta = {n: {"freq": "Q" if n[0] == "q" else "M"} for n in names}
    rows = []
    for n in names:
        f = meta[n]["freq"]
        base = (pd.Period("1998Q1", "Q") if f == "Q" else pd.Period("1998-01", "M")).ordinal
        span = 12 if f == "Q" else 36
        days = sorted(set([0] + draw(st.lists(st.integers(1, 700), min_size=0, max_size=5))))
        for d in days:
            if d == 0:  # a first vintage with some history, so that most transforms are defined
                lo, hi = draw(st.integers(0, 2)), draw(st.integers(span // 2, span - 1))
            else:  # later releases: revisions and new periods anywhere, usually near the end
                lo = draw(st.integers(0, span - 1))
                hi = draw(st.integers(lo, span - 1))
            ords = base + np.arange(lo, hi + 1)
            vals = draw(
                st.lists(
                    st.floats(1.0, 100.0, allow_nan=False), min_size=len(ords), max_size=len(ords)
                )
            )
            rel = D0 + np.timedelta64(d, "D")
            rows += [(n, p, rel, v) for p, v in zip(format_periods(ords, f), vals, strict=True)]
    log = pd.DataFrame(rows, columns=["variable", "period", "release", "value"])
    log["release"] = pd.to_datetime(log["release"])
    specs = {}
    for n in names:
        t = draw(st.sampled_from(TRANSFORMS))
        spec = {"transform": t}
        if meta[n]["freq"] == "M" and not native:
            convs = ["mean", "sum", "last"] + (["mean3"] if t in ("dlog", "dlog_ann") else [])
            spec["convert"] = draw(st.sampled_from(convs))
            spec["partial"] = draw(st.sampled_from(["keep", "drop"]))
        specs[n] = spec
    return log, meta, specs


def _truncated(log: pd.DataFrame, meta, origin) -> Cube:
    return Cube.from_log(log[log["release"] <= pd.Timestamp(origin)], meta)


def _assert_same(a, b):
    """Two information sets carry the same data and provenance (origin and current aside)."""
    assert list(a.periods) == list(b.periods)
    assert a.variables == b.variables
    np.testing.assert_array_equal(a.values(), b.values())
    assert a.last_observed == b.last_observed
    assert a.source_release == b.source_release
    assert a.input_release == b.input_release
    assert a.native_last == b.native_last
    assert a.shifts == b.shifts
    assert a.native_freq == b.native_freq
    if a.partial is None or b.partial is None:
        assert a.partial is None and b.partial is None
    else:
        np.testing.assert_array_equal(a.partial.values, b.partial.values)


def _build(cube, origin, specs, policy, **layout):
    try:
        return build_infoset(cube, origin, specs, policy=policy, **layout)
    except ValueError as exc:  # LookAheadError is a ValueError
        if "has no value" in str(exc):
            return None
        raise


@settings(
    max_examples=60, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow]
)
@given(data=st.data(), store=stores(), policy=st.sampled_from(POLICIES))
def test_infoset_equals_infoset_of_store_truncated_at_origin(data, store, policy):
    """An information set built from the full store equals the one from releases ≤ origin only."""
    log, meta, specs = store
    cube = Cube.from_log(log, meta)
    span = int((cube.last_release - D0).astype(int))
    offsets = data.draw(st.lists(st.integers(0, span), min_size=1, max_size=4, unique=True))
    origins = np.sort(D0 + np.array(offsets).astype("timedelta64[D]"))
    built = []
    for o in origins:
        full = _build(cube, o, specs, policy)
        small = _truncated(log, meta, o)
        ref = _build(small, small.last_release, specs, policy)
        assert (full is None) == (ref is None)
        if full is None:
            continue
        _assert_same(full, ref)
        assert full.origin == o
        assert full.current.ordinal == int(period_of_date([o], "Q")[0])
        for v in full.variables:
            assert full.source_release[v] <= o
            assert full.input_release[v] <= o
        built.append((o, full))
    # the vectorised pass over many origins equals the one-origin builds
    if built:
        together = build_infosets(cube, [o for o, _ in built], specs, policy=policy)
        for (_, one), many in zip(built, together, strict=True):
            _assert_same(one, many)


NATIVE = {"freq": "M", "layout": "native"}


@settings(
    max_examples=60, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow]
)
@given(data=st.data(), store=stores(native=True), policy=st.sampled_from(NATIVE_POLICIES))
def test_native_infoset_equals_infoset_of_store_truncated_at_origin(data, store, policy):
    """The native-layout information set from the full store equals the one from releases ≤ origin."""
    log, meta, specs = store
    cube = Cube.from_log(log, meta)
    span = int((cube.last_release - D0).astype(int))
    offsets = data.draw(st.lists(st.integers(0, span), min_size=1, max_size=4, unique=True))
    origins = np.sort(D0 + np.array(offsets).astype("timedelta64[D]"))
    built = []
    for o in origins:
        full = _build(cube, o, specs, policy, **NATIVE)
        small = _truncated(log, meta, o)
        ref = _build(small, small.last_release, specs, policy, **NATIVE)
        assert (full is None) == (ref is None)
        if full is None:
            continue
        _assert_same(full, ref)
        assert full.origin == o and full.freq == "M"
        assert full.current.ordinal == int(period_of_date([o], "M")[0])
        assert full.native_freq == {n: meta[n]["freq"] for n in specs}
        for v in full.variables:
            assert full.source_release[v] <= o
            assert full.input_release[v] <= o
            if meta[v]["freq"] == "Q":  # quarterly values only on a quarter's last month
                months = full.series(v).dropna().index.month
                assert set(months) <= {3, 6, 9, 12}
        built.append((o, full))
    if built:
        together = build_infosets(cube, [o for o, _ in built], specs, policy=policy, **NATIVE)
        for (_, one), many in zip(built, together, strict=True):
            _assert_same(one, many)


@settings(max_examples=40, deadline=None, derandomize=True)
@given(data=st.data(), store=stores())
def test_asof_truth_equals_latest_truth_of_truncated_store(data, store):
    """The truth 'asof:D' equals the 'latest' truth of the store cut at D (nothing after D used)."""
    log, meta, specs = store
    cube = Cube.from_log(log, meta)
    span = int((cube.last_release - D0).astype(int))
    d = D0 + np.timedelta64(data.draw(st.integers(0, span)), "D")
    small = _truncated(log, meta, d)
    periods = pd.period_range("1998Q1", "2001Q4", freq="Q")
    for name, spec in specs.items():
        a, ra, _ = truth_values(cube, f"asof:{d}", name, spec, periods)
        b, rb, _ = truth_values(small, "latest", name, spec, periods)
        np.testing.assert_array_equal(a, b)
        np.testing.assert_array_equal(ra, rb)
        assert (ra[~np.isnat(ra)] <= d).all()


@pytest.mark.parametrize("layout", [{}, NATIVE])
def test_the_law_detects_a_leak(monkeypatch, layout):
    """A deliberately leaky value source (the vintage 60 days later) breaks the law, so the law can fail."""
    rows = [
        ("q0", "2000Q1", "2000-04-30", 100.0),
        ("q0", "2000Q2", "2000-07-30", 101.0),
        ("q0", "2000Q1", "2000-07-30", 100.5),
    ]
    log = pd.DataFrame(rows, columns=["variable", "period", "release", "value"])
    log["release"] = pd.to_datetime(log["release"])
    meta = {"q0": {"freq": "Q"}}
    origin = np.datetime64("2000-06-15")
    honest_full = build_infoset(Cube.from_log(log, meta), origin, {"q0": "level"}, **layout)
    small = _truncated(log, meta, origin)
    honest_ref = build_infoset(small, small.last_release, {"q0": "level"}, **layout)
    _assert_same(honest_full, honest_ref)

    real_source = rows_mod._source

    def leaky(fc, rows, dates, mode):
        return real_source(fc, rows, dates + np.timedelta64(60, "D"), mode)

    monkeypatch.setattr(rows_mod, "_source", leaky)
    leaked = build_infoset(Cube.from_log(log, meta), origin, {"q0": "level"}, **layout)
    with pytest.raises(AssertionError):
        _assert_same(leaked, honest_ref)
    assert leaked.source_release["q0"] > origin
