"""The model confidence set of Hansen, Lunde & Nason (2011) by block bootstrap."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np
import pandas as pd

from harness.compare._checks import _check_choice
from harness.compare.bootstrap import BOOTSTRAPS, Bootstrap, bootstrap_indices

MCSStatistic = Literal["Tmax", "TR"]
MCS_STATISTICS: tuple[str, ...] = ("TR", "Tmax")


def _boot_means(x: np.ndarray, idx: np.ndarray) -> np.ndarray:
    """Means of x (T, k) over each resample, via counts (B, T) @ x: no (B, T, k) array."""
    b, t = idx.shape
    counts = np.bincount((idx + (np.arange(b) * t)[:, None]).ravel(), minlength=b * t)
    return counts.reshape(b, t).astype(np.float64) @ x / t


@dataclass(frozen=True)
class MCSResult:
    """Result of :func:`model_confidence_set`.

    ``pvalues`` are MCS p-values in the input column order; ``included`` / ``excluded`` hold
    column labels (names of a DataFrame's columns, else positions); ``eliminated`` lists the
    labels in elimination order (the surviving model last).
    """

    included: list
    excluded: list
    pvalues: np.ndarray
    eliminated: list
    statistic: str
    alpha: float
    n: int
    n_dropped: int


def _mcs_pvalues(losses: np.ndarray, idx: np.ndarray, statistic: str) -> tuple[np.ndarray, list[int]]:
    """MCS p-values given the bootstrap resamples; follows HLN (2011), section 3."""
    t, k = losses.shape
    mean = losses.mean(axis=0)
    boot = _boot_means(losses, idx) - mean  # centred bootstrap means, (B, k)
    included = np.ones(k, dtype=bool)
    order: list[int] = []
    step_p: list[float] = []
    if statistic == "TR":
        dbar = mean[:, None] - mean[None, :]
        dstar = boot[:, :, None] - boot[:, None, :]
        var = (dstar**2).mean(axis=0)
        # d_ii = 0, and identical models have d_ij = 0 in every resample: t = 0, not 0/0
        var[var == 0] = 1.0
        sd = np.sqrt(var)
        tij = dbar / sd
        tstar = dstar / sd
        while included.sum() > 1:
            ids = np.flatnonzero(included)
            sub = tij[np.ix_(ids, ids)]
            stat = sub.max()
            sim = tstar[:, ids][:, :, ids].reshape(idx.shape[0], -1).max(axis=1)
            if stat <= 0 and np.all(sim <= 0):
                break  # the remaining models are identical: nothing left to eliminate
            i = np.unravel_index(np.argmax(sub), sub.shape)[0]
            order.append(int(ids[i]))
            step_p.append(float((stat < sim).mean()))
            included[ids[i]] = False
    else:
        while included.sum() > 1:
            ids = np.flatnonzero(included)
            z = boot[:, ids] - boot[:, ids].mean(axis=1, keepdims=True)
            sd = np.sqrt((z**2).mean(axis=0))
            sd[sd == 0] = 1.0  # a model equal to the set's average in every resample: t = 0
            sim = (z / sd).max(axis=1)
            ti = (mean[ids] - mean[ids].mean()) / sd
            stat = ti.max()
            if stat <= 0 and np.all(sim <= 0):
                break  # the remaining models are identical: nothing left to eliminate
            worst = ids[ti == stat]
            p = float((stat < sim).mean())
            for i in worst:
                order.append(int(i))
                step_p.append(p)
            included[worst] = False
    order.extend(int(i) for i in np.flatnonzero(included))
    step_p.extend([1.0] * int(included.sum()))
    mcs_p = np.maximum.accumulate(np.asarray(step_p))
    pvalues = np.empty(k)
    pvalues[order] = mcs_p
    return pvalues, order


def model_confidence_set(losses, alpha: float = 0.10, block_len: float | None = None,
                         n_boot: int = 1000, seed: int = 0, statistic: MCSStatistic = "Tmax", *,
                         bootstrap: Bootstrap = "stationary") -> MCSResult:
    """Model confidence set of Hansen, Lunde & Nason (2011) by block bootstrap.

    All bootstrap means come from one ``(n_boot, T)`` index array (:func:`bootstrap_indices`),
    reused at every elimination step as the method prescribes. ``statistic="Tmax"`` tests with
    ``max_i t_i.`` (loss of i against the average of the set) and eliminates its argmax;
    ``"TR"`` uses ``max_ij t_ij`` and eliminates the worse model of the maximising pair.
    Variances are bootstrap variances. MCS p-values are running maxima of the step p-values;
    the set at level 1 - alpha holds the models with p-value >= alpha (HLN's definition;
    ``arch.bootstrap.MCS`` uses >).

    Parameters
    ----------
    losses : array_like or DataFrame, shape (T, k)
        Losses of k models on the same T targets; rows with any NaN are dropped.
    alpha : float
        Size: the set is a 1 - alpha confidence set.
    block_len : float, optional
        (Mean) block length; default ``ceil(T ** (1/3))`` (common practice).
    n_boot : int
    seed : int
    statistic : {"TR", "Tmax"}
    bootstrap : {"circular", "moving_block", "stationary"}

    Returns
    -------
    MCSResult

    Raises
    ------
    ValueError
        Fewer than two models, bad options.

    Notes
    -----
    When the models left in the set have identical losses the elimination stops and they all
    keep the p-value reached so far (at least the p-value 1 of the last survivor).

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> losses = rng.normal(size=(200, 3)) + [0.0, 0.0, 1.0]
    >>> model_confidence_set(losses, 0.1, block_len=4, n_boot=500).excluded
    [2]

    References
    ----------
    Hansen, P. R., Lunde, A. and Nason, J. M. (2011). The model confidence set. Econometrica
    79(2), 453-497.
    """
    where = "model_confidence_set"
    _check_choice(statistic, MCS_STATISTICS, "statistic", where)
    _check_choice(bootstrap, BOOTSTRAPS, "bootstrap", where)
    if not 0 < alpha < 1:
        raise ValueError(f"{where}: alpha must lie in (0, 1); got {alpha!r}")
    labels = list(losses.columns) if isinstance(losses, pd.DataFrame) else None
    x = np.asarray(losses, dtype=np.float64)
    if x.ndim != 2 or x.shape[1] < 2:
        raise ValueError(f"{where}: losses must be (T, k) with k >= 2 models; got shape {x.shape}")
    keep = ~np.isnan(x).any(axis=1)
    x = x[keep]
    t, k = x.shape
    if t < 2:
        raise ValueError(f"{where}: only {t} complete row(s) of losses; need at least 2")
    labels = labels or list(range(k))
    bl = float(math.ceil(t ** (1 / 3))) if block_len is None else block_len
    idx = bootstrap_indices(t, n_boot, bl, bootstrap, seed)
    pvalues, order = _mcs_pvalues(x, idx, statistic)
    inc = [labels[i] for i in range(k) if pvalues[i] >= alpha]
    exc = [labels[i] for i in range(k) if pvalues[i] < alpha]
    return MCSResult(inc, exc, pvalues, [labels[i] for i in order], statistic, alpha, t,
                     int((~keep).sum()))
