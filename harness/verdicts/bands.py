"""Horizon bands of the decision table: backcast, nowcast, then blocks of four forecast horizons."""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass


@dataclass(frozen=True)
class Band:
    """A named group of horizons (``label`` as printed, e.g. ``"h 1–4"``)."""

    label: str
    horizons: tuple[int, ...]

    @property
    def max_h(self) -> int:
        return max(self.horizons)


def horizon_bands(horizons: Iterable[int], width: int = 4) -> list[Band]:
    """Bands of the horizons present: ``backcast`` (h < 0), ``nowcast`` (h = 0), then ``h 1–4``, ``h 5–8``, …

    Parameters
    ----------
    horizons : iterable of int
    width : int
        Forecast horizons per band (common practice in model reviews: a year of quarters).

    Returns
    -------
    list of Band
        In horizon order; empty bands are left out.

    Examples
    --------
    >>> [b.label for b in horizon_bands(range(0, 9))]
    ['nowcast', 'h 1–4', 'h 5–8']
    """
    hs = sorted({int(h) for h in horizons})
    out = []
    back = tuple(h for h in hs if h < 0)
    if back:
        out.append(Band("backcast", back))
    if 0 in hs:
        out.append(Band("nowcast", (0,)))
    fwd = [h for h in hs if h > 0]
    if fwd:
        lo = 1
        while lo <= fwd[-1]:
            block = tuple(h for h in fwd if lo <= h < lo + width)
            if block:
                hi = lo + width - 1
                out.append(Band(f"h {lo}–{hi}", block))
            lo += width
    return out
