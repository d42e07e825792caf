"""Laws of the Diebold-Mariano test (hypothesis): no p-value without information.

Law 1: for every T in 3..30 and h in 1..12 with h >= T, every method returns NaN with a note
(h-step forecasts overlapping over the whole sample carry no independent information; the
rectangular long-run variance with T - 1 lags of demeaned data is exactly zero, an algebraic
identity: sum over all pairs of x_s x_t = (sum x)^2 = 0).
Law 2: a numerically constant differential (a constant times 1 + noise of relative size at most
1e-9) returns NaN with a note, whatever T, h and the constant's scale.
Law 3: any returned p-value lies in [0, 1]; on Gaussian draws with h < T a p-value is returned
(reference: the definitions of Diebold & Mariano 1995 and Coroneo & Iacone 2020).
"""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from harness.compare import DM_METHODS, diebold_mariano

METHODS = st.sampled_from(sorted(DM_METHODS))


@st.composite
def _cases(draw):
    t = draw(st.integers(3, 30))
    h = draw(st.integers(1, 12))
    kind = draw(st.sampled_from(["integers", "constant", "near_constant", "alternating"]))
    if kind == "integers":
        d = np.array(draw(st.lists(st.integers(-50, 50), min_size=t, max_size=t)), dtype=float)
    else:
        c = draw(st.sampled_from([1e-8, 0.3, 1.0, 7.0, 1e6])) * draw(st.sampled_from([-1.0, 1.0]))
        d = np.full(t, c)
        if kind == "near_constant":
            rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
            d = c * (1.0 + 1e-9 * rng.uniform(-1, 1, t))
        elif kind == "alternating":
            d = c * (1.0 + 0.5 * (-1.0) ** np.arange(t))
    return t, h, kind, d


@settings(max_examples=400, deadline=None)
@given(_cases(), METHODS)
def test_no_finite_pvalue_without_information(case, method):
    """h >= T or a (numerically) constant differential never gives a finite p-value; any p-value is in [0, 1]."""
    t, h, kind, d = case
    res = diebold_mariano(d, np.zeros(t), h, method=method)
    degenerate = h >= t or kind in ("constant", "near_constant") or np.ptp(d) == 0
    if degenerate:
        assert np.isnan(res.pvalue) and np.isnan(res.stat) and res.note, (t, h, kind, res)
    elif np.isfinite(res.pvalue):
        assert 0.0 <= res.pvalue <= 1.0 and not res.note
    else:
        assert res.note  # a NaN always says why


@settings(max_examples=200, deadline=None)
@given(st.integers(3, 30), st.integers(1, 12), st.integers(0, 2**32 - 1), METHODS)
def test_gaussian_differentials_get_a_pvalue_when_h_below_t(t, h, seed, method):
    """On Gaussian draws a p-value in [0, 1] is returned exactly when h < T."""
    d = np.random.default_rng(seed).normal(0.3, 1.0, t)
    res = diebold_mariano(d, np.zeros(t), h, method=method)
    if h >= t:
        assert np.isnan(res.pvalue) and f"h = {h} >= T = {t}" in res.note
    else:
        assert 0.0 <= res.pvalue <= 1.0, (t, h, method, res)
