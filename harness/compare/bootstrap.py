"""Block-bootstrap resampling indices (stationary, circular, moving-block)."""

from __future__ import annotations

from typing import Literal

import numpy as np

from harness.compare._checks import _check_choice, _check_int

Bootstrap = Literal["stationary", "moving_block", "circular"]
BOOTSTRAPS: tuple[str, ...] = ("circular", "moving_block", "stationary")


def bootstrap_indices(n: int, n_boot: int, block_len: float, method: Bootstrap = "stationary",
                      seed: int | np.random.Generator = 0) -> np.ndarray:
    """Time indices of block-bootstrap resamples, all drawn at once.

    ``stationary``: blocks of geometric length with mean ``block_len``, wrapping around
    (Politis & Romano 1994); ``circular``: fixed-length blocks with any start, wrapping;
    ``moving_block``: fixed-length blocks starting in ``[0, n - block_len]`` (Kunsch 1989).

    Parameters
    ----------
    n : int
        Series length.
    n_boot : int
        Number of resamples.
    block_len : float
        (Mean) block length, >= 1.
    method : {"circular", "moving_block", "stationary"}
    seed : int or numpy Generator

    Returns
    -------
    ndarray of int64, shape (n_boot, n)

    References
    ----------
    Politis, D. N. and Romano, J. P. (1994). The stationary bootstrap. JASA 89(428), 1303-1313.
    Kunsch, H. R. (1989). The jackknife and the bootstrap for general stationary observations.
    Annals of Statistics 17(3), 1217-1241.
    """
    where = "bootstrap_indices"
    _check_choice(method, BOOTSTRAPS, "method", where)
    n = _check_int(n, "n", where, 1)
    n_boot = _check_int(n_boot, "n_boot", where, 1)
    if not block_len >= 1:
        raise ValueError(f"{where}: block_len must be >= 1; got {block_len!r}")
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    if method == "stationary":
        starts = rng.integers(0, n, size=(n_boot, n))
        new = rng.random((n_boot, n)) < 1.0 / block_len
        new[:, 0] = True
        pos = np.arange(n)
        begin = np.maximum.accumulate(np.where(new, pos, 0), axis=1)
        first = np.take_along_axis(starts, begin, axis=1)
        return (first + pos - begin) % n
    length = int(round(block_len))
    if method == "moving_block" and length > n:
        raise ValueError(f"{where}: block_len {length} exceeds the series length {n}")
    n_blocks = -(-n // length)
    high = n - length + 1 if method == "moving_block" else n
    starts = rng.integers(0, high, size=(n_boot, n_blocks))
    idx = (starts[:, :, None] + np.arange(length)[None, None, :]).reshape(n_boot, -1)[:, :n]
    return idx % n
