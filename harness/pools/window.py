"""Which past forecasts a pool may learn from at each origin: the real-time scored window.

Law (tested as a property): the window of origin ``o`` holds only forecasts *made before* ``o``
whose truth was *published on or before* ``o``; so no truth published after ``o``, and no
forecast made after ``o``, can move anything computed at ``o``.
"""

from __future__ import annotations

import numpy as np

__all__ = ["scored_window"]

_NEVER = np.iinfo(np.int64).max


def scored_window(origins: np.ndarray, truth_release: np.ndarray, scorable: np.ndarray,
                  window: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    """The last ``window`` scored forecasts known at each origin, per variable and horizon.

    The forecast made at origin ``o'`` for ``(variable, horizon)`` is *known* at origin ``o``
    when ``o' < o`` (it was made before) and its truth's release date is on or before ``o``
    (a value released on day d is known from d on). Of the known forecasts that are also
    ``scorable``, the ``window`` most recent by origin are kept (all of them if ``window`` is
    None).

    Parameters
    ----------
    origins : ndarray of datetime64[D], shape (O,)
        Strictly increasing forecast origins.
    truth_release : ndarray of datetime64[D], shape (O, V, H)
        Release date of the truth of the forecast made at each origin for each variable and
        horizon; NaT = not (yet) published.
    scorable : ndarray of bool, shape (O, V, H)
        Whether that forecast has a finite truth and a score for every member.
    window : int or None
        Trailing window length W (None: every known forecast).

    Returns
    -------
    index : ndarray of int64, shape (O, V, H, W_max)
        Origins (positions in ``origins``) of the kept forecasts, oldest first, left-aligned
        and padded with -1. ``W_max = min(window, O - 1)`` (or ``O - 1``), at least 1: it
        depends on the shapes only, never on the data.
    count : ndarray of int64, shape (O, V, H)
        Number of kept forecasts.
    """
    o = origins.astype("datetime64[D]").astype(np.int64)
    n_o = o.shape[0]
    rel = truth_release.astype("datetime64[D]")
    rel_i = np.where(np.isnat(rel), _NEVER, rel.astype(np.int64))
    # known[o, o', v, h]: forecast o' (made before o) with its truth out by o
    known = (rel_i[None] <= o[:, None, None, None]) & scorable[None]
    known &= np.tri(n_o, n_o, -1, dtype=bool)[:, :, None, None]
    if window is not None:
        # keep the `window` most recent: count the known forecasts at or after each o'
        from_end = np.cumsum(known[:, ::-1], axis=1)[:, ::-1]
        known &= from_end <= window
    w_max = max(1, n_o - 1 if window is None else min(int(window), n_o - 1))
    count = known.sum(axis=1)
    index = np.full((n_o, *scorable.shape[1:], w_max), -1, dtype=np.int64)
    oo, op, vv, hh = np.nonzero(known)  # C order: o' ascending within each (o, v, h)
    pos = np.cumsum(known, axis=1)[oo, op, vv, hh] - 1
    index[oo, vv, hh, pos] = op
    return index, count
