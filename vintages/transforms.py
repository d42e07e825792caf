"""Transformations computed inside one vintage, and monthly-to-quarterly conversion in levels.

Every function here maps a 2-D array ``(n_vintages, n_periods)`` to an array of the same
number of rows: row ``i`` of the output depends on row ``i`` of the input only. One row is one
vintage (what was known on one day), so a value is never combined with a value from another
vintage; this is what lets :func:`vintages.infosets.build_infosets` transform all origins at once
without leaking anything across them. NaN marks a value not published in that vintage and
propagates (a growth rate needs both of its levels).

Built-in transformations (``x`` a row of levels, ``p`` periods per year: 4 or 12):

========== ===========================================================
``level``   ``x_t``
``diff``    ``x_t - x_{t-1}``
``dlog``    ``100 (log x_t - log x_{t-1})``
``dlog_ann`` ``100 p (log x_t - log x_{t-1})`` (×400 quarterly, ×1200 monthly)
``yoy``     ``100 (x_t / x_{t-p} - 1)``
========== ===========================================================

User transformations enter through one door, :func:`register_transform`.

Monthly → quarterly conversion happens in levels, before the transformation
(:func:`months_to_quarters`): ``mean``, ``sum``, ``last`` and ``mean3``; see that function for
what each computes and for the partial-quarter policy.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Literal

import numpy as np

TransformFunc = Callable[[np.ndarray, str], np.ndarray]
Conversion = Literal["last", "mean", "mean3", "sum"]
PartialPolicy = Literal["drop", "keep"]

PERIODS_PER_YEAR: dict[str, int] = {"M": 12, "Q": 4}
CONVERSIONS: tuple[str, ...] = ("last", "mean", "mean3", "sum")
PARTIAL_POLICIES: tuple[str, ...] = ("drop", "keep")
#: transformations for which ``mean3`` is defined (log growth rates; see :func:`months_to_quarters`)
MEAN3_TRANSFORMS: tuple[str, ...] = ("dlog", "dlog_ann")
#: transformations whose input must be strictly positive
LOG_TRANSFORMS: tuple[str, ...] = ("dlog", "dlog_ann")


def _ppy(freq: str) -> int:
    try:
        return PERIODS_PER_YEAR[freq]
    except KeyError:
        raise ValueError(
            f"unknown frequency {freq!r}; expected one of {sorted(PERIODS_PER_YEAR)}"
        ) from None


def _positive_logs(x: np.ndarray, name: str) -> np.ndarray:
    seen = x[~np.isnan(x)]
    if seen.size and seen.min() <= 0:
        raise ValueError(
            f"transform {name!r} needs strictly positive levels; got minimum {seen.min()!r}"
        )
    return np.log(x)


def _lagdiff(x: np.ndarray, lag: int) -> np.ndarray:
    out = np.full(x.shape, np.nan)
    out[:, lag:] = x[:, lag:] - x[:, :-lag]
    return out


def level(values: np.ndarray, freq: str) -> np.ndarray:
    """Levels unchanged (a copy)."""
    return np.array(values, dtype=np.float64, copy=True)


def diff(values: np.ndarray, freq: str) -> np.ndarray:
    """First difference ``x_t - x_{t-1}`` along the period axis."""
    return _lagdiff(np.asarray(values, dtype=np.float64), 1)


def dlog(values: np.ndarray, freq: str) -> np.ndarray:
    """Period-on-period log growth in percent, ``100 (log x_t - log x_{t-1})``."""
    return 100.0 * _lagdiff(_positive_logs(np.asarray(values, dtype=np.float64), "dlog"), 1)


def dlog_ann(values: np.ndarray, freq: str) -> np.ndarray:
    """Annualised log growth in percent, ``100 p (log x_t - log x_{t-1})`` with p = 4 or 12."""
    p = _ppy(freq)
    return 100.0 * p * _lagdiff(_positive_logs(np.asarray(values, dtype=np.float64), "dlog_ann"), 1)


def yoy(values: np.ndarray, freq: str) -> np.ndarray:
    """Growth over the same period a year earlier in percent, ``100 (x_t / x_{t-p} - 1)``."""
    p = _ppy(freq)
    x = np.asarray(values, dtype=np.float64)
    out = np.full(x.shape, np.nan)
    base = x[:, :-p]
    if np.any(base == 0):
        raise ValueError("transform 'yoy' divides by the level a year earlier; got a zero level")
    out[:, p:] = 100.0 * (x[:, p:] / base - 1.0)
    return out


_BUILTIN: dict[str, TransformFunc] = {
    "diff": diff,
    "dlog": dlog,
    "dlog_ann": dlog_ann,
    "level": level,
    "yoy": yoy,
}
_REGISTRY: dict[str, TransformFunc] = dict(_BUILTIN)


def transform_names() -> list[str]:
    """Names of every available transformation (built-in and registered), sorted."""
    return sorted(_REGISTRY)


def get_transform(name: str) -> TransformFunc:
    """The transformation registered under ``name``.

    Raises
    ------
    ValueError
        When no transformation has that name (the message lists the valid names).
    """
    try:
        return _REGISTRY[name]
    except (KeyError, TypeError):
        from vintages.errors import OptionError

        raise OptionError(
            f"unknown transform {name!r}; expected one of {transform_names()}"
        ) from None


def _check_rowwise(name: str, func: TransformFunc) -> None:
    """Run ``func`` on a small deterministic ragged panel and check the row rule holds."""
    rng = np.random.default_rng(20240611)
    x = np.exp(np.cumsum(rng.normal(0.005, 0.01, size=(4, 16)), axis=1)) * 100.0
    x[1, 13:] = np.nan  # a ragged edge, as in real vintages
    x[2, :2] = np.nan
    for freq in ("Q", "M"):
        before = x.copy()
        full = np.asarray(func(x, freq), dtype=np.float64)
        if not np.array_equal(x, before, equal_nan=True):
            raise ValueError(
                f"transform {name!r} modified its input array; it must return a new array"
            )
        if full.shape != x.shape:
            raise ValueError(
                f"transform {name!r} must return the input's shape {x.shape}; got {full.shape}"
            )
        flipped = np.asarray(func(x[::-1].copy(), freq), dtype=np.float64)
        single = np.asarray(func(x[1:2].copy(), freq), dtype=np.float64)
        if not (
            np.allclose(flipped[::-1], full, equal_nan=True, rtol=1e-12, atol=0.0)
            and np.allclose(single, full[1:2], equal_nan=True, rtol=1e-12, atol=0.0)
        ):
            raise ValueError(
                f"transform {name!r} combines values of different rows (vintages); "
                "each output row may depend on the same input row only"
            )


def register_transform(
    name: str, func: TransformFunc, *, overwrite: bool = False, check: bool = True
) -> None:
    """Make a user transformation available by name to information sets, truths and revisions.

    This is the one hook for user transformations.

    Parameters
    ----------
    name : str
        The name used in series specs (``{"transform": name}``).
    func : callable ``(values, freq) -> array``
        ``values`` is a float64 array ``(n_vintages, n_periods)``: each row one vintage, periods
        consecutive and oldest first, NaN where nothing was published in that vintage;
        ``freq`` is ``"Q"`` or ``"M"`` (the frequency *after* any conversion). It must return a
        new float array of the same shape, with NaN where the result is undefined.

        **The row rule.** Row ``i`` of the output may depend on row ``i`` of the input only: a
        vintage's transform may use any value of that vintage (even a two-sided filter is
        legitimate, since every value in the row was published by then), but never a value of
        another row. Rows are stacked across origins *and* variables, so breaking the rule would
        leak data across origins. The function must be vectorised over rows (no Python loop).
    overwrite : bool
        Replace an earlier registration of the same user name. Built-in names are never replaced.
    check : bool
        Run ``func`` on a small deterministic ragged panel and refuse it when it changes its
        input, returns another shape, or gives a row a result that depends on other rows
        (reversing the rows, or passing one row alone, must not change that row's result).

    Raises
    ------
    ValueError
        For a built-in or already registered name (without ``overwrite``), a non-callable, or a
        function that fails the check.

    Examples
    --------
    >>> def dlog2(values, freq):   # two-period log growth
    ...     out = np.full(values.shape, np.nan)
    ...     out[:, 2:] = 100 * np.log(values[:, 2:] / values[:, :-2])
    ...     return out
    >>> register_transform("dlog2", dlog2)  # doctest: +SKIP
    """
    if not isinstance(name, str) or not name:
        raise ValueError(f"transform name must be a non-empty string; got {name!r}")
    if name in _BUILTIN:
        raise ValueError(
            f"transform {name!r} is built in and cannot be replaced; "
            f"built-in names: {sorted(_BUILTIN)}"
        )
    if name in _REGISTRY and not overwrite:
        raise ValueError(
            f"transform {name!r} is already registered; pass overwrite=True to replace it"
        )
    if not callable(func):
        raise ValueError(
            f"transform {name!r}: expected a callable (values, freq) -> array; "
            f"got {type(func).__name__}"
        )
    if check:
        _check_rowwise(name, func)
    _REGISTRY[name] = func


def apply_transform(name: str, values: np.ndarray, freq: str) -> np.ndarray:
    """Apply a named transformation to ``(n_vintages, n_periods)`` levels, checking the shape."""
    x = np.asarray(values, dtype=np.float64)
    if x.ndim != 2:
        raise ValueError(
            f"transform {name!r}: expected a 2-D array (n_vintages, n_periods); "
            f"got {x.ndim} dimension(s)"
        )
    with np.errstate(invalid="ignore", divide="ignore"):
        out = np.asarray(get_transform(name)(x, freq), dtype=np.float64)
    if out.shape != x.shape:
        raise ValueError(f"transform {name!r} returned shape {out.shape}; expected {x.shape}")
    return out


def check_conversion(convert: str, transform: str, partial: str = "keep") -> None:
    """Validate a conversion method against the transformation it feeds.

    Raises
    ------
    ValueError
        Unknown method or partial policy, or ``mean3`` with a transformation other than the
        log growth rates (the message lists the valid options).
    """
    if convert not in CONVERSIONS:
        raise ValueError(f"unknown conversion {convert!r}; expected one of {sorted(CONVERSIONS)}")
    if partial not in PARTIAL_POLICIES:
        raise ValueError(
            f"unknown partial-quarter policy {partial!r}; "
            f"expected one of {sorted(PARTIAL_POLICIES)}"
        )
    if convert == "mean3" and transform not in MEAN3_TRANSFORMS:
        raise ValueError(
            f"conversion 'mean3' is defined for the log growth transforms "
            f"{sorted(MEAN3_TRANSFORMS)}; got transform {transform!r} "
            "(for 'diff' use 'mean': differences of 3-month means already carry "
            "the 1-2-3-2-1 weights exactly)"
        )


def months_to_quarters(
    values: np.ndarray, first_month: int, method: str = "mean", *, partial: str = "keep"
) -> tuple[np.ndarray, int, np.ndarray, np.ndarray]:
    """Convert monthly levels to quarterly levels, row by row (each row one vintage).

    Parameters
    ----------
    values : ndarray, shape (n_vintages, n_months)
        Monthly levels on consecutive months, NaN = not published in that vintage.
    first_month : int
        Ordinal (pandas ``Period`` ordinal, months since 1970-01) of column 0.
    method : {"last", "mean", "mean3", "sum"}
        ``mean``
            Arithmetic mean of the quarter's months.
        ``sum``
            Sum of the three months (a flow over the quarter).
        ``last``
            The quarter's third month (end-of-quarter stock).
        ``mean3``
            Geometric mean of the quarter's months, ``exp(mean(log x))``: the quarterly log
            growth of this level is *exactly*
            ``(1/3)(g_t + 2 g_{t-1} + 3 g_{t-2} + 2 g_{t-3} + g_{t-4})``, with ``g`` the monthly
            log growth and ``t`` the quarter's third month, which is the Mariano–Murasawa
            approximation to the quarterly growth of the three-month average. Use it with
            ``dlog`` or ``dlog_ann`` (see :func:`check_conversion`); it differs from ``mean``
            by terms of second order in the within-quarter growth.
    partial : {"keep", "drop"}
        A quarter is *partial* when 1 or 2 of its months are known. With ``keep``, ``mean`` and
        ``mean3`` use the months available (and the quarter is flagged); ``sum`` and ``last``
        are not comparable on a partial quarter and give NaN. With ``drop`` every partial
        quarter is NaN.

    Returns
    -------
    quarterly : ndarray, shape (n_vintages, n_quarters)
    first_quarter : int
        Ordinal of column 0 of ``quarterly`` (the quarter holding ``first_month``).
    count : ndarray of int, shape (n_vintages, n_quarters)
        Months known in each quarter.
    last_month : ndarray of int, shape (n_vintages, n_quarters)
        Column in ``values`` of the last known month of each quarter (-1 when none); for
        provenance (the release of a quarter is that of its latest month).

    References
    ----------
    Mariano, R. S. and Murasawa, Y. (2003). A new coincident index of business cycles based on
    monthly and quarterly series. *Journal of Applied Econometrics* 18(4), 427–443.
    """
    check_conversion(method, "dlog" if method == "mean3" else "level", partial)
    x = np.asarray(values, dtype=np.float64)
    n, nm = x.shape
    lead = int(first_month) % 3  # months of the first quarter before column 0
    nq = (lead + nm + 2) // 3
    padded = np.full((n, nq * 3), np.nan)
    padded[:, lead : lead + nm] = x
    block = padded.reshape(n, nq, 3)
    seen = ~np.isnan(block)
    count = seen.sum(axis=2)
    with np.errstate(invalid="ignore", divide="ignore"):
        if method == "mean":
            q = np.where(seen, block, 0.0).sum(axis=2) / count
        elif method == "mean3":
            logs = _positive_logs(block, "mean3")
            q = np.exp(np.where(seen, logs, 0.0).sum(axis=2) / count)
        elif method == "sum":
            q = np.where(count == 3, block.sum(axis=2), np.nan)
        else:  # last
            q = np.where(count == 3, block[:, :, 2], np.nan)
    q[count == 0] = np.nan
    if partial == "drop":
        q[count < 3] = np.nan
    # column of the last known month: the highest month slot that is seen, mapped back to `values`
    slot = np.where(seen, np.arange(3)[None, None, :], -1).max(axis=2)
    last_month = np.where(slot >= 0, np.arange(nq)[None, :] * 3 + slot - lead, -1)
    first_quarter = (int(first_month) - lead) // 3
    return q, first_quarter, count, last_month


__all__ = [
    "CONVERSIONS",
    "MEAN3_TRANSFORMS",
    "PARTIAL_POLICIES",
    "PERIODS_PER_YEAR",
    "apply_transform",
    "check_conversion",
    "diff",
    "dlog",
    "dlog_ann",
    "get_transform",
    "level",
    "months_to_quarters",
    "register_transform",
    "transform_names",
    "yoy",
]
