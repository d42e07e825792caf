"""Tests of interval coverage: Kupiec (unconditional), Christoffersen (independence, conditional),
and a hit-rate t-test with a long-run variance for overlapping (h > 1) forecasts."""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

from harness._lazy import special
from harness.compare._checks import chi2_sf


@dataclass(frozen=True)
class CoverageResult:
    """Result of :func:`kupiec` (``lr_uc`` only) or :func:`christoffersen` (all three LRs).

    ``counts`` holds n0/n1 (misses/hits) and, for Christoffersen, the transitions n00..n11.
    """

    lr_uc: float
    p_uc: float
    n: int
    hit_rate: float
    coverage: float
    lr_ind: float = float("nan")
    p_ind: float = float("nan")
    lr_cc: float = float("nan")
    p_cc: float = float("nan")
    counts: dict = field(default_factory=dict)


def _hits(hits, coverage: float, where: str) -> np.ndarray:
    if not 0 < coverage < 1:
        raise ValueError(f"{where}: coverage must lie in (0, 1); got {coverage!r}")
    x = np.asarray(hits, dtype=np.float64).ravel()
    bad = ~np.isnan(x) & (x != 0) & (x != 1)
    if bad.any():
        raise ValueError(f"{where}: hits must be 0, 1 or NaN; got {x[bad][0]!r} at position "
                         f"{int(np.flatnonzero(bad)[0])}")
    return x


def _lr_uc(n1: float, n0: float, c: float) -> float:
    n = n0 + n1
    pi = n1 / n
    ll_null = special.xlogy(n1, c) + special.xlogy(n0, 1 - c)
    ll_alt = special.xlogy(n1, pi) + special.xlogy(n0, 1 - pi)
    return float(-2.0 * (ll_null - ll_alt))


def kupiec(hits, coverage: float) -> CoverageResult:
    """Kupiec's unconditional coverage likelihood-ratio test, chi-squared(1).

    ``LR_uc = -2 [n1 log c + n0 log(1 - c) - n1 log pi - n0 log(1 - pi)]`` with ``pi = n1/n``
    and 0 log 0 = 0.

    Parameters
    ----------
    hits : array_like of {0, 1, NaN}, shape (T,)
        1 when the observation fell inside the interval; NaN (missing) is dropped.
    coverage : float
        Nominal probability of a hit.

    Returns
    -------
    CoverageResult

    References
    ----------
    Kupiec, P. H. (1995). Techniques for verifying the accuracy of risk measurement models.
    Journal of Derivatives 3(2), 73-84.
    """
    x = _hits(hits, coverage, "kupiec")
    x = x[~np.isnan(x)]
    n = x.size
    if n == 0:
        return CoverageResult(float("nan"), float("nan"), 0, float("nan"), coverage)
    n1 = float(x.sum())
    n0 = n - n1
    lr = _lr_uc(n1, n0, coverage)
    return CoverageResult(lr, (chi2_sf(lr, 1)), n, n1 / n, coverage,
                          counts={"n0": int(n0), "n1": int(n1)})


def christoffersen(hits, coverage: float) -> CoverageResult:
    """Christoffersen's independence and conditional coverage LR tests (first-order Markov).

    Transitions ``n_ij`` count consecutive pairs (i then j) where both are observed.
    ``LR_ind = -2 [log L(pi) - log L(pi01, pi11)]`` ~ chi-squared(1) with pi01 = n01/(n00+n01),
    pi11 = n11/(n10+n11), pi = (n01+n11)/(n00+n01+n10+n11); ``LR_cc = LR_uc + LR_ind`` ~
    chi-squared(2), with ``LR_uc`` of :func:`kupiec` on all observed hits (the usual sum form).

    Parameters
    ----------
    hits : array_like of {0, 1, NaN}, shape (T,)
    coverage : float

    Returns
    -------
    CoverageResult

    References
    ----------
    Christoffersen, P. F. (1998). Evaluating interval forecasts. International Economic Review
    39(4), 841-862.
    """
    x = _hits(hits, coverage, "christoffersen")
    base = kupiec(x, coverage)
    a, b = x[:-1], x[1:]
    ok = ~(np.isnan(a) | np.isnan(b))
    a, b = a[ok], b[ok]
    n00 = float(((a == 0) & (b == 0)).sum())
    n01 = float(((a == 0) & (b == 1)).sum())
    n10 = float(((a == 1) & (b == 0)).sum())
    n11 = float(((a == 1) & (b == 1)).sum())
    counts = {**base.counts, "n00": int(n00), "n01": int(n01), "n10": int(n10), "n11": int(n11)}
    total = n00 + n01 + n10 + n11
    if total == 0:
        return CoverageResult(base.lr_uc, base.p_uc, base.n, base.hit_rate, coverage, counts=counts)
    pi01 = n01 / (n00 + n01) if n00 + n01 > 0 else 0.0
    pi11 = n11 / (n10 + n11) if n10 + n11 > 0 else 0.0
    pi = (n01 + n11) / total
    ll_null = special.xlogy(n00 + n10, 1 - pi) + special.xlogy(n01 + n11, pi)
    ll_alt = (special.xlogy(n00, 1 - pi01) + special.xlogy(n01, pi01)
              + special.xlogy(n10, 1 - pi11) + special.xlogy(n11, pi11))
    lr_ind = float(max(-2.0 * (ll_null - ll_alt), 0.0))
    lr_cc = base.lr_uc + lr_ind
    return CoverageResult(base.lr_uc, base.p_uc, base.n, base.hit_rate, coverage, lr_ind,
                          (chi2_sf(lr_ind, 1)), lr_cc, (chi2_sf(lr_cc, 2)),
                          counts)


def coverage_t(hits, coverage: float, h: int = 1, *, method: str = "fixed_m",
               bandwidth: int | None = None, positions=None):
    """t-test of the hit rate with a long-run variance of the hits, valid for overlapping forecasts.

    ``stat = sqrt(T) (pi_hat - c) / sqrt(Omega)`` with ``Omega`` the long-run variance of the
    hit indicators; this is the Diebold-Mariano machinery of
    :func:`harness.compare.diebold_mariano` applied to ``hit_t - c`` (the same ``method``:
    default the fixed-m Daniell estimate with Student-t(2m)), so h-step interval forecasts,
    whose hits are serially dependent up to lag h - 1, keep their size where the Kupiec and
    Christoffersen tests (which assume independent hits) do not.

    Parameters
    ----------
    hits : array_like of {0, 1, NaN}, shape (T,)
        Hit indicators in time order; NaN dropped.
    coverage : float
        Nominal probability of a hit c.
    h : int
        Forecast horizon in steps.
    method, bandwidth, positions
        As in :func:`harness.compare.diebold_mariano`.

    Returns
    -------
    harness.compare.DMResult
        ``mean_diff`` is ``pi_hat - c``; NaN with a note when every forecast hit (or every one
        missed): the long-run variance is then zero.

    References
    ----------
    Common practice (a t-test of the mean hit indicator with a HAC variance, e.g. for
    multi-step interval forecasts); the long-run variance and its small-sample reference law as
    in Coroneo, L. and Iacone, F. (2020). Journal of Applied Econometrics 35(4), 391-409.
    """
    from harness.compare.dm import diebold_mariano

    x = _hits(hits, coverage, "coverage_t")
    res = diebold_mariano(x, np.where(np.isnan(x), np.nan, coverage), h, method=method,
                          bandwidth=bandwidth, positions=positions)
    if res.note.startswith("the loss differential is (numerically) constant"):
        kind = "hit" if res.mean_diff > 0 else "missed"
        res = replace(res, note=f"every forecast {kind} the interval: no variation in the hits; "
                                "the test is undefined")
    return res
