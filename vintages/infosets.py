"""Real-time information sets: what a forecaster could see at each origin, all origins at once.

The cardinal rule
-----------------
An information set at origin ``o`` is computed from the vintage in force on ``o`` only: for each
variable, the row of values the release index returns for ``o``
(:meth:`vintages.cube.FreqIndex.asof_values`). The frequency conversion and the transformation
act on that row alone (see :mod:`vintages.rows` and :mod:`vintages.transforms`), so nothing
released after ``o`` is ever in the panel, nor used as an input to its transforms.
``tests/properties/test_no_lookahead.py`` checks this as a law, for both layouts: the
information set built from the full store equals the one built from a store holding only the
releases dated on or before the origin.

The one deliberate exception is ``mode="pseudo"`` (pseudo-real-time), used to measure how much
revisions matter: there the values come from the *latest* vintage, cut at the ragged edge the
real-time vintage had at the origin. Its ``source_release`` then lies after the origin, as it
should, and ``InfoSet.mode`` says so.

Steps of :func:`build_infosets`: validate the request, read and transform every variable's
vintage rows (:func:`vintages.rows.rows_for`), stack them on the panel's axis
(:func:`_stack`), refuse variables with no value (:func:`_check_has_values`), find the ragged
edge (:func:`_edge`) and the window (:func:`_window`), and package one :class:`InfoSet` per
origin (:func:`_package`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import xarray as xr

from vintages._types import FREQS
from vintages.calendar import check_origins
from vintages.contract import MODES, NATIVE_POLICIES, PANEL_LAYOUTS, POLICIES, InfoSet, choice
from vintages.errors import LookAheadError
from vintages.periods import format_periods, period_index, period_of_date
from vintages.resolve import Series, resolve_all, to_ordinal
from vintages.rows import NAT, Rows, last_index, rows_for
from vintages.transforms import PARTIAL_POLICIES

if TYPE_CHECKING:
    from vintages.cube import Cube


@dataclass
class _Grid:
    """Every variable's transformed rows on the panel's axis: arrays (n_origins, n_var, T)."""

    values: np.ndarray  # float64, NaN = no value
    rel: np.ndarray  # datetime64[D] release of each value's level
    partial: np.ndarray  # bool, a quarter resting on fewer than three months
    lo: int  # ordinal (panel frequency) of column 0
    converted: bool  # any variable converted monthly → quarterly


def _check_options(freq: str, layout: str, policy: str, mode: str, partial: str) -> None:
    choice(freq, FREQS, "panel frequency")
    choice(layout, PANEL_LAYOUTS, "panel layout")
    choice(policy, POLICIES, "ragged-edge policy")
    choice(mode, MODES, "mode")
    choice(partial, PARTIAL_POLICIES, "partial-quarter policy")
    if layout == "native" and policy not in NATIVE_POLICIES:
        raise ValueError(
            f"ragged-edge policy {policy!r} makes no sense in the native layout: shifting a "
            "quarterly series by months would move its values off their quarters' last months; "
            f"expected one of {sorted(NATIVE_POLICIES)} with layout='native'"
        )


def _on_axis(s: Series, ordinals, freq: str):
    """Ordinals of a variable's own frequency as ordinals of the panel's axis."""
    if s.freq == freq:
        return ordinals
    return 3 * ordinals + 2  # native layout: a quarter's value sits on its last month


def _stack(resolved: list[Series], rows: dict[str, Rows], n_o: int, freq: str,
           fp: int | None) -> _Grid:
    """Place every variable's rows on one axis running from the earliest to the latest column."""
    cols = {s.name: _on_axis(s, rows[s.name].first + np.arange(rows[s.name].values.shape[1]), freq)
            for s in resolved}
    anchor = {s.name: int(_on_axis(s, rows[s.name].first, freq)) for s in resolved}
    lo = min(anchor.values())
    hi = max(int(c[-1]) if len(c) else anchor[n] - 1 for n, c in cols.items())
    if fp is not None:
        lo, hi = min(lo, fp), max(hi, fp)
    T = hi - lo + 1
    n_v = len(resolved)
    values = np.full((n_o, n_v, T), np.nan)
    rel = np.full((n_o, n_v, T), NAT)
    part = np.zeros((n_o, n_v, T), dtype=bool)
    converted = False
    for j, s in enumerate(resolved):
        r, c = rows[s.name], cols[s.name] - lo
        values[:, j, c] = r.values
        rel[:, j, c] = r.level_rel
        if r.partial is not None:
            part[:, j, c] = r.partial
            converted = True
    return _Grid(values, rel, part, lo, converted)


def _check_has_values(cube: Cube, grid: _Grid, resolved: list[Series], o: np.ndarray) -> None:
    """Refuse a variable that has no (transformed) value at some origin."""
    _, has = last_index(~np.isnan(grid.values))
    if has.all():
        return
    oi, vi = np.nonzero(~has)
    s = resolved[vi[0]]
    when = [str(o[i]) for i in oi[vi == vi[0]]]
    first_rel = cube.release_dates(s.name)
    raise LookAheadError(
        f"variable {s.name!r} has no value ({s.spec.transform}) at "
        f"{len(when)} origin(s) ({', '.join(when[:3])}{' ...' if len(when) > 3 else ''}); "
        f"its first release is {first_rel[0] if len(first_rel) else 'never'} (and a "
        "transform may need several periods); expected origins where every variable has "
        "a value (start the origins later or leave the variable out)"
    )


def _edge(grid: _Grid, policy: str) -> tuple[np.ndarray, np.ndarray]:
    """The panel's last column at each origin, and each variable's shift (realigning in place)."""
    last, _ = last_index(~np.isnan(grid.values))
    n_o, n_v, T = grid.values.shape
    shift = np.zeros((n_o, n_v), dtype=np.int64)
    end = last.min(axis=1) if policy == "balance" else last.max(axis=1)
    if policy == "realign":
        shift = end[:, None] - last
        idx = np.arange(T)[None, None, :] - shift[:, :, None]
        ok = idx >= 0
        idx = np.maximum(idx, 0)
        grid.values = np.where(ok, np.take_along_axis(grid.values, idx, axis=-1), np.nan)
        grid.rel = np.where(ok, np.take_along_axis(grid.rel, idx, axis=-1), NAT)
        grid.partial = ok & np.take_along_axis(grid.partial, idx, axis=-1)
    return end, shift


def _window(grid: _Grid, end: np.ndarray, fp: int | None, names: list[str], o: np.ndarray,
            freq: str, policy: str) -> tuple[np.ndarray, np.ndarray]:
    """Each origin's first column and each variable's last observed column inside the window."""
    n_o, _, T = grid.values.shape
    lo = grid.lo
    tt = np.arange(T)
    obs = ~np.isnan(grid.values) & (tt[None, None, :] <= end[:, None, None])
    if fp is not None:
        start = np.full(n_o, fp - lo)
        obs &= tt[None, None, :] >= start[:, None, None]
        if (start > end).any():
            i = int(np.argmax(start > end))
            raise ValueError(
                f"first_period {format_periods([fp], freq)[0]} lies after the panel's last "
                f"period {format_periods([lo + end[i]], freq)[0]} at origin {o[i]}; "
                "expected an earlier first_period"
            )
    else:
        start = obs.any(axis=1).argmax(axis=1)
    lastobs, has = last_index(obs)
    if not has.all():
        oi, vi = np.nonzero(~has)
        i = oi[0]
        window = format_periods([lo + start[i], lo + end[i]], freq)
        raise ValueError(
            f"variable {names[vi[0]]!r} has no value in the panel window {window[0]} to "
            f"{window[1]} at origin {o[i]} (policy {policy!r}, first_period "
            f"{None if fp is None else format_periods([fp], freq)[0]}); expected every "
            "variable to overlap the window (choose another policy, an earlier "
            "first_period, or leave the variable out)"
        )
    return start, lastobs


def _package(cube: Cube, grid: _Grid, resolved: list[Series], rows: dict[str, Rows],
             o: np.ndarray, freq: str, layout: str, policy: str, mode: str, start: np.ndarray,
             end: np.ndarray, lastobs: np.ndarray, shift: np.ndarray) -> list[InfoSet]:
    """One InfoSet per origin: the panel window, its provenance and the per-variable facts."""
    names = [s.name for s in resolved]
    n_o, n_v, T = grid.values.shape
    pidx = period_index(np.arange(grid.lo, grid.lo + T), freq)
    pobj = np.asarray(pidx.astype(object))  # Period objects, indexed per variable below
    current = np.asarray(period_index(period_of_date(o, freq), freq).astype(object))
    src = grid.rel[np.arange(n_o)[:, None], np.arange(n_v)[None, :], lastobs]
    inrel = np.stack([rows[n].input_rel for n in names], axis=1)
    src = np.where(np.isnat(src), inrel, src)
    native = {
        n: np.asarray(
            period_index(
                np.where(rows[n].native_has, rows[n].native_last, 0), cube.freq_of(n)
            ).astype(object)
        )
        for n in names
    }
    transforms = {s.name: s.spec.transform for s in resolved}
    conversions = {s.name: s.convert for s in resolved if s.convert is not None}
    native_freq = {n: cube.freq_of(n) for n in names} if layout == "native" else {}

    out = []
    # Slicing one template and swapping its data is several times faster than building a
    # DataArray (and its indexes) per origin; the data are fresh copies, never views of the grid.
    tmpl = xr.DataArray(
        np.empty((T, n_v)),
        dims=("period", "variable"),
        coords={"period": pidx, "variable": np.array(names, dtype=object)},
        name="value",
    )
    ptmpl = tmpl.copy(deep=False, data=np.zeros((T, n_v), dtype=bool)).rename("partial")
    for i in range(n_o):
        sl = slice(int(start[i]), int(end[i]) + 1)
        panel = tmpl.isel(period=sl).copy(
            deep=False, data=np.ascontiguousarray(grid.values[i, :, sl].T)
        )
        part = (
            ptmpl.isel(period=sl).copy(
                deep=False, data=np.ascontiguousarray(grid.partial[i, :, sl].T)
            )
            if grid.converted
            else None
        )
        out.append(
            InfoSet(
                origin=o[i],
                freq=freq,
                panel=panel,
                current=current[i],
                last_observed={n: pobj[lastobs[i, j]] for j, n in enumerate(names)},
                source_release={n: src[i, j] for j, n in enumerate(names)},
                policy=policy,
                transforms=dict(transforms),
                partial=part,
                mode=mode,
                shifts={n: int(shift[i, j]) for j, n in enumerate(names)},
                conversions=dict(conversions),
                input_release={n: inrel[i, j] for j, n in enumerate(names)},
                native_last={n: native[n][i] for n in names},
                native_freq=dict(native_freq),
            )
        )
    return out


def build_infosets(
    cube: Cube,
    origins,
    variables,
    *,
    freq: str = "Q",
    layout: str = "common",
    policy: str = "keep",
    mode: str = "real-time",
    first_period=None,
    partial: str = "keep",
) -> list[InfoSet]:
    """The information set at each origin, all origins computed together.

    For every origin, each variable's vintage in force that day (one vectorised as-of call per
    frequency for all origins) is converted to the panel frequency in levels (common layout
    only), transformed inside the vintage (all origins at once, one row per origin), then
    placed on the panel's axis, cut and packaged.

    Parameters
    ----------
    cube : Cube
    origins : iterable of date-like
        Checked with :func:`vintages.calendar.check_origins`; the result follows their sorted,
        unique order.
    variables : mapping name -> spec, or sequence of names
        A spec is a :class:`SeriesSpec`, a mapping ``{"transform": ..., "convert": ...,
        "partial": ...}`` or a transformation name; a bare name means ``level``. The panel's
        columns follow this order.
    freq : {"Q", "M"}
        Frequency of the panel's axis. In the common layout, monthly variables enter a
        quarterly panel through their ``convert`` method (default ``"mean"``) and quarterly
        variables cannot enter a monthly panel.
    layout : {"common", "native"}
        ``common`` (default): every variable on ``freq`` (the quarterly panel). ``native`` (for
        nowcasting models; needs ``freq="M"`` when a monthly variable is present): each
        variable transformed in its own frequency and placed on the monthly axis, a quarterly
        value on its quarter's last month (NaN in the other two), with the ragged edge as
        published and no partial-quarter conversion; ``convert`` is refused and ``partial``
        unused. See :class:`InfoSet` for the contract.
    policy : {"keep", "balance", "realign"}
        The ragged edge. ``keep``: the panel runs to the latest period any variable has; the
        others end in NaN. ``balance``: the panel is cut at the earliest of the variables' last
        observed periods, so it is balanced at its end. ``realign`` (vertical realignment,
        Altissimo et al. 2001): each variable is shifted forward by ``shifts[v]`` periods so
        that its last observation sits on the panel's last row, the latest period any variable
        has. The ``period`` coordinate is then the period of the *best-covered* variables; the
        row labelled ``p`` holds variable ``v``'s value for ``p - shifts[v]``, and the shifted
        series start with NaN instead of ending with it. The native layout takes ``keep`` and
        ``balance`` (``realign`` would move quarterly values off their quarters' last months).
    mode : {"real-time", "pseudo"}
        ``real-time``: the vintage in force at the origin. ``pseudo``: the latest vintage, cut
        for each variable at the last period the real-time vintage had (revised values, the
        same ragged edge), in native frequency before conversion.
    first_period : period label or Period, optional
        The panel's first period, in ``freq`` (transformations are computed before the cut, so
        the first growth rate uses the level before it). Default: the first period with any
        value.
    partial : {"keep", "drop"}
        Default partial-quarter policy for converted monthly variables (a series spec may
        override it). ``keep``: ``mean``/``mean3`` of the months known, flagged in
        ``InfoSet.partial``; ``sum``/``last`` need the three months. ``drop``: NaN.

    Returns
    -------
    list of InfoSet
        One per origin, sorted by origin.

    Raises
    ------
    LookAheadError
        An origin outside the store's coverage, or a variable with no (transformed) value at
        an origin (its first release comes later).
    ValueError
        Unknown option, variable, transformation or conversion (the message lists the valid
        ones), or an option that makes no sense in the chosen layout.

    References
    ----------
    Altissimo, F., Bassanetti, A., Cristadoro, R., Forni, M., Lippi, M., Reichlin, L. and
    Veronese, G. (2001). EuroCOIN: a real time coincident indicator of the euro area business
    cycle. CEPR Discussion Paper 3108.

    Examples
    --------
    >>> infos = build_infosets(cube, quarterly(15, 2, "2006-01-01", "2026-11-30"),
    ...                        {"gdp": "dlog_ann", "cpi": {"transform": "dlog_ann", "convert": "mean3"}},
    ...                        policy="keep")                          # doctest: +SKIP
    >>> infos[0].panel.to_pandas().tail()                              # doctest: +SKIP
    >>> nowcast = build_infosets(cube, after_release(cube, "ip", 1), ["gdp", "ip"],
    ...                          freq="M", layout="native")            # doctest: +SKIP
    """
    _check_options(freq, layout, policy, mode, partial)
    resolved = resolve_all(cube, variables, freq, partial, layout)
    o = check_origins(cube, origins)
    fp = None if first_period is None else to_ordinal(first_period, freq, "first_period")
    rows = rows_for(cube, resolved, o, mode)
    grid = _stack(resolved, rows, len(o), freq, fp)
    _check_has_values(cube, grid, resolved, o)
    end, shift = _edge(grid, policy)
    names = [s.name for s in resolved]
    start, lastobs = _window(grid, end, fp, names, o, freq, policy)
    return _package(cube, grid, resolved, rows, o, freq, layout, policy, mode, start, end,
                    lastobs, shift)


def build_infoset(cube: Cube, origin, variables, **kwargs) -> InfoSet:
    """The information set at one origin (see :func:`build_infosets` for the options)."""
    return build_infosets(cube, [origin], variables, **kwargs)[0]


__all__ = ["build_infoset", "build_infosets"]
