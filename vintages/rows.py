"""Vintage rows: each variable's values in many vintages, converted and transformed row by row.

One row is one vintage (what was known on one day). The as-of selection of every requested
day comes from the release index in one vectorised call per frequency
(:meth:`vintages.cube.FreqIndex.asof_values`); the monthly → quarterly conversion and the
transformation then act on each row alone (:mod:`vintages.transforms`), so nothing of another
vintage, in particular nothing released later, enters a row. Information sets
(:mod:`vintages.infosets`) and truths (:mod:`vintages.truths`) both read their values here.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from vintages._types import FREQS
from vintages.transforms import apply_transform, months_to_quarters

if TYPE_CHECKING:
    from vintages.cube import Cube, FreqIndex
    from vintages.resolve import Series

NAT = np.datetime64("NaT", "D")


@dataclass
class Rows:
    """One variable's converted and transformed values in many vintages (rows)."""

    values: np.ndarray  # (n, T) transformed, in the frequency the transform ran at
    levels: np.ndarray  # (n, T) converted levels, before the transform
    first: int  # ordinal of column 0 (in the frequency the transform ran at)
    level_rel: np.ndarray  # (n, T) datetime64[D] release of each level (latest month if converted)
    count: np.ndarray | None  # (n, T) months known per quarter (converted only)
    partial: np.ndarray | None  # (n, T) bool (converted only)
    native_last: np.ndarray  # (n,) int64 ordinal of the last known native period (-1: none)
    native_has: np.ndarray  # (n,) bool
    input_rel: np.ndarray  # (n,) datetime64[D] newest release in the row (NaT when empty)


def last_index(obs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Index of the last True along the last axis, and whether there is one."""
    has = obs.any(axis=-1)
    return obs.shape[-1] - 1 - obs[..., ::-1].argmax(axis=-1), has


def max_date(rel: np.ndarray) -> np.ndarray:
    """Newest date along the last axis (NaT when there is none)."""
    if not rel.shape[-1]:
        return np.full(rel.shape[:-1], NAT)
    # NaT is the smallest int64, so a maximum over the int view skips it unless all are NaT.
    return rel.astype("datetime64[D]").view(np.int64).max(axis=-1).view("datetime64[D]")


def _source(
    fc: FreqIndex, rows: np.ndarray, dates: np.ndarray, mode: str
) -> tuple[np.ndarray, np.ndarray]:
    """Native values and their release dates, (n_dates, n_rows, n_periods), for the mode."""
    vals, rel = fc.asof_values(dates, rows)
    if mode == "pseudo" and len(fc.value):
        # Same ragged edge as in real time, values from the latest vintage.
        last, has = last_index(~np.isnan(vals))
        keep = (np.arange(vals.shape[-1]) <= last[..., None]) & has[..., None]
        latest, lrel = fc.gather(fc.latest_src(rows))
        vals = np.where(keep, latest[None], np.nan)
        rel = np.where(keep & ~np.isnan(latest)[None], lrel[None], NAT)
    return vals, rel


def prepare(
    series: Series, vals: np.ndarray, rel: np.ndarray, first_native: int
) -> Rows:
    """Convert (if asked) and transform rows of one variable; each row one vintage."""
    name, spec, method, partial, freq = series
    last, has = last_index(~np.isnan(vals))
    native_last = np.where(has, first_native + last, -1)
    input_rel = max_date(rel)
    count = part = None
    if method is None:
        levels, level_rel, first = vals, rel, int(first_native)
    else:
        try:
            levels, first, count, lastm = months_to_quarters(
                vals, first_native, method, partial=partial
            )
        except ValueError as exc:
            raise ValueError(f"variable {name!r}: {exc}") from None
        level_rel = (
            np.take_along_axis(rel, np.maximum(lastm, 0), axis=1)
            if rel.shape[1]
            else np.full(levels.shape, NAT)
        )
        level_rel = np.where((lastm >= 0) & ~np.isnan(levels), level_rel, NAT)
        part = (count > 0) & (count < 3) & ~np.isnan(levels)
    try:
        values = apply_transform(spec.transform, levels, freq)
    except ValueError as exc:
        raise ValueError(f"variable {name!r}: {exc}") from None
    if part is not None:
        part &= ~np.isnan(values)
    return Rows(values, levels, first, level_rel, count, part, native_last, has, input_rel)


def rows_for(cube: Cube, resolved: list[Series], dates: np.ndarray, mode: str) -> dict[str, Rows]:
    """Every requested variable's rows at ``dates``: one as-of call per frequency."""
    out: dict[str, Rows] = {}
    for f in FREQS:
        group = [s for s in resolved if cube.freq_of(s.name) == f]
        if not group:
            continue
        fc = cube.indexes[f]
        rows = np.array([fc.row_of(s.name) for s in group], dtype=np.int64)
        vals, rel = _source(fc, rows, dates, mode)
        first = int(fc.periods[0]) if len(fc.periods) else 0
        for j, s in enumerate(group):
            out[s.name] = prepare(s, vals[:, j], rel[:, j], first)
    return out


__all__ = ["NAT", "Rows", "last_index", "max_date", "prepare", "rows_for"]
