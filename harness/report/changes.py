"""What changed since the last review: new origins, new release batches, moved scores, rankings."""

from __future__ import annotations

import numpy as np
import pandas as pd

DEFAULT_THRESHOLD = 0.05


def _ranking(table: pd.DataFrame, score: str, subperiod: str) -> pd.DataFrame:
    """Models ordered by mean ``score`` (lower first) per variable × horizon."""
    t = table[table["subperiod"] == subperiod]
    if not len(t) or score not in t:
        return pd.DataFrame(columns=["variable", "horizon", "ranking", "best"])
    t = t[np.isfinite(t[score].to_numpy(dtype=float))].sort_values(["variable", "horizon", score, "model"])
    g = t.groupby(["variable", "horizon"], sort=True)["model"]
    out = g.agg(lambda s: " < ".join(map(str, s))).rename("ranking").reset_index()
    out["best"] = g.first().to_numpy()
    return out


def _open_store(current, store):
    if store is not None:
        if hasattr(store, "read_log"):
            return store
        from vintages import VintageStore

        return VintageStore(store)
    path = getattr(current.manifest, "store", None)
    if not path:
        return None
    try:
        from vintages import VintageStore

        return VintageStore(path)
    except (OSError, ValueError, RuntimeError):  # the store may live on another machine
        return None


def new_releases(current, earlier, store=None) -> pd.DataFrame:
    """Store batches committed after the earlier run's snapshot, with their source and dates.

    Parameters
    ----------
    current, earlier : harness.evaluation.Evaluation
        Their manifests' ``store_batches`` bound the range of new batches.
    store : VintageStore or path, optional
        Default: the store named in the current run's manifest, when it can be opened. Without a
        store only the batch numbers are known.

    Returns
    -------
    DataFrame
        seq, source, created, rows, variables, first_release, last_release (the release dates in
        the batch).
    """
    cols = ["seq", "source", "created", "rows", "variables", "first_release", "last_release"]
    lo = int(getattr(earlier.manifest, "store_batches", 0) or 0)
    hi = int(getattr(current.manifest, "store_batches", 0) or 0)
    if hi <= lo:
        return pd.DataFrame(columns=cols)
    st = _open_store(current, store)
    if st is None:
        return pd.DataFrame({"seq": np.arange(lo + 1, hi + 1), "source": "(store not available)",
                             "created": None, "rows": np.nan, "variables": "", "first_release": pd.NaT,
                             "last_release": pd.NaT})[cols]
    batches = [b for b in st.manifest()["batches"] if lo < int(b["seq"]) <= hi]
    log = st.read_log()
    log = log[(log["batch"] > lo) & (log["batch"] <= hi)]
    agg = log.groupby("batch").agg(variables=("variable", lambda s: ", ".join(sorted(set(map(str, s))))),
                                   first_release=("release", "min"), last_release=("release", "max"))
    rows = []
    for b in batches:
        seq = int(b["seq"])
        a = agg.loc[seq] if seq in agg.index else None
        rows.append(dict(seq=seq, source=str(b.get("source", "")), created=str(b.get("created", "")),
                         rows=int(b.get("rows", 0)), variables=a["variables"] if a is not None else "",
                         first_release=a["first_release"] if a is not None else pd.NaT,
                         last_release=a["last_release"] if a is not None else pd.NaT))
    return pd.DataFrame(rows, columns=cols)


def changes(current, earlier, store=None, *, threshold: float = DEFAULT_THRESHOLD, score: str = "crps",
            subperiod: str = "full") -> dict[str, pd.DataFrame]:
    """Differences between two evaluations of the same backtest (e.g. two quarterly reviews).

    Parameters
    ----------
    current, earlier : harness.evaluation.Evaluation
    store : VintageStore or path, optional
        Where to read the new release batches from (default: the current run's store).
    threshold : float
        A ratio "moved" when ``|current - earlier| > threshold`` (absolute change of the ratio
        to the benchmark; 0.05 = five points).
    score, subperiod : str
        The score and sub-period compared (default CRPS, full sample).

    Returns
    -------
    dict of DataFrame
        ``new_origins`` (origin), ``new_releases`` (see :func:`new_releases`), ``moved_scores``
        (model, variable, horizon, n_earlier, n_current, ratio_earlier, ratio_current, change),
        ``ranking_changes`` (variable, horizon, ranking_earlier, ranking_current, best_earlier,
        best_current, best_changed).

    Raises
    ------
    ValueError
        If ``threshold`` is negative or ``score`` is not a column of both relative tables.
    """
    if not threshold >= 0:
        raise ValueError(f"changes: threshold must be >= 0, got {threshold!r}")
    for name, ev in (("current", current), ("earlier", earlier)):
        if score not in ev.relative.columns:
            valid = sorted(c for c in ev.relative.columns if c not in ("model", "variable", "horizon", "subperiod",
                                                                       "n"))
            raise ValueError(f"changes: score {score!r} not in the {name} evaluation's relative table; "
                             f"expected one of {valid}")
    o_cur = pd.DatetimeIndex(pd.unique(current.forecasts["origin"]))
    o_old = pd.DatetimeIndex(pd.unique(earlier.forecasts["origin"]))
    man_cur = [pd.Timestamp(o) for o in getattr(current.manifest, "origins", ())]
    man_old = [pd.Timestamp(o) for o in getattr(earlier.manifest, "origins", ())]
    cur = pd.DatetimeIndex(sorted(set(o_cur) | set(man_cur)))
    old = set(o_old) | set(man_old)
    new_origins = pd.DataFrame({"origin": [o for o in cur if o not in old]})

    key = ["model", "variable", "horizon"]
    a = earlier.relative[earlier.relative["subperiod"] == subperiod][key + ["n", score]]
    b = current.relative[current.relative["subperiod"] == subperiod][key + ["n", score]]
    m = a.merge(b, on=key, how="outer", suffixes=("_earlier", "_current"))
    m = m.rename(columns={f"{score}_earlier": "ratio_earlier", f"{score}_current": "ratio_current"})
    m["change"] = m["ratio_current"] - m["ratio_earlier"]
    moved = m[np.abs(m["change"].to_numpy(dtype=float)) > threshold]
    moved = moved[m.columns.intersection(["model", "variable", "horizon", "n_earlier", "n_current",
                                          "ratio_earlier", "ratio_current", "change"], sort=False)]
    moved = moved.sort_values(["variable", "horizon", "model"]).reset_index(drop=True)

    ra = _ranking(earlier.table, score, subperiod)
    rb = _ranking(current.table, score, subperiod)
    r = ra.merge(rb, on=["variable", "horizon"], how="outer", suffixes=("_earlier", "_current"))
    r = r[r["ranking_earlier"] != r["ranking_current"]].copy()
    r["best_changed"] = r["best_earlier"] != r["best_current"]
    r = r[["variable", "horizon", "ranking_earlier", "ranking_current", "best_earlier", "best_current",
           "best_changed"]].sort_values(["variable", "horizon"]).reset_index(drop=True)
    return {"new_origins": new_origins, "new_releases": new_releases(current, earlier, store),
            "moved_scores": moved, "ranking_changes": r}
