"""The Diebold–Mariano test of equal predictive accuracy, with the Harvey–Leybourne–Newbold correction."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from harness.compare._checks import (
    ALTERNATIVES,
    Alternative,
    _check_choice,
    _check_int,
    _pairs,
    _pvalue,
    normal_cdf,
    t_cdf,
)
from vintages import KERNELS, Kernel, long_run_variance


@dataclass(frozen=True)
class DMResult:
    """Result of :func:`diebold_mariano`.

    ``stat`` is the (HLN-corrected, if asked) statistic, ``pvalue`` its p-value, ``mean_diff``
    the mean of loss_a - loss_b, ``n`` the pairs used, ``n_dropped`` pairs dropped for NaN,
    ``kernel`` the long-run variance weights actually used, ``note`` why a NaN was returned.
    """

    stat: float
    pvalue: float
    mean_diff: float
    n: int
    h: int
    hln: bool
    kernel: str
    alternative: str
    n_dropped: int = 0
    note: str = ""


def hln_factor(n: int, h: int) -> float:
    """Harvey-Leybourne-Newbold small-sample factor sqrt((T + 1 - 2h + h(h - 1)/T) / T).

    Parameters
    ----------
    n : int
        Number of forecast pairs T.
    h : int
        Forecast horizon (>= 1).

    Returns
    -------
    float
        NaN when the expression under the root is not positive.

    References
    ----------
    Harvey, D., Leybourne, S. and Newbold, P. (1997). Testing the equality of prediction mean
    squared errors. International Journal of Forecasting 13(2), 281-291.
    """
    val = (n + 1 - 2 * h + h * (h - 1) / n) / n
    return math.sqrt(val) if val > 0 else float("nan")


def diebold_mariano(loss_a, loss_b, h: int = 1, *, hln: bool = True,
                    kernel: Kernel = "rectangular",
                    alternative: Alternative = "two-sided") -> DMResult:
    """Diebold-Mariano test of equal expected loss, with the HLN small-sample correction.

    ``d_t = loss_a - loss_b``; ``DM = mean(d) / sqrt(V / T)`` with V the long-run variance of d
    with ``h - 1`` lags. The default rectangular kernel is the original DM (1995) and HLN (1997)
    choice (an h-step forecast error is at most MA(h-1)); when it gives V <= 0 the Bartlett
    (Newey-West) weights with the same lags are used instead and ``kernel`` says so. With
    ``hln=True`` the statistic is multiplied by :func:`hln_factor` and compared with Student-t
    (T - 1), otherwise with N(0, 1).

    Parameters
    ----------
    loss_a, loss_b : array_like, shape (T,)
        Losses of the two forecasts for the same targets, in time order.
    h : int
        Forecast horizon (>= 1); h = 0 nowcasts use h = 1.
    hln : bool
        Apply the Harvey-Leybourne-Newbold correction.
    kernel : {"bartlett", "rectangular"}
    alternative : {"greater", "less", "two-sided"}
        "less": forecast a has lower expected loss; "greater": higher.

    Returns
    -------
    DMResult

    Raises
    ------
    ValueError
        Different lengths, h < 1, unknown kernel or alternative.

    References
    ----------
    Diebold, F. X. and Mariano, R. S. (1995). Comparing predictive accuracy. Journal of Business
    & Economic Statistics 13(3), 253-263.
    Harvey, D., Leybourne, S. and Newbold, P. (1997). Testing the equality of prediction mean
    squared errors. International Journal of Forecasting 13(2), 281-291.

    Examples
    --------
    >>> res = diebold_mariano([1.0, 2.0, 0.5, 1.5, 2.5], [1.2, 2.6, 0.9, 1.4, 3.1], h=1)
    >>> round(res.stat, 3), res.n
    (-2.563, 5)
    """
    where = "diebold_mariano"
    h = _check_int(h, "h", where, 1)
    _check_choice(kernel, KERNELS, "kernel", where)
    _check_choice(alternative, ALTERNATIVES, "alternative", where)
    d, dropped = _pairs(loss_a, loss_b, where)
    t = d.size

    def empty(note: str, mean: float = float("nan"), used: str = kernel) -> DMResult:
        return DMResult(float("nan"), float("nan"), mean, t, h, hln, used, alternative, dropped, note)

    if t < 2:
        return empty(f"only {t} complete pair(s) of losses; at least 2 are needed")
    mean = float(d.mean())
    used = kernel
    v = long_run_variance(d, h - 1, kernel)
    if not v > 0 and kernel == "rectangular":
        used = "bartlett (fallback: rectangular variance not positive)"
        v = long_run_variance(d, h - 1, "bartlett")
    if not v > 0:
        return empty("the loss differential is constant (zero variance); the test is undefined",
                     mean, used)
    stat = mean / math.sqrt(v / t)
    if hln:
        factor = hln_factor(t, h)
        if not np.isfinite(factor):
            return empty(f"T = {t} is too small for the HLN correction at h = {h}", mean, used)
        stat *= factor
        cdf = t_cdf(t - 1)
    else:
        cdf = normal_cdf
    return DMResult(float(stat), _pvalue(stat, cdf, alternative), mean, t, h, hln, used,
                    alternative, dropped)
