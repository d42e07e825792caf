"""The contract types: targets relative to an origin, series specs, and the information set's facts."""

from __future__ import annotations

import pandas as pd
import pytest

from vintages import InfoSet, SeriesSpec, build_infoset, make_targets


def test_make_targets_from_infoset_and_date(cube):
    """Horizon h targets the origin's current period plus h (the period containing the origin)."""
    info = build_infoset(cube, "2010-05-01", ["gdp"])
    tg = make_targets(info, ["gdp"], range(-1, 3))
    assert tg.current == pd.Period("2010Q2", "Q")
    assert [str(p) for p in tg.periods()] == ["2010Q1", "2010Q2", "2010Q3", "2010Q4"]
    assert list(tg.steps_after(info.last_observed["gdp"])) == [0, 1, 2, 3]
    tm = make_targets("2010-05-01", "ip", {"min": 0, "max": 1}, freq="M")
    assert tm.current == pd.Period("2010-05", "M") and tm.horizons == (0, 1)
    with pytest.raises(ValueError, match="integers"):
        make_targets(info, ["gdp"], [0.5])


def test_seriesspec_and_mapping_give_same_infoset(cube):
    """A SeriesSpec and the equivalent mapping give identical information sets."""
    a = build_infoset(
        cube, "2010-07-30", {"gdp": SeriesSpec("dlog_ann"), "ip": SeriesSpec("dlog", "mean3")}
    )
    b = build_infoset(
        cube,
        "2010-07-30",
        {"gdp": {"transform": "dlog_ann"}, "ip": {"transform": "dlog", "convert": "mean3"}},
    )
    assert isinstance(a, InfoSet) and a.data_hash() == b.data_hash()
    assert a.variables == ["gdp", "ip"]


def test_native_freq_enters_the_data_hash_only_when_set(make_cube, gdp_rows):
    """Same panel, one in the native layout: different digests; the common layout's digest ignores it."""
    cube = make_cube(gdp_rows, {"gdp": {"freq": "Q"}})
    common = build_infoset(cube, "2010-10-30", ["gdp"])
    native = build_infoset(cube, "2010-10-30", ["gdp"], layout="native")
    # all-quarterly variables on a quarterly axis: both layouts hold the same numbers
    assert common.values().tolist() == native.values().tolist()
    assert native.native_freq == {"gdp": "Q"} and common.native_freq == {}
    assert native.data_hash() != common.data_hash()
    from dataclasses import replace

    assert replace(native, native_freq={}).data_hash() == common.data_hash()
    assert common.layout == "common" and native.layout == "native"


def test_native_targets_stay_quarterly(cube):
    """On a monthly native panel, quarterly targets count horizons from the origin's quarter."""
    info = build_infoset(cube, "2010-05-01", ["gdp", "ip"], freq="M", layout="native")
    tg = make_targets(info, ["gdp"], range(-1, 2), "Q")
    assert tg.freq == "Q" and tg.current == pd.Period("2010Q2", "Q")
    assert [str(info.on_axis(p)) for p in tg.periods()] == ["2010-03", "2010-06", "2010-09"]
    assert info.current == pd.Period("2010-05", "M")
