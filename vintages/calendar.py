"""Origins schedules (the days forecasts are made) and release calendars.

Every schedule returns a sorted array of unique ``datetime64[D]`` days. :func:`check_origins`
then confirms each origin lies within the store's coverage: between its first and its last
release. After the last release the store cannot say what was known (a release may have
happened that it does not hold), so such origins are refused rather than silently treated as
"nothing new".

Examples
--------
>>> [str(d) for d in quarterly(day=15, month_of_quarter=2, start="2020-01-01", end="2020-12-31")]
['2020-02-15', '2020-05-15', '2020-08-15', '2020-11-15']
>>> [str(d) for d in parse_schedule({"rule": "monthly", "day": 1, "start": "2021-01-01",
...                                  "end": "2021-03-31"})]
['2021-01-01', '2021-02-01', '2021-03-01']
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from vintages.errors import LookAheadError

if TYPE_CHECKING:
    from vintages.cube import Cube

RULES: tuple[str, ...] = ("after_release", "explicit", "monthly", "quarterly")
_KEYS: dict[str, tuple[str, ...]] = {
    "after_release": ("days", "end", "rule", "start", "variable"),
    "explicit": ("dates", "rule"),
    "monthly": ("day", "end", "rule", "start"),
    "quarterly": ("day", "end", "month_of_quarter", "rule", "start"),
}
_REQUIRED: dict[str, tuple[str, ...]] = {
    "after_release": ("variable",),
    "explicit": ("dates",),
    "monthly": ("day", "end", "start"),
    "quarterly": ("day", "end", "start"),
}


def _day(value, what: str) -> np.datetime64:
    try:
        ts = pd.Timestamp(value)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{what}: expected a date (YYYY-MM-DD); got {value!r}") from exc
    if ts is pd.NaT:
        raise ValueError(f"{what}: expected a date (YYYY-MM-DD); got a missing value")
    return np.datetime64(ts.date(), "D")


def _days(values, what: str) -> np.ndarray:
    if isinstance(values, (str, bytes)) or not isinstance(values, Iterable):
        values = [values]
    vals = list(values) if not isinstance(values, np.ndarray) else values
    if isinstance(vals, np.ndarray) and np.issubdtype(vals.dtype, np.datetime64):
        out = vals.astype("datetime64[D]").ravel()
        if np.isnat(out).any():
            raise ValueError(f"{what}: expected dates; got a missing value (NaT)")
        return np.unique(out)
    return np.unique(np.array([_day(v, what) for v in vals], dtype="datetime64[D]"))


def _int_in(value, what: str, lo: int, hi: int) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or not lo <= value <= hi:
        raise ValueError(f"{what}: expected an integer from {lo} to {hi}; got {value!r}")
    return int(value)


def _day_of_month(months: np.ndarray, day: int) -> np.ndarray:
    """Day ``day`` of each month (datetime64[M]); a day past the month's end means its last day."""
    first = months.astype("datetime64[D]")
    last = (months + 1).astype("datetime64[D]") - np.timedelta64(1, "D")
    return np.minimum(first + np.timedelta64(day - 1, "D"), last)


def _window(dates: np.ndarray, start, end) -> np.ndarray:
    if start is not None:
        dates = dates[dates >= _day(start, "start")]
    if end is not None:
        dates = dates[dates <= _day(end, "end")]
    return dates


def _month_range(start, end) -> np.ndarray:
    lo, hi = _day(start, "start"), _day(end, "end")
    if hi < lo:
        raise ValueError(f"schedule window: end {hi} lies before start {lo}")
    return np.arange(lo.astype("datetime64[M]"), hi.astype("datetime64[M]") + 1)


def explicit(dates) -> np.ndarray:
    """The given days, sorted and without duplicates.

    Parameters
    ----------
    dates : iterable of date-like
        Strings ``YYYY-MM-DD``, ``datetime``/``Timestamp`` or ``datetime64``.

    Returns
    -------
    ndarray of datetime64[D]
    """
    out = _days(dates, "explicit dates")
    if not len(out):
        raise ValueError("explicit dates: expected at least one date; got none")
    return out


def monthly(day: int, start, end) -> np.ndarray:
    """Day ``day`` of every month between ``start`` and ``end`` (both included).

    A day beyond a month's length (e.g. 31 in April) means that month's last day.
    """
    day = _int_in(day, "monthly schedule 'day'", 1, 31)
    return _window(_day_of_month(_month_range(start, end), day), start, end)


def quarterly(day: int = 15, month_of_quarter: int = 2, start=None, end=None) -> np.ndarray:
    """Every quarter, day ``day`` of the quarter's ``month_of_quarter``-th month.

    Parameters
    ----------
    day : int, 1..31
        Day of the month (clipped to the month's last day).
    month_of_quarter : int, 1..3
        1 = January/April/July/October, 2 = February/May/August/November, 3 = the quarter's last.
    start, end : date-like
        The window (both included).

    Returns
    -------
    ndarray of datetime64[D]
    """
    day = _int_in(day, "quarterly schedule 'day'", 1, 31)
    moq = _int_in(month_of_quarter, "quarterly schedule 'month_of_quarter'", 1, 3)
    if start is None or end is None:
        raise ValueError(
            f"quarterly schedule: 'start' and 'end' are required; got start={start!r}, end={end!r}"
        )
    months = _month_range(start, end)
    months = months[months.astype(np.int64) % 3 == moq - 1]
    return _window(_day_of_month(months, day), start, end)


def after_release(cube: Cube, variable: str, days: int = 1, start=None, end=None) -> np.ndarray:
    """``days`` days after each release of ``variable``.

    Origins after the store's last release are left out (the store cannot say what was known
    then; see :func:`check_origins`), so the day after the very last release is not an origin.
    """
    days = _int_in(days, "after_release schedule 'days'", 0, 10_000)
    if variable not in cube.meta:
        raise ValueError(
            f"after_release schedule: unknown variable {variable!r}; "
            f"expected one of {cube.variables}"
        )
    dates = np.unique(cube.release_dates(variable) + np.timedelta64(days, "D"))
    dates = dates[dates <= cube.last_release]
    return _window(dates, start, end)


def parse_schedule(
    spec: Mapping[str, Any], cube: Cube | None = None, *, validate_only: bool = False
) -> np.ndarray | None:
    """Build an origins schedule from a spec-like mapping.

    Parameters
    ----------
    spec : mapping
        ``{"rule": "quarterly", "day": 15, "month_of_quarter": 2, "start": ..., "end": ...}``,
        ``{"rule": "monthly", "day": 1, "start": ..., "end": ...}``,
        ``{"rule": "explicit", "dates": [...]}`` or
        ``{"rule": "after_release", "variable": "gdp", "days": 1, "start": ..., "end": ...}``.
    cube : Cube, optional
        Required by ``after_release`` (unless ``validate_only``).
    validate_only : bool
        Check keys and values without building the schedule (no cube needed); return None.

    Returns
    -------
    ndarray of datetime64[D], or None with ``validate_only``

    Raises
    ------
    ValueError
        Unknown rule or key, missing required key, or a bad value (the message names the key
        and lists the allowed ones).
    """
    if not isinstance(spec, Mapping):
        raise ValueError(
            f"origins schedule: expected a mapping with a 'rule' key; got {type(spec).__name__}"
        )
    rule = spec.get("rule")
    if rule not in _KEYS:
        raise ValueError(
            f"origins schedule: unknown 'rule' {rule!r}; expected one of {sorted(RULES)}"
        )
    allowed = _KEYS[rule]
    unknown = sorted(str(k) for k in spec if k not in allowed)
    if unknown:
        raise ValueError(
            f"origins schedule (rule {rule!r}): unknown key(s) {unknown}; "
            f"allowed keys: {sorted(allowed)}"
        )
    missing = [k for k in _REQUIRED[rule] if k not in spec]
    if missing:
        raise ValueError(
            f"origins schedule (rule {rule!r}): missing required key(s) {missing}; "
            f"allowed keys: {sorted(allowed)}"
        )
    args = {k: v for k, v in spec.items() if k != "rule"}
    if rule == "explicit":
        out = explicit(args["dates"])
    elif rule == "monthly":
        out = monthly(**args)
    elif rule == "quarterly":
        out = quarterly(**args)
    elif validate_only:
        _int_in(args.get("days", 1), "after_release schedule 'days'", 0, 10_000)
        if not isinstance(args["variable"], str) or not args["variable"]:
            raise ValueError(
                f"after_release schedule 'variable': expected a variable name; "
                f"got {args['variable']!r}"
            )
        for k in ("start", "end"):
            if k in args:
                _day(args[k], k)
        return None
    if rule != "after_release":
        return None if validate_only else out
    if cube is None:
        raise ValueError(
            "origins schedule (rule 'after_release'): needs the cube to read the "
            "release dates of its variable; got cube=None"
        )
    return after_release(cube, **args)


def check_origins(cube: Cube, origins) -> np.ndarray:
    """Validate origins against the store's coverage; return them sorted and unique.

    Parameters
    ----------
    cube : Cube
    origins : iterable of date-like

    Returns
    -------
    ndarray of datetime64[D]

    Raises
    ------
    LookAheadError
        An origin after the store's last release (what was known then is not in the store)
        or before its first release (nothing was known yet); the message lists the offenders.
    ValueError
        An origin that is not a date, or no origin at all.
    """
    o = _days(origins, "origins")
    if not len(o):
        raise ValueError("origins: expected at least one origin; got none")
    first, last = cube.first_release, cube.last_release
    late = o[o > last]
    if len(late):
        shown = ", ".join(str(d) for d in late[:5]) + (" ..." if len(late) > 5 else "")
        raise LookAheadError(
            f"{len(late)} origin(s) lie after the store's last release {last}: {shown}; "
            f"expected origins from {first} to {last} (append newer releases, "
            "or end the schedule earlier)"
        )
    early = o[o < first]
    if len(early):
        shown = ", ".join(str(d) for d in early[:5]) + (" ..." if len(early) > 5 else "")
        raise LookAheadError(
            f"{len(early)} origin(s) lie before the store's first release {first}: "
            f"{shown}; expected origins from {first} to {last}"
        )
    return o


def release_calendar(cube: Cube, variables: Iterable[str] | None = None) -> pd.DataFrame:
    """The release calendar: one row per (variable, release date), with the periods it published.

    Returns
    -------
    DataFrame
        Columns ``variable``, ``release`` (datetime64), ``n_values`` (cells published that day),
        ``first_period`` and ``last_period`` (labels of the earliest and latest published period).
    """
    from vintages.periods import format_periods

    names = cube.variables if variables is None else list(variables)
    frames = []
    for name in names:
        fc, i = cube.part(name)
        rows, cols = fc.value_rows([i])  # one variable: its local cells are period columns
        if not len(rows):  # never released: no row in the calendar
            continue
        order = np.argsort(fc.day[rows], kind="stable")
        day, per = fc.day[rows][order], fc.periods[cols[order]]
        # one group of rows per release day: the cells it published and their period range
        first = np.flatnonzero(np.r_[True, day[1:] != day[:-1]])
        frames.append(
            pd.DataFrame(
                {
                    "variable": name,
                    "release": day[first].astype("datetime64[ns]"),
                    "n_values": np.diff(np.r_[first, len(day)]),
                    "first_period": format_periods(np.minimum.reduceat(per, first), fc.freq),
                    "last_period": format_periods(np.maximum.reduceat(per, first), fc.freq),
                }
            )
        )
    if not frames:
        return pd.DataFrame(
            columns=["variable", "release", "n_values", "first_period", "last_period"]
        )
    return pd.concat(frames, ignore_index=True)


__all__ = [
    "RULES",
    "after_release",
    "check_origins",
    "explicit",
    "monthly",
    "parse_schedule",
    "quarterly",
    "release_calendar",
]
