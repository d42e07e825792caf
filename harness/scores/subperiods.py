"""Sub-periods: label each forecast with the full sample, named ranges and business-cycle regimes."""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import pandas as pd

from vintages import freq_of, parse_periods

FULL = "full"


def _month_span(values, where: str) -> tuple[np.ndarray, np.ndarray]:
    """First and last month (months since 1970-01) of each period label or pandas Period."""
    col = pd.Series(values)
    freq = freq_of(col)
    if freq is not None:
        if freq == "":
            raise ValueError(f"{where}: periods of dtype {col.dtype} are not supported; expected "
                             "quarterly or monthly periods")
        ords = col.array.asi8.astype(np.int64)
        bad = col.isna().to_numpy()
        f = np.full(len(col), freq)
    else:
        ords, f = parse_periods(col.to_numpy(dtype=object))
        bad = f == ""
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise ValueError(f"{where}: row {i}: cannot read period {col.iloc[i]!r}; expected a "
                         "quarter like 2008Q2, a month like 2008-07, or a pandas Period")
    isq = f == "Q"
    first = np.where(isq, ords * 3, ords)
    last = np.where(isq, ords * 3 + 2, ords)
    return first, last


def assign_subperiods(frame: pd.DataFrame, periods: Mapping[str, tuple] | None = None,
                      regimes: pd.Series | None = None, *, full: bool = True,
                      column: str = "target_period") -> pd.DataFrame:
    """Label each forecast with the sub-periods its *target period* belongs to (long format).

    A forecast belongs to a named range ``(start, end)`` when its whole target period lies in
    ``[start of start, end of end]`` (so monthly targets work with quarterly ranges); it belongs
    to a regime by the regime of the period holding its target period's last month (see
    :func:`vintages.regimes`). Sub-periods may overlap, so a forecast appears once per
    sub-period it belongs to, in a ``subperiod`` column (categorical, in the order full, ranges,
    regimes). Targets outside every range and regime appear only under ``"full"``.

    Parameters
    ----------
    frame : DataFrame
        One row per forecast with a target-period column (pandas Period or labels).
    periods : mapping of name to (start, end), optional
        Custom sub-periods, bounds as labels ("2008Q3", "2009-06") or pandas Periods.
    regimes : Series, optional
        Index: PeriodIndex (Q or M); values: regime names such as "recession"/"expansion".
    full : bool
        Include every row under ``"full"``.
    column : str
        Name of the target-period column.

    Returns
    -------
    DataFrame
        Rows of ``frame`` repeated per sub-period, with a ``subperiod`` column.

    Raises
    ------
    ValueError
        Missing column, unreadable period, a range with start after end, or a name clash.
    """
    if column not in frame.columns:
        raise ValueError(f"assign_subperiods: frame has no column {column!r}; columns are "
                         f"{sorted(map(str, frame.columns))}")
    first, last = _month_span(frame[column], f"assign_subperiods column {column!r}")
    masks: dict[str, np.ndarray] = {}
    if full:
        masks[FULL] = np.ones(len(frame), dtype=bool)
    for name, bounds in (periods or {}).items():
        if name in masks:
            raise ValueError(f"assign_subperiods: sub-period name {name!r} is used twice "
                             f"(reserved or taken: {sorted(masks)})")
        try:
            start, end = bounds
        except (TypeError, ValueError):
            raise ValueError(f"assign_subperiods: sub-period {name!r} must be (start, end); "
                             f"got {bounds!r}") from None
        (s0, _), (_, e1) = (_month_span([b], f"assign_subperiods sub-period {name!r}")
                            for b in (start, end))
        if s0[0] > e1[0]:
            raise ValueError(f"assign_subperiods: sub-period {name!r} starts ({start}) after it "
                             f"ends ({end})")
        masks[name] = (first >= s0[0]) & (last <= e1[0])
    if regimes is not None:
        freq = freq_of(regimes.index) if isinstance(regimes.index, pd.PeriodIndex) else None
        if freq not in ("Q", "M"):
            raise ValueError("assign_subperiods: regimes must be indexed by a quarterly or monthly "
                             f"PeriodIndex; got index of type {type(regimes.index).__name__}")
        key = last // 3 if freq == "Q" else last
        pos = pd.Index(regimes.index.asi8).get_indexer(key)
        labels = np.asarray(regimes.to_numpy(dtype=object))
        for name in sorted(pd.unique(labels.astype(str))):
            if name in masks:
                raise ValueError(f"assign_subperiods: regime {name!r} clashes with a sub-period "
                                 f"name {sorted(masks)}")
            hit = np.zeros(len(frame), dtype=bool)
            found = pos >= 0
            hit[found] = labels[pos[found]].astype(str) == name
            masks[name] = hit
    if not masks:
        raise ValueError("assign_subperiods: nothing to assign; give periods, regimes or full=True")
    return _expand(frame, masks)


def _expand(frame: pd.DataFrame, masks: Mapping[str, np.ndarray]) -> pd.DataFrame:
    parts, names = [], list(masks)
    for name, mask in masks.items():
        part = frame.loc[np.asarray(mask, dtype=bool)].copy()
        part["subperiod"] = name
        parts.append(part)
    out = pd.concat(parts, ignore_index=True)
    out["subperiod"] = pd.Categorical(out["subperiod"], categories=names, ordered=True)
    return out
