"""The weighted-periodogram long-run covariance and its time positions (vintages.hac).

Sources: numpy.fft (reference library) for the periodogram of consecutive data; the algebraic
identity |sum_t x_t e^{-i lambda p_t}|^2 = sum_{s,t} x_s x_t cos(lambda (p_t - p_s)) (the
periodogram is the Fourier transform of the sample autocovariances) for data with gaps, checked
by brute force; Parzen (1963), Sankhya A 25(4), for the zero-filled ("amplitude-modulated")
series.
"""

from __future__ import annotations

import numpy as np
import pytest

from harness import compare as cp


def _gapped(seed=0):
    rng = np.random.default_rng(seed)
    pos = np.r_[np.arange(8), 30 + np.arange(5), 41 + np.arange(6)]  # three runs of quarters
    return rng.standard_normal((pos.size, 2)), pos


def test_daniell_with_positions_is_the_fourier_transform_of_gap_aware_autocovariances():
    """With gaps, the estimate equals sum_k W(k) G_k over the pairs truly k apart (brute force),
    W(k) = (1/m) sum_j cos(2 pi j k / T), T the number of observations."""
    g, pos = _gapped()
    t, m = g.shape[0], 2
    x = g - g.mean(axis=0)
    ref = np.zeros((2, 2))
    for s in range(t):
        for u in range(t):
            k = pos[u] - pos[s]
            w = np.mean([np.cos(2 * np.pi * j * k / t) for j in range(1, m + 1)])
            ref += w * np.outer(x[u], x[s])
    ref /= t
    got = cp.daniell_covariance(g, m, positions=pos)
    np.testing.assert_allclose(got, ref, rtol=1e-12, atol=1e-14)
    assert np.all(np.linalg.eigvalsh(got) >= -1e-14)  # an average of periodograms: PSD


def test_daniell_with_positions_equals_the_zero_filled_series_fourier_sums():
    """The Fourier sums over positions equal those of the series zero-filled over its span
    (Parzen 1963), evaluated at the frequencies 2 pi j / T of the T observations."""
    g, pos = _gapped(1)
    t, m = g.shape[0], 3
    x = g[:, 0] - g[:, 0].mean()
    span = np.zeros(pos[-1] - pos[0] + 1)
    span[pos - pos[0]] = x
    lam = 2 * np.pi * np.arange(1, m + 1) / t
    w = np.array([np.sum(span * np.exp(-1j * lj * np.arange(span.size))) for lj in lam])
    assert cp.daniell_variance(g[:, 0], m, positions=pos) == pytest.approx(
        np.mean(np.abs(w) ** 2) / t, rel=1e-12)


def test_consecutive_positions_reduce_to_numpy_fft():
    """Positions 0..T-1 (or any shift of them) give the numpy.fft estimate."""
    x = np.random.default_rng(2).standard_normal(40)
    ref = np.mean(np.abs(np.fft.fft(x - x.mean())[1:4]) ** 2) / 40
    assert cp.daniell_variance(x, 3) == pytest.approx(ref, rel=1e-12)
    assert cp.daniell_variance(x, 3, positions=np.arange(40) + 200) == pytest.approx(ref, rel=1e-10)


def test_a_gap_changes_the_estimate():
    """Joining the runs as if consecutive gives a different estimate than the gap-aware one."""
    g, pos = _gapped(3)
    assert cp.daniell_variance(g[:, 0], 2, positions=pos) != pytest.approx(
        cp.daniell_variance(g[:, 0], 2), rel=1e-6)


def test_daniell_refuses_bad_bandwidths_and_positions():
    """m outside [1, (T-1)//2] and non-increasing positions raise ValueError naming the range."""
    with pytest.raises(ValueError, match=r"\[1, 4\]"):
        cp.daniell_variance(np.arange(9.0), 5)
    with pytest.raises(ValueError, match="strictly increasing"):
        cp.daniell_variance(np.arange(9.0), 2, positions=np.r_[0, 2, 1, 3, 4, 5, 6, 7, 8])
