"""Point-forecast errors of ensembles: squared and absolute errors of the mean and the median."""

from __future__ import annotations

import numpy as np

from harness.scores.kernels import (
    _check,
    _mean_from_sorted,
    _quantiles_from_sorted,
    _row_chunks,
    _sort_rows,
)


def point_errors(obs, draws) -> dict[str, np.ndarray]:
    """Squared and absolute errors of the ensemble mean and median (numpy's linear median).

    Parameters
    ----------
    obs : ndarray, shape (n,)
    draws : ndarray, shape (n, m)

    Returns
    -------
    dict with keys ``se_mean``, ``ae_mean``, ``se_median``, ``ae_median``; arrays of shape (n,).
    """
    y, x = _check(obs, draws, "point_errors")
    out = {key: np.empty(y.shape[0]) for key in ("se_mean", "ae_mean", "se_median", "ae_median")}
    for sl in _row_chunks(*x.shape):
        s, k, full = _sort_rows(x[sl])
        e_mean = _mean_from_sorted(s, k, full) - y[sl]
        e_med = _quantiles_from_sorted(s, k, np.array([0.5]), "linear")[:, 0] - y[sl]
        out["se_mean"][sl], out["ae_mean"][sl] = e_mean**2, np.abs(e_mean)
        out["se_median"][sl], out["ae_median"][sl] = e_med**2, np.abs(e_med)
    return out
