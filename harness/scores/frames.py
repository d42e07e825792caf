"""Tables of scores: tidy per-forecast frames, cell means, the common sample, ratios to a benchmark.

Which columns are scores, how each is set against the benchmark (ratio, ratio of square roots,
difference) and which value is best all come from the score registry
(:mod:`harness.scores.registry`): nothing here knows a score by name.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
import pandas as pd

from harness.scores.registry import is_score_column, resolve
from harness.scores.subperiods import FULL, _expand


def tidy_scores(keys: pd.DataFrame, scores: Mapping[str, np.ndarray]) -> pd.DataFrame:
    """Join per-forecast identifiers (one row per forecast) with :func:`score_all` output.

    Parameters
    ----------
    keys : DataFrame
        Columns such as model, variable, horizon, origin, target_period; n rows.
    scores : mapping of str to ndarray of shape (n,)

    Returns
    -------
    DataFrame
        ``keys`` with one column per score appended.
    """
    n = len(keys)
    bad = {name: np.shape(v) for name, v in scores.items() if np.shape(v) != (n,)}
    if bad:
        raise ValueError(f"tidy_scores: keys has {n} rows but score arrays have shapes {bad}; "
                         f"expected ({n},) each")
    clash = sorted(set(scores) & set(keys.columns))
    if clash:
        raise ValueError(f"tidy_scores: score names {clash} already are columns of keys")
    out = keys.reset_index(drop=True).copy()
    for name, v in scores.items():
        out[name] = np.asarray(v, dtype=np.float64)
    return out


def _score_columns(frame: pd.DataFrame, scores: Sequence[str] | None, where: str) -> list[str]:
    if scores is not None:
        missing = sorted(set(scores) - set(frame.columns))
        if missing:
            raise ValueError(f"{where}: score columns {missing} not in the frame; columns are "
                             f"{sorted(map(str, frame.columns))}")
        return list(scores)
    cols = [c for c in frame.columns if is_score_column(c)]
    if not cols:
        raise ValueError(f"{where}: no score columns found (names like crps, log_score, qs_05, "
                         f"cover_90, pit); columns are {sorted(map(str, frame.columns))}")
    return cols


def aggregate(scores: pd.DataFrame, by: Sequence[str] = ("model", "variable", "horizon"),
              subperiods: str | Mapping[str, pd.Series] | None = None, *,
              score_columns: Sequence[str] | None = None) -> pd.DataFrame:
    """Mean score per cell (sub-period × ``by``), with the number of forecasts behind each.

    A forecast is counted in ``n`` when at least one of its scores is present (missing truth or
    a failed task leaves all of them NaN); ``n_missing`` counts the others. Means skip NaN.

    Parameters
    ----------
    scores : DataFrame
        Tidy per-forecast scores (see :func:`tidy_scores`).
    by : sequence of str
        Cell keys besides the sub-period.
    subperiods : None, str or mapping of name to boolean Series
        None: use the frame's ``subperiod`` column if any (from :func:`assign_subperiods`), else
        everything is ``"full"``. A str: name of the column holding sub-period labels. A
        mapping: boolean masks aligned with ``scores.index``; ``"full"`` is added.
    score_columns : sequence of str, optional
        Columns to average (default: the columns named like scores).

    Returns
    -------
    DataFrame
        Columns ``subperiod``, ``*by``, ``n``, ``n_missing`` and one mean per score.

    Raises
    ------
    ValueError
        Missing columns or masks not aligned with the frame.
    """
    by = list(by)
    cols = _score_columns(scores, score_columns, "aggregate")
    missing = sorted(set(by) - set(scores.columns))
    if missing:
        raise ValueError(f"aggregate: group columns {missing} not in the frame; columns are "
                         f"{sorted(map(str, scores.columns))}")
    if isinstance(subperiods, Mapping):
        masks: dict[str, np.ndarray] = {FULL: np.ones(len(scores), dtype=bool)}
        for name, mask in subperiods.items():
            m = pd.Series(mask)
            if len(m) != len(scores) or not m.index.equals(scores.index):
                raise ValueError(f"aggregate: mask {name!r} is not aligned with the frame's index "
                                 f"({len(m)} vs {len(scores)} rows)")
            masks[str(name)] = m.fillna(False).to_numpy(dtype=bool)
        frame, key = _expand(scores, masks), "subperiod"
    elif isinstance(subperiods, str):
        if subperiods not in scores.columns:
            raise ValueError(f"aggregate: no sub-period column {subperiods!r}; columns are "
                             f"{sorted(map(str, scores.columns))}")
        frame, key = scores, subperiods
    elif subperiods is None:
        if "subperiod" in scores.columns:
            frame, key = scores, "subperiod"
        else:
            frame, key = scores.assign(subperiod=FULL), "subperiod"
    else:
        raise ValueError("aggregate: subperiods must be None, a column name or a mapping of "
                         f"boolean masks; got {type(subperiods).__name__}")
    present = frame[cols].notna().any(axis=1)
    work = frame[[key, *by, *cols]].copy()
    work["n"] = present.astype(np.int64)
    work["n_missing"] = (~present).astype(np.int64)
    grouped = work.groupby([key, *by], sort=True, observed=True, dropna=False)
    out = grouped[cols].mean()
    counts = grouped[["n", "n_missing"]].sum()
    out = counts.join(out).reset_index()
    if key != "subperiod":
        out = out.rename(columns={key: "subperiod"})
    return out


def common_sample(scores: pd.DataFrame,
                  keys: Sequence[str] = ("variable", "horizon", "origin", "target_period"), *,
                  score_columns: Sequence[str] | None = None) -> pd.DataFrame:
    """Keep only the forecasts scored for every model, so that cell means compare like with like.

    A forecast (one value of ``keys``) is kept when every model in the frame has a row for it
    with at least one score present; a failed task or a missing truth for one model removes
    that target for all models.

    Parameters
    ----------
    scores : DataFrame
        Tidy per-forecast scores with a ``model`` column.
    keys : sequence of str
        Columns identifying the same forecast target across models.
    score_columns : sequence of str, optional

    Returns
    -------
    DataFrame
        The rows of ``scores`` on the common sample.
    """
    cols = _score_columns(scores, score_columns, "common_sample")
    need = ["model", *keys]
    missing = sorted(set(need) - set(scores.columns))
    if missing:
        raise ValueError(f"common_sample: columns {missing} not in the frame; columns are "
                         f"{sorted(map(str, scores.columns))}")
    present = scores[cols].notna().any(axis=1)
    n_models = scores["model"].nunique()
    scored = scores.loc[present, need].drop_duplicates()
    per_key = scored.groupby(list(keys), observed=True, dropna=False)["model"].nunique()
    full_keys = per_key[per_key == n_models].index
    idx = pd.MultiIndex.from_frame(scores[list(keys)]) if len(keys) > 1 else pd.Index(scores[keys[0]])
    return scores.loc[idx.isin(full_keys) & present.to_numpy()]


def _loss_columns(frame: pd.DataFrame) -> list:
    """Resolved loss columns present in the frame (set against the benchmark by the registry)."""
    cols = [resolve(c) for c in frame.columns]
    return [c for c in cols if c is not None and c.is_loss and c.score.versus is not None]


def _cell_keys(agg: pd.DataFrame) -> list[str]:
    skip = {"model", "n", "n_missing"}
    relative = {c.relative_name for c in _loss_columns(agg)}
    return [c for c in agg.columns if not is_score_column(c) and c not in skip and c not in relative
            and not (isinstance(c, str) and c.endswith("_diff") and is_score_column(c[:-5]))]


def relative_to(agg: pd.DataFrame, benchmark: str) -> pd.DataFrame:
    """Loss-type scores of each model relative to a benchmark model in the same cell.

    How each score is set against the benchmark comes from its declaration in the registry:
    ratios ``score / benchmark score`` (below 1 = better) for the CRPS family, quantile and
    interval scores and absolute errors; the ratio of square roots for squared errors (the RMSE
    ratio, ``sqrt(MSE / MSE_benchmark)``, under the column ``se_mean``); a difference for the
    log score, which can be negative (column ``log_score_diff``, below 0 = better). PIT and
    coverage are left out.

    Parameters
    ----------
    agg : DataFrame
        Output of :func:`aggregate` (needs a ``model`` column).
    benchmark : str
        Name of the benchmark model.

    Returns
    -------
    DataFrame
        Cell keys, ``model``, ``n`` and the relative scores.

    Raises
    ------
    ValueError
        No ``model`` column or unknown benchmark (the known models are listed).
    """
    if "model" not in agg.columns:
        raise ValueError("relative_to: the aggregate has no 'model' column; aggregate by model")
    models = sorted(map(str, pd.unique(agg["model"])))
    if benchmark not in models:
        raise ValueError(f"relative_to: unknown benchmark {benchmark!r}; models are {models}")
    keys = _cell_keys(agg)
    losses = _loss_columns(agg)
    names = [c.name for c in losses]
    bench = agg.loc[agg["model"] == benchmark, keys + names]
    merged = agg[keys + ["model", "n"] + names].merge(bench, on=keys, how="left",
                                                      suffixes=("", "__bench"))
    out = merged[keys + ["model", "n"]].copy()
    for c in losses:
        a = merged[c.name].to_numpy(dtype=np.float64)
        b = merged[c.name + "__bench"].to_numpy(dtype=np.float64)
        with np.errstate(divide="ignore", invalid="ignore"):
            if c.score.versus == "difference":
                out[c.relative_name] = a - b
            elif c.score.versus == "sqrt_ratio":
                out[c.relative_name] = np.sqrt(a / b)
            else:
                out[c.relative_name] = a / b
    return out


def best_per_column(agg: pd.DataFrame) -> pd.DataFrame:
    """Mark, in each cell, the model(s) with the best value of each score (ties all marked).

    Best is the minimum for loss-type scores (and for the relative columns of
    :func:`relative_to`), and the smallest distance to the nominal rate for coverage columns.

    Parameters
    ----------
    agg : DataFrame
        Output of :func:`aggregate` or :func:`relative_to`.

    Returns
    -------
    DataFrame
        Cell keys, ``model`` and one boolean column per score.
    """
    if "model" not in agg.columns:
        raise ValueError("best_per_column: the frame has no 'model' column")
    keys = _cell_keys(agg)
    cols, value = [], {}
    for c in agg.columns:
        col = resolve(c[:-5]) if isinstance(c, str) and c.endswith("_diff") else resolve(c)
        if col is None or (col.score.orientation == "calibration" and col.nominal is None):
            continue  # the PIT has no "best"
        cols.append(c)
        v = agg[c].astype(np.float64)
        value[c] = (v - col.nominal).abs() if col.nominal is not None else v
    value = pd.DataFrame(value, index=agg.index)
    if keys:
        best = value.groupby([agg[k] for k in keys], observed=True, dropna=False).transform("min")
    else:  # a single cell
        best = pd.DataFrame({c: np.full(len(value), value[c].min()) for c in cols}, index=value.index)
    out = agg[keys + ["model"]].copy()
    for c in cols:
        out[c] = (value[c] == best[c]).to_numpy() & value[c].notna().to_numpy()
    return out
