"""One spelling per label: horizons (``h = 0``), horizon lists, and the caution every output carries."""

from __future__ import annotations

CAUTION = ("Past performance on a chosen sample is no guarantee: these results describe how the models "
           "would have performed in the past, on the sample, truth and settings chosen for this backtest, "
           "and do not promise the same performance in the future. Whether to adopt, keep or pool a model "
           "is for the user's own review and governance to decide.")

#: the short form printed under terminal tables and in file footers
CAUTION_SHORT = ("Past performance on a chosen sample is no guarantee; decisions rest with your own review "
                 "and governance.")


def h_label(h) -> str:
    """The one horizon label: ``h = 0`` (``h = -1`` for a backcast)."""
    return f"h = {int(h)}"


def h_range(hs) -> str:
    """A block of horizons: ``h = 0`` or ``h = 1…4``."""
    hs = sorted(int(h) for h in hs)
    if not hs:
        return "no horizon"
    return h_label(hs[0]) if len(hs) == 1 else f"h = {hs[0]}\u2026{hs[-1]}"


def format_horizons(hs) -> str:
    """Horizons as compact runs: ``[-1, 0, 1, 3]`` → ``"-1 to 1, 3"``.

    Examples
    --------
    >>> format_horizons([3, -1, 0, 1, 5, 6])
    '-1 to 1, 3, 5, 6'
    """
    hs = sorted({int(h) for h in hs})
    if not hs:
        return "none"
    runs, start, prev = [], hs[0], hs[0]
    for h in hs[1:] + [None]:
        if h is not None and h == prev + 1:
            prev = h
            continue
        runs.append(str(start) if start == prev else f"{start}, {prev}" if prev == start + 1
                    else f"{start} to {prev}")
        if h is not None:
            start = prev = h
    return ", ".join(runs)
