"""The pools on the ledger's labelled arrays: member checks, the truth grid, the Dataset and table."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from harness.pools import (
    PoolError,
    combine,
    combine_dataarray,
    stack_members,
    truth_grid,
    weights_frame,
)

ORIGINS = np.array(["2020-02-15", "2020-05-15", "2020-08-15", "2020-11-15"], dtype="datetime64[D]")


def _member(seed, horizons=(0, 1), variables=("gdp", "cpi")):
    rng = np.random.default_rng(seed)
    return xr.DataArray(rng.standard_normal((4, len(variables), len(horizons), 50)).astype(np.float32),
                        dims=("origin", "variable", "horizon", "draw"),
                        coords={"origin": ORIGINS, "variable": list(variables),
                                "horizon": list(horizons), "draw": np.arange(50)})


def test_members_with_other_horizons_or_targets_are_refused_by_name():
    """Stacking members that forecast different horizons or variables raises, naming both models."""
    with pytest.raises(PoolError, match=r"member 'ar' has other horizons than 'bvar': extra \['2'\]"):
        stack_members({"bvar": _member(0), "ar": _member(1, horizons=(0, 2))})
    with pytest.raises(PoolError, match=r"other target variables .* missing \['cpi'\]"):
        stack_members({"bvar": _member(0), "ar": _member(1, variables=("gdp", "jobs"))})
    with pytest.raises(PoolError, match="at least two member models"):
        stack_members({"bvar": _member(0)})
    both = stack_members({"bvar": _member(0), "ar": _member(1).transpose("draw", "variable", "horizon", "origin")})
    assert both.dims == ("model", "origin", "variable", "horizon", "draw")
    assert list(both["model"].values) == ["bvar", "ar"]


def _target_period():
    labels = [[str(pd.Period(o, "Q") + h) for h in (0, 1)] for o in ORIGINS.astype("datetime64[D]")]
    return xr.DataArray(np.array(labels, dtype=object), dims=("origin", "horizon"),
                        coords={"origin": ORIGINS, "horizon": [0, 1]})


def test_truth_grid_places_each_truth_and_its_known_day():
    """Truths land on (origin, variable, horizon) by target period; lag truths are known at period end + lag."""
    table = pd.DataFrame({
        "variable": ["gdp"] * 3 + ["cpi"],
        "target_period": ["2020Q1", "2020Q2", "2020Q3", "2020Q2"],
        "truth": [1.0, 2.0, np.nan, 5.0],
        "truth_release": pd.to_datetime(["2020-04-30", "2020-07-30", "NaT", "2020-07-14"]),
    })
    truth, known = truth_grid(_target_period(), ["gdp", "cpi"], table, "first")
    assert truth.shape == (4, 2, 2)
    assert truth[0, 0, 0] == 1.0 and truth[0, 0, 1] == 2.0 and truth[1, 0, 0] == 2.0
    assert truth[1, 1, 0] == 5.0 and np.isnan(truth[0, 1, 0]) and np.isnat(known[0, 1, 0])
    assert known[0, 0, 1] == np.datetime64("2020-07-30")
    assert np.isnan(truth[2, 0, 0]) and np.isnat(known[2, 0, 0])  # 2020Q3 not published
    _, lag = truth_grid(_target_period(), ["gdp", "cpi"], table, "lag:365D")
    assert lag[0, 0, 0] == np.datetime64("2020-03-31") + 365  # later than its release date
    with pytest.raises(PoolError, match="'latest' is not a real-time truth"):
        truth_grid(_target_period(), ["gdp", "cpi"], table, "latest")


def test_combine_dataarray_equals_combine_and_the_weights_table_has_one_row_per_member():
    """The labelled front returns combine's numbers as a Dataset; weights_frame flattens them."""
    draws = stack_members({"bvar": _member(0), "ar": _member(1), "rw": _member(2)})
    truth = np.random.default_rng(3).standard_normal((4, 2, 2))
    rel = np.broadcast_to((ORIGINS + 10)[:, None, None], (4, 2, 2))
    ds = combine_dataarray(draws, truth, rel, members=["bvar", "rw"], scheme="inverse_score",
                           min_scored=1, seed=4, warn=False)
    ref = combine(draws.sel(model=["bvar", "rw"]).values, ORIGINS, truth, rel,
                  scheme="inverse_score", min_scored=1, seed=4, warn=False)
    np.testing.assert_array_equal(ds["draws"].values, ref.draws)
    np.testing.assert_array_equal(ds["weights"].values, ref.weights)
    assert ds["weights"].dims == ("origin", "variable", "horizon", "model")
    table = weights_frame(ds, "pool_crps")
    assert len(table) == 4 * 2 * 2 * 2 and set(table["model"]) == {"bvar", "rw"}
    assert {"pool", "weight", "fallback", "n_scored", "gap"} <= set(table.columns)
    with pytest.raises(PoolError, match=r"pool members \['nope'\] are not models of the run"):
        combine_dataarray(draws, truth, rel, members=["bvar", "nope"])
