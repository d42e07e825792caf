"""Truths: the realised value each target period is scored against, under a chosen rule.

:func:`truth_values` maps each target period to the value used for scoring, computed with the
same conversion and transformation inside the vintage the rule selects (``first``,
``release:K``, ``lag:NNND``, ``latest``, ``asof:YYYY-MM-DD``; see :func:`parse_truth`). A truth
not yet published is missing (NaN with a reason), never imputed.
"""

from __future__ import annotations

import re
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from vintages._types import FREQS
from vintages.contract import TRUTH_FORMS, TruthRule, choice
from vintages.errors import OptionError
from vintages.periods import format_periods, period_end
from vintages.resolve import Series, resolve_all, to_ordinals
from vintages.rows import NAT, rows_for

if TYPE_CHECKING:
    from vintages.cube import Cube, FreqIndex

_RELEASE = re.compile(r"^release:(\d+)$")
_LAG = re.compile(r"^lag:(\d+)[Dd]$")
_ASOF = re.compile(r"^asof:(\d{4}-\d{2}-\d{2})$")


def parse_truth(rule: str | TruthRule) -> TruthRule:
    """Parse a truth rule.

    Valid forms: ``first`` (the first release), ``release:K`` (the K-th estimate, K ≥ 1),
    ``lag:NNND`` (the estimate in force NNN days after the period ended), ``latest`` (the
    store's latest vintage), ``asof:YYYY-MM-DD`` (the vintage of that day).

    Raises
    ------
    ValueError
        For anything else; the message lists the valid forms.
    """
    if isinstance(rule, TruthRule):
        return rule
    s = str(rule).strip() if isinstance(rule, str) else None
    forms = ", ".join(TRUTH_FORMS)
    if s in ("first", "latest"):
        return TruthRule(s)
    if s is not None and (m := _RELEASE.match(s)):
        k = int(m.group(1))
        if k < 1:
            raise ValueError(f"truth rule {rule!r}: the estimate number K must be ≥ 1; got {k}")
        return TruthRule("release", k=k)
    if s is not None and (m := _LAG.match(s)):
        return TruthRule("lag", days=int(m.group(1)))
    if s is not None and (m := _ASOF.match(s)):
        try:
            d = np.datetime64(pd.Timestamp(m.group(1)).date(), "D")
        except ValueError:
            raise OptionError(
                f"truth rule {rule!r}: {m.group(1)!r} is not a calendar date"
            ) from None
        return TruthRule("asof", date=d)
    raise OptionError(
        f"unknown truth rule {rule!r}; expected one of: {forms} "
        "(e.g. 'release:2', 'lag:365D', 'asof:2020-06-30')"
    )


def _publications(
    fc: FreqIndex, i: int, t: np.ndarray, converted: bool, k: int | None
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """When each target period counts as published, and its k-th release day from then on.

    A target is one cell, or for a converted quarter its three month cells; it counts as
    published once all its cells are (the day the last of them first appeared). Its releases
    are the distinct days from then on that published any of its cells.

    Returns the k-th release day (the first when ``k`` is None; NaT where there is none), and
    per target: complete (bool), cells ever published (int), releases from completion (int).
    """
    n = len(t)
    npd = fc.n_period
    months = (3 * t)[:, None] + np.arange(3)[None, :] if converted else t[:, None]
    col = months - (int(fc.periods[0]) if npd else 0)
    inside = (col >= 0) & (col < npd)
    if npd:
        cell = i * npd + np.clip(col, 0, npd - 1)
        lo = np.where(inside, fc.starts[cell], 0)
        cnt = np.where(inside, fc.starts[cell + 1] - lo, 0)
    else:
        lo = cnt = np.zeros(col.shape, dtype=np.int64)
    seen = cnt > 0
    complete = seen.all(axis=1)
    cells_seen = seen.sum(axis=1)
    first_day = fc.gather(np.where(seen, lo, -1))[1].view(np.int64)  # NaT is the minimum int
    done = first_day.max(axis=1)
    dates = np.full(n, NAT)
    if k is None:
        dates[complete] = done[complete].view("datetime64[D]")
        return dates, complete, cells_seen, complete.astype(np.int64)
    # every release row of every target cell, tagged with its target
    lens = cnt.ravel()
    tid = np.repeat(np.repeat(np.arange(n), cnt.shape[1]), lens)
    r = np.arange(int(lens.sum()), dtype=np.int64) + np.repeat(lo.ravel() - (np.cumsum(lens) - lens),
                                                               lens)
    day = fc.day[r].view(np.int64)
    keep = complete[tid] & (day >= done[tid])
    tid, day = tid[keep], day[keep]
    order = np.lexsort((day, tid))
    tid, day = tid[order], day[order]
    distinct = np.ones(len(tid), dtype=bool)
    distinct[1:] = (tid[1:] != tid[:-1]) | (day[1:] != day[:-1])
    tid, day = tid[distinct], day[distinct]
    n_after = np.bincount(tid, minlength=n)
    rank = np.arange(len(tid)) - np.repeat(np.cumsum(n_after) - n_after, n_after)
    hit = rank == k - 1
    dates[tid[hit]] = day[hit].view("datetime64[D]")
    return dates, complete, cells_seen, n_after


def _vintage_dates(
    cube: Cube, rule: TruthRule, fc: FreqIndex, i: int, t: np.ndarray, freq: str, converted: bool
) -> tuple[np.ndarray, list[str | None]]:
    """The vintage day each target's truth is read from (NaT with a reason where there is none)."""
    n = len(t)
    last_day = cube.last_release
    reasons: list[str | None] = [None] * n
    labels = format_periods(t, freq)
    if rule.kind in ("first", "release"):
        k = None if rule.kind == "first" else rule.k
        dates, complete, months_seen, n_so_far = _publications(fc, i, t, converted, k)
        for j in np.flatnonzero(np.isnat(dates)):
            if not complete[j]:
                if converted and months_seen[j]:
                    reasons[j] = (
                        f"only {months_seen[j]} of 3 months of {labels[j]} published by {last_day}"
                    )
                else:
                    reasons[j] = f"not yet published by {last_day}"
            else:
                s = "" if n_so_far[j] == 1 else "s"
                reasons[j] = f"only {n_so_far[j]} release{s} of {labels[j]} so far (by {last_day})"
        return dates, reasons
    dates = np.full(n, NAT)
    if rule.kind == "latest":
        dates[:] = last_day
    elif rule.kind == "asof":
        dates[:] = rule.date
        if rule.date > last_day:
            dates[:] = NAT
            reasons = [f"asof date {rule.date} lies after the store's last release {last_day}"] * n
    else:  # lag
        dates = period_end(t, freq) + np.timedelta64(int(rule.days), "D")
        late = dates > last_day
        for j in np.flatnonzero(late):
            reasons[j] = (
                f"no vintage old enough: {rule.days} days after the end of {labels[j]} is "
                f"{dates[j]}, after the store's last release {last_day}"
            )
        dates = np.where(late, NAT, dates)
    return dates, reasons


def _default_periods(cube: Cube, s: Series) -> np.ndarray:
    """Every target period of a variable's own period axis, in the truth's frequency."""
    p = cube.part(s.name)[0].periods
    return np.unique(p // 3) if s.convert is not None else np.asarray(p, dtype=np.int64)


def truth_values(
    cube: Cube,
    rule: str | TruthRule,
    variable: str,
    spec=None,
    target_periods=None,
    freq: str = "Q",
) -> tuple[np.ndarray, np.ndarray, list[str | None]]:
    """The realised value of each target period under a truth rule, transformed inside its vintage.

    For each target period the rule picks one vintage (a day); the variable's values in that
    vintage are converted and transformed exactly as in an information set, and the result at
    the target period is the truth. So the ``first`` truth of ``dlog_ann`` gdp in 2010Q1 is the
    growth rate computed from the levels of 2010Q1 and 2009Q4 *as published in the release that
    first published 2010Q1*.

    Vintage picked by each rule:

    * ``first``: the first release of the target period;
    * ``release:K``: the K-th release that published the target period (a re-publication of an
      unchanged value counts, as in a release triangle);
    * ``lag:NNND``: the vintage in force NNN days after the period's last day;
    * ``latest``: the store's last release day;
    * ``asof:YYYY-MM-DD``: that day.

    For a monthly variable converted to quarterly, a quarter counts as *published* once all
    three of its months are: its first release is the day the last of its months first
    appeared, and its K-th release the K-th day from then on that published any of its
    months. A truth never rests on a partial quarter (fewer than three months gives NaN).

    Parameters
    ----------
    cube : Cube
    rule : str or TruthRule
        See :func:`parse_truth`.
    variable : str
    spec : SeriesSpec, mapping, transform name or None
        As in :func:`vintages.infosets.build_infosets` (None: ``level``).
    target_periods : PeriodIndex or sequence of labels/Periods, optional
        Default: every period of the variable's period axis (in ``freq``).
    freq : {"Q", "M"}
        Frequency of the targets.

    Returns
    -------
    values : ndarray of float64, shape (n,)
        NaN where the truth is not (yet) available; never imputed.
    release_dates : ndarray of datetime64[D], shape (n,)
        Release date of the target period's own value in the vintage used (for a converted
        monthly variable, that of the quarter's latest month); NaT where missing.
    reasons : list of (str or None)
        Why a truth is missing (e.g. ``"not yet published by 2026-11-30"``); None where present.

    Examples
    --------
    >>> v, rel, why = truth_values(cube, "release:2", "gdp", "dlog_ann",
    ...                            pd.period_range("2010Q1", "2010Q4", freq="Q"))  # doctest: +SKIP
    """
    r = parse_truth(rule)
    choice(freq, FREQS, "truth frequency")
    series = resolve_all(cube, {variable: spec}, freq, "drop")[0]
    method = series.convert
    fc, i = cube.part(variable)
    t = (_default_periods(cube, series) if target_periods is None
         else to_ordinals(target_periods, freq, "target_periods"))
    n = len(t)
    values = np.full(n, np.nan)
    rel_out = np.full(n, NAT)
    if n == 0:
        return values, rel_out, []
    dates, reasons = _vintage_dates(cube, r, fc, i, t, freq, method is not None)
    ok = ~np.isnat(dates)
    if ok.any():
        ud, inv = np.unique(dates[ok], return_inverse=True)
        # Truths never use a partial quarter, whatever the spec's partial policy.
        rows = rows_for(cube, [series._replace(partial="drop")], ud, "real-time")[variable]
        col = t[ok] - rows.first
        inside = (col >= 0) & (col < rows.values.shape[1])
        cc = np.clip(col, 0, max(rows.values.shape[1] - 1, 0))
        if rows.values.shape[1]:
            v = np.where(inside, rows.values[inv, cc], np.nan)
            lv = np.where(inside, rows.levels[inv, cc], np.nan)
            rr = np.where(inside & ~np.isnan(v), rows.level_rel[inv, cc], NAT)
            cnt = np.where(inside, rows.count[inv, cc], 0) if rows.count is not None else None
        else:
            v = lv = np.full(len(col), np.nan)
            rr = np.full(len(col), NAT)
            cnt = np.zeros(len(col), dtype=int) if method is not None else None
        values[ok], rel_out[ok] = v, rr
        labels = format_periods(t, freq)
        where = np.flatnonzero(ok)
        for k in np.flatnonzero(np.isnan(v)):
            j = where[k]
            d = dates[j]
            after = f" ({r.days} days after the period ended)" if r.kind == "lag" else ""
            if cnt is not None and 0 < cnt[k] < 3:
                reasons[j] = f"only {cnt[k]} of 3 months of {labels[j]} published by {d}{after}"
            elif np.isnan(lv[k]):
                reasons[j] = (
                    f"not yet published by {d}"
                    if r.kind == "latest"
                    else f"{labels[j]} not published by {d}{after}"
                )
            else:
                reasons[j] = (
                    f"{series.spec.transform} of {labels[j]} undefined in the vintage of {d} "
                    "(an earlier period it needs is missing)"
                )
    return values, rel_out, reasons


def truth_table(cube: Cube, rules, variables_specs, periods=None, freq: str = "Q") -> pd.DataFrame:
    """Truths of several rules and variables as a tidy table.

    Parameters
    ----------
    cube : Cube
    rules : str or sequence of str
    variables_specs : mapping name -> spec, or sequence of names (level)
    periods : target periods, optional
        The same for every variable (default: each variable's own period axis).
    freq : {"Q", "M"}

    Returns
    -------
    DataFrame
        Columns ``rule``, ``variable``, ``period`` (label), ``value``, ``release`` (datetime64)
        and ``reason`` (None where the truth is present).
    """
    if isinstance(rules, (str, TruthRule)):
        rules = [rules]
    resolved = resolve_all(cube, variables_specs, freq, "drop")
    frames = []
    for rule in rules:
        rname = str(parse_truth(rule))
        for s in resolved:
            v, rel, why = truth_values(cube, rule, s.name, s.spec, periods, freq=freq)
            t = (to_ordinals(periods, freq, "periods") if periods is not None
                 else _default_periods(cube, s))
            frames.append(
                pd.DataFrame(
                    {
                        "rule": rname,
                        "variable": s.name,
                        "period": format_periods(t, freq),
                        "value": v,
                        "release": rel.astype("datetime64[ns]"),
                        "reason": why,
                    }
                )
            )
    cols = ["rule", "variable", "period", "value", "release", "reason"]
    return pd.concat(frames, ignore_index=True)[cols] if frames else pd.DataFrame(columns=cols)


__all__ = ["parse_truth", "truth_table", "truth_values"]
