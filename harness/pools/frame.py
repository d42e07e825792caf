"""The pools on labelled arrays: members from the ledger, truths on the (origin, variable, horizon) grid.

Thin glue over :func:`harness.pools.combine` for the run: stack and check members' draws,
place each target's truth and the day it became known on the ledger's grid, and return the
pool as an :class:`xarray.Dataset` (draws, weights, fallback flags) plus a tidy weights table
for storage.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from harness.pools.combine import combine
from harness.pools.errors import PoolError
from vintages import parse_periods, parse_truth, period_end

__all__ = ["combine_dataarray", "stack_members", "truth_grid", "weights_frame"]

MEMBER_DIMS = ("origin", "variable", "horizon", "draw")
LEDGER_DIMS = ("model", *MEMBER_DIMS)


def stack_members(members: Mapping[str, xr.DataArray]) -> xr.DataArray:
    """Members' draws stacked on a ``model`` dim, after checking they forecast the same things.

    Parameters
    ----------
    members : mapping of model name to DataArray
        Each with dims ``(origin, variable, horizon, draw)`` (any order).

    Returns
    -------
    DataArray, dims (model, origin, variable, horizon, draw)

    Raises
    ------
    PoolError
        Fewer than two members, other dims, or members whose target variables, horizons,
        origins or number of draws differ from the first member's (the message names both
        models and the differing labels).
    """
    names = list(members)
    if len(names) < 2:
        raise PoolError(f"a pool needs at least two member models; got {len(names)} ({names})")
    first = names[0]
    ref = None
    out = []
    for name in names:
        da = members[name]
        if set(da.dims) != set(MEMBER_DIMS):
            raise PoolError(f"pool member {name!r}: dims must be {sorted(MEMBER_DIMS)}; got "
                            f"{sorted(map(str, da.dims))}")
        da = da.transpose(*MEMBER_DIMS)
        if ref is None:
            ref = da
        for dim, what in (("variable", "target variables"), ("horizon", "horizons"),
                          ("origin", "origins")):
            a, b = list(ref[dim].values), list(da[dim].values)
            if a != b:
                extra = sorted(map(str, set(b) - set(a)))
                lack = sorted(map(str, set(a) - set(b)))
                raise PoolError(f"pool member {name!r} has other {what} than {first!r}: extra "
                                f"{extra}, missing {lack} (order must match too)")
        if da.sizes["draw"] != ref.sizes["draw"]:
            raise PoolError(f"pool member {name!r} has {da.sizes['draw']} draws per forecast, "
                            f"{first!r} has {ref.sizes['draw']}")
        out.append(da.drop_vars([c for c in da.coords if c not in MEMBER_DIMS]))
    return xr.concat(out, dim=pd.Index(names, name="model"), coords="minimal",
                     compat="override", join="override")


def truth_grid(target_period: xr.DataArray, variables: Sequence[str], truths: pd.DataFrame,
               rule: str = "first", freq: str = "Q") -> tuple[np.ndarray, np.ndarray]:
    """Each forecast's truth and the day it became known, on the ledger's (origin, variable, horizon) grid.

    Parameters
    ----------
    target_period : DataArray, dims (origin, horizon)
        Target period label of each origin and horizon (the ledger's ``target_period``).
    variables : sequence of str
        Target variables, in the ledger's order.
    truths : DataFrame
        Columns ``variable``, ``target_period`` (label), ``truth``, ``truth_release`` (as built
        from :func:`vintages.truth_values`); a target absent from it has no truth.
    rule : str
        The truth rule the table was built with. The day a truth is known is its release date
        for ``first`` and ``release:K``; for ``lag:ND`` the later of the release date and N
        days after the period's end, for ``asof:DATE`` the later of the release date and DATE
        (until then, which value the rule picks is not known). ``latest`` is refused: it is
        fixed only at the store's last day, so it is no real-time truth.
    freq : {"Q", "M"}
        Frequency of the target periods.

    Returns
    -------
    truth : ndarray of float64, shape (O, V, H)
    known : ndarray of datetime64[D], shape (O, V, H)
        NaT where the truth is missing.
    """
    r = parse_truth(rule)
    if r.kind == "latest":
        raise PoolError("pool truth 'latest' is not a real-time truth (it is fixed only at the "
                        "store's last release day); weight pools by 'first', 'release:K', "
                        "'lag:ND' or 'asof:DATE'")
    need = {"variable", "target_period", "truth", "truth_release"}
    if not need <= set(truths.columns):
        raise PoolError(f"truth_grid: truths needs columns {sorted(need)}; got "
                        f"{sorted(map(str, truths.columns))}")
    tp = target_period.transpose("origin", "horizon")
    labels = np.asarray(tp.values, dtype=object).astype(str)
    o, h = labels.shape
    v = len(variables)
    key = pd.MultiIndex.from_arrays([np.repeat(np.asarray(variables, dtype=object), o * h),
                                     np.tile(labels.reshape(-1), v)])
    table = truths.drop_duplicates(["variable", "target_period"], keep="last")
    table = table.set_index(["variable", table["target_period"].astype(str)])
    pos = table.index.get_indexer(key)
    found = pos >= 0
    truth = np.full(key.size, np.nan)
    known = np.full(key.size, np.datetime64("NaT"), dtype="datetime64[D]")
    truth[found] = table["truth"].to_numpy(dtype=np.float64)[pos[found]]
    rel = pd.to_datetime(table["truth_release"]).to_numpy().astype("datetime64[D]")
    known[found] = rel[pos[found]]
    if r.kind in ("lag", "asof"):
        if r.kind == "lag":
            ords, _ = parse_periods(np.tile(labels.reshape(-1), v))
            fixed = period_end(ords, freq) + np.timedelta64(int(r.days), "D")
        else:
            fixed = np.full(key.size, np.datetime64(r.date, "D"))
        later = ~np.isnat(known)
        known[later] = np.maximum(known[later], fixed[later])
    known[~np.isfinite(truth)] = np.datetime64("NaT")
    shape = (v, o, h)
    return (np.moveaxis(truth.reshape(shape), 0, 1), np.moveaxis(known.reshape(shape), 0, 1))


def combine_dataarray(draws: xr.DataArray, truth, truth_release, *,
                      members: Sequence[str] | None = None, **kwargs: Any) -> xr.Dataset:
    """:func:`harness.pools.combine` on the ledger's draws; the pool as a Dataset.

    Parameters
    ----------
    draws : DataArray, dims (model, origin, variable, horizon, draw)
        E.g. ``read_ledger(run).draws``.
    truth, truth_release : ndarray (O, V, H)
        From :func:`truth_grid`.
    members : sequence of str, optional
        The models to pool (default all), in this order.
    **kwargs
        Passed to :func:`harness.pools.combine` (scheme, window, min_scored, score, seed, ...).

    Returns
    -------
    Dataset
        ``draws`` (origin, variable, horizon, draw), ``weights`` (origin, variable, horizon,
        model), ``fallback``, ``n_scored``, ``gap`` (origin, variable, horizon); attrs
        ``scheme``, ``params`` and ``warnings`` (JSON strings for the latter two).
    """
    if set(draws.dims) != set(LEDGER_DIMS):
        raise PoolError(f"combine_dataarray: draws needs dims {list(LEDGER_DIMS)}; got "
                        f"{list(map(str, draws.dims))}")
    d = draws.transpose(*LEDGER_DIMS)
    if members is not None:
        unknown = sorted(set(members) - set(map(str, d["model"].values)))
        if unknown:
            raise PoolError(f"pool members {unknown} are not models of the run; models are "
                            f"{sorted(map(str, d['model'].values))}")
        d = d.sel(model=list(members))
    models = [str(x) for x in d["model"].values]
    res = combine(d.values, d["origin"].values, np.asarray(truth), np.asarray(truth_release),
                  models=models, variables=[str(x) for x in d["variable"].values],
                  horizons=[int(x) for x in d["horizon"].values], **kwargs)
    cell = ("origin", "variable", "horizon")
    coords = {k: d[k].values for k in ("origin", "variable", "horizon", "draw")}
    return xr.Dataset(
        {"draws": (MEMBER_DIMS, res.draws), "weights": ((*cell, "model"), res.weights),
         "fallback": (cell, res.fallback), "n_scored": (cell, res.n_scored),
         "gap": (cell, res.gap)},
        coords={**coords, "model": models},
        attrs={"scheme": res.scheme, "params": json.dumps(res.params),
               "warnings": json.dumps(list(res.warnings))})


def weights_frame(pool: xr.Dataset, name: str) -> pd.DataFrame:
    """One row per (origin, variable, horizon, model): ``pool``, weight, fallback, n_scored, gap."""
    w = pool["weights"].to_dataframe().reset_index()
    flags = pool[["fallback", "n_scored", "gap"]].to_dataframe().reset_index()
    out = w.merge(flags, on=["origin", "variable", "horizon"], how="left")
    out.insert(0, "pool", name)
    return out.rename(columns={"weights": "weight"})
