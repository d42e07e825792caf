"""Tests of the interval score (Gneiting & Raftery 2007, eq. 43) against worked values and scoringrules."""

from __future__ import annotations

import numpy as np
import pytest

from harness import scores as sc


def test_interval_score_worked_example():
    """Width plus 2/alpha times the miss: interval [-1, 1] at 50 % (alpha 0.5), outcomes inside/out.

    Worked by hand from Gneiting & Raftery (2007, eq. 43): y = 0 inside gives the width 2;
    y = 3 above gives 2 + (2 / 0.5) * (3 - 1) = 10; y = -2 below gives 2 + 4 * 1 = 6.
    """
    draws = np.tile([-1.0, 1.0], (3, 1))
    got = sc.interval_score([0.0, 3.0, -2.0], draws, [0.5], method="inverted_cdf")[:, 0]
    np.testing.assert_allclose(got, [2.0, 10.0, 6.0])


def test_interval_score_matches_scoringrules():
    """Equals scoringrules' interval score given the same interval ends (reference library)."""
    sr = pytest.importorskip("scoringrules")
    rng = np.random.default_rng(3)
    x = rng.normal(size=(40, 300))
    y = rng.normal(size=40) * 1.5
    for c in (0.5, 0.8):
        lo, hi = np.quantile(x, [(1 - c) / 2, (1 + c) / 2], axis=1)
        ref = sr.interval_score(y, lo, hi, 1 - c)
        got = sc.interval_score(y, x, [c])[:, 0]
        np.testing.assert_allclose(got, ref, rtol=1e-12)


def test_interval_score_is_proper_for_normal_quantiles():
    """Under N(0,1) outcomes the true central interval has a lower mean score than a too-narrow one.

    Propriety of the interval score (Gneiting & Raftery 2007, Section 6.2): the true quantiles
    minimise its expectation.
    """
    rng = np.random.default_rng(4)
    y = rng.standard_normal(200_000)
    from scipy.special import ndtri

    c = 0.8
    true = ndtri(0.9)
    good = sc.quantiles.interval_score_from_q(y, np.full_like(y, -true), np.full_like(y, true), 1 - c)
    narrow = sc.quantiles.interval_score_from_q(y, np.full_like(y, -0.8 * true),
                                                np.full_like(y, 0.8 * true), 1 - c)
    assert good.mean() < narrow.mean()


def test_interval_score_is_declared_once_with_its_facts():
    """The registry declares interval_50 and interval_80 as losses, ratios to the benchmark, DM-tested."""
    for name in ("interval_50", "interval_80"):
        col = sc.resolve(name)
        assert col is not None and col.is_loss and col.score.versus == "ratio"
        assert "dm" in col.score.tests and "interval" in col.label
    assert [c.name for c in sc.columns() if "interval" in c.name] == ["interval_50", "interval_80"]
