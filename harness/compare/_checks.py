"""Input checks and p-values shared by the comparison and calibration tests."""

from __future__ import annotations

from typing import Literal

import numpy as np

from harness._lazy import special

Alternative = Literal["two-sided", "less", "greater"]
ALTERNATIVES: tuple[str, ...] = ("greater", "less", "two-sided")


def _pairs(a, b, where: str) -> tuple[np.ndarray, int]:
    x = np.asarray(a, dtype=np.float64).ravel()
    y = np.asarray(b, dtype=np.float64).ravel()
    if x.shape != y.shape:
        raise ValueError(f"{where}: loss_a has {x.size} values and loss_b {y.size}; expected the "
                         "same forecasts in the same order")
    keep = ~(np.isnan(x) | np.isnan(y))
    return x[keep] - y[keep], int((~keep).sum())


def _check_choice(value: str, options: tuple[str, ...], name: str, where: str) -> None:
    if value not in options:
        raise ValueError(f"{where}: unknown {name} {value!r}; expected one of {sorted(options)}")


def _check_int(value, name: str, where: str, minimum: int) -> int:
    if isinstance(value, bool) or int(value) != value or value < minimum:
        raise ValueError(f"{where}: {name} must be an integer >= {minimum}; got {value!r}")
    return int(value)


def _pvalue(stat: float, cdf, alternative: str) -> float:
    """p-value of ``stat`` under a symmetric null law with CDF ``cdf`` (clipped to [0, 1])."""
    if alternative == "two-sided":
        p = 2.0 * cdf(-abs(stat))
    elif alternative == "less":
        p = cdf(stat)
    else:
        p = cdf(-stat)
    return float(min(max(float(p), 0.0), 1.0))


def t_cdf(df: float):
    """CDF of Student-t with ``df`` degrees of freedom (scipy.special, no scipy.stats import)."""
    return lambda x: special.stdtr(df, x)


def normal_cdf(x):
    """Standard normal CDF."""
    return special.ndtr(x)


def chi2_sf(x, df: float) -> float:
    """Upper tail of chi-squared(df)."""
    return float(special.chdtrc(df, x))
